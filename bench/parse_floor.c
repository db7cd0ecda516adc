/*
 * parse_floor.c — the parse-only floor of `make bench`: reads the files with
 * the replay's own line reader (source.h) and decodes every line with the
 * replay's decoder (event.h), nothing else. Whatever replay does beyond this
 * (the join, the tallies, the records) is the difference between the two.
 *
 * usage: parse_floor [--ledger CONFIG] FILE...
 *
 * Prints one line: lines accepted slow bytes seconds
 *   slow     lines the fast decoder handed to the reference decoder
 *   bytes    of the lines read, newlines included (decompressed)
 *   seconds  wall clock from the first read to the last decode
 *
 * With --ledger, every event also goes through a ledger built from CONFIG
 * (the join alone, no engine, no output), and a second line follows:
 *   ledger units records bytes_records bytes_index bytes_pending bytes_ids bytes_other
 * (units: exposed units counted in the tallies, every arm; bytes: capacity
 * allocated, ledger_memory_parts).
 *
 * With --ledger CONFIG --decoded-first, the files are decoded into memory
 * first, untimed, and the seconds are those of the ledger alone: every event
 * rebuilt from memory and applied, then ledger_finish. Replay's time beyond
 * the floor cannot be less than this (it also has the engine and the output),
 * so when it exceeds the floor's own time, replay cannot reach half the
 * floor's rate with this ledger, however the decoding is done.
 */
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "config.h"
#include "err.h"
#include "event.h"
#include "event_ref.h"
#include "ledger.h"
#include "source.h"
#include "timefmt.h"
#include "../tests/bytebuf.h"

static int fail(const char *what, const char *msg)
{
    fprintf(stderr, "parse_floor: %s: %s\n", what, msg);
    return 1;
}

/* Decoded events kept in memory for --decoded-first, one after another:
 * a header, then each string as a 32-bit length (NONE: absent) and its
 * bytes: unit, id, exp, arm, metric, then the attrs' keys and values. A
 * rejected line is a header whose kind is 0 and whose n_attrs is the reason. */
struct held {
    int64_t time_us;
    double value;
    uint8_t kind, n_attrs;
};
#define NONE UINT32_MAX

static int store_str(struct byte_buf *st, struct str s)
{
    uint32_t n = s.p ? s.n : NONE;
    return byte_buf_write(st, &n, sizeof n) || (s.p && byte_buf_write(st, s.p, s.n));
}

static int store_event(struct byte_buf *st, enum reject r, const struct event *ev)
{
    struct held h = {0, 0, 0, (uint8_t)r};
    if (r != REJ_NONE)
        return byte_buf_write(st, &h, sizeof h);
    h = (struct held){ev->time_us, ev->value, (uint8_t)ev->kind, (uint8_t)ev->n_attrs};
    if (byte_buf_write(st, &h, sizeof h) || store_str(st, ev->unit) || store_str(st, ev->id) ||
        store_str(st, ev->exp) || store_str(st, ev->arm) || store_str(st, ev->metric))
        return -1;
    for (int i = 0; i < ev->n_attrs; i++)
        if (store_str(st, ev->attrs[i].key) || store_str(st, ev->attrs[i].value))
            return -1;
    return 0;
}

static struct str take_str(const char **at)
{
    uint32_t n;
    memcpy(&n, *at, sizeof n);
    *at += sizeof n;
    if (n == NONE)
        return (struct str){NULL, 0};
    struct str s = {*at, n};
    *at += n;
    return s;
}

/* Applies the stored events to l, in order (never inlined, so that a
 * profiler can count it alone: valgrind --toggle-collect=apply_stored). */
