/*
 * seq.c — sequential-testing statistics (see seq.h; METHODS.md §6, §8).
 *
 * Recursive integration (Armitage, McPherson & Rowe 1969; Jennison &
 * Turnbull 2000, ch. 19). With D = t_k − t_{k−1} and θ the drift at t = 1,
 *   h_1(z) = φ(z − θ√t_1)
 *   h_k(z) = ∫ h_{k−1}(u) (√t_k/√D) φ((z√t_k − u√t_{k−1} − θD)/√D) du
 *   exit_k = ∫ h_{k−1}(u) [Q((hi√t_k − m)/√D) + Φ((lo√t_k − m)/√D)] du,
 *            m = u√t_{k−1} + θD,
 * each integral taken over the previous look's continuation region. The
 * grid of look k is J&T's: points centred on θ√t_k, evenly spaced 3/(2r)
 * within ±3 and spreading logarithmically to ±(3 + 4 ln r); the points
 * inside the region plus its finite ends, with midpoints inserted, carry
 * Simpson weights. One change: when a bound lies 3 to 6 from the centre the
 * even part reaches it (see make_grid), which keeps 50 OBF-type looks at
 * r = 16 within 2e-5 of r = 64 (J&T's grid alone: 3e-4). A walk keeps the
 * products weight × density, so an exit probability is one O(grid) sum and
 * a step one O(grid²) double sum; a null walk through symmetric regions
 * keeps an even density and computes half of it.
 *
 * Invariants: a walk's grid is sorted and lies inside the region of its
 * last look; w->up + w->down + (mass still held) = 1 up to the quadrature
 * error; a monitor's looks are strictly increasing in t.
 */
#include "seq.h"

#include <float.h>
#include <math.h>
#include <string.h>

#include <gsl/gsl_cdf.h>
#include <gsl/gsl_errno.h>
#include <gsl/gsl_math.h>
#include <gsl/gsl_roots.h>

#define ROOT_MAX_ITER 200
#define BOUND_TOL 1e-10     /* absolute tolerance of a bound on the Z scale */
#define DRIFT_TOL 1e-10     /* absolute tolerance of a drift */
#define TINY_SPEND 1e-290   /* a look spending less than this gets bound +∞ */
#define PROB_FLOOR 1e-300   /* exit probabilities below this count as this */
#define BOUND_CAP 40.0      /* the largest finite bound searched */
#define PHI_CUT 38.0        /* φ(x) is taken as 0 beyond |x| > PHI_CUT */

/* ------------------------------------------------------------------------ */
/* Spending functions                                                        */

double seq_spend(enum seq_shape shape, double gamma, double level, double t)
{
    if (!(level > 0 && level < 1) || isnan(t))
        return NAN;
    if (t <= 0)
        return 0;
    if (t >= 1)
        return level;
    switch (shape) {
    case SEQ_OBF:
        /* 2 − 2Φ(z_{1−L/2}/√t), with the upper tail taken directly. */
        return 2.0 * gsl_cdf_ugaussian_Q(gsl_cdf_ugaussian_Qinv(level / 2.0) / sqrt(t));
    case SEQ_POCOCK:
        return level * log1p((M_E - 1.0) * t);
    case SEQ_HSD:
        if (isnan(gamma) || isinf(gamma))
            return NAN;
        if (fabs(gamma) < 1e-12)
            return level * t;
        return level * expm1(-gamma * t) / expm1(-gamma);
    }
    return NAN;
}

double seq_side_level(double alpha, int sides)
{
    if (sides == 2)
        return alpha / 2.0;
    if (sides == 1)
        return alpha;
    return NAN;
}

int seq_shape_parse(const char *name, enum seq_shape *out)
{
    static const struct {
        const char *name;
        enum seq_shape shape;
    } names[] = {{"obf", SEQ_OBF}, {"pocock", SEQ_POCOCK}, {"hsd", SEQ_HSD}};
    for (size_t i = 0; i < sizeof names / sizeof names[0]; i++)
        if (name && !strcmp(name, names[i].name)) {
            *out = names[i].shape;
            return AB_OK;
        }
    return AB_EUSAGE;
}

const char *seq_shape_name(enum seq_shape shape)
{
    switch (shape) {
    case SEQ_OBF:
        return "obf";
    case SEQ_POCOCK:
        return "pocock";
    case SEQ_HSD:
        return "hsd";
    }
    return "?";
}

bool seq_look_too_close(double t_prev, double t, double min_gap)
{
    /* A hair of slack so that equal looks 1/K apart are not skipped for
     * rounding (0.03 − 0.02 < 0.01 in binary). */
    return t < 1.0 && t - t_prev < min_gap * (1.0 - 1e-9);
}

