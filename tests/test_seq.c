/*
 * test_seq.c — sequential-testing statistics (src/seq.c).
 *
 * Reference values come from outside the project, named beside each check:
 *   rpact  R 4.2 package rpact 3.3.4 (Debian r-cran-rpact), printed with
 *          sprintf("%.10f", ...); the exact call is in the comment.
 *   scipy  Python scipy 1.10.1 (Debian python3-scipy), the formula named.
 *   J&T    Jennison & Turnbull (2000), ch. 2 tables, from memory.
 *   §9     METHODS.md §9 check values.
 * The simulations use fixed seeds (gsl_rng_mt19937); ABTALLY_SIM_HEAVY=1 in
 * the environment (make sim) runs ten times as many streams.
 */
#include <float.h>
#include <math.h>
#include <stdbool.h>
#include <stdlib.h>
#include <string.h>

#include <gsl/gsl_cdf.h>
#include <gsl/gsl_errno.h>
#include <gsl/gsl_randist.h>
#include <gsl/gsl_rng.h>

#include "helpers.h"
#include "seq.h"

#define Z_TOL 1e-4 /* bounds on the Z scale against published values */

static const struct seq_design DEF_OBF = {SEQ_OBF, 0, 0.05, 2, 0};
static const struct seq_design DEF_POC = {SEQ_POCOCK, 0, 0.05, 2, 0};
static const struct seq_design DEF_HSD4 = {SEQ_HSD, -4, 0.05, 2, 0};

/* Bounds of d at k looks at t[] (equal spacing when t is NULL) against
 * want[], each to tol on the Z scale. */
static void check_bounds(const struct seq_design *d, int k, const double *t, const double *want,
                         double tol)
{
    double tt[64];
    struct seq_look looks[64];
    struct err e;
    err_clear(&e);
    if (t)
        memcpy(tt, t, (size_t)k * sizeof *t);
    else
        seq_equal_fractions(k, tt);
    int rc = seq_bounds(d, k, tt, looks, &e);
    if (rc)
        fail_msg("seq_bounds: %s", e.msg);
    for (int i = 0; i < k; i++) {
        assert_abs_close(looks[i].t, tt[i], 0);
        assert_abs_close(looks[i].z, want[i], tol);
    }
    assert_rel_close(looks[k - 1].alpha_cum, d->alpha, 1e-12);
}

/* ------------------------------------------------------------------------ */
/* Spending functions                                                        */

static void test_seq__spend_matches_rpact_alpha_spent(void **state)
{
    (void)state;
    /* rpact: getDesignGroupSequential(kMax=5, alpha=0.05, sided=2,
     *   typeOfDesign="asOF")$alphaSpent (cumulative, both sides; rpact
     *   prints the last one as 0.04999999, hence 1e-6). */
    const double obf[] = {1.077742526e-06, 0.0007883035152, 0.007616126566, 0.02442358031};
    for (int i = 0; i < 4; i++)
        assert_rel_close(2 * seq_spend(SEQ_OBF, 0, 0.025, 0.2 * (i + 1)), obf[i], 1e-6);
    /* rpact: getDesignGroupSequential(informationRates=c(.2,.45,.7,1),
     *   alpha=0.05, sided=2, typeOfDesign="asOF")$alphaSpent */
    assert_rel_close(2 * seq_spend(SEQ_OBF, 0, 0.025, 0.45), 0.001667826031, 1e-6);
    assert_rel_close(2 * seq_spend(SEQ_OBF, 0, 0.025, 0.7), 0.01476897863, 1e-6);
    /* scipy/numpy: 0.025*np.log(1+(np.e-1)*0.45) = 0.014320023763862686,
     * and HSD 0.025*np.expm1(4*0.45)/np.expm1(4) = 0.002355327311339256 */
    assert_rel_close(seq_spend(SEQ_POCOCK, 0, 0.025, 0.45), 0.025 * log(1 + (M_E - 1) * 0.45),
                     1e-15);
    assert_rel_close(seq_spend(SEQ_POCOCK, 0, 0.025, 0.45), 0.014320023763862686, 1e-13);
    assert_rel_close(seq_spend(SEQ_HSD, -4, 0.025, 0.45), 0.002355327311339256, 1e-13);
    /* HSD at γ = 0 is linear (METHODS §6a). */
    assert_rel_close(seq_spend(SEQ_HSD, 0, 0.025, 0.3), 0.0075, 1e-12);
    /* Ends and domain. */
    for (int s = SEQ_OBF; s <= SEQ_HSD; s++) {
        assert_abs_close(seq_spend((enum seq_shape)s, -4, 0.025, 0), 0, 0);
        assert_abs_close(seq_spend((enum seq_shape)s, -4, 0.025, 1), 0.025, 0);
        assert_abs_close(seq_spend((enum seq_shape)s, -4, 0.025, 1.7), 0.025, 0);
    }
    assert_true(isnan(seq_spend(SEQ_OBF, 0, 0, 0.5)));
    assert_true(isnan(seq_spend(SEQ_OBF, 0, 1.2, 0.5)));
    assert_true(isnan(seq_spend(SEQ_HSD, NAN, 0.05, 0.5)));
    assert_true(isnan(seq_spend((enum seq_shape)9, 0, 0.05, 0.5)));
    assert_rel_close(seq_side_level(0.05, 2), 0.025, 0);
    assert_rel_close(seq_side_level(0.05, 1), 0.05, 0);
    assert_true(isnan(seq_side_level(0.05, 3)));
}

static void test_seq__shape_names(void **state)
{
    (void)state;
    enum seq_shape s;
    assert_int_equal(seq_shape_parse("obf", &s), AB_OK);
    assert_int_equal(s, SEQ_OBF);
    assert_int_equal(seq_shape_parse("pocock", &s), AB_OK);
    assert_int_equal(s, SEQ_POCOCK);
    assert_int_equal(seq_shape_parse("hsd", &s), AB_OK);
    assert_int_equal(s, SEQ_HSD);
    assert_int_equal(seq_shape_parse("OBF", &s), AB_EUSAGE);
    assert_int_equal(seq_shape_parse(NULL, &s), AB_EUSAGE);
    assert_string_equal(seq_shape_name(SEQ_POCOCK), "pocock");
    assert_string_equal(seq_shape_name((enum seq_shape)7), "?");
}

/* ------------------------------------------------------------------------ */
/* Bounds against rpact                                                      */

static void test_seq__bounds_obf_equal_looks_rpact(void **state)
{
    (void)state;
    /* rpact: getDesignGroupSequential(kMax=k, alpha=0.05, sided=2,
     *   typeOfDesign="asOF")$criticalValues, k = 3, 4, 5 */
    const double k3[] = {3.7103028733, 2.5114274845, 1.9930474833};
    const double k4[] = {4.3326336460, 2.9631315991, 2.3590442911, 2.0140901431};
    const double k5[] = {4.8768849488, 3.3570119217, 2.6802800670, 2.2898167744, 2.0310320482};
    check_bounds(&DEF_OBF, 3, NULL, k3, Z_TOL);
    check_bounds(&DEF_OBF, 4, NULL, k4, Z_TOL);
    check_bounds(&DEF_OBF, 5, NULL, k5, Z_TOL);
}

static void test_seq__bounds_pocock_equal_looks_rpact(void **state)
{
    (void)state;
    /* rpact: getDesignGroupSequential(kMax=k, alpha=0.05, sided=2,
     *   typeOfDesign="asP")$criticalValues, k = 3, 4, 5 */
    const double k3[] = {2.2794282389, 2.2949111387, 2.2959383503};
    const double k4[] = {2.3683277035, 2.3675242886, 2.3581677452, 2.3500295356};
    const double k5[] = {2.4379766881, 2.4268138632, 2.4101938382, 2.3966454044, 2.3859845623};
    check_bounds(&DEF_POC, 3, NULL, k3, Z_TOL);
    check_bounds(&DEF_POC, 4, NULL, k4, Z_TOL);
    check_bounds(&DEF_POC, 5, NULL, k5, Z_TOL);
}

