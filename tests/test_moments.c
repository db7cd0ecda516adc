/*
 * test_moments.c — streaming co-moments (moments.h) against two-pass sums.
 *
 * The reference is the corrected two-pass algorithm (Chan, Golub & LeVeque
 * 1983: Σ d_j d_k − (Σ d_j)(Σ d_k)/n with d = x − mean) carried out
 * in long double over the very same double inputs; it shares no code with
 * the one-pass updates under test. Inputs are high-entropy draws (splitmix64
 * and Box–Muller), including values near 1e9 with small noise, where a naive
 * one-pass sum of squares would lose every digit. Small fixed cases come
 * from Python's statistics module (exact rational arithmetic for mean and variance, fsum for covariance) and from NIST
 * StRD's NumAcc data, whose certified values are re-derived by hand below.
 *
 * Tolerances are relative; the near-1e9 data is held to 1e-9 as asked of
 * the module ("values near 1e9 keep their precision", moments.c).
 */
#include <float.h>
#include <stdbool.h>
#include <stdlib.h>
#include <string.h>

#include "helpers.h"
#include "moments.h"

/* ------------------------------------------------------- random inputs */

struct rng {
    uint64_t s;
};

/* splitmix64 (Steele, Lea & Flood 2014) */
static uint64_t rng_u64(struct rng *r)
{
    uint64_t z = (r->s += UINT64_C(0x9e3779b97f4a7c15));
    z = (z ^ (z >> 30)) * UINT64_C(0xbf58476d1ce4e5b9);
    z = (z ^ (z >> 27)) * UINT64_C(0x94d049bb133111eb);
    return z ^ (z >> 31);
}

/* uniform on (0, 1) */
static double rng_unit(struct rng *r)
{
    return ((double)(rng_u64(r) >> 11) + 0.5) / 9007199254740992.0;
}

/* standard normal (Box–Muller; one of the pair is enough here) */
static double rng_normal(struct rng *r)
{
    double u = rng_unit(r), v = rng_unit(r);
    return sqrt(-2.0 * log(u)) * cos(6.283185307179586 * v);
}

/* A kind of data set: four correlated variables with their own centre and spread. */
struct dataset {
    const char *name;
    double centre[MOM_MAXV];
    double spread[MOM_MAXV];
    int shape;         /* 0 normal, 1 binary/count (v0 0/1, v1 small counts), 2 log-normal */
    double tol;        /* relative tolerance for (co)variances against two-pass */
    double tol_merge;  /* relative tolerance for merged vs added-in-one-go */
};

static const struct dataset datasets[] = {
    {"moderate", {2.385, -7.1, 0.3017, 55.5}, {1.7, 0.9, 0.05, 12.25}, 0, 1e-12, 1e-12},
    {"near 1e9", {1e9, 1e9 + 3.0, -1e9, 2.5e9}, {1.0, 0.25, 3.0, 7.5}, 0, 1e-9, 1e-9},
    {"tiny", {3.1e-9, -2.2e-9, 7.7e-12, 1e-6}, {1.3e-10, 4.1e-10, 2.9e-12, 3.3e-8}, 0, 1e-12, 1e-12},
    {"binary and counts", {0.137, 2.6, 1.0, 0.0}, {0, 0, 0, 0}, 1, 1e-12, 1e-12},
    {"log-normal", {1.25, 0.0, 3.0, -1.0}, {1.5, 0.75, 2.0, 0.3}, 2, 1e-12, 1e-12},
};
#define N_DATASETS (sizeof datasets / sizeof datasets[0])

