/*
 * report.c — merging tallies and building output records (see report.h).
 */
#include "report.h"

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "readout.h"
#include "seqrun.h"
#include "timefmt.h"

json_t *json_num(double x)
{
    return isfinite(x) ? json_real(x) : json_null();
}

static int merge_days(struct tallies *t, const struct day_row *rows, size_t n, int n_arms)
{
    for (size_t i = 0; i < n; i++) {
        size_t j = 0;
        while (j < t->n_days && t->days[j].day < rows[i].day)
            j++;
        if (j == t->n_days || t->days[j].day != rows[i].day) {
            struct day_row *nd = realloc(t->days, (t->n_days + 1) * sizeof *nd);
            if (!nd)
                return -1;
            t->days = nd;
            memmove(&nd[j + 1], &nd[j], (t->n_days - j) * sizeof *nd);
            memset(&nd[j], 0, sizeof *nd);
            nd[j].day = rows[i].day;
            t->n_days++;
        }
        for (int a = 0; a < n_arms; a++)
            t->days[j].units[a] += rows[i].units[a];
    }
    return 0;
}

static int merge_segs(struct tallies *t, const struct seg_row *rows, size_t n, int n_arms)
{
    for (size_t i = 0; i < n; i++) {
        size_t j = 0;
        while (j < t->n_segs && strcmp(t->segs[j].name, rows[i].name))
            j++;
        if (j == t->n_segs) {
            struct seg_row *ns = realloc(t->segs, (t->n_segs + 1) * sizeof *ns);
            if (!ns)
                return -1;
            t->segs = ns;
            memset(&ns[j], 0, sizeof *ns);
            if (!(ns[j].name = strdup(rows[i].name)))
                return -1;
            t->n_segs++;
        }
        for (int a = 0; a < n_arms; a++)
            t->segs[j].units[a] += rows[i].units[a];
    }
    return 0;
}

struct unit_ref {
    uint64_t key;
    const double *values;
    int arm;
};

struct collect {
    struct unit_ref *refs;
    size_t n;
};

static void collect_unit(void *ctx, uint64_t key, int arm, const double *values)
{
    struct collect *c = ctx;
    c->refs[c->n++] = (struct unit_ref){key, values, arm};
}

/* Sorts n refs by the low `bytes` bytes of their keys, least significant
 * first (a stable counting sort per byte, through tmp of n refs); bytes all
 * keys share are skipped. The result is left in refs. */
static void sort_low_bytes(struct unit_ref *refs, struct unit_ref *tmp, size_t n, int bytes)
{
    size_t count[8][256] = {{0}};
    for (size_t i = 0; i < n; i++)
        for (int b = 0; b < bytes; b++)
            count[b][(refs[i].key >> (8 * b)) & 0xff]++;
    struct unit_ref *from = refs, *to = tmp;
    for (int b = 0; b < bytes; b++) {
        if (n && count[b][(from[0].key >> (8 * b)) & 0xff] == n)
            continue; /* every key has this byte */
        size_t at = 0;
        for (int d = 0; d < 256; d++) {
            size_t c = count[b][d];
            count[b][d] = at;
            at += c;
        }
        for (size_t i = 0; i < n; i++)
            to[count[b][(from[i].key >> (8 * b)) & 0xff]++] = from[i];
        struct unit_ref *t = from;
        from = to;
        to = t;
    }
    if (from != refs)
        memcpy(refs, from, n * sizeof *refs);
}

/* Sorts n refs by key: in place by the top byte (the cycles of an American
 * flag sort), then each of the 256 runs by the other bytes, through a buffer
 * the size of the longest run. For millions of units it takes a fraction of
 * a comparison sort, and the buffer stays small (keys are hashes, evenly
 * spread). Returns -1 when out of memory. */
static int sort_by_key(struct unit_ref *a, size_t n)
{
    size_t count[256] = {0}, next[256], most = 0;
    for (size_t i = 0; i < n; i++)
        count[a[i].key >> 56]++;
    for (size_t d = 0, at = 0; d < 256; d++) {
        next[d] = at;
        at += count[d];
        if (count[d] > most)
            most = count[d];
    }
    size_t start[256];
    memcpy(start, next, sizeof start);
    for (int b = 0; b < 256; b++) {
        size_t end = start[b] + count[b];
        for (size_t i = next[b]; i < end; i = next[b]) {
            struct unit_ref x = a[i];
            int d = (int)(x.key >> 56);
            while (d != b) { /* x belongs to run d: put it there, carry on with what it displaces */
                struct unit_ref y = a[next[d]];
                a[next[d]++] = x;
                x = y;
                d = (int)(x.key >> 56);
            }
            a[i] = x;
            next[b]++;
        }
    }
    struct unit_ref *tmp = malloc((most ? most : 1) * sizeof *tmp);
    if (!tmp)
        return -1;
    for (int b = 0; b < 256; b++)
        sort_low_bytes(a + start[b], tmp, count[b], 7);
    free(tmp);
    return 0;
}