static void test_seq__bounds_hsd_equal_looks_rpact(void **state)
{
    (void)state;
    /* rpact: getDesignGroupSequential(kMax=k, alpha=0.05, sided=2,
     *   typeOfDesign="asHSD", gammaA=-4)$criticalValues, k = 3, 4, 5 */
    const double k3[] = {3.0107394854, 2.5465305522, 1.9992263243};
    const double k4[] = {3.1553730327, 2.8183471486, 2.4391318038, 2.0136471614};
    const double k5[] = {3.2526684884, 2.9860459492, 2.6916574463, 2.3736669496, 2.0253209993};
    check_bounds(&DEF_HSD4, 3, NULL, k3, Z_TOL);
    check_bounds(&DEF_HSD4, 4, NULL, k4, Z_TOL);
    check_bounds(&DEF_HSD4, 5, NULL, k5, Z_TOL);
}

static void test_seq__bounds_unequal_fractions_rpact(void **state)
{
    (void)state;
    const double t[] = {0.2, 0.45, 0.7, 1.0};
    /* rpact: getDesignGroupSequential(informationRates=c(0.2,0.45,0.7,1.0),
     *   alpha=0.05, sided=2, typeOfDesign=X[, gammaA=-4])$criticalValues */
    const double obf[] = {4.8768849488, 3.1438483819, 2.4515350834, 2.0010886863};   /* "asOF" */
    const double poc[] = {2.4379766881, 2.3765097782, 2.3630536124, 2.3265039995};   /* "asP" */
    const double hsd[] = {3.2526684884, 2.8911436275, 2.5186550692, 2.0057219490};   /* "asHSD" */
    check_bounds(&DEF_OBF, 4, t, obf, Z_TOL);
    check_bounds(&DEF_POC, 4, t, poc, Z_TOL);
    check_bounds(&DEF_HSD4, 4, t, hsd, Z_TOL);
}

static void test_seq__bounds_one_sided_rpact(void **state)
{
    (void)state;
    /* One-sided designs leave the lower side open, so Pocock-type bounds
     * differ from the two-sided ones at the same per-side level.
     * rpact: getDesignGroupSequential(kMax=5, alpha=0.05, sided=1,
     *   typeOfDesign="asP")$criticalValues */
    const struct seq_design poc1 = {SEQ_POCOCK, 0, 0.05, 1, 0};
    const double p5[] = {2.1762114531, 2.1437477097, 2.1132852659, 2.0895991996, 2.0709984228};
    check_bounds(&poc1, 5, NULL, p5, Z_TOL);
    /* rpact: getDesignGroupSequential(kMax=5, alpha=0.025, sided=1,
     *   typeOfDesign="asOF")$criticalValues */
    const struct seq_design obf1 = {SEQ_OBF, 0, 0.025, 1, 0};
    const double o5[] = {4.8768849488, 3.3570119217, 2.6802800670, 2.2898167744, 2.0310320631};
    check_bounds(&obf1, 5, NULL, o5, Z_TOL);
}

static void test_seq__bounds_twenty_pocock_looks_rpact(void **state)
{
    (void)state;
    /* rpact: getDesignGroupSequential(kMax=20, alpha=0.05, sided=2,
     *   typeOfDesign="asP")$criticalValues (rpact warns kMax > 10 is not
     *   validated by its authors). */
    const double k20[] = {2.8687398815, 2.8293271288, 2.7873118892, 2.7514046356, 2.7211792096,
                          2.6955108866, 2.6734435186, 2.6542473659, 2.6373727694, 2.6224020645,
                          2.6090133861, 2.5969548896, 2.5860267207, 2.5760680512, 2.5669480339,
                          2.5585588738, 2.5508110598, 2.5436294451, 2.5369505212, 2.5307201669};
    check_bounds(&DEF_POC, 20, NULL, k20, Z_TOL);
}

static void test_seq__bounds_methods_k5(void **state)
{
    (void)state;
    /* §9: Lan-DeMets, K = 5, two-sided .05, per side. */
    const double obf[] = {4.8769, 3.3570, 2.6803, 2.2898, 2.0310};
    const double poc[] = {2.4380, 2.4268, 2.4102, 2.3966, 2.3860};
    const double hsd[] = {3.2527, 2.9860, 2.6917, 2.3737, 2.0253};
    check_bounds(&DEF_OBF, 5, NULL, obf, 1e-4);
    check_bounds(&DEF_POC, 5, NULL, poc, 1e-4);
    check_bounds(&DEF_HSD4, 5, NULL, hsd, 1e-4);
    /* J&T (from memory): the often-quoted 4.877, 3.357, 2.680, 2.290, 2.031. */
    const double jt[] = {4.877, 3.357, 2.680, 2.290, 2.031};
    check_bounds(&DEF_OBF, 5, NULL, jt, 6e-4);
}

/* A caller's own cumulative schedule: the single two-sided OBF-type
 * function α(t) = 2 − 2Φ(z_{.975}/√t) of §6a's "convention trap". */
static void check_single_function(int k, const double *t, const double *want, double tol)
{
    struct seq_monitor m;
    struct err e;
    err_clear(&e);
    assert_int_equal(seq_monitor_init(&m, &DEF_OBF, &e), AB_OK);
    for (int i = 0; i < k; i++) {
        struct seq_look l;
        double cum = i == k - 1 ? 0.05 : seq_spend(SEQ_OBF, 0, 0.05, t[i]);
        int rc = seq_monitor_next_cum(&m, t[i], cum, i == k - 1, &l, &e);
        if (rc)
            fail_msg("seq_monitor_next_cum: %s", e.msg);
        assert_abs_close(l.z, want[i], tol);
        assert_rel_close(l.alpha_cum, cum, 1e-12);
    }
    assert_true(m.done);
}

static void test_seq__bounds_single_function_convention(void **state)
{
    (void)state;
    const double t5[] = {0.2, 0.4, 0.6, 0.8, 1.0};
    /* §9 "OFB-type, single two-sided function"; the same from rpact:
     *   t <- c(.2,.4,.6,.8,1); cum <- 2-2*pnorm(qnorm(0.975)/sqrt(t)); cum[5] <- 0.05
     *   getDesignGroupSequential(informationRates=t, alpha=0.05, sided=2,
     *     typeOfDesign="asUser", userAlphaSpending=cum)$criticalValues */
    const double k5[] = {4.3826127029, 3.0997274742, 2.5533549711, 2.2538479045, 2.0635010973};
    const double k5_methods[] = {4.3826, 3.0997, 2.5534, 2.2538, 2.0635};
    check_single_function(5, t5, k5, Z_TOL);
    check_single_function(5, t5, k5_methods, 1e-4);
    /* §9 "Unplanned t = .3, .5, .9, 1"; rpact as above with t <- c(.3,.5,.9,1):
     * 3.5783882874 2.7798111066 2.0898141041 2.0883994028 */
    const double t4[] = {0.3, 0.5, 0.9, 1.0};
    const double u4[] = {3.5783882874, 2.7798111066, 2.0898141041, 2.0883994028};
    check_single_function(4, t4, u4, Z_TOL);
}

/* ------------------------------------------------------------------------ */
/* Live monitoring                                                           */

