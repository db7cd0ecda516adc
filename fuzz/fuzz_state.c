/*
 * fuzz_state.c — libFuzzer harness: a whole snapshot file through state_load.
 *
 * The input is a snapshot file. Its last four bytes are first overwritten
 * with the right CRC-32 (so that the fuzzer gets past the checksum and
 * reaches the header, the meta JSON, the version and unit-key checks and the
 * ledger section), then it is read by state_load from an in-memory file
 * (memfd) with the layout of the fixed config of fuzz_common.h, once with the
 * default unit key and once with a secret one. A refusal must carry a message.
 */
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/mman.h>
#include <unistd.h>
#include <zlib.h>

#include "fuzz_common.h"
#include "state.h"

static void load_once(const char *path, const struct layout *lay)
{
    struct state_meta meta;
    struct ledger *l = NULL;
    struct err e;
    err_clear(&e);
    int rc = state_load(path, lay, &meta, &l, &e);
    if (rc && !e.msg[0]) {
        fprintf(stderr, "fuzz_state: refused without a message\n");
        abort();
    }
    if (!rc && !l) {
        fprintf(stderr, "fuzz_state: accepted but gave no ledger\n");
        abort();
    }
    ledger_free(l);
}

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    const struct layout *lay = fuzz_layout();
    static struct layout keyed;
    static int fd = -1;
    static char path[64];
    if (fd < 0) {
        keyed = *lay;
        keyed.unit_key = (struct hash_key){UINT64_C(0x0123456789abcdef), UINT64_C(0xfedcba9876543210)};
        if ((fd = memfd_create("fuzz-state", 0)) < 0)
            abort();
        snprintf(path, sizeof path, "/proc/self/fd/%d", fd);
    }
    unsigned char *b = malloc(size ? size : 1);
    if (!b)
        return 0;
    memcpy(b, data, size);
    if (size >= 8) {
        uint32_t crc = (uint32_t)crc32(crc32(0, NULL, 0), b, (uInt)(size - 4));
        memcpy(b + size - 4, &crc, 4);
    }
    if (ftruncate(fd, 0) != 0 || pwrite(fd, b, size, 0) != (ssize_t)size)
        abort();
    free(b);
    load_once(path, lay);
    load_once(path, &keyed);
    return 0;
}