/* ------------------------------------------------------------------------ */
/* Root finding                                                              */

/* Finds the root of f in [lo, hi] with Brent's method; f(lo) and f(hi) must
 * have opposite signs (the caller checks, to give a better message). */
static int brent(double (*f)(double, void *), void *params, double lo, double hi,
                 double tol, double *root, const char *what, struct err *e)
{
    gsl_function fn = {f, params};
    gsl_root_fsolver *s = gsl_root_fsolver_alloc(gsl_root_fsolver_brent);
    if (!s)
        return err_set(e, AB_EINPUT, "%s: out of memory for the root finder", what);
    int rc = gsl_root_fsolver_set(s, &fn, lo, hi);
    int status = rc;
    for (int iter = 0; rc == GSL_SUCCESS && iter < ROOT_MAX_ITER; iter++) {
        rc = gsl_root_fsolver_iterate(s);
        if (rc != GSL_SUCCESS)
            break;
        status = gsl_root_test_interval(gsl_root_fsolver_x_lower(s),
                                        gsl_root_fsolver_x_upper(s), tol, 0);
        if (status == GSL_SUCCESS)
            break;
    }
    double x = gsl_root_fsolver_root(s);
    gsl_root_fsolver_free(s);
    if (rc != GSL_SUCCESS)
        return err_set(e, AB_EINPUT, "%s: root finder failed (%s)", what, gsl_strerror(rc));
    if (status != GSL_SUCCESS)
        return err_set(e, AB_EINPUT, "%s: root finder did not converge", what);
    *root = x;
    return AB_OK;
}

/* ------------------------------------------------------------------------ */
/* Recursive integration                                                     */

int seq_walk_init(struct seq_walk *w, double theta, int r, struct err *e)
{
    if (!isfinite(theta))
        return err_set(e, AB_EINPUT, "sequential: drift %g: must be finite", theta);
    if (r < 0 || r > SEQ_GRID_R_MAX)
        return err_set(e, AB_EINPUT, "sequential: grid density %d: must be in 0..%d", r,
                       SEQ_GRID_R_MAX);
    w->theta = theta;
    w->r = r ? r : SEQ_GRID_R;
    w->looks = 0;
    w->t = 0;
    w->n = 0;
    w->even = true;
    w->up = 0;
    w->down = 0;
    return AB_OK;
}

static int check_look(const struct seq_walk *w, double t, double lo, double hi,
                      struct err *e)
{
    if (!isfinite(t) || !(t > w->t))
        return err_set(e, AB_EINPUT,
                       "sequential: look at t = %g: must be finite and after the last look "
                       "(t = %g)",
                       t, w->t);
    if (isnan(lo) || isnan(hi) || !(lo <= hi))
        return err_set(e, AB_EINPUT, "sequential: look at t = %g: region (%g, %g) is reversed",
                       t, lo, hi);
    return AB_OK;
}

/* Half-width of the dense part of the grid on one side: J&T's 3, widened
 * to reach a finite bound up to GRID_DENSE_MAX away. With many looks the
 * early OBF-type bounds lie at 3–6, where J&T's logarithmic tail spacing
 * (4/i) is coarse next to the kernel of a short step (sd √(D/t), 0.2 at
 * 50 looks), and the exit probability depends on the density right there. */
#define GRID_DENSE_MAX 6.0
static double dense_half(double mu, double bound)
{
    double d = fabs(bound - mu);
    if (isinf(d) || d <= 3.0)
        return 3.0;
    return d < GRID_DENSE_MAX ? d : GRID_DENSE_MAX;
}

/* The grid of a look at t with region (lo, hi) for drift theta: points into
 * z[], Simpson weights into wt[]; returns the count (0 when the region lies
 * outside the grid's span, which then holds no mass worth carrying).
 * J&T ch. 19: with a = b = 3, the points are
 *   μ − a − 4ln(r/i)           for i = 1..r−1
 *   μ − a ... μ + b            evenly, spacing ≤ 3/(2r)
 *   μ + b + 4ln(r/(r−i))       for i = 1..r−1,
 * of which those inside (lo, hi) are kept, the finite ends added and the
 * midpoints inserted. Here a and b widen to reach a bound up to 6 away. */
