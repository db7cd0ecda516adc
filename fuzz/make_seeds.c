/*
 * make_seeds.c — writes the seed corpus of the fuzz harnesses into
 * fixtures/fuzz/ (run by `make fuzz-seeds`; the output is committed).
 *
 *   decoder/   event lines: every kind, every field form and every rejection
 *              reason (one file each), and a small realistic multi-line log
 *   config/    the harnesses' fixed config and variants of every section
 *   snapshot/  ledger sections (what ledger_load reads) of ledgers built from
 *              the decoder seeds with the fixed config: settled and
 *              mid-stream (with pending outcomes, ids and multi-arm units)
 *   state/     whole snapshot files (state_save) of the same ledgers, with
 *              the default and with a secret unit key
 *
 * All data is invented. Built with the normal compiler against libcore.
 */
#include <errno.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>

#include "event.h"
#include "fuzz_common.h"
#include "ledger.h"
#include "state.h"

static const char *outdir;

static void put_file(const char *sub, const char *name, const void *p, size_t n)
{
    char path[4096];
    snprintf(path, sizeof path, "%s/%s", outdir, sub);
    if (mkdir(path, 0755) != 0 && errno != EEXIST) {
        perror(path);
        exit(1);
    }
    snprintf(path, sizeof path, "%s/%s/%s", outdir, sub, name);
    FILE *f = fopen(path, "wb");
    if (!f || fwrite(p, 1, n, f) != n || fclose(f)) {
        perror(path);
        exit(1);
    }
}

/* One seed per case: name and line (without newline). */
static const char *const lines[][2] = {
    {"assign", "{\"kind\":\"assign\",\"time\":\"2026-11-03T10:15:02.123Z\",\"unit\":\"u00012345\",\"exp\":\"lamp-shop-banner\",\"arm\":\"warm\",\"id\":\"a-1\"}"},
    {"assign-attrs", "{\"kind\":\"assign\",\"time\":\"2026-11-03T10:15:02+02:00\",\"unit\":\"u7\",\"exp\":\"lamp-shop-banner\",\"arm\":\"holdout\",\"attrs\":{\"platform\":\"ios\",\"country\":\"NZ\"}}"},
    {"assign-epoch", "{\"kind\":\"assign\",\"time\":1794096000000,\"unit\":\"u8\",\"exp\":\"lamp-shop-banner\",\"arm\":\"cool\"}"},
    {"assign-other-exp", "{\"kind\":\"assign\",\"time\":\"2026-11-03T10:15:02Z\",\"unit\":\"u9\",\"exp\":\"other-test\",\"arm\":\"x\"}"},
    {"assign-outside", "{\"kind\":\"assign\",\"time\":\"2026-12-24T00:00:00Z\",\"unit\":\"u10\",\"exp\":\"lamp-shop-banner\",\"arm\":\"warm\"}"},
    {"outcome", "{\"kind\":\"outcome\",\"time\":\"2026-11-03T10:21:40Z\",\"unit\":\"u00012345\",\"metric\":\"basket\",\"value\":42.5,\"id\":\"o-7\"}"},
    {"outcome-novalue", "{\"kind\":\"outcome\",\"time\":\"2026-11-03T11:00:00.5Z\",\"unit\":\"u7\",\"metric\":\"visit\"}"},
    {"outcome-ignored", "{\"kind\":\"outcome\",\"time\":\"2026-11-03T11:00:00Z\",\"unit\":\"u7\",\"metric\":\"scroll\",\"value\":3}"},
    {"outcome-extremes", "{\"kind\":\"outcome\",\"time\":\"2026-11-03T11:00:00Z\",\"unit\":\"u7\",\"metric\":\"basket\",\"value\":1e308}"},
    {"outcome-negzero", "{\"kind\":\"outcome\",\"time\":\"2026-11-03T11:00:00Z\",\"unit\":\"u7\",\"metric\":\"page_error\",\"value\":-0}"},
    {"outcome-leap", "{\"kind\":\"outcome\",\"time\":\"2026-12-31T23:59:60Z\",\"unit\":\"u7\",\"metric\":\"basket\",\"value\":-2.5e-3}"},
    {"outcome-escapes", "{\"kind\":\"outcome\",\"time\":\"2026-11-04T00:00:00Z\",\"unit\":\"u\\u00e9\\ud83d\\ude00\\n\",\"metric\":\"basket\",\"value\":1}"},
    {"not-json-syntax", "{broken"},
    {"not-json-array", "[1,2,3]"},
    {"not-json-dupkey", "{\"kind\":\"assign\",\"kind\":\"outcome\"}"},
    {"not-json-utf8", "{\"kind\":\"outcome\",\"time\":\"2026-11-03T10:21:40Z\",\"unit\":\"u\xff\xfe\",\"metric\":\"basket\"}"},
    {"not-json-nested", "[[[[[[[[[[[[[[[[[[[[[[[[[[[[[[[[[[[[[[[[[[[[[[[[[[[[[[[[[[[[[[[["},
    {"missing-unit", "{\"kind\":\"outcome\",\"time\":\"2026-11-03T10:21:40Z\",\"metric\":\"basket\"}"},
    {"missing-empty", "{\"kind\":\"assign\",\"time\":\"2026-11-03T10:21:40Z\",\"unit\":\"\",\"exp\":\"e\",\"arm\":\"a\"}"},
    {"bad-type", "{\"kind\":\"outcome\",\"time\":\"2026-11-03T10:21:40Z\",\"unit\":7,\"metric\":\"basket\"}"},
    {"bad-type-attrs", "{\"kind\":\"assign\",\"time\":\"2026-11-03T10:15:02Z\",\"unit\":\"u1\",\"exp\":\"lamp-shop-banner\",\"arm\":\"warm\",\"attrs\":{\"n\":1}}"},
    {"unknown-kind", "{\"kind\":\"click\",\"time\":\"2026-11-03T10:21:40Z\",\"unit\":\"u1\"}"},
    {"bad-time", "{\"kind\":\"outcome\",\"time\":\"2026-13-03T10:21:40Z\",\"unit\":\"u1\",\"metric\":\"basket\"}"},
    {"bad-time-epoch", "{\"kind\":\"outcome\",\"time\":1e308,\"unit\":\"u1\",\"metric\":\"basket\"}"},
    {"not-finite", "{\"kind\":\"outcome\",\"time\":\"2026-11-03T10:21:40Z\",\"unit\":\"u1\",\"metric\":\"basket\",\"value\":1e400}"},
    {"unknown-arm", "{\"kind\":\"assign\",\"time\":\"2026-11-03T10:15:02Z\",\"unit\":\"u1\",\"exp\":\"lamp-shop-banner\",\"arm\":\"purple\"}"},
    {"empty", "  \t "},
};

