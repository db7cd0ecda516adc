/*
 * test_ledger.c — one test per join rule of DESIGN.md, and the incremental
 * tallies against a naive two-pass recomputation.
 *
 * Expected values are worked out by hand from the rules in DESIGN.md ("Join
 * rules"); each test says how. The two-pass check recomputes means and
 * variances from the per-unit values in long double (the textbook two-pass
 * formula, which shares no code with the Welford updates).
 */
#include <gsl/gsl_errno.h>
#include <gsl/gsl_rng.h>
#include <stdlib.h>
#include <string.h>

#include "bytebuf.h"
#include "helpers.h"
#include "config.h"
#include "event.h"
#include "ledger.h"
#include "report.h"
#include "timefmt.h"

static const char CFG[] =
    "{\"experiment\":\"bakery-banner\","
    " \"arms\":[{\"name\":\"control\",\"weight\":1},{\"name\":\"treatment\",\"weight\":1}],"
    " \"window\":{\"start\":\"2026-11-02T00:00:00Z\",\"end\":\"2026-11-30T00:00:00Z\"},"
    " \"metrics\":["
    "  {\"name\":\"spend\",\"type\":\"mean\",\"event\":\"spend\",\"attribution_hours\":24},"
    "  {\"name\":\"bought\",\"type\":\"binary\",\"event\":\"spend\"},"
    "  {\"name\":\"spend_per_visit\",\"type\":\"ratio\",\"numerator\":\"spend\",\"denominator\":\"visit\"},"
    "  {\"name\":\"spend_capped\",\"type\":\"mean\",\"event\":\"spend\",\"cap\":10}],"
    " \"covariate\":{\"pre_days\":7}}";

enum { M_SPEND, M_BOUGHT, M_RATIO, M_CAPPED };
enum { CTL, TRT };

struct fx {
    struct config cfg;
    struct layout lay;
    struct decoder *dec;
    struct ledger *l;
};

static int setup(void **state)
{
    struct fx *f = calloc(1, sizeof *f);
    struct err e;
    assert_int_equal(config_parse(CFG, strlen(CFG), "test", &f->cfg, &e), 0);
    assert_int_equal(layout_init(&f->lay, &f->cfg, US_PER_HOUR, US_PER_DAY, &e), 0);
    f->dec = decoder_new();
    f->l = ledger_new(&f->lay);
    *state = f;
    return 0;
}

static int teardown(void **state)
{
    struct fx *f = *state;
    ledger_free(f->l);
    decoder_free(f->dec);
    layout_release(&f->lay);
    config_release(&f->cfg);
    free(f);
    return 0;
}

/* Feeds one event line; asserts it decodes. */
static int feed(struct fx *f, const char *line)
{
    struct event ev;
    enum reject r = decoder_decode(f->dec, line, strlen(line), &ev);
    if (r != REJ_NONE)
        fail_msg("line did not decode (%s): %s", reject_name(r), line);
    return ledger_apply(f->l, &ev);
}

/* Feeds n event lines in order; asserts each decodes and applies. */
static void feed_all(struct fx *f, const char *const *lines, size_t n)
{
    for (size_t i = 0; i < n; i++)
        assert_int_equal(feed(f, lines[i]), 0);
}

static void assign(struct fx *f, const char *unit, const char *arm, const char *time)
{
    char b[512];
    snprintf(b, sizeof b,
             "{\"kind\":\"assign\",\"time\":\"%s\",\"unit\":\"%s\",\"exp\":\"bakery-banner\",\"arm\":\"%s\"}",
             time, unit, arm);
    assert_int_equal(feed(f, b), 0);
}

static void outcome(struct fx *f, const char *unit, const char *metric, double v, const char *time)
{
    char b[512];
    snprintf(b, sizeof b,
             "{\"kind\":\"outcome\",\"time\":\"%s\",\"unit\":\"%s\",\"metric\":\"%s\",\"value\":%.17g}",
             time, unit, metric, v);
    assert_int_equal(feed(f, b), 0);
}

static const struct moments *M(struct fx *f, int metric, int arm)
{
    return ledger_moments(f->l, metric, arm);
}

/* Rule: exposure is the earliest in-window assignment, whatever the arrival
 * order. The unit is assigned at 10:00 and (arriving later) at 09:00; an
 * outcome at 09:30 is then inside the window [09:00, 09:00+24h). */
static void test_ledger__exposure_is_earliest_assignment(void **state)
{
    struct fx *f = *state;
    assign(f, "u1", "treatment", "2026-11-03T10:00:00Z");
    outcome(f, "u1", "spend", 4.25, "2026-11-03T09:30:00Z");
    assign(f, "u1", "treatment", "2026-11-03T09:00:00Z");
    ledger_finish(f->l);
    assert_int_equal(ledger_units(f->l, TRT), 1);
    assert_rel_close(M(f, M_SPEND, TRT)->mean[0], 4.25, 0);
    assert_rel_close(M(f, M_SPEND, TRT)->mean[1], 0, 0); /* not pre-period any more */
}

/* Rule: assignments outside [window.start, window.end) are counted in
 * outside_window and otherwise ignored; the end is excluded. */
static void test_ledger__outside_window(void **state)
{
    struct fx *f = *state;
    assign(f, "u1", "control", "2026-11-01T23:59:59Z");
    assign(f, "u2", "control", "2026-11-30T00:00:00Z");
    assign(f, "u3", "control", "2026-11-29T23:59:59.999Z");
    ledger_finish(f->l);
    assert_int_equal(ledger_counters(f->l)->outside_window, 2);
    assert_int_equal(ledger_units(f->l, CTL), 1);
}