static void test_seq__monitor_incremental_unplanned_looks_rpact(void **state)
{
    (void)state;
    /* Looks arrive one at a time at t = .3, .5, .9, 1 (not planned).
     * rpact: getDesignGroupSequential(informationRates=c(.3,.5,.9,1),
     *   alpha=0.05, sided=2, typeOfDesign="asOF")$criticalValues */
    const double t[] = {0.3, 0.5, 0.9, 1.0};
    const double want[] = {3.9285725426, 2.9656182304, 2.1050206050, 2.0572618917};
    struct seq_monitor m;
    struct err e;
    err_clear(&e);
    assert_int_equal(seq_monitor_init(&m, &DEF_OBF, &e), AB_OK);
    struct seq_look l[4];
    for (int i = 0; i < 4; i++) {
        assert_false(m.done);
        assert_int_equal(seq_monitor_next(&m, t[i], false, &l[i], &e), AB_OK);
        assert_abs_close(l[i].z, want[i], Z_TOL);
    }
    assert_true(m.done); /* t = 1 is the final look */
    assert_rel_close(l[3].alpha_cum, 0.05, 1e-12);
    /* A look after the final one is refused. */
    assert_int_equal(seq_monitor_next(&m, 1.1, false, NULL, &e), AB_EINPUT);
    assert_non_null(strstr(e.msg, "final look"));

    /* A restart re-enters the frozen bounds and continues with the same
     * result as the run that never stopped. */
    struct seq_monitor r;
    assert_int_equal(seq_monitor_init(&r, &DEF_OBF, &e), AB_OK);
    struct seq_look f;
    assert_int_equal(seq_monitor_freeze(&r, t[0], l[0].z, false, &f, &e), AB_OK);
    assert_rel_close(f.alpha_cum, l[0].alpha_cum, 1e-8);
    assert_int_equal(seq_monitor_freeze(&r, t[1], l[1].z, false, &f, &e), AB_OK);
    assert_rel_close(f.alpha_cum, l[1].alpha_cum, 1e-8);
    struct seq_look n3;
    assert_int_equal(seq_monitor_next(&r, t[2], false, &n3, &e), AB_OK);
    assert_abs_close(n3.z, l[2].z, 1e-9);
}

static void test_seq__monitor_frozen_bound_changes_later_looks(void **state)
{
    (void)state;
    /* A look recorded with a lower bound than the design's spent more, so
     * the next look spends less (Lan-DeMets aims at the cumulative α(t)),
     * and the final look still brings the total to exactly alpha. */
    struct seq_monitor a, b;
    struct err e;
    struct seq_look la, lb, fa, fb;
    err_clear(&e);
    assert_int_equal(seq_monitor_init(&a, &DEF_OBF, &e), AB_OK);
    assert_int_equal(seq_monitor_init(&b, &DEF_OBF, &e), AB_OK);
    assert_int_equal(seq_monitor_next(&a, 0.5, false, &la, &e), AB_OK);
    assert_int_equal(seq_monitor_freeze(&b, 0.5, 2.5, false, &lb, &e), AB_OK);
    /* P(|Z| ≥ 2.5) = 2Q(2.5): scipy 2*norm.sf(2.5) = 0.012419330651552265 */
    assert_rel_close(lb.alpha_cum, 0.012419330651552265, 1e-12);
    assert_int_equal(seq_monitor_next(&a, 1.0, true, &fa, &e), AB_OK);
    assert_int_equal(seq_monitor_next(&b, 1.0, true, &fb, &e), AB_OK);
    assert_true(fb.z > fa.z);
    struct seq_look again;
    assert_int_equal(seq_monitor_init(&b, &DEF_OBF, &e), AB_OK);
    assert_int_equal(seq_monitor_freeze(&b, 0.5, 2.5, false, NULL, &e), AB_OK);
    assert_int_equal(seq_monitor_freeze(&b, 1.0, fb.z, true, &again, &e), AB_OK);
    assert_rel_close(again.alpha_cum, 0.05, 1e-7);
}

static void test_seq__skip_rule(void **state)
{
    (void)state;
    assert_true(seq_look_too_close(0.30, 0.305, SEQ_MIN_GAP));
    assert_false(seq_look_too_close(0.30, 0.31, SEQ_MIN_GAP));
    assert_false(seq_look_too_close(0.995, 1.0, SEQ_MIN_GAP)); /* never skip the final look */
    assert_true(seq_look_too_close(0.0, 0.004, SEQ_MIN_GAP));
    /* 0.03 − 0.02 is 0.009999999999999998 in doubles: still 0.01 apart. */
    assert_false(seq_look_too_close(0.02, 0.03, SEQ_MIN_GAP));
}

static void test_seq__fifty_looks(void **state)
{
    (void)state;
    /* 50 equal looks: the grid r = 16 agrees with r = 64 to 1e-4 (§6a
     * claims 4 decimals; it is 2e-5 here), alpha adds up, and the last bound lies between
     * the fixed-horizon 1.96 and the 20-look bound 2.1228 of rpact
     * (getDesignGroupSequential(kMax=20, alpha=0.05, sided=2,
     * typeOfDesign="asOF")$criticalValues[20] = 2.1228294447). */
    double t[50];
    struct seq_look a[50], b[50];
    struct err e;
    err_clear(&e);
    seq_equal_fractions(50, t);
    struct seq_design fine = DEF_OBF;
    fine.r = 64;
    assert_int_equal(seq_bounds(&DEF_OBF, 50, t, a, &e), AB_OK);
    assert_int_equal(seq_bounds(&fine, 50, t, b, &e), AB_OK);
    for (int i = 0; i < 50; i++)
        assert_abs_close(a[i].z, b[i].z, 1e-4);
    assert_rel_close(a[49].alpha_cum, 0.05, 1e-12);
    assert_true(a[49].z > 2.1228294447 && a[49].z < 2.2);
    double sum = 0;
    for (int i = 0; i < 50; i++)
        sum += a[i].alpha_spent;
    assert_rel_close(sum, 0.05, 1e-9);
}

static void test_seq__negligible_spend_gives_infinite_bound(void **state)
{
    (void)state;
    /* OBF-type per side at t = 0.001 spends 2Q(z_.9875/√.001) ≈ 1e-1090,
     * below any double: the look cannot reject. */
    struct seq_monitor m;
    struct seq_look l;
    struct err e;
    err_clear(&e);
    assert_int_equal(seq_monitor_init(&m, &DEF_OBF, &e), AB_OK);
    assert_int_equal(seq_monitor_next(&m, 0.001, false, &l, &e), AB_OK);
    assert_true(isinf(l.z) && l.z > 0);
    assert_int_equal(seq_monitor_next(&m, 1.0, true, &l, &e), AB_OK);
    /* A look that comes that early changes nothing: the final bound is the
     * fixed-horizon one, scipy norm.isf(0.025) = 1.959963984540054. */
    assert_abs_close(l.z, 1.959963984540054, 1e-6);
}

