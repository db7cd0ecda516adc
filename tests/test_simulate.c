/*
 * test_simulate.c — the event-log generator (simulate.h).
 *
 * Every log is read back with abtally's own decoder (decoder_decode), so the
 * schema checks are the ones replay applies. Statistical checks allow four
 * binomial standard errors around the asked-for fraction; the fault counts
 * the generator reports must equal what the decoded log shows.
 */
#include <stdbool.h>
#include <stdlib.h>
#include <string.h>

#include "helpers.h"
#include "config.h"
#include "bytebuf.h"
#include "event.h"
#include "simulate.h"
#include "timefmt.h"

/* ---------------------------------------------------------------- helpers */

/* A sim_sink into a struct byte_buf. */
static int buf_sink(void *ctx, const char *b, size_t len)
{
    return byte_buf_write(ctx, b, len) ? 1 : 0;
}

static int refusing_sink(void *ctx, const char *b, size_t len)
{
    (void)ctx;
    (void)b;
    (void)len;
    return 1;
}

/* Runs the generator into memory; the caller frees .p. */
static struct byte_buf run(const struct sim_opts *o, struct sim_stats *st)
{
    struct byte_buf b = {0};
    struct err e;
    err_clear(&e);
    int rc = sim_run(o, buf_sink, &b, st, &e);
    if (rc)
        fail_msg("sim_run: %d %s", rc, e.msg);
    return b;
}

static void small_opts(struct sim_opts *o, uint64_t units)
{
    sim_opts_default(o);
    o->units = units;
}

static void fault(struct sim_opts *o, const char *spec)
{
    struct err e;
    if (sim_parse_fault(o, spec, &e))
        fail_msg("fault '%s': %s", spec, e.msg);
}

/* What a decoded log shows. */
struct scan {
    uint64_t lines;
    uint64_t rejected[REJ_COUNT];
    uint64_t assignments;            /* accepted assignment lines, repeats included */
    uint64_t by_arm[SIM_MAX_ARMS];   /* units by their first assigned arm */
    uint64_t units_assigned;         /* units with at least one assignment */
    uint64_t multi_arm;              /* units assigned to two different arms */
    uint64_t duplicates;             /* lines whose (unit, id) was seen before */
    uint64_t out_of_order;           /* lines earlier than a line before them */
    int64_t max_behind_us;           /* the most a line's time is behind the latest seen */
    int64_t min_time, max_time;
    double order_sum[SIM_MAX_ARMS];  /* after exposure, by the unit's arm */
    uint64_t orders[SIM_MAX_ARMS];
    uint64_t pre_sessions[SIM_MAX_ARMS]; /* before exposure, by the unit's arm */
    bool schema_ok;                  /* every accepted line matched the schema */
    char why[200];
};

/* The unit index of "u00001234" (1-based), or 0. */
static uint64_t unit_number(struct str s)
{
    if (s.n < 2 || s.p[0] != 'u')
        return 0;
    uint64_t v = 0;
    for (uint32_t i = 1; i < s.n; i++) {
        if (s.p[i] < '0' || s.p[i] > '9')
            return 0;
        v = v * 10 + (uint64_t)(s.p[i] - '0');
    }
    return v;
}

/* (unit, sequence) of an id "a-12-3" / "o-12-3", or ~0. */
static uint64_t id_key(struct str s)
{
    if (s.n < 5 || (s.p[0] != 'a' && s.p[0] != 'o') || s.p[1] != '-')
        return ~UINT64_C(0);
    uint64_t u = 0, q = 0;
    uint32_t i = 2;
    while (i < s.n && s.p[i] != '-')
        u = u * 10 + (uint64_t)(s.p[i++] - '0');
    for (i++; i < s.n; i++)
        q = q * 10 + (uint64_t)(s.p[i] - '0');
    return u << 20 | q;
}

static int cmp_u64(const void *a, const void *b)
{
    uint64_t x = *(const uint64_t *)a, y = *(const uint64_t *)b;
    return x < y ? -1 : x > y;
}

