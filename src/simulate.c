/*
 * simulate.c — the event-log generator of `abtally simulate` (see simulate.h
 * for the model, the faults and the contract).
 *
 * How a run works: every unit is generated in turn (its arrival, platform,
 * activity λ, arm, pre-period and post-exposure sessions with their orders
 * and page errors). Each line becomes a 24-byte record (no text yet) filed
 * under the hour in which it will be written: its event time, plus the delay
 * of a late or repeated line. A unit's events are numbered in the order they
 * are generated, and units come in order, so each hour holds its records in
 * (unit, sequence, repeat) order. Then the hours are taken in order: each
 * one's records are sorted stably by write time (a radix sort), which gives
 * the total order (write time, unit, sequence, repeat), formatted into a
 * 1 MiB buffer and handed to the sink; the hour's memory is freed as it goes.
 *
 * Invariants: the model draws from one stream and never from a fault's; a
 * fault draws only from its own stream, in unit order. No line is written
 * before its event time; a line is late only by the late fault's delay plus,
 * for a repeat, at most one minute.
 *
 * Never: no I/O (the sink does it), no allocation per event (records go into
 * blocks of BLOCK_RECS), no exit.
 */
#include "simulate.h"

#include <errno.h>
#include <math.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include <gsl/gsl_cdf.h>
#include <gsl/gsl_randist.h>
#include <gsl/gsl_rng.h>

#include "timefmt.h"

#define MS_PER_MIN INT64_C(60000)
#define MS_PER_HOUR INT64_C(3600000)
#define MS_PER_DAY INT64_C(86400000)
#define BUCKET_MS MS_PER_HOUR      /* records are filed by the hour they are written in */
#define BLOCK_RECS 2048            /* records per allocation */
#define SEQ_CAP 65000              /* events per unit at most (ids stay 16-bit) */
#define OUT_BUF (1u << 20)         /* bytes handed to the sink at a time */
#define LINE_MAX_BYTES 512         /* a line never exceeds this */
#define DUP_DELAY_MS MS_PER_MIN    /* a repeat follows its line within this */
#define ORDER_DELAY_MIN (2 * MS_PER_MIN)  /* an order comes 2..40 minutes into a session */
#define ORDER_DELAY_SPAN (38 * MS_PER_MIN)
#define ERROR_DELAY_SPAN (15 * MS_PER_MIN) /* page errors in the first 15 minutes */

enum rec_kind { K_ASSIGN = 0, K_SESSION, K_ORDER, K_ERROR };
enum { FLAG_DUP = 1 }; /* bits 1..3 of flags: broken kind + 1 (0: intact) */

/* One line to write. */
struct rec {
    int64_t emit_ms;  /* when the line is written (event time + late_ms) */
    uint32_t unit;    /* unit index (printed as index + 1) */
    uint32_t value;   /* order: cents; assignment: arm | platform << 8 */
    uint32_t late_ms; /* how far the line is written after its time */
    uint16_t seq;     /* the event's number within its unit, in generation order */
    uint8_t kind;     /* enum rec_kind */
    uint8_t flags;    /* FLAG_DUP | (broken kind + 1) << 1 */
};
_Static_assert(sizeof(struct rec) == 24, "records are 24 bytes");

struct block {
    struct block *next;
    uint32_t n;
    struct rec r[BLOCK_RECS];
};

struct bucket {
    struct block *head, *tail;
    size_t n;
};

static const char *const platforms[3] = {"ios", "android", "web"};
static const char *const metric_names[SIM_N_METRICS] = {"order_value", "converted", "page_error",
                                                        "sessions"};
static const char *const fault_names[SIM_N_FAULTS] = {"lose-assign", "multi-arm", "duplicate",
                                                      "malformed",   "late",      "self-select"};
static const char *const broken_names[SIM_N_BROKEN] = {"not_json", "missing_field", "bad_time",
                                                       "bad_type"};

const char *sim_fault_name(int k) { return k >= 0 && k < SIM_N_FAULTS ? fault_names[k] : "?"; }
const char *sim_metric_name(int m) { return m >= 0 && m < SIM_N_METRICS ? metric_names[m] : "?"; }
const char *sim_broken_name(int b) { return b >= 0 && b < SIM_N_BROKEN ? broken_names[b] : "?"; }

/* ------------------------------------------------------------------ options */

void sim_opts_default(struct sim_opts *o)
{
    memset(o, 0, sizeof *o);
    o->units = 20000;
    o->days = 14;
    o->pre_days = 14;
    (void)time_parse_rfc3339("2026-11-02T00:00:00Z", 20, &o->start_us);
    o->experiment[0] = 0; /* empty: "checkout-YYYY-MM" of the start */
    o->n_arms = 2;
    strcpy(o->arms[0], "control");
    strcpy(o->arms[1], "treatment");
    o->weights[0] = o->weights[1] = 0.5;
    o->seed = 1;
    o->sessions_per_day = 0.3;
    o->activity_shape = 0.5;
    o->conversion = 0.06;
    o->order_value = 45.0;
    o->order_sigma = 0.6;
    o->errors_per_session = 0.04;
}

static bool is_name_char(char c)
{
    return (c >= 'a' && c <= 'z') || (c >= 'A' && c <= 'Z') || (c >= '0' && c <= '9') || c == '_' ||
           c == '-' || c == '.';
}

/* The arm named s[0..n), or -1. */
static int arm_index(const struct sim_opts *o, const char *s, size_t n)
{
    for (int a = 0; a < o->n_arms; a++)
        if (strlen(o->arms[a]) == n && !memcmp(o->arms[a], s, n))
            return a;
    return -1;
}

/* Parses a whole number in [lo, hi] from s[0..n). */
static int parse_uint(const char *s, size_t n, uint64_t lo, uint64_t hi, uint64_t *out)
{
    char buf[32];
    if (n == 0 || n >= sizeof buf || s[0] < '0' || s[0] > '9')
        return -1;
    memcpy(buf, s, n);
    buf[n] = 0;
    char *end;
    errno = 0;
    unsigned long long v = strtoull(buf, &end, 10);
    if (*end || errno || v < lo || v > hi)
        return -1;
    *out = v;
    return 0;
}

