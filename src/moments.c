/*
 * moments.c — streaming co-moments (see moments.h).
 *
 * Updates run on v − ref, ref being the first vector added, so the running
 * means stay small and values near 1e9 lose no precision to them.
 * Adding x to a set of n − 1 units with means m gives
 *   C_n = C_{n−1} + (n−1)/n · (x − m_{n−1})(y − m_{n−1})     (Welford 1962)
 * and removal runs the same identity backwards, with
 *   m_{n−1} = (n·m_n − x)/(n − 1).
 * Both forms only subtract numbers of similar size, so values near 1e9 keep
 * their precision (tests/test_moments.c checks against two-pass sums).
 */
#include "moments.h"

#include <math.h>
#include <string.h>

int moments_nvars(enum metric_type t)
{
    return t == MT_RATIO ? 4 : 2;
}

void moments_init(struct moments *m)
{
    memset(m, 0, sizeof *m);
}

void moments_add(struct moments *m, int nv, const double *v)
{
    if (m->n == 0) {
        moments_init(m);
        for (int j = 0; j < nv; j++)
            m->ref[j] = m->mean[j] = v[j];
        m->n = 1;
        return;
    }
    double n1 = m->n + 1.0;
    double d[MOM_MAXV];
    for (int j = 0; j < nv; j++)
        d[j] = (v[j] - m->ref[j]) - m->rmean[j];
    double f = m->n / n1;
    for (int j = 0; j < nv; j++)
        for (int k = j; k < nv; k++) {
            m->c[j][k] += f * d[j] * d[k];
            m->c[k][j] = m->c[j][k];
        }
    for (int j = 0; j < nv; j++) {
        m->rmean[j] += d[j] / n1;
        m->mean[j] = m->ref[j] + m->rmean[j];
    }
    m->n = n1;
}

void moments_remove(struct moments *m, int nv, const double *v)
{
    if (m->n <= 1.0) {
        moments_init(m);
        return;
    }
    double n0 = m->n - 1.0;
    double old[MOM_MAXV], d[MOM_MAXV];
    for (int j = 0; j < nv; j++) {
        double x = v[j] - m->ref[j];
        old[j] = m->rmean[j] - (x - m->rmean[j]) / n0;
        d[j] = x - old[j];
    }
    double f = n0 / m->n;
    for (int j = 0; j < nv; j++)
        for (int k = j; k < nv; k++) {
            double c = m->c[j][k] - f * d[j] * d[k];
            if (j == k && c < 0)
                c = 0; /* rounding can leave −ε on a variance */
            m->c[j][k] = m->c[k][j] = c;
        }
    for (int j = 0; j < nv; j++) {
        m->rmean[j] = old[j];
        m->mean[j] = m->ref[j] + old[j];
    }
    m->n = n0;
}

void moments_merge(struct moments *a, int nv, const struct moments *b)
{
    if (b->n == 0)
        return;
    if (a->n == 0) {
        *a = *b;
        return;
    }
    double n = a->n + b->n;
    double d[MOM_MAXV];
    for (int j = 0; j < nv; j++)
        d[j] = ((b->ref[j] - a->ref[j]) + b->rmean[j]) - a->rmean[j];
    double f = a->n * b->n / n;
    for (int j = 0; j < nv; j++)
        for (int k = j; k < nv; k++) {
            a->c[j][k] += b->c[j][k] + d[j] * d[k] * f;
            a->c[k][j] = a->c[j][k];
        }
    for (int j = 0; j < nv; j++) {
        a->rmean[j] += d[j] * b->n / n;
        a->mean[j] = a->ref[j] + a->rmean[j];
    }
    a->n = n;
}

double moments_cov(const struct moments *m, int j, int k)
{
    if (m->n < 2)
        return NAN;
    return m->c[j][k] / (m->n - 1.0);
}

double moments_var(const struct moments *m, int j)
{
    return moments_cov(m, j, j);
}
