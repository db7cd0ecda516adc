/*
 * stats.c — effect estimates, Holm/BH adjustment, SRM tests, SMD and the
 * two-proportion test (see stats.h for each formula and its source).
 *
 * Never does: I/O, globals, exit/abort, a GSL call with n < 2 or zero variance.
 * Invariants: every output field is written on every path (NaN where
 * undefined); every GSL result is checked for status or NaN before it is used;
 * tails use the upper-tail functions (_Q, _Qinv), never 1 − P.
 *
 * effect_compute reduces each metric type to one per-arm summary (struct arm):
 * the mean of the analysed value Y and of its covariate X, their centred sums
 * C_yy, C_xy, C_xx and the variance divisor (n − 1, or n for binary metrics).
 * For ratio metrics Y and X are the delta-method linearizations of the arm's
 * ratio and pre-period ratio, so one code path serves all three types.
 */
#include "stats.h"

#include <float.h>
#include <limits.h>
#include <math.h>
#include <stdlib.h>

#include <gsl/gsl_cdf.h>
#include <gsl/gsl_errno.h>
#include <gsl/gsl_sf_gamma.h>

/* Fisher's two-sided p counts tables whose probability is at most the observed
 * one times this factor, so that ties survive rounding (as R's fisher.test). */
#define FISHER_REL_TOL (1.0 + 1e-7)

/* A difference of centred sums below this multiple of their scale is rounding,
 * not variance (a ratio whose numerator is exactly R times its denominator). */
#define CANCEL_TOL (64.0 * DBL_EPSILON)

/* One arm reduced to the sums every estimate needs. */
struct arm {
    double n;     /* units */
    double my;    /* mean of the analysed value (ratio: ΣX/ΣD) */
    double mx;    /* mean of the covariate (ratio: pre-period ΣX/ΣD) */
    double cyy;   /* Σ (y − ȳ)² */
    double cxy;   /* Σ (x − x̄)(y − ȳ) */
    double cxx;   /* Σ (x − x̄)² */
    double div;   /* variance divisor: n − 1, or n for binary */
    int has_x;    /* the covariate is defined (ratio: pre-period D̄ ≠ 0) */
};

/* v = C/(div·n), the variance of an arm mean; 0 when C ≤ 0. */
static double mean_var(double c, const struct arm *a)
{
    return c > 0 ? c / (a->div * a->n) : 0.0;
}

/* Reduces a moments set to a struct arm. Returns 0, or an effect_flag. */
static int arm_from_moments(enum metric_type t, const struct moments *m, struct arm *a)
{
    a->n = m->n;
    a->div = t == MT_BINARY ? m->n : m->n - 1.0;
    if (t != MT_RATIO) {
        a->my = m->mean[0];
        a->mx = m->mean[1];
        a->cyy = m->c[0][0];
        a->cxy = m->c[0][1];
        a->cxx = m->c[1][1];
        a->has_x = 1;
        return 0;
    }
    /* Ratio: Y'_i = (X_i − R D_i)/D̄ and X'_i = (P_i − Rp Q_i)/Q̄, with
     * (X, D, P, Q) = v[0..3]; their centred sums are linear combinations of c. */
    double dbar = m->mean[1];
    if (!(dbar != 0) || !isfinite(dbar)) {
        a->my = a->mx = a->cyy = a->cxy = a->cxx = NAN;
        a->has_x = 0;
        return EFF_NO_RATIO;
    }
    double r = m->mean[0] / dbar;
    const double(*c)[MOM_MAXV] = m->c;
    a->my = r;
    double lin = c[0][0] - 2.0 * r * c[0][1] + r * r * c[1][1];
    if (lin <= CANCEL_TOL * (c[0][0] + r * r * c[1][1]))
        lin = 0;
    a->cyy = lin / (dbar * dbar);
    double qbar = m->mean[3];
    if (!(qbar != 0) || !isfinite(qbar)) {
        a->mx = a->cxy = a->cxx = NAN;
        a->has_x = 0;
        return 0;
    }
    double rp = m->mean[2] / qbar;
    a->mx = rp;
    a->cxy = (c[0][2] - r * c[1][2] - rp * c[0][3] + r * rp * c[1][3]) / (dbar * qbar);
    double linx = c[2][2] - 2.0 * rp * c[2][3] + rp * rp * c[3][3];
    if (linx <= CANCEL_TOL * (c[2][2] + rp * rp * c[3][3]))
        linx = 0;
    a->cxx = linx / (qbar * qbar);
    a->has_x = 1;
    return 0;
}

