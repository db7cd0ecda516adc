/*
 * config.c — loading and validating the experiment config (see config.h).
 *
 * Each section is read by one function that first refuses unknown keys, then
 * reads its known keys with typed getters that name the full key path in
 * every message ("metrics[1].type: ..."). Nothing is half-built on error:
 * the caller releases the config whatever the result.
 */
#include "config.h"

#include <errno.h>
#include <jansson.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "timefmt.h"

struct ctx {
    const char *name; /* config file name for messages */
    struct err *e;
};

static int bad(struct ctx *x, const char *path, const char *why)
{
    return err_set(x->e, AB_EINPUT, "config '%s': key '%s': %s", x->name, path, why);
}

/* Fails on any key of o not in the NULL-terminated list. */
static int only_keys(struct ctx *x, json_t *o, const char *path, const char *const *keys)
{
    const char *k;
    json_t *v;
    json_object_foreach(o, k, v)
    {
        int ok = 0;
        for (const char *const *p = keys; *p; p++)
            if (!strcmp(*p, k))
                ok = 1;
        if (!ok) {
            char full[256], allowed[512] = "";
            snprintf(full, sizeof full, "%s%s%s", path, *path ? "." : "", k);
            for (const char *const *p = keys; *p; p++) {
                strncat(allowed, *p, sizeof allowed - strlen(allowed) - 3);
                if (p[1])
                    strncat(allowed, ", ", sizeof allowed - strlen(allowed) - 1);
            }
            char why[640];
            snprintf(why, sizeof why, "unknown key (known here: %s)", allowed);
            return bad(x, full, why);
        }
    }
    return AB_OK;
}

static void join_path(char *out, size_t n, const char *path, const char *key)
{
    snprintf(out, n, "%s%s%s", path, *path ? "." : "", key);
}

/* Reads a string; *out is strdup'ed. Missing: error if required, else untouched. */
static int get_string(struct ctx *x, json_t *o, const char *path, const char *key, int required,
                      char **out)
{
    char full[256];
    join_path(full, sizeof full, path, key);
    json_t *v = json_object_get(o, key);
    if (!v)
        return required ? bad(x, full, "is required") : AB_OK;
    if (!json_is_string(v))
        return bad(x, full, "must be a string");
    if (json_string_length(v) == 0)
        return bad(x, full, "must not be empty");
    if (strlen(json_string_value(v)) != json_string_length(v))
        return bad(x, full, "must not contain a NUL character");
    free(*out);
    *out = strdup(json_string_value(v));
    return *out ? AB_OK : bad(x, full, "out of memory");
}

/* Reads a number in [lo, hi] (open ends when lo_open/hi_open). */
static int get_number(struct ctx *x, json_t *o, const char *path, const char *key, int required,
                      double lo, double hi, int lo_open, int hi_open, double *out, int *found)
{
    char full[256];
    join_path(full, sizeof full, path, key);
    json_t *v = json_object_get(o, key);
    if (found)
        *found = v != NULL;
    if (!v)
        return required ? bad(x, full, "is required") : AB_OK;
    if (!json_is_number(v))
        return bad(x, full, "must be a number");
    double d = json_number_value(v);
    if (!isfinite(d) || d < lo || d > hi || (lo_open && d == lo) || (hi_open && d == hi)) {
        char why[160];
        snprintf(why, sizeof why, "must be in %c%g, %g%c (got %g)", lo_open ? '(' : '[', lo, hi,
                 hi_open ? ')' : ']', d);
        return bad(x, full, why);
    }
    *out = d;
    return AB_OK;
}

static int get_time(struct ctx *x, json_t *o, const char *path, const char *key, int64_t *out)
{
    char full[256];
    join_path(full, sizeof full, path, key);
    json_t *v = json_object_get(o, key);
    if (!v)
        return bad(x, full, "is required");
    if (json_is_string(v)) {
        if (time_parse_rfc3339(json_string_value(v), json_string_length(v), out))
            return bad(x, full, "must be an RFC 3339 time like 2026-11-02T00:00:00Z");
        return AB_OK;
    }
    if (json_is_number(v) && !time_from_epoch_ms(json_number_value(v), out))
        return AB_OK;
    return bad(x, full, "must be an RFC 3339 time or integer epoch milliseconds");
}