/* Rule: a unit named in two arms is a multi-arm unit, left out of units and
 * every tally, even after it had been counted. */
static void test_ledger__multi_arm_units_left_out(void **state)
{
    struct fx *f = *state;
    assign(f, "u1", "control", "2026-11-03T10:00:00Z");
    outcome(f, "u1", "spend", 7, "2026-11-03T11:00:00Z");
    assign(f, "u2", "control", "2026-11-03T10:00:00Z");
    assign(f, "u1", "treatment", "2026-11-03T12:00:00Z");
    assign(f, "u1", "control", "2026-11-03T13:00:00Z");
    ledger_finish(f->l);
    const struct counters *c = ledger_counters(f->l);
    assert_int_equal(c->multi_arm_units, 1);
    assert_int_equal(c->multi_by_arm[CTL], 1);
    assert_int_equal(c->multi_by_arm[TRT], 1);
    assert_int_equal(ledger_units(f->l, CTL), 1);
    assert_int_equal(ledger_units(f->l, TRT), 0);
    assert_rel_close(M(f, M_SPEND, CTL)->n, 1, 0);
    assert_rel_close(M(f, M_SPEND, CTL)->mean[0], 0, 0); /* u2 only, no outcome */
}

/* Rule: an outcome counts when exposure <= time < exposure + attribution.
 * spend has a 24 h window: 10:00 the next day is out, one µs before is in;
 * bought has no window, so both count for it. */
static void test_ledger__attribution_window(void **state)
{
    struct fx *f = *state;
    assign(f, "u1", "treatment", "2026-11-03T10:00:00Z");
    outcome(f, "u1", "spend", 2, "2026-11-03T10:00:00Z");
    outcome(f, "u1", "spend", 3, "2026-11-04T09:59:59.999999Z");
    outcome(f, "u1", "spend", 100, "2026-11-04T10:00:00Z");
    ledger_finish(f->l);
    assert_rel_close(M(f, M_SPEND, TRT)->mean[0], 5, 0);
    assert_rel_close(M(f, M_RATIO, TRT)->mean[0], 105, 0); /* ratio: no window */
}

/* Rule: per-unit values. mean sums; binary is 1 when any counted value > 0;
 * ratio keeps numerator and denominator sums; exposed units without
 * outcomes are 0 and part of n. Three control units:
 *   u1: spend 0 and -2 → spend −2, bought 0, visits 2
 *   u2: spend 0.5      → spend 0.5, bought 1, visits 0
 *   u3: nothing        → 0, 0, 0
 * means: spend (−2+0.5+0)/3 = −0.5, bought 1/3, ratio (−1.5)/2 = −0.75. */
static void test_ledger__per_unit_values(void **state)
{
    struct fx *f = *state;
    assign(f, "u1", "control", "2026-11-03T10:00:00Z");
    assign(f, "u2", "control", "2026-11-03T10:00:00Z");
    assign(f, "u3", "control", "2026-11-03T10:00:00Z");
    outcome(f, "u1", "spend", 0, "2026-11-03T10:01:00Z");
    outcome(f, "u1", "spend", -2, "2026-11-03T10:02:00Z");
    outcome(f, "u1", "visit", 1, "2026-11-03T10:03:00Z");
    outcome(f, "u1", "visit", 1, "2026-11-03T10:04:00Z");
    outcome(f, "u2", "spend", 0.5, "2026-11-03T10:05:00Z");
    ledger_finish(f->l);
    assert_rel_close(M(f, M_SPEND, CTL)->n, 3, 0);
    assert_rel_close(M(f, M_SPEND, CTL)->mean[0], -0.5, 1e-15);
    assert_rel_close(M(f, M_BOUGHT, CTL)->mean[0], 1.0 / 3, 1e-15);
    const struct moments *r = M(f, M_RATIO, CTL);
    assert_rel_close(r->mean[0] / r->mean[1], -0.75, 1e-15);
}

/* Rule: cap applies to the per-unit sum: 6 + 7 = 13 is capped to 10. */
static void test_ledger__cap(void **state)
{
    struct fx *f = *state;
    assign(f, "u1", "control", "2026-11-03T10:00:00Z");
    outcome(f, "u1", "spend", 6, "2026-11-03T11:00:00Z");
    outcome(f, "u1", "spend", 7, "2026-11-03T12:00:00Z");
    ledger_finish(f->l);
    assert_rel_close(M(f, M_SPEND, CTL)->mean[0], 13, 0);
    assert_rel_close(M(f, M_CAPPED, CTL)->mean[0], 10, 0);
}

/* Rule: the covariate is the unit's sum of the same metric in
 * [exposure − pre_days, exposure): 7 days before exposure is in, one µs
 * earlier is out, the exposure instant belongs to the window. */
static void test_ledger__pre_period_covariate(void **state)
{
    struct fx *f = *state;
    outcome(f, "u1", "spend", 1, "2026-11-03T10:00:00Z");        /* exactly 7 d before */
    outcome(f, "u1", "spend", 50, "2026-11-03T09:59:59.999999Z"); /* too early */
    outcome(f, "u1", "spend", 2, "2026-11-10T09:59:59Z");
    assign(f, "u1", "treatment", "2026-11-10T10:00:00Z");
    outcome(f, "u1", "spend", 4, "2026-11-10T10:00:00Z");
    ledger_finish(f->l);
    assert_rel_close(M(f, M_SPEND, TRT)->mean[0], 4, 0);
    assert_rel_close(M(f, M_SPEND, TRT)->mean[1], 3, 0);
    assert_rel_close(M(f, M_BOUGHT, TRT)->mean[1], 1, 0);
}

