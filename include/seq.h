/*
 * seq.h — sequential-testing statistics and the sample-size arithmetic of `plan`.
 *
 * Three families, all pure functions over numbers (METHODS.md §6, §8):
 *
 *  1. Group-sequential designs with α-spending (Lan & DeMets 1983). The null
 *     and drift probabilities come from the recursive numerical integration of
 *     Armitage, McPherson & Rowe (1969) on the grid of Jennison & Turnbull
 *     (2000, ch. 19), widened where a bound lies 3–6 from its centre: a
 *     `struct seq_walk` carries the sub-density of Z at the last look over
 *     its continuation region, so a new look costs one O(grid²) step and
 *     past looks are never recomputed. A look's bound is frozen once
 *     computed; `struct seq_monitor` adds looks one at a time for live
 *     monitoring, `seq_bounds` plans a whole schedule.
 *  2. The mixture SPRT (mSPRT, Johari et al. 2017) and the asymptotic
 *     confidence sequence (Waudby-Smith et al. 2024), which share one
 *     half-width formula: seq_cs_radius calls seq_msprt_halfwidth.
 *  3. Sample size, duration and the inflation factor N_max/N_fixed.
 *
 * Conventions. Z_k ~ N(θ√t_k, 1) at information fraction t_k, with
 * Cov(Z_j, Z_k) = √(t_j/t_k); θ is the drift at full information (t = 1). A
 * two-sided design (sides = 2) rejects when |Z_k| ≥ c_k and spends its
 * function *per side* at level α/2 (the convention of the published tables
 * and of R's rpact; METHODS §6a); a one-sided design rejects when Z_k ≥ c_k
 * and spends at level α.
 *
 * Never: I/O, globals, exit or abort. The only allocation is GSL's root-solver
 * state, freed before the function returns. Fallible functions take a
 * `struct err *` (may be NULL) and return an enum ab_status; functions that
 * return a value give NaN on a domain error.
 */
#ifndef ABTALLY_SEQ_H
#define ABTALLY_SEQ_H

#include <stdbool.h>

#include "err.h"

#define SEQ_GRID_R 16          /* default grid density r of J&T ch. 19 */
#define SEQ_GRID_R_MAX 64      /* largest r a walk can hold */
#define SEQ_GRID_MAX (20 * SEQ_GRID_R_MAX + 7) /* grid points incl. midpoints */
#define SEQ_MIN_GAP 0.01       /* looks closer than this in t are skipped */
#define SEQ_MAX_LOOKS 1000     /* longest schedule seq_bounds and the CLI accept */
#define SEQ_MAX_ARMS 16        /* arms a sample-size question may have */

/* Shape of a spending function (METHODS §6a). */
enum seq_shape {
    SEQ_OBF = 0,    /* O'Brien-Fleming type: 2 − 2Φ(z_{1−L/2}/√t) */
    SEQ_POCOCK = 1, /* Pocock type: L·ln(1 + (e − 1)t) */
    SEQ_HSD = 2     /* Hwang-Shih-DeCani: L(1 − e^{−γt})/(1 − e^{−γ}); Lt at γ = 0 */
};

/* ---------------------------------------------------------------------------
 * Spending functions
 */

/* Cumulative error a function of total `level` has spent by fraction t.
 * t is clamped to [0, 1]; gamma is read for SEQ_HSD only. NaN when level is
 * outside (0, 1), t or gamma is NaN, or shape is unknown. */
double seq_spend(enum seq_shape shape, double gamma, double level, double t);

/* The level each side spends: alpha/2 for sides = 2, alpha for sides = 1;
 * NaN for any other sides. */
double seq_side_level(double alpha, int sides);

/* "obf", "pocock", "hsd" → *out; AB_OK, or AB_EUSAGE for any other name. */
int seq_shape_parse(const char *name, enum seq_shape *out);

/* The name seq_shape_parse accepts for shape ("?" when unknown). */
const char *seq_shape_name(enum seq_shape shape);