/* Parses a finite number from s[0..n). */
static int parse_num(const char *s, size_t n, double *out)
{
    char buf[64];
    if (n == 0 || n >= sizeof buf)
        return -1;
    memcpy(buf, s, n);
    buf[n] = 0;
    char *end;
    errno = 0;
    double v = strtod(buf, &end);
    if (end == buf || *end || errno || !isfinite(v))
        return -1;
    *out = v;
    return 0;
}

int sim_set_arms(struct sim_opts *o, const char *list, struct err *e)
{
    struct sim_opts t = *o;
    t.n_arms = 0;
    const char *p = list;
    for (;;) {
        const char *comma = strchr(p, ',');
        size_t n = comma ? (size_t)(comma - p) : strlen(p);
        if (n == 0 || n >= SIM_NAME_MAX)
            return err_set(e, AB_EUSAGE, "--arms '%s': names must be 1 to %d characters", list,
                           SIM_NAME_MAX - 1);
        for (size_t i = 0; i < n; i++)
            if (!is_name_char(p[i]))
                return err_set(e, AB_EUSAGE,
                               "--arms '%s': names may hold only letters, digits, '_', '-' and '.'",
                               list);
        if (arm_index(&t, p, n) >= 0)
            return err_set(e, AB_EUSAGE, "--arms '%s': arm '%.*s' is named twice", list, (int)n, p);
        if (t.n_arms == SIM_MAX_ARMS)
            return err_set(e, AB_EUSAGE, "--arms '%s': at most %d arms", list, SIM_MAX_ARMS);
        memcpy(t.arms[t.n_arms], p, n);
        t.arms[t.n_arms][n] = 0;
        t.n_arms++;
        if (!comma)
            break;
        p = comma + 1;
    }
    if (t.n_arms < 2)
        return err_set(e, AB_EUSAGE, "--arms '%s': at least two arms (the first is the control)",
                       list);
    for (int a = 0; a < t.n_arms; a++)
        t.weights[a] = 1.0 / t.n_arms;
    memset(t.effect, 0, sizeof t.effect);
    memset(t.lose, 0, sizeof t.lose);
    *o = t;
    return AB_OK;
}

int sim_set_weights(struct sim_opts *o, const char *list, struct err *e)
{
    double w[SIM_MAX_ARMS];
    int n = 0;
    const char *p = list;
    for (;;) {
        const char *comma = strchr(p, ',');
        size_t len = comma ? (size_t)(comma - p) : strlen(p);
        double v;
        if (n == SIM_MAX_ARMS || parse_num(p, len, &v) || !(v > 0))
            return err_set(e, AB_EUSAGE, "--weights '%s': expected positive numbers, one per arm",
                           list);
        w[n++] = v;
        if (!comma)
            break;
        p = comma + 1;
    }
    if (n != o->n_arms)
        return err_set(e, AB_EUSAGE, "--weights '%s': %d weights for %d arms", list, n, o->n_arms);
    memcpy(o->weights, w, sizeof(double) * (size_t)n);
    return AB_OK;
}

int sim_parse_effect(struct sim_opts *o, const char *spec, struct err *e)
{
    const char *eq = strchr(spec, '=');
    if (!eq)
        return err_set(e, AB_EUSAGE, "--effect '%s': expected [ARM:]METRIC=REL, e.g. order_value=0.03",
                       spec);
    const char *colon = memchr(spec, ':', (size_t)(eq - spec));
    int arm = -1;
    const char *m = spec;
    if (colon) {
        arm = arm_index(o, spec, (size_t)(colon - spec));
        if (arm < 0)
            return err_set(e, AB_EUSAGE, "--effect '%s': no arm '%.*s'", spec, (int)(colon - spec),
                           spec);
        if (arm == 0)
            return err_set(e, AB_EUSAGE, "--effect '%s': '%s' is the control arm", spec, o->arms[0]);
        m = colon + 1;
    }
    size_t mn = (size_t)(eq - m);
    int metric = -1;
    for (int k = 0; k < SIM_N_METRICS; k++)
        if (strlen(metric_names[k]) == mn && !memcmp(metric_names[k], m, mn))
            metric = k;
    if (metric < 0)
        return err_set(e, AB_EUSAGE,
                       "--effect '%s': unknown metric '%.*s' (order_value, converted, page_error, "
                       "sessions)",
                       spec, (int)mn, m);
    double rel;
    if (parse_num(eq + 1, strlen(eq + 1), &rel) || rel <= -1 || rel > 100)
        return err_set(e, AB_EUSAGE,
                       "--effect '%s': the relative effect must be a number above -1 and at most 100",
                       spec);
    for (int a = 1; a < o->n_arms; a++)
        if (arm < 0 || a == arm)
            o->effect[a][metric] = rel;
    return AB_OK;
}

/* Splits s at ':' into at most max fields. Returns the count, or -1 when more. */
static int split_fields(const char *s, const char **f, size_t *len, int max)
{
    int n = 0;
    for (;;) {
        if (n == max)
            return -1;
        const char *c = strchr(s, ':');
        f[n] = s;
        len[n] = c ? (size_t)(c - s) : strlen(s);
        n++;
        if (!c)
            return n;
        s = c + 1;
    }
}