static void test_seq__errors(void **state)
{
    (void)state;
    struct err e;
    err_clear(&e);
    struct seq_look l[4];
    double t[] = {0.5, 0.4, 1.0};
    assert_int_equal(seq_bounds(&DEF_OBF, 3, t, l, &e), AB_EINPUT);
    assert_non_null(strstr(e.msg, "increase"));
    double t0[] = {0.0, 1.0};
    assert_int_equal(seq_bounds(&DEF_OBF, 2, t0, l, &e), AB_EINPUT);
    assert_int_equal(seq_bounds(&DEF_OBF, 0, t0, l, &e), AB_EINPUT);
    struct seq_design bad = DEF_OBF;
    bad.alpha = 1.5;
    assert_int_equal(seq_design_check(&bad, &e), AB_EINPUT);
    assert_non_null(strstr(e.msg, "alpha"));
    bad = DEF_OBF;
    bad.sides = 1;
    bad.alpha = 0.6;
    assert_int_equal(seq_design_check(&bad, &e), AB_EINPUT);
    bad = DEF_OBF;
    bad.sides = 3;
    assert_int_equal(seq_design_check(&bad, &e), AB_EINPUT);
    bad = DEF_HSD4;
    bad.gamma = INFINITY;
    assert_int_equal(seq_design_check(&bad, &e), AB_EINPUT);
    bad = DEF_OBF;
    bad.r = SEQ_GRID_R_MAX + 1;
    assert_int_equal(seq_design_check(&bad, &e), AB_EINPUT);
    bad = DEF_OBF;
    bad.shape = (enum seq_shape)5;
    assert_int_equal(seq_design_check(&bad, &e), AB_EINPUT);

    struct seq_walk w;
    assert_int_equal(seq_walk_init(&w, NAN, 0, &e), AB_EINPUT);
    assert_int_equal(seq_walk_init(&w, 0, -1, &e), AB_EINPUT);
    assert_int_equal(seq_walk_init(&w, 0, 0, &e), AB_OK);
    double up, down;
    assert_int_equal(seq_walk_exit(&w, 0.5, 1, -1, &up, &down, &e), AB_EINPUT);
    assert_int_equal(seq_walk_step(&w, 0.5, -2, 2, &e), AB_OK);
    assert_int_equal(seq_walk_step(&w, 0.5, -2, 2, &e), AB_EINPUT); /* not after the last */
    assert_int_equal(seq_walk_exit(&w, NAN, -2, 2, &up, &down, &e), AB_EINPUT);

    struct seq_monitor m;
    assert_int_equal(seq_monitor_init(&m, &DEF_OBF, &e), AB_OK);
    assert_int_equal(seq_monitor_freeze(&m, 0.5, -1, false, NULL, &e), AB_EINPUT);
    assert_int_equal(seq_monitor_next_cum(&m, 0.5, 0.2, false, NULL, &e), AB_EINPUT);
    assert_int_equal(seq_monitor_next(&m, 0.5, false, NULL, &e), AB_OK);
    assert_int_equal(seq_monitor_next(&m, 0.5, false, NULL, &e), AB_EINPUT);

    double inf;
    double tt[] = {0.5, 1.0}, lo[] = {-2.8, -2}, hi[] = {2.8, 2};
    assert_int_equal(seq_inflation_bounds(2, tt, lo, hi, 0.025, 1.2, 0, &inf, &e), AB_EINPUT);
    assert_int_equal(seq_inflation_bounds(2, tt, lo, hi, 0.7, 0.8, 0, &inf, &e), AB_EINPUT);
    /* Power below the error the bounds allow cannot be reached by θ ≥ 0. */
    assert_int_equal(seq_inflation_bounds(2, tt, lo, hi, 0.025, 0.01, 0, &inf, &e), AB_EINPUT);
}

/* ------------------------------------------------------------------------ */
/* Crossing probabilities, classic constants, inflation                     */

static void test_seq__classic_constants(void **state)
{
    (void)state;
    /* J&T ch. 2 (from memory; also §9): Pocock's constant C_P and
     * O'Brien-Fleming's C_B (bound C_B√(K/k)) give P₀(cross) = 0.05.
     * Three decimals move α by less than 1e-4. */
    const int ks[] = {2, 3, 4, 5, 10};
    const double cp[] = {2.178, 2.289, 2.361, 2.413, 2.555};
    const double cb[] = {1.977, 2.004, 2.024, 2.040, 2.087};
    /* rpact: getDesignGroupSequential(kMax=k, alpha=0.05, sided=2,
     *   typeOfDesign="P" / "OF")$criticalValues[k], printed "%.6f" */
    const double cp_r[] = {2.178272, 2.289478, 2.361298, 2.413176, 2.555013};
    const double cb_r[] = {1.977431, 2.004036, 2.024295, 2.040073, 2.086502};
    for (int i = 0; i < 5; i++) {
        int k = ks[i];
        double t[10], lo[10], hi[10], up, down;
        struct err e;
        seq_equal_fractions(k, t);
        for (int pass = 0; pass < 4; pass++) {
            for (int j = 0; j < k; j++) {
                double c = pass == 0   ? cp[i]
                           : pass == 1 ? cp_r[i]
                           : pass == 2 ? cb[i] * sqrt((double)k / (j + 1))
                                       : cb_r[i] * sqrt((double)k / (j + 1));
                hi[j] = c;
                lo[j] = -c;
            }
            assert_int_equal(seq_crossing(k, t, lo, hi, 0, 0, &up, &down, &e), AB_OK);
            assert_rel_close(up, down, 1e-9);
            assert_abs_close(up + down, 0.05, pass % 2 ? 2e-6 : 1e-4);
        }
    }
}

static void test_seq__crossing_single_look_closed_form(void **state)
{
    (void)state;
    /* One look: P_θ(Z ≥ c) = Q(c − θ√t). scipy norm.sf(1.96 - 2.8) =
     * 0.7995458067395502; norm.cdf(-1.96 - 2.8) = 9.679647960327303e-07 */
    double t = 1, lo = -1.96, hi = 1.96, up, down;
    struct err e;
    assert_int_equal(seq_crossing(1, &t, &lo, &hi, 2.8, 0, &up, &down, &e), AB_OK);
    assert_rel_close(up, 0.7995458067395502, 1e-12);
    assert_rel_close(down, 9.679647960327303e-07, 1e-10);
    /* Two looks, bounds open at look 1: the same as one look at t = 1. */
    double t2[] = {0.5, 1}, lo2[] = {-INFINITY, -1.96}, hi2[] = {INFINITY, 1.96};
    assert_int_equal(seq_crossing(2, t2, lo2, hi2, 2.8, 0, &up, &down, &e), AB_OK);
    assert_rel_close(up, 0.7995458067395502, 1e-6);
}

struct if_case {
    const struct seq_design *d;
    int k;
    double power;
    double want;
};

static void test_seq__inflation_spending_rpact(void **state)
{
    (void)state;
    /* rpact: getDesignCharacteristics(getDesignGroupSequential(kMax=k,
     *   alpha=0.05, beta=1-power, sided=2, typeOfDesign=X))$inflationFactor */
    const struct if_case cases[] = {
        {&DEF_OBF, 2, 0.8, 1.0037250300}, {&DEF_OBF, 3, 0.8, 1.0127948130},
        {&DEF_OBF, 4, 0.8, 1.0196373305}, {&DEF_OBF, 5, 0.8, 1.0247198810},
        {&DEF_OBF, 10, 0.8, 1.0377668427}, {&DEF_OBF, 5, 0.9, 1.0230783263},
        {&DEF_OBF, 10, 0.9, 1.0354853517}, {&DEF_POC, 2, 0.8, 1.1225502274},
        {&DEF_POC, 3, 0.8, 1.1704200775}, {&DEF_POC, 4, 0.8, 1.1963100508},
        {&DEF_POC, 5, 0.8, 1.2126259404}, {&DEF_POC, 10, 0.8, 1.2475038292},
        {&DEF_POC, 5, 0.9, 1.1923476444}, {&DEF_POC, 10, 0.9, 1.2240352384},
        {&DEF_HSD4, 5, 0.8, 1.0253892861}, /* typeOfDesign="asHSD", gammaA=-4 */
    };
    for (size_t i = 0; i < sizeof cases / sizeof cases[0]; i++) {
        double t[10], inf;
        struct err e;
        seq_equal_fractions(cases[i].k, t);
        int rc = seq_inflation(cases[i].d, cases[i].k, t, cases[i].power, &inf, &e);
        if (rc)
            fail_msg("seq_inflation: %s", e.msg);
        assert_rel_close(inf, cases[i].want, 1e-5);
    }
    /* rpact: getDesignCharacteristics(getDesignGroupSequential(
     *   informationRates=c(0.2,0.45,0.7,1.0), alpha=0.05, beta=0.2, sided=2,
     *   typeOfDesign="asOF"))$inflationFactor = 1.0156385190 */
    double t[] = {0.2, 0.45, 0.7, 1.0}, inf;
    assert_int_equal(seq_inflation(&DEF_OBF, 4, t, 0.8, &inf, NULL), AB_OK);
    assert_rel_close(inf, 1.0156385190, 1e-5);
    /* One look is the fixed-horizon test. */
    double one = 1;
    assert_int_equal(seq_inflation(&DEF_OBF, 1, &one, 0.8, &inf, NULL), AB_OK);
    assert_rel_close(inf, 1.0, 0);
}

