#!/usr/bin/env python3
"""estimates_ref.py -- an independent reference for abtally's estimates and SRM tests.

It takes the per-unit values of tests/reference/join_ref.py (the independent
reference of the join) and computes, from those values alone, the estimate
fields of abtally's final record as METHODS.md (sections 2-5 and 7) and
DESIGN.md define them:

  metrics[]   diff, ci, p, test, df, lift, lift_ci, cuped_diff, cuped_ci,
              var_reduction, p_harm, harm (guardrails), p_adjusted
  srm         chi2, df, p, test, alarm (chi-square test), by_day, by_segment,
              and the Lindon & Malek (2022) log Bayes factor (reference_only)
  integrity   balance_smd; hash_checked / hash_mismatch when the config has
              a "hash" section (the expected arm computed with hashlib)

What makes it independent of abtally (src/stats.c, src/readout.c,
src/moments.c, src/rebucket.c):
  * Python standard library only; no code, no data structure shared with
    abtally; the unit values come from join_ref.py, itself independent;
  * per-arm means, variances and covariances are two-pass over the per-unit
    values (math.fsum of the values, then of the products of deviations),
    never Welford updates or co-moment merges;
  * distributions: the normal quantile from statistics.NormalDist (Wichura's
    AS 241), normal upper tails from math.erfc (Q(x) = erfc(x/sqrt 2)/2; an
    upper tail is never computed as 1 - P, METHODS.md); chi-square upper tails
    from the closed forms for integer degrees of freedom (Abramowitz & Stegun
    26.4.4-26.4.5); Student's t from the regularized incomplete beta function
    by its continued fraction, evaluated with the modified Lentz method as in
    Numerical Recipes (Press et al., 3rd ed., 2007, sec. 6.4, "betacf");
    t quantiles by bisection of that tail; binomial and hypergeometric
    probabilities from exact integers (math.comb, fractions.Fraction).
  * the t distribution was cross-checked once, at development time, against
    SciPy 1.10.1 (Debian python3-scipy, /usr/bin/python3); SciPy is not used at
    test time. SciPy call -> SciPy 1.10.1 value (this file agrees to the
    relative difference given):
      scipy.stats.t.sf(2.0, 60.08337359145548)     -> 0.025013355077153698   1.0e-14
      scipy.stats.t.sf(0.5, 3.5)                   -> 0.3234252196612755     3.4e-16
      scipy.stats.t.sf(7.0, 12.25)                 -> 6.425408630674507e-06  2.5e-15
      scipy.stats.t.cdf(-1.3, 56.602381046508434)  -> 0.09943503010763667    4.0e-14
      scipy.stats.t.isf(0.025, 60.08337359145548)  -> 2.0002407328386305     4.7e-10
      scipy.stats.t.isf(0.025, 98.99494979393694)  -> 1.9842182037319038     3.9e-11
      scipy.stats.t.isf(0.025, 2.5)                -> 3.574654842011878      2.3e-12
      scipy.stats.t.isf(0.0005, 30.0)              -> 3.6459586349971094     1.2e-11
      scipy.stats.chi2.sf(6.0, 2) -> 0.04978706836786395; chi2.sf(7.5, 3) ->
      0.0575584519726364; chi2.sf(40.0, 1) -> 2.5396285894708634e-10;
      chi2.sf(11.0, 5) -> 0.05137998348306955 (all within 1.5e-15 relative)
    The quantiles differ more than the tails because SciPy's own t.isf is the
    less exact one at non-integer df: scipy.stats.t.sf(scipy.stats.t.isf(0.025,
    60.08337359145548), 60.08337359145548) is 0.025 * (1 + 2.1e-9), while
    scipy.stats.t.sf at this file's quantile is 0.025 * (1 + 9e-15).
    (`estimates_ref.py selftest` recomputes these: tails to 1e-12, quantiles
    to 1e-9 relative.)

Where METHODS.md / DESIGN.md leave a choice open, the reference follows what
abtally documents in include/stats.h and include/readout.h, and says so:
  * binary metrics: variances p(1-p)/n (divisor n, METHODS.md sec. 1), also
    for the covariate and the covariance inside CUPED; z quantiles only (the
    Welch-t rule of DESIGN.md is applied to mean and ratio metrics); pooled
    two-proportion z test, p = 1 when the pooled rate is 0 or 1, Fisher's exact
    test (two-sided: tables no more likely than the observed one, with a 1e-7
    relative tie tolerance) when an expected cell is below 5, and the
    Agresti & Caffo (2000) interval when an arm has 0 or n successes
    (METHODS.md sec. 2);
  * Welch t (df by Welch-Satterthwaite) when min(n_treatment, n_control) < 100,
    also for the CUPED interval, whose df is that of the adjusted variances;
  * ratio metrics: Var(R) by the delta method (Deng, Knoblich & Lu 2018) from
    the two-pass unit-level variances and covariance of X and D; CUPED on the
    linearized values Y'_i = (X_i - R D_i)/mean(D) and covariate
    X'_i = (P_i - Rpre Q_i)/mean(Q) (pre-period numerator P and denominator
    Q), each arm with its own R and means; the covariate's arm mean is the
    arm's pre-period ratio Rpre (METHODS.md sec. 3, "[ours]");
  * balance_smd: (mean_t - mean_c)/sqrt((s_t^2 + s_c^2)/2), n - 1 variances,
    of the covariate (ratio metrics: of the pre-period numerator), the arm
    with the largest |SMD| when there are several treatment arms;
  * p_adjusted: Holm over the primary metrics' p, Holm over the guardrails'
    one-sided p_harm, Benjamini-Hochberg over the secondary metrics' p, every
    (metric, arm) pair counting in m, undefined p included (METHODS.md sec. 7);
  * SRM: chi-square against the config weights; with an expected count below 5
    the exact binomial test for two arms and no p ("insufficient") for more
    (METHODS.md sec. 4); by day: units by UTC day of their exposure; by
    segment: units by each key=value of the attrs of their exposure (earliest
    in-window) assignment; Holm across the days, across the segments. Only
    units that count (not multi-arm units) make days and segments.
  * the sequential SRM's always-valid p is a running minimum over records; the
    reference gives logBF of the final counts (reference_only.srm_logbf), so
    a test can require p_seq <= exp(-logBF_final), and, for a record stream,
    recompute every record's logBF from the record's own unit counts.

How it gets join_ref.py's per-unit values: join_ref.run() keeps them in local
variables (unit_arm, unit_vals) and prints only aggregates; this module
calls join_ref.run() and reads those locals when it returns (sys.setprofile),
and wraps join_ref.decode so that accepted assignments keep their "attrs".
Neither changes what join_ref.run() computes.

Usage:
  estimates_ref.py --config EXP.json [--lateness-minutes 60] FILE... > expected.json
  estimates_ref.py selftest
"""

