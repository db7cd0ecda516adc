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
 */
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#include "config.h"
#include "err.h"
#include "event.h"
#include "event_ref.h"
#include "ledger.h"
#include "source.h"
#include "timefmt.h"

static int fail(const char *what, const char *msg)
{
    fprintf(stderr, "parse_floor: %s: %s\n", what, msg);
    return 1;
}

int main(int argc, char **argv)
{
    int first = 1;
    const char *config_path = NULL;
    if (argc > 2 && !strcmp(argv[1], "--ledger")) {
        config_path = argv[2];
        first = 3;
    }
    if (first >= argc) {
        fprintf(stderr, "usage: parse_floor [--ledger CONFIG] FILE...\n");
        return 2;
    }
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
                if (l && ledger_apply(l, &ev) < 0)
                    return fail("ledger", "out of memory");
            } else if (l) {
                ledger_reject(l, r);
            }
        }
        source_close(s);
        if (got < 0)
            return fail(argv[i], e.msg);
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
