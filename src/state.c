/*
 * state.c — snapshot files (see state.h). An adapter: file I/O lives here,
 * the ledger's (de)serialization in ledger.c.
 */
#include "state.h"

#include <dirent.h>
#include <errno.h>
#include <fcntl.h>
#include <jansson.h>
#include <stdbool.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <unistd.h>
#include <zlib.h>

#define MAGIC "ABTSTATE"
#define MAX_META 65536

struct out {
    FILE *f;
    uLong crc;
};

static int out_write(void *ctx, const void *p, size_t n)
{
    struct out *o = ctx;
    o->crc = crc32(o->crc, p, (uInt)n);
    /* crc32 takes uInt: feed large blocks in pieces */
    return fwrite(p, 1, n, o->f) == n ? 0 : -1;
}

static int write_blocks(void *ctx, const void *p, size_t n)
{
    const unsigned char *b = p;
    while (n) {
        size_t k = n > (1u << 30) ? (1u << 30) : n;
        if (out_write(ctx, b, k))
            return -1;
        b += k;
        n -= k;
    }
    return 0;
}

/* True when lay hashes unit ids with a key of its own (--unit-key). */
static bool is_keyed(const struct layout *lay)
{
    return lay->unit_key.k0 != HASH_KEY_DEFAULT.k0 || lay->unit_key.k1 != HASH_KEY_DEFAULT.k1;
}

/* The fingerprint of lay's unit key as 16 hex digits: SipHash of a fixed
 * text under the key. It tells keys apart and reveals nothing of the key. */
static void key_fingerprint(const struct layout *lay, char out[24])
{
    static const char text[] = "abtally unit key fingerprint";
    snprintf(out, 24, "%016llx",
             (unsigned long long)siphash24(&lay->unit_key, text, sizeof text - 1));
}

static json_t *meta_json(const struct state_meta *m, const struct layout *lay)
{
    char digest[24];
    snprintf(digest, sizeof digest, "%016llx", (unsigned long long)lay->digest);
    json_t *j = json_pack("{s:s, s:s, s:s, s:s, s:i, s:i, s:I, s:I, s:I}", "experiment",
                          lay->cfg->experiment, "config_digest", digest, "source", m->source,
                          "topic", m->topic, "partition", (int)m->partition, "n_shards",
                          (int)m->n_shards, "offset", (json_int_t)m->offset, "lateness_us",
                          (json_int_t)m->lateness_us, "horizon_us", (json_int_t)m->horizon_us);
    if (j && is_keyed(lay)) {
        char fp[24];
        key_fingerprint(lay, fp);
        if (json_object_set_new(j, "unit_key", json_string(fp))) {
            json_decref(j);
            return NULL;
        }
    }
    return j;
}

int state_save(const char *dir, const char *name, const struct state_meta *meta,
               const struct ledger *l, const struct layout *lay, struct err *e)
{
    char path[4096], tmp[4096];
    if ((size_t)snprintf(path, sizeof path, "%s/%s", dir, name) >= sizeof path ||
        (size_t)snprintf(tmp, sizeof tmp, "%s/.%s.%ld.tmp", dir, name, (long)getpid()) >= sizeof tmp)
        return err_set(e, AB_EINPUT, "state '%s': path too long", dir);
    json_t *mj = meta_json(meta, lay);
    char *mtext = mj ? json_dumps(mj, JSON_COMPACT) : NULL;
    json_decref(mj);
    if (!mtext)
        return err_set(e, AB_EINPUT, "state: out of memory");
    int fd = open(tmp, O_WRONLY | O_CREAT | O_TRUNC | O_CLOEXEC, 0600);
    if (fd < 0) {
        free(mtext);
        return err_set(e, AB_EINPUT, "state '%s': %s", tmp, strerror(errno));
    }
    struct out o = {fdopen(fd, "wb"), crc32(0, NULL, 0)};
    if (!o.f) {
        close(fd);
        unlink(tmp);
        free(mtext);
        return err_set(e, AB_EINPUT, "state '%s': %s", tmp, strerror(errno));
    }
    setvbuf(o.f, NULL, _IOFBF, 1 << 20);
    /* a keyed state is version 2, so that readers of version 1 only (which
     * know no unit key) refuse it rather than misread its hashes */
    uint32_t ver = is_keyed(lay) ? STATE_VERSION : STATE_VERSION_UNKEYED;
    uint32_t mlen = (uint32_t)strlen(mtext);
    int rc = out_write(&o, MAGIC, 8) || out_write(&o, &ver, 4) || out_write(&o, &mlen, 4) ||
             out_write(&o, mtext, mlen) || ledger_save(l, write_blocks, &o);
    free(mtext);
    uint32_t crc = (uint32_t)o.crc;
    if (!rc)
        rc = fwrite(&crc, 1, 4, o.f) != 4;
    if (!rc)
        rc = fflush(o.f) != 0;
    int saved = errno;
    if (!rc && fsync(fileno(o.f)) != 0) {
        rc = 1;
        saved = errno;
    }
    if (fclose(o.f) != 0 && !rc) {
        rc = 1;
        saved = errno;
    }
    if (rc) {
        unlink(tmp);
        return err_set(e, AB_EINPUT, "state '%s': write failed: %s (the previous snapshot is kept)",
                       path, strerror(saved ? saved : EIO));
    }
    if (rename(tmp, path) != 0) {
        saved = errno;
        unlink(tmp);
        return err_set(e, AB_EINPUT, "state '%s': rename failed: %s", path, strerror(saved));
    }
    int dfd = open(dir, O_RDONLY | O_DIRECTORY | O_CLOEXEC);
    if (dfd >= 0) {
        fsync(dfd);
        close(dfd);
    }
    return AB_OK;
}