static int arm_of(const struct sim_opts *o, struct str s)
{
    for (int a = 0; a < o->n_arms; a++)
        if (str_eq(s, o->arms[a]))
            return a;
    return -1;
}

static void bad_line(struct scan *sc, const char *why, const char *line, size_t len)
{
    if (sc->schema_ok)
        snprintf(sc->why, sizeof sc->why, "%s: %.*s", why, (int)(len < 120 ? len : 120), line);
    sc->schema_ok = false;
}

/* Decodes every line of b: the assignments (exposure and arm per unit), and
 * when outcomes is set, a second pass for the outcomes against them. */
static void scan_log(const struct sim_opts *o, const struct byte_buf *b, struct scan *sc, bool outcomes)
{
    memset(sc, 0, sizeof *sc);
    sc->schema_ok = true;
    sc->min_time = INT64_MAX;
    sc->max_time = INT64_MIN;
    struct decoder *d = decoder_new();
    assert_non_null(d);
    size_t nu = (size_t)o->units + 1;
    signed char *arm = malloc(nu);
    bool *multi = calloc(nu, sizeof *multi);
    int64_t *expo = malloc(nu * sizeof *expo);
    size_t cap = 1024, nk = 0;
    uint64_t *keys = malloc(cap * sizeof *keys);
    assert_true(arm && multi && expo && keys);
    memset(arm, -1, nu);
    char exp[80];
    if (o->experiment[0])
        snprintf(exp, sizeof exp, "%s", o->experiment);
    else {
        char t[40];
        time_format(o->start_us, t, sizeof t);
        snprintf(exp, sizeof exp, "checkout-%.7s", t);
    }
    int64_t lo = o->start_us - (int64_t)o->pre_days * US_PER_DAY;
    int64_t hi = o->start_us + (int64_t)o->days * US_PER_DAY;
    for (int pass = 0; pass < 1 + outcomes; pass++) {
        int64_t latest = INT64_MIN;
        for (size_t at = 0; at < b->n;) {
            const char *line = b->p + at;
            const char *nl = memchr(line, '\n', b->n - at);
            assert_non_null(nl);
            size_t len = (size_t)(nl - line);
            at += len + 1;
            struct event ev;
            enum reject r = decoder_decode(d, line, len, &ev);
            if (pass == 0) {
                sc->lines++;
                sc->rejected[r]++;
            }
            if (r != REJ_NONE)
                continue;
            uint64_t u = unit_number(ev.unit);
            if (u == 0 || u >= nu) {
                bad_line(sc, "unit", line, len);
                continue;
            }
            if (!ev.id.p || id_key(ev.id) == ~UINT64_C(0) || (id_key(ev.id) >> 20) != u)
                bad_line(sc, "id", line, len);
            if (ev.time_us < lo || ev.time_us >= hi)
                bad_line(sc, "time outside the log's days", line, len);
            if (pass == 0) {
                if (ev.time_us < latest) {
                    sc->out_of_order++;
                    if (latest - ev.time_us > sc->max_behind_us)
                        sc->max_behind_us = latest - ev.time_us;
                } else {
                    latest = ev.time_us;
                }
                if (ev.time_us < sc->min_time)
                    sc->min_time = ev.time_us;
                if (ev.time_us > sc->max_time)
                    sc->max_time = ev.time_us;
                if (nk == cap) {
                    cap *= 2;
                    keys = realloc(keys, cap * sizeof *keys);
                    assert_non_null(keys);
                }
                keys[nk++] = id_key(ev.id);
            }
            if (ev.kind == EV_ASSIGN) {
                if (pass == 1)
                    continue;
                sc->assignments++;
                int a = arm_of(o, ev.arm);
                if (a < 0 || !str_eq(ev.exp, exp) || ev.n_attrs != 1 ||
                    !str_eq(ev.attrs[0].key, "platform") ||
                    !(str_eq(ev.attrs[0].value, "ios") || str_eq(ev.attrs[0].value, "android") ||
                      str_eq(ev.attrs[0].value, "web"))) {
                    bad_line(sc, "assignment fields", line, len);
                    continue;
                }
                if (arm[u] < 0) {
                    arm[u] = (signed char)a;
                    expo[u] = ev.time_us;
                } else {
                    if (arm[u] != a)
                        multi[u] = true;
                    if (ev.time_us < expo[u]) { /* the first arm is the earliest one's */
                        arm[u] = (signed char)a;
                        expo[u] = ev.time_us;
                    }
                }
            } else if (pass == 1) {
                bool value_one = ev.value == 1;
                if (str_eq(ev.metric, "order_value")) {
                    if (!(ev.value > 0))
                        bad_line(sc, "order value", line, len);
                } else if (!(str_eq(ev.metric, "sessions") || str_eq(ev.metric, "page_error")) ||
                           !value_one) {
                    bad_line(sc, "outcome fields", line, len);
                }
                if (arm[u] < 0)
                    continue;
                if (ev.time_us >= expo[u] && str_eq(ev.metric, "order_value")) {
                    sc->order_sum[(int)arm[u]] += ev.value;
                    sc->orders[(int)arm[u]]++;
                }
                if (ev.time_us < expo[u] && str_eq(ev.metric, "sessions"))
                    sc->pre_sessions[(int)arm[u]]++;
            }
        }
    }
    for (size_t u = 1; u < nu; u++)
        if (arm[u] >= 0) {
            sc->units_assigned++;
            sc->by_arm[(int)arm[u]]++;
            sc->multi_arm += multi[u];
        }
    qsort(keys, nk, sizeof *keys, cmp_u64);
    for (size_t i = 1; i < nk; i++)
        sc->duplicates += keys[i] == keys[i - 1];
    free(keys);
    free(arm);
    free(multi);
    free(expo);
    decoder_free(d);
}

