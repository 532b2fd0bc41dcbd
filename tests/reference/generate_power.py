#!/usr/bin/env python3
"""Generate the reference table of the noncentral t distribution function and of the
normal-theory power of Welch's two-sample t test.

Offline tool: the Rust test tests/suite/power.rs only reads power.csv, written next to this
script.

    pip install scipy numpy
    python3 tests/reference/generate_power.py

Deterministic: a fixed grid, no random numbers.

Rows of kind "nct_cdf": t, df, ncp and scipy.stats.nct.cdf(t, df, ncp) (SciPy's noncentral t,
computed by the Boost library's series). Where SciPy returns NaN (far lower tails, values below
1e-15) the value is the integral F(t; nu, delta) = int_0^inf Phi(t sqrt(u/nu) - delta) chi2_nu(u) du
by mpmath quadrature at 30 digits instead; the `source` column says which.

Rows of kind "wilson_low" and "wilson_high": t = successes, df = trials, ncp = confidence level,
and the ends of the Wilson score interval from
scipy.stats.binomtest(k, n).proportion_ci(confidence_level, method="wilson") (the first case is
the worked example of Newcombe 1998, 81 of 263: 0.2553 to 0.3662).

Rows of kind "welch_power": difference, sd1, sd2, n1, n2, alpha and the normal-theory power of
the two-sided Welch test,
    s2 = sd1^2/n1 + sd2^2/n2,  nu = s2^2 / ((sd1^2/n1)^2/(n1-1) + (sd2^2/n2)^2/(n2-1)),
    delta = difference / sqrt(s2),  c = scipy.stats.t.ppf(1 - alpha/2, nu),
    power = nct.sf(c, nu, delta) + nct.cdf(-c, nu, delta).
"""
import csv
import os

import numpy as np
from scipy import stats

HERE = os.path.dirname(os.path.abspath(__file__))


def nct_cdf_mpmath(t, df, ncp):
    import mpmath
    mpmath.mp.dps = 30
    t, df, ncp = mpmath.mpf(t), mpmath.mpf(df), mpmath.mpf(ncp)

    def chi2(u):
        return mpmath.exp((df / 2 - 1) * mpmath.log(u) - u / 2 - (df / 2) * mpmath.log(2)
                          - mpmath.loggamma(df / 2))

    def integrand(u):
        return mpmath.ncdf(t * mpmath.sqrt(u / df) - ncp) * chi2(u)

    return float(mpmath.quad(integrand, [0, df / 4, df, 4 * df, 20 * df, mpmath.inf]))


def main():
    rows = []
    for t in [-6.0, -2.5, -1.0, -0.3, 0.0, 0.4, 1.0, 1.96, 3.0, 5.5, 12.0]:
        for df in [2.0, 4.5, 10.0, 37.3, 200.0]:
            for ncp in [-3.0, -0.7, 0.0, 0.5, 1.5, 3.0, 8.0]:
                value = float(stats.nct.cdf(t, df, ncp))
                source = "scipy"
                if np.isnan(value):
                    value, source = nct_cdf_mpmath(t, df, ncp), "mpmath"
                rows.append(["nct_cdf", t, df, ncp, "", "", "", "", "", "", repr(value), source])
    cases = [
        (0.5, 1.0, 1.0, 20, 20, 0.05),
        (0.5, 1.0, 1.0, 64, 64, 0.05),
        (0.3, 0.2, 0.2, 10, 10, 0.05),
        (0.3, 0.5, 0.25, 15, 30, 0.05),
        (1.0, 1.0, 2.0, 40, 20, 0.01),
        (0.0, 1.0, 1.0, 25, 25, 0.05),
        (-0.8, 1.2, 0.9, 12, 18, 0.1),
        (0.2, 1.0, 1.0, 200, 200, 0.05),
        (2.0, 1.0, 1.0, 5, 5, 0.05),
    ]
    for difference, sd1, sd2, n1, n2, alpha in cases:
        a, b = sd1 ** 2 / n1, sd2 ** 2 / n2
        s2 = a + b
        nu = s2 ** 2 / (a ** 2 / (n1 - 1) + b ** 2 / (n2 - 1))
        delta = difference / np.sqrt(s2)
        c = stats.t.ppf(1 - alpha / 2, nu)
        power = float(stats.nct.sf(c, nu, delta) + stats.nct.cdf(-c, nu, delta))
        rows.append(["welch_power", "", "", "", difference, sd1, sd2, n1, n2, alpha, repr(power), "scipy"])
    for k, n, level in [(81, 263, 0.95), (0, 20, 0.95), (15, 148, 0.95), (20, 20, 0.95),
                        (7, 50, 0.9), (499, 1000, 0.99)]:
        ci = stats.binomtest(k, n).proportion_ci(confidence_level=level, method="wilson")
        rows.append(["wilson_low", k, n, level, "", "", "", "", "", "", repr(float(ci.low)), "scipy"])
        rows.append(["wilson_high", k, n, level, "", "", "", "", "", "", repr(float(ci.high)), "scipy"])
    with open(os.path.join(HERE, "power.csv"), "w", newline="") as f:
        w = csv.writer(f)
        w.writerow(["kind", "t", "df", "ncp", "difference", "sd1", "sd2", "n1", "n2", "alpha", "value", "source"])
        w.writerows(rows)
    print(f"wrote {len(rows)} rows with scipy {__import__('scipy').__version__}")


if __name__ == "__main__":
    main()