static __attribute__((noinline)) int apply_stored(struct ledger *l, const struct byte_buf *st)
{
    for (const char *at = st->p, *end = st->p + st->n; at < end;) {
        struct held h;
        memcpy(&h, at, sizeof h);
        at += sizeof h;
        if (!h.kind) {
            ledger_reject(l, (enum reject)h.n_attrs);
            continue;
        }
        struct event ev = {.kind = (enum ev_kind)h.kind, .time_us = h.time_us, .value = h.value,
                           .n_attrs = h.n_attrs};
        ev.unit = take_str(&at);
        ev.id = take_str(&at);
        ev.exp = take_str(&at);
        ev.arm = take_str(&at);
        ev.metric = take_str(&at);
        for (int i = 0; i < h.n_attrs; i++) {
            ev.attrs[i].key = take_str(&at);
            ev.attrs[i].value = take_str(&at);
        }
        if (ledger_apply(l, &ev) < 0)
            return -1;
    }
    return 0;
}

int main(int argc, char **argv)
{
    int first = 1;
    const char *config_path = NULL;
    bool decoded_first = false;
    if (argc > 2 && !strcmp(argv[1], "--ledger")) {
        config_path = argv[2];
        first = 3;
        if (argc > 3 && !strcmp(argv[3], "--decoded-first")) {
            decoded_first = true;
            first = 4;
        }
    }
    if (first >= argc) {
        fprintf(stderr, "usage: parse_floor [--ledger CONFIG [--decoded-first]] FILE...\n");
        return 2;
    }
    struct byte_buf st = {NULL, 0, 0};
    struct err e;
    err_clear(&e);
    struct config cfg;
    struct layout lay;
    struct ledger *l = NULL;
    if (config_path) {
        if (config_load(config_path, &cfg, &e) ||
            layout_init(&lay, &cfg, 3600 * INT64_C(1000000), 24 * 3600 * INT64_C(1000000), &e))
            return fail(config_path, e.msg);
        if (!(l = ledger_new(&lay)))
            return fail("ledger", "out of memory");
    }
    struct decoder *d = decoder_new();
    if (!d)
        return fail("decoder", "out of memory");
    unsigned long long lines = 0, accepted = 0, bytes = 0;
    double sum = 0; /* keeps the decoding from being optimised away */
    double t0 = time_mono_s();
    for (int i = first; i < argc; i++) {
        struct source *s = source_open(argv[i], &e);
        if (!s)
            return fail(argv[i], e.msg);
        const char *line;
        size_t len;
        bool too_long;
        int got;
        while ((got = source_next(s, &line, &len, &too_long, &e)) == 1) {
            struct event ev;
            lines++;
            bytes += len + 1;
            enum reject r = too_long ? REJ_TOO_LONG : decoder_decode(d, line, len, &ev);
            if (r == REJ_NONE) {
                accepted++;
                sum += ev.value + (double)ev.unit.n;
            }
            if (decoded_first) {
                if (store_event(&st, r, &ev) < 0)
                    return fail("memory", "out of memory");
            } else if (l && r == REJ_NONE) {
                if (ledger_apply(l, &ev) < 0)
                    return fail("ledger", "out of memory");
            } else if (l) {
                ledger_reject(l, r);
            }
        }
        source_close(s);
        if (got < 0)
            return fail(argv[i], e.msg);
    }
    if (decoded_first) {
        t0 = time_mono_s();
        if (apply_stored(l, &st) < 0)
            return fail("ledger", "out of memory");
        free(st.p);
    }
    if (l)
        ledger_finish(l);
    double t = time_mono_s() - t0;
    printf("%llu %llu %llu %llu %.6f\n", lines, accepted, (unsigned long long)decoder_slow_lines(d), bytes,
           t);
    if (l) {
        struct ledger_mem m;
        ledger_memory_parts(l, &m);
        unsigned long long units = 0;
        for (int a = 0; a < cfg.n_arms; a++)
            units += ledger_units(l, a);
        printf("ledger %llu %zu %zu %zu %zu %zu %zu\n", units, m.n_records, m.records, m.index, m.pending,
               m.ids, m.other);
        ledger_free(l);
        layout_release(&lay);
        config_release(&cfg);
    }
    decoder_free(d);
    return sum == -1.0; /* never */
}