static void scan(const struct sim_opts *o, const struct byte_buf *b, struct scan *sc)
{
    scan_log(o, b, sc, false);
}

/* |got - n p| <= 4 binomial standard errors (+1 for tiny counts). */
static void assert_binomial(const char *what, double got, double n, double p)
{
    double sd = sqrt(n * p * (1 - p));
    if (fabs(got - n * p) > 4 * sd + 1)
        fail_msg("%s: %.0f, expected %.1f ± %.1f (4 SE)", what, got, n * p, 4 * sd);
}

/* ------------------------------------------------------------------ tests */

static void test_simulate__same_seed_same_bytes(void **state)
{
    (void)state;
    struct sim_opts o;
    small_opts(&o, 1500);
    fault(&o, "duplicate:0.02");
    fault(&o, "late:0.1:20m");
    fault(&o, "malformed:0.01");
    fault(&o, "multi-arm:0.02");
    fault(&o, "lose-assign:treatment:0.05:3");
    fault(&o, "self-select:0.5");
    struct sim_stats s1, s2, s3;
    struct byte_buf a = run(&o, &s1), b = run(&o, &s2);
    assert_true(a.n > 0);
    assert_int_equal(a.n, b.n);
    assert_memory_equal(a.p, b.p, a.n);
    assert_memory_equal(&s1, &s2, sizeof s1);
    o.seed = 2;
    struct byte_buf c = run(&o, &s3);
    assert_false(c.n == a.n && !memcmp(a.p, c.p, a.n));
    free(a.p);
    free(b.p);
    free(c.p);
}

static void test_simulate__faults_keep_the_events(void **state)
{
    /* the late fault only moves lines: sorted, the two logs are equal */
    (void)state;
    struct sim_opts o;
    small_opts(&o, 1000);
    struct byte_buf a = run(&o, NULL);
    fault(&o, "late:0.5:45m");
    struct sim_stats st;
    struct byte_buf b = run(&o, &st);
    assert_int_equal(a.n, b.n);
    assert_true(st.late > 0);
    assert_false(!memcmp(a.p, b.p, a.n));
    /* same bytes in another order: compare byte histograms and line counts */
    uint64_t ha[256] = {0}, hb[256] = {0};
    for (size_t i = 0; i < a.n; i++) {
        ha[(unsigned char)a.p[i]]++;
        hb[(unsigned char)b.p[i]]++;
    }
    assert_memory_equal(ha, hb, sizeof ha);
    free(a.p);
    free(b.p);
}