int sim_parse_fault(struct sim_opts *o, const char *spec, struct err *e)
{
    static const char *const syntax[SIM_N_FAULTS] = {
        "lose-assign:ARM:FRACTION[:FROM_DAY]", "multi-arm:FRACTION[:FROM_DAY]",
        "duplicate:FRACTION[:FROM_DAY]",       "malformed:FRACTION[:FROM_DAY]",
        "late:FRACTION:MAXDELAY[:FROM_DAY]",   "self-select:STRENGTH[:FROM_DAY]"};
    const char *f[6];
    size_t len[6];
    int n = split_fields(spec, f, len, 6);
    int kind = -1;
    for (int k = 0; n > 0 && k < SIM_N_FAULTS; k++)
        if (strlen(fault_names[k]) == len[0] && !memcmp(fault_names[k], f[0], len[0]))
            kind = k;
    if (kind < 0)
        return err_set(e, AB_EUSAGE,
                       "--fault '%s': unknown fault (lose-assign, multi-arm, duplicate, malformed, "
                       "late, self-select)",
                       spec);
    /* fields after the kind: [ARM] AMOUNT [MAXDELAY] [FROM_DAY] */
    int need = 2 + (kind == SIM_F_LOSE_ASSIGN) + (kind == SIM_F_LATE);
    if (n < need || n > need + 1)
        return err_set(e, AB_EUSAGE, "--fault '%s': expected %s", spec, syntax[kind]);
    struct sim_fault x = {.on = true, .from_day = 0};
    int i = 1, arm = -1;
    if (kind == SIM_F_LOSE_ASSIGN) {
        arm = arm_index(o, f[i], len[i]);
        if (arm < 0)
            return err_set(e, AB_EUSAGE, "--fault '%s': no arm '%.*s' (arms come from --arms)", spec,
                           (int)len[i], f[i]);
        i++;
    }
    if (parse_num(f[i], len[i], &x.amount))
        return err_set(e, AB_EUSAGE, "--fault '%s': '%.*s' is not a number (expected %s)", spec,
                       (int)len[i], f[i], syntax[kind]);
    if (kind == SIM_F_SELF_SELECT) {
        if (fabs(x.amount) > 100)
            return err_set(e, AB_EUSAGE, "--fault '%s': the strength must be within [-100, 100]",
                           spec);
    } else if (x.amount < 0 || x.amount > 1) {
        return err_set(e, AB_EUSAGE, "--fault '%s': the fraction must be within [0, 1]", spec);
    }
    i++;
    if (kind == SIM_F_LATE) {
        char buf[32];
        if (len[i] == 0 || len[i] >= sizeof buf)
            return err_set(e, AB_EUSAGE, "--fault '%s': expected %s", spec, syntax[kind]);
        memcpy(buf, f[i], len[i]);
        buf[len[i]] = 0;
        if (duration_parse(buf, &x.max_delay_us) || x.max_delay_us < 1000 ||
            x.max_delay_us > SIM_MAX_LATE_US)
            return err_set(e, AB_EUSAGE,
                           "--fault '%s': MAXDELAY '%s' must be a duration from 1ms to 24h, "
                           "e.g. 30m",
                           spec, buf);
        i++;
    }
    if (i < n) {
        uint64_t d;
        if (parse_uint(f[i], len[i], 1, (uint64_t)o->days, &d))
            return err_set(e, AB_EUSAGE, "--fault '%s': FROM_DAY '%.*s' must be a day from 1 to %d",
                           spec, (int)len[i], f[i], o->days);
        x.from_day = (int)d;
    }
    struct sim_fault *dst = kind == SIM_F_LOSE_ASSIGN ? &o->lose[arm] : &o->fault[kind];
    if (dst->on)
        return err_set(e, AB_EUSAGE, "--fault '%s': %s given twice%s%s", spec, fault_names[kind],
                       arm >= 0 ? " for arm " : "", arm >= 0 ? o->arms[arm] : "");
    *dst = x;
    return AB_OK;
}

int sim_validate(const struct sim_opts *o, struct err *e)
{
    if (o->units < 1 || o->units > SIM_MAX_UNITS)
        return err_set(e, AB_EUSAGE, "--units must be from 1 to %llu",
                       (unsigned long long)SIM_MAX_UNITS);
    if (o->days < 1 || o->days > SIM_MAX_DAYS)
        return err_set(e, AB_EUSAGE, "--days must be from 1 to %d", SIM_MAX_DAYS);
    if (o->pre_days < 0 || o->pre_days > SIM_MAX_DAYS)
        return err_set(e, AB_EUSAGE, "--pre-days must be from 0 to %d", SIM_MAX_DAYS);
    int64_t first = o->start_us - (int64_t)o->pre_days * US_PER_DAY;
    int64_t last = o->start_us + (int64_t)o->days * US_PER_DAY + SIM_MAX_LATE_US;
    if (first < TIME_MIN_US || last > TIME_MAX_US || o->start_us % 1000)
        return err_set(e, AB_EUSAGE, "--start: the log must fall within the years 1900 to 9999");
    if (o->n_arms < 2 || o->n_arms > SIM_MAX_ARMS)
        return err_set(e, AB_EUSAGE, "--arms: from 2 to %d arms", SIM_MAX_ARMS);
    for (int a = 0; a < o->n_arms; a++)
        if (!(o->weights[a] > 0) || !isfinite(o->weights[a]))
            return err_set(e, AB_EUSAGE, "--weights: weights must be positive");
    for (size_t i = 0; o->experiment[i]; i++)
        if (!is_name_char(o->experiment[i]))
            return err_set(e, AB_EUSAGE,
                           "--experiment: the name may hold only letters, digits, '_', '-' and '.'");
    if (!(o->sessions_per_day > 0 && o->sessions_per_day <= 1000))
        return err_set(e, AB_EUSAGE, "--sessions-per-day must be above 0 and at most 1000");
    if (!(o->activity_shape >= 0.01 && o->activity_shape <= 1000))
        return err_set(e, AB_EUSAGE, "--activity-shape must be from 0.01 to 1000");
    if (!(o->conversion >= 0 && o->conversion <= 1))
        return err_set(e, AB_EUSAGE, "--conversion must be within [0, 1]");
    if (!(o->order_value > 0 && o->order_value <= 1e6))
        return err_set(e, AB_EUSAGE, "--order-value must be above 0 and at most 1e6");
    if (!(o->order_sigma >= 0 && o->order_sigma <= 3))
        return err_set(e, AB_EUSAGE, "--order-sigma must be within [0, 3]");
    if (!(o->errors_per_session >= 0 && o->errors_per_session <= 100))
        return err_set(e, AB_EUSAGE, "--errors-per-session must be within [0, 100]");
    for (int a = 1; a < o->n_arms; a++) {
        for (int m = 0; m < SIM_N_METRICS; m++)
            if (!(o->effect[a][m] > -1 && o->effect[a][m] <= 100))
                return err_set(e, AB_EUSAGE, "--effect: relative effects must be above -1");
        if (o->conversion * (1 + o->effect[a][SIM_M_CONVERTED]) > 1)
            return err_set(e, AB_EUSAGE,
                           "--effect: conversion %g times (1 + %g) is above 1 for arm '%s'",
                           o->conversion, o->effect[a][SIM_M_CONVERTED], o->arms[a]);
        if (o->errors_per_session * (1 + o->effect[a][SIM_M_PAGE_ERROR]) > 100)
            return err_set(e, AB_EUSAGE, "--effect: page errors per session above 100");
    }
    for (int k = 0; k < SIM_N_FAULTS; k++) {
        const struct sim_fault *f = &o->fault[k];
        if (f->on && (f->from_day < 0 || f->from_day > o->days))
            return err_set(e, AB_EUSAGE, "--fault %s: FROM_DAY must be a day from 1 to %d",
                           fault_names[k], o->days);
    }
    for (int a = 0; a < o->n_arms; a++)
        if (o->lose[a].on && (o->lose[a].from_day < 0 || o->lose[a].from_day > o->days))
            return err_set(e, AB_EUSAGE, "--fault lose-assign: FROM_DAY must be a day from 1 to %d",
                           o->days);
    if (o->fault[SIM_F_LATE].on && (o->fault[SIM_F_LATE].max_delay_us < 1000 ||
                                    o->fault[SIM_F_LATE].max_delay_us > SIM_MAX_LATE_US))
        return err_set(e, AB_EUSAGE, "--fault late: MAXDELAY must be from 1ms to 24h");
    return AB_OK;
}

