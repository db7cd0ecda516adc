/*
 * fuzz_snapshot.c — libFuzzer harness: the ledger section of a snapshot.
 *
 * The input is the bytes after a snapshot's header (what state_load hands to
 * ledger_load once the CRC and the meta have been checked), read against the
 * layout of the fixed config of fuzz_common.h. ledger_load must refuse
 * malformed bytes with a message and never crash; a ledger it accepts must
 * be usable like any other: events applied to it, settled, every unit
 * visited, saved again and loaded again. Seeds come from real states
 * (`replay --save-state`), cut by tests/fuzz-seeds.sh.
 */
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "event.h"
#include "fuzz_common.h"
#include "ledger.h"

static void visit(void *ctx, uint64_t key, int arm, const double *values)
{
    (void)key;
    (void)values;
    if (arm < 0 || arm >= fuzz_cfg.n_arms) {
        fprintf(stderr, "fuzz_snapshot: a loaded unit has arm %d\n", arm);
        abort();
    }
    (*(size_t *)ctx)++;
}

/* A few events applied to a loaded ledger: an assignment, outcomes, a
 * duplicate, reaching the units, ids and pending lists it brought along. */
static void apply_some(struct ledger *l)
{
    static const char *units[] = {"u1", "u2", "u3"};
    for (int i = 0; i < 3; i++) {
        struct event ev;
        memset(&ev, 0, sizeof ev);
        ev.kind = EV_ASSIGN;
        ev.time_us = INT64_C(1794096000000000) + i * INT64_C(3600000000); /* 2026-11-13 */
        ev.unit = (struct str){units[i], 2};
        ev.exp = (struct str){"lamp-shop-banner", 16};
        ev.arm = (struct str){i ? "warm" : "holdout", i ? 4u : 7u};
        ledger_apply(l, &ev);
        memset(&ev, 0, sizeof ev);
        ev.kind = EV_OUTCOME;
        ev.time_us = INT64_C(1794099600000000) + i * INT64_C(3600000000);
        ev.unit = (struct str){units[i], 2};
        ev.metric = (struct str){"basket", 6};
        ev.id = (struct str){"o-1", 3};
        ev.value = 12.5;
        ledger_apply(l, &ev);
        ledger_apply(l, &ev);
    }
}

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    const struct layout *lay = fuzz_layout();
    unsigned char *copy = malloc(size ? size : 1);
    if (!copy)
        return 0;
    memcpy(copy, data, size);
    struct err e;
    err_clear(&e);
    struct ledger *l = ledger_load(lay, copy, size, &e);
    free(copy);
    if (!l) {
        if (!e.msg[0]) {
            fprintf(stderr, "fuzz_snapshot: refused without a message\n");
            abort();
        }
        return 0;
    }
    size_t n = 0;
    ledger_each_unit(l, visit, &n);
    (void)ledger_memory(l);
    apply_some(l);
    ledger_finish(l);
    n = 0;
    ledger_each_unit(l, visit, &n);
    struct byte_buf b = {0};
    if (ledger_save(l, byte_buf_write, &b) == 0) {
        struct ledger *back = ledger_load(lay, b.p, b.n, &e);
        if (!back) {
            fprintf(stderr, "fuzz_snapshot: ledger_load refused ledger_save's output: %s\n", e.msg);
            abort();
        }
        ledger_free(back);
    }
    free(b.p);
    ledger_free(l);
    return 0;
}