/* True when a look at t comes less than min_gap after the last look at
 * t_prev and is not the final look (t < 1): the caller should skip it
 * (METHODS §6a, "Unplanned looks"). The first look has t_prev = 0. */
bool seq_look_too_close(double t_prev, double t, double min_gap);

/* ---------------------------------------------------------------------------
 * Recursive integration
 *
 * A walk follows the paths of Z that have not yet left the continuation
 * regions (lo_j, hi_j) of the looks taken so far, under drift theta.
 * lo = −INFINITY or hi = +INFINITY leave that side open. A walk is a value
 * (about 20 kB): keep it in a struct or on the stack, copy it freely.
 */
struct seq_walk {
    double theta;              /* drift: E[Z_k] = theta·√t_k */
    int r;                     /* grid density, 1..SEQ_GRID_R_MAX */
    int looks;                 /* looks taken so far */
    double t;                  /* fraction of the last look; 0 before the first */
    int n;                     /* grid points held (0 before the first look) */
    double z[SEQ_GRID_MAX];    /* grid of the last look, inside its region */
    double m[SEQ_GRID_MAX];    /* Simpson weight × sub-density of Z at z[i] */
    bool even;                 /* theta = 0 and every region was (−c, c): the
                                  density is even, so half of it is computed */
    double up;                 /* probability of having left at or above hi */
    double down;               /* probability of having left at or below lo */
};

/* Starts a walk with drift theta and grid density r (0 means SEQ_GRID_R).
 * AB_EINPUT when theta is not finite or r is outside 0..SEQ_GRID_R_MAX. */
int seq_walk_init(struct seq_walk *w, double theta, int r, struct err *e);

/* Probabilities that the paths still in the walk leave at a look at t with
 * region (lo, hi): *up = P(Z ≥ hi), *down = P(Z ≤ lo), both joint with "not
 * left before". lo = hi stops every path. The walk is unchanged. AB_EINPUT
 * unless t > w->t, t is finite and lo ≤ hi. */
int seq_walk_exit(const struct seq_walk *w, double t, double lo, double hi, double *up,
                  double *down, struct err *e);

/* Takes a look at t with region (lo, hi): adds its exit probabilities to
 * w->up and w->down and carries the paths that continue. Cost O(grid²).
 * Same errors as seq_walk_exit; the walk is unchanged on error. */
int seq_walk_step(struct seq_walk *w, double t, double lo, double hi, struct err *e);

/* ---------------------------------------------------------------------------
 * Efficacy bounds
 */

/* A spending design. */
struct seq_design {
    enum seq_shape shape; /* shape of the spending function */
    double gamma;         /* HSD parameter γ (SEQ_HSD only; −4 is OBF-like) */
    double alpha;         /* type I error over both sides, in (0, 1) */
    int sides;            /* 1 or 2 */
    int r;                /* grid density; 0 means SEQ_GRID_R */
};

/* One look of a schedule. */
struct seq_look {
    double t;           /* information fraction */
    double z;           /* efficacy bound: reject when Z ≥ z (two-sided: |Z| ≥ z);
                           +INFINITY when the look spends nothing */
    double alpha_spent; /* type I error spent at this look, both sides */
    double alpha_cum;   /* type I error spent up to and including it */
};

/* Checks a design: alpha in (0, 1) with alpha/sides < 0.5, sides 1 or 2,
 * a known shape, finite gamma, r in 0..SEQ_GRID_R_MAX. AB_OK or AB_EINPUT. */
int seq_design_check(const struct seq_design *d, struct err *e);

/* Live monitoring: looks are added one at a time and each bound, once
 * computed, is frozen. To resume after a restart, re-enter the recorded
 * looks with seq_monitor_freeze in their order, then continue with
 * seq_monitor_next. The design must not change during a run. */
struct seq_monitor {
    struct seq_design d;  /* the design (copied) */
    struct seq_walk w;    /* null walk through the frozen looks */
    double spent;         /* per-side spending target reached so far */
    bool done;            /* the final look has been taken */
};

