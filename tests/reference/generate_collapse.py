#!/usr/bin/env python3
"""Reference first-passage densities for linearly collapsing bounds at zero drift.

Offline tool: the Rust tests only read the CSV written next to this script.

    pip install mpmath
    python3 tests/reference/generate_collapse.py

Output: collapse_reference.csv  t,bound,boundary,start,collapse_rate,log_density,step_difference

Process: Brownian motion with unit diffusion coefficient, zero drift, start y0 = (w - 1/2) a
measured from the midpoint, bounds +-S(t) with S(t) = (a/2)(1 - r t) (linear collapse).

Method (independent of the Rust engine, which solves the Fokker-Planck equation on a grid):
the pair of Volterra integral equations of the second kind for two bounds (Buonocore, Nobile &
Ricciardi 1987; Buonocore, Giorno, Nobile & Ricciardi 1990; Smith 2000),

    g+(t) =  2 psi(S(t), t | y0, 0) - 2 int_0^t [g+(s) psi(S(t), t | S(s), s) + g-(s) psi(S(t), t | -S(s), s)] ds
    g-(t) = -2 psi(-S(t), t | y0, 0) + 2 int_0^t [g+(s) psi(-S(t), t | S(s), s) + g-(s) psi(-S(t), t | -S(s), s)] ds

with the regularised kernel psi(B(t), t | y, s) = f(B(t), t | y, s)/2 * [(B(t) - y)/(t - s) - B'(t)],
f the Gaussian transition density (variance t - s).  For a linear bound the same-bound kernel is
exactly zero, so only the cross terms remain; they vanish to all orders as s -> t, and g vanishes
to all orders at 0, so the trapezoid rule (whose end terms are zero) converges fast.  Solved in
mpmath at 30 significant digits on two grids (h and h/2); the table keeps the h/2 value and the
difference between the two (step_difference, an estimate of the discretisation error).  Times
are kept below 1.2 a^2, where the method's relative error is small (it grows like
exp(pi^2 t / (2 a^2)) because the density is a difference of slowly decaying terms).

Self-check (printed, asserted): with r = 0 the same solver reproduces the large-time series of
the Wiener first-passage density (Feller 1968; Navarro & Fuss 2009) to 1e-5 relative (the
Crank-Nicolson engine checked against this table is accurate to about 1e-3).
"""

import csv
import os

import mpmath as mp

mp.mp.dps = 30


def solve(a, w, r, horizon, h):
    """g+ and g- at t_k = k h, k = 0..n (lists of mpf)."""
    a, w, r, h = mp.mpf(a), mp.mpf(w), mp.mpf(r), mp.mpf(h)
    n = int(mp.nint(horizon / h))
    y0 = (w - mp.mpf(1) / 2) * a

    def half(t):
        return a / 2 * (1 - r * t)

    slope = -a / 2 * r

    def psi(b, db, t, y, s):
        d = t - s
        return mp.npdf(b, y, mp.sqrt(d)) / 2 * ((b - y) / d - db)

    up = [mp.mpf(0)] * (n + 1)
    down = [mp.mpf(0)] * (n + 1)
    for k in range(1, n + 1):
        t = k * h
        su, sd = half(t), -half(t)
        acc_u = mp.mpf(0)
        acc_d = mp.mpf(0)
        for j in range(1, k):
            s = j * h
            yu, yd = half(s), -half(s)
            acc_u += up[j] * psi(su, slope, t, yu, s) + down[j] * psi(su, slope, t, yd, s)
            acc_d += up[j] * psi(sd, -slope, t, yu, s) + down[j] * psi(sd, -slope, t, yd, s)
        up[k] = 2 * psi(su, slope, t, y0, 0) - 2 * h * acc_u
        down[k] = -2 * psi(sd, -slope, t, y0, 0) + 2 * h * acc_d
    return up, down


def wiener_large_time(t, a, w, bound):
    """Wiener first-passage density at zero drift (large-time series; Navarro & Fuss 2009)."""
    if bound == "upper":
        w = 1 - w
    a, w, t = mp.mpf(a), mp.mpf(w), mp.mpf(t)
    return mp.pi / a**2 * mp.nsum(
        lambda k: k * mp.exp(-k**2 * mp.pi**2 * t / (2 * a**2)) * mp.sin(k * mp.pi * w), [1, mp.inf]
    )


def main():
    here = os.path.dirname(os.path.abspath(__file__))
    times = [0.15, 0.3, 0.5, 0.8, 1.1]
    step = 0.005
    # Self-check at r = 0 against the closed form.
    up, down = solve(1.0, 0.35, 0.0, 1.1, step / 2)
    for t in times:
        k = int(round(t / (step / 2)))
        for name, g in (("upper", up[k]), ("lower", down[k])):
            exact = wiener_large_time(t, 1.0, 0.35, name)
            rel = abs(g / exact - 1)
            print(f"self-check r=0 t={t} {name}: relative difference {mp.nstr(rel, 3)}")
            assert rel < 1e-5, rel
    rows = []
    for a, w, r in [(1.0, 0.5, 0.3), (1.0, 0.35, 0.3), (1.0, 0.35, 0.6), (1.2, 0.6, 0.5)]:
        horizon = max(times)
        coarse = solve(a, w, r, horizon, step)
        fine = solve(a, w, r, horizon, step / 2)
        for t in times:
            if t > 1.2 * a * a:
                continue
            kc = int(round(t / step))
            kf = int(round(t / (step / 2)))
            for name, index in (("upper", 0), ("lower", 1)):
                g_fine = fine[index][kf]
                g_coarse = coarse[index][kc]
                difference = abs(mp.log(g_fine) - mp.log(g_coarse))
                rows.append([t, name, a, w, r, mp.nstr(mp.log(g_fine), 17), mp.nstr(difference, 3)])
                print(rows[-1])
    with open(os.path.join(here, "collapse_reference.csv"), "w", newline="") as out:
        writer = csv.writer(out)
        writer.writerow(["t", "bound", "boundary", "start", "collapse_rate", "log_density", "step_difference"])
        writer.writerows(rows)


if __name__ == "__main__":
    main()