static void test_seq__inflation_classic(void **state)
{
    (void)state;
    /* Constant-boundary designs (Pocock; O'Brien-Fleming C_B√(K/k)) with
     * rpact's constants. rpact: getDesignCharacteristics(
     *   getDesignGroupSequential(kMax=k, alpha=0.05, beta=1-power, sided=2,
     *   typeOfDesign="P" / "OF"))$inflationFactor. §9's table has the same
     * values to 4 decimals for OBF; its Pocock row at power .8 is lower by
     * up to 7e-4 at K = 10 (1.2284 against 1.22859 at K = 5), so Pocock is
     * checked against rpact only. */
    const int ks[] = {2, 3, 4, 5, 10};
    const double cp[] = {2.178272, 2.289478, 2.361298, 2.413176, 2.555013};
    const double cb[] = {1.977431, 2.004036, 2.024295, 2.040073, 2.086502};
    const double p8[] = {1.1104126347, 1.1663871461, 1.2024761575, 1.2285926102, 1.3009761571};
    const double p9[] = {1.1000824975, 1.1506392291, 1.1831422270, 1.2066032064, 1.2712783482};
    const double o8[] = {1.0077862551, 1.0174062249, 1.0238464558, 1.0284109694, 1.0398995451};
    const double o9[] = {1.0071264097, 1.0161007099, 1.0221630385, 1.0264863035, 1.0374571860};
    const double o8_methods[] = {1.0078, 1.0174, 1.0238, 1.0284, 1.0399}; /* §9 */
    const double o9_methods[] = {1.0071, 1.0161, 1.0222, 1.0265, 1.0375}; /* §9 */
    for (int i = 0; i < 5; i++) {
        int k = ks[i];
        double t[10], lo[10], hi[10], inf;
        struct err e;
        seq_equal_fractions(k, t);
        for (int j = 0; j < k; j++) {
            hi[j] = cp[i];
            lo[j] = -cp[i];
        }
        assert_int_equal(seq_inflation_bounds(k, t, lo, hi, 0.025, 0.8, 0, &inf, &e), AB_OK);
        assert_rel_close(inf, p8[i], 1e-5);
        assert_int_equal(seq_inflation_bounds(k, t, lo, hi, 0.025, 0.9, 0, &inf, &e), AB_OK);
        assert_rel_close(inf, p9[i], 1e-5);
        for (int j = 0; j < k; j++) {
            hi[j] = cb[i] * sqrt((double)k / (j + 1));
            lo[j] = -hi[j];
        }
        assert_int_equal(seq_inflation_bounds(k, t, lo, hi, 0.025, 0.8, 0, &inf, &e), AB_OK);
        assert_rel_close(inf, o8[i], 1e-5);
        assert_abs_close(inf, o8_methods[i], 1e-4);
        assert_int_equal(seq_inflation_bounds(k, t, lo, hi, 0.025, 0.9, 0, &inf, &e), AB_OK);
        assert_rel_close(inf, o9[i], 1e-5);
        assert_abs_close(inf, o9_methods[i], 1e-4);
    }
}

static void test_seq__futility_beta_spending_rpact(void **state)
{
    (void)state;
    struct err e;
    err_clear(&e);
    /* rpact: d <- getDesignGroupSequential(kMax=3, alpha=0.025, beta=0.2,
     *   sided=1, typeOfDesign="asOF", typeBetaSpending="bsOF",
     *   bindingFutility=FALSE); d$criticalValues, d$futilityBounds,
     *   getDesignCharacteristics(d)$inflationFactor */
    const struct seq_design obf1 = {SEQ_OBF, 0, 0.025, 1, 0};
    double t3[3], fut[4], theta, inf;
    struct seq_look l3[3];
    seq_equal_fractions(3, t3);
    assert_int_equal(seq_bounds(&obf1, 3, t3, l3, &e), AB_OK);
    const double crit3[] = {3.7103028733, 2.5114274845, 1.9930474833};
    for (int i = 0; i < 3; i++)
        assert_abs_close(l3[i].z, crit3[i], Z_TOL);
    int rc = seq_futility(&obf1, 3, l3, SEQ_OBF, 0, 0.2, fut, &theta, &inf, &e);
    if (rc)
        fail_msg("seq_futility: %s", e.msg);
    assert_abs_close(fut[0], -0.2361446099, Z_TOL);
    assert_abs_close(fut[1], 1.1703720312, Z_TOL);
    assert_abs_close(fut[2], l3[2].z, 0);
    assert_rel_close(inf, 1.1043340229, 1e-5);

    /* rpact: as above with kMax=4, beta=0.1, typeOfDesign="asP",
     *   typeBetaSpending="bsP" */
    const struct seq_design poc1 = {SEQ_POCOCK, 0, 0.025, 1, 0};
    double t4[4];
    struct seq_look l4[4];
    seq_equal_fractions(4, t4);
    assert_int_equal(seq_bounds(&poc1, 4, t4, l4, &e), AB_OK);
    rc = seq_futility(&poc1, 4, l4, SEQ_POCOCK, 0, 0.1, fut, &theta, &inf, &e);
    if (rc)
        fail_msg("seq_futility: %s", e.msg);
    const double f4[] = {0.1220628107, 0.9783480843, 1.6600685609};
    for (int i = 0; i < 3; i++)
        assert_abs_close(fut[i], f4[i], Z_TOL);
    assert_rel_close(inf, 1.4099538534, 1e-5);
    /* The efficacy bounds ignore futility: with the futility stops taken,
     * the type I error is below alpha (non-binding). */
    double lo[4], hi[4], up, down;
    for (int i = 0; i < 4; i++) {
        lo[i] = i < 3 ? fut[i] : -INFINITY;
        hi[i] = l4[i].z;
    }
    assert_int_equal(seq_crossing(4, t4, lo, hi, 0, 0, &up, &down, &e), AB_OK);
    assert_true(up < 0.025);
    /* Under θ the total type II error is beta. */
    lo[3] = hi[3];
    assert_int_equal(seq_crossing(4, t4, lo, hi, theta, 0, &up, &down, &e), AB_OK);
    assert_rel_close(up, 0.9, 1e-7);

    /* Two-sided: futility looks at the hoped-for direction and is never
     * below the harm bound. */
    double t5[5];
    struct seq_look l5[5];
    seq_equal_fractions(5, t5);
    assert_int_equal(seq_bounds(&DEF_OBF, 5, t5, l5, &e), AB_OK);
    double f5[5];
    assert_int_equal(seq_futility(&DEF_OBF, 5, l5, SEQ_OBF, 0, 0.2, f5, &theta, &inf, &e), AB_OK);
    for (int i = 0; i < 5; i++)
        assert_true(f5[i] >= -l5[i].z && f5[i] <= l5[i].z);
    assert_true(inf > 1.0247);
    assert_int_equal(seq_futility(&DEF_OBF, 5, l5, SEQ_OBF, 0, 0.99, f5, &theta, &inf, &e),
                     AB_EINPUT);
}