int tallies_collect(struct tallies *t, const struct layout *lay, struct ledger *const *ls, int n,
                    bool canonical, struct err *e)
{
    const struct config *cfg = lay->cfg;
    memset(t, 0, sizeof *t);
    t->max_time = INT64_MIN;
    size_t nm = cfg->n_metrics ? (size_t)cfg->n_metrics : 1;
    if (!(t->mom = calloc(nm * CONFIG_MAX_ARMS, sizeof *t->mom)))
        return err_set(e, AB_EINPUT, "out of memory");
    size_t total = 0;
    for (int i = 0; i < n; i++) {
        const struct ledger *l = ls[i];
        if (!l)
            continue; /* a partition this worker does not own */
        counters_add(&t->cnt, ledger_counters(l));
        for (int a = 0; a < cfg->n_arms; a++) {
            t->units[a] += ledger_units(l, a);
            total += ledger_units(l, a);
        }
        const struct day_row *rows;
        size_t nd = ledger_days(l, &rows);
        const struct seg_row *srows;
        size_t ns = ledger_segments(l, &srows);
        if (merge_days(t, rows, nd, cfg->n_arms) || merge_segs(t, srows, ns, cfg->n_arms))
            return err_set(e, AB_EINPUT, "out of memory");
        if (ledger_max_time(l) > t->max_time)
            t->max_time = ledger_max_time(l);
        if (!canonical)
            for (int m = 0; m < cfg->n_metrics; m++)
                for (int a = 0; a < cfg->n_arms; a++)
                    moments_merge(TALLY_MOM(t, m, a), lay->nv[m], ledger_moments(l, m, a));
    }
    if (!canonical)
        return AB_OK;
    struct collect c = {malloc((total ? total : 1) * sizeof *c.refs), 0};
    if (!c.refs)
        return err_set(e, AB_EINPUT, "out of memory");
    for (int i = 0; i < n; i++)
        if (ls[i])
            ledger_each_unit(ls[i], collect_unit, &c);
    if (sort_by_key(c.refs, c.n)) {
        free(c.refs);
        return err_set(e, AB_EINPUT, "out of memory");
    }
    const struct unit_ref *u = c.refs;
    double v[MOM_MAXV];
    for (size_t i = 0; i < c.n; i++) {
        if (i + 16 < c.n) /* the values sit in the records, in no order the cache can guess */
            __builtin_prefetch(u[i + 16].values);
        for (int m = 0; m < cfg->n_metrics; m++) {
            layout_vector(lay, m, u[i].values, v);
            moments_add(TALLY_MOM(t, m, u[i].arm), lay->nv[m], v);
        }
    }
    free(c.refs);
    return AB_OK;
}

int tallies_add(struct tallies *acc, const struct tallies *t, const struct layout *lay)
{
    const struct config *cfg = lay->cfg;
    counters_add(&acc->cnt, &t->cnt);
    for (int a = 0; a < cfg->n_arms; a++)
        acc->units[a] += t->units[a];
    for (int m = 0; m < cfg->n_metrics; m++)
        for (int a = 0; a < cfg->n_arms; a++)
            moments_merge(TALLY_MOM(acc, m, a), lay->nv[m], TALLY_MOM(t, m, a));
    if (t->max_time > acc->max_time)
        acc->max_time = t->max_time;
    return merge_days(acc, t->days, t->n_days, cfg->n_arms) ||
                   merge_segs(acc, t->segs, t->n_segs, cfg->n_arms)
               ? AB_EINPUT
               : AB_OK;
}

void tallies_release(struct tallies *t)
{
    free(t->days);
    for (size_t i = 0; i < t->n_segs; i++)
        free(t->segs[i].name);
    free(t->segs);
    t->segs = NULL;
    t->n_segs = 0;
    free(t->mom);
    t->mom = NULL;
    t->days = NULL;
    t->n_days = 0;
}

/* The arm's mean of a metric: Ȳ, or ΣX/ΣD for a ratio; NaN without units. */
static double arm_mean(enum metric_type type, const struct moments *m)
{
    if (m->n == 0)
        return NAN;
    if (type == MT_RATIO)
        return m->mean[1] != 0 ? m->mean[0] / m->mean[1] : NAN;
    return m->mean[0];
}