/* Feeds one line to ledger l (test_ledger's feed works on the fixture's). */
static void feed_to(struct fx *f, struct ledger *l, const char *line)
{
    struct event ev;
    assert_int_equal(decoder_decode(f->dec, line, strlen(line), &ev), REJ_NONE);
    assert_int_equal(ledger_apply(l, &ev), 0);
}

/* A copy of f's ledger, saved and loaded (a snapshot round trip). */
static struct ledger *saved_copy(struct fx *f)
{
    struct byte_buf mb = {0};
    assert_int_equal(ledger_save(f->l, byte_buf_write, &mb), 0);
    struct err e;
    struct ledger *copy = ledger_load(&f->lay, mb.p, mb.n, &e);
    free(mb.p);
    assert_non_null(copy);
    return copy;
}

/* Numbered events for l at time t (µs): an assignment of unit <unit><i> to
 * control (i even) or treatment, with id <id><i>; a spend of 2 by unit w<i>,
 * with id o<i>. */
static void assign_n(struct fx *f, struct ledger *l, const char *unit, const char *id, int i, int64_t t)
{
    char b[512], ts[40];
    time_format(t, ts, sizeof ts);
    snprintf(b, sizeof b, "{\"kind\":\"assign\",\"time\":\"%s\",\"unit\":\"%s%d\",\"exp\":\"bakery-banner\","
             "\"arm\":\"%s\",\"id\":\"%s%d\"}", ts, unit, i, i % 2 ? "treatment" : "control", id, i);
    feed_to(f, l, b);
}

static void spend_n(struct fx *f, struct ledger *l, int i, int64_t t)
{
    char b[512], ts[40];
    time_format(t, ts, sizeof ts);
    snprintf(b, sizeof b, "{\"kind\":\"outcome\",\"time\":\"%s\",\"unit\":\"w%d\",\"metric\":\"spend\","
             "\"value\":2,\"id\":\"o%d\"}", ts, i, i);
    feed_to(f, l, b);
}

/* Rule: the covariate is the pre-period sum, however many outcomes wait for
 * the exposure and whatever happens to them meanwhile. Seven pre-period
 * outcomes of u1 (more than one pending block) wait; a sweep drops the oldest
 * (more than pre_days before the watermark); the ledger is saved and loaded;
 * both copies then take the same assignment and, 30 minutes late, an earlier
 * one, which recomputes the values from the list again. Worked by hand:
 * exposure 11-10T09:30, pre-period [11-03T09:30, 11-10T09:30): the outcomes
 * of 11-04 .. 11-08, 1 + 2 + 3 + 4 + 5 + 6 = 21 (11-01's 100 is out), and
 * the spend of 11-10T12:00, 7, in the window. */
static void test_ledger__long_pending_lists_survive_sweeps_and_snapshots(void **state)
{
    struct fx *f = *state;
    static const struct {
        const char *t;
        double v;
    } pre[] = {{"2026-11-01T12:00:00Z", 100}, {"2026-11-04T12:00:00Z", 1}, {"2026-11-05T12:00:00Z", 2},
               {"2026-11-06T11:00:00Z", 3},   {"2026-11-06T12:00:00Z", 4}, {"2026-11-07T12:00:00Z", 5},
               {"2026-11-08T12:00:00Z", 6}};
    char b[512];
    for (size_t i = 0; i < sizeof pre / sizeof pre[0]; i++) {
        snprintf(b, sizeof b, "{\"kind\":\"outcome\",\"time\":\"%s\",\"unit\":\"u1\",\"metric\":\"spend\",\"value\":%g}",
                 pre[i].t, pre[i].v);
        feed_to(f, f->l, b);
    }
    /* another unit's events move the watermark past 11-09: daily sweeps run */
    feed_to(f, f->l, "{\"kind\":\"outcome\",\"time\":\"2026-11-09T12:00:00Z\",\"unit\":\"u9\",\"metric\":\"visit\",\"value\":1}");
    feed_to(f, f->l, "{\"kind\":\"outcome\",\"time\":\"2026-11-10T09:40:00Z\",\"unit\":\"u9\",\"metric\":\"visit\",\"value\":1}");
    struct ledger *copy = saved_copy(f);
    struct ledger *both[2] = {f->l, copy};
    for (int k = 0; k < 2; k++) {
        feed_to(f, both[k], "{\"kind\":\"assign\",\"time\":\"2026-11-10T10:00:00Z\",\"unit\":\"u1\",\"exp\":\"bakery-banner\",\"arm\":\"treatment\"}");
        feed_to(f, both[k], "{\"kind\":\"assign\",\"time\":\"2026-11-10T09:30:00Z\",\"unit\":\"u1\",\"exp\":\"bakery-banner\",\"arm\":\"treatment\"}");
        feed_to(f, both[k], "{\"kind\":\"outcome\",\"time\":\"2026-11-10T12:00:00Z\",\"unit\":\"u1\",\"metric\":\"spend\",\"value\":7}");
        ledger_finish(both[k]);
        const struct moments *m = ledger_moments(both[k], M_SPEND, TRT);
        assert_int_equal(ledger_units(both[k], TRT), 1);
        assert_rel_close(m->mean[0], 7, 0);
        assert_rel_close(m->mean[1], 21, 0);
    }
    ledger_free(copy);
}