static int make_grid(int r, double mu, double lo, double hi, double *z, double *wt)
{
    double p[SEQ_GRID_MAX / 2 + 2];
    int np = 0;
    double a = dense_half(mu, lo), b = dense_half(mu, hi);
    double x1 = mu - a - 4.0 * log((double)r);
    double xl = mu + b + 4.0 * log((double)r);
    int m = (int)ceil((a + b) / (3.0 / (2.0 * r)) - 1e-9); /* dense panels */
    if (lo > x1)
        p[np++] = lo;
    for (int i = 1; i < r; i++) {
        double x = mu - a - 4.0 * log((double)r / i);
        if (x > lo && x < hi)
            p[np++] = x;
    }
    for (int i = 0; i <= m; i++) {
        /* Both ends computed from the outside in, so a symmetric grid is
         * symmetric to the last bit. */
        double x = 2 * i <= m ? mu - a + (a + b) * i / m : mu + b - (a + b) * (m - i) / m;
        if (x > lo && x < hi)
            p[np++] = x;
    }
    for (int i = r - 1; i >= 1; i--) {
        double x = mu + b + 4.0 * log((double)r / i);
        if (x > lo && x < hi)
            p[np++] = x;
    }
    if (hi < xl)
        p[np++] = hi;
    if (np < 2 || !(lo < hi))
        return 0;
    int n = 2 * np - 1;
    for (int i = 0; i < n; i++)
        wt[i] = 0;
    for (int i = 0; i < np - 1; i++) {
        double d = p[i + 1] - p[i];
        z[2 * i] = p[i];
        z[2 * i + 1] = 0.5 * (p[i] + p[i + 1]);
        wt[2 * i] += d / 6.0;
        wt[2 * i + 1] += 4.0 * d / 6.0;
        wt[2 * i + 2] += d / 6.0;
    }
    z[n - 1] = p[np - 1];
    return n;
}

int seq_walk_exit(const struct seq_walk *w, double t, double lo, double hi, double *up,
                  double *down, struct err *e)
{
    int rc = check_look(w, t, lo, hi, e);
    if (rc)
        return rc;
    double pu = 0, pd = 0;
    if (w->looks == 0) {
        double mu = w->theta * sqrt(t);
        pu = isinf(hi) ? 0 : gsl_cdf_ugaussian_Q(hi - mu);
        pd = isinf(lo) ? 0 : gsl_cdf_ugaussian_P(lo - mu);
    } else {
        double d = t - w->t;
        double sd = sqrt(d), st = sqrt(t), sp = sqrt(w->t);
        double drift = w->theta * d;
        double a_hi = hi * st, a_lo = lo * st;
        if (w->even && w->theta == 0 && lo == -hi && !isinf(hi)) {
            /* Even density, symmetric region: the tails are equal. */
            for (int i = 0; i < w->n; i++)
                pu += w->m[i] * gsl_cdf_ugaussian_Q((a_hi - w->z[i] * sp) / sd);
            *up = pu;
            *down = pu;
            return AB_OK;
        }
        for (int i = 0; i < w->n; i++) {
            double m = w->z[i] * sp + drift;
            if (!isinf(hi))
                pu += w->m[i] * gsl_cdf_ugaussian_Q((a_hi - m) / sd);
            if (!isinf(lo))
                pd += w->m[i] * gsl_cdf_ugaussian_P((a_lo - m) / sd);
        }
    }
    *up = pu;
    *down = pd;
    return AB_OK;
}

int seq_walk_step(struct seq_walk *w, double t, double lo, double hi, struct err *e)
{
    double pu, pd;
    int rc = seq_walk_exit(w, t, lo, hi, &pu, &pd, e);
    if (rc)
        return rc;
    double z[SEQ_GRID_MAX], wt[SEQ_GRID_MAX];
    double mu = w->theta * sqrt(t);
    int n = make_grid(w->r, mu, lo, hi, z, wt);
    bool even = (w->looks == 0 || w->even) && w->theta == 0 && lo == -hi;
    /* An even density on a symmetric grid: compute one half, mirror it. */
    int half = even ? (n + 1) / 2 : n;
    if (w->looks == 0) {
        for (int j = 0; j < n; j++) {
            double x = z[j] - mu;
            wt[j] *= exp(-0.5 * x * x) / sqrt(2.0 * M_PI);
        }
    } else {
        double d = t - w->t;
        double sd = sqrt(d);
        double a = sqrt(t) / sd;      /* coefficient of the new z */
        double b = sqrt(w->t) / sd;   /* coefficient of the old u */
        double c = w->theta * sd;     /* θD/√D */
        double norm = a / sqrt(2.0 * M_PI);
        for (int j = 0; j < half; j++) {
            double base = z[j] * a - c;
            double s = 0;
            for (int i = 0; i < w->n; i++) {
                double x = base - b * w->z[i];
                if (fabs(x) < PHI_CUT)
                    s += w->m[i] * exp(-0.5 * x * x);
            }
            wt[j] *= norm * s;
        }
    }
    for (int j = half; j < n; j++)
        wt[j] = wt[n - 1 - j];
    memcpy(w->z, z, (size_t)n * sizeof z[0]);
    memcpy(w->m, wt, (size_t)n * sizeof wt[0]);
    w->n = n;
    w->t = t;
    w->looks++;
    w->even = even;
    w->up += pu;
    w->down += pd;
    return AB_OK;
}

