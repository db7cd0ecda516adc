/*
 * readout.c — effects, SRM, integrity checks and the verdict (see readout.h).
 * Methods: METHODS.md §2–5 and §7; thresholds from the config.
 */
#include "readout.h"

#include <math.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "timefmt.h"

const char *verdict_name(int v)
{
    return v == VERDICT_FAILED ? "failed" : v == VERDICT_DOUBTFUL ? "doubtful" : "sound";
}

static void add_reason(struct readout *r, const char *check, int sev, const char *fmt, ...)
    __attribute__((format(printf, 4, 5)));

static void add_reason(struct readout *r, const char *check, int sev, const char *fmt, ...)
{
    if (sev == SEV_FAIL)
        r->verdict = VERDICT_FAILED;
    else if (r->verdict < VERDICT_DOUBTFUL)
        r->verdict = VERDICT_DOUBTFUL;
    if (r->n_reasons >= READOUT_MAX_REASONS)
        return;
    struct reason *x = &r->reasons[r->n_reasons++];
    snprintf(x->check, sizeof x->check, "%s", check);
    x->severity = sev;
    va_list ap;
    va_start(ap, fmt);
    vsnprintf(x->detail, sizeof x->detail, fmt, ap);
    va_end(ap);
}

static double share(uint64_t part, uint64_t whole)
{
    return whole ? (double)part / (double)whole : 0.0;
}

/* SRM of parts (days or segments) with Holm across them; fills r->days or r->segments. */
static void srm_parts(const struct config *cfg, struct srm_part *parts, int n,
                      const uint64_t (*counts)[CONFIG_MAX_ARMS])
{
    double w[CONFIG_MAX_ARMS], c[CONFIG_MAX_ARMS];
    double *p = calloc((size_t)(n ? n : 1), sizeof *p);
    double *adj = calloc((size_t)(n ? n : 1), sizeof *adj);
    for (int a = 0; a < cfg->n_arms; a++)
        w[a] = cfg->arms[a].weight;
    for (int i = 0; i < n; i++) {
        double tot = 0;
        for (int a = 0; a < cfg->n_arms; a++)
            tot += c[a] = (double)counts[i][a];
        struct srm_result s;
        srm_test(c, w, cfg->n_arms, &s);
        memcpy(parts[i].arm_units, counts[i], sizeof parts[i].arm_units);
        parts[i].units = tot;
        parts[i].p = s.p;
        if (p)
            p[i] = s.p;
    }
    if (p && adj) {
        holm_adjust(p, n, adj);
        for (int i = 0; i < n; i++)
            parts[i].p_adj = adj[i];
    } else {
        for (int i = 0; i < n; i++)
            parts[i].p_adj = NAN;
    }
    free(p);
    free(adj);
}

static int day_srm(struct readout *r, const struct config *cfg, const struct tallies *t)
{
    r->n_days = (int)t->n_days;
    if (!t->n_days)
        return AB_OK;
    r->days = calloc(t->n_days, sizeof *r->days);
    uint64_t(*counts)[CONFIG_MAX_ARMS] = calloc(t->n_days, sizeof *counts);
    if (!r->days || !counts) {
        free(counts);
        return AB_EINPUT;
    }
    /* days whose units all left (multi-arm units) are not tested nor counted in Holm's m */
    int k = 0;
    for (size_t i = 0; i < t->n_days; i++) {
        uint64_t any = 0;
        for (int a = 0; a < cfg->n_arms; a++)
            any |= t->days[i].units[a];
        if (!any)
            continue;
        char ts[40];
        time_format(t->days[i].day * US_PER_DAY, ts, sizeof ts);
        snprintf(r->days[k].name, sizeof r->days[k].name, "%.10s", ts);
        memcpy(counts[k], t->days[i].units, sizeof counts[k]);
        k++;
    }
    r->n_days = k;
    srm_parts(cfg, r->days, r->n_days, (const uint64_t(*)[CONFIG_MAX_ARMS])counts);
    free(counts);
    return AB_OK;
}

