/*
 * fuzz_decoder.c — libFuzzer harness: the event decoder and the join.
 *
 * The input is split into lines; each goes through decoder_decode (event.h),
 * exactly as engine_line does, and then into a ledger made from the fixed
 * config of fuzz_common.h (rejections counted, events applied), so the join
 * rules, the de-duplication table, the pending lists and the sweep are
 * fuzzed too. At the end the ledger is settled, every unit is visited, and
 * the state is saved and loaded back (ledger_save → ledger_load must accept
 * what it wrote). Invariants checked: lines = accepted + rejected, and the
 * reloaded ledger has the same counters.
 *
 * When the reference decoder (event_ref.h) is built in, every line is also
 * decoded by it and the two must agree on the verdict (accepted or the
 * rejection reason) and, for accepted lines, on every field.
 */
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "event.h"
#include "fuzz_common.h"
#include "ledger.h"

#if defined(__has_include)
#if __has_include("event_ref.h") && !defined(FUZZ_NO_REF)
#include "event_ref.h"
#define FUZZ_HAVE_REF 1
#endif
#endif

static void check(int ok, const char *what)
{
    if (!ok) {
        fprintf(stderr, "fuzz_decoder: invariant broken: %s\n", what);
        abort();
    }
}

#ifdef FUZZ_HAVE_REF
static int same_str(struct str a, struct str b)
{
    return (a.p == NULL) == (b.p == NULL) && a.n == b.n && (a.n == 0 || memcmp(a.p, b.p, a.n) == 0);
}

static void compare(const struct event *a, const struct event *b)
{
    check(a->kind == b->kind, "kind differs from the reference decoder");
    check(a->time_us == b->time_us, "time differs from the reference decoder");
    check(same_str(a->unit, b->unit), "unit differs from the reference decoder");
    check(same_str(a->id, b->id), "id differs from the reference decoder");
    check(same_str(a->exp, b->exp) && same_str(a->arm, b->arm), "exp/arm differ from the reference decoder");
    check(same_str(a->metric, b->metric), "metric differs from the reference decoder");
    check(memcmp(&a->value, &b->value, sizeof a->value) == 0, "value differs from the reference decoder");
    check(a->n_attrs == b->n_attrs, "attrs count differs from the reference decoder");
}
#endif

static void count_unit(void *ctx, uint64_t key, int arm, const double *values)
{
    (void)key;
    (void)values;
    check(arm >= 0 && arm < CONFIG_MAX_ARMS, "a tallied unit has no arm");
    (*(size_t *)ctx)++;
}

static uint64_t rejected(const struct counters *c)
{
    uint64_t n = 0;
    for (int r = 0; r < REJ_COUNT; r++)
        n += c->rejected[r];
    return n;
}

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    const struct layout *lay = fuzz_layout();
    static struct decoder *dec;
    if (!dec && !(dec = decoder_new()))
        abort();
#ifdef FUZZ_HAVE_REF
    static struct decoder_ref *ref;
    if (!ref && !(ref = decoder_jansson_new()))
        abort();
#endif
    struct ledger *l = ledger_new(lay);
    if (!l)
        return 0;
    const char *p = (const char *)data, *end = p + size;
    while (p < end) {
        const char *nl = memchr(p, '\n', (size_t)(end - p));
        size_t len = nl ? (size_t)(nl - p) : (size_t)(end - p);
        /* the decoder reads exactly len bytes: give it a copy without slack
         * so that AddressSanitizer sees any read past the line */
        char *line = malloc(len ? len : 1);
        if (!line)
            break;
        memcpy(line, p, len);
        struct event ev;
        enum reject r = decoder_decode(dec, line, len, &ev);
#ifdef FUZZ_HAVE_REF
        struct event rev;
        enum reject rr = decoder_jansson_decode(ref, line, len, &rev);
        if (r != rr)
            fprintf(stderr, "fuzz_decoder: decoder says %s, reference says %s\n", reject_name(r),
                    reject_name(rr));
        check(r == rr, "verdict differs from the reference decoder");
        if (r == REJ_NONE)
            compare(&ev, &rev);
#endif
        check(r >= 0 && r < REJ_COUNT, "reason out of range");
        if (r != REJ_NONE) {
            ledger_reject(l, r);
        } else {
            check(ev.unit.p && ev.unit.n > 0, "an accepted event has no unit");
            check(ev.kind == EV_ASSIGN || ev.kind == EV_OUTCOME, "an accepted event has no kind");
            int rc = ledger_apply(l, &ev);
            check(rc == REJ_NONE || rc == REJ_UNKNOWN_ARM || rc == -1, "ledger_apply result");
        }
        free(line);
        p += len + 1;
    }
    const struct counters *c = ledger_counters(l);
    check(c->lines == c->accepted + rejected(c), "lines != accepted + rejected");
    ledger_finish(l);
    size_t units = 0;
    ledger_each_unit(l, count_unit, &units);

    struct byte_buf b = {0};
    if (ledger_save(l, byte_buf_write, &b) == 0) {
        struct err e;
        err_clear(&e);
        struct ledger *back = ledger_load(lay, b.p, b.n, &e);
        if (!back)
            fprintf(stderr, "fuzz_decoder: ledger_load refused ledger_save's output: %s\n", e.msg);
        check(back != NULL, "a saved ledger does not load");
        check(memcmp(ledger_counters(back), c, sizeof *c) == 0, "reloaded counters differ");
        size_t units2 = 0;
        ledger_each_unit(back, count_unit, &units2);
        check(units == units2, "reloaded unit count differs");
        ledger_free(back);
    }
    free(b.p);
    ledger_free(l);
    return 0;
}