/* A small realistic log: units over several days, pre-period outcomes,
 * duplicates, a multi-arm unit, a late assignment, rejects. */
static char *make_log(int n_units, int days, int with_junk)
{
    size_t cap = 1 << 20, len = 0;
    char *s = malloc(cap);
    if (!s)
        exit(1);
    const char *arms[] = {"holdout", "holdout", "warm", "cool"};
    unsigned seed = 12345;
#define RND() (seed = seed * 1103515245u + 12345u, (seed >> 8) & 0xffff)
#define ADD(...) len += (size_t)snprintf(s + len, cap - len, __VA_ARGS__)
    for (int d = 0; d < days; d++)
        for (int u = 0; u < n_units && len < cap - 4096; u++) {
            int h = (int)(RND() % 24);
            int m = (int)(RND() % 60);
            if (d == 1 && u % 3 == 0)
                ADD("{\"kind\":\"assign\",\"time\":\"2026-11-%02dT%02d:%02d:00Z\",\"unit\":\"u%d\",\"exp\":\"lamp-shop-banner\",\"arm\":\"%s\",\"id\":\"a%d\"%s}\n",
                    2 + d, h, m, u, arms[(u / 3) % 4], u,
                    u % 2 ? ",\"attrs\":{\"platform\":\"web\"}" : "");
            if (u == 6 && d == 2)
                ADD("{\"kind\":\"assign\",\"time\":\"2026-11-%02dT%02d:%02d:00Z\",\"unit\":\"u%d\",\"exp\":\"lamp-shop-banner\",\"arm\":\"cool\"}\n",
                    2 + d, h, m, u);
            const char *metric = RND() % 2 ? "basket" : "visit";
            int value = (int)(RND() % 40);
            ADD("{\"kind\":\"outcome\",\"time\":\"2026-11-%02dT%02d:%02d:30Z\",\"unit\":\"u%d\",\"metric\":\"%s\",\"value\":%d.25,\"id\":\"o%d-%d\"}\n",
                1 + d, h, m, u, metric, value, d, u);
            if (u % 7 == 0) /* a duplicate */
                ADD("{\"kind\":\"outcome\",\"time\":\"2026-11-%02dT%02d:%02d:30Z\",\"unit\":\"u%d\",\"metric\":\"basket\",\"value\":1,\"id\":\"o%d-%d\"}\n",
                    1 + d, h, m, u, d, u);
            if (u % 11 == 0)
                ADD("{\"kind\":\"outcome\",\"time\":%lld,\"unit\":\"u%d\",\"metric\":\"page_error\"}\n",
                    (long long)(1793577600000LL + (long long)d * 86400000LL + h * 3600000LL), u);
            if (with_junk && u % 13 == 0)
                ADD("{\"kind\":\"outcome\",\"unit\":\"u%d\"}\nnot json at all\n\n", u);
        }
#undef ADD
#undef RND
    s[len] = '\0';
    return s;
}