/* The experiment name: given, or "checkout-YYYY-MM" of the start. */
static void experiment_name(const struct sim_opts *o, char *buf, size_t n)
{
    if (o->experiment[0]) {
        snprintf(buf, n, "%s", o->experiment);
        return;
    }
    char t[40];
    time_format(o->start_us, t, sizeof t);
    snprintf(buf, n, "checkout-%.7s", t);
}

/* ------------------------------------------------------------- the config */

struct sbuf {
    char *p;
    size_t n, len;
};

static void sb_add(struct sbuf *b, const char *fmt, ...) __attribute__((format(printf, 2, 3)));
static void sb_add(struct sbuf *b, const char *fmt, ...)
{
    va_list ap;
    va_start(ap, fmt);
    int k = vsnprintf(b->len < b->n ? b->p + b->len : NULL, b->len < b->n ? b->n - b->len : 0, fmt,
                      ap);
    va_end(ap);
    if (k > 0)
        b->len += (size_t)k;
}

size_t sim_config_json(const struct sim_opts *o, char *buf, size_t n)
{
    struct sbuf b = {buf, n, 0};
    char name[SIM_NAME_MAX + 16], start[40], end[40];
    experiment_name(o, name, sizeof name);
    time_format(o->start_us, start, sizeof start);
    time_format(o->start_us + (int64_t)o->days * US_PER_DAY, end, sizeof end);
    if (n)
        buf[0] = 0;
    sb_add(&b, "{\n  \"experiment\": \"%s\",\n  \"arms\": [", name);
    for (int a = 0; a < o->n_arms; a++)
        sb_add(&b, "%s{\"name\": \"%s\", \"weight\": %.17g}", a ? ", " : "", o->arms[a],
               o->weights[a]);
    sb_add(&b,
           "],\n  \"control\": \"%s\",\n"
           "  \"window\": {\"start\": \"%s\", \"end\": \"%s\"},\n"
           "  \"metrics\": [\n"
           "    {\"name\": \"order_value\", \"type\": \"mean\", \"event\": \"order_value\", "
           "\"attribution_hours\": 168},\n"
           "    {\"name\": \"converted\", \"type\": \"binary\", \"event\": \"order_value\"},\n"
           "    {\"name\": \"value_per_session\", \"type\": \"ratio\", \"numerator\": "
           "\"order_value\", \"denominator\": \"sessions\"},\n"
           "    {\"name\": \"page_errors\", \"type\": \"mean\", \"event\": \"page_error\", "
           "\"role\": \"guardrail\", \"better\": \"lower\"}\n"
           "  ],\n",
           o->arms[0], start, end);
    if (o->pre_days > 0)
        sb_add(&b, "  \"covariate\": {\"pre_days\": %d},\n", o->pre_days);
    sb_add(&b,
           "  \"alpha\": 0.05,\n"
           "  \"srm\": {\"threshold\": 0.001},\n"
           "  \"sequential\": {\"method\": \"spending\", \"shape\": \"obf\", \"planned_units\": %llu}\n"
           "}\n",
           (unsigned long long)o->units);
    return b.len;
}

/* -------------------------------------------------------------- generator */

struct gen {
    const struct sim_opts *o;
    struct sim_stats *st;
    gsl_rng *model;                 /* the model's stream */
    gsl_rng *frng[SIM_N_FAULTS];    /* one stream per fault */
    double w[SIM_MAX_ARMS];         /* normalized weights */
    int64_t start_ms, end_ms;       /* the window */
    int64_t base_ms;                /* start of the first bucket and of the first day prefix */
    int64_t pre_ms;                 /* pre-period length */
    int64_t late_max_ms;            /* the late fault's largest delay */
    double gamma_scale;             /* λ ~ Gamma(shape, scale) */
    double zeta[SIM_MAX_ARMS];      /* lognormal ζ of an order's value, per arm */
    double conv[SIM_MAX_ARMS];      /* conversion per session, per arm */
    double errs[SIM_MAX_ARMS];      /* page errors per session, per arm */
    double act[SIM_MAX_ARMS];       /* post-exposure activity multiplier, per arm */
    double ss_intercept;            /* self-select: probit intercept that keeps the weights */
    struct bucket *b;
    size_t nb;
    bool oom;
    uint16_t seq_cap;               /* events of the current phase of a unit stop here */
    /* output */
    char *out;
    size_t used;
    sim_sink sink;
    void *ctx;
    bool refused;
    char (*day)[12];                /* "YYYY-MM-DDT" of each day from base_ms */
    char (*dmy)[12];                /* "DD/MM/YYYY " of each day (the bad-time lines) */
    size_t n_days;
    char exp[SIM_NAME_MAX + 16];
    size_t exp_len;
};

