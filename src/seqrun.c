/*
 * seqrun.c — sequential monitoring across records (see seqrun.h).
 * Methods: METHODS.md §6 (Lan & DeMets 1983; Johari et al. 2017;
 * Waudby-Smith et al. 2024).
 */
#include "seqrun.h"

#include <math.h>
#include <string.h>

#include "timefmt.h"

const char *seq_verdict_name(int v)
{
    switch (v) {
    case SV_UPPER: return "crossed-upper";
    case SV_LOWER: return "crossed-lower";
    case SV_BURN_IN: return "burn-in";
    default: return "running";
    }
}

int seqrun_init(struct seqrun *s, const struct config *cfg, struct err *e)
{
    memset(s, 0, sizeof *s);
    s->cfg = cfg;
    s->next_look = INT64_MIN;
    for (int m = 0; m < CONFIG_MAX_METRICS; m++)
        for (int a = 0; a < CONFIG_MAX_ARMS; a++) {
            struct seq_cell *c = &s->cell[m][a];
            c->p_always = 1;
            c->lo = -INFINITY;
            c->hi = INFINITY;
            c->bound = NAN;
            c->info = NAN;
            c->z = NAN;
        }
    if (cfg->seq.method != SEQ_SPENDING)
        return AB_OK;
    struct seq_design d = {cfg->seq.shape, cfg->seq.gamma, cfg->alpha, cfg->seq.sides, 0};
    int rc = seq_monitor_init(&s->mon, &d, e);
    s->mon_ok = rc == AB_OK;
    return rc;
}

/* Direction a one-sided test looks in: the metric's "better", else higher. */
static int direction(const struct metric_cfg *mc)
{
    return mc->better < 0 ? -1 : 1;
}

static void spending_look(struct seqrun *s, const struct tallies *t,
                          const struct effect (*eff)[CONFIG_MAX_ARMS], int64_t time, bool final)
{
    const struct config *cfg = s->cfg;
    if (!s->mon_ok || s->mon.done || s->n_looks >= SEQRUN_MAX_LOOKS)
        return;
    double units = 0;
    for (int a = 0; a < cfg->n_arms; a++)
        units += (double)t->units[a];
    double frac = units / cfg->seq.planned_units;
    if (frac > 1)
        frac = 1;
    double prev = s->n_looks ? s->looks[s->n_looks - 1].t : 0;
    if (frac <= prev || seq_look_too_close(prev, frac, SEQ_MIN_GAP))
        return;
    struct seq_look lk;
    if (seq_monitor_next(&s->mon, frac, frac >= 1, &lk, NULL))
        return;
    s->looks[s->n_looks] = lk;
    s->look_time[s->n_looks++] = time;
    for (int m = 0; m < cfg->n_metrics; m++)
        for (int a = 0; a < cfg->n_arms; a++) {
            if (a == cfg->control)
                continue;
            struct seq_cell *c = &s->cell[m][a];
            const struct effect *ef = &eff[m][a];
            c->info = frac;
            c->bound = lk.z;
            c->z = ef->diff / ef->se;
            if (c->verdict == SV_UPPER || c->verdict == SV_LOWER)
                continue; /* a crossing stands */
            if (ef->n < cfg->seq.burn_in_units || ef->control_n < cfg->seq.burn_in_units) {
                c->verdict = SV_BURN_IN;
                continue;
            }
            c->verdict = SV_RUNNING;
            if (!isfinite(c->z))
                continue;
            int dir = direction(&cfg->metrics[m]);
            if (cfg->seq.sides == 2 ? fabs(c->z) >= lk.z : dir * c->z >= lk.z)
                c->verdict = c->z > 0 ? SV_UPPER : SV_LOWER;
        }
    (void)final;
}