/* A duration given as a string ("1d", "6h") or a number of hours. */
static int get_duration(struct ctx *x, json_t *o, const char *path, const char *key, int64_t *out)
{
    char full[256];
    join_path(full, sizeof full, path, key);
    json_t *v = json_object_get(o, key);
    if (!v)
        return AB_OK;
    if (json_is_string(v) && !duration_parse(json_string_value(v), out))
        return AB_OK;
    if (json_is_number(v) && json_number_value(v) > 0 && json_number_value(v) < 1e9) {
        *out = (int64_t)llround(json_number_value(v) * 3600e6);
        if (*out > 0)
            return AB_OK;
    }
    return bad(x, full, "must be a positive duration such as \"1d\", \"6h\" or a number of hours");
}

/* Maps a string value to one of the NULL-terminated choices; *out = its index. */
static int get_choice(struct ctx *x, json_t *o, const char *path, const char *key, int required,
                      const char *const *choices, int *out)
{
    char *s = NULL;
    int rc = get_string(x, o, path, key, required, &s);
    if (rc || !s)
        return rc;
    for (int i = 0; choices[i]; i++)
        if (!strcmp(choices[i], s)) {
            *out = i;
            free(s);
            return AB_OK;
        }
    char full[256], why[512] = "must be one of: ";
    join_path(full, sizeof full, path, key);
    for (int i = 0; choices[i]; i++) {
        strncat(why, choices[i], sizeof why - strlen(why) - 3);
        if (choices[i + 1])
            strncat(why, ", ", sizeof why - strlen(why) - 1);
    }
    snprintf(why + strlen(why), sizeof why - strlen(why), " (got \"%.40s\")", s);
    free(s);
    return bad(x, full, why);
}

static int get_object(struct ctx *x, json_t *o, const char *key, json_t **out)
{
    json_t *v = json_object_get(o, key);
    *out = NULL;
    if (!v)
        return AB_OK;
    if (!json_is_object(v))
        return bad(x, key, "must be an object");
    *out = v;
    return AB_OK;
}

static int read_arms(struct ctx *x, json_t *root, struct config *c)
{
    json_t *arms = json_object_get(root, "arms");
    if (!arms)
        return bad(x, "arms", "is required (a list of {\"name\", \"weight\"})");
    if (!json_is_array(arms))
        return bad(x, "arms", "must be a list of {\"name\", \"weight\"}");
    size_t n = json_array_size(arms);
    if (n < 2)
        return bad(x, "arms", "needs at least two arms");
    if (n > CONFIG_MAX_ARMS) {
        char why[96];
        snprintf(why, sizeof why, "has %zu arms; the limit is %d", n, CONFIG_MAX_ARMS);
        return bad(x, "arms", why);
    }
    static const char *const keys[] = {"name", "weight", "buckets", NULL};
    double total = 0;
    for (size_t i = 0; i < n; i++) {
        char path[64];
        snprintf(path, sizeof path, "arms[%zu]", i);
        json_t *a = json_array_get(arms, i);
        if (!json_is_object(a))
            return bad(x, path, "must be an object {\"name\", \"weight\"}");
        int rc;
        if ((rc = only_keys(x, a, path, keys)))
            return rc;
        struct arm_cfg *arm = &c->arms[i];
        c->n_arms = (int)i + 1;
        if ((rc = get_string(x, a, path, "name", 1, &arm->name)))
            return rc;
        for (size_t j = 0; j < i; j++)
            if (!strcmp(c->arms[j].name, arm->name))
                return bad(x, path, "repeats the name of an earlier arm");
        arm->weight = 1.0;
        if ((rc = get_number(x, a, path, "weight", 0, 0, 1e12, 1, 0, &arm->weight, NULL)))
            return rc;
        total += arm->weight;
        json_t *b = json_object_get(a, "buckets");
        if (b) {
            char full[96];
            snprintf(full, sizeof full, "%s.buckets", path);
            if (!json_is_array(b) || json_array_size(b) != 2 ||
                !json_is_number(json_array_get(b, 0)) || !json_is_number(json_array_get(b, 1)))
                return bad(x, full, "must be [first, end): two bucket numbers");
            double lo = json_number_value(json_array_get(b, 0));
            double hi = json_number_value(json_array_get(b, 1));
            if (!(lo >= 0 && hi > lo && hi <= 9007199254740992.0 && lo == floor(lo) && hi == floor(hi)))
                return bad(x, full, "must be whole numbers with 0 <= first < end");
            c->hash.lo[i] = (uint64_t)lo;
            c->hash.hi[i] = (uint64_t)hi;
        }
    }
    for (int i = 0; i < c->n_arms; i++)
        c->arms[i].weight /= total;
    return AB_OK;
}