/* Draws one unit's vector. Variables are correlated through a shared normal. */
static void draw(struct rng *r, const struct dataset *d, double *v)
{
    double z0 = rng_normal(r);
    switch (d->shape) {
    case 1:
        v[0] = rng_unit(r) < d->centre[0] ? 1.0 : 0.0;
        v[1] = floor(d->centre[1] * rng_unit(r) * 4.0 + v[0] * 2.0); /* 0..12ish */
        v[2] = v[0] * (1.0 + floor(rng_unit(r) * 3.0));
        v[3] = floor(rng_unit(r) * 50.0);
        break;
    case 2:
        for (int j = 0; j < MOM_MAXV; j++)
            v[j] = exp(d->centre[j] + d->spread[j] * (0.7 * z0 + 0.71 * rng_normal(r)));
        break;
    default:
        for (int j = 0; j < MOM_MAXV; j++)
            v[j] = d->centre[j] + d->spread[j] * (0.6 * z0 + 0.8 * rng_normal(r));
    }
}

/* ---------------------------------------------------- two-pass reference */

struct ref {
    long double n;
    long double mean[MOM_MAXV];
    long double c[MOM_MAXV][MOM_MAXV];
};

/* Corrected two-pass over the rows of x (n rows of MOM_MAXV) that keep[i] selects (NULL: all). */
static void two_pass(const double (*x)[MOM_MAXV], size_t n, const bool *keep, int nv, struct ref *r)
{
    memset(r, 0, sizeof *r);
    long double sum[MOM_MAXV] = {0};
    for (size_t i = 0; i < n; i++) {
        if (keep && !keep[i])
            continue;
        r->n += 1;
        for (int j = 0; j < nv; j++)
            sum[j] += x[i][j];
    }
    for (int j = 0; j < nv; j++)
        r->mean[j] = sum[j] / r->n;
    long double sd[MOM_MAXV] = {0}, sdd[MOM_MAXV][MOM_MAXV];
    memset(sdd, 0, sizeof sdd);
    for (size_t i = 0; i < n; i++) {
        if (keep && !keep[i])
            continue;
        long double d[MOM_MAXV];
        for (int j = 0; j < nv; j++) {
            d[j] = (long double)x[i][j] - r->mean[j];
            sd[j] += d[j];
        }
        for (int j = 0; j < nv; j++)
            for (int k = 0; k < nv; k++)
                sdd[j][k] += d[j] * d[k];
    }
    for (int j = 0; j < nv; j++)
        for (int k = 0; k < nv; k++)
            r->c[j][k] = sdd[j][k] - sd[j] * sd[k] / r->n;
}

/* Compares m with the reference: n exactly; means and co-moments to tol, relative.
 * Prints each mismatch and returns their number (the caller frees, then fails). */
static int check_against(const char *what, const struct moments *m, const struct ref *r, int nv, double tol)
{
    int bad = 0;
    if (m->n != (double)r->n) {
        print_error("%s: n = %.17g, expected %.17Lg\n", what, m->n, r->n);
        return 1;
    }
    for (int j = 0; j < nv; j++) {
        /* a mean is compared at the scale of its spread too, since a mean near 0 has no relative scale */
        double scale = fabs((double)r->mean[j]) + sqrt(fabs((double)(r->c[j][j] / r->n)));
        if (!(fabs(m->mean[j] - (double)r->mean[j]) <= tol * scale)) {
            print_error("%s: mean[%d] = %.17g, expected %.17Lg\n", what, j, m->mean[j], r->mean[j]);
            bad++;
        }
    }
    for (int j = 0; j < nv; j++)
        for (int k = 0; k < nv; k++) {
            double want = (double)(r->c[j][k] / (r->n - 1));
            double got = moments_cov(m, j, k);
            /* a covariance is held relative to sqrt(var_j var_k), which it can be far below */
            double scale = sqrt((double)(r->c[j][j] / (r->n - 1)) * (double)(r->c[k][k] / (r->n - 1)));
            if (!(fabs(got - want) <= tol * scale)) {
                print_error("%s: cov(%d,%d) = %.17g, expected %.17g (rel err %.3g, tol %g)\n", what, j, k, got, want,
                            fabs(got - want) / scale, tol);
                bad++;
            }
            if (getenv("ABTALLY_TEST_VERBOSE") && j <= k)
                print_message("%-40s cov(%d,%d) rel err %.3g\n", what, j, k, fabs(got - want) / scale);
        }
    return bad;
}