/* ------------------------------------------------------------------------ */
/* Efficacy bounds                                                           */

int seq_design_check(const struct seq_design *d, struct err *e)
{
    if (d->sides != 1 && d->sides != 2)
        return err_set(e, AB_EINPUT, "sequential: sides %d: must be 1 or 2", d->sides);
    if (!(d->alpha > 0 && d->alpha < 1) || !(d->alpha / d->sides < 0.5))
        return err_set(e, AB_EINPUT, "sequential: alpha %g: must be in (0, %s)", d->alpha,
                       d->sides == 2 ? "1" : "0.5");
    if (d->shape != SEQ_OBF && d->shape != SEQ_POCOCK && d->shape != SEQ_HSD)
        return err_set(e, AB_EINPUT, "sequential: unknown spending shape %d", (int)d->shape);
    if (d->shape == SEQ_HSD && !isfinite(d->gamma))
        return err_set(e, AB_EINPUT, "sequential: gamma %g: must be finite", d->gamma);
    if (d->r < 0 || d->r > SEQ_GRID_R_MAX)
        return err_set(e, AB_EINPUT, "sequential: grid density %d: must be in 0..%d", d->r,
                       SEQ_GRID_R_MAX);
    return AB_OK;
}

int seq_monitor_init(struct seq_monitor *m, const struct seq_design *d, struct err *e)
{
    int rc = seq_design_check(d, e);
    if (rc)
        return rc;
    m->d = *d;
    m->spent = 0;
    m->done = false;
    return seq_walk_init(&m->w, 0.0, d->r, e);
}

/* Parameters of the bound equation log P₀(exit beyond ±c) = log target. */
struct bound_eq {
    const struct seq_walk *w;
    double t;
    int sides;
    double log_target;
};

static double bound_fn(double c, void *params)
{
    const struct bound_eq *q = params;
    double up, down;
    double lo = q->sides == 2 ? -c : -INFINITY;
    if (seq_walk_exit(q->w, q->t, lo, c, &up, &down, NULL))
        return NAN;
    double p = up + down;
    return log(p > PROB_FLOOR ? p : PROB_FLOOR) - q->log_target;
}

/* The bound c of a look at t that spends `target` (both sides together)
 * given the walk so far: +∞ when target is negligible. */
static int solve_bound(const struct seq_walk *w, double t, int sides, double target,
                       double *c, struct err *e)
{
    if (!(target > TINY_SPEND)) {
        *c = INFINITY;
        return AB_OK;
    }
    struct bound_eq q = {w, t, sides, log(target)};
    double lo = sides == 2 ? 1e-9 : -BOUND_CAP / 4.0;
    double flo = bound_fn(lo, &q), fhi = bound_fn(BOUND_CAP, &q);
    if (isnan(flo) || isnan(fhi))
        return err_set(e, AB_EINPUT, "sequential: look at t = %g: exit probability undefined", t);
    if (flo < 0)
        return err_set(e, AB_EINPUT,
                       "sequential: look at t = %g: cannot spend %g, the paths still running "
                       "carry less",
                       t, target);
    if (fhi >= 0) {
        *c = BOUND_CAP;
        return AB_OK;
    }
    return brent(bound_fn, &q, lo, BOUND_CAP, BOUND_TOL, c, "sequential: bound", e);
}

/* Shared by next and freeze: takes the look at t with bound c. */
static int monitor_take(struct seq_monitor *m, double t, double c, bool final, double s,
                        struct seq_look *out, struct err *e)
{
    double before = m->w.up + m->w.down;
    double lo = m->d.sides == 2 ? -c : -INFINITY;
    int rc = seq_walk_step(&m->w, t, lo, c, e);
    if (rc)
        return rc;
    if (out) {
        double after = isnan(s) ? m->w.up + m->w.down : m->d.sides * s;
        out->t = t;
        out->z = c;
        out->alpha_cum = after;
        out->alpha_spent = after - before;
        if (out->alpha_spent < 0)
            out->alpha_spent = 0;
    }
    if (!isnan(s))
        m->spent = s;
    if (final || t >= 1.0)
        m->done = true;
    return AB_OK;
}