/* ------------------------------------------------------------------------ */
/* mSPRT and the confidence sequence                                         */

static void test_seq__msprt_methods_values(void **state)
{
    (void)state;
    /* §9: α = .05, V = 1e-4, τ² = 7.936e-4. scipy/numpy, the §6b formulas:
     *   L = 0.5*log(V/(V+tau2)) + tau2*d*d/(2*V*(V+tau2))
     *   hw = sqrt(V*(V+tau2)/tau2*(2*log(1/a)+log((V+tau2)/V)))
     * d = .02: L = 0.6811421822, exp(-L) = 0.5060386738, CI [-0.0103520909, 0.0503520909]
     * d = .04: L = 6.0097008214, exp(-L) = 0.002454822501 (§9 rounds it .00246) */
    const double v = 1e-4, tau2 = 7.936e-4;
    double l2 = seq_msprt_log_lr(0.02, v, tau2, 0);
    assert_abs_close(l2, 0.6811, 1e-4);
    assert_rel_close(l2, 0.6811421822, 1e-9);
    double p = seq_msprt_p(1.0, l2);
    assert_rel_close(p, 0.5060386738, 1e-9);
    double hw = seq_msprt_halfwidth(v, tau2, 0.05);
    assert_abs_close(0.02 - hw, -0.01035, 1e-5);
    assert_abs_close(0.02 + hw, 0.05035, 1e-5);
    assert_rel_close(0.02 + hw, 0.0503520909, 1e-9);
    double l4 = seq_msprt_log_lr(0.04, v, tau2, 0);
    assert_abs_close(l4, 6.0097, 1e-4);
    assert_rel_close(seq_msprt_p(p, l4), 0.002454822501, 1e-9);
    /* Shifting the null: the same as shifting the estimate. */
    assert_rel_close(seq_msprt_log_lr(0.05, v, tau2, 0.01), l4, 1e-12);
    /* Rejecting (p ≤ α) and leaving 0 outside the CI are one event. */
    assert_true((seq_msprt_p(1, l4) <= 0.05) == (0.04 - hw > 0));
    assert_true((seq_msprt_p(1, l2) <= 0.05) == (0.02 - hw > 0));
    /* Domain. */
    assert_true(isnan(seq_msprt_log_lr(0.02, 0, tau2, 0)));
    assert_true(isnan(seq_msprt_log_lr(0.02, v, -1, 0)));
    assert_true(isnan(seq_msprt_halfwidth(v, tau2, 1)));
    assert_true(isnan(seq_msprt_p(NAN, 1)));
}

static void test_seq__msprt_p_is_running_minimum(void **state)
{
    (void)state;
    double p = 1.0;
    p = seq_msprt_p(p, -0.3); /* Λ < 1: p stays 1 */
    assert_rel_close(p, 1.0, 0);
    p = seq_msprt_p(p, 2.0);
    assert_rel_close(p, exp(-2.0), 1e-15);
    p = seq_msprt_p(p, 1.0); /* evidence fell: p does not rise */
    assert_rel_close(p, exp(-2.0), 1e-15);
    p = seq_msprt_p(p, 3.5);
    assert_rel_close(p, exp(-3.5), 1e-15);
}

static void test_seq__msprt_tau2_from_plan(void **state)
{
    (void)state;
    /* §6b: u = 2ln(1/α) + ln(1 + 2ln(1/α)) = 7.94 at α = .05. scipy/numpy
     * l = 2*log(20); l + log1p(l) = 7.9361546017. At α = .01:
     * l = 2*log(100); l + log1p(l) = 11.5181... */
    assert_rel_close(seq_msprt_tau2(1e-4, 0.05), 7.9361546017e-4, 1e-9);
    double l = 2 * log(100.0);
    assert_rel_close(seq_msprt_tau2(2.0, 0.01), 2.0 * (l + log1p(l)), 1e-14);
    /* §6b: at the planned variance the half-width is ≈ 3.04 SE. */
    assert_abs_close(seq_msprt_halfwidth(1.0, seq_msprt_tau2(1.0, 0.05), 0.05), 3.04, 0.01);
    /* The exact minimiser u* = 8.2120 (scipy brentq on u - l - log1p(u)) is
     * only slightly narrower than the one-step value. */
    double h_step = seq_msprt_halfwidth(1.0, 7.9361546017, 0.05);
    double h_opt = seq_msprt_halfwidth(1.0, 8.211968062068333, 0.05);
    assert_true(h_opt <= h_step && h_step - h_opt < 1e-3);
    assert_true(isnan(seq_msprt_tau2(0, 0.05)));
    assert_true(isnan(seq_msprt_tau2(1, 0)));
}

static void test_seq__cs_radius_equals_msprt_halfwidth(void **state)
{
    (void)state;
    /* §6c: σ√(2(tρ²+1)/(t²ρ²)·ln(√(tρ²+1)/α)), written out here, equals the
     * mSPRT half-width at V = σ²/t, τ² = ρ²σ². */
    const double alphas[] = {0.05, 0.01, 0.2};
    const double sigmas[] = {1.3, 0.2857, 41.5};
    const double ts[] = {100, 5000, 1234567};
    for (int a = 0; a < 3; a++)
        for (int s = 0; s < 3; s++)
            for (int k = 0; k < 3; k++) {
                double al = alphas[a], sg = sigmas[s], t = ts[k];
                double rho2 = seq_cs_rho2(al, 4000);
                double direct =
                    sg * sqrt(2 * (t * rho2 + 1) / (t * t * rho2) * log(sqrt(t * rho2 + 1) / al));
                double cs = seq_cs_radius(sg, t, rho2, al);
                double ms = seq_msprt_halfwidth(sg * sg / t, rho2 * sg * sg, al);
                assert_rel_close(cs, direct, 1e-12);
                assert_rel_close(cs, ms, 1e-15);
            }
    /* scipy/numpy: rho2 = (-2*log(.05) + log(1-2*log(.05)))/4000 =
     * 0.00198403865043; radius(σ = 1.3, t = 5000) = 0.0558456435966 */
    assert_rel_close(seq_cs_rho2(0.05, 4000), 0.00198403865043, 1e-11);
    assert_rel_close(seq_cs_radius(1.3, 5000, seq_cs_rho2(0.05, 4000), 0.05), 0.0558456435966,
                     1e-11);
    /* ρ² at t* is τ²/σ² of the mSPRT planned at V = σ²/t*. */
    assert_rel_close(seq_cs_rho2(0.05, 4000) * 1.69, seq_msprt_tau2(1.69 / 4000, 0.05), 1e-14);
    assert_true(isnan(seq_cs_radius(0, 10, 0.1, 0.05)));
    assert_true(isnan(seq_cs_rho2(0.05, 0)));
}

/* ------------------------------------------------------------------------ */
/* Sample size                                                               */

static struct seq_size_query query(double sigma2, double mde, double power)
{
    struct seq_size_query q = {
        .sigma2 = sigma2, .mde = mde, .alpha = 0.05, .power = power, .sides = 2, .arms = 2,
        .weight = {0.5, 0.5}, .inflation = 1.0,
    };
    return q;
}