/* splitmix64: derives independent 32-bit stream seeds from the user's seed. */
static unsigned long derive_seed(uint64_t seed, unsigned stream)
{
    uint64_t z = seed + 0x9e3779b97f4a7c15ULL * (stream + 1);
    z = (z ^ (z >> 30)) * 0xbf58476d1ce4e5b9ULL;
    z = (z ^ (z >> 27)) * 0x94d049bb133111ebULL;
    z ^= z >> 31;
    unsigned long s = (unsigned long)(z & 0xffffffffu);
    return s ? s : 1;
}

static void push(struct gen *g, const struct rec *r)
{
    size_t h = (size_t)((r->emit_ms - g->base_ms) / BUCKET_MS);
    if (h >= g->nb)
        h = g->nb - 1; /* cannot happen: nb covers every write time */
    struct bucket *bk = &g->b[h];
    if (!bk->tail || bk->tail->n == BLOCK_RECS) {
        struct block *nb = malloc(sizeof *nb);
        if (!nb) {
            g->oom = true;
            return;
        }
        nb->next = NULL;
        nb->n = 0;
        if (bk->tail)
            bk->tail->next = nb;
        else
            bk->head = nb;
        bk->tail = nb;
    }
    bk->tail->r[bk->tail->n++] = *r;
    bk->n++;
}

/* The 1-based experiment day of a time (0 or less: before the start). */
static int day_of(const struct gen *g, int64_t ms)
{
    int64_t d = ms - g->start_ms;
    return (int)((d >= 0 ? d / MS_PER_DAY : -((-d + MS_PER_DAY - 1) / MS_PER_DAY)) + 1);
}

/* Does fault f pick this line or unit? Draws from the fault's stream only when
 * the fault is on and acts on that day. */
static bool picks(struct gen *g, const struct sim_fault *f, int kind, int day)
{
    return f->on && (f->from_day == 0 || day >= f->from_day) && f->amount > 0 &&
           gsl_rng_uniform(g->frng[kind]) < f->amount;
}

/* Files one line, applying the line faults: malformed, late, duplicate. */
static void add_line(struct gen *g, struct rec r)
{
    const struct sim_opts *o = g->o;
    int day = day_of(g, r.emit_ms);
    if (picks(g, &o->fault[SIM_F_MALFORMED], SIM_F_MALFORMED, day)) {
        unsigned k = (unsigned)gsl_rng_uniform_int(g->frng[SIM_F_MALFORMED], SIM_N_BROKEN);
        r.flags = (uint8_t)((k + 1) << 1);
        g->st->malformed[k]++;
        push(g, &r);
        return;
    }
    if (r.kind == K_ASSIGN)
        g->st->assignments++;
    else
        g->st->outcomes++;
    if (picks(g, &o->fault[SIM_F_LATE], SIM_F_LATE, day)) {
        uint32_t d = 1 + (uint32_t)gsl_rng_uniform_int(g->frng[SIM_F_LATE],
                                                       (unsigned long)g->late_max_ms);
        r.emit_ms += d;
        r.late_ms = d;
        g->st->late++;
    }
    push(g, &r);
    if (picks(g, &o->fault[SIM_F_DUPLICATE], SIM_F_DUPLICATE, day)) {
        uint32_t d = (uint32_t)gsl_rng_uniform_int(g->frng[SIM_F_DUPLICATE], DUP_DELAY_MS + 1);
        r.emit_ms += d;
        r.late_ms += d;
        r.flags |= FLAG_DUP;
        g->st->duplicates++;
        push(g, &r);
    }
}

static void add_event(struct gen *g, uint32_t unit, uint16_t *seq, int kind, int64_t t,
                      uint32_t value)
{
    if (*seq >= g->seq_cap)
        return;
    struct rec r = {.emit_ms = t, .unit = unit, .value = value, .seq = (*seq)++,
                    .kind = (uint8_t)kind};
    add_line(g, r);
}

/* One session at time t with its order and page errors; only events before
 * limit are kept, but every draw is made, so the stream does not depend on it. */
static void session(struct gen *g, uint32_t unit, uint16_t *seq, int64_t t, int64_t limit,
                    double conv, double zeta, double errs)
{
    gsl_rng *m = g->model;
    if (t < limit)
        add_event(g, unit, seq, K_SESSION, t, 0);
    if (gsl_rng_uniform(m) < conv) {
        int64_t ot = t + ORDER_DELAY_MIN + (int64_t)(gsl_rng_uniform(m) * (double)ORDER_DELAY_SPAN);
        double v = gsl_ran_lognormal(m, zeta, g->o->order_sigma) * 100.0;
        double cents = v < 1 ? 1 : v > 4e9 ? 4e9 : floor(v + 0.5);
        if (ot < limit)
            add_event(g, unit, seq, K_ORDER, ot, (uint32_t)cents);
    }
    unsigned ne = errs > 0 ? gsl_ran_poisson(m, errs) : 0;
    for (unsigned k = 0; k < ne; k++) {
        int64_t et = t + (int64_t)(gsl_rng_uniform(m) * (double)ERROR_DELAY_SPAN);
        if (et < limit)
            add_event(g, unit, seq, K_ERROR, et, 0);
    }
}

/* The unit's arm from the uniform u: by the weights, or with self-selection
 * by a probit model in which the chance of leaving the control rises with the
 * normal score z of λ, with an intercept that keeps the marginal weights. */