static void test_simulate__schema_without_malformed_fault(void **state)
{
    (void)state;
    struct sim_opts o;
    small_opts(&o, 4000);
    fault(&o, "duplicate:0.01");
    fault(&o, "late:0.05:30m");
    fault(&o, "multi-arm:0.01");
    fault(&o, "lose-assign:control:0.02");
    fault(&o, "self-select:0.3");
    struct sim_stats st;
    struct byte_buf b = run(&o, &st);
    struct scan sc;
    scan(&o, &b, &sc);
    if (!sc.schema_ok)
        fail_msg("%s", sc.why);
    assert_int_equal(sc.lines, st.lines);
    assert_int_equal(sc.rejected[REJ_NONE], sc.lines); /* zero rejections */
    assert_int_equal(sc.duplicates, st.duplicates);
    assert_true(sc.min_time >= o.start_us - (int64_t)o.pre_days * US_PER_DAY);
    assert_true(sc.max_time < o.start_us + (int64_t)o.days * US_PER_DAY);
    assert_int_equal(sc.units_assigned, o.units - st.lost_assignments);
    assert_true(st.capped_units == 0);
    free(b.p);
}

static void test_simulate__time_order(void **state)
{
    (void)state;
    struct sim_opts o;
    small_opts(&o, 3000);
    struct byte_buf b = run(&o, NULL);
    struct scan sc;
    scan(&o, &b, &sc);
    assert_int_equal(sc.out_of_order, 0);
    free(b.p);

    fault(&o, "late:0.1:30m");
    struct sim_stats st;
    b = run(&o, &st);
    scan(&o, &b, &sc);
    assert_true(sc.out_of_order > 0);
    assert_true(sc.out_of_order <= st.late);
    assert_true(sc.max_behind_us <= 30 * 60 * US_PER_SEC);
    assert_binomial("late lines", (double)st.late, (double)st.lines, 0.1);
    free(b.p);
}

static void test_simulate__weights(void **state)
{
    (void)state;
    struct sim_opts o;
    struct err e;
    small_opts(&o, 10000);
    assert_int_equal(sim_set_arms(&o, "control,basket,express", &e), AB_OK);
    assert_int_equal(sim_set_weights(&o, "0.6,0.3,0.1", &e), AB_OK);
    struct sim_stats st;
    struct byte_buf b = run(&o, &st);
    struct scan sc;
    scan(&o, &b, &sc);
    static const double w[3] = {0.6, 0.3, 0.1};
    for (int a = 0; a < 3; a++) {
        assert_int_equal(sc.by_arm[a], st.units_by_arm[a]);
        assert_binomial(o.arms[a], (double)sc.by_arm[a], 10000, w[a]);
    }
    free(b.p);
}

static void test_simulate__self_select_keeps_weights(void **state)
{
    /* the arms keep their weights, but treatment units were more active before */
    (void)state;
    struct sim_opts o;
    small_opts(&o, 8000);
    struct err e;
    assert_int_equal(sim_set_weights(&o, "0.7,0.3", &e), AB_OK);
    fault(&o, "self-select:1");
    struct byte_buf b = run(&o, NULL);
    struct scan sc;
    scan_log(&o, &b, &sc, true);
    assert_binomial("control units", (double)sc.by_arm[0], 8000, 0.7);
    double pre_c = (double)sc.pre_sessions[0] / (double)sc.by_arm[0];
    double pre_t = (double)sc.pre_sessions[1] / (double)sc.by_arm[1];
    if (!(pre_t > 1.5 * pre_c))
        fail_msg("pre-period sessions per unit: treatment %g, control %g", pre_t, pre_c);
    free(b.p);
}

