/*
 * report.c — merging tallies and building output records (see report.h).
 */
#include "report.h"

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "timefmt.h"

json_t *json_num(double x)
{
    return isfinite(x) ? json_real(x) : json_null();
}

static void add_counters(struct counters *a, const struct counters *b)
{
    /* every field is a uint64_t: add them as an array */
    uint64_t *pa = (uint64_t *)a;
    const uint64_t *pb = (const uint64_t *)b;
    for (size_t i = 0; i < sizeof *a / sizeof(uint64_t); i++)
        pa[i] += pb[i];
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

static int by_key(const void *a, const void *b)
{
    uint64_t x = ((const struct unit_ref *)a)->key, y = ((const struct unit_ref *)b)->key;
    return x < y ? -1 : x > y;
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
        add_counters(&t->cnt, ledger_counters(l));
        for (int a = 0; a < cfg->n_arms; a++) {
            t->units[a] += ledger_units(l, a);
            total += ledger_units(l, a);
        }
        const struct day_row *rows;
        size_t nd = ledger_days(l, &rows);
        if (merge_days(t, rows, nd, cfg->n_arms))
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
        ledger_each_unit(ls[i], collect_unit, &c);
    qsort(c.refs, c.n, sizeof *c.refs, by_key);
    double v[MOM_MAXV];
    for (size_t i = 0; i < c.n; i++)
        for (int m = 0; m < cfg->n_metrics; m++) {
            layout_vector(lay, m, c.refs[i].values, v);
            moments_add(TALLY_MOM(t, m, c.refs[i].arm), lay->nv[m], v);
        }
    free(c.refs);
    return AB_OK;
}

void tallies_release(struct tallies *t)
{
    free(t->days);
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

static json_t *metric_rows(const struct layout *lay, const struct tallies *t)
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
            json_t *r = json_object();
            json_object_set_new(r, "metric", json_string(mc->name));
            json_object_set_new(r, "arm", json_string(cfg->arms[a].name));
            json_object_set_new(r, "n", json_integer((json_int_t)arm->n));
            json_object_set_new(r, "mean", json_num(arm_mean(mc->type, arm)));
            json_object_set_new(r, "control_n", json_integer((json_int_t)ctl->n));
            json_object_set_new(r, "control_mean", json_num(arm_mean(mc->type, ctl)));
            json_array_append_new(rows, r);
        }
    }
    return rows;
}

static json_t *integrity(const struct config *cfg, const struct counters *c)
{
    json_t *o = json_object();
    json_object_set_new(o, "multi_arm_units", json_integer((json_int_t)c->multi_arm_units));
    json_object_set_new(o, "orphan_outcomes", json_integer((json_int_t)c->orphan_outcomes));
    json_object_set_new(o, "duplicates", json_integer((json_int_t)c->duplicates));
    json_object_set_new(o, "outside_window", json_integer((json_int_t)c->outside_window));
    json_object_set_new(o, "late_assignments", json_integer((json_int_t)c->late_assignments));
    json_object_set_new(o, "other_experiment", json_integer((json_int_t)c->other_experiment));
    json_object_set_new(o, "ignored_outcomes", json_integer((json_int_t)c->ignored_outcomes));
    if (c->other_shard)
        json_object_set_new(o, "other_shard", json_integer((json_int_t)c->other_shard));
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
    return o;
}

json_t *report_record(const struct layout *lay, const struct tallies *t, int64_t time, bool final)
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
    json_object_set_new(rec, "metrics", metric_rows(lay, t));
    json_object_set_new(rec, "integrity", integrity(cfg, &t->cnt));
    return rec;
}

int report_print(FILE *f, json_t *rec)
{
    if (json_dumpf(rec, f, JSON_COMPACT | JSON_REAL_PRECISION(17)) || fputc('\n', f) == EOF)
        return -1;
    return 0;
}
