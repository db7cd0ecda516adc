/*
 * stats.h — effect estimates, multiple-testing adjustment, sample-ratio tests and
 * balance checks, as pure functions over per-arm moments (moments.h) and counts.
 *
 * Every function here is pure: no I/O, no globals, no exit/abort. Undefined
 * results are NaN (printed later as null) with a flag saying why; no input makes
 * a function crash or call GSL with n < 2 or zero variance. The caller must have
 * called gsl_set_error_handler_off() (main.c does; so do the tests).
 * Formulas and their sources: METHODS.md §2 (differences, lift, proportions),
 * §3 (CUPED), §4 (SRM), §5 (SMD), §7 (Holm, Benjamini–Hochberg).
 */
#ifndef ABTALLY_STATS_H
#define ABTALLY_STATS_H

#include "moments.h"

/* Units below which an arm's comparison uses Welch's t instead of z (METHODS §2). */
#define STATS_T_BELOW 100

/* Why fields of a struct effect are NaN, or which variant was used (bit set). */
enum effect_flag {
    EFF_BAD_ARG = 1 << 0,        /* NULL pointer, unknown type, alpha outside (0,1) */
    EFF_SMALL_N = 1 << 1,        /* an arm has n < 2: no test (diff NaN too) */
    EFF_DEGENERATE = 1 << 2,     /* zero variance in both arms: no se, CI or p */
    EFF_NO_LIFT = 1 << 3,        /* control mean (ratio) is 0: lift undefined */
    EFF_NO_RATIO = 1 << 4,       /* ratio metric with mean denominator 0 in an arm */
    EFF_T_DIST = 1 << 5,         /* Welch t used (min n < STATS_T_BELOW); df finite */
    EFF_AGRESTI_CAFFO = 1 << 6,  /* binary: an arm had 0 or n successes; CI is Agresti–Caffo */
    EFF_FISHER = 1 << 7,         /* binary: an expected cell < 5; p and p_harm are Fisher's exact */
    EFF_CUPED_FALLBACK = 1 << 8, /* covariate has no variance (or no pre-period ratio): cuped = plain */
    EFF_CUPED_NA = 1 << 9,       /* CUPED variance not positive: cuped fields NaN */
    EFF_FIELLER_UNBOUNDED = 1 << 10 /* Fieller set for the ratio of means is unbounded */
};

/* The comparison of one treatment arm with control for one metric. */
struct effect {
    double n;             /* treatment units */
    double mean;          /* treatment mean (ratio metric: ΣX/ΣD of the arm) */
    double control_n;     /* control units */
    double control_mean;  /* control mean (ratio metric: ΣX/ΣD) */
    double diff;          /* mean − control_mean */
    double se;            /* standard error of diff (unpooled; Agresti–Caffo when flagged) */
    double ci_lo;         /* two-sided 1 − alpha interval for diff: lower end */
    double ci_hi;         /* upper end */
    double p;             /* two-sided p (binary: pooled z, or Fisher when flagged) */
    double df;            /* Welch–Satterthwaite df when EFF_T_DIST, else INFINITY */
    double lift;          /* mean / control_mean − 1 */
    double lift_se;       /* delta-method standard error of lift */
    double lift_lo;       /* lift − crit·lift_se (the contract's lift_ci) */
    double lift_hi;       /* lift + crit·lift_se */
    double lift_log_lo;   /* log-scale interval, exp(...) − 1; NaN unless both means > 0 */
    double lift_log_hi;   /* its upper end */
    double fieller_lo;    /* Fieller (1954) interval for lift; NaN when unbounded */
    double fieller_hi;    /* its upper end */
    double cuped_diff;    /* CUPED-adjusted diff (Deng, Xu, Kohavi & Walker 2013) */
    double cuped_se;      /* its standard error */
    double cuped_lo;      /* two-sided 1 − alpha interval for cuped_diff: lower end */
    double cuped_hi;      /* upper end */
    double cuped_p;       /* two-sided p of cuped_diff / cuped_se */
    double cuped_df;      /* Welch df of the adjusted values when EFF_T_DIST, else INFINITY */
    double var_reduction; /* 1 − cuped_se² / se_plain² (se_plain: unadjusted, no Agresti–Caffo) */
    double theta;         /* shared CUPED coefficient; 0 when EFF_CUPED_FALLBACK */
    double p_harm;        /* guardrails (better ≠ 0): one-sided p for a harmful move; else NaN */
    int harm;             /* 1 when p_harm < alpha */
    int flags;            /* enum effect_flag bits */
};