/* Rule: a repeated id is a duplicate, counted once and in duplicates. */
static void test_ledger__duplicates_by_id(void **state)
{
    struct fx *f = *state;
    const char *a = "{\"kind\":\"assign\",\"time\":\"2026-11-03T10:00:00Z\",\"unit\":\"u1\","
                    "\"exp\":\"bakery-banner\",\"arm\":\"control\",\"id\":\"a1\"}";
    const char *o = "{\"kind\":\"outcome\",\"time\":\"2026-11-03T11:00:00Z\",\"unit\":\"u1\","
                    "\"metric\":\"spend\",\"value\":5,\"id\":\"o1\"}";
    assert_int_equal(feed(f, a), 0);
    assert_int_equal(feed(f, o), 0);
    assert_int_equal(feed(f, o), 0);
    assert_int_equal(feed(f, a), 0);
    ledger_finish(f->l);
    assert_int_equal(ledger_counters(f->l)->duplicates, 2);
    assert_int_equal(ledger_counters(f->l)->dup_by_arm[CTL], 2);
    assert_rel_close(M(f, M_SPEND, CTL)->mean[0], 5, 0);
    assert_int_equal(ledger_counters(f->l)->lines, 4);
    assert_int_equal(ledger_counters(f->l)->accepted, 4);
}

/* Rule: the unit index and the id table keep every entry as they grow past
 * the size from which they grow in place (4 MiB, ledger.c), and through a
 * snapshot. 400,000 units (index: 2^19 then 2^20 slots of 8 bytes), each
 * assigned and with one spend of 2, all with ids inside the horizon (800,000
 * ids: the table doubles up to 2^21 slots of 16 bytes); then every fourth
 * outcome again. Saved and loaded, the copy and the original each take
 * 300,000 new units with ids (1.1M ids: both tables double again, the copy's
 * from the plain block it was loaded into), then every fifth assignment of
 * the first 400,000 again: all repeats are duplicates. Counted by hand from
 * the loops below. */
static void test_ledger__large_tables_keep_every_entry(void **state)
{
    struct fx *f = *state;
    enum { N = 400000, N2 = 300000 };
    int64_t t0;
    assert_int_equal(time_parse_rfc3339("2026-11-03T00:00:00Z", 20, &t0), 0);
    for (int i = 0; i < N; i++) { /* 0.1 s apart: 11 h in all */
        assign_n(f, f->l, "w", "a", i, t0 + (int64_t)i * 100000);
        spend_n(f, f->l, i, t0 + (int64_t)i * 100000);
    }
    for (int i = 0; i < N; i += 4)
        spend_n(f, f->l, i, t0 + (int64_t)i * 100000);
    assert_int_equal(ledger_counters(f->l)->duplicates, N / 4);
    assert_int_equal(ledger_n_records(f->l), N);
    struct ledger *copy = saved_copy(f);
    struct ledger *both[2] = {f->l, copy};
    for (int k = 0; k < 2; k++) {
        for (int i = 0; i < N2; i++)
            assign_n(f, both[k], "x", "x", i, t0 + (int64_t)N * 100000 + (int64_t)i * 10000);
        for (int i = 0; i < N; i += 5)
            assign_n(f, both[k], "w", "a", i, t0 + (int64_t)i * 100000);
        ledger_finish(both[k]);
        assert_int_equal(ledger_counters(both[k])->duplicates, N / 4 + N / 5);
        assert_int_equal(ledger_units(both[k], CTL), N / 2 + N2 / 2);
        assert_int_equal(ledger_units(both[k], TRT), N / 2 + N2 / 2);
        /* mean spend: 2 for each of the first N units, 0 for the new ones */
        assert_rel_close(ledger_moments(both[k], M_SPEND, CTL)->mean[0], 2.0 * N / (N + N2), 1e-12);
        assert_rel_close(ledger_moments(both[k], M_SPEND, TRT)->mean[0], 2.0 * N / (N + N2), 1e-12);
    }
    ledger_free(copy);
}

/* The unit records and the pending blocks move when they grow past their
 * reserves (ledger.c), which takes millions of units; ledger_trim_reserves
 * makes their next growth move at once. Two ledgers take the same 70,000
 * units: every 10 ms (no sweep runs) a new unit's spend of 2, with an id,
 * and the assignment of the unit whose spend came 20 steps (200 ms) before.
 * The second ledger's reserves are trimmed after 1,000 units, so its records
 * move at the 65,537th, while the assignments queued in the lookahead hold
 * guesses of their units' records, stale once moved (without forget_guesses
 * the test reads unmapped memory); its pending blocks move at the 32,768th
 * (each spend waits in a block of its own until its unit is exposed). Both
 * ledgers must end with every count and tally the same, to the bit. Worked
 * by hand: each spend falls 199 ms before its unit's exposure, inside the
 * 7-day pre-period, so every unit's spend is 0 and its covariate 2: mean
 * spend 0 and mean covariate 2 in both arms, 35,000 units each. */
static void test_ledger__records_and_blocks_survive_moves(void **state)
{
    struct fx *f = *state;
    enum { N = 70000, LAG = 20 };
    int64_t t0;
    assert_int_equal(time_parse_rfc3339("2026-11-03T00:00:00Z", 20, &t0), 0);
    struct ledger *moved = ledger_new(&f->lay);
    assert_non_null(moved);
    struct ledger *both[2] = {f->l, moved};
    for (int i = 0; i < N + LAG; i++) {
        if (i == 1000)
            ledger_trim_reserves(moved);
        for (int k = 0; k < 2; k++) {
            int64_t t = t0 + (int64_t)i * 10000;
            if (i < N)
                spend_n(f, both[k], i, t);
            if (i >= LAG)
                assign_n(f, both[k], "w", "a", i - LAG, t + 1000);
        }
    }
    for (int k = 0; k < 2; k++) {
        ledger_finish(both[k]);
        assert_int_equal(ledger_n_records(both[k]), N);
        for (int a = CTL; a <= TRT; a++) {
            assert_int_equal(ledger_units(both[k], a), N / 2);
            assert_rel_close(ledger_moments(both[k], M_SPEND, a)->mean[0], 0, 0);
            assert_rel_close(ledger_moments(both[k], M_SPEND, a)->mean[1], 2, 0);
        }
        assert_int_equal(ledger_counters(both[k])->duplicates, 0);
        assert_int_equal(ledger_counters(both[k])->orphan_outcomes, 0);
    }
    assert_memory_equal(ledger_counters(f->l), ledger_counters(moved), sizeof(struct counters));
    for (int m = 0; m < f->cfg.n_metrics; m++)
        for (int a = CTL; a <= TRT; a++)
            assert_memory_equal(ledger_moments(f->l, m, a), ledger_moments(moved, m, a), sizeof(struct moments));
    ledger_free(moved);
}