static int read_metrics(struct ctx *x, json_t *root, struct config *c)
{
    json_t *ms = json_object_get(root, "metrics");
    if (!ms)
        return AB_OK;
    if (!json_is_array(ms))
        return bad(x, "metrics", "must be a list of metric objects");
    size_t n = json_array_size(ms);
    if (n > CONFIG_MAX_METRICS) {
        char why[96];
        snprintf(why, sizeof why, "has %zu metrics; the limit is %d", n, CONFIG_MAX_METRICS);
        return bad(x, "metrics", why);
    }
    static const char *const keys[] = {"name", "type", "event", "numerator", "denominator",
                                       "attribution_hours", "role", "better", "cap", NULL};
    static const char *const types[] = {"mean", "binary", "ratio", NULL};
    static const char *const roles[] = {"primary", "guardrail", "secondary", NULL};
    static const char *const betters[] = {"higher", "lower", NULL};
    for (size_t i = 0; i < n; i++) {
        char path[64];
        snprintf(path, sizeof path, "metrics[%zu]", i);
        json_t *m = json_array_get(ms, i);
        if (!json_is_object(m))
            return bad(x, path, "must be an object");
        int rc;
        if ((rc = only_keys(x, m, path, keys)))
            return rc;
        struct metric_cfg *mc = &c->metrics[i];
        c->n_metrics = (int)i + 1;
        if ((rc = get_string(x, m, path, "name", 1, &mc->name)))
            return rc;
        for (size_t j = 0; j < i; j++)
            if (!strcmp(c->metrics[j].name, mc->name))
                return bad(x, path, "repeats the name of an earlier metric");
        int t = 0;
        if ((rc = get_choice(x, m, path, "type", 1, types, &t)))
            return rc;
        mc->type = (enum metric_type)t;
        if (mc->type == MT_RATIO) {
            if ((rc = get_string(x, m, path, "numerator", 1, &mc->numerator)) ||
                (rc = get_string(x, m, path, "denominator", 1, &mc->denominator)))
                return rc;
            if (json_object_get(m, "event"))
                return bad(x, path, "a ratio metric takes numerator and denominator, not event");
        } else {
            if (json_object_get(m, "numerator") || json_object_get(m, "denominator"))
                return bad(x, path, "numerator and denominator belong to ratio metrics; use event");
            if ((rc = get_string(x, m, path, "event", 0, &mc->event)))
                return rc;
            if (!mc->event && !(mc->event = strdup(mc->name)))
                return bad(x, path, "out of memory");
        }
        double h = 0;
        int found = 0;
        if ((rc = get_number(x, m, path, "attribution_hours", 0, 0, 1e6, 1, 0, &h, &found)))
            return rc;
        mc->has_window = found;
        mc->window_us = (int64_t)llround(h * 3600e6);
        int role = 0;
        if ((rc = get_choice(x, m, path, "role", 0, roles, &role)))
            return rc;
        mc->role = (enum metric_role)role;
        int b = -1;
        if ((rc = get_choice(x, m, path, "better", 0, betters, &b)))
            return rc;
        mc->better = b == 0 ? 1 : b == 1 ? -1 : 0;
        if (mc->role == ROLE_GUARDRAIL && mc->better == 0)
            return bad(x, path, "a guardrail metric needs \"better\": \"higher\" or \"lower\"");
        if ((rc = get_number(x, m, path, "cap", 0, -1e300, 1e300, 0, 0, &mc->cap, &found)))
            return rc;
        mc->has_cap = found;
        if (mc->type == MT_BINARY && mc->has_cap)
            return bad(x, path, "cap does not apply to a binary metric");
    }
    return AB_OK;
}