static int monitor_check(const struct seq_monitor *m, double t, struct err *e)
{
    if (m->done)
        return err_set(e, AB_EINPUT, "sequential: look at t = %g: the final look was taken", t);
    if (!isfinite(t) || !(t > m->w.t))
        return err_set(e, AB_EINPUT,
                       "sequential: look at t = %g: must be finite and after the last look "
                       "(t = %g)",
                       t, m->w.t);
    return AB_OK;
}

/* The look at t that brings the per-side spend to s. */
static int monitor_spend(struct seq_monitor *m, double t, bool final, double s,
                         struct seq_look *out, struct err *e)
{
    if (s < m->spent)
        s = m->spent;
    /* Aim at the cumulative target: the spend of this look is what the
     * function allows by t minus what the frozen looks actually spent. */
    double target = m->d.sides * s - (m->w.up + m->w.down);
    double c;
    int rc = solve_bound(&m->w, t, m->d.sides, target, &c, e);
    if (rc)
        return rc;
    return monitor_take(m, t, c, final, s, out, e);
}

int seq_monitor_next(struct seq_monitor *m, double t, bool final, struct seq_look *out,
                     struct err *e)
{
    int rc = monitor_check(m, t, e);
    if (rc)
        return rc;
    double level = seq_side_level(m->d.alpha, m->d.sides);
    double s = (final || t >= 1.0) ? level : seq_spend(m->d.shape, m->d.gamma, level, t);
    return monitor_spend(m, t, final, s, out, e);
}

int seq_monitor_next_cum(struct seq_monitor *m, double t, double alpha_cum, bool final,
                         struct seq_look *out, struct err *e)
{
    int rc = monitor_check(m, t, e);
    if (rc)
        return rc;
    if (!(alpha_cum >= 0 && alpha_cum <= m->d.alpha))
        return err_set(e, AB_EINPUT,
                       "sequential: look at t = %g: cumulative error %g must be in [0, %g]", t,
                       alpha_cum, m->d.alpha);
    return monitor_spend(m, t, final, alpha_cum / m->d.sides, out, e);
}

int seq_monitor_freeze(struct seq_monitor *m, double t, double z, bool final,
                       struct seq_look *out, struct err *e)
{
    int rc = monitor_check(m, t, e);
    if (rc)
        return rc;
    if (isnan(z) || !(z > 0))
        return err_set(e, AB_EINPUT, "sequential: look at t = %g: recorded bound %g must be > 0",
                       t, z);
    rc = monitor_take(m, t, z, final, NAN, out, e);
    if (rc)
        return rc;
    double level = seq_side_level(m->d.alpha, m->d.sides);
    double s = (final || t >= 1.0) ? level : seq_spend(m->d.shape, m->d.gamma, level, t);
    if (s > m->spent)
        m->spent = s;
    return AB_OK;
}

static int check_fractions(int k, const double *t, struct err *e)
{
    if (k < 1 || k > SEQ_MAX_LOOKS)
        return err_set(e, AB_EINPUT, "sequential: %d looks: must be in 1..%d", k, SEQ_MAX_LOOKS);
    for (int i = 0; i < k; i++) {
        if (!isfinite(t[i]) || !(t[i] > 0))
            return err_set(e, AB_EINPUT, "sequential: fraction %g: must be positive", t[i]);
        if (i > 0 && !(t[i] > t[i - 1]))
            return err_set(e, AB_EINPUT, "sequential: fractions %g, %g: must increase",
                           t[i - 1], t[i]);
    }
    return AB_OK;
}

int seq_bounds(const struct seq_design *d, int k, const double *t, struct seq_look *out,
               struct err *e)
{
    int rc = check_fractions(k, t, e);
    if (rc)
        return rc;
    struct seq_monitor m;
    rc = seq_monitor_init(&m, d, e);
    for (int i = 0; !rc && i < k; i++)
        rc = seq_monitor_next(&m, t[i], i == k - 1, &out[i], e);
    return rc;
}

void seq_equal_fractions(int k, double *t)
{
    for (int i = 0; i < k; i++)
        t[i] = i == k - 1 ? 1.0 : (double)(i + 1) / k;
}

/* ------------------------------------------------------------------------ */
/* Crossing probabilities, power and the inflation factor                    */

int seq_crossing(int k, const double *t, const double *lo, const double *hi, double theta,
                 int r, double *up, double *down, struct err *e)
{
    int rc = check_fractions(k, t, e);
    if (rc)
        return rc;
    struct seq_walk w;
    rc = seq_walk_init(&w, theta, r, e);
    for (int i = 0; !rc && i < k; i++)
        rc = seq_walk_step(&w, t[i], lo[i], hi[i], e);
    if (rc)
        return rc;
    *up = w.up;
    *down = w.down;
    return AB_OK;
}