/*
 * Compares trt with ctl for a metric of type t (moments layout in moments.h).
 * alpha: two-sided level of the intervals, in (0, 1). better: 0 for no
 * direction, +1 when higher is better, −1 when lower is better; with better ≠ 0,
 * p_harm is the one-sided p for movement in the harmful direction.
 *
 * Mean:   diff = Ȳ1 − Ȳ0, se = √(s1²/n1 + s0²/n0) (Welch); z when both n ≥ 100,
 *         else Welch t with ν = (v1+v0)² / (v1²/(n1−1) + v0²/(n0−1)).
 * Binary: values are 0/1, successes x_a = round(n_a Ȳ_a).
 *         Per-arm variance p̂(1−p̂)/n (n divisor, also inside CUPED); z only
 *         (df = INFINITY). p is the pooled two-proportion z test, = 1 when the
 *         pooled rate is 0 or 1, Fisher's exact (two-sided: tables no more
 *         likely than the observed one) when an expected cell is < 5. The CI is
 *         unpooled Wald, or Agresti–Caffo (2000) when an arm has 0 or n
 *         successes; se is then the Agresti–Caffo se.
 * Ratio:  R_a = X̄_a/D̄_a; Var(R_a) = (s_X² − 2R s_XD + R² s_D²)/(n D̄²)
 *         (delta method, Deng, Knoblich & Lu 2018); then as for mean.
 * Lift:   lift = m1/m0 − 1, Var ≈ v1/m0² + m1² v0/m0⁴ (delta method); log-scale
 *         interval ln(m1/m0) ± crit·√(v1/m1² + v0/m0²); Fieller (1954) set
 *         {r : (m1 − r m0)² ≤ crit²(v1 + r² v0)} minus 1. All three use the
 *         critical value of diff (t or z) and the unadjusted v_a.
 * CUPED:  θ = Σ_a C_xy,a / Σ_a M_xx,a (within-arm centred sums), diff_cv =
 *         diff − θ(X̄1 − X̄0), Var = Σ_a (s²_Y − 2θ s_XY + θ² s²_X)/n_a. For ratio
 *         metrics Y and X are the linearized ratios: Y'_i = (X_i − R D_i)/D̄ and
 *         X'_i = (Xpre_i − Rpre Dpre_i)/D̄pre (each arm's own R, D̄), whose
 *         centred sums follow exactly from the four-variable moments; the
 *         covariate's arm mean is the arm's pre-period ratio Rpre.
 * Guardrail p_harm uses the unadjusted statistic (binary: pooled z or Fisher).
 *
 * Returns 0 when diff, se and p are defined; otherwise nonzero and out->flags
 * says why. *out is always fully written (NaN where undefined).
 */
int effect_compute(enum metric_type t, const struct moments *ctl, const struct moments *trt,
                   double alpha, int better, struct effect *out);

/*
 * Holm (1979) step-down adjusted p-values: sort ascending, p̃_(k) =
 * max_{j≤k} min(1, (m−j+1) p_(j)). NaN entries count in m and stay NaN (R's
 * p.adjust(p, "holm", n = length(p)) with n given explicitly; R's default
 * leaves NA out of n). adj may equal p.
 * Allocates a work array; if that fails every adj is NaN.
 */
void holm_adjust(const double *p, int m, double *adj);

/*
 * Benjamini & Hochberg (1995) adjusted p-values: p̃_(k) = min_{j≥k} min(1, m p_(j)/j),
 * NaN counting in m and staying NaN (R's p.adjust(p, "BH", n = length(p))).
 */
void bh_adjust(const double *p, int m, double *adj);