/* Welch–Satterthwaite df from the two arm-mean variances (v1 + v0 > 0). */
static double welch_df(double v1, double n1, double v0, double n0)
{
    double num = (v1 + v0) * (v1 + v0);
    double den = v1 * v1 / (n1 - 1.0) + v0 * v0 / (n0 - 1.0);
    return den > 0 ? num / den : NAN;
}

/* Two-sided critical value at alpha: t with df when finite, else z. */
static double crit_value(double alpha, double df)
{
    return isfinite(df) ? gsl_cdf_tdist_Qinv(alpha / 2.0, df) : gsl_cdf_ugaussian_Qinv(alpha / 2.0);
}

/* Upper tail P(T > s): t with df when finite, else normal. */
static double tail_q(double s, double df)
{
    return isfinite(df) ? gsl_cdf_tdist_Q(s, df) : gsl_cdf_ugaussian_Q(s);
}

/* Lower tail P(T ≤ s). */
static double tail_p(double s, double df)
{
    return isfinite(df) ? gsl_cdf_tdist_P(s, df) : gsl_cdf_ugaussian_P(s);
}

/* Two-sided p of a statistic; NaN when it is not finite. */
static double two_sided_p(double s, double df)
{
    if (isnan(s))
        return NAN;
    double p = 2.0 * tail_q(fabs(s), df);
    return isnan(p) ? NAN : fmin(1.0, p);
}

/* log P(X1 = k) of the hypergeometric law of Fisher's test: margins n1, n0
 * (rows) and x successes. Returns NaN on a GSL failure. */
static double fisher_lpmf(unsigned k, unsigned n1, unsigned n0, unsigned x)
{
    gsl_sf_result a, b, c;
    if (gsl_sf_lnchoose_e(n1, k, &a) || gsl_sf_lnchoose_e(n0, x - k, &b) ||
        gsl_sf_lnchoose_e(n1 + n0, x, &c))
        return NAN;
    return a.val + b.val - c.val;
}

/*
 * Fisher's exact test of the 2×2 table (x1 of n1) against (x0 of n0).
 * two: two-sided p, summing tables no more likely than the observed one;
 * lo: P(X1 ≤ x1); hi: P(X1 ≥ x1). Returns 0, or −1 when a margin exceeds
 * the unsigned range or GSL fails.
 */
static int fisher_exact(double x1, double n1, double x0, double n0, double *two, double *lo, double *hi)
{
    double nn = n1 + n0, xx = x1 + x0;
    if (nn > (double)UINT_MAX)
        return -1;
    unsigned un1 = (unsigned)n1, un0 = (unsigned)n0, ux = (unsigned)xx, ux1 = (unsigned)x1;
    unsigned kmin = ux > un0 ? ux - un0 : 0;
    unsigned kmax = ux < un1 ? ux : un1;
    double lobs = fisher_lpmf(ux1, un1, un0, ux);
    if (isnan(lobs))
        return -1;
    double lcut = lobs + log(FISHER_REL_TOL);
    double s2 = 0, sl = 0, sh = 0;
    for (unsigned k = kmin;; k++) {
        double lp = fisher_lpmf(k, un1, un0, ux);
        if (isnan(lp))
            return -1;
        double pk = exp(lp);
        if (lp <= lcut)
            s2 += pk;
        if (k <= ux1)
            sl += pk;
        if (k >= ux1)
            sh += pk;
        if (k == kmax)
            break;
    }
    *two = fmin(1.0, s2);
    *lo = fmin(1.0, sl);
    *hi = fmin(1.0, sh);
    return 0;
}

double prop_test_p(double x1, double n1, double x0, double n0, double *z_out)
{
    if (z_out)
        *z_out = NAN;
    if (!(n1 > 0) || !(n0 > 0) || !(x1 >= 0) || !(x0 >= 0) || !(x1 <= n1) || !(x0 <= n0) ||
        !isfinite(n1) || !isfinite(n0))
        return NAN;
    double pbar = (x1 + x0) / (n1 + n0);
    if (pbar <= 0 || pbar >= 1) {
        if (z_out)
            *z_out = 0;
        return 1.0;
    }
    double se = sqrt(pbar * (1.0 - pbar) * (1.0 / n1 + 1.0 / n0));
    double z = (x1 / n1 - x0 / n0) / se;
    if (z_out)
        *z_out = z;
    return two_sided_p(z, INFINITY);
}