import argparse
import json
import math
import os
import re
import sys
from fractions import Fraction
from statistics import NormalDist

HERE = os.path.dirname(os.path.abspath(__file__))
sys.path.insert(0, HERE)
sys.dont_write_bytecode = True
import join_ref  # noqa: E402

NAN = float("nan")
INF = float("inf")
T_BELOW = 100            # Welch t when min n < 100 (DESIGN.md, METHODS.md sec. 2)
FISHER_REL_TOL = 1.0 + 1e-7
EPS = 2.220446049250313e-16
CANCEL_TOL = 64.0 * EPS  # centred sums below this share of their scale are rounding


# ------------------------------------------------------------------ distributions

def norm_q(x):
    """Upper tail of the standard normal, Q(x) = erfc(x / sqrt 2) / 2."""
    return 0.5 * math.erfc(x / math.sqrt(2.0))


def norm_p(x):
    return norm_q(-x)


def norm_isf(q):
    """z with Q(z) = q (statistics.NormalDist, Wichura's AS 241)."""
    return -NormalDist().inv_cdf(q)


def _betacf(a, b, x):
    """Continued fraction of the incomplete beta function, modified Lentz
    (Numerical Recipes, 3rd ed., sec. 6.4, betacf)."""
    fpmin = 1e-300
    qab, qap, qam = a + b, a + 1.0, a - 1.0
    c = 1.0
    d = 1.0 - qab * x / qap
    if abs(d) < fpmin:
        d = fpmin
    d = 1.0 / d
    h = d
    for m in range(1, 100000):
        m2 = 2 * m
        aa = m * (b - m) * x / ((qam + m2) * (a + m2))
        d = 1.0 + aa * d
        if abs(d) < fpmin:
            d = fpmin
        c = 1.0 + aa / c
        if abs(c) < fpmin:
            c = fpmin
        d = 1.0 / d
        h *= d * c
        aa = -(a + m) * (qab + m) * x / ((a + m2) * (qap + m2))
        d = 1.0 + aa * d
        if abs(d) < fpmin:
            d = fpmin
        c = 1.0 + aa / c
        if abs(c) < fpmin:
            c = fpmin
        d = 1.0 / d
        de = d * c
        h *= de
        if abs(de - 1.0) <= 2 * EPS:
            return h
    raise ArithmeticError("betacf did not converge (a=%r b=%r x=%r)" % (a, b, x))


def betai(a, b, x):
    """Regularized incomplete beta I_x(a, b) (Numerical Recipes sec. 6.4)."""
    if x <= 0.0:
        return 0.0
    if x >= 1.0:
        return 1.0
    lbt = (math.lgamma(a + b) - math.lgamma(a) - math.lgamma(b)
           + a * math.log(x) + b * math.log1p(-x))
    bt = math.exp(lbt)
    if x < (a + 1.0) / (a + b + 2.0):
        return bt * _betacf(a, b, x) / a
    return 1.0 - bt * _betacf(b, a, 1.0 - x) / b