/* Fills x with n draws from d. */
static double (*sample(const struct dataset *d, size_t n, uint64_t seed))[MOM_MAXV]
{
    double(*x)[MOM_MAXV] = malloc(n * sizeof *x);
    assert_non_null(x);
    struct rng r = {seed};
    for (size_t i = 0; i < n; i++)
        draw(&r, d, x[i]);
    return x;
}

/* ------------------------------------------------------------------ tests */

static void test_moments__nvars(void **state)
{
    (void)state;
    /* moments.h: mean and binary keep Y and X; ratio keeps four */
    assert_int_equal(moments_nvars(MT_MEAN), 2);
    assert_int_equal(moments_nvars(MT_BINARY), 2);
    assert_int_equal(moments_nvars(MT_RATIO), 4);
}

static void test_moments__n_below_2_is_nan(void **state)
{
    (void)state;
    struct moments m;
    moments_init(&m);
    assert_true(m.n == 0);
    assert_true(isnan(moments_var(&m, 0)));
    assert_true(isnan(moments_cov(&m, 0, 1)));
    const double v[MOM_MAXV] = {2.385, -7.125, 1e9 + 0.5, 3.0e-9};
    moments_add(&m, 4, v);
    assert_true(m.n == 1);
    for (int j = 0; j < 4; j++) {
        assert_true(m.mean[j] == v[j]); /* one value is its own mean, exactly */
        assert_true(isnan(moments_var(&m, j)));
    }
    assert_true(isnan(moments_cov(&m, 0, 3)));
    /* two values a, b: variance (a − b)²/2, covariance (a0 − b0)(a1 − b1)/2, worked by hand */
    const double w[MOM_MAXV] = {4.25, -6.5, 1e9 + 2.5, 5.0e-9};
    moments_add(&m, 4, w);
    assert_rel_close(moments_var(&m, 0), (4.25 - 2.385) * (4.25 - 2.385) / 2, 1e-15);
    assert_rel_close(moments_var(&m, 2), 2.0, 1e-15); /* (2.5 − 0.5)²/2, exact in doubles */
    assert_rel_close(moments_cov(&m, 0, 1), (4.25 - 2.385) * (-6.5 + 7.125) / 2, 1e-15);
    assert_rel_close(m.mean[1], -6.8125, 0);
}

/* Python: statistics.mean / statistics.variance (exact over the float values) and
 * statistics.covariance (fsum-based) on 12 pairs drawn with random.seed(2385). */
static void test_moments__python_statistics(void **state)
{
    (void)state;
    static const double xs[12] = {1.659964, -0.643575, 0.5735,   1.939862, 2.352335, 4.468425,
                                  1.079654, 4.130971,  2.007269, 3.344133, 1.337107, 2.278718};
    static const double ys[12] = {-6.567048, -8.995715, -8.299263, -4.974808, -5.17102,  -3.844628,
                                  -6.629515, -4.739748, -6.239638, -5.540254, -7.808743, -5.605649};
    /* python3 -c "import statistics as s; xs=[...]; ys=[...]; print(repr(s.mean(xs)), repr(s.variance(xs)), repr(s.mean(ys)), repr(s.variance(ys)), repr(s.covariance(xs,ys)))"
       → 2.04403025 2.0953237676740226 -6.20133575 2.3782059099225683 2.021759687284477 */
    struct moments m;
    moments_init(&m);
    for (int i = 0; i < 12; i++)
        moments_add(&m, 2, (const double[]){xs[i], ys[i]});
    assert_rel_close(m.mean[0], 2.04403025, 4 * DBL_EPSILON);
    assert_rel_close(m.mean[1], -6.20133575, 4 * DBL_EPSILON);
    assert_rel_close(moments_var(&m, 0), 2.0953237676740226, 16 * DBL_EPSILON);
    assert_rel_close(moments_var(&m, 1), 2.3782059099225683, 16 * DBL_EPSILON);
    assert_rel_close(moments_cov(&m, 0, 1), 2.021759687284477, 1e-13);
    assert_rel_close(moments_cov(&m, 1, 0), 2.021759687284477, 1e-13);
}