/* Rule: ids are remembered for the dedup horizon of event time (24 h here),
 * counted back from the latest event time, and no longer. Worked by hand:
 * o1 at 11:00 is repeated at 10:59 next day (the latest time then 10:59,
 * 1 min inside the horizon: a duplicate); o2 at 12:00 is repeated after an
 * event at 12:01 next day (the latest time 24 h 1 min after it: not a
 * duplicate, counted as a new outcome). The table is far from full here, so
 * no expiry pass has run: the answer does not depend on one. */
static void test_ledger__duplicates_within_horizon_only(void **state)
{
    struct fx *f = *state;
    assign(f, "u1", "control", "2026-11-03T10:00:00Z");
    const char *lines[] = {
        "{\"kind\":\"outcome\",\"time\":\"2026-11-03T11:00:00Z\",\"unit\":\"u1\",\"metric\":\"visit\",\"value\":1,\"id\":\"o1\"}",
        "{\"kind\":\"outcome\",\"time\":\"2026-11-03T12:00:00Z\",\"unit\":\"u1\",\"metric\":\"visit\",\"value\":1,\"id\":\"o2\"}",
        "{\"kind\":\"outcome\",\"time\":\"2026-11-04T10:59:00Z\",\"unit\":\"u1\",\"metric\":\"visit\",\"value\":1,\"id\":\"o1\"}",
        "{\"kind\":\"outcome\",\"time\":\"2026-11-04T12:01:00Z\",\"unit\":\"u2\",\"metric\":\"visit\",\"value\":1}",
        "{\"kind\":\"outcome\",\"time\":\"2026-11-04T12:01:00Z\",\"unit\":\"u1\",\"metric\":\"visit\",\"value\":1,\"id\":\"o2\"}",
    };
    feed_all(f, lines, sizeof lines / sizeof lines[0]);
    ledger_finish(f->l);
    assert_int_equal(ledger_counters(f->l)->duplicates, 1);
    /* visits of u1 counted: o1, o2 and o2 again (ratio denominator, the window has no end) */
    assert_rel_close(M(f, M_RATIO, CTL)->mean[1], 3, 0);
}

/* A naive model of the rule of duplicates (a time per unit and id, every
 * event compared in arrival order) against the ledger, on a random stream of
 * `events` 15 s apart over `units` units with `ids` ids each and a 12 h
 * horizon: 5% of events repeat a recent one, 10% arrive up to 3 h late, 1
 * in 500 is 6 h early (it holds the ring's tail while the ids behind it
 * expire); units from `assigned` on are never assigned, so sweeps remove
 * their records with ids still within the horizon; page_view is no metric's,
 * so the first events of a unit may have no record; the ledger is saved and
 * loaded half way. No covariate: outcomes of unassigned units are dropped at
 * the next daily sweep. Returns the duplicates. */