def t_q(t, df):
    """Upper tail P(T > t) of Student's t with df (real) degrees of freedom:
    for t >= 0, I_{df/(df+t^2)}(df/2, 1/2) / 2."""
    if math.isinf(df):
        return norm_q(t)
    if t < 0:
        return 1.0 - t_q(-t, df)
    x = df / (df + t * t)
    return 0.5 * betai(0.5 * df, 0.5, x)


def t_p(t, df):
    return t_q(-t, df)


def t_isf(q, df):
    """t with P(T > t) = q, 0 < q < 1/2, by bisection of t_q."""
    if math.isinf(df):
        return norm_isf(q)
    assert 0 < q < 0.5
    lo, hi = 0.0, 1.0
    while t_q(hi, df) > q:
        lo, hi = hi, hi * 2.0
    for _ in range(400):
        mid = 0.5 * (lo + hi)
        if mid <= lo or mid >= hi:
            break
        if t_q(mid, df) > q:
            lo = mid
        else:
            hi = mid
    return 0.5 * (lo + hi)


def crit(alpha, df):
    """Two-sided critical value: t with df when finite, else z."""
    return t_isf(alpha / 2.0, df) if math.isfinite(df) else norm_isf(alpha / 2.0)


def tail_q(s, df):
    return t_q(s, df) if math.isfinite(df) else norm_q(s)


def tail_p(s, df):
    return t_p(s, df) if math.isfinite(df) else norm_p(s)


def two_sided(s, df):
    if math.isnan(s):
        return NAN
    return min(1.0, 2.0 * tail_q(abs(s), df))