/*
 * NIST StRD univariate summary statistics, NumAcc1 and NumAcc4 (the data and
 * certified values quoted from memory; both re-derived by hand here):
 *   NumAcc1: 10000001, 10000003, 10000002. Mean 10000002; deviations −1, 1, 0;
 *            variance 2/2 = 1 (certified sd 1). All exact in doubles.
 *   NumAcc4: 10000000.2, then 500 pairs 10000000.1, 10000000.3 (1001 values).
 *            Mean 10000000.2; 1000 deviations of ±0.1 and one of 0; variance
 *            1000·0.01/1000 = 0.01 (certified sd 0.1). The decimal data are
 *            not exact in doubles (spacing 1.9e-9 near 1e7), so agreement is
 *            to about 1e-7 relative on the variance.
 */
static void test_moments__nist_numacc(void **state)
{
    (void)state;
    struct moments m;
    moments_init(&m);
    static const double a1[3] = {10000001.0, 10000003.0, 10000002.0};
    for (int i = 0; i < 3; i++)
        moments_add(&m, 2, (const double[]){a1[i], -a1[i]});
    assert_rel_close(m.mean[0], 10000002.0, 0);
    assert_rel_close(moments_var(&m, 0), 1.0, 0);
    assert_rel_close(moments_cov(&m, 0, 1), -1.0, 0);

    moments_init(&m);
    moments_add(&m, 2, (const double[]){10000000.2, 0});
    for (int i = 0; i < 500; i++) {
        moments_add(&m, 2, (const double[]){10000000.1, 0});
        moments_add(&m, 2, (const double[]){10000000.3, 0});
    }
    assert_rel_close(m.n, 1001, 0);
    assert_rel_close(m.mean[0], 10000000.2, 1e-15);
    assert_rel_close(moments_var(&m, 0), 0.01, 1e-7);
    assert_rel_close(moments_var(&m, 1), 0.0, 0);
}

/* One-pass adds agree with two-pass sums, for every data set. */
static void test_moments__add_matches_two_pass(void **state)
{
    (void)state;
    int bad = 0;
    for (size_t s = 0; s < N_DATASETS; s++) {
        const struct dataset *d = &datasets[s];
        size_t n = 20000;
        double(*x)[MOM_MAXV] = sample(d, n, 0xa11ce + s);
        struct moments m;
        moments_init(&m);
        for (size_t i = 0; i < n; i++)
            moments_add(&m, 4, x[i]);
        struct ref r;
        two_pass((const double(*)[MOM_MAXV])x, n, NULL, 4, &r);
        char what[96];
        snprintf(what, sizeof what, "add, %s", d->name);
        bad += check_against(what, &m, &r, 4, d->tol);
        /* the two-variable layout gives the same numbers for its variables */
        struct moments m2;
        moments_init(&m2);
        for (size_t i = 0; i < n; i++)
            moments_add(&m2, 2, x[i]);
        snprintf(what, sizeof what, "add nv=2, %s", d->name);
        bad += check_against(what, &m2, &r, 2, d->tol);
        free(x);
    }
    if (bad)
        fail_msg("%d mismatches against the two-pass reference", bad);
}