/* Splits segment names "k=v\x1fk=v" into key=value parts and sums units per part. */
static int by_part_name(const void *a, const void *b)
{
    return strcmp(((const struct srm_part *)a)->name, ((const struct srm_part *)b)->name);
}

static int segment_srm(struct readout *r, const struct config *cfg, const struct tallies *t)
{
    int cap = 0;
    uint64_t(*counts)[CONFIG_MAX_ARMS] = NULL;
    for (size_t i = 0; i < t->n_segs; i++) {
        uint64_t any = 0;
        for (int a = 0; a < cfg->n_arms; a++)
            any |= t->segs[i].units[a];
        if (!any)
            continue; /* a segment whose units all left is not tested */
        const char *s = t->segs[i].name;
        while (*s) {
            const char *end = strchr(s, '\x1f');
            size_t len = end ? (size_t)(end - s) : strlen(s);
            char name[96];
            snprintf(name, sizeof name, "%.*s", (int)len, s);
            int k;
            for (k = 0; k < r->n_segments; k++)
                if (!strcmp(r->segments[k].name, name))
                    break;
            if (k == r->n_segments) {
                if (r->n_segments == cap) {
                    cap = cap ? cap * 2 : 16;
                    struct srm_part *np = realloc(r->segments, (size_t)cap * sizeof *np);
                    uint64_t(*nc)[CONFIG_MAX_ARMS] = realloc(counts, (size_t)cap * sizeof *nc);
                    if (np)
                        r->segments = np;
                    if (nc)
                        counts = nc;
                    if (!np || !nc) {
                        free(counts);
                        return AB_EINPUT;
                    }
                }
                memset(&r->segments[k], 0, sizeof r->segments[k]);
                memset(counts[k], 0, sizeof counts[k]);
                snprintf(r->segments[k].name, sizeof r->segments[k].name, "%s", name);
                r->n_segments++;
            }
            for (int a = 0; a < cfg->n_arms; a++)
                counts[k][a] += t->segs[i].units[a];
            s += len;
            if (*s)
                s++;
        }
    }
    srm_parts(cfg, r->segments, r->n_segments, (const uint64_t(*)[CONFIG_MAX_ARMS])counts);
    free(counts);
    /* listed by name: the order of first arrival would depend on arrival order */
    if (r->n_segments > 1)
        qsort(r->segments, (size_t)r->n_segments, sizeof *r->segments, by_part_name);
    return AB_OK;
}

/* A one-variable view of variable j of a set of co-moments. */
static struct moments one_var(const struct moments *m, int j)
{
    struct moments v;
    moments_init(&v);
    v.n = m->n;
    v.mean[0] = m->mean[j];
    v.c[0][0] = m->c[j][j];
    return v;
}

static void effects(struct readout *r, const struct config *cfg, const struct tallies *t)
{
    double p[3][CONFIG_MAX_METRICS * CONFIG_MAX_ARMS], adj[CONFIG_MAX_METRICS * CONFIG_MAX_ARMS];
    int n[3] = {0, 0, 0};
    for (int m = 0; m < cfg->n_metrics; m++) {
        const struct metric_cfg *mc = &cfg->metrics[m];
        for (int a = 0; a < cfg->n_arms; a++) {
            r->p_adjusted[m][a] = NAN;
            if (a == cfg->control)
                continue;
            struct effect *e = &r->eff[m][a];
            effect_compute(mc->type, TALLY_MOM(t, m, cfg->control), TALLY_MOM(t, m, a), cfg->alpha,
                           mc->better, e);
            int g = (int)mc->role;
            p[g][n[g]++] = g == ROLE_GUARDRAIL ? e->p_harm : e->p;
        }
    }
    for (int g = 0; g < 3; g++) {
        if (g == ROLE_SECONDARY)
            bh_adjust(p[g], n[g], adj);
        else
            holm_adjust(p[g], n[g], adj);
        int k = 0;
        for (int m = 0; m < cfg->n_metrics; m++)
            if ((int)cfg->metrics[m].role == g)
                for (int a = 0; a < cfg->n_arms; a++)
                    if (a != cfg->control)
                        r->p_adjusted[m][a] = adj[k++];
    }
}