static int read_sequential(struct ctx *x, json_t *root, struct config *c)
{
    json_t *s;
    int rc;
    struct seq_cfg *q = &c->seq;
    q->look_every_us = US_PER_DAY;
    q->sides = 2;
    q->burn_in_units = 100;
    if ((rc = get_object(x, root, "sequential", &s)) || !s)
        return rc;
    static const char *const keys[] = {"method", "shape", "gamma", "planned_units", "look_every",
                                       "tau", "rho", "sides", "burn_in", NULL};
    static const char *const methods[] = {"none", "spending", "mixture", "sequence", NULL};
    static const char *const shapes[] = {"obf", "pocock", "hsd", NULL};
    if ((rc = only_keys(x, s, "sequential", keys)))
        return rc;
    int m = 0, sh = 0, found = 0;
    if ((rc = get_choice(x, s, "sequential", "method", 1, methods, &m)) ||
        (rc = get_choice(x, s, "sequential", "shape", 0, shapes, &sh)))
        return rc;
    q->method = (enum seq_method)m;
    q->shape = (enum seq_shape)sh;
    q->gamma = -4;
    if ((rc = get_number(x, s, "sequential", "gamma", 0, -40, 40, 0, 0, &q->gamma, &found)))
        return rc;
    if (found && q->shape != SEQ_HSD)
        return bad(x, "sequential.gamma", "applies only to shape \"hsd\"");
    if ((rc = get_number(x, s, "sequential", "planned_units", 0, 1, 1e15, 0, 0, &q->planned_units,
                         &found)))
        return rc;
    if (q->method == SEQ_SPENDING && !found)
        return bad(x, "sequential.planned_units",
                   "is required with method \"spending\" (total units at the last look)");
    if ((rc = get_duration(x, s, "sequential", "look_every", &q->look_every_us)) ||
        (rc = get_number(x, s, "sequential", "tau", 0, 0, 1e300, 1, 0, &q->tau, NULL)) ||
        (rc = get_number(x, s, "sequential", "rho", 0, 0, 1e300, 1, 0, &q->rho, NULL)))
        return rc;
    double sides = 2, burn = 100;
    if ((rc = get_number(x, s, "sequential", "sides", 0, 1, 2, 0, 0, &sides, NULL)) ||
        (rc = get_number(x, s, "sequential", "burn_in", 0, 2, 1e9, 0, 0, &burn, NULL)))
        return rc;
    if (sides != 1 && sides != 2)
        return bad(x, "sequential.sides", "must be 1 or 2");
    q->sides = (int)sides;
    q->burn_in_units = (int)burn;
    if ((q->method == SEQ_MIXTURE && !q->tau && !q->planned_units) ||
        (q->method == SEQ_SEQUENCE && !q->rho && !q->planned_units))
        return bad(x, "sequential.planned_units",
                   "is required to tune the mixture when tau (mixture) or rho (sequence) is not given");
    return AB_OK;
}

static int read_integrity(struct ctx *x, json_t *root, struct config *c)
{
    struct integrity_cfg *g = &c->integ;
    g->p_fail = 0.001;
    g->multi_arm_fail = 0.01;
    g->outside_window_warn = 0.001;
    g->duplicates_warn = 0.001;
    g->rejected_warn = 0.001;
    g->rejected_fail = 0.05;
    g->smd_warn = 0.1;
    g->late_warn = 0.001;
    json_t *o;
    int rc;
    if ((rc = get_object(x, root, "integrity", &o)) || !o)
        return rc;
    static const char *const keys[] = {"p_fail", "multi_arm_fail", "outside_window_warn",
                                       "duplicates_warn", "rejected_warn", "rejected_fail",
                                       "smd_warn", "late_warn", NULL};
    if ((rc = only_keys(x, o, "integrity", keys)))
        return rc;
    const char *const *k = keys;
    double *dst[] = {&g->p_fail, &g->multi_arm_fail, &g->outside_window_warn, &g->duplicates_warn,
                     &g->rejected_warn, &g->rejected_fail, &g->smd_warn, &g->late_warn};
    for (size_t i = 0; k[i]; i++)
        if ((rc = get_number(x, o, "integrity", k[i], 0, 0, 1e6, 0, 0, dst[i], NULL)))
            return rc;
    return AB_OK;
}