def chi2_q(x, k):
    """Upper tail of chi-square with integer k degrees of freedom
    (Abramowitz & Stegun 26.4.4 for odd k, 26.4.5 for even k)."""
    if x <= 0:
        return 1.0
    if k % 2 == 0:
        term, s = 1.0, 1.0
        for j in range(1, k // 2):
            term *= (x / 2.0) / j
            s += term
        return math.exp(-x / 2.0) * s
    r = math.sqrt(x)
    q = math.erfc(r / math.sqrt(2.0))  # 2 Q(sqrt x)
    if k > 1:
        phi = math.exp(-x / 2.0) / math.sqrt(2.0 * math.pi)
        term, s = r, r
        for j in range(2, (k - 1) // 2 + 1):
            term *= x / (2 * j - 1)
            s += term
        q += 2.0 * phi * s
    return q


def binom_tails(k, n, p):
    """(P(X <= k), P(X >= k)) for X ~ Bin(n, p), from exact binomial coefficients."""
    p = Fraction(p)
    probs = [math.comb(n, j) * p ** j * (1 - p) ** (n - j) for j in range(n + 1)]
    return float(sum(probs[:k + 1])), float(sum(probs[k:]))


# ------------------------------------------------------------------ small helpers

def fsum(xs):
    return math.fsum(xs)


def mean(xs):
    return fsum(xs) / len(xs)


def csum(xs, ys):
    """Two-pass centred cross sum: sum (x - mean x)(y - mean y)."""
    mx, my = mean(xs), mean(ys)
    return fsum((x - mx) * (y - my) for x, y in zip(xs, ys))


def holm(ps):
    """Holm (1979) step-down, NaN entries counting in m and staying NaN."""
    m = len(ps)
    order = sorted((p, i) for i, p in enumerate(ps) if not math.isnan(p))
    adj = [NAN] * m
    run = 0.0
    for j, (p, i) in enumerate(order):
        run = max(run, min(1.0, (m - j) * p))
        adj[i] = run
    return adj


def bh(ps):
    """Benjamini & Hochberg (1995), NaN entries counting in m and staying NaN."""
    m = len(ps)
    order = sorted((p, i) for i, p in enumerate(ps) if not math.isnan(p))
    adj = [NAN] * m
    run = 1.0
    for j in range(len(order) - 1, -1, -1):
        p, i = order[j]
        run = min(run, min(1.0, m * p / (j + 1)))
        adj[i] = run
    return adj


# ------------------------------------------------------------------ one comparison

class Arm:
    """One arm reduced to what an estimate needs, computed two-pass from units:
    n, mean of the analysed value (my) and of the covariate (mx), the centred
    sums cyy, cxy, cxx, the variance divisor, and whether the covariate exists."""

    def __init__(self, mtype, rows):
        n = len(rows)
        self.n = n
        self.div = n if mtype == "binary" else n - 1
        self.bad_ratio = False
        self.has_x = True
        if n == 0:
            self.my = self.mx = NAN
            self.cyy = self.cxy = self.cxx = NAN
            return
        if mtype != "ratio":
            ys = [r["y"] for r in rows]
            xs = [r["x"] for r in rows]
            self.my, self.mx = mean(ys), mean(xs)
            self.cyy, self.cxy, self.cxx = csum(ys, ys), csum(xs, ys), csum(xs, xs)
            return
        xs = [r["num"] for r in rows]
        ds = [r["den"] for r in rows]
        dbar = mean(ds)
        if dbar == 0:
            self.bad_ratio = True
            self.my = self.mx = self.cyy = self.cxy = self.cxx = NAN
            self.has_x = False
            return
        r = fsum(xs) / fsum(ds)
        self.my = r
        # delta method (METHODS.md sec. 1): n * Var(R) * (n - 1) = s_X^2 - 2R s_XD + R^2 s_D^2,
        # all times (n - 1), over Dbar^2; from two-pass variances and covariance.
        sxx, sxd, sdd = csum(xs, xs), csum(xs, ds), csum(ds, ds)
        lin = sxx - 2.0 * r * sxd + r * r * sdd
        if lin <= CANCEL_TOL * (sxx + r * r * sdd):
            lin = 0.0
        self.cyy = lin / (dbar * dbar)
        ps = [u["pre_num"] for u in rows]
        qs = [u["pre_den"] for u in rows]
        qbar = mean(qs)
        if qbar == 0:
            self.mx = self.cxy = self.cxx = NAN
            self.has_x = False
            return
        rp = fsum(ps) / fsum(qs)
        self.mx = rp
        # CUPED on the linearized values (METHODS.md sec. 3, [ours]): per unit,
        # Y' = (X - R D)/Dbar and X' = (P - Rp Q)/Qbar; centred sums two-pass.
        yl = [(x - r * d) / dbar for x, d in zip(xs, ds)]
        xl = [(p - rp * q) / qbar for p, q in zip(ps, qs)]
        self.cxy = csum(xl, yl)
        # (a pre-period ratio with P_i = Rp Q_i for every unit has no variance:
        # below CANCEL_TOL of the scale it is rounding, as in stats.c)
        linx = fsum((p - rp * q) ** 2 for p, q in zip(ps, qs))
        scale = csum(ps, ps) + rp * rp * csum(qs, qs)
        self.cxx = 0.0 if linx <= CANCEL_TOL * scale else csum(xl, xl)

    def mean_var(self, c):
        """Variance of the arm mean from a centred sum c: c / (div n), 0 if c <= 0."""
        return c / (self.div * self.n) if c > 0 else 0.0


def welch_df(v1, n1, v0, n0):
    den = v1 * v1 / (n1 - 1) + v0 * v0 / (n0 - 1)
    return (v1 + v0) ** 2 / den if den > 0 else NAN


def fisher(x1, n1, x0, n0):
    """Fisher's exact test of (x1 of n1) vs (x0 of n0): (two-sided p, P(X1 <= x1),
    P(X1 >= x1)), hypergeometric probabilities as exact fractions."""
    x = x1 + x0
    tot = math.comb(n1 + n0, x)
    kmin, kmax = max(0, x - n0), min(x, n1)
    pk = {k: Fraction(math.comb(n1, k) * math.comb(n0, x - k), tot)
          for k in range(kmin, kmax + 1)}
    pobs = pk[x1]
    two = sum(p for p in pk.values() if float(p) <= float(pobs) * FISHER_REL_TOL)
    lo = sum(p for k, p in pk.items() if k <= x1)
    hi = sum(p for k, p in pk.items() if k >= x1)
    return min(1.0, float(two)), min(1.0, float(lo)), min(1.0, float(hi))


def compare(mtype, ctl_rows, trt_rows, alpha, better):
    """The fields of one metric row (treatment arm vs control), NaN where undefined."""
    e = {k: NAN for k in ("diff", "se", "ci_lo", "ci_hi", "p", "lift", "lift_lo", "lift_hi",
                          "cuped_diff", "cuped_lo", "cuped_hi", "var_reduction", "p_harm",
                          "theta")}
    e.update(df=INF, harm=False, fisher=False, agresti_caffo=False)
    a1, a0 = Arm(mtype, trt_rows), Arm(mtype, ctl_rows)
    if a1.n < 2 or a0.n < 2 or a1.bad_ratio or a0.bad_ratio:
        return e
    m1, m0 = a1.my, a0.my
    e["diff"] = m1 - m0
    v1, v0 = a1.mean_var(a1.cyy), a0.mean_var(a0.cyy)
    var = v1 + v0
    if m0 != 0:
        e["lift"] = m1 / m0 - 1.0
    if mtype != "binary" and not var > 0:
        return e  # degenerate: no test, no division
    use_t = mtype != "binary" and min(a1.n, a0.n) < T_BELOW
    if use_t:
        e["df"] = welch_df(v1, a1.n, v0, a0.n)
    k = crit(alpha, e["df"])

    if mtype == "binary":
        n1, n0 = a1.n, a0.n
        x1 = round(fsum(r["y"] for r in trt_rows))
        x0 = round(fsum(r["y"] for r in ctl_rows))
        nn, xx = n1 + n0, x1 + x0
        if xx == 0 or xx == nn:
            e["p"], lo, hi = 1.0, 1.0, 1.0
        else:
            emin = min(min(n1, n0) * xx / nn, min(n1, n0) * (nn - xx) / nn)
            if emin < 5:
                e["p"], lo, hi = fisher(x1, n1, x0, n0)
                e["fisher"] = True
            else:
                pbar = xx / nn
                z = (x1 / n1 - x0 / n0) / math.sqrt(pbar * (1 - pbar) * (1 / n1 + 1 / n0))
                e["p"] = two_sided(z, INF)
                lo, hi = norm_p(z), norm_q(z)
        if better > 0:
            e["p_harm"] = lo
        elif better < 0:
            e["p_harm"] = hi
        if x1 in (0, n1) or x0 in (0, n0):
            q1, q0 = (x1 + 1) / (n1 + 2), (x0 + 1) / (n0 + 2)
            se = math.sqrt(q1 * (1 - q1) / (n1 + 2) + q0 * (1 - q0) / (n0 + 2))
            e["se"], e["ci_lo"], e["ci_hi"] = se, q1 - q0 - k * se, q1 - q0 + k * se
            e["agresti_caffo"] = True
        else:
            p1, p0 = x1 / n1, x0 / n0
            se = math.sqrt(p1 * (1 - p1) / n1 + p0 * (1 - p0) / n0)
            e["se"], e["ci_lo"], e["ci_hi"] = se, e["diff"] - k * se, e["diff"] + k * se
    else:
        se = math.sqrt(var)
        e["se"], e["ci_lo"], e["ci_hi"] = se, e["diff"] - k * se, e["diff"] + k * se
        s = e["diff"] / se
        e["p"] = two_sided(s, e["df"])
        if better > 0:
            e["p_harm"] = tail_p(s, e["df"])
        elif better < 0:
            e["p_harm"] = tail_q(s, e["df"])
    if not math.isnan(e["p_harm"]):
        e["harm"] = e["p_harm"] < alpha

    # lift = m1/m0 - 1 with the delta-method se (METHODS.md sec. 2)
    if m0 != 0 and var > 0:
        lse = math.sqrt(v1 / m0 ** 2 + m1 ** 2 * v0 / m0 ** 4)
        e["lift_lo"], e["lift_hi"] = e["lift"] - k * lse, e["lift"] + k * lse

    # CUPED (Deng, Xu, Kohavi & Walker 2013; METHODS.md sec. 3)
    czz = a1.cxx + a0.cxx
    theta = 0.0
    if a1.has_x and a0.has_x and czz > 0 and math.isfinite(czz):
        theta = (a1.cxy + a0.cxy) / czz
    if not math.isfinite(theta):
        theta = 0.0
    e["theta"] = theta
    d = m1 - m0
    c1, c0 = a1.cyy, a0.cyy
    if theta != 0:
        d -= theta * (a1.mx - a0.mx)
        r1 = c1 - 2 * theta * a1.cxy + theta ** 2 * a1.cxx
        r0 = c0 - 2 * theta * a0.cxy + theta ** 2 * a0.cxx
        c1 = 0.0 if r1 <= CANCEL_TOL * (a1.cyy + theta ** 2 * a1.cxx) else r1
        c0 = 0.0 if r0 <= CANCEL_TOL * (a0.cyy + theta ** 2 * a0.cxx) else r0
    w1, w0 = a1.mean_var(c1), a0.mean_var(c0)
    cv = w1 + w0
    if cv > 0 and math.isfinite(d):
        cdf = welch_df(w1, a1.n, w0, a0.n) if use_t else INF
        if not math.isnan(cdf):
            kc = crit(alpha, cdf)
            cse = math.sqrt(cv)
            e["cuped_diff"], e["cuped_lo"], e["cuped_hi"] = d, d - kc * cse, d + kc * cse
            if var > 0:
                e["var_reduction"] = 1.0 - cv / var
    return e


# ------------------------------------------------------------------ SRM

def srm_test(counts, weights):
    """Chi-square against the weights (METHODS.md sec. 4); exact binomial for
    two arms with an expected count < 5; p undefined ("insufficient") for more."""
    sw = fsum(weights)
    pi = [w / sw for w in weights]
    n = sum(counts)
    r = {"chi2": NAN, "df": float(len(counts) - 1), "p": NAN, "test": "none"}
    if n == 0:
        return r
    e = [n * p for p in pi]
    r["chi2"] = fsum((c - x) ** 2 / x for c, x in zip(counts, e))
    if min(e) < 5:
        if len(counts) == 2:
            lo, hi = binom_tails(counts[0], n, pi[0])
            r["p"], r["test"] = min(1.0, 2.0 * min(lo, hi)), "binomial"
        else:
            r["test"] = "insufficient"
        return r
    r["p"], r["test"] = chi2_q(r["chi2"], len(counts) - 1), "chi2"
    return r


def srm_logbf(counts, weights, c):
    """Lindon & Malek (2022) Dirichlet-multinomial log Bayes factor, prior c*pi."""
    sw = fsum(weights)
    pi = [w / sw for w in weights]
    n = sum(counts)
    if n == 0:
        return 0.0
    s = 0.0
    for k, p in zip(counts, pi):
        a = c * p
        s += math.lgamma(a + k) - math.lgamma(a) - k * math.log(p)
    return math.lgamma(c) - math.lgamma(c + n) + s


def srm_parts(parts, arms, weights):
    """[(name, counts by arm)] -> rows with units, p and the Holm-adjusted p."""
    tests = [srm_test([cnt[a] for a in arms], weights) for _, cnt in parts]
    adj = holm([t["p"] for t in tests])
    return [{"name": name, "units": sum(cnt.values()), "p": t["p"], "p_adjusted": q,
             "test": t["test"]} for (name, cnt), t, q in zip(parts, tests, adj)]


# ------------------------------------------------------------------ hash re-check

def hash_bucket(h, unit):
    """Bucket of a unit: hashlib digest of hash.format with {salt} and {unit}
    replaced (one left-to-right pass; UTF-8), first 8 bytes big-endian, mod buckets."""
    import hashlib
    fmt = h.get("format", "{salt}{unit}")
    text = "".join(h["salt"] if t == "{salt}" else unit if t == "{unit}" else t
                   for t in re.split(r"(\{salt\}|\{unit\})", fmt))
    d = hashlib.new(h["function"], text.encode("utf-8")).digest()
    return int.from_bytes(d[:8], "big") % int(h["buckets"])


def hash_arm(h, arm_ranges, unit):
    b = hash_bucket(h, unit)
    for name, (lo, hi) in arm_ranges.items():
        if lo <= b < hi:
            return name
    return None


# ------------------------------------------------------------------ join access

def _capture_join(cfg, paths, lateness_us, horizon_us):
    """join_ref.run() plus its locals at return (per-unit values, events with attrs)."""
    orig = join_ref.decode

    def decode_keep_attrs(raw):
        ev = orig(raw)
        if ev["kind"] == "assign":
            text = raw[:-1] if raw.endswith(b"\r") else raw
            ev["attrs"] = json.loads(text.decode("utf-8")).get("attrs") or {}
        return ev

    seen = {}

    def prof(frame, event, arg):
        if event == "return" and frame.f_code is join_ref.run.__code__:
            seen.update(frame.f_locals)

    old = sys.getprofile()
    join_ref.decode = decode_keep_attrs
    sys.setprofile(prof)
    try:
        out = join_ref.run(cfg, paths, lateness_us, horizon_us)
    finally:
        sys.setprofile(old)
        join_ref.decode = orig
    for k in ("unit_arm", "unit_vals", "events"):
        if k not in seen:
            sys.exit("estimates_ref: join_ref.run() no longer has a local %r" % k)
    return out, seen


# ------------------------------------------------------------------ the readout

def num(x):
    return None if x is None or (isinstance(x, float) and not math.isfinite(x)) else x


def run(config_path, paths, lateness_us, horizon_us):
    with open(config_path, "rb") as f:
        raw_cfg = json.loads(f.read().decode("utf-8"))
    cfg = join_ref.load_config(config_path)
    joined, loc = _capture_join(cfg, paths, lateness_us, horizon_us)
    unit_arm, unit_vals, events = loc["unit_arm"], loc["unit_vals"], loc["events"]

    arms = cfg["arms"]
    ctl = cfg["control"]
    weights = [float(a.get("weight", 1.0)) for a in raw_cfg["arms"]]
    alpha = float(raw_cfg.get("alpha", 0.05))
    srm_cfg = raw_cfg.get("srm", {})
    threshold = float(srm_cfg.get("threshold", 0.001))
    prior = float(srm_cfg.get("prior", 100))
    roles = [m.get("role", "primary") for m in raw_cfg.get("metrics", [])]
    betters = [{"higher": 1, "lower": -1}.get(m.get("better"), 0)
               for m in raw_cfg.get("metrics", [])]
    has_cov = "covariate" in raw_cfg

    units_sorted = sorted(unit_arm)
    rows_of = {a: [u for u in units_sorted if unit_arm[u] == a] for a in arms}

    # estimates
    metric_rows, effs = [], []
    for i, mc in enumerate(cfg["metrics"]):
        crow = [unit_vals[u][i] for u in rows_of[ctl]]
        for a in arms:
            if a == ctl:
                continue
            trow = [unit_vals[u][i] for u in rows_of[a]]
            e = compare(mc["type"], crow, trow, alpha, betters[i])
            effs.append((i, a, e))
            row = {
                "metric": mc["name"], "arm": a, "type": mc["type"], "role": roles[i],
                "diff": num(e["diff"]), "ci": [num(e["ci_lo"]), num(e["ci_hi"])],
                "p": num(e["p"]),
                "test": "fisher" if e["fisher"] else
                        ("welch_t" if math.isfinite(e["df"]) else "z"),
                "df": num(e["df"]),
                "lift": num(e["lift"]), "lift_ci": [num(e["lift_lo"]), num(e["lift_hi"])],
                "cuped_diff": num(e["cuped_diff"]),
                "cuped_ci": [num(e["cuped_lo"]), num(e["cuped_hi"])],
                "var_reduction": num(e["var_reduction"]),
            }
            if betters[i]:
                row["better"] = "higher" if betters[i] > 0 else "lower"
                row["p_harm"] = num(e["p_harm"])
                row["harm"] = e["harm"]
            metric_rows.append(row)

    # p_adjusted: Holm (primary; guardrails on p_harm), BH (secondary)
    for role, fn, key in (("primary", holm, "p"), ("guardrail", holm, "p_harm"),
                          ("secondary", bh, "p")):
        idx = [j for j, (i, _, _) in enumerate(effs) if roles[i] == role]
        adj = fn([effs[j][2][key] for j in idx])
        for j, q in zip(idx, adj):
            metric_rows[j]["p_adjusted"] = num(q)

    # SRM
    counts = [len(rows_of[a]) for a in arms]
    s = srm_test(counts, weights)
    logbf = srm_logbf(counts, weights, prior)

    # exposure assignment of each counted unit: the earliest in-window
    # assignment (first in arrival order among equal times), as join_ref.run does
    first = {}
    for ev in events:
        if (ev["kind"] != "assign" or ev["exp"] != cfg["experiment"]
                or not (cfg["start"] <= ev["time"] < cfg["end"])):
            continue
        u = ev["unit"]
        if u not in first or ev["time"] < first[u]["time"]:
            first[u] = ev
    days, segs = {}, {}
    for u in units_sorted:
        ev = first[u]
        day = join_ref.format_time(ev["time"] // (86400 * 10 ** 6) * 86400 * 10 ** 6)[:10]
        days.setdefault(day, {a: 0 for a in arms})[unit_arm[u]] += 1
        for k, v in ev["attrs"].items():
            segs.setdefault("%s=%s" % (k, v), {a: 0 for a in arms})[unit_arm[u]] += 1
    by_day = srm_parts(sorted(days.items()), arms, weights)
    by_seg = srm_parts(sorted(segs.items()), arms, weights)

    srm = {"chi2": num(s["chi2"]), "df": s["df"], "p": num(s["p"]), "test": s["test"],
           "alarm": bool(s["p"] < threshold) if srm_cfg.get("test", "chi2") == "chi2" else None,
           "by_day": [{"day": r["name"], "units": r["units"], "p": num(r["p"]),
                       "p_adjusted": num(r["p_adjusted"]), "test": r["test"]} for r in by_day],
           "by_segment": [{"segment": r["name"], "units": r["units"], "p": num(r["p"]),
                           "p_adjusted": num(r["p_adjusted"]), "test": r["test"]}
                          for r in by_seg]}

    integrity = {}
    if has_cov:
        bal = {}
        for i, mc in enumerate(cfg["metrics"]):
            key = "pre_num" if mc["type"] == "ratio" else "x"
            cx = [unit_vals[u][i][key] for u in rows_of[ctl]]
            best = NAN
            for a in arms:
                if a == ctl:
                    continue
                tx = [unit_vals[u][i][key] for u in rows_of[a]]
                if len(tx) < 2 or len(cx) < 2:
                    continue
                sv = csum(tx, tx) / (len(tx) - 1) + csum(cx, cx) / (len(cx) - 1)
                if not sv > 0:
                    continue
                d = (mean(tx) - mean(cx)) / math.sqrt(sv / 2.0)
                if math.isnan(best) or abs(d) > abs(best):
                    best = d
            bal[mc["name"]] = num(best)
        integrity["balance_smd"] = bal

    if "hash" in raw_cfg:
        h = raw_cfg["hash"]
        ranges = {a["name"]: tuple(a["buckets"]) for a in raw_cfg["arms"]}
        checked = mism = 0
        for ev in events:
            if (ev["kind"] == "assign" and ev["exp"] == cfg["experiment"]
                    and cfg["start"] <= ev["time"] < cfg["end"]):
                checked += 1
                mism += hash_arm(h, ranges, ev["unit"]) != ev["arm"]
        integrity["hash_checked"] = checked
        integrity["hash_mismatch"] = mism

    return {
        "exp": cfg["experiment"],
        "units": joined["units"],
        "srm": srm,
        "metrics": metric_rows,
        "integrity": integrity,
        "reference_only": {
            "srm_logbf": logbf,
            "srm_prior": prior,
            "srm_p_seq_bound": min(1.0, math.exp(-logbf)) if logbf > -700 else 1.0,
            "weights": weights,
            "theta": {"%s/%s" % (cfg["metrics"][i]["name"], a): num(e["theta"])
                      for i, a, e in effs},
            "binary_variants": {"%s/%s" % (cfg["metrics"][i]["name"], a):
                                [k for k in ("fisher", "agresti_caffo") if e[k]]
                                for i, a, e in effs if cfg["metrics"][i]["type"] == "binary"},
        },
    }


# ------------------------------------------------------------------ self-test

SCIPY_1_10_1 = [  # (function, args, SciPy 1.10.1 value, tolerance); see the module docstring
    (t_q, (2.0, 60.08337359145548), 0.025013355077153698, 1e-12),
    (t_q, (0.5, 3.5), 0.3234252196612755, 1e-12),
    (t_q, (7.0, 12.25), 6.425408630674507e-06, 1e-12),
    (t_p, (-1.3, 56.602381046508434), 0.09943503010763667, 1e-12),
    (t_isf, (0.025, 60.08337359145548), 2.0002407328386305, 1e-9),
    (t_isf, (0.025, 98.99494979393694), 1.9842182037319038, 1e-9),
    (t_isf, (0.025, 2.5), 3.574654842011878, 1e-9),
    (t_isf, (0.0005, 30.0), 3.6459586349971094, 1e-9),
    (chi2_q, (6.0, 2), 0.04978706836786395, 1e-12),
    (chi2_q, (7.5, 3), 0.0575584519726364, 1e-12),
    (chi2_q, (40.0, 1), 2.5396285894708634e-10, 1e-12),
    (chi2_q, (11.0, 5), 0.05137998348306955, 1e-12),
]


def selftest():
    bad = 0
    for fn, args, want, tol in SCIPY_1_10_1:
        got = fn(*args)
        if abs(got - want) > tol * abs(want):
            print("%s%r = %r, SciPy 1.10.1 gave %r" % (fn.__name__, args, got, want))
            bad += 1
    # METHODS.md sec. 9 (Lindon & Malek prior c = 100): 600/400 -> logBF 17.099
    lb = srm_logbf([600, 400], [1, 1], 100)
    if abs(lb - 17.099) > 5e-4:
        print("srm_logbf(600/400, c=100) = %r, METHODS.md sec. 9 gives 17.099" % lb)
        bad += 1
    # METHODS.md sec. 9: "3 of 15: exact binomial p = .0352"
    lo, hi = binom_tails(3, 15, 0.5)
    if abs(2 * min(lo, hi) - 0.0352) > 5e-5:
        print("binomial 3 of 15: p = %r, METHODS.md sec. 9 gives .0352" % (2 * min(lo, hi)))
        bad += 1
    # tests/cli/0200-srm.sh: scipy.stats.binomtest(1, 9, 0.5).pvalue -> 0.0390625 (SciPy 1.10.1)
    r = srm_test([1, 8], [1, 1])
    if r["test"] != "binomial" or abs(r["p"] - 0.0390625) > 1e-15:
        print("srm_test(1/8) = %r, SciPy 1.10.1 binomtest gives 0.0390625" % r)
        bad += 1
    print("selftest: %s" % ("ok" if not bad else "%d failed" % bad))
    return 1 if bad else 0


def main(argv=None):
    argv = sys.argv[1:] if argv is None else argv
    if argv[:1] == ["selftest"]:
        sys.exit(selftest())
    ap = argparse.ArgumentParser(description="independent reference for abtally's estimates")
    ap.add_argument("--config", required=True)
    ap.add_argument("--lateness-minutes", type=float, default=60)
    ap.add_argument("--dedup-horizon-hours", type=float, default=24)
    ap.add_argument("files", nargs="+")
    a = ap.parse_args(argv)
    try:
        out = run(a.config, a.files,
                  join_ref.round_half_away(a.lateness_minutes * 60e6),
                  join_ref.round_half_away(a.dedup_horizon_hours * 3600e6))
    except join_ref.AssumptionFailed as e:
        sys.exit("estimates_ref: outside the reference's assumptions: %s" % e)
    json.dump(out, sys.stdout, indent=1, allow_nan=False)
    sys.stdout.write("\n")


if __name__ == "__main__":
    main()
