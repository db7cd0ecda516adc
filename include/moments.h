/*
 * moments.h — streaming co-moments of up to MOM_MAXV variables per arm.
 *
 * The per-arm sufficient statistics every estimate is computed from: the count
 * n, the means and the centred co-moment sums C[j][k] = Σ (v_j − mean_j)(v_k − mean_k).
 * Updates are Welford's (1962) one-pass recurrences, in both directions (a unit's
 * value can change: remove the old vector, add the new one), and two sets merge
 * exactly with Chan, Golub & LeVeque (1983). Sample (co)variances divide by n − 1.
 *
 * Variable layout by metric type (the contract every module relies on):
 *   mean, binary: v[0] = Y (the unit's value), v[1] = X (its pre-period covariate)
 *   ratio:        v[0] = numerator, v[1] = denominator,
 *                 v[2] = pre-period numerator, v[3] = pre-period denominator
 * The module does no I/O and allocates nothing.
 */
#ifndef ABTALLY_MOMENTS_H
#define ABTALLY_MOMENTS_H

#define MOM_MAXV 4

enum metric_type { MT_MEAN = 0, MT_BINARY = 1, MT_RATIO = 2 };

struct moments {
    double n;                       /* number of units */
    double mean[MOM_MAXV];          /* running means (= ref + rmean; read these) */
    double c[MOM_MAXV][MOM_MAXV];   /* centred co-moment sums (symmetric) */
    double ref[MOM_MAXV];           /* the first vector added: updates run on v − ref, so
                                       values far from 0 (e.g. near 1e9) keep their precision */
    double rmean[MOM_MAXV];         /* running means of v − ref */
};

/* Number of variables a metric type keeps (2 or 4). */
int moments_nvars(enum metric_type t);

/* Zeroes *m. */
void moments_init(struct moments *m);

/* Adds the vector v (nv values) as one more unit. */
void moments_add(struct moments *m, int nv, const double *v);

/* Removes a vector previously added. Removing from n = 1 leaves an empty set. */
void moments_remove(struct moments *m, int nv, const double *v);

/* a ← a ∪ b (Chan, Golub & LeVeque 1983). */
void moments_merge(struct moments *a, int nv, const struct moments *b);

/* Sample covariance of variables j and k (n − 1 divisor); NaN when n < 2. */
double moments_cov(const struct moments *m, int j, int k);

/* Sample variance of variable j; NaN when n < 2. */
double moments_var(const struct moments *m, int j);

#endif