static int read_hash(struct ctx *x, json_t *root, struct config *c)
{
    json_t *o;
    int rc;
    if ((rc = get_object(x, root, "hash", &o)) || !o) {
        for (int i = 0; !rc && i < c->n_arms; i++)
            if (c->hash.hi[i]) {
                char path[64];
                snprintf(path, sizeof path, "arms[%d].buckets", i);
                rc = bad(x, path, "needs a \"hash\" section describing the assignment hash");
            }
        return rc;
    }
    static const char *const keys[] = {"function", "salt", "buckets", "format", NULL};
    static const char *const fns[] = {"sha256", "md5", NULL};
    if ((rc = only_keys(x, o, "hash", keys)) ||
        (rc = get_choice(x, o, "hash", "function", 1, fns, &c->hash.function)) ||
        (rc = get_string(x, o, "hash", "salt", 1, &c->hash.salt)) ||
        (rc = get_string(x, o, "hash", "format", 0, &c->hash.format)))
        return rc;
    double b = 0;
    if ((rc = get_number(x, o, "hash", "buckets", 1, 1, 9007199254740992.0, 0, 0, &b, NULL)))
        return rc;
    if (b != floor(b))
        return bad(x, "hash.buckets", "must be a whole number");
    c->hash.buckets = (uint64_t)b;
    if (!c->hash.format && !(c->hash.format = strdup("{salt}{unit}")))
        return bad(x, "hash.format", "out of memory");
    if (!strstr(c->hash.format, "{unit}"))
        return bad(x, "hash.format", "must contain {unit}");
    for (int i = 0; i < c->n_arms; i++) {
        char path[64];
        snprintf(path, sizeof path, "arms[%d].buckets", i);
        if (!c->hash.hi[i])
            return bad(x, path, "is required when \"hash\" is given");
        if (c->hash.hi[i] > c->hash.buckets)
            return bad(x, path, "goes past hash.buckets");
        for (int j = 0; j < i; j++)
            if (c->hash.lo[i] < c->hash.hi[j] && c->hash.lo[j] < c->hash.hi[i])
                return bad(x, path, "overlaps the bucket range of an earlier arm");
    }
    c->hash.enabled = true;
    return AB_OK;
}