static int read_all(const char *path, unsigned char **buf, size_t *len, struct err *e)
{
    int fd = open(path, O_RDONLY | O_CLOEXEC);
    if (fd < 0)
        return err_set(e, AB_EINPUT, "state '%s': %s", path, strerror(errno));
    struct stat st;
    if (fstat(fd, &st) != 0 || !S_ISREG(st.st_mode)) {
        close(fd);
        return err_set(e, AB_EINPUT, "state '%s': not a regular file", path);
    }
    size_t n = (size_t)st.st_size;
    unsigned char *b = malloc(n ? n : 1);
    if (!b) {
        close(fd);
        return err_set(e, AB_EINPUT, "state '%s': out of memory (%zu bytes)", path, n);
    }
    size_t got = 0;
    while (got < n) {
        ssize_t k = read(fd, b + got, n - got);
        if (k < 0 && errno == EINTR)
            continue;
        if (k <= 0) {
            free(b);
            close(fd);
            return err_set(e, AB_EINPUT, "state '%s': read failed", path);
        }
        got += (size_t)k;
    }
    close(fd);
    *buf = b;
    *len = n;
    return AB_OK;
}

static int parse_meta(const char *path, uint32_t ver, const char *text, size_t n,
                      const struct layout *lay, struct state_meta *m, struct err *e)
{
    json_error_t je;
    json_t *j = json_loadb(text, n, 0, &je);
    if (!j)
        return err_set(e, AB_EINPUT, "state '%s': header is not JSON", path);
    const char *exp = NULL, *digest = NULL, *source = NULL, *topic = NULL;
    int part = 0, shards = 1;
    json_int_t off = -1, late = 0, hor = 0;
    int bad = json_unpack(j, "{s:s, s:s, s:s, s:s, s:i, s:i, s:I, s:I, s:I}", "experiment", &exp,
                          "config_digest", &digest, "source", &source, "topic", &topic,
                          "partition", &part, "n_shards", &shards, "offset", &off, "lateness_us",
                          &late, "horizon_us", &hor);
    int rc = AB_OK;
    char want[24], fp[24];
    snprintf(want, sizeof want, "%016llx", (unsigned long long)lay->digest);
    key_fingerprint(lay, fp);
    json_t *uk = json_object_get(j, "unit_key");
    const char *have_fp = json_string_value(uk);
    if (bad)
        rc = err_set(e, AB_EINPUT, "state '%s': header lacks a field", path);
    else if (strcmp(exp, lay->cfg->experiment))
        rc = err_set(e, AB_EINPUT, "state '%s': belongs to experiment '%s', not '%s'", path, exp,
                     lay->cfg->experiment);
    else if (strcmp(digest, want))
        rc = err_set(e, AB_EINPUT,
                     "state '%s': made with a different config (arms, window, covariate or metrics "
                     "changed); start over with --reset or use the config it was made with",
                     path);
    else if (uk ? !have_fp || ver < STATE_VERSION : ver >= STATE_VERSION)
        rc = err_set(e, AB_EINPUT, "state '%s': header has a bad unit_key field", path);
    else if (have_fp && !is_keyed(lay))
        rc = err_set(e, AB_EINPUT,
                     "state '%s': made with a secret unit key; give the same --unit-key FILE "
                     "(or start over with --reset)",
                     path);
    else if (!have_fp && is_keyed(lay))
        rc = err_set(e, AB_EINPUT,
                     "state '%s': made without --unit-key; drop --unit-key to read it (or "
                     "start over with --reset)",
                     path);
    else if (have_fp && strcmp(have_fp, fp))
        rc = err_set(e, AB_EINPUT,
                     "state '%s': made with a different unit key (--unit-key); give the key "
                     "file it was made with (or start over with --reset)",
                     path);
    else {
        memset(m, 0, sizeof *m);
        snprintf(m->source, sizeof m->source, "%s", source);
        snprintf(m->topic, sizeof m->topic, "%s", topic);
        m->partition = part;
        m->n_shards = shards;
        m->offset = off;
        m->lateness_us = late;
        m->horizon_us = hor;
    }
    json_decref(j);
    return rc;
}