/* Which test srm_test used. */
enum srm_test_kind {
    SRM_TEST_NONE = 0,         /* no test: bad input or no units */
    SRM_TEST_CHI2 = 1,         /* Pearson chi-square, df = arms − 1 */
    SRM_TEST_BINOMIAL = 2,     /* exact binomial (2 arms, an expected count < 5) */
    SRM_TEST_INSUFFICIENT = 3  /* > 2 arms and an expected count < 5: chi2 only, p NaN */
};

/* Conditions srm_test reports (bit set). */
enum srm_flag {
    SRM_BAD_ARG = 1 << 0,       /* k < 2, a NULL array, a negative/non-finite count or weight */
    SRM_NO_UNITS = 1 << 1,      /* all counts 0 */
    SRM_SMALL_EXPECTED = 1 << 2, /* an expected count < 5 */
    SRM_ZERO_WEIGHT_UNITS = 1 << 3 /* units in an arm of weight 0: p = 0, a hard failure */
};

struct srm_result {
    double chi2;     /* Σ (n_a − E_a)² / E_a over arms of positive weight */
    double df;       /* positive-weight arms − 1 */
    double p;        /* p of the test used (NaN when none) */
    double n;        /* total units N */
    double min_expected; /* smallest E_a = N π_a over positive-weight arms */
    int test;        /* enum srm_test_kind */
    int flags;       /* enum srm_flag bits */
};

/*
 * Sample-ratio mismatch test (METHODS §4). counts[k] are units per arm (≥ 0),
 * weights[k] the configured allocation (≥ 0, normalized here; NULL = equal).
 * Arms of weight 0 are left out of the test; units in one give p = 0 and
 * SRM_ZERO_WEIGHT_UNITS. χ² = Σ(n_a − Nπ_a)²/(Nπ_a), p = gsl_cdf_chisq_Q(χ², df).
 * With 2 arms and an expected count < 5 (and N ≤ UINT_MAX, counts integer), the
 * exact binomial test p = min(1, 2 min(P(X ≤ n_1), P(X ≥ n_1))), X ~ Bin(N, π_1):
 * the doubled one-sided p, equal to scipy's binomtest / R's binom.test when
 * π = ½ and in general not otherwise. Returns 0 when p is defined, else nonzero
 * (r->flags says why; r is always written).
 */
int srm_test(const double *counts, const double *weights, int k, struct srm_result *r);

/*
 * Sequential SRM (Lindon & Malek 2022): log Bayes factor of a Dirichlet-
 * multinomial alternative, prior α_a = c π_a (S = c), against Multinomial(π):
 *   logBF = lnΓ(S) − lnΓ(S+N) + Σ_a [lnΓ(α_a+n_a) − lnΓ(α_a) − n_a ln π_a].
 * weights normalized here (NULL = equal); arms of weight 0 with no units are
 * skipped, with units give +INFINITY. NaN on bad input (c ≤ 0, negative counts).
 */
double srm_seq_logbf(const double *counts, const double *weights, int k, double c);

/* Always-valid p update: min(p_old, e^{−logbf}) (start from p_old = 1).
 * A NaN logbf leaves p_old unchanged. */
double srm_seq_update(double p_old, double logbf);

/*
 * Standardized mean difference of variable var between two sets:
 * (x̄_a − x̄_b) / √((s_a² + s_b²)/2) (METHODS §5; Austin 2009).
 * NaN when an n < 2, both variances are 0, or var is out of range.
 */
double smd(const struct moments *a, const struct moments *b, int var);

/*
 * Pooled two-proportion z test of x1/n1 against x0/n0 (e.g. duplicate or join
 * rates by arm): p̄ = (x1+x0)/(n1+n0), z = (x1/n1 − x0/n0)/√(p̄(1−p̄)(1/n1+1/n0)),
 * returns the two-sided p = 2Q(|z|) (the 2×2 Pearson χ² without continuity
 * correction). Returns 1 (z = 0) when p̄ is 0 or 1, NaN when an n ≤ 0 or
 * 0 ≤ x ≤ n fails. z_out (may be NULL) receives z.
 */
double prop_test_p(double x1, double n1, double x0, double n0, double *z_out);

#endif
