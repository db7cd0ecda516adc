/*
 * helpers.h — shared test helpers for the cmocka suites.
 *
 * cmocka 1.1.5 compares floating point only as float, so assert_rel_close
 * compares doubles with a relative tolerance (modelled on gsl_test_rel):
 * |actual − expected| ≤ tol·|expected|, or ≤ tol when expected is 0.
 * NaN equals NaN (a value that is undefined must stay undefined).
 */
#ifndef ABTALLY_TEST_HELPERS_H
#define ABTALLY_TEST_HELPERS_H

#include <math.h>
#include <setjmp.h>
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <stdio.h>
#include <cmocka.h>

static inline int rel_close_(double a, double e, double tol)
{
    if (isnan(e))
        return isnan(a);
    if (isinf(e))
        return a == e;
    double d = fabs(a - e);
    return e == 0 ? d <= tol : d <= tol * fabs(e);
}

#define assert_rel_close(actual, expected, tol)                                          \
    do {                                                                                 \
        double a_ = (actual), e_ = (expected);                                           \
        if (!rel_close_(a_, e_, (tol)))                                                  \
            fail_msg("%s = %.17g, expected %.17g (rel tol %g)", #actual, a_, e_, (double)(tol)); \
    } while (0)

#define assert_abs_close(actual, expected, tol)                                          \
    do {                                                                                 \
        double a_ = (actual), e_ = (expected);                                           \
        if (!(fabs(a_ - e_) <= (tol)))                                                   \
            fail_msg("%s = %.17g, expected %.17g (abs tol %g)", #actual, a_, e_, (double)(tol)); \
    } while (0)

#endif