/* Removing most of many added vectors leaves the statistics of the rest. */
static void test_moments__remove_after_many_adds(void **state)
{
    (void)state;
    int bad = 0;
    for (size_t s = 0; s < N_DATASETS; s++) {
        const struct dataset *d = &datasets[s];
        size_t n = 10000;
        double(*x)[MOM_MAXV] = sample(d, n, 0xbeef + s);
        bool *keep = malloc(n * sizeof *keep);
        assert_non_null(keep);
        struct moments m;
        moments_init(&m);
        for (size_t i = 0; i < n; i++) {
            moments_add(&m, 4, x[i]);
            keep[i] = true;
        }
        /* remove 8000 in a scrambled order (a stride coprime to n) */
        struct rng r = {0x5eed + s};
        size_t start = (size_t)(rng_u64(&r) % n), stride = 7919;
        for (size_t k = 0; k < 8000; k++) {
            size_t i = (start + k * stride) % n;
            moments_remove(&m, 4, x[i]);
            keep[i] = false;
        }
        struct ref ref;
        two_pass((const double(*)[MOM_MAXV])x, n, keep, 4, &ref);
        char what[96];
        snprintf(what, sizeof what, "remove 8000 of 10000, %s", d->name);
        bad += check_against(what, &m, &ref, 4, d->tol);
        free(keep);
        free(x);
    }
    if (bad)
        fail_msg("%d mismatches against the two-pass reference", bad);
}

/* A unit's value changes many times (remove the old vector, add the new one). */
static void test_moments__update_in_place(void **state)
{
    (void)state;
    int bad = 0;
    for (size_t s = 0; s < N_DATASETS; s++) {
        const struct dataset *d = &datasets[s];
        size_t n = 3000;
        double(*x)[MOM_MAXV] = sample(d, n, 0xc0ffee + s);
        struct moments m;
        moments_init(&m);
        for (size_t i = 0; i < n; i++)
            moments_add(&m, 4, x[i]);
        struct rng r = {0xfeed + s};
        for (int k = 0; k < 20000; k++) {
            size_t i = (size_t)(rng_u64(&r) % n);
            moments_remove(&m, 4, x[i]);
            draw(&r, d, x[i]);
            moments_add(&m, 4, x[i]);
        }
        struct ref ref;
        two_pass((const double(*)[MOM_MAXV])x, n, NULL, 4, &ref);
        char what[96];
        snprintf(what, sizeof what, "20000 updates, %s", d->name);
        bad += check_against(what, &m, &ref, 4, d->tol);
        free(x);
    }
    if (bad)
        fail_msg("%d mismatches against the two-pass reference", bad);
}

/* Removing down to one vector leaves that vector as the mean; removing it empties the set. */
static void test_moments__remove_to_empty(void **state)
{
    (void)state;
    double x[50][MOM_MAXV];
    struct rng g = {0x7};
    for (int i = 0; i < 50; i++)
        draw(&g, &datasets[0], x[i]);
    struct moments m;
    moments_init(&m);
    for (int i = 0; i < 50; i++)
        moments_add(&m, 4, x[i]);
    for (int i = 49; i >= 1; i--)
        moments_remove(&m, 4, x[i]);
    assert_rel_close(m.n, 1, 0);
    for (int j = 0; j < 4; j++)
        assert_rel_close(m.mean[j], x[0][j], 1e-12);
    assert_true(isnan(moments_var(&m, 0)));
    moments_remove(&m, 4, x[0]);
    assert_rel_close(m.n, 0, 0);
    assert_true(isnan(moments_var(&m, 0)));
    /* an emptied set starts afresh */
    moments_add(&m, 4, x[7]);
    moments_add(&m, 4, x[9]);
    struct ref r;
    bool keep[50] = {false};
    keep[7] = keep[9] = true;
    two_pass((const double(*)[MOM_MAXV])x, 50, keep, 4, &r);
    assert_int_equal(check_against("refilled after emptying", &m, &r, 4, 1e-12), 0);
}