struct drift_eq {
    int k;
    const double *t, *lo, *hi;
    int r;
    double power;
};

static double drift_fn(double theta, void *params)
{
    const struct drift_eq *q = params;
    double up, down;
    if (seq_crossing(q->k, q->t, q->lo, q->hi, theta, q->r, &up, &down, NULL))
        return NAN;
    return up - q->power;
}

int seq_drift(int k, const double *t, const double *lo, const double *hi, double power,
              int r, double *theta, struct err *e)
{
    if (!(power > 0 && power < 1))
        return err_set(e, AB_EINPUT, "sequential: power %g: must be in (0, 1)", power);
    struct drift_eq q = {k, t, lo, hi, r, power};
    int rc = check_fractions(k, t, e);
    if (rc)
        return rc;
    double a = 0, b = 2.0 * (gsl_cdf_ugaussian_Pinv(power) + 8.0);
    double fa = drift_fn(a, &q), fb = drift_fn(b, &q);
    if (isnan(fa) || isnan(fb))
        return err_set(e, AB_EINPUT, "sequential: power: crossing probability undefined");
    if (!(fa < 0))
        return err_set(e, AB_EINPUT,
                       "sequential: power %g: must exceed the error the bounds allow (%g)",
                       power, fa + power);
    if (!(fb > 0))
        return err_set(e, AB_EINPUT, "sequential: power %g: not reachable with these bounds",
                       power);
    return brent(drift_fn, &q, a, b, DRIFT_TOL, theta, "sequential: drift", e);
}

int seq_inflation_bounds(int k, const double *t, const double *lo, const double *hi,
                         double level, double power, int r, double *inflation,
                         struct err *e)
{
    if (!(level > 0 && level < 0.5))
        return err_set(e, AB_EINPUT, "sequential: level %g: must be in (0, 0.5)", level);
    double theta;
    int rc = seq_drift(k, t, lo, hi, power, r, &theta, e);
    if (rc)
        return rc;
    double fixed = gsl_cdf_ugaussian_Qinv(level) + gsl_cdf_ugaussian_Pinv(power);
    *inflation = (theta / fixed) * (theta / fixed);
    return AB_OK;
}

int seq_inflation(const struct seq_design *d, int k, const double *t, double power,
                  double *inflation, struct err *e)
{
    struct seq_look looks[SEQ_MAX_LOOKS];
    double lo[SEQ_MAX_LOOKS], hi[SEQ_MAX_LOOKS];
    int rc = seq_bounds(d, k, t, looks, e);
    if (rc)
        return rc;
    if (k == 1) {
        *inflation = 1.0;
        return AB_OK;
    }
    for (int i = 0; i < k; i++) {
        hi[i] = looks[i].z;
        lo[i] = d->sides == 2 ? -looks[i].z : -INFINITY;
    }
    return seq_inflation_bounds(k, t, lo, hi, seq_side_level(d->alpha, d->sides), power, d->r,
                                inflation, e);
}

/* Futility: the bound f of look j that spends `target` of the type II
 * error under the walk's drift: P(no earlier stop, Z_j < f) = target. */
struct fut_eq {
    const struct seq_walk *w;
    double t, c;
    double target;
};

static double fut_fn(double f, void *params)
{
    const struct fut_eq *q = params;
    double up, down;
    /* At f = c the region is empty: every path still running that does not
     * cross the efficacy bound stops for futility. */
    double lo = f < q->c ? f : q->c, hi = f < q->c ? q->c : INFINITY;
    if (seq_walk_exit(q->w, q->t, lo, hi, &up, &down, NULL))
        return NAN;
    return down - q->target;
}

struct fut_run {
    const struct seq_design *d;
    int k;
    const struct seq_look *looks;
    enum seq_shape bshape;
    double bgamma, beta;
    double *fut;
    struct err *e; /* the first error of a run */
    int rc;
};

/* Walks the design under drift theta, placing futility bounds at looks
 * 0..k−2; returns P(efficacy through the upper bounds) − (1 − β). */
