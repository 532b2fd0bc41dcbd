#!/usr/bin/env python3
"""Generate reference values of the canonical double-gamma haemodynamic response for valuedrift
(src/exports/hrf.rs).

Offline tool: the Rust test (tests/suite/haemodynamic_response.rs) only reads the CSV written next to
this script, so Python is not needed to run it.

    pip install scipy numpy
    python3 tests/reference/generate_hrf.py

The response (Friston et al. 1998; Glover 1999), with the parameters as commonly used: peak
gamma shape a1 = 6, undershoot gamma shape a2 = 16, rates b1 = b2 = 1 / s (scale 1 s),
undershoot ratio c = 1/6:

    h(t) = gamma.pdf(t, a1, scale=1/b1) - c * gamma.pdf(t, a2, scale=1/b2)

Output: hrf_reference.csv with columns kind,t,value (every number written with repr, so the
Rust side reads back the exact doubles):
    value        h(t) at t (unnormalised), scipy.stats.gamma.pdf
    magnitude    gamma.pdf(t, a1) + c * gamma.pdf(t, a2) at the same t: the size of the two
                 terms whose difference is h (near the zero crossing of h the difference loses
                 digits, so tolerances are relative to this)
    integral     H(t) = integral of h from 0 to t = gamma.cdf(t, a1) - c * gamma.cdf(t, a2)
    peak         t = time of the maximum of h, value = h(t): the root of the derivative
                 h'(t) = g1(t) ((a1 - 1)/t - b1) - c g2(t) ((a2 - 1)/t - b2) (g = gamma.pdf) on
                 [1, 10] by scipy.optimize.brentq (xtol 1e-15)
    undershoot   t = time of the minimum of h, value = h(t); same method on [8, 25]
"""

import csv
import os

from scipy import optimize, stats

A1, A2, B1, B2, C = 6.0, 16.0, 1.0, 1.0, 1.0 / 6.0


def h(t):
    return stats.gamma.pdf(t, A1, scale=1.0 / B1) - C * stats.gamma.pdf(t, A2, scale=1.0 / B2)


def dh(t):
    g1 = stats.gamma.pdf(t, A1, scale=1.0 / B1)
    g2 = stats.gamma.pdf(t, A2, scale=1.0 / B2)
    return g1 * ((A1 - 1.0) / t - B1) - C * g2 * ((A2 - 1.0) / t - B2)


def big_h(t):
    return stats.gamma.cdf(t, A1, scale=1.0 / B1) - C * stats.gamma.cdf(t, A2, scale=1.0 / B2)


def main():
    rows = []
    for t in [0.25, 0.5, 1.0, 2.0, 3.0, 4.0, 5.0, 5.5, 6.0, 7.0, 8.0, 10.0, 12.0, 14.0,
              15.0, 16.0, 18.0, 20.0, 25.0, 30.0, 32.0]:
        rows.append(("value", t, float(h(t))))
        rows.append(("magnitude", t, float(stats.gamma.pdf(t, A1, scale=1.0 / B1)
                                           + C * stats.gamma.pdf(t, A2, scale=1.0 / B2))))
    for t in range(0, 33):
        rows.append(("integral", float(t), float(big_h(float(t)))))
    peak = optimize.brentq(dh, 1.0, 10.0, xtol=1e-15)
    rows.append(("peak", float(peak), float(h(peak))))
    dip = optimize.brentq(dh, 8.0, 25.0, xtol=1e-15)
    rows.append(("undershoot", float(dip), float(h(dip))))
    path = os.path.join(os.path.dirname(os.path.abspath(__file__)), "hrf_reference.csv")
    with open(path, "w", newline="") as f:
        w = csv.writer(f, lineterminator="\n")
        w.writerow(["kind", "t", "value"])
        for kind, t, v in rows:
            w.writerow([kind, repr(t), repr(v)])
    print(f"wrote {len(rows)} rows to {path}")


if __name__ == "__main__":
    main()