static int pick_arm(struct gen *g, double u, double lambda, int day)
{
    const struct sim_opts *o = g->o;
    const struct sim_fault *f = &o->fault[SIM_F_SELF_SELECT];
    int n = o->n_arms;
    if (f->on && (f->from_day == 0 || day >= f->from_day) && f->amount != 0) {
        double q = 1 - g->w[0];
        double c = gsl_cdf_gamma_P(lambda, o->activity_shape, g->gamma_scale);
        c = c < 1e-12 ? 1e-12 : c > 1 - 1e-12 ? 1 - 1e-12 : c;
        double z = gsl_cdf_ugaussian_Pinv(c);
        double pnc = gsl_cdf_ugaussian_P(g->ss_intercept + f->amount * z);
        if (!(u < pnc))
            return 0;
        double v = u / pnc * q, acc = 0;
        for (int a = 1; a < n; a++) {
            acc += g->w[a];
            if (v < acc)
                return a;
        }
        return n - 1;
    }
    double acc = 0;
    for (int a = 0; a < n; a++) {
        acc += g->w[a];
        if (u < acc)
            return a;
    }
    return n - 1;
}

static void gen_unit(struct gen *g, uint32_t i)
{
    const struct sim_opts *o = g->o;
    gsl_rng *m = g->model;
    int64_t span = g->end_ms - g->start_ms;
    int64_t arrival = g->start_ms + (int64_t)(gsl_rng_uniform(m) * (double)span);
    if (arrival >= g->end_ms)
        arrival = g->end_ms - 1;
    unsigned pu = (unsigned)gsl_rng_uniform_int(m, 100);
    unsigned platform = pu < 35 ? 0 : pu < 65 ? 1 : 2;
    double lambda = gsl_ran_gamma(m, o->activity_shape, g->gamma_scale);
    double u = gsl_rng_uniform(m);
    int day = day_of(g, arrival);
    int arm = pick_arm(g, u, lambda, day);
    g->st->units_by_arm[arm]++;
    uint16_t seq = 0;

    /* the pre-period: the same λ, no treatment (at most half the events) */
    g->seq_cap = SEQ_CAP / 2;
    if (g->pre_ms > 0) {
        unsigned n = gsl_ran_poisson(m, lambda * o->pre_days);
        for (unsigned k = 0; k < n; k++) {
            int64_t t = arrival - g->pre_ms + (int64_t)(gsl_rng_uniform(m) * (double)g->pre_ms);
            if (t >= arrival)
                t = arrival - 1;
            session(g, i, &seq, t, arrival, g->conv[0], g->zeta[0], g->errs[0]);
        }
    }

    /* the assignment (first exposure), unless the lose-assign fault drops it */
    uint32_t av = (uint32_t)arm | platform << 8;
    uint16_t aseq = seq++;
    if (picks(g, &o->lose[arm], SIM_F_LOSE_ASSIGN, day)) {
        g->st->lost_assignments++;
        g->st->lost_by_arm[arm]++;
    } else {
        add_line(g, (struct rec){.emit_ms = arrival, .unit = i, .value = av, .seq = aseq,
                                 .kind = K_ASSIGN});
    }
    g->seq_cap = SEQ_CAP;

    /* sessions from exposure to the end of the window */
    session(g, i, &seq, arrival, g->end_ms, g->conv[arm], g->zeta[arm], g->errs[arm]);
    double rest = (double)(g->end_ms - arrival - 1);
    unsigned n = rest > 0 ? gsl_ran_poisson(m, lambda * g->act[arm] * rest / (double)MS_PER_DAY) : 0;
    for (unsigned k = 0; k < n; k++) {
        int64_t t = arrival + 1 + (int64_t)(gsl_rng_uniform(m) * rest);
        session(g, i, &seq, t, g->end_ms, g->conv[arm], g->zeta[arm], g->errs[arm]);
    }

    /* multi-arm: a second assignment to another arm later in the window */
    if (picks(g, &o->fault[SIM_F_MULTI_ARM], SIM_F_MULTI_ARM, day)) {
        gsl_rng *r = g->frng[SIM_F_MULTI_ARM];
        int other = (int)gsl_rng_uniform_int(r, (unsigned long)o->n_arms - 1);
        if (other >= arm)
            other++;
        int64_t t = arrival + 1 + (int64_t)(gsl_rng_uniform(r) * rest);
        if (t >= g->end_ms)
            t = arrival;
        g->st->multi_arm_units++;
        g->seq_cap = SEQ_CAP + 1;
        add_event(g, i, &seq, K_ASSIGN, t, (uint32_t)other | platform << 8);
    }
    if (seq >= SEQ_CAP)
        g->st->capped_units++;
}

/* ----------------------------------------------------------------- output */

static char *put(char *p, const char *s, size_t n)
{
    memcpy(p, s, n);
    return p + n;
}
#define PUTS(p, lit) put((p), (lit), sizeof(lit) - 1)

static const char digit_pairs[201] = "00010203040506070809101112131415161718192021222324"
                                     "25262728293031323334353637383940414243444546474849"
                                     "50515253545556575859606162636465666768697071727374"
                                     "75767778798081828384858687888990919293949596979899";

/* Writes v in decimal, zero-padded to at least width digits. */
static char *put_u64(char *p, uint64_t v, int width)
{
    char tmp[24];
    char *q = tmp + sizeof tmp;
    while (v >= 100) {
        unsigned k = (unsigned)(v % 100) * 2;
        v /= 100;
        *--q = digit_pairs[k + 1];
        *--q = digit_pairs[k];
    }
    if (v >= 10) {
        *--q = digit_pairs[v * 2 + 1];
        *--q = digit_pairs[v * 2];
    } else {
        *--q = (char)('0' + v);
    }
    while (tmp + sizeof tmp - q < width)
        *--q = '0';
    size_t n = (size_t)(tmp + sizeof tmp - q);
    memcpy(p, q, n);
    return p + n;
}