/* Sets every field of *e to "undefined". */
static void effect_clear(struct effect *e)
{
    e->n = e->mean = e->control_n = e->control_mean = NAN;
    e->diff = e->se = e->ci_lo = e->ci_hi = e->p = NAN;
    e->df = INFINITY;
    e->lift = e->lift_se = e->lift_lo = e->lift_hi = NAN;
    e->lift_log_lo = e->lift_log_hi = e->fieller_lo = e->fieller_hi = NAN;
    e->cuped_diff = e->cuped_se = e->cuped_lo = e->cuped_hi = e->cuped_p = NAN;
    e->cuped_df = INFINITY;
    e->var_reduction = e->theta = e->p_harm = NAN;
    e->harm = 0;
    e->flags = 0;
}

/* Lift intervals (delta, log-scale, Fieller) from means m1, m0 and arm-mean
 * variances v1, v0 at critical value k. */
static void lift_intervals(struct effect *e, double m1, double m0, double v1, double v0, double k)
{
    e->lift_se = sqrt(v1 / (m0 * m0) + m1 * m1 * v0 / (m0 * m0 * m0 * m0));
    e->lift_lo = e->lift - k * e->lift_se;
    e->lift_hi = e->lift + k * e->lift_se;
    if (m1 > 0 && m0 > 0) {
        double l = log(m1 / m0), s = sqrt(v1 / (m1 * m1) + v0 / (m0 * m0));
        e->lift_log_lo = expm1(l - k * s);
        e->lift_log_hi = expm1(l + k * s);
    }
    double a = m0 * m0 - k * k * v0, b = m0 * m1, c = m1 * m1 - k * k * v1;
    double disc = b * b - a * c;
    if (a > 0 && disc >= 0) {
        double r = sqrt(disc);
        e->fieller_lo = (b - r) / a - 1.0;
        e->fieller_hi = (b + r) / a - 1.0;
    } else {
        e->flags |= EFF_FIELLER_UNBOUNDED;
    }
}

/* CUPED (Deng, Xu, Kohavi & Walker 2013) on the arm summaries. var_plain is the
 * unadjusted v1 + v0; alpha gives the critical value, which depends on the df of
 * the adjusted values when use_t. */
static void cuped(struct effect *e, const struct arm *a1, const struct arm *a0, double var_plain,
                  double alpha, int use_t)
{
    double czz = a1->cxx + a0->cxx;
    double theta = 0;
    if (a1->has_x && a0->has_x && czz > 0 && isfinite(czz))
        theta = (a1->cxy + a0->cxy) / czz;
    else
        e->flags |= EFF_CUPED_FALLBACK;
    if (!isfinite(theta)) {
        theta = 0;
        e->flags |= EFF_CUPED_FALLBACK;
    }
    e->theta = theta;
    double d = a1->my - a0->my;
    double c1 = a1->cyy, c0 = a0->cyy;
    if (theta != 0) {
        d -= theta * (a1->mx - a0->mx);
        double r1 = c1 - 2.0 * theta * a1->cxy + theta * theta * a1->cxx;
        double r0 = c0 - 2.0 * theta * a0->cxy + theta * theta * a0->cxx;
        c1 = r1 <= CANCEL_TOL * (a1->cyy + theta * theta * a1->cxx) ? 0 : r1;
        c0 = r0 <= CANCEL_TOL * (a0->cyy + theta * theta * a0->cxx) ? 0 : r0;
    }
    double v1 = mean_var(c1, a1), v0 = mean_var(c0, a0);
    double var = v1 + v0;
    if (!(var > 0) || !isfinite(var) || !isfinite(d)) {
        e->flags |= EFF_CUPED_NA;
        return;
    }
    double df = use_t ? welch_df(v1, a1->n, v0, a0->n) : INFINITY;
    if (isnan(df)) {
        e->flags |= EFF_CUPED_NA;
        return;
    }
    double k = crit_value(alpha, df);
    if (!isfinite(k)) {
        e->flags |= EFF_CUPED_NA;
        return;
    }
    e->cuped_diff = d;
    e->cuped_se = sqrt(var);
    e->cuped_df = df;
    e->cuped_lo = d - k * e->cuped_se;
    e->cuped_hi = d + k * e->cuped_se;
    e->cuped_p = two_sided_p(d / e->cuped_se, df);
    if (var_plain > 0)
        e->var_reduction = 1.0 - var / var_plain;
}