/* Feeds a log through a decoder into ledger l. */
static void feed(struct ledger *l, const char *log)
{
    struct decoder *d = decoder_new();
    const char *p = log;
    while (*p) {
        const char *nl = strchr(p, '\n');
        size_t n = nl ? (size_t)(nl - p) : strlen(p);
        struct event ev;
        enum reject r = decoder_decode(d, p, n, &ev);
        if (r)
            ledger_reject(l, r);
        else
            ledger_apply(l, &ev);
        p += n + (nl ? 1 : 0);
    }
    decoder_free(d);
}

static void save_section(const struct ledger *l, const char *name)
{
    struct byte_buf b = {0};
    if (ledger_save(l, byte_buf_write, &b)) {
        fprintf(stderr, "make_seeds: ledger_save failed\n");
        exit(1);
    }
    put_file("snapshot", name, b.p, b.n);
    free(b.p);
}

static void save_state(const struct ledger *l, const struct layout *lay, const char *name)
{
    char dir[4096];
    snprintf(dir, sizeof dir, "%s/state", outdir);
    mkdir(dir, 0755);
    struct state_meta meta = {.partition = 2, .n_shards = 1, .offset = 1234, .lateness_us = 3600000000LL,
                              .horizon_us = 86400000000LL};
    snprintf(meta.source, sizeof meta.source, "kafka");
    snprintf(meta.topic, sizeof meta.topic, "events");
    struct err e;
    err_clear(&e);
    if (state_save(dir, name, &meta, l, lay, &e)) {
        fprintf(stderr, "make_seeds: %s\n", e.msg);
        exit(1);
    }
}

int main(int argc, char **argv)
{
    if (argc != 2) {
        fprintf(stderr, "usage: make_seeds OUTDIR\n");
        return 2;
    }
    outdir = argv[1];
    mkdir(outdir, 0755);
    const struct layout *lay = fuzz_layout();

    /* decoder: one line per case, and logs */
    for (size_t i = 0; i < sizeof lines / sizeof *lines; i++) {
        char name[64];
        snprintf(name, sizeof name, "%02zu-%s", i, lines[i][0]);
        put_file("decoder", name, lines[i][1], strlen(lines[i][1]));
    }
    char *small = make_log(12, 4, 1);
    put_file("decoder", "90-log-small", small, strlen(small));
    char *mid = make_log(40, 6, 1);

    /* config */
    put_file("config", "00-fixed.json", FUZZ_CONFIG, sizeof FUZZ_CONFIG - 1);

    /* snapshot + state: mid-stream (pending outcomes, ids) and settled */
    struct ledger *l = ledger_new(lay);
    feed(l, small);
    save_section(l, "00-small-open");
    save_state(l, lay, "00-small-open.abstate");
    ledger_finish(l);
    save_section(l, "01-small-settled");
    ledger_free(l);
    l = ledger_new(lay);
    feed(l, mid);
    save_section(l, "02-mid-open");
    struct layout keyed = *lay;
    keyed.unit_key = (struct hash_key){UINT64_C(0x0123456789abcdef), UINT64_C(0xfedcba9876543210)};
    struct ledger *k = ledger_new(&keyed);
    feed(k, small);
    save_state(k, &keyed, "01-small-keyed.abstate");
    ledger_free(k);
    ledger_finish(l);
    save_section(l, "03-mid-settled");
    save_state(l, lay, "02-mid-settled.abstate");
    ledger_free(l);
    l = ledger_new(lay);
    save_section(l, "04-empty");
    ledger_free(l);
    free(small);
    free(mid);
    return 0;
}