/* Starts a monitor for design d. AB_EINPUT when the design is invalid. */
int seq_monitor_init(struct seq_monitor *m, const struct seq_design *d, struct err *e);

/* Computes, freezes and returns in *out the bound of a new look at t. The
 * look spends α(t) − α(t_prev) per side; when `final` is true or t ≥ 1 it
 * spends all that remains and closes the monitor. The bound solves
 * P₀(no earlier exit, Z beyond ±c) = spend with gsl_root_fsolver_brent on
 * the log-probability scale. AB_EINPUT when t does not exceed the last look,
 * the monitor is closed, or the root finder fails. */
int seq_monitor_next(struct seq_monitor *m, double t, bool final, struct seq_look *out,
                     struct err *e);

/* Like seq_monitor_next, but the look spends up to the cumulative error
 * alpha_cum (both sides together, at most d.alpha) that the caller's own
 * spending schedule gives at t; `final` only closes the monitor. */
int seq_monitor_next_cum(struct seq_monitor *m, double t, double alpha_cum, bool final,
                         struct seq_look *out, struct err *e);

/* Re-enters a past look at t whose bound z was recorded (+INFINITY allowed),
 * without recomputing it; *out (may be NULL) gets the look with the error it
 * actually spent under the recorded bound. `final` as in seq_monitor_next. */
int seq_monitor_freeze(struct seq_monitor *m, double t, double z, bool final,
                       struct seq_look *out, struct err *e);

/* Plans k looks at fractions t[0] < ... < t[k−1] (the last is the final
 * look and spends all remaining error; t[k−1] = 1 in a planned design).
 * Fills out[0..k−1]. AB_EINPUT on a bad design, k outside 1..SEQ_MAX_LOOKS,
 * fractions not finite, not positive or not increasing. */
int seq_bounds(const struct seq_design *d, int k, const double *t, struct seq_look *out,
               struct err *e);

/* Equally spaced fractions 1/k, 2/k, ..., 1 into t[0..k−1]. */
void seq_equal_fractions(int k, double *t);

/* ---------------------------------------------------------------------------
 * Crossing probabilities, power and the inflation factor
 */

/* Probability of leaving through the upper bounds (*up: Z_k ≥ hi[k]) and the
 * lower bounds (*down: Z_k ≤ lo[k]) over k looks at fractions t, under drift
 * theta. lo[k] may be −INFINITY, hi[k] +INFINITY. */
int seq_crossing(int k, const double *t, const double *lo, const double *hi, double theta,
                 int r, double *up, double *down, struct err *e);

/* The drift θ ≥ 0 at which the upper crossing probability equals power
 * (Brent on θ). Power counts upper crossings only: under θ > 0 a two-sided
 * design's lower crossings are negligible (< 1e-6 at usual levels). */
int seq_drift(int k, const double *t, const double *lo, const double *hi, double power,
              int r, double *theta, struct err *e);

/* Inflation factor of any bounds: (θ / (z_{1−level} + z_{power}))², the
 * ratio of maximum to fixed-horizon sample size at equal power. level is the
 * per-side error (alpha/2 two-sided). */
int seq_inflation_bounds(int k, const double *t, const double *lo, const double *hi,
                         double level, double power, int r, double *inflation,
                         struct err *e);

/* Inflation factor of a spending design with looks at t[0..k−1]: computes
 * the bounds (seq_bounds), then seq_inflation_bounds. k = 1 gives 1. */
int seq_inflation(const struct seq_design *d, int k, const double *t, double power,
                  double *inflation, struct err *e);

/* Non-binding futility bounds by β-spending (one-sided in the direction of
 * the hoped-for effect, Z > 0). The efficacy bounds in looks[] are computed
 * as if futility did not exist, so ignoring a futility signal never inflates
 * type I error. Under the drift θ of the design's alternative, look j < k
 * stops for futility when Z_j < f_j, where f_j spends β(t_j) − β(t_{j−1})
 * of the type II error given no earlier stop (efficacy or futility), and θ
 * is chosen so that the last look's futility bound meets its efficacy bound
 * (f_k = c_k; the total type II error is then exactly beta). For a
 * two-sided design the region below −c_j stays an efficacy (harm) exit and
 * f_j is raised to −c_j when it would fall below it. fut[0..k−1] gets f_j,
 * *theta the drift and *inflation (θ / (z_{1−level} + z_{1−β}))².
 * β spending uses bshape/bgamma with the same formulas as α. */