static void checks(struct readout *r, const struct config *cfg, const struct tallies *t)
{
    const struct integrity_cfg *g = &cfg->integ;
    const struct counters *c = &t->cnt;
    double x[CONFIG_MAX_ARMS], seen[CONFIG_MAX_ARMS];
    uint64_t units = 0;
    for (int a = 0; a < cfg->n_arms; a++) {
        units += t->units[a];
        seen[a] = (double)c->units_seen[a];
    }
    /* sample-ratio mismatch */
    if (r->srm_alarm)
        add_reason(r, "srm", SEV_FAIL,
                   "units per arm do not match the configured weights (chi-square p = %.3g, "
                   "always-valid p = %.3g, threshold %g)",
                   r->srm.p, r->p_seq, cfg->srm_threshold);
    for (int i = 0; i < r->n_days; i++)
        if (r->days[i].p_adj < g->p_fail)
            add_reason(r, "srm_day", SEV_WARN,
                       "units first exposed on %s do not match the weights (Holm-adjusted p = %.3g)",
                       r->days[i].name, r->days[i].p_adj);
    for (int i = 0; i < r->n_segments; i++)
        if (r->segments[i].p_adj < g->p_fail) {
            bool big = r->segments[i].units > 0.05 * (double)units;
            add_reason(r, "srm_segment", big ? SEV_FAIL : SEV_WARN,
                       "segment %s (%.0f units) does not match the weights (Holm-adjusted p = %.3g)",
                       r->segments[i].name, r->segments[i].units, r->segments[i].p_adj);
        }
    /* multi-arm units */
    if (c->multi_arm_units) {
        double s = share(c->multi_arm_units, units + c->multi_arm_units);
        add_reason(r, "multi_arm", s > g->multi_arm_fail ? SEV_FAIL : SEV_WARN,
                   "%llu units (%.3g%%) were assigned to more than one arm and are left out",
                   (unsigned long long)c->multi_arm_units, 100 * s);
        for (int a = 0; a < cfg->n_arms; a++)
            x[a] = (double)c->multi_by_arm[a];
        struct srm_result s2;
        srm_test(x, seen, cfg->n_arms, &s2);
        if (s2.p < g->p_fail)
            add_reason(r, "multi_arm_by_arm", SEV_FAIL,
                       "multi-arm units are not spread over arms in proportion to their units (p = %.3g)",
                       s2.p);
    }
    double ow = share(c->outside_window, c->assignments);
    if (ow > g->outside_window_warn)
        add_reason(r, "outside_window", SEV_WARN,
                   "%llu assignments (%.3g%%) fall outside the experiment window",
                   (unsigned long long)c->outside_window, 100 * ow);
    double ds = share(c->duplicates, c->lines);
    if (ds > g->duplicates_warn)
        add_reason(r, "duplicates", SEV_WARN, "%llu lines (%.3g%%) repeat an event id",
                   (unsigned long long)c->duplicates, 100 * ds);
    uint64_t dsum = 0;
    for (int a = 0; a < cfg->n_arms; a++) {
        x[a] = (double)c->dup_by_arm[a];
        dsum += c->dup_by_arm[a];
        seen[a] = (double)t->units[a];
    }
    if (dsum) {
        struct srm_result s3;
        srm_test(x, seen, cfg->n_arms, &s3);
        if (s3.p < g->p_fail)
            add_reason(r, "duplicates_by_arm", SEV_FAIL,
                       "duplicate events are not spread over arms in proportion to their units (p = %.3g)",
                       s3.p);
    }
    uint64_t rej = 0;
    for (int k = 1; k < REJ_COUNT; k++)
        rej += c->rejected[k];
    double rs = share(rej, c->lines);
    if (rs > g->rejected_warn)
        add_reason(r, "rejected", rs > g->rejected_fail ? SEV_FAIL : SEV_WARN,
                   "%llu of %llu lines (%.3g%%) were rejected", (unsigned long long)rej,
                   (unsigned long long)c->lines, 100 * rs);
    double ls = share(c->late_assignments, c->assignments);
    if (ls > g->late_warn)
        add_reason(r, "late", SEV_WARN,
                   "%llu assignments (%.3g%%) arrived later than the lateness bound",
                   (unsigned long long)c->late_assignments, 100 * ls);
    if (c->hash_mismatch)
        add_reason(r, "hash", SEV_FAIL,
                   "%llu of %llu assignments name another arm than the assignment hash gives",
                   (unsigned long long)c->hash_mismatch, (unsigned long long)c->hash_checked);
    /* covariate balance and ratio denominators */
    for (int m = 0; m < cfg->n_metrics; m++) {
        const struct metric_cfg *mc = &cfg->metrics[m];
        r->smd[m] = NAN;
        for (int a = 0; a < cfg->n_arms; a++) {
            if (a == cfg->control)
                continue;
            const struct moments *ctl = TALLY_MOM(t, m, cfg->control), *trt = TALLY_MOM(t, m, a);
            if (cfg->has_covariate) {
                double d = smd(trt, ctl, mc->type == MT_RATIO ? 2 : 1);
                if (isfinite(d) && (!isfinite(r->smd[m]) || fabs(d) > fabs(r->smd[m])))
                    r->smd[m] = d;
            }
            if (mc->type == MT_RATIO) {
                struct moments dc = one_var(ctl, 1), dt = one_var(trt, 1);
                struct effect e;
                effect_compute(MT_MEAN, &dc, &dt, cfg->alpha, 0, &e);
                if (e.p < g->p_fail)
                    add_reason(r, "denominator", SEV_WARN,
                               "%s: the denominator '%s' differs between %s and %s (p = %.3g); "
                               "the arms' ratios may not be comparable",
                               mc->name, mc->denominator, cfg->arms[a].name,
                               cfg->arms[cfg->control].name, e.p);
            }
        }
        if (isfinite(r->smd[m]) && fabs(r->smd[m]) > g->smd_warn)
            add_reason(r, "balance", SEV_WARN,
                       "%s: the pre-period covariate differs between arms (SMD = %.3f, limit %g): "
                       "assignment may depend on past behaviour",
                       mc->name, r->smd[m], g->smd_warn);
    }
}

int readout_compute(struct readout *r, const struct config *cfg, const struct tallies *t,
                    double p_seq_prev)
{
    memset(r, 0, sizeof *r);
    double w[CONFIG_MAX_ARMS], n[CONFIG_MAX_ARMS];
    for (int a = 0; a < cfg->n_arms; a++) {
        w[a] = cfg->arms[a].weight;
        n[a] = (double)t->units[a];
    }
    srm_test(n, w, cfg->n_arms, &r->srm);
    r->srm_logbf = srm_seq_logbf(n, w, cfg->n_arms, cfg->srm_prior);
    r->p_seq = isfinite(r->srm_logbf) ? srm_seq_update(p_seq_prev, r->srm_logbf) : p_seq_prev;
    double chosen = cfg->srm_sequential ? r->p_seq : r->srm.p;
    r->srm_alarm = chosen < cfg->srm_threshold;
    effects(r, cfg, t);
    if (day_srm(r, cfg, t) || segment_srm(r, cfg, t))
        return AB_EINPUT;
    checks(r, cfg, t);
    return AB_OK;
}

void readout_release(struct readout *r)
{
    free(r->days);
    free(r->segments);
    r->days = NULL;
    r->segments = NULL;
}