static uint64_t naive_model_run(int units, int ids, int events, int assigned, unsigned long seed)
{
    static const char cfg_text[] =
        "{\"experiment\":\"bakery-banner\","
        " \"arms\":[{\"name\":\"control\",\"weight\":1},{\"name\":\"treatment\",\"weight\":1}],"
        " \"window\":{\"start\":\"2026-11-02T00:00:00Z\",\"end\":\"2026-11-30T00:00:00Z\"},"
        " \"metrics\":[{\"name\":\"spend\",\"type\":\"mean\",\"event\":\"spend\"}]}";
    const int64_t horizon = 12 * US_PER_HOUR;
    struct config cfg;
    struct layout lay;
    struct err e;
    assert_int_equal(config_parse(cfg_text, strlen(cfg_text), "test", &cfg, &e), 0);
    assert_int_equal(layout_init(&lay, &cfg, US_PER_HOUR, horizon, &e), 0);
    struct decoder *dec = decoder_new();
    struct ledger *l = ledger_new(&lay);
    int64_t *remembered = malloc((size_t)units * (size_t)ids * sizeof *remembered);
    for (int i = 0; i < units * ids; i++)
        remembered[i] = INT64_MIN; /* never seen */
    int64_t base, latest = INT64_MIN;
    assert_int_equal(time_parse_rfc3339("2026-11-03T00:00:00Z", 20, &base), 0);
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(rng, seed);
    uint64_t dups = 0;
    int last_u = 0, last_k = 0;
    int64_t last_t = base;
    for (int i = 0; i < events; i++) {
        int u, k;
        int64_t t = base + (int64_t)i * 15 * US_PER_SEC;
        if (i && gsl_rng_uniform(rng) < 0.05) {
            u = last_u, k = last_k, t = last_t; /* a repeat of a recent line */
        } else {
            u = (int)gsl_rng_uniform_int(rng, (unsigned long)units);
            k = (int)gsl_rng_uniform_int(rng, (unsigned long)ids);
            double x = gsl_rng_uniform(rng);
            if (x < 0.10)
                t -= (int64_t)(gsl_rng_uniform(rng) * 3 * US_PER_HOUR);
            else if (x < 0.102)
                t += 6 * US_PER_HOUR;
        }
        if (gsl_rng_uniform(rng) < 0.3)
            last_u = u, last_k = k, last_t = t;
        char b[512], ts[40];
        time_format(t, ts, sizeof ts);
        double kind = gsl_rng_uniform(rng);
        if (kind < 0.15 && u < assigned)
            snprintf(b, sizeof b, "{\"kind\":\"assign\",\"time\":\"%s\",\"unit\":\"u%d\",\"exp\":\"bakery-banner\","
                     "\"arm\":\"%s\",\"id\":\"e%d-%d\"}", ts, u, u % 2 ? "treatment" : "control", u, k);
        else
            snprintf(b, sizeof b, "{\"kind\":\"outcome\",\"time\":\"%s\",\"unit\":\"u%d\",\"metric\":\"%s\","
                     "\"value\":1,\"id\":\"e%d-%d\"}", ts, u, kind < 0.3 ? "page_view" : "spend", u, k);
        struct event ev;
        assert_int_equal(decoder_decode(dec, b, strlen(b), &ev), REJ_NONE);
        assert_int_equal(ledger_apply(l, &ev), 0);
        /* the model */
        int64_t cutoff = latest == INT64_MIN ? INT64_MIN : latest - horizon;
        int64_t *m = &remembered[u * ids + k];
        if (*m != INT64_MIN && *m >= cutoff) {
            dups++;
        } else {
            *m = t;
            if (t > latest)
                latest = t;
        }
        if (i == events / 2) { /* a snapshot round trip */
            struct byte_buf mb = {0};
            assert_int_equal(ledger_save(l, byte_buf_write, &mb), 0);
            ledger_free(l);
            l = ledger_load(&lay, mb.p, mb.n, &e);
            free(mb.p);
            assert_non_null(l);
            assert_int_equal(ledger_counters(l)->duplicates, dups);
        }
    }
    ledger_finish(l);
    assert_int_equal(ledger_counters(l)->duplicates, dups);
    assert_int_equal(ledger_counters(l)->accepted, events);
    gsl_rng_free(rng);
    free(remembered);
    ledger_free(l);
    decoder_free(dec);
    layout_release(&lay);
    config_release(&cfg);
    return dups;
}

/* Rule: a repeated id is a duplicate while it was seen within the horizon,
 * counted back from the latest time of the events not found duplicates (a
 * duplicate moves nothing); an id seen longer ago counts as new and is
 * remembered again from then. The naive model above against the ledger, on
 * two streams made to reach each place the ledger keeps ids in:
 * - 400 units (200 assigned), 40 ids each, 70,000 events (12 days): more ids
 *   within the horizon than the ring's first size. (Counted once with
 *   temporary counters in the ledger: 26,212 ids of events with no record,
 *   2,870 ids moved out of the ring by sweeps, 11 stragglers, the ring grown
 *   from 1,024 to 8,192 entries, 5,313 duplicates found in chains and 4,685
 *   in the table.)
 * - 6 units (3 assigned), 400 ids each, 30,000 events (5 days): each unit
 *   has about 480 ids within the horizon, so each soon keeps its ids in the
 *   table (more than CHAIN_MAX, ledger.c), and sweeps remove unassigned
 *   units that do. (Counted the same way: 14 switches of a unit to the
 *   table, 5 records removed while in it, 14,610 duplicates found in the
 *   table and 63 in chains.) */
static void test_ledger__duplicates_match_a_naive_model(void **state)
{
    (void)state;
    assert_true(naive_model_run(400, 40, 70000, 200, 20261202) > 3000); /* the stream does repeat ids */
    assert_true(naive_model_run(6, 400, 30000, 3, 20261203) > 3000);
}

/* Rule: an id is remembered from its latest non-duplicate event. Units with
 * no record (page_view is no metric's) keep their ids in the table: X at
 * 10:00 on the 3rd has expired by the 11:30 line on the 4th (latest 12:00,
 * horizon 24 h, cutoff 12:00 on the 3rd), which is new and remembered; the
 * 11:40 line repeats it within the horizon: 1 duplicate (worked by hand). */
static void test_ledger__id_remembered_again_after_expiry(void **state)
{
    struct fx *f = *state;
    static const char *const lines[] = {
        "{\"kind\":\"outcome\",\"time\":\"2026-11-03T10:00:00Z\",\"unit\":\"u1\",\"metric\":\"page_view\",\"value\":1,\"id\":\"X\"}",
        "{\"kind\":\"outcome\",\"time\":\"2026-11-04T12:00:00Z\",\"unit\":\"u2\",\"metric\":\"page_view\",\"value\":1}",
        "{\"kind\":\"outcome\",\"time\":\"2026-11-04T11:30:00Z\",\"unit\":\"u1\",\"metric\":\"page_view\",\"value\":1,\"id\":\"X\"}",
        "{\"kind\":\"outcome\",\"time\":\"2026-11-04T11:40:00Z\",\"unit\":\"u1\",\"metric\":\"page_view\",\"value\":1,\"id\":\"X\"}",
    };
    feed_all(f, lines, sizeof lines / sizeof lines[0]);
    assert_int_equal(ledger_counters(f->l)->duplicates, 1);
}