static void test_simulate__fault_counts(void **state)
{
    (void)state;
    struct sim_opts o;
    small_opts(&o, 10000);
    fault(&o, "duplicate:0.02");
    fault(&o, "malformed:0.01");
    fault(&o, "multi-arm:0.03");
    fault(&o, "lose-assign:treatment:0.1");
    struct sim_stats st;
    struct byte_buf b = run(&o, &st);
    struct scan sc;
    scan(&o, &b, &sc);
    /* malformed: each broken kind is rejected for its own reason */
    static const enum reject want[SIM_N_BROKEN] = {REJ_NOT_JSON, REJ_MISSING_FIELD, REJ_BAD_TIME,
                                                   REJ_BAD_TYPE};
    uint64_t broken = 0, rejected = 0;
    for (int k = 0; k < SIM_N_BROKEN; k++) {
        assert_int_equal(sc.rejected[want[k]], st.malformed[k]);
        assert_true(st.malformed[k] > 0);
        broken += st.malformed[k];
    }
    for (int r = 1; r < REJ_COUNT; r++)
        rejected += sc.rejected[r];
    assert_int_equal(rejected, broken);
    double originals = (double)(st.lines - st.duplicates);
    assert_binomial("malformed lines", (double)broken, originals, 0.01);
    /* duplicates: repeated ids */
    assert_int_equal(sc.duplicates, st.duplicates);
    assert_binomial("duplicate lines", (double)st.duplicates, originals - (double)broken, 0.02);
    /* lost assignments: only in treatment */
    assert_int_equal(st.lost_by_arm[0], 0);
    assert_binomial("lost treatment assignments", (double)st.lost_by_arm[1],
                    (double)st.units_by_arm[1], 0.1);
    /* multi-arm units, less those whose assignment was lost or broken */
    assert_binomial("multi-arm units", (double)st.multi_arm_units, 10000, 0.03);
    assert_true(sc.multi_arm <= st.multi_arm_units);
    assert_true((double)sc.multi_arm >= 0.8 * (double)st.multi_arm_units);
    free(b.p);
}

static void test_simulate__from_day(void **state)
{
    /* lose-assign:treatment:1:9: no treatment assignment from day 9 on */
    (void)state;
    struct sim_opts o;
    small_opts(&o, 3000);
    fault(&o, "lose-assign:treatment:1:9");
    struct sim_stats st;
    struct byte_buf b = run(&o, &st);
    struct decoder *d = decoder_new();
    assert_non_null(d);
    int64_t day9 = o.start_us + 8 * US_PER_DAY;
    uint64_t early = 0, late = 0, control_late = 0;
    for (size_t at = 0; at < b.n;) {
        const char *nl = memchr(b.p + at, '\n', b.n - at);
        struct event ev;
        assert_int_equal(decoder_decode(d, b.p + at, (size_t)(nl - (b.p + at)), &ev), REJ_NONE);
        at = (size_t)(nl - b.p) + 1;
        if (ev.kind != EV_ASSIGN)
            continue;
        if (str_eq(ev.arm, "treatment"))
            ev.time_us < day9 ? early++ : late++;
        else if (ev.time_us >= day9)
            control_late++;
    }
    assert_true(early > 0);
    assert_int_equal(late, 0);
    assert_true(control_late > 0);
    assert_int_equal(st.lost_assignments, st.units_by_arm[1] - early);
    decoder_free(d);
    free(b.p);
}

static void test_simulate__order_value_effect(void **state)
{
    /* a +50% effect on order_value: orders after exposure are worth 1.5 times */
    (void)state;
    struct sim_opts o;
    small_opts(&o, 8000);
    o.conversion = 0.3;
    struct err e;
    assert_int_equal(sim_parse_effect(&o, "order_value=0.5", &e), AB_OK);
    struct byte_buf b = run(&o, NULL);
    struct scan sc;
    scan_log(&o, &b, &sc, true);
    double ratio = (sc.order_sum[1] / (double)sc.orders[1]) / (sc.order_sum[0] / (double)sc.orders[0]);
    /* σ = 0.6: CV of an order 0.66; over ~2800 orders an arm, SE of the ratio ~ 2.7% */
    assert_abs_close(ratio, 1.5, 0.1);
    /* conversion unaffected: orders per unit within 10% */
    double opu0 = (double)sc.orders[0] / (double)sc.by_arm[0];
    double opu1 = (double)sc.orders[1] / (double)sc.by_arm[1];
    assert_abs_close(opu1 / opu0, 1.0, 0.1);
    free(b.p);
}