static char *put2(char *p, unsigned v)
{
    memcpy(p, digit_pairs + 2 * v, 2);
    return p + 2;
}

/* "YYYY-MM-DDTHH:MM:SS.mmmZ" (or, bad, "DD/MM/YYYY HH:MM:SS"), quoted. */
static char *put_time(const struct gen *g, char *p, int64_t ms, bool bad)
{
    int64_t rel = ms - g->base_ms;
    size_t d = (size_t)(rel / MS_PER_DAY);
    if (d >= g->n_days)
        d = g->n_days - 1; /* cannot happen: event times fall within the days */
    unsigned in = (unsigned)(rel % MS_PER_DAY);
    *p++ = '"';
    p = put(p, bad ? g->dmy[d] : g->day[d], 11);
    p = put2(p, in / 3600000);
    *p++ = ':';
    p = put2(p, in / 60000 % 60);
    *p++ = ':';
    p = put2(p, in / 1000 % 60);
    if (!bad) {
        *p++ = '.';
        unsigned f = in % 1000;
        *p++ = (char)('0' + f / 100);
        p = put2(p, f % 100);
        *p++ = 'Z';
    }
    *p++ = '"';
    return p;
}

static int flush_out(struct gen *g)
{
    if (g->used && !g->refused && g->sink(g->ctx, g->out, g->used))
        g->refused = true;
    g->used = 0;
    return g->refused ? -1 : 0;
}

static void write_rec(struct gen *g, const struct rec *r)
{
    if (g->used > OUT_BUF - LINE_MAX_BYTES)
        flush_out(g);
    const struct sim_opts *o = g->o;
    char *p = g->out + g->used, *start = p;
    int broken = (r->flags >> 1) - 1; /* -1: intact */
    bool assign = r->kind == K_ASSIGN;
    p = assign ? PUTS(p, "{\"kind\":\"assign\",\"time\":") : PUTS(p, "{\"kind\":\"outcome\",\"time\":");
    p = put_time(g, p, r->emit_ms - r->late_ms, broken == SIM_B_BAD_TIME);
    if (broken != SIM_B_MISSING) {
        if (broken == SIM_B_BAD_TYPE && assign) {
            p = PUTS(p, ",\"unit\":");
            p = put_u64(p, (uint64_t)r->unit + 1, 0);
        } else {
            p = PUTS(p, ",\"unit\":\"u");
            p = put_u64(p, (uint64_t)r->unit + 1, 8);
            *p++ = '"';
        }
    }
    if (assign) {
        unsigned arm = r->value & 0xff, pf = r->value >> 8;
        p = PUTS(p, ",\"exp\":\"");
        p = put(p, g->exp, g->exp_len);
        p = PUTS(p, "\",\"arm\":\"");
        p = put(p, o->arms[arm], strlen(o->arms[arm]));
        p = PUTS(p, "\",\"attrs\":{\"platform\":\"");
        p = put(p, platforms[pf], strlen(platforms[pf]));
        p = PUTS(p, "\"},\"id\":\"a-");
    } else {
        if (r->kind == K_ORDER)
            p = PUTS(p, ",\"metric\":\"order_value\",\"value\":");
        else if (r->kind == K_SESSION)
            p = PUTS(p, ",\"metric\":\"sessions\",\"value\":");
        else
            p = PUTS(p, ",\"metric\":\"page_error\",\"value\":");
        if (broken == SIM_B_BAD_TYPE)
            *p++ = '"';
        if (r->kind == K_ORDER) {
            p = put_u64(p, r->value / 100, 0);
            *p++ = '.';
            p = put2(p, r->value % 100);
        } else {
            *p++ = '1';
        }
        if (broken == SIM_B_BAD_TYPE)
            *p++ = '"';
        p = PUTS(p, ",\"id\":\"o-");
    }
    p = put_u64(p, (uint64_t)r->unit + 1, 0);
    *p++ = '-';
    p = put_u64(p, r->seq, 0);
    p = PUTS(p, "\"}");
    if (broken == SIM_B_NOT_JSON)
        p = start + (p - start) * 2 / 3; /* cut short: no closing brace */
    *p++ = '\n';
    g->used = (size_t)(p - g->out);
    g->st->lines++;
}

/* Sorts the n records of the bucket that starts at t0 by write time, stably:
 * an LSD radix sort in two passes of 11 bits over the offset in the bucket
 * (< 2^22 ms). Records arrive in generation order, which is (unit, sequence,
 * repeat) order, so the result is ordered by (write time, unit, sequence,
 * repeat). tmp holds n records. */
static void sort_bucket(struct rec *r, struct rec *tmp, size_t n, int64_t t0)
{
    enum { BITS = 11, RADIX = 1 << BITS };
    _Static_assert(BUCKET_MS <= (INT64_C(1) << (2 * BITS)), "two passes cover a bucket");
    size_t count[RADIX];
    for (int pass = 0; pass < 2; pass++) {
        struct rec *src = pass ? tmp : r, *dst = pass ? r : tmp;
        int shift = pass * BITS;
        memset(count, 0, sizeof count);
        for (size_t i = 0; i < n; i++)
            count[((uint64_t)(src[i].emit_ms - t0) >> shift) & (RADIX - 1)]++;
        size_t sum = 0;
        for (int k = 0; k < RADIX; k++) {
            size_t c = count[k];
            count[k] = sum;
            sum += c;
        }
        for (size_t i = 0; i < n; i++)
            dst[count[((uint64_t)(src[i].emit_ms - t0) >> shift) & (RADIX - 1)]++] = src[i];
    }
}