/* A spend of 1 by unit busy with id b<i>, at i minutes past 11-03 00:00. */
static void busy_spend(struct fx *f, struct ledger *l, int i)
{
    int64_t t0;
    assert_int_equal(time_parse_rfc3339("2026-11-03T00:00:00Z", 20, &t0), 0);
    char b[512], ts[40];
    time_format(t0 + (int64_t)i * 60 * US_PER_SEC, ts, sizeof ts);
    snprintf(b, sizeof b, "{\"kind\":\"outcome\",\"time\":\"%s\",\"unit\":\"busy\",\"metric\":\"spend\","
             "\"value\":1,\"id\":\"b%d\"}", ts, i);
    feed_to(f, l, b);
}

/* Rule: a unit with many ids within the horizon still has each repeat found
 * (the ledger then keeps its ids in its table, ledger.c: CHAIN_MAX 32). One
 * assigned unit sends 300 outcomes with distinct ids a minute apart (5 h),
 * then all 300 again: 300 duplicates; saved and loaded, both copies take the
 * first 100 once more: 100 more duplicates each. The unit's ids went to the
 * table: the ledger's id memory then includes a table (at least 4,096
 * slots of 16 bytes) besides the ring. Counted from the loops. */
static void test_ledger__busy_unit_keeps_every_id(void **state)
{
    struct fx *f = *state;
    assign(f, "busy", "control", "2026-11-02T23:00:00Z");
    for (int round = 0; round < 2; round++)
        for (int i = 0; i < 300; i++)
            busy_spend(f, f->l, i);
    assert_int_equal(ledger_counters(f->l)->duplicates, 300);
    struct ledger_mem mem;
    ledger_memory_parts(f->l, &mem);
    assert_true(mem.ids >= 4096 * 16 + 1024 * 24);
    struct ledger *copy = saved_copy(f);
    struct ledger *both[2] = {f->l, copy};
    for (int k = 0; k < 2; k++) {
        for (int i = 0; i < 100; i++)
            busy_spend(f, both[k], i);
        ledger_finish(both[k]);
        assert_int_equal(ledger_counters(both[k])->duplicates, 400);
        assert_rel_close(ledger_moments(both[k], M_SPEND, CTL)->mean[0], 300, 0);
    }
    ledger_free(copy);
}

/* Rule: the final summary does not depend on arrival order within the
 * lateness bound (1 h here). The same six events in two orders, each at most
 * 50 minutes out of order, give the same tallies; an assignment more than an
 * hour behind the latest event is counted in late_assignments. */
static void test_ledger__order_within_lateness(void **state)
{
    struct fx *f = *state;
    static const char *const ev[] = {
        "{\"kind\":\"outcome\",\"time\":\"2026-11-03T09:40:00Z\",\"unit\":\"u1\",\"metric\":\"spend\",\"value\":1.5}",
        "{\"kind\":\"assign\",\"time\":\"2026-11-03T10:00:00Z\",\"unit\":\"u1\",\"exp\":\"bakery-banner\",\"arm\":\"control\"}",
        "{\"kind\":\"outcome\",\"time\":\"2026-11-03T10:10:00Z\",\"unit\":\"u1\",\"metric\":\"spend\",\"value\":2.5}",
        "{\"kind\":\"assign\",\"time\":\"2026-11-03T10:20:00Z\",\"unit\":\"u2\",\"exp\":\"bakery-banner\",\"arm\":\"treatment\"}",
        "{\"kind\":\"outcome\",\"time\":\"2026-11-03T10:30:00Z\",\"unit\":\"u2\",\"metric\":\"spend\",\"value\":8}",
        "{\"kind\":\"assign\",\"time\":\"2026-11-03T09:45:00Z\",\"unit\":\"u1\",\"exp\":\"bakery-banner\",\"arm\":\"control\"}",
    };
    static const int order_b[] = {4, 2, 0, 5, 3, 1};
    struct ledger *a = f->l, *b = ledger_new(&f->lay);
    struct event e;
    for (int i = 0; i < 6; i++) {
        assert_int_equal(decoder_decode(f->dec, ev[i], strlen(ev[i]), &e), REJ_NONE);
        ledger_apply(a, &e);
        assert_int_equal(decoder_decode(f->dec, ev[order_b[i]], strlen(ev[order_b[i]]), &e), REJ_NONE);
        ledger_apply(b, &e);
    }
    ledger_finish(a);
    ledger_finish(b);
    for (int m = 0; m < 4; m++)
        for (int arm = 0; arm < 2; arm++) {
            assert_rel_close(ledger_moments(b, m, arm)->n, ledger_moments(a, m, arm)->n, 0);
            assert_rel_close(ledger_moments(b, m, arm)->mean[0], ledger_moments(a, m, arm)->mean[0], 1e-15);
            assert_rel_close(ledger_moments(b, m, arm)->mean[1], ledger_moments(a, m, arm)->mean[1], 1e-15);
        }
    /* exposure 09:45: the 10:10 outcome is in the window, the 09:40 one is pre-period */
    assert_rel_close(ledger_moments(a, M_SPEND, CTL)->mean[0], 2.5, 0);
    assert_rel_close(ledger_moments(a, M_SPEND, CTL)->mean[1], 1.5, 0);
    assert_int_equal(ledger_counters(a)->late_assignments, 0);
    ledger_free(b);
    /* an assignment 2 hours behind the latest event is late */
    assign(f, "u3", "control", "2026-11-03T08:00:00Z");
    assert_int_equal(ledger_counters(a)->late_assignments, 1);
}

/* Outcomes after window.start of units never exposed are orphans; outcomes
 * of unknown metrics are ignored, not stored. */