static void mixture_update(struct seqrun *s, const struct tallies *t,
                           const struct effect (*eff)[CONFIG_MAX_ARMS])
{
    const struct config *cfg = s->cfg;
    for (int m = 0; m < cfg->n_metrics; m++)
        for (int a = 0; a < cfg->n_arms; a++) {
            if (a == cfg->control)
                continue;
            struct seq_cell *c = &s->cell[m][a];
            const struct effect *ef = &eff[m][a];
            double v = ef->se * ef->se;
            double n = ef->n + ef->control_n;
            c->z = ef->diff / ef->se;
            c->info = v > 0 ? 1 / v : NAN;
            if (ef->n < cfg->seq.burn_in_units || ef->control_n < cfg->seq.burn_in_units ||
                !(v > 0) || !isfinite(ef->diff)) {
                if (c->verdict == SV_RUNNING)
                    c->verdict = SV_BURN_IN;
                continue;
            }
            if (c->verdict == SV_BURN_IN)
                c->verdict = SV_RUNNING;
            double tau2, half;
            if (cfg->seq.method == SEQ_MIXTURE) {
                if (!(c->tau2 > 0)) {
                    double share = cfg->arms[a].weight + cfg->arms[cfg->control].weight;
                    double n_plan = cfg->seq.planned_units * share;
                    c->tau2 = cfg->seq.tau > 0 ? cfg->seq.tau * cfg->seq.tau
                                               : seq_msprt_tau2(v * n / n_plan, cfg->alpha);
                }
                tau2 = c->tau2;
                double llr = seq_msprt_log_lr(ef->diff, v, tau2, 0);
                if (isfinite(llr))
                    c->p_always = seq_msprt_p(c->p_always, llr);
                half = seq_msprt_halfwidth(v, tau2, cfg->alpha);
            } else {
                double share = cfg->arms[a].weight + cfg->arms[cfg->control].weight;
                double rho2 = cfg->seq.rho > 0 ? cfg->seq.rho * cfg->seq.rho
                                               : seq_cs_rho2(cfg->alpha, cfg->seq.planned_units * share);
                /* σ² = V·n, so σ²/n = V: the same half-width with τ² = ρ²σ² (METHODS §6c) */
                tau2 = rho2 * v * n;
                half = seq_msprt_halfwidth(v, tau2, cfg->alpha);
                double llr = seq_msprt_log_lr(ef->diff, v, tau2, 0);
                if (isfinite(llr))
                    c->p_always = seq_msprt_p(c->p_always, llr);
            }
            if (isfinite(half)) {
                if (ef->diff - half > c->lo)
                    c->lo = ef->diff - half;
                if (ef->diff + half < c->hi)
                    c->hi = ef->diff + half;
            }
            if (c->verdict == SV_RUNNING && (c->lo > 0 || c->hi < 0))
                c->verdict = c->lo > 0 ? SV_UPPER : SV_LOWER;
        }
    (void)t;
}

void seqrun_update(struct seqrun *s, const struct tallies *t, const struct effect (*eff)[CONFIG_MAX_ARMS],
                   int64_t time, bool final)
{
    const struct config *cfg = s->cfg;
    switch (cfg->seq.method) {
    case SEQ_SPENDING:
        if (s->next_look == INT64_MIN)
            s->next_look = time_floor(cfg->window_start == TIME_MIN_US ? time : cfg->window_start,
                                      cfg->seq.look_every_us) + cfg->seq.look_every_us;
        if (time >= s->next_look || final) {
            spending_look(s, t, eff, time, final);
            while (s->next_look <= time)
                s->next_look += cfg->seq.look_every_us;
        }
        break;
    case SEQ_MIXTURE:
    case SEQ_SEQUENCE:
        mixture_update(s, t, eff);
        break;
    default:
        break;
    }
}

json_t *seqrun_cell_json(const struct seqrun *s, int m, int a)
{
    const struct config *cfg = s->cfg;
    const struct seq_cell *c = &s->cell[m][a];
    json_t *o = json_object();
    switch (cfg->seq.method) {
    case SEQ_SPENDING:
        json_object_set_new(o, "info", json_num(c->info));
        json_object_set_new(o, "z", json_num(c->z));
        json_object_set_new(o, "bound", json_num(c->bound));
        break;
    case SEQ_MIXTURE:
    case SEQ_SEQUENCE: {
        json_object_set_new(o, "info", json_num(c->info));
        json_object_set_new(o, "p_always", json_num(c->p_always));
        json_t *iv = json_array();
        json_array_append_new(iv, json_num(c->lo));
        json_array_append_new(iv, json_num(c->hi));
        json_object_set_new(o, cfg->seq.method == SEQ_SEQUENCE ? "cs" : "ci_always", iv);
        break;
    }
    default:
        json_decref(o);
        return NULL;
    }
    json_object_set_new(o, "verdict", json_string(seq_verdict_name(c->verdict)));
    return o;
}

json_t *seqrun_looks_json(const struct seqrun *s)
{
    json_t *a = json_array();
    for (int i = 0; i < s->n_looks; i++) {
        char ts[40];
        time_format(s->look_time[i], ts, sizeof ts);
        json_array_append_new(a, json_pack("{s:s, s:o, s:o, s:o}", "time", ts, "fraction",
                                           json_num(s->looks[i].t), "z", json_num(s->looks[i].z),
                                           "alpha_cumulative", json_num(s->looks[i].alpha_cum)));
    }
    return a;
}