/* The union of two halves (and of uneven and many parts) equals the whole. */
static void test_moments__merge_equals_whole(void **state)
{
    (void)state;
    int bad = 0;
    for (size_t s = 0; s < N_DATASETS; s++) {
        const struct dataset *d = &datasets[s];
        size_t n = 10001;
        double(*x)[MOM_MAXV] = sample(d, n, 0xd00d + s);
        struct moments whole;
        moments_init(&whole);
        for (size_t i = 0; i < n; i++)
            moments_add(&whole, 4, x[i]);
        struct ref r;
        two_pass((const double(*)[MOM_MAXV])x, n, NULL, 4, &r);

        static const size_t cuts[] = {5000, 1, 10000, 0, 10001, 3333};
        for (size_t c = 0; c < sizeof cuts / sizeof cuts[0]; c++) {
            struct moments a, b;
            moments_init(&a);
            moments_init(&b);
            for (size_t i = 0; i < n; i++)
                moments_add(i < cuts[c] ? &a : &b, 4, x[i]);
            struct moments ab = a, ba = b;
            moments_merge(&ab, 4, &b);
            moments_merge(&ba, 4, &a);
            char what[96];
            snprintf(what, sizeof what, "merge at %zu, %s", cuts[c], d->name);
            bad += check_against(what, &ab, &r, 4, d->tol);
            snprintf(what, sizeof what, "merge at %zu reversed, %s", cuts[c], d->name);
            bad += check_against(what, &ba, &r, 4, d->tol);
            /* merged equals added in one go */
            for (int j = 0; j < 4; j++)
                for (int k = 0; k < 4; k++) {
                    double scale = sqrt(moments_var(&whole, j) * moments_var(&whole, k));
                    if (!(fabs(moments_cov(&ab, j, k) - moments_cov(&whole, j, k)) <= d->tol_merge * scale)) {
                        print_error("%s: merged cov(%d,%d) %.17g, whole %.17g\n", what, j, k, moments_cov(&ab, j, k),
                                    moments_cov(&whole, j, k));
                        bad++;
                    }
                }
        }

        /* seven shards, units dealt round-robin as partitions would hold them */
        struct moments shard[7], all;
        for (int k = 0; k < 7; k++)
            moments_init(&shard[k]);
        for (size_t i = 0; i < n; i++)
            moments_add(&shard[i % 7], 4, x[i]);
        moments_init(&all);
        for (int k = 0; k < 7; k++)
            moments_merge(&all, 4, &shard[k]);
        char what[96];
        snprintf(what, sizeof what, "seven shards, %s", d->name);
        bad += check_against(what, &all, &r, 4, d->tol);
        free(x);
    }
    if (bad)
        fail_msg("%d mismatches against the two-pass reference", bad);
}

/* Merging with an empty set changes nothing; into an empty set copies. */
static void test_moments__merge_empty(void **state)
{
    (void)state;
    double x[40][MOM_MAXV];
    struct rng g = {0x99};
    for (int i = 0; i < 40; i++)
        draw(&g, &datasets[4], x[i]);
    struct moments a, empty, e2;
    moments_init(&a);
    moments_init(&empty);
    moments_init(&e2);
    for (int i = 0; i < 40; i++)
        moments_add(&a, 4, x[i]);
    struct moments before = a;
    moments_merge(&a, 4, &empty);
    assert_memory_equal(&a, &before, sizeof a);
    moments_merge(&empty, 4, &a);
    assert_memory_equal(&empty, &a, sizeof a);
    moments_merge(&e2, 4, &(struct moments){0});
    assert_rel_close(e2.n, 0, 0);
}

int main(void)
{
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_moments__nvars),
        cmocka_unit_test(test_moments__n_below_2_is_nan),
        cmocka_unit_test(test_moments__python_statistics),
        cmocka_unit_test(test_moments__nist_numacc),
        cmocka_unit_test(test_moments__add_matches_two_pass),
        cmocka_unit_test(test_moments__remove_after_many_adds),
        cmocka_unit_test(test_moments__update_in_place),
        cmocka_unit_test(test_moments__remove_to_empty),
        cmocka_unit_test(test_moments__merge_equals_whole),
        cmocka_unit_test(test_moments__merge_empty),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