/* Sorts and writes every bucket in order, freeing each as it goes. */
static int emit_all(struct gen *g, struct err *e)
{
    struct rec *scratch = NULL, *tmp = NULL;
    size_t cap = 0;
    int rc = AB_OK;
    for (size_t h = 0; h < g->nb; h++) {
        struct bucket *bk = &g->b[h];
        if (!bk->n)
            continue;
        if (bk->n > cap) {
            size_t nc = bk->n + bk->n / 4;
            free(scratch);
            free(tmp);
            scratch = malloc(nc * sizeof *scratch);
            tmp = malloc(nc * sizeof *tmp);
            if (!scratch || !tmp) {
                rc = err_set(e, AB_EINPUT, "out of memory");
                break;
            }
            cap = nc;
        }
        size_t k = 0;
        for (struct block *b = bk->head, *next; b; b = next) {
            next = b->next;
            memcpy(scratch + k, b->r, b->n * sizeof *scratch);
            k += b->n;
            free(b);
        }
        bk->head = bk->tail = NULL;
        sort_bucket(scratch, tmp, k, g->base_ms + (int64_t)h * BUCKET_MS);
        for (size_t j = 0; j < k; j++)
            write_rec(g, &scratch[j]);
        if (g->refused)
            break;
    }
    free(scratch);
    free(tmp);
    if (!rc && (flush_out(g) || g->refused))
        rc = err_set(e, AB_EINPUT, "output: write failed");
    return rc;
}

static void gen_release(struct gen *g)
{
    if (g->b)
        for (size_t h = 0; h < g->nb; h++)
            for (struct block *b = g->b[h].head, *next; b; b = next) {
                next = b->next;
                free(b);
            }
    free(g->b);
    free(g->out);
    free(g->day);
    free(g->dmy);
    if (g->model)
        gsl_rng_free(g->model);
    for (int k = 0; k < SIM_N_FAULTS; k++)
        if (g->frng[k])
            gsl_rng_free(g->frng[k]);
}

static int gen_init(struct gen *g, const struct sim_opts *o, struct sim_stats *st, struct err *e)
{
    memset(g, 0, sizeof *g);
    g->o = o;
    g->st = st;
    g->start_ms = o->start_us / 1000;
    g->end_ms = g->start_ms + (int64_t)o->days * MS_PER_DAY;
    g->pre_ms = (int64_t)o->pre_days * MS_PER_DAY;
    g->base_ms = g->start_ms - g->pre_ms;
    g->late_max_ms = o->fault[SIM_F_LATE].on ? o->fault[SIM_F_LATE].max_delay_us / 1000 : 0;
    double sum = 0;
    for (int a = 0; a < o->n_arms; a++)
        sum += o->weights[a];
    for (int a = 0; a < o->n_arms; a++) {
        g->w[a] = o->weights[a] / sum;
        const double *ef = o->effect[a];
        double s2 = o->order_sigma * o->order_sigma;
        g->zeta[a] = log(o->order_value * (1 + ef[SIM_M_ORDER_VALUE])) - s2 / 2;
        g->conv[a] = o->conversion * (1 + ef[SIM_M_CONVERTED]);
        g->errs[a] = o->errors_per_session * (1 + ef[SIM_M_PAGE_ERROR]);
        g->act[a] = 1 + ef[SIM_M_SESSIONS];
    }
    g->gamma_scale = o->sessions_per_day / o->activity_shape;
    double s = o->fault[SIM_F_SELF_SELECT].amount;
    g->ss_intercept = gsl_cdf_ugaussian_Pinv(1 - g->w[0]) * sqrt(1 + s * s);
    experiment_name(o, g->exp, sizeof g->exp);
    g->exp_len = strlen(g->exp);

    /* buckets up to the last write time: window end + late delay + repeat delay */
    int64_t last = g->end_ms + g->late_max_ms + DUP_DELAY_MS;
    g->nb = (size_t)((last - g->base_ms) / BUCKET_MS) + 1;
    g->n_days = (size_t)(o->pre_days + o->days) + 1;
    g->b = calloc(g->nb, sizeof *g->b);
    g->out = malloc(OUT_BUF);
    g->day = malloc(g->n_days * sizeof *g->day);
    g->dmy = malloc(g->n_days * sizeof *g->dmy);
    g->model = gsl_rng_alloc(gsl_rng_mt19937);
    for (int k = 0; k < SIM_N_FAULTS; k++)
        g->frng[k] = gsl_rng_alloc(gsl_rng_mt19937);
    bool ok = g->b && g->out && g->day && g->dmy && g->model;
    for (int k = 0; k < SIM_N_FAULTS; k++)
        ok = ok && g->frng[k];
    if (!ok)
        return err_set(e, AB_EINPUT, "out of memory");
    gsl_rng_set(g->model, derive_seed(o->seed, 0));
    for (int k = 0; k < SIM_N_FAULTS; k++)
        gsl_rng_set(g->frng[k], derive_seed(o->seed, 1 + (unsigned)k));
    for (size_t d = 0; d < g->n_days; d++) {
        char t[40];
        time_format((g->base_ms + (int64_t)d * MS_PER_DAY) * 1000, t, sizeof t);
        memcpy(g->day[d], t, 11); /* "YYYY-MM-DDT" */
        /* "DD/MM/YYYY " */
        memcpy(g->dmy[d], t + 8, 2);
        g->dmy[d][2] = '/';
        memcpy(g->dmy[d] + 3, t + 5, 2);
        g->dmy[d][5] = '/';
        memcpy(g->dmy[d] + 6, t, 4);
        g->dmy[d][10] = ' ';
    }
    return AB_OK;
}

int sim_run(const struct sim_opts *o, sim_sink sink, void *ctx, struct sim_stats *st,
            struct err *e)
{
    struct sim_stats local;
    if (!st)
        st = &local;
    memset(st, 0, sizeof *st);
    int rc = sim_validate(o, e);
    if (rc)
        return rc;
    struct gen g;
    rc = gen_init(&g, o, st, e);
    g.sink = sink;
    g.ctx = ctx;
    for (uint64_t i = 0; !rc && i < o->units; i++) {
        gen_unit(&g, (uint32_t)i);
        if (g.oom)
            rc = err_set(e, AB_EINPUT, "out of memory after %llu units",
                         (unsigned long long)i);
    }
    st->units = o->units;
    if (!rc)
        rc = emit_all(&g, e);
    gen_release(&g);
    return rc;
}