json_t *seqrun_to_json(const struct seqrun *s)
{
    const struct config *cfg = s->cfg;
    json_t *cells = json_array();
    for (int m = 0; m < cfg->n_metrics; m++)
        for (int a = 0; a < cfg->n_arms; a++) {
            if (a == cfg->control)
                continue;
            const struct seq_cell *c = &s->cell[m][a];
            json_array_append_new(cells, json_pack("{s:s, s:s, s:i, s:o, s:o, s:o, s:o, s:o, s:o, s:o}",
                                                   "metric", cfg->metrics[m].name, "arm",
                                                   cfg->arms[a].name, "verdict", c->verdict,
                                                   "p_always", json_num(c->p_always), "lo", json_num(c->lo),
                                                   "hi", json_num(c->hi), "tau2", json_num(c->tau2),
                                                   "info", json_num(c->info), "z", json_num(c->z),
                                                   "bound", json_num(c->bound)));
        }
    json_t *o = json_object();
    json_object_set_new(o, "experiment", json_string(cfg->experiment));
    json_object_set_new(o, "looks", seqrun_looks_json(s));
    json_object_set_new(o, "next_look", json_integer((json_int_t)(s->next_look == INT64_MIN ? 0 : s->next_look)));
    json_object_set_new(o, "cells", cells);
    return o;
}

static double num_or(const json_t *v, double dflt)
{
    return json_is_number(v) ? json_number_value(v) : dflt;
}

int seqrun_from_json(struct seqrun *s, const json_t *j, struct err *e)
{
    const struct config *cfg = s->cfg;
    const json_t *looks = json_object_get(j, "looks"), *cells = json_object_get(j, "cells");
    if (!json_is_array(looks) || !json_is_array(cells) ||
        !json_is_string(json_object_get(j, "experiment")) ||
        strcmp(json_string_value(json_object_get(j, "experiment")), cfg->experiment))
        return err_set(e, AB_EINPUT, "sequential state: malformed or of another experiment");
    size_t i;
    const json_t *l;
    json_array_foreach(looks, i, l)
    {
        if (!s->mon_ok || s->n_looks >= SEQRUN_MAX_LOOKS)
            break;
        double t = num_or(json_object_get(l, "fraction"), NAN);
        double z = num_or(json_object_get(l, "z"), INFINITY);
        int64_t when = 0;
        const json_t *ts = json_object_get(l, "time");
        if (!isfinite(t) || !json_is_string(ts) ||
            time_parse_rfc3339(json_string_value(ts), json_string_length(ts), &when) ||
            seq_monitor_freeze(&s->mon, t, z, t >= 1, &s->looks[s->n_looks], e))
            return err_set(e, AB_EINPUT, "sequential state: look %zu cannot be re-entered", i);
        s->look_time[s->n_looks++] = when;
    }
    json_int_t nl = json_integer_value(json_object_get(j, "next_look"));
    if (nl)
        s->next_look = (int64_t)nl;
    const json_t *c;
    json_array_foreach(cells, i, c)
    {
        const char *mn = json_string_value(json_object_get(c, "metric"));
        const char *an = json_string_value(json_object_get(c, "arm"));
        if (!mn || !an)
            continue;
        for (int m = 0; m < cfg->n_metrics; m++) {
            if (strcmp(cfg->metrics[m].name, mn))
                continue;
            int a = config_arm_index(cfg, an, strlen(an));
            if (a < 0)
                continue;
            struct seq_cell *x = &s->cell[m][a];
            x->verdict = (int)json_integer_value(json_object_get(c, "verdict"));
            if (x->verdict < 0 || x->verdict > SV_BURN_IN)
                x->verdict = SV_RUNNING;
            x->p_always = num_or(json_object_get(c, "p_always"), 1);
            x->lo = num_or(json_object_get(c, "lo"), -INFINITY);
            x->hi = num_or(json_object_get(c, "hi"), INFINITY);
            x->tau2 = num_or(json_object_get(c, "tau2"), 0);
            x->info = num_or(json_object_get(c, "info"), NAN);
            x->z = num_or(json_object_get(c, "z"), NAN);
            x->bound = num_or(json_object_get(c, "bound"), NAN);
        }
    }
    return AB_OK;
}