static void test_seq__sample_size_binary(void **state)
{
    (void)state;
    /* §9: p = .05, δ = .0025, power .8 → 119,303 per arm. scipy:
     * (norm.ppf(.975)+norm.ppf(.8))**2*2*.05*.95/.0025**2 = 119302.97196;
     * R power.t.test(delta=0.0025, sd=sqrt(0.0475), power=0.8)$n =
     * 119303.9 (t quantiles, so slightly more). */
    struct seq_size_query q = query(0.05 * 0.95, 0.0025, 0.8);
    struct seq_size s;
    struct err e;
    assert_int_equal(seq_sample_size(&q, &s, &e), AB_OK);
    assert_rel_close(s.n_exact, 2 * 119302.97196210615, 1e-10);
    assert_rel_close(s.n_arm[0], 119303, 0);
    assert_rel_close(s.n_arm[1], 119303, 0);
    assert_rel_close(s.n_total, 238606, 0);
    /* van Belle (2008): n/arm ≈ 16σ²/δ²; §8 gives 15.70σ²/δ² at .8 and
     * 21.01σ²/δ² at .9 (scipy (norm.ppf(.975)+norm.ppf(.9))**2*2 = 21.0148). */
    assert_rel_close(s.n_arm[0], 16 * 0.0475 / (0.0025 * 0.0025), 0.02);
    q = query(1.0, 1.0, 0.9);
    assert_int_equal(seq_sample_size(&q, &s, &e), AB_OK);
    assert_rel_close(s.n_exact / 2, 21.014846122881238, 1e-10);
}

static void test_seq__sample_size_mean_weights_inflation(void **state)
{
    (void)state;
    /* Mean metric, sd 10, δ = 1: scipy (norm.ppf(.975)+norm.ppf(.8))**2*2*100
     * = 1569.7759 → 1570 per arm (R power.t.test(delta=1, sd=10,
     * power=0.8)$n = 1570.7 with t quantiles). */
    struct seq_size_query q = query(100.0, 1.0, 0.8);
    struct seq_size s;
    struct err e;
    assert_int_equal(seq_sample_size(&q, &s, &e), AB_OK);
    assert_rel_close(s.n_arm[0], 1570, 0);
    /* Unequal split 0.2/0.8 (weights needn't sum to 1): N = z²σ²(1/.2 + 1/.8)/δ²,
     * scipy 7.848879734349088*100*6.25 = 4905.549833968181 → 982 and 3925. */
    q.weight[0] = 1;
    q.weight[1] = 4;
    assert_int_equal(seq_sample_size(&q, &s, &e), AB_OK);
    assert_rel_close(s.n_exact, 4905.549833968180, 1e-10);
    assert_rel_close(s.n_arm[0], 982, 0);
    assert_rel_close(s.n_arm[1], 3925, 0);
    assert_rel_close(s.n_total, 4907, 0);
    /* Three arms 0.4/0.3/0.3: each treatment vs control needs
     * z²σ²(1/.3 + 1/.4)/δ² = 4578.5132 in total (scipy). */
    q.arms = 3;
    q.weight[0] = 0.4;
    q.weight[1] = 0.3;
    q.weight[2] = 0.3;
    assert_int_equal(seq_sample_size(&q, &s, &e), AB_OK);
    assert_rel_close(s.n_exact, 4578.513178370301, 1e-10);
    assert_rel_close(s.n_arm[0], 1832, 0);
    assert_rel_close(s.n_arm[2], 1374, 0);
    /* One-sided: scipy (norm.ppf(.95)+norm.ppf(.8))**2*2*100 = 1236.5114 → 1237. */
    q = query(100.0, 1.0, 0.8);
    q.sides = 1;
    assert_int_equal(seq_sample_size(&q, &s, &e), AB_OK);
    assert_rel_close(s.n_arm[0], 1237, 0);
    /* A sequential design multiplies N by its inflation factor (rpact asOF
     * K = 5, power .8: 1.0247198810). */
    q = query(0.05 * 0.95, 0.0025, 0.8);
    q.inflation = 1.0247198810;
    assert_int_equal(seq_sample_size(&q, &s, &e), AB_OK);
    assert_rel_close(s.n_arm[0], ceil(119302.97196210615 * 1.0247198810), 0);
    /* Days: whole days at the daily intake. */
    assert_rel_close(seq_days(238606, 20000), 12, 0);
    assert_rel_close(seq_days(240000, 20000), 12, 0);
    assert_rel_close(seq_days(240001, 20000), 13, 0);
    assert_true(isnan(seq_days(100, 0)));
    /* Errors. */
    q = query(0.0475, 0.0025, 0.8);
    q.weight[1] = 0;
    assert_int_equal(seq_sample_size(&q, &s, &e), AB_EINPUT);
    assert_non_null(strstr(e.msg, "weight"));
    q = query(0.0475, -0.1, 0.8);
    assert_int_equal(seq_sample_size(&q, &s, &e), AB_EINPUT);
    q = query(0.0475, 0.1, 0.01);
    assert_int_equal(seq_sample_size(&q, &s, &e), AB_EINPUT);
    q = query(0.0475, 0.1, 0.8);
    q.arms = 1;
    assert_int_equal(seq_sample_size(&q, &s, &e), AB_EINPUT);
    q = query(0.0475, 0.1, 0.8);
    q.inflation = 0.9;
    assert_int_equal(seq_sample_size(&q, &s, &e), AB_EINPUT);
}

/* ------------------------------------------------------------------------ */
/* Simulations                                                               */

/* Streams: the number of simulated experiments (ten times more under
 * ABTALLY_SIM_HEAVY=1). SE of a rate r over n streams is √(r(1−r)/n). */
static int n_streams(void)
{
    const char *h = getenv("ABTALLY_SIM_HEAVY");
    return h && *h && strcmp(h, "0") ? 20000 : 2000;
}

static double upper_limit(double rate, int n)
{
    return rate + 2 * sqrt(rate * (1 - rate) / n);
}

/* Outcomes of a set of Bernoulli streams monitored at every emission. */
struct bern_result {
    int msprt_reject;  /* streams whose always-valid p reached alpha */
    int cs_miss;       /* streams whose raw CS missed the true effect once */
    int naive_reject;  /* streams with |z| ≥ z_{1−α/2} at some emission */
};

/* Two arms of Bernoulli(p0) and Bernoulli(p1) units, n units per arm,
 * emissions every `every` units per arm once both arms have ≥ 100 units
 * and ≥ 10 events (the burn-in of §6c). The variance is estimated from
 * the data (p̂(1−p̂)/n per arm, as a real run does); τ² comes from the
 * plan, never from the data. */
static struct bern_result sim_bernoulli(unsigned long seed, int streams, int n, int every,
                                        double p0, double p1, double alpha)
{
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    assert_non_null(rng);
    gsl_rng_set(rng, seed);
    double v_plan = (p0 * (1 - p0) + p0 * (1 - p0)) / n;
    double tau2 = seq_msprt_tau2(v_plan, alpha);
    double zfix = gsl_cdf_ugaussian_Qinv(alpha / 2);
    struct bern_result r = {0, 0, 0};
    for (int s = 0; s < streams; s++) {
        long x0 = 0, x1 = 0;
        double p = 1.0;
        bool miss = false, naive = false;
        for (int i = 1; i <= n; i++) {
            x0 += gsl_rng_uniform(rng) < p0;
            x1 += gsl_rng_uniform(rng) < p1;
            if (i % every || i < 100 || x0 < 10 || x1 < 10)
                continue;
            double m0 = (double)x0 / i, m1 = (double)x1 / i;
            double v = m0 * (1 - m0) / i + m1 * (1 - m1) / i;
            if (!(v > 0))
                continue;
            double d = m1 - m0;
            p = seq_msprt_p(p, seq_msprt_log_lr(d, v, tau2, 0));
            if (fabs(d - (p1 - p0)) > seq_msprt_halfwidth(v, tau2, alpha))
                miss = true;
            if (fabs(d) / sqrt(v) >= zfix)
                naive = true;
        }
        r.msprt_reject += p <= alpha;
        r.cs_miss += miss;
        r.naive_reject += naive;
    }
    gsl_rng_free(rng);
    return r;
}