int state_load(const char *path, const struct layout *lay, struct state_meta *meta,
               struct ledger **out, struct err *e)
{
    unsigned char *b = NULL;
    size_t n = 0;
    *out = NULL;
    int rc = read_all(path, &b, &n, e);
    if (rc)
        return rc;
    uint32_t ver, mlen, crc;
    if (n < 20 || memcmp(b, MAGIC, 8)) {
        free(b);
        return err_set(e, AB_EINPUT, "state '%s': not an abtally snapshot", path);
    }
    memcpy(&crc, b + n - 4, 4);
    uLong c = crc32(0, NULL, 0);
    for (size_t i = 0; i < n - 4; i += 1u << 30)
        c = crc32(c, b + i, (uInt)((n - 4 - i) < (1u << 30) ? n - 4 - i : (1u << 30)));
    memcpy(&ver, b + 8, 4);
    memcpy(&mlen, b + 12, 4);
    if ((uint32_t)c != crc)
        rc = err_set(e, AB_EINPUT,
                     "state '%s': checksum mismatch (truncated or corrupted); restore a backup or "
                     "start over with --reset",
                     path);
    else if (ver < STATE_VERSION_UNKEYED || ver > STATE_VERSION)
        rc = err_set(e, AB_EINPUT, "state '%s': version %u, this abtally reads versions %d to %d",
                     path, ver, STATE_VERSION_UNKEYED, STATE_VERSION);
    else if (mlen > MAX_META || 16 + (size_t)mlen + 4 > n)
        rc = err_set(e, AB_EINPUT, "state '%s': header length out of range", path);
    else
        rc = parse_meta(path, ver, (const char *)b + 16, mlen, lay, meta, e);
    if (!rc) {
        struct ledger *l = ledger_load(lay, b + 16 + mlen, n - 20 - mlen, e);
        if (!l) {
            char why[sizeof e->msg];
            snprintf(why, sizeof why, "%s", e->msg);
            rc = err_set(e, AB_EINPUT, "state '%s': %s", path, why);
        }
        *out = l;
    }
    free(b);
    return rc;
}

static int by_name(const void *a, const void *b)
{
    return strcmp(*(char *const *)a, *(char *const *)b);
}

int state_list(const char *dir, char ***paths, size_t *n, struct err *e)
{
    *paths = NULL;
    *n = 0;
    DIR *d = opendir(dir);
    if (!d)
        return err_set(e, AB_EINPUT, "state '%s': %s", dir, strerror(errno));
    struct dirent *de;
    size_t cap = 0;
    size_t sl = strlen(STATE_SUFFIX);
    while ((de = readdir(d))) {
        size_t l = strlen(de->d_name);
        if (de->d_name[0] == '.' || l <= sl || strcmp(de->d_name + l - sl, STATE_SUFFIX))
            continue;
        if (*n == cap) {
            cap = cap ? cap * 2 : 16;
            char **np = realloc(*paths, cap * sizeof *np);
            if (!np)
                break;
            *paths = np;
        }
        size_t pl = strlen(dir) + l + 2;
        if (!((*paths)[*n] = malloc(pl)))
            break;
        snprintf((*paths)[*n], pl, "%s/%s", dir, de->d_name);
        (*n)++;
    }
    closedir(d);
    if (*n)
        qsort(*paths, *n, sizeof **paths, by_name);
    return AB_OK;
}

void state_list_free(char **paths, size_t n)
{
    for (size_t i = 0; i < n; i++)
        free(paths[i]);
    free(paths);
}