static double fut_fn_theta(double theta, void *params)
{
    struct fut_run *q = params;
    struct seq_walk w;
    struct err ignore;
    struct err *e = q->rc ? &ignore : q->e;
    int rc = seq_walk_init(&w, theta, q->d->r, e);
    for (int j = 0; !rc && j < q->k; j++) {
        double c = q->looks[j].z;
        double t = q->looks[j].t;
        double floor_ = q->d->sides == 2 ? -c : -BOUND_CAP;
        double f;
        if (j == q->k - 1) {
            /* The last look: f = c there, so every path either crosses or
             * counts against power. */
            rc = seq_walk_step(&w, t, q->d->sides == 2 ? -c : -INFINITY, c, e);
            break;
        }
        double target = seq_spend(q->bshape, q->bgamma, q->beta, t) - w.down;
        struct fut_eq fq = {&w, t, c, target};
        double flo = fut_fn(floor_, &fq), fhi = fut_fn(isinf(c) ? BOUND_CAP : c, &fq);
        if (isnan(flo) || isnan(fhi)) {
            rc = err_set(e, AB_EINPUT, "sequential: futility at t = %g: undefined", t);
        } else if (flo >= 0) {
            f = floor_;
        } else if (fhi <= 0) {
            f = isinf(c) ? BOUND_CAP : c;
        } else {
            rc = brent(fut_fn, &fq, floor_, isinf(c) ? BOUND_CAP : c, BOUND_TOL, &f,
                       "sequential: futility bound", e);
        }
        if (!rc) {
            if (q->d->sides == 1 && f <= floor_)
                f = -INFINITY;
            q->fut[j] = f;
            rc = seq_walk_step(&w, t, f, c, e);
        }
    }
    if (rc) {
        if (!q->rc)
            q->rc = rc;
        return NAN;
    }
    q->fut[q->k - 1] = q->looks[q->k - 1].z;
    return w.up - (1.0 - q->beta);
}

int seq_futility(const struct seq_design *d, int k, const struct seq_look *looks,
                 enum seq_shape bshape, double bgamma, double beta, double *fut,
                 double *theta, double *inflation, struct err *e)
{
    int rc = seq_design_check(d, e);
    if (rc)
        return rc;
    if (k < 1 || k > SEQ_MAX_LOOKS)
        return err_set(e, AB_EINPUT, "sequential: %d looks: must be in 1..%d", k, SEQ_MAX_LOOKS);
    double level = seq_side_level(d->alpha, d->sides);
    if (!(beta > 0 && beta < 1 - level))
        return err_set(e, AB_EINPUT, "sequential: beta %g: must be in (0, %g)", beta, 1 - level);
    if (isnan(seq_spend(bshape, bgamma, beta, 0.5)))
        return err_set(e, AB_EINPUT, "sequential: futility spending: bad shape or gamma");
    struct fut_run q = {d, k, looks, bshape, bgamma, beta, fut, e, AB_OK};
    double fixed = gsl_cdf_ugaussian_Qinv(level) + gsl_cdf_ugaussian_Qinv(beta);
    double a = 0, b = 4.0 * fixed + 10.0;
    double fa = fut_fn_theta(a, &q);
    double fb = fut_fn_theta(b, &q);
    if (q.rc)
        return q.rc;
    if (!(fa < 0 && fb > 0))
        return err_set(e, AB_EINPUT, "sequential: futility: no drift gives power %g", 1 - beta);
    double th;
    rc = brent(fut_fn_theta, &q, a, b, DRIFT_TOL, &th, "sequential: futility drift", e);
    if (q.rc)
        return q.rc;
    if (rc)
        return rc;
    fut_fn_theta(th, &q); /* leaves fut[] at the root */
    if (q.rc)
        return q.rc;
    *theta = th;
    *inflation = (th / fixed) * (th / fixed);
    return AB_OK;
}

/* ------------------------------------------------------------------------ */
/* mSPRT and the asymptotic confidence sequence                              */

double seq_msprt_log_lr(double diff, double v, double tau2, double theta0)
{
    if (!(v > 0) || !(tau2 > 0) || !isfinite(v) || !isfinite(tau2) || !isfinite(diff) ||
        !isfinite(theta0))
        return NAN;
    double d = diff - theta0;
    /* ½ln(v/(v+τ²)) = −½log1p(τ²/v); the second term divides in two steps
     * so tiny variances do not overflow the product v(v+τ²). */
    return -0.5 * log1p(tau2 / v) + (tau2 / (v + tau2)) * (d * d / (2.0 * v));
}

double seq_msprt_p(double p_prev, double log_lr)
{
    if (isnan(p_prev) || isnan(log_lr))
        return NAN;
    double p = log_lr <= 0 ? 1.0 : exp(-log_lr);
    return p < p_prev ? p : (p_prev < 1 ? p_prev : 1.0);
}