static int parse_root(struct ctx *x, json_t *root, struct config *c)
{
    int rc;
    if (!json_is_object(root))
        return err_set(x->e, AB_EINPUT, "config '%s': must be a JSON object", x->name);
    static const char *const keys[] = {"experiment", "arms", "control", "window", "metrics",
                                       "covariate", "alpha", "srm", "sequential", "integrity",
                                       "hash", NULL};
    if ((rc = only_keys(x, root, "", keys)) ||
        (rc = get_string(x, root, "", "experiment", 1, &c->experiment)) ||
        (rc = read_arms(x, root, c)))
        return rc;
    char *control = NULL;
    if ((rc = get_string(x, root, "", "control", 0, &control)))
        return rc;
    c->control = config_arm_index(c, control ? control : "control",
                                  strlen(control ? control : "control"));
    if (c->control < 0) {
        rc = bad(x, "control", control ? "names no arm of \"arms\""
                                       : "is required when no arm is named \"control\"");
        free(control);
        return rc;
    }
    free(control);

    json_t *w;
    c->window_start = TIME_MIN_US;
    c->window_end = TIME_MAX_US;
    if ((rc = get_object(x, root, "window", &w)))
        return rc;
    if (w) {
        static const char *const wk[] = {"start", "end", NULL};
        if ((rc = only_keys(x, w, "window", wk)) ||
            (rc = get_time(x, w, "window", "start", &c->window_start)) ||
            (rc = get_time(x, w, "window", "end", &c->window_end)))
            return rc;
        if (c->window_end <= c->window_start)
            return bad(x, "window.end", "must be after window.start");
    }
    if ((rc = read_metrics(x, root, c)))
        return rc;

    json_t *cv;
    if ((rc = get_object(x, root, "covariate", &cv)))
        return rc;
    if (cv) {
        static const char *const ck[] = {"pre_days", NULL};
        double d = 0;
        if ((rc = only_keys(x, cv, "covariate", ck)) ||
            (rc = get_number(x, cv, "covariate", "pre_days", 1, 0, 3660, 1, 0, &d, NULL)))
            return rc;
        c->has_covariate = true;
        c->pre_us = (int64_t)llround(d * 86400e6);
    }
    c->alpha = 0.05;
    if ((rc = get_number(x, root, "", "alpha", 0, 0, 0.5, 1, 0, &c->alpha, NULL)))
        return rc;

    json_t *s;
    c->srm_threshold = 0.001;
    c->srm_prior = 100;
    if ((rc = get_object(x, root, "srm", &s)))
        return rc;
    if (s) {
        static const char *const sk[] = {"threshold", "prior", "test", NULL};
        static const char *const tests[] = {"chi2", "sequential", NULL};
        int test = 0;
        if ((rc = only_keys(x, s, "srm", sk)) ||
            (rc = get_choice(x, s, "srm", "test", 0, tests, &test)) ||
            (rc = get_number(x, s, "srm", "threshold", 0, 0, 1, 1, 1, &c->srm_threshold, NULL)) ||
            (rc = get_number(x, s, "srm", "prior", 0, 0, 1e12, 1, 0, &c->srm_prior, NULL)))
            return rc;
        c->srm_sequential = test == 1;
    }
    if ((rc = read_sequential(x, root, c)) || (rc = read_integrity(x, root, c)) ||
        (rc = read_hash(x, root, c)))
        return rc;
    return AB_OK;
}

int config_parse(const char *text, size_t len, const char *name, struct config *c, struct err *e)
{
    memset(c, 0, sizeof *c);
    struct ctx x = {name, e};
    json_error_t je;
    json_t *root = json_loadb(text, len, JSON_REJECT_DUPLICATES, &je);
    if (!root)
        return err_set(e, AB_EINPUT, "config '%s': line %d column %d: %s", name, je.line,
                       je.column, je.text);
    int rc = parse_root(&x, root, c);
    json_decref(root);
    return rc;
}

int config_load(const char *path, struct config *c, struct err *e)
{
    memset(c, 0, sizeof *c);
    FILE *f = fopen(path, "rb");
    if (!f)
        return err_set(e, AB_EINPUT, "config '%s': %s", path, strerror(errno));
    char *buf = malloc(CONFIG_MAX_BYTES + 1);
    if (!buf) {
        fclose(f);
        return err_set(e, AB_EINPUT, "config '%s': out of memory", path);
    }
    size_t n = fread(buf, 1, CONFIG_MAX_BYTES + 1, f);
    int rerr = ferror(f);
    fclose(f);
    int rc;
    if (rerr)
        rc = err_set(e, AB_EINPUT, "config '%s': read failed", path);
    else if (n > CONFIG_MAX_BYTES)
        rc = err_set(e, AB_EINPUT, "config '%s': larger than the limit of %d bytes", path,
                     CONFIG_MAX_BYTES);
    else
        rc = config_parse(buf, n, path, c, e);
    free(buf);
    return rc;
}

void config_release(struct config *c)
{
    free(c->experiment);
    for (int i = 0; i < c->n_arms; i++)
        free(c->arms[i].name);
    for (int i = 0; i < c->n_metrics; i++) {
        struct metric_cfg *m = &c->metrics[i];
        free(m->name);
        free(m->event);
        free(m->numerator);
        free(m->denominator);
    }
    free(c->hash.salt);
    free(c->hash.format);
    memset(c, 0, sizeof *c);
}

int config_arm_index(const struct config *c, const char *s, size_t n)
{
    for (int i = 0; i < c->n_arms; i++)
        if (strlen(c->arms[i].name) == n && !memcmp(c->arms[i].name, s, n))
            return i;
    return -1;
}