int seq_futility(const struct seq_design *d, int k, const struct seq_look *looks,
                 enum seq_shape bshape, double bgamma, double beta, double *fut,
                 double *theta, double *inflation, struct err *e);

/* ---------------------------------------------------------------------------
 * mSPRT and the asymptotic confidence sequence (METHODS §6b, §6c)
 */

/* log Λ of the normal-mixture SPRT for estimate diff with variance v,
 * mixing N(theta0, tau2): ½ln(v/(v+τ²)) + τ²(diff−θ₀)²/(2v(v+τ²)).
 * NaN unless v > 0, tau2 > 0 and all finite. */
double seq_msprt_log_lr(double diff, double v, double tau2, double theta0);

/* Always-valid p: min(p_prev, e^{−logΛ}), capped at 1; p_prev = 1 at start.
 * NaN when an input is NaN. */
double seq_msprt_p(double p_prev, double log_lr);

/* Half-width of the always-valid CI: √(v(v+τ²)/τ² · (2ln(1/α) + ln((v+τ²)/v))).
 * NaN unless v > 0, tau2 > 0, 0 < alpha < 1. */
double seq_msprt_halfwidth(double v, double tau2, double alpha);

/* τ² for a planned variance v_plan: u·v_plan with u = 2ln(1/α) + ln(1 + 2ln(1/α)),
 * the one-step solution of u = 2ln(1/α) + ln(1 + u) (7.94 at α = .05).
 * τ² must never come from the current data. NaN on bad input. */
double seq_msprt_tau2(double v_plan, double alpha);

/* ρ² of the confidence sequence tightest at t_star units:
 * (−2lnα + ln(1 − 2lnα)) / t_star. NaN on bad input. */
double seq_cs_rho2(double alpha, double t_star);

/* Radius of the asymptotic confidence sequence after t units with standard
 * deviation sigma: σ√(2(tρ²+1)/(t²ρ²)·ln(√(tρ²+1)/α)). Computed as
 * seq_msprt_halfwidth(σ²/t, ρ²σ², α), which is the same number. */
double seq_cs_radius(double sigma, double t, double rho2, double alpha);

/* ---------------------------------------------------------------------------
 * Sample size and duration (METHODS §8)
 */

/* A sample-size question. Arm 0 is the control; every other arm is
 * compared with it at the full alpha (no multiplicity correction). */
struct seq_size_query {
    double sigma2;    /* per-unit variance; binary: p(1−p) at the baseline */
    double mde;       /* absolute effect to detect, > 0 */
    double alpha;     /* type I error, (0, 1) */
    double power;     /* 1 − β, in (level, 1) */
    int sides;        /* 1 or 2 */
    int arms;         /* 2..SEQ_MAX_ARMS */
    double weight[SEQ_MAX_ARMS]; /* traffic shares, > 0; normalized to sum 1 */
    double inflation; /* N_max/N_fixed of the sequential design, ≥ 1 */
};

/* Its answer. */
struct seq_size {
    double n_exact;              /* N = max over arms a ≥ 1 of
                                    (z_{1−α/s}+z_{1−β})²σ²(1/w_a+1/w_0)/δ² × inflation */
    double n_arm[SEQ_MAX_ARMS];  /* ⌈N·w_a⌉ units per arm */
    double n_total;              /* Σ n_arm */
};

/* Answers q into *out. AB_EINPUT on any value out of range. */
int seq_sample_size(const struct seq_size_query *q, struct seq_size *out, struct err *e);

/* Days to enrol n units at daily_units new units a day (all arms), rounded
 * up to whole days. NaN unless both are positive and finite. */
double seq_days(double n, double daily_units);

#endif