/* Normal(0, 1) control and Normal(delta, 1) treatment units, n per arm at
 * full information, k equal looks against the bounds of design d; the
 * Welch Z uses running sample variances. Returns the streams that crossed. */
static int sim_spending(unsigned long seed, int streams, int n, int k, const struct seq_design *d,
                        double delta)
{
    double t[16];
    struct seq_look looks[16];
    struct err e;
    seq_equal_fractions(k, t);
    assert_int_equal(seq_bounds(d, k, t, looks, &e), AB_OK);
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    assert_non_null(rng);
    gsl_rng_set(rng, seed);
    int crossed = 0;
    for (int s = 0; s < streams; s++) {
        double mean[2] = {0, 0}, m2[2] = {0, 0};
        int look = 0;
        bool hit = false;
        for (int i = 1; i <= n && !hit; i++) {
            for (int a = 0; a < 2; a++) {
                double y = gsl_ran_gaussian_ziggurat(rng, 1.0) + (a ? delta : 0);
                double dl = y - mean[a];
                mean[a] += dl / i;
                m2[a] += dl * (y - mean[a]);
            }
            if (i != (int)lround(n * t[look]))
                continue;
            double v = m2[0] / (i - 1) / i + m2[1] / (i - 1) / i;
            double z = (mean[1] - mean[0]) / sqrt(v);
            if (fabs(z) >= looks[look].z)
                hit = true;
            look++;
        }
        crossed += hit;
    }
    gsl_rng_free(rng);
    return crossed;
}

static void test_seq__sim_aa_mixture_and_sequence_false_positives(void **state)
{
    (void)state;
    /* A/A: Bernoulli(0.1) in both arms, 4000 units per arm, an emission
     * every 100 units per arm (40 emissions). */
    int n = n_streams();
    struct bern_result r = sim_bernoulli(20240611UL, n, 4000, 100, 0.1, 0.1, 0.05);
    double fp = (double)r.msprt_reject / n;
    double miss = (double)r.cs_miss / n;
    print_message("A/A mixture: %d streams, false positives %.4f, CS misses %.4f, "
                  "naive peeking %.4f\n",
                  n, fp, miss, (double)r.naive_reject / n);
    assert_true(fp <= upper_limit(0.05, n));
    assert_true(miss <= upper_limit(0.05, n)); /* CS coverage ≥ 1 − α − 2 SE */
    /* The naive fixed-horizon z at every emission is far above alpha
     * (§6 pitfalls), which shows the simulation can see inflation. */
    assert_true((double)r.naive_reject / n > 0.15);
}

static void test_seq__sim_effect_mixture_stops_and_sequence_covers(void **state)
{
    (void)state;
    /* A real effect: 0.10 → 0.13. The mSPRT rejects in most streams; the
     * CS covers the true effect 0.03 at every emission in ≥ 1 − α − 2 SE. */
    int n = n_streams();
    struct bern_result r = sim_bernoulli(77031UL, n, 4000, 100, 0.10, 0.13, 0.05);
    double stop = (double)r.msprt_reject / n;
    double miss = (double)r.cs_miss / n;
    print_message("effect mixture: %d streams, stopped %.4f, CS misses %.4f\n", n, stop, miss);
    assert_true(stop > 0.5);
    assert_true(1 - miss >= 1 - upper_limit(0.05, n));
}

static void test_seq__sim_spending_false_positives_and_power(void **state)
{
    (void)state;
    /* Normal outcomes, 1000 units per arm at full information, 5 looks.
     * A/A: crossing rate ≤ α + 2 SE for OBF- and Pocock-type designs. */
    int n = n_streams();
    int fp_obf = sim_spending(9001UL, n, 1000, 5, &DEF_OBF, 0.0);
    int fp_poc = sim_spending(9002UL, n, 1000, 5, &DEF_POC, 0.0);
    /* Effect: δ sized for 90% power with the OBF design: N per arm =
     * IF·2(z_.975 + z_.9)²/δ² = 1000 gives δ = 0.14720 (IF = 1.0230783263,
     * rpact above; scipy norm.ppf(.975)+norm.ppf(.9) = 3.2415155500846544). */
    double delta = 3.2415155500846544 * sqrt(2.0 / 1000 * 1.0230783263);
    int tp_obf = sim_spending(9003UL, n, 1000, 5, &DEF_OBF, delta);
    print_message("spending: %d streams, A/A obf %.4f pocock %.4f; power obf %.4f (delta %.4f)\n",
                  n, (double)fp_obf / n, (double)fp_poc / n, (double)tp_obf / n, delta);
    assert_true((double)fp_obf / n <= upper_limit(0.05, n));
    assert_true((double)fp_poc / n <= upper_limit(0.05, n));
    assert_true((double)tp_obf / n > 0.5);
    /* ... and close to the designed 90% (within 3 SE). */
    assert_true(fabs((double)tp_obf / n - 0.9) < 3 * sqrt(0.09 / n));
}

int main(void)
{
    gsl_set_error_handler_off();
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_seq__spend_matches_rpact_alpha_spent),
        cmocka_unit_test(test_seq__shape_names),
        cmocka_unit_test(test_seq__bounds_obf_equal_looks_rpact),
        cmocka_unit_test(test_seq__bounds_pocock_equal_looks_rpact),
        cmocka_unit_test(test_seq__bounds_hsd_equal_looks_rpact),
        cmocka_unit_test(test_seq__bounds_unequal_fractions_rpact),
        cmocka_unit_test(test_seq__bounds_one_sided_rpact),
        cmocka_unit_test(test_seq__bounds_twenty_pocock_looks_rpact),
        cmocka_unit_test(test_seq__bounds_methods_k5),
        cmocka_unit_test(test_seq__bounds_single_function_convention),
        cmocka_unit_test(test_seq__monitor_incremental_unplanned_looks_rpact),
        cmocka_unit_test(test_seq__monitor_frozen_bound_changes_later_looks),
        cmocka_unit_test(test_seq__skip_rule),
        cmocka_unit_test(test_seq__fifty_looks),
        cmocka_unit_test(test_seq__negligible_spend_gives_infinite_bound),
        cmocka_unit_test(test_seq__errors),
        cmocka_unit_test(test_seq__classic_constants),
        cmocka_unit_test(test_seq__crossing_single_look_closed_form),
        cmocka_unit_test(test_seq__inflation_spending_rpact),
        cmocka_unit_test(test_seq__inflation_classic),
        cmocka_unit_test(test_seq__futility_beta_spending_rpact),
        cmocka_unit_test(test_seq__msprt_methods_values),
        cmocka_unit_test(test_seq__msprt_p_is_running_minimum),
        cmocka_unit_test(test_seq__msprt_tau2_from_plan),
        cmocka_unit_test(test_seq__cs_radius_equals_msprt_halfwidth),
        cmocka_unit_test(test_seq__sample_size_binary),
        cmocka_unit_test(test_seq__sample_size_mean_weights_inflation),
        cmocka_unit_test(test_seq__sim_aa_mixture_and_sequence_false_positives),
        cmocka_unit_test(test_seq__sim_effect_mixture_stops_and_sequence_covers),
        cmocka_unit_test(test_seq__sim_spending_false_positives_and_power),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