/* Binary p, p_harm and CI (METHODS §2). x_a successes of n_a. */
static void binary_test(struct effect *e, double x1, double n1, double x0, double n0, double k,
                        int better)
{
    double p1 = x1 / n1, p0 = x0 / n0;
    double pbar = (x1 + x0) / (n1 + n0);
    double lo = NAN, hi = NAN;
    if (pbar <= 0 || pbar >= 1) {
        e->p = 1.0;
        lo = hi = 1.0;
    } else {
        double nn = n1 + n0, xx = x1 + x0;
        double emin = fmin(fmin(n1, n0) * xx / nn, fmin(n1, n0) * (nn - xx) / nn);
        double two;
        if (emin < 5 && fisher_exact(x1, n1, x0, n0, &two, &lo, &hi) == 0) {
            e->p = two;
            e->flags |= EFF_FISHER;
        } else {
            double z;
            e->p = prop_test_p(x1, n1, x0, n0, &z);
            lo = gsl_cdf_ugaussian_P(z);
            hi = gsl_cdf_ugaussian_Q(z);
        }
    }
    /* higher is better: harm is a drop, small P(X ≤ obs); lower is better: the reverse */
    if (better > 0)
        e->p_harm = lo;
    else if (better < 0)
        e->p_harm = hi;

    if (x1 <= 0 || x1 >= n1 || x0 <= 0 || x0 >= n0) {
        /* Agresti & Caffo (2000): one success and one failure added per arm */
        double q1 = (x1 + 1.0) / (n1 + 2.0), q0 = (x0 + 1.0) / (n0 + 2.0);
        e->se = sqrt(q1 * (1 - q1) / (n1 + 2.0) + q0 * (1 - q0) / (n0 + 2.0));
        e->ci_lo = q1 - q0 - k * e->se;
        e->ci_hi = q1 - q0 + k * e->se;
        e->flags |= EFF_AGRESTI_CAFFO;
    } else {
        e->se = sqrt(p1 * (1 - p1) / n1 + p0 * (1 - p0) / n0);
        e->ci_lo = e->diff - k * e->se;
        e->ci_hi = e->diff + k * e->se;
    }
}

int effect_compute(enum metric_type t, const struct moments *ctl, const struct moments *trt,
                   double alpha, int better, struct effect *out)
{
    if (!out)
        return EFF_BAD_ARG;
    effect_clear(out);
    if (!ctl || !trt || (t != MT_MEAN && t != MT_BINARY && t != MT_RATIO) || !(alpha > 0) ||
        !(alpha < 1)) {
        out->flags |= EFF_BAD_ARG;
        return out->flags;
    }
    struct arm a1, a0;
    out->flags |= arm_from_moments(t, trt, &a1) | arm_from_moments(t, ctl, &a0);
    out->n = trt->n;
    out->control_n = ctl->n;
    if (trt->n >= 1)
        out->mean = a1.my;
    if (ctl->n >= 1)
        out->control_mean = a0.my;
    if (trt->n < 2 || ctl->n < 2)
        out->flags |= EFF_SMALL_N;
    if (out->flags & (EFF_SMALL_N | EFF_NO_RATIO))
        return out->flags;

    double m1 = a1.my, m0 = a0.my;
    out->diff = m1 - m0;
    double v1 = mean_var(a1.cyy, &a1), v0 = mean_var(a0.cyy, &a0);
    double var = v1 + v0;
    if (m0 != 0)
        out->lift = m1 / m0 - 1.0;
    else
        out->flags |= EFF_NO_LIFT;
    if (t != MT_BINARY && !(var > 0)) {
        out->flags |= EFF_DEGENERATE;
        return out->flags;
    }

    int use_t = t != MT_BINARY && fmin(a1.n, a0.n) < STATS_T_BELOW;
    if (use_t) {
        out->df = welch_df(v1, a1.n, v0, a0.n);
        out->flags |= EFF_T_DIST;
    }
    double k = crit_value(alpha, out->df);
    if (!isfinite(k) || isnan(out->df)) {
        out->flags |= EFF_DEGENERATE;
        return out->flags;
    }

    if (t == MT_BINARY) {
        double x1 = nearbyint(a1.n * m1), x0 = nearbyint(a0.n * m0);
        binary_test(out, x1, a1.n, x0, a0.n, k, better);
    } else {
        out->se = sqrt(var);
        out->ci_lo = out->diff - k * out->se;
        out->ci_hi = out->diff + k * out->se;
        double s = out->diff / out->se;
        out->p = two_sided_p(s, out->df);
        if (better > 0)
            out->p_harm = tail_p(s, out->df);
        else if (better < 0)
            out->p_harm = tail_q(s, out->df);
    }
    if (!isnan(out->p_harm))
        out->harm = out->p_harm < alpha;

    if (!(out->flags & EFF_NO_LIFT) && var > 0)
        lift_intervals(out, m1, m0, v1, v0, k);
    cuped(out, &a1, &a0, var, alpha, use_t);

    if (isnan(out->p) || isnan(out->se)) {
        out->flags |= EFF_DEGENERATE;
        return out->flags;
    }
    return 0;
}