static void test_simulate__config_parses(void **state)
{
    (void)state;
    struct sim_opts o;
    struct err e;
    sim_opts_default(&o);
    assert_int_equal(sim_set_arms(&o, "control,a,b", &e), AB_OK);
    assert_int_equal(sim_set_weights(&o, "2,1,1", &e), AB_OK);
    o.units = 12345;
    o.pre_days = 7;
    size_t need = sim_config_json(&o, NULL, 0);
    char *text = malloc(need + 1);
    assert_non_null(text);
    assert_int_equal(sim_config_json(&o, text, need + 1), need);
    assert_int_equal(strlen(text), need);
    struct config c;
    memset(&c, 0, sizeof c);
    if (config_parse(text, need, "sim.json", &c, &e))
        fail_msg("config_parse: %s\n%s", e.msg, text);
    assert_string_equal(c.experiment, "checkout-2026-11");
    assert_int_equal(c.n_arms, 3);
    assert_string_equal(c.arms[0].name, "control");
    assert_int_equal(c.control, 0);
    assert_rel_close(c.arms[0].weight, 0.5, 1e-15);
    assert_rel_close(c.arms[2].weight, 0.25, 1e-15);
    int64_t start;
    assert_int_equal(time_parse_rfc3339("2026-11-02T00:00:00Z", 20, &start), 0);
    assert_true(c.window_start == start);
    assert_true(c.window_end == start + 14 * US_PER_DAY);
    assert_true(c.has_covariate);
    assert_true(c.pre_us == 7 * US_PER_DAY);
    assert_int_equal(c.n_metrics, 4);
    assert_string_equal(c.metrics[0].name, "order_value");
    assert_true(c.metrics[0].has_window && c.metrics[0].window_us == 168 * US_PER_HOUR);
    assert_int_equal(c.metrics[1].type, MT_BINARY);
    assert_int_equal(c.metrics[2].type, MT_RATIO);
    assert_string_equal(c.metrics[2].denominator, "sessions");
    assert_int_equal(c.metrics[3].role, ROLE_GUARDRAIL);
    assert_int_equal(c.metrics[3].better, -1);
    assert_rel_close(c.alpha, 0.05, 1e-15);
    assert_rel_close(c.srm_threshold, 0.001, 1e-15);
    assert_int_equal(c.seq.method, SEQ_SPENDING);
    assert_rel_close(c.seq.planned_units, 12345, 1e-15);
    config_release(&c);
    /* a short buffer gets a NUL-terminated prefix and the full length */
    char small[16];
    assert_int_equal(sim_config_json(&o, small, sizeof small), need);
    assert_int_equal(strlen(small), sizeof small - 1);
    free(text);
}