static json_t *pair(double lo, double hi)
{
    json_t *a = json_array();
    json_array_append_new(a, json_num(lo));
    json_array_append_new(a, json_num(hi));
    return a;
}

static const char *const role_names[] = {"primary", "guardrail", "secondary"};
static const char *const type_names[] = {"mean", "binary", "ratio"};

static json_t *metric_rows(const struct layout *lay, const struct tallies *t, const struct readout *rd,
                           const struct seqrun *seq)
{
    const struct config *cfg = lay->cfg;
    json_t *rows = json_array();
    for (int m = 0; m < cfg->n_metrics; m++) {
        const struct metric_cfg *mc = &cfg->metrics[m];
        const struct moments *ctl = TALLY_MOM(t, m, cfg->control);
        for (int a = 0; a < cfg->n_arms; a++) {
            if (a == cfg->control)
                continue;
            const struct moments *arm = TALLY_MOM(t, m, a);
            const struct effect *e = &rd->eff[m][a];
            json_t *r = json_object();
            json_object_set_new(r, "metric", json_string(mc->name));
            json_object_set_new(r, "arm", json_string(cfg->arms[a].name));
            json_object_set_new(r, "type", json_string(type_names[mc->type]));
            json_object_set_new(r, "role", json_string(role_names[mc->role]));
            json_object_set_new(r, "n", json_integer((json_int_t)arm->n));
            json_object_set_new(r, "mean", json_num(arm_mean(mc->type, arm)));
            json_object_set_new(r, "control_n", json_integer((json_int_t)ctl->n));
            json_object_set_new(r, "control_mean", json_num(arm_mean(mc->type, ctl)));
            json_object_set_new(r, "diff", json_num(e->diff));
            json_object_set_new(r, "ci", pair(e->ci_lo, e->ci_hi));
            json_object_set_new(r, "p", json_num(e->p));
            json_object_set_new(r, "p_adjusted", json_num(rd->p_adjusted[m][a]));
            json_object_set_new(r, "test", json_string(e->flags & EFF_FISHER ? "fisher"
                                                       : isfinite(e->df) ? "welch_t" : "z"));
            json_object_set_new(r, "df", json_num(e->df));
            json_object_set_new(r, "lift", json_num(e->lift));
            json_object_set_new(r, "lift_ci", pair(e->lift_lo, e->lift_hi));
            json_object_set_new(r, "cuped_diff", json_num(e->cuped_diff));
            json_object_set_new(r, "cuped_ci", pair(e->cuped_lo, e->cuped_hi));
            json_object_set_new(r, "var_reduction", json_num(e->var_reduction));
            if (mc->better) {
                json_object_set_new(r, "better", json_string(mc->better > 0 ? "higher" : "lower"));
                json_object_set_new(r, "p_harm", json_num(e->p_harm));
                json_object_set_new(r, "harm", json_boolean(e->harm));
            }
            json_t *sq = seq ? seqrun_cell_json(seq, m, a) : NULL;
            if (sq) {
                json_object_update(r, sq);
                json_decref(sq);
            }
            json_array_append_new(rows, r);
        }
    }
    return rows;
}

static json_t *srm_parts(const struct config *cfg, const struct srm_part *parts, int n, const char *key)
{
    json_t *a = json_array();
    for (int i = 0; i < n; i++) {
        json_t *o = json_object();
        json_object_set_new(o, key, json_string(parts[i].name));
        json_object_set_new(o, "units", json_integer((json_int_t)parts[i].units));
        json_t *ba = json_object();
        for (int k = 0; k < cfg->n_arms; k++)
            json_object_set_new(ba, cfg->arms[k].name, json_integer((json_int_t)parts[i].arm_units[k]));
        json_object_set_new(o, "by_arm", ba);
        json_object_set_new(o, "p", json_num(parts[i].p));
        json_object_set_new(o, "p_adjusted", json_num(parts[i].p_adj));
        json_array_append_new(a, o);
    }
    return a;
}