/* Index-carrying p for sorting: ascending p, then position (stable). */
struct ranked {
    double p;
    int i;
};

static int ranked_cmp(const void *a, const void *b)
{
    const struct ranked *x = a, *y = b;
    if (x->p < y->p)
        return -1;
    if (x->p > y->p)
        return 1;
    return (x->i > y->i) - (x->i < y->i);
}

/* Sorts the non-NaN p into *out (caller frees); returns their count, or −1. */
static int rank_p(const double *p, int m, struct ranked **out)
{
    *out = malloc((size_t)(m > 0 ? m : 1) * sizeof **out);
    if (!*out)
        return -1;
    int k = 0;
    for (int i = 0; i < m; i++)
        if (!isnan(p[i]))
            (*out)[k++] = (struct ranked){p[i], i};
    qsort(*out, (size_t)k, sizeof **out, ranked_cmp);
    return k;
}

void holm_adjust(const double *p, int m, double *adj)
{
    if (m <= 0 || !p || !adj)
        return;
    struct ranked *r;
    int k = rank_p(p, m, &r);
    for (int i = 0; i < m; i++)
        if (k < 0 || isnan(p[i]))
            adj[i] = NAN;
    if (k < 0)
        return;
    double run = 0;
    for (int j = 0; j < k; j++) {
        double v = fmin(1.0, (double)(m - j) * r[j].p);
        run = fmax(run, v);
        adj[r[j].i] = run;
    }
    free(r);
}

void bh_adjust(const double *p, int m, double *adj)
{
    if (m <= 0 || !p || !adj)
        return;
    struct ranked *r;
    int k = rank_p(p, m, &r);
    for (int i = 0; i < m; i++)
        if (k < 0 || isnan(p[i]))
            adj[i] = NAN;
    if (k < 0)
        return;
    double run = 1.0;
    for (int j = k - 1; j >= 0; j--) {
        double v = fmin(1.0, (double)m * r[j].p / (double)(j + 1));
        run = fmin(run, v);
        adj[r[j].i] = run;
    }
    free(r);
}

/* Validates counts and weights; fills pi (normalized, NULL weights = equal).
 * Returns the number of arms of positive weight, or −1 on bad input. */
static int srm_weights(const double *counts, const double *weights, int k, double *pi)
{
    if (!counts || k < 2)
        return -1;
    double sw = 0;
    for (int a = 0; a < k; a++) {
        if (!(counts[a] >= 0) || !isfinite(counts[a]))
            return -1;
        double w = weights ? weights[a] : 1.0;
        if (!(w >= 0) || !isfinite(w))
            return -1;
        sw += w;
    }
    if (!(sw > 0) || !isfinite(sw))
        return -1;
    int kp = 0;
    for (int a = 0; a < k; a++) {
        pi[a] = (weights ? weights[a] : 1.0) / sw;
        kp += pi[a] > 0;
    }
    return kp;
}

/* The exact binomial p of METHODS §4: n1 of N at probability p1, doubled
 * smaller tail. NaN on a GSL failure. */
static double srm_binomial_p(double n1, double nn, double p1)
{
    unsigned k = (unsigned)n1, n = (unsigned)nn;
    double lo = gsl_cdf_binomial_P(k, p1, n);
    double hi = k == 0 ? 1.0 : gsl_cdf_binomial_Q(k - 1, p1, n);
    if (isnan(lo) || isnan(hi))
        return NAN;
    return fmin(1.0, 2.0 * fmin(lo, hi));
}