double seq_msprt_halfwidth(double v, double tau2, double alpha)
{
    if (!(v > 0) || !(tau2 > 0) || !isfinite(v) || !isfinite(tau2) || !(alpha > 0 && alpha < 1))
        return NAN;
    double u = tau2 / v;
    return sqrt(v * (1.0 + 1.0 / u) * (2.0 * log(1.0 / alpha) + log1p(u)));
}

double seq_msprt_tau2(double v_plan, double alpha)
{
    if (!(v_plan > 0) || !isfinite(v_plan) || !(alpha > 0 && alpha < 1))
        return NAN;
    double l = 2.0 * log(1.0 / alpha);
    return v_plan * (l + log1p(l));
}

double seq_cs_rho2(double alpha, double t_star)
{
    if (!(alpha > 0 && alpha < 1) || !(t_star > 0) || !isfinite(t_star))
        return NAN;
    double l = -2.0 * log(alpha);
    return (l + log1p(l)) / t_star;
}

double seq_cs_radius(double sigma, double t, double rho2, double alpha)
{
    if (!(sigma > 0) || !(t > 0) || !(rho2 > 0))
        return NAN;
    /* With V = σ²/t and τ² = ρ²σ², u = τ²/V = tρ², and the radius of
     * Waudby-Smith et al. is the mSPRT half-width (METHODS §6c). */
    return seq_msprt_halfwidth(sigma * sigma / t, rho2 * sigma * sigma, alpha);
}

/* ------------------------------------------------------------------------ */
/* Sample size and duration                                                  */

int seq_sample_size(const struct seq_size_query *q, struct seq_size *out, struct err *e)
{
    if (!(q->sigma2 > 0) || !isfinite(q->sigma2))
        return err_set(e, AB_EINPUT, "sample size: variance %g: must be positive", q->sigma2);
    if (!(q->mde > 0) || !isfinite(q->mde))
        return err_set(e, AB_EINPUT, "sample size: effect %g: must be positive", q->mde);
    if (q->sides != 1 && q->sides != 2)
        return err_set(e, AB_EINPUT, "sample size: sides %d: must be 1 or 2", q->sides);
    double level = seq_side_level(q->alpha, q->sides);
    if (!(q->alpha > 0 && q->alpha < 1) || !(level < 0.5))
        return err_set(e, AB_EINPUT, "sample size: alpha %g: out of range", q->alpha);
    if (!(q->power > level && q->power < 1))
        return err_set(e, AB_EINPUT, "sample size: power %g: must be in (%g, 1)", q->power,
                       level);
    if (q->arms < 2 || q->arms > SEQ_MAX_ARMS)
        return err_set(e, AB_EINPUT, "sample size: %d arms: must be in 2..%d", q->arms,
                       SEQ_MAX_ARMS);
    if (!(q->inflation >= 1) || !isfinite(q->inflation))
        return err_set(e, AB_EINPUT, "sample size: inflation %g: must be at least 1",
                       q->inflation);
    double sum = 0;
    for (int a = 0; a < q->arms; a++) {
        if (!(q->weight[a] > 0) || !isfinite(q->weight[a]))
            return err_set(e, AB_EINPUT, "sample size: weight %g: must be positive",
                           q->weight[a]);
        sum += q->weight[a];
    }
    double z = gsl_cdf_ugaussian_Qinv(level) + gsl_cdf_ugaussian_Pinv(q->power);
    double base = z * z * q->sigma2 / (q->mde * q->mde) * q->inflation;
    double w0 = q->weight[0] / sum;
    double n = 0;
    for (int a = 1; a < q->arms; a++) {
        double na = base * (1.0 / (q->weight[a] / sum) + 1.0 / w0);
        if (na > n)
            n = na;
    }
    if (!isfinite(n) || n > 1e15)
        return err_set(e, AB_EINPUT, "sample size: %g units: too many to plan", n);
    out->n_exact = n;
    out->n_total = 0;
    for (int a = 0; a < q->arms; a++) {
        /* Round up, but let a product that is an integer up to rounding
         * noise stay that integer. */
        double x = n * (q->weight[a] / sum);
        out->n_arm[a] = ceil(x * (1.0 - 4 * DBL_EPSILON));
        out->n_total += out->n_arm[a];
    }
    for (int a = q->arms; a < SEQ_MAX_ARMS; a++)
        out->n_arm[a] = 0;
    return AB_OK;
}

double seq_days(double n, double daily_units)
{
    if (!(n > 0) || !isfinite(n) || !(daily_units > 0) || !isfinite(daily_units))
        return NAN;
    double d = n / daily_units;
    return ceil(d * (1.0 - 4 * DBL_EPSILON));
}