static json_t *srm_json(const struct config *cfg, const struct readout *rd)
{
    static const char *const tests[] = {"none", "chi2", "binomial", "insufficient"};
    json_t *o = json_object();
    json_object_set_new(o, "chi2", json_num(rd->srm.chi2));
    json_object_set_new(o, "df", json_num(rd->srm.df));
    json_object_set_new(o, "p", json_num(rd->srm.p));
    json_object_set_new(o, "test", json_string(tests[rd->srm.test & 3]));
    json_object_set_new(o, "p_seq", json_num(rd->p_seq));
    json_object_set_new(o, "alarm", json_boolean(rd->srm_alarm));
    json_object_set_new(o, "by_day", srm_parts(cfg, rd->days, rd->n_days, "day"));
    json_object_set_new(o, "by_segment", srm_parts(cfg, rd->segments, rd->n_segments, "segment"));
    return o;
}

static json_t *integrity(const struct config *cfg, const struct counters *c, const struct readout *rd)
{
    json_t *o = json_object();
    json_object_set_new(o, "verdict", json_string(verdict_name(rd->verdict)));
    json_t *rs = json_array();
    for (int i = 0; i < rd->n_reasons; i++)
        json_array_append_new(rs, json_pack("{s:s, s:s, s:s}", "check", rd->reasons[i].check,
                                            "severity", rd->reasons[i].severity == SEV_FAIL ? "fail" : "warn",
                                            "detail", rd->reasons[i].detail));
    json_object_set_new(o, "reasons", rs);
    json_object_set_new(o, "multi_arm_units", json_integer((json_int_t)c->multi_arm_units));
    json_object_set_new(o, "orphan_outcomes", json_integer((json_int_t)c->orphan_outcomes));
    json_object_set_new(o, "duplicates", json_integer((json_int_t)c->duplicates));
    json_object_set_new(o, "outside_window", json_integer((json_int_t)c->outside_window));
    json_object_set_new(o, "late_assignments", json_integer((json_int_t)c->late_assignments));
    json_object_set_new(o, "other_experiment", json_integer((json_int_t)c->other_experiment));
    json_object_set_new(o, "ignored_outcomes", json_integer((json_int_t)c->ignored_outcomes));
    if (c->other_shard)
        json_object_set_new(o, "other_shard", json_integer((json_int_t)c->other_shard));
    if (cfg->hash.enabled) {
        json_object_set_new(o, "hash_checked", json_integer((json_int_t)c->hash_checked));
        json_object_set_new(o, "hash_mismatch", json_integer((json_int_t)c->hash_mismatch));
    }
    json_object_set_new(o, "lines_read", json_integer((json_int_t)c->lines));
    json_object_set_new(o, "accepted", json_integer((json_int_t)c->accepted));
    json_t *rej = json_object();
    for (int r = 1; r < REJ_COUNT; r++)
        json_object_set_new(rej, reject_name((enum reject)r), json_integer((json_int_t)c->rejected[r]));
    json_object_set_new(o, "rejected", rej);
    json_t *ma = json_object(), *da = json_object();
    for (int a = 0; a < cfg->n_arms; a++) {
        json_object_set_new(ma, cfg->arms[a].name, json_integer((json_int_t)c->multi_by_arm[a]));
        json_object_set_new(da, cfg->arms[a].name, json_integer((json_int_t)c->dup_by_arm[a]));
    }
    json_object_set_new(o, "multi_arm_by_arm", ma);
    json_object_set_new(o, "duplicates_by_arm", da);
    if (cfg->has_covariate) {
        json_t *b = json_object();
        for (int m = 0; m < cfg->n_metrics; m++)
            json_object_set_new(b, cfg->metrics[m].name, json_num(rd->smd[m]));
        json_object_set_new(o, "balance_smd", b);
    }
    return o;
}

json_t *report_record(const struct layout *lay, const struct tallies *t, const struct readout *rd,
                      const struct seqrun *seq, int64_t time, bool final)
{
    const struct config *cfg = lay->cfg;
    char ts[40];
    time_format(time, ts, sizeof ts);
    json_t *rec = json_object();
    json_object_set_new(rec, "exp", json_string(cfg->experiment));
    json_object_set_new(rec, "time", json_string(ts));
    json_object_set_new(rec, "final", json_boolean(final));
    json_t *units = json_object();
    for (int a = 0; a < cfg->n_arms; a++)
        json_object_set_new(units, cfg->arms[a].name, json_integer((json_int_t)t->units[a]));
    json_object_set_new(rec, "units", units);
    json_object_set_new(rec, "srm", srm_json(cfg, rd));
    json_object_set_new(rec, "metrics", metric_rows(lay, t, rd, seq));
    if (seq && cfg->seq.method == SEQ_SPENDING)
        json_object_set_new(rec, "looks", seqrun_looks_json(seq));
    json_object_set_new(rec, "integrity", integrity(cfg, &t->cnt, rd));
    return rec;
}