int srm_test(const double *counts, const double *weights, int k, struct srm_result *r)
{
    if (!r)
        return SRM_BAD_ARG;
    *r = (struct srm_result){NAN, NAN, NAN, NAN, NAN, SRM_TEST_NONE, 0};
    double *pi = k >= 2 ? malloc((size_t)k * sizeof *pi) : NULL;
    int kp = pi ? srm_weights(counts, weights, k, pi) : -1;
    if (kp < 2) {
        free(pi);
        r->flags |= SRM_BAD_ARG;
        return r->flags;
    }
    double nn = 0, npos = 0;
    int zero_arm_units = 0;
    for (int a = 0; a < k; a++) {
        nn += counts[a];
        if (pi[a] > 0)
            npos += counts[a];
        else if (counts[a] > 0)
            zero_arm_units = 1;
    }
    r->n = nn;
    r->df = kp - 1;
    if (npos > 0) {
        double chi2 = 0, emin = INFINITY;
        for (int a = 0; a < k; a++) {
            if (!(pi[a] > 0))
                continue;
            double e = npos * pi[a], d = counts[a] - e;
            chi2 += d * d / e;
            emin = fmin(emin, e);
        }
        r->chi2 = chi2;
        r->min_expected = emin;
    }
    if (zero_arm_units) {
        /* under the null such an arm is empty: the data are impossible */
        free(pi);
        r->flags |= SRM_ZERO_WEIGHT_UNITS;
        r->p = 0;
        r->test = SRM_TEST_CHI2;
        return 0;
    }
    if (!(npos > 0)) {
        free(pi);
        r->flags |= SRM_NO_UNITS;
        return r->flags;
    }
    if (r->min_expected < 5) {
        r->flags |= SRM_SMALL_EXPECTED;
        int a1 = 0;
        while (!(pi[a1] > 0))
            a1++;
        int whole = 1;
        for (int a = 0; a < k; a++)
            whole &= counts[a] == floor(counts[a]);
        if (kp == 2 && whole && nn <= (double)UINT_MAX) {
            r->p = srm_binomial_p(counts[a1], nn, pi[a1]);
            r->test = SRM_TEST_BINOMIAL;
            free(pi);
            return isnan(r->p) ? r->flags : 0;
        }
        if (kp > 2) {
            r->test = SRM_TEST_INSUFFICIENT;
            free(pi);
            return r->flags;
        }
    }
    free(pi);
    r->test = SRM_TEST_CHI2;
    r->p = gsl_cdf_chisq_Q(r->chi2, r->df);
    if (isnan(r->p)) {
        r->test = SRM_TEST_NONE;
        return r->flags | SRM_BAD_ARG;
    }
    return 0;
}

double srm_seq_logbf(const double *counts, const double *weights, int k, double c)
{
    if (!counts || k < 2 || !(c > 0) || !isfinite(c))
        return NAN;
    double sw = 0;
    for (int a = 0; a < k; a++) {
        double w = weights ? weights[a] : 1.0;
        if (!(w >= 0) || !isfinite(w) || !(counts[a] >= 0) || !isfinite(counts[a]))
            return NAN;
        sw += w;
    }
    if (!(sw > 0))
        return NAN;
    double nn = 0, sum = 0;
    gsl_sf_result g1, g2;
    for (int a = 0; a < k; a++) {
        double pi = (weights ? weights[a] : 1.0) / sw;
        if (!(pi > 0)) {
            if (counts[a] > 0)
                return INFINITY;
            continue;
        }
        double al = c * pi, n = counts[a];
        nn += n;
        if (n == 0)
            continue; /* lnΓ(α+0) − lnΓ(α) − 0 = 0 */
        if (gsl_sf_lngamma_e(al + n, &g1) || gsl_sf_lngamma_e(al, &g2))
            return NAN;
        sum += g1.val - g2.val - n * log(pi);
    }
    if (nn == 0)
        return 0;
    if (gsl_sf_lngamma_e(c, &g1) || gsl_sf_lngamma_e(c + nn, &g2))
        return NAN;
    double lbf = g1.val - g2.val + sum;
    return isfinite(lbf) ? lbf : NAN;
}

double srm_seq_update(double p_old, double logbf)
{
    if (isnan(logbf))
        return p_old;
    return fmin(p_old, exp(-logbf));
}

double smd(const struct moments *a, const struct moments *b, int var)
{
    if (!a || !b || var < 0 || var >= MOM_MAXV || a->n < 2 || b->n < 2)
        return NAN;
    double s = moments_var(a, var) + moments_var(b, var);
    if (!(s > 0) || !isfinite(s))
        return NAN;
    return (a->mean[var] - b->mean[var]) / sqrt(s / 2.0);
}
