#!/usr/bin/env python3
"""Generate the reference table of scaled standard normal tails used by the race engine
(src/race/tails.rs):

    M(x) = Phi(-x) * exp(x^2/2)
    K(x) = G(-x) * exp(x^2/2),   G(z) = z Phi(z) + phi(z),  so G(-x) = phi(x) - x Phi(-x)

for x >= 0, computed by mpmath at 150 significant digits (K cancels about 2*log10(x)
digits) from Phi(-x) = erfc(x/sqrt(2))/2
(Abramowitz & Stegun 1964, 7.1.2 and 26.2.29). Offline tool: the Rust test only reads the CSV
written next to this script.

    pip install mpmath
    python3 tests/reference/generate_normal_tails.py

Deterministic: a fixed grid (dense around the approximation switches at 0.66291 and sqrt(32),
log-spaced out to 1e6, then 1 and 3 times each power of ten to 1e30).
"""

import csv
import os

import mpmath as mp

mp.mp.dps = 150


def tails(x):
    x = mp.mpf(x)
    upper = mp.erfc(x / mp.sqrt(2)) / 2
    scale = mp.exp(x * x / 2)
    m = upper * scale
    k = (1 / mp.sqrt(2 * mp.pi)) - x * m
    return m, k


def grid():
    xs = set()
    for i in range(0, 801):  # 0 to 8 in steps of 0.01
        xs.add(mp.mpf(i) / 100)
    for centre in (mp.mpf("0.66291"), mp.sqrt(32)):
        for d in (-1e-6, -1e-9, 0, 1e-9, 1e-6):
            xs.add(centre + d)
    for i in range(0, 121):  # 8 to 1e6, log-spaced
        xs.add(mp.mpf(8) * mp.power(mp.mpf(125000), mp.mpf(i) / 120))
    for e in range(7, 31):  # 1e7 to 1e30 (past the asymptotic switch at 1e20)
        for mantissa in (1, 3):
            xs.add(mp.mpf(mantissa) * mp.power(10, e))
    return sorted(xs)


def main():
    out = os.path.join(os.path.dirname(os.path.abspath(__file__)), "normal_tails.csv")
    with open(out, "w", newline="") as f:
        w = csv.writer(f, lineterminator="\n")
        w.writerow(["x", "m", "k"])
        for x in grid():
            xd = float(x)  # the double the Rust test evaluates at
            m, k = tails(mp.mpf(xd))
            w.writerow([repr(xd), mp.nstr(m, 20, strip_zeros=False), mp.nstr(k, 20, strip_zeros=False)])


if __name__ == "__main__":
    main()