static void test_simulate__option_errors(void **state)
{
    (void)state;
    static const char *const bad_faults[] = {
        "", "melt:0.1", "duplicate", "duplicate:x", "duplicate:1.5", "duplicate:-0.1",
        "duplicate:0.1:0", "duplicate:0.1:15", "duplicate:0.1:9:1", "lose-assign:0.1",
        "lose-assign:nobody:0.1", "late:0.1", "late:0.1:0s", "late:0.1:25h", "late:0.1:soon",
        "self-select:x", "self-select:1000", "multi-arm:0.1:1.5",
    };
    static const char *const bad_effects[] = {
        "order_value", "=0.1", "basket=0.1", "order_value=-1", "order_value=x",
        "control:order_value=0.1", "nobody:converted=0.1", "order_value=1e300",
    };
    struct sim_opts o;
    struct err e;
    for (size_t i = 0; i < sizeof bad_faults / sizeof *bad_faults; i++) {
        sim_opts_default(&o);
        err_clear(&e);
        if (sim_parse_fault(&o, bad_faults[i], &e) != AB_EUSAGE || !e.msg[0])
            fail_msg("fault '%s' was accepted", bad_faults[i]);
    }
    for (size_t i = 0; i < sizeof bad_effects / sizeof *bad_effects; i++) {
        sim_opts_default(&o);
        err_clear(&e);
        if (sim_parse_effect(&o, bad_effects[i], &e) != AB_EUSAGE || !e.msg[0])
            fail_msg("effect '%s' was accepted", bad_effects[i]);
    }
    sim_opts_default(&o);
    assert_int_equal(sim_set_arms(&o, "solo", &e), AB_EUSAGE);
    assert_int_equal(sim_set_arms(&o, "a,,b", &e), AB_EUSAGE);
    assert_int_equal(sim_set_arms(&o, "a,b,a", &e), AB_EUSAGE);
    assert_int_equal(sim_set_arms(&o, "a,b c", &e), AB_EUSAGE);
    assert_int_equal(sim_set_weights(&o, "1", &e), AB_EUSAGE);
    assert_int_equal(sim_set_weights(&o, "1,0", &e), AB_EUSAGE);
    assert_int_equal(sim_set_weights(&o, "1,x", &e), AB_EUSAGE);
    /* a fault given twice; lose-assign once per arm */
    assert_int_equal(sim_parse_fault(&o, "duplicate:0.1", &e), AB_OK);
    assert_int_equal(sim_parse_fault(&o, "duplicate:0.2", &e), AB_EUSAGE);
    assert_int_equal(sim_parse_fault(&o, "lose-assign:control:0.1", &e), AB_OK);
    assert_int_equal(sim_parse_fault(&o, "lose-assign:treatment:0.1:14", &e), AB_OK);
    assert_int_equal(sim_parse_fault(&o, "lose-assign:treatment:0.2", &e), AB_EUSAGE);
    assert_int_equal(o.lose[1].from_day, 14);
    /* good specs set the fields */
    assert_int_equal(sim_parse_fault(&o, "late:0.25:90s:3", &e), AB_OK);
    assert_true(o.fault[SIM_F_LATE].on);
    assert_rel_close(o.fault[SIM_F_LATE].amount, 0.25, 0);
    assert_true(o.fault[SIM_F_LATE].max_delay_us == 90 * US_PER_SEC);
    assert_int_equal(o.fault[SIM_F_LATE].from_day, 3);
    assert_int_equal(sim_parse_effect(&o, "treatment:converted=0.1", &e), AB_OK);
    assert_rel_close(o.effect[1][SIM_M_CONVERTED], 0.1, 0);
    /* conversion pushed above 1 is refused by sim_validate (and by sim_run) */
    assert_int_equal(sim_parse_effect(&o, "converted=20", &e), AB_OK);
    assert_int_equal(sim_validate(&o, &e), AB_EUSAGE);
    assert_int_equal(sim_run(&o, refusing_sink, NULL, NULL, &e), AB_EUSAGE);
    sim_opts_default(&o);
    o.units = 0;
    assert_int_equal(sim_validate(&o, &e), AB_EUSAGE);
}

static void test_simulate__sink_refusal(void **state)
{
    (void)state;
    struct sim_opts o;
    small_opts(&o, 200);
    struct err e;
    err_clear(&e);
    assert_int_equal(sim_run(&o, refusing_sink, NULL, NULL, &e), AB_EINPUT);
    assert_non_null(strstr(e.msg, "write failed"));
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_simulate__same_seed_same_bytes),
        cmocka_unit_test(test_simulate__faults_keep_the_events),
        cmocka_unit_test(test_simulate__schema_without_malformed_fault),
        cmocka_unit_test(test_simulate__time_order),
        cmocka_unit_test(test_simulate__weights),
        cmocka_unit_test(test_simulate__self_select_keeps_weights),
        cmocka_unit_test(test_simulate__fault_counts),
        cmocka_unit_test(test_simulate__from_day),
        cmocka_unit_test(test_simulate__order_value_effect),
        cmocka_unit_test(test_simulate__config_parses),
        cmocka_unit_test(test_simulate__option_errors),
        cmocka_unit_test(test_simulate__sink_refusal),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