static void test_ledger__orphans_and_ignored(void **state)
{
    struct fx *f = *state;
    outcome(f, "ghost", "spend", 3, "2026-11-05T10:00:00Z");
    outcome(f, "ghost", "spend", 3, "2026-10-20T10:00:00Z"); /* before the window: not an orphan */
    outcome(f, "u1", "page_view", 1, "2026-11-05T10:00:00Z");
    ledger_finish(f->l);
    assert_int_equal(ledger_counters(f->l)->orphan_outcomes, 1);
    assert_int_equal(ledger_counters(f->l)->ignored_outcomes, 1);
    assert_int_equal(ledger_units(f->l, CTL) + ledger_units(f->l, TRT), 0);
}

/* The incremental tallies equal a two-pass recomputation from the units'
 * values: random assignments and outcomes (values around 1e9 for one unit
 * group, to exercise cancellation), several outcomes per unit. */
struct pass {
    const struct layout *lay;
    long double sum[CONFIG_MAX_METRICS][2][MOM_MAXV];
    long double n[2];
    int phase;
    long double mean[CONFIG_MAX_METRICS][2][MOM_MAXV];
    long double css[CONFIG_MAX_METRICS][2][MOM_MAXV];
};

static void two_pass(void *ctx, uint64_t key, int arm, const double *values)
{
    (void)key;
    struct pass *p = ctx;
    double v[MOM_MAXV];
    if (p->phase == 0)
        p->n[arm] += 1;
    for (int m = 0; m < p->lay->cfg->n_metrics; m++) {
        layout_vector(p->lay, m, values, v);
        for (int j = 0; j < p->lay->nv[m]; j++) {
            if (p->phase == 0)
                p->sum[m][arm][j] += v[j];
            else {
                long double d = v[j] - p->mean[m][arm][j];
                p->css[m][arm][j] += d * d;
            }
        }
    }
}

static void test_ledger__tallies_match_two_pass(void **state)
{
    struct fx *f = *state;
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(rng, 20261101);
    char unit[32], t[40];
    int64_t base = 0;
    time_parse_rfc3339("2026-11-03T00:00:00Z", 20, &base);
    for (int i = 0; i < 20000; i++) {
        int u = (int)gsl_rng_uniform_int(rng, 2000);
        snprintf(unit, sizeof unit, "u%04d", u);
        int64_t when = base + (int64_t)i * 20 * US_PER_SEC;
        time_format(when, t, sizeof t);
        if (gsl_rng_uniform(rng) < 0.15)
            assign(f, unit, u % 2 ? "treatment" : "control", t);
        else {
            double v = u < 500 ? 1e9 + gsl_rng_uniform(rng) : gsl_rng_uniform(rng) * 20;
            outcome(f, unit, gsl_rng_uniform(rng) < 0.7 ? "spend" : "visit", v, t);
        }
    }
    gsl_rng_free(rng);
    ledger_finish(f->l);
    struct pass p;
    memset(&p, 0, sizeof p);
    p.lay = &f->lay;
    ledger_each_unit(f->l, two_pass, &p);
    for (int m = 0; m < f->cfg.n_metrics; m++)
        for (int a = 0; a < 2; a++)
            for (int j = 0; j < f->lay.nv[m]; j++)
                p.mean[m][a][j] = p.sum[m][a][j] / p.n[a];
    p.phase = 1;
    ledger_each_unit(f->l, two_pass, &p);
    for (int m = 0; m < f->cfg.n_metrics; m++)
        for (int a = 0; a < 2; a++) {
            const struct moments *mm = M(f, m, a);
            assert_rel_close(mm->n, (double)p.n[a], 0);
            for (int j = 0; j < f->lay.nv[m]; j++) {
                assert_rel_close(mm->mean[j], (double)p.mean[m][a][j], 1e-12);
                assert_rel_close(mm->c[j][j], (double)p.css[m][a][j], 1e-9);
            }
        }
    assert_true(p.n[0] > 100 && p.n[1] > 100);
}

int main(void)
{
    gsl_set_error_handler_off();
    const struct CMUnitTest tests[] = {
        cmocka_unit_test_setup_teardown(test_ledger__exposure_is_earliest_assignment, setup, teardown),
        cmocka_unit_test_setup_teardown(test_ledger__outside_window, setup, teardown),
        cmocka_unit_test_setup_teardown(test_ledger__multi_arm_units_left_out, setup, teardown),
        cmocka_unit_test_setup_teardown(test_ledger__attribution_window, setup, teardown),
        cmocka_unit_test_setup_teardown(test_ledger__per_unit_values, setup, teardown),
        cmocka_unit_test_setup_teardown(test_ledger__cap, setup, teardown),
        cmocka_unit_test_setup_teardown(test_ledger__pre_period_covariate, setup, teardown),
        cmocka_unit_test_setup_teardown(test_ledger__long_pending_lists_survive_sweeps_and_snapshots, setup, teardown),
        cmocka_unit_test_setup_teardown(test_ledger__duplicates_by_id, setup, teardown),
        cmocka_unit_test_setup_teardown(test_ledger__duplicates_within_horizon_only, setup, teardown),
        cmocka_unit_test(test_ledger__duplicates_match_a_naive_model),
        cmocka_unit_test_setup_teardown(test_ledger__id_remembered_again_after_expiry, setup, teardown),
        cmocka_unit_test_setup_teardown(test_ledger__busy_unit_keeps_every_id, setup, teardown),
        cmocka_unit_test_setup_teardown(test_ledger__large_tables_keep_every_entry, setup, teardown),
        cmocka_unit_test_setup_teardown(test_ledger__records_and_blocks_survive_moves, setup, teardown),
        cmocka_unit_test_setup_teardown(test_ledger__order_within_lateness, setup, teardown),
        cmocka_unit_test_setup_teardown(test_ledger__orphans_and_ignored, setup, teardown),
        cmocka_unit_test_setup_teardown(test_ledger__tallies_match_two_pass, setup, teardown),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
