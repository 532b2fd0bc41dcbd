#!/usr/bin/env python3
"""Generate high-precision reference tables for the Wiener first-passage-time engine.

Offline tool: the Rust tests only read the CSV files written next to this script.

    pip install mpmath        # (gmpy2 is optional; mpmath uses it automatically if present)
    python3 tests/reference/generate_first_passage.py

Outputs (in this directory):
    first_passage_reference.csv  rt,bound,drift,boundary,start,ndt,drift_sd,start_range,
                                 ndt_range,log_density,cdf
    first_passage_moments.csv    drift,boundary,start,p_upper,mean_dt,mean_dt_upper,
                                 mean_dt_lower

Conventions: Brownian motion with unit diffusion coefficient (s = 1), absorbing bounds at 0
(lower) and a (upper), start a*w, drift v (v > 0 heads up).  All quantities are computed in
the "lower-bound frame": the upper-bound quantity with (v, w) equals the lower-bound quantity
with (-v, 1-w) (reflection x -> a - x of the process).

Formulas and their published sources
------------------------------------
* Density, large-time series (Feller 1968, ch. XIV; Navarro & Fuss 2009, eq. for the
  large-time representation):
      f(t|v,a,w) = (pi/a^2) exp(-v a w - v^2 t/2) sum_{k>=1} k exp(-k^2 pi^2 t/(2a^2)) sin(k pi w)
* Density, small-time series (method of images; Feller 1968; Navarro & Fuss 2009):
      f(t|v,a,w) = (1/a^2) exp(-v a w - v^2 t/2) (2 pi u^3)^(-1/2)
                   sum_{k in Z} (w+2k) exp(-(w+2k)^2/(2u)),   u = t/a^2
* Absorption probability (Feller 1968; Cox & Miller 1965):
      P_upper = (1 - exp(-2 v a w)) / (1 - exp(-2 v a)),  P_lower = 1 - P_upper
* Defective CDF, small-time form as a signed sum of inverse-Gaussian (Wald) first-passage
  CDFs (Blurton, Kesselmeier & Gondan 2012), obtained by integrating the image series term
  by term; each image term is a single-level first-passage density of Brownian motion with
  drift (Schroedinger 1915 / Wald 1947 inverse-Gaussian law):
      F(t) = sum_{k>=0} e^{2vak} W(t; a(w+2k), -v) - sum_{k>=1} e^{-2vak} W(t; a(2k-w), +v)
      W(t; d, mu) = Phi((mu t - d)/sqrt t) + e^{2 mu d} Phi((-mu t - d)/sqrt t)
* Defective CDF, large-time form (Blurton, Kesselmeier & Gondan 2012):
      F(t) = P_lower - (2 pi/a^2) e^{-vaw - v^2 t/2}
                       sum_k k sin(k pi w) e^{-k^2 pi^2 t/(2a^2)} / (v^2 + k^2 pi^2/a^2)
* Across-trial drift variability, closed form used ONLY as a cross-check of the numerical
  integral over v (Blurton, Kesselmeier & Gondan 2017):
      f(t|m,eta) = (1/a^2)(1+eta^2 t)^(-1/2)
                   exp((eta^2 a^2 w^2 - 2 a m w - m^2 t)/(2(1+eta^2 t))) f_std(t/a^2 | w)
* Moments, closed forms used ONLY as cross-checks of the numerical integrals
  (Grasman, Wagenmakers & van der Maas 2009):
      E[T] = (a P_upper - a w)/v,
      E[T | upper] = (a coth(va) - a w coth(vaw))/v,
      E[T | lower] = (a coth(va) - a(1-w) coth(va(1-w)))/v,
      v -> 0: w(1-w)a^2, a^2(1-w^2)/3, a^2(1-(1-w)^2)/3.

Across-trial variability (all by numerical quadrature with mpmath.quad):
  drift  v ~ Normal(drift, drift_sd^2): substitute v = drift + drift_sd*x, integrate over x
         against the standard normal density.  For the density the v-independent factor
         (1/a^2) f_std(t/a^2|w) of f(t|v,a,w) is evaluated once and the remaining factor
         exp(-vaw - v^2 t/2) phi(x) is integrated numerically (this is the same integral,
         term for term; the Gaussian-integral closed form above is never used for the table).
  start  w' ~ Uniform(w - sz/2, w + sz/2): average over w'.
  ndt    tau ~ Uniform(ndt - st/2, ndt + st/2): average over tau of f(rt - tau) / F(rt - tau)
         (zero where rt - tau <= 0).  When drift_sd > 0 is combined with ndt_range only, the
         tau-average of the CDF is evaluated by Fubini as
         (1/st) int_0^{t_hi} f(s) (t_hi - max(s, t_lo)) ds,   t = rt - tau in [t_lo, t_hi],
         which is the same double integral with the inner one done exactly.
  Outermost integrals use adaptive mpmath.quad; integrals nested inside another one use a
  fixed composite Gauss-Legendre rule built from mpmath's nodes (see "Variability layers").

Because mpmath.quad uses an absolute error criterion, every quadrature below normalises its
integrand by a sampled magnitude so that the error control is relative.

Number representation: ndt is a multiple of 2^-10, ndt_range of 2^-9, start of 2^-12 and
start_range of 2^-11, so that rt - ndt, rt - ndt -/+ ndt_range/2, 1 - start and
start -/+ start_range/2 are exact in IEEE double arithmetic.  All values in the table are
computed for the exact decimal-rounded doubles written to the CSV.
"""

import math
import os
import random
import sys
import time

import mpmath as mp
from mpmath import mpf

mp.mp.dps = 40
HERE = os.path.dirname(os.path.abspath(__file__))
SEED = 20240611

# Quadrature configuration for the variability integrals.  `VALIDATE` re-runs a subset with
# a different rule at higher precision.
CFG = {"method": "gauss-legendre", "dps": 20, "inner": "fixed", "gl_deg": 4}

def _gl_conservative_error(results, prec, epsilon):
    """Error estimate for mpmath's adaptive Gauss-Legendre rule taken as |I_k - I_(k-1)|
    (the default extrapolated estimate can accept a degree too early)."""
    return abs(results[-1] - results[-2])


mp.mp._gauss_legendre.estimate_error = _gl_conservative_error

STATS = {"max_quad_relerr": mpf(0), "nquad": 0, "where": "", "context": ""}


def _tol():
    """Series truncation tolerance: a few bits below the working precision."""
    return mpf(2) ** (-(mp.mp.prec + 8))


# ---------------------------------------------------------------------------------------
# Fixed-drift first-passage quantities (lower-bound frame)
# ---------------------------------------------------------------------------------------

def fstd_small(u, w):
    """Standardised (v=0, a=1) lower-bound density, small-time series.
    Feller (1968); Navarro & Fuss (2009)."""
    s = w * mp.exp(-w * w / (2 * u))
    k = 1
    tol = _tol()
    while True:
        p = w + 2 * k
        q = w - 2 * k
        tp = p * mp.exp(-p * p / (2 * u))
        tq = q * mp.exp(-q * q / (2 * u))
        s += tp + tq
        if abs(tp) + abs(tq) <= tol * abs(s):
            break
        k += 1
    return s / mp.sqrt(2 * mp.pi * u ** 3)


def fstd_large(u, w):
    """Standardised (v=0, a=1) lower-bound density, large-time series.
    Feller (1968); Navarro & Fuss (2009)."""
    s = mpf(0)
    k = 1
    tol = _tol()
    c = mp.pi ** 2 * u / 2
    while True:
        b = k * mp.exp(-k * k * c)
        s += b * mp.sin(k * mp.pi * w)
        # k*exp(-k^2 c) is decreasing in k for c > 1/2, i.e. u > 0.11
        if k >= 2 and b <= tol * abs(s):
            break
        k += 1
    return mp.pi * s


def fstd(u, w):
    """Navarro & Fuss (2009): small-time form for u < 1, large-time form otherwise."""
    return fstd_small(u, w) if u < 1 else fstd_large(u, w)


def S_factor(t, a, w):
    """v-independent factor (1/a^2) f_std(t/a^2 | w) of the lower-bound density."""
    return fstd(t / (a * a), w) / (a * a)


def E_factor(v, t, a, w):
    """v-dependent factor exp(-v a w - v^2 t / 2) of the lower-bound density (Feller 1968)."""
    return mp.exp(-v * a * w - v * v * t / 2)


def dens0(t, v, a, w):
    """Lower-bound defective first-passage density at decision time t."""
    if t <= 0:
        return mpf(0)
    return E_factor(v, t, a, w) * S_factor(t, a, w)


def p_lower(v, a, w):
    """P(absorb at 0) = P_upper(-v, a, 1-w); Feller (1968), Cox & Miller (1965).
    expm1 form avoids cancellation for small |v| and for tiny probabilities."""
    if v == 0:
        return 1 - w
    return mp.expm1(2 * v * a * (1 - w)) / mp.expm1(2 * v * a)


def p_upper(v, a, w):
    """P(absorb at a) = (1 - exp(-2vaw)) / (1 - exp(-2va)); Feller (1968)."""
    if v == 0:
        return w
    return mp.expm1(-2 * v * a * w) / mp.expm1(-2 * v * a)


_CONST = {}


def _consts():
    """(1/sqrt(2), 1/sqrt(2 pi)) at the current working precision."""
    c = _CONST.get(mp.mp.prec)
    if c is None:
        c = (1 / mp.sqrt(2), 1 / mp.sqrt(2 * mp.pi))
        _CONST[mp.mp.prec] = c
    return c


def Phi(x):
    """Standard normal CDF through erfc (accurate in the lower tail)."""
    r2 = _consts()[0]
    if x < 0:
        return mp.erfc(-x * r2) / 2
    return 1 - mp.erfc(x * r2) / 2


def wald_cdf(t, d, mu, rt=None):
    """First-passage CDF of level d > 0 for Brownian motion with drift mu, unit variance
    (inverse-Gaussian law; Schroedinger 1915, Wald 1947); defective when mu < 0."""
    r = mp.sqrt(t) if rt is None else rt
    return Phi((mu * t - d) / r) + mp.exp(2 * mu * d) * Phi((-mu * t - d) / r)


U_CDF_SWITCH = mpf("0.08")


class Cdf0:
    """Lower-bound defective CDF F(t | v, a, w) for many drifts v at fixed (t, a, w).
    v-independent parts of the series are prepared once (pure bookkeeping)."""

    def __init__(self, t, a, w, mode=None):
        self.t, self.a, self.w = t, a, w
        self.u = t / (a * a)
        self.rt = mp.sqrt(t)
        tol = _tol()
        if mode is None:
            mode = "ig" if self.u < U_CDF_SWITCH else "large"
        if mode == "ig":
            # Blurton, Kesselmeier & Gondan (2012): inverse-Gaussian image sum.
            # Term k is bounded by r_k * term_0 with
            # r_k = (|d_k|/d_0) exp(-(d_k^2 - d_0^2)/(2t)) (ratio of image densities,
            # maximal at s = t), so images with negligible r_k are not evaluated.
            self.mode = "ig"
            d0 = a * w
            self.images = []  # (2ak, distance for +k image, distance for -k image)
            k = 1
            while True:
                dp = a * (w + 2 * k)
                dm = a * (2 * k - w)
                rp = dp / d0 * mp.exp(-(dp * dp - d0 * d0) / (2 * t))
                rm = dm / d0 * mp.exp(-(dm * dm - d0 * d0) / (2 * t))
                if rp + rm <= tol * mpf(2) ** -20:
                    break
                self.images.append((2 * a * k, dp, dm))
                k += 1
                if k > 400:
                    raise RuntimeError("image sum did not converge")
        else:
            # Blurton, Kesselmeier & Gondan (2012): large-time series.
            self.mode = "large"
            c = mp.pi ** 2 * self.u / 2
            self.terms = []  # (k sin(k pi w) exp(-k^2 pi^2 u/2), (k pi / a)^2)
            k = 1
            while True:
                g = k * mp.exp(-k * k * c)
                b = (k * mp.pi / a) ** 2
                self.terms.append((g * mp.sin(k * mp.pi * w), b))
                if k >= 2 and g / b <= tol * abs(self.terms[0][0]) / self.terms[0][1] * mpf(2) ** -40:
                    break
                k += 1
            self.C = 2 * mp.pi / (a * a)
            self.aw = a * w
            self.ht = t / 2
            self.a2 = 2 * a
            self.a2w1 = 2 * a * (1 - w)

    def __call__(self, v):
        t, a, w = self.t, self.a, self.w
        if self.mode == "ig":
            rt = self.rt
            s = wald_cdf(t, a * w, -v, rt)
            for a2k, dp, dm in self.images:
                s += mp.exp(v * a2k) * wald_cdf(t, dp, -v, rt)
                s -= mp.exp(-v * a2k) * wald_cdf(t, dm, v, rt)
            return s
        vv = v * v
        s = mp.fsum(gs / (vv + b) for gs, b in self.terms)
        # p_lower(v, a, w) (Feller 1968), written with bounded exponentials; expm1 only
        # where the exponent is small
        x = v * self.a2
        if abs(x) < mpf("1e-3"):
            pl = (1 - w) if v == 0 else mp.expm1(v * self.a2w1) / mp.expm1(x)
        elif v > 0:
            e1 = mp.exp(-x)
            pl = (mp.exp(-x * w) - e1) / (1 - e1)
        else:
            pl = (mp.exp(v * self.a2w1) - 1) / (mp.exp(x) - 1)
        return pl - self.C * mp.exp(-v * self.aw - vv * self.ht) * s


def cdf0(t, v, a, w):
    if t <= 0:
        return mpf(0)
    return Cdf0(t, a, w)(v)


def cdf_ig_full(t, v, a, w):
    """Image/inverse-Gaussian sum with plain term-by-term stopping (for cross-checks at any u)."""
    s = wald_cdf(t, a * w, -v)
    k = 1
    tol = _tol()
    while True:
        tp = mp.exp(2 * v * a * k) * wald_cdf(t, a * (w + 2 * k), -v)
        tq = mp.exp(-2 * v * a * k) * wald_cdf(t, a * (2 * k - w), v)
        s += tp - tq
        if k > 2 and abs(tp) + abs(tq) <= tol * abs(s):
            break
        k += 1
    return s


def cdf_large_full(t, v, a, w):
    """Large-time series at any u (for cross-checks)."""
    return Cdf0(t, a, w, mode="large")(v)


# ---------------------------------------------------------------------------------------
# Relative-accuracy wrapper around mpmath.quad
# ---------------------------------------------------------------------------------------

def _clean_points(pts):
    out = []
    for p in sorted(set(pts)):
        if not out or p > out[-1]:
            out.append(p)
    return out


def rquad(f, pts, dps, method, scale=None):
    """mpmath.quad with the integrand normalised to O(1) so that quad's absolute error
    criterion becomes a relative one.  `scale`: known magnitude of the integrand, else the
    maximum over the midpoints of the sub-intervals is used."""
    pts = _clean_points(pts)
    if len(pts) < 2:
        return mpf(0)
    with mp.workdps(dps):
        if scale is None:
            vals = []
            for lo, hi in zip(pts[:-1], pts[1:]):
                if hi == mp.inf:
                    vals.append(abs(f(lo + 1 if lo >= 0 else lo / 2)))
                else:
                    vals.append(abs(f((lo + hi) / 2)))
            scale = max(vals)
        if scale == 0:
            return mpf(0)
        for attempt in range(2):
            sc = scale
            r, e = mp.quad(lambda x: f(x) / sc, pts, method=method, error=True)
            if r != 0 and (abs(r) < mpf(10) ** -12 or abs(r) > mpf(10) ** 12) and attempt == 0:
                scale = abs(r) * sc
                continue
            break
        STATS["nquad"] += 1
        if r != 0:
            rel = abs(e / r)
            if rel > STATS["max_quad_relerr"]:
                STATS["max_quad_relerr"] = rel
                STATS["where"] = STATS["context"]
        return r * sc


def phi(x):
    return mp.exp(-x * x / 2) * _consts()[1]


# ---------------------------------------------------------------------------------------
# Variability layers (all in the lower-bound frame)
# ---------------------------------------------------------------------------------------
#
# The outermost integral of every table entry is done with adaptive mpmath.quad (with its
# error estimate recorded).  Integrals nested inside another integral use a fixed composite
# Gauss-Legendre rule (mpmath's Gauss-Legendre nodes, CFG["gl_deg"] = 4 -> 24 nodes per
# sub-interval) on sub-intervals placed from the shape of the integrand; their accuracy is
# verified in main() by re-running a subset with 48 nodes and with adaptive mpmath.quad.

_GLN = {}


def gl_rule(deg):
    key = (deg, mp.mp.prec)
    r = _GLN.get(key)
    if r is None:
        r = mp.mp._gauss_legendre.calc_nodes(deg, mp.mp.prec)
        _GLN[key] = r
    return r


def fgl(f, pts):
    """Composite Gauss-Legendre rule with mpmath nodes."""
    pts = _clean_points(pts)
    nd = gl_rule(CFG["gl_deg"])
    s = mpf(0)
    for lo, hi in zip(pts[:-1], pts[1:]):
        h = (hi - lo) / 2
        c = (hi + lo) / 2
        s += h * mp.fsum(wt * f(c + h * x) for x, wt in nd)
    return s


def qdps(depth):
    """Working precision of an adaptive quadrature nested `depth` levels deep."""
    return CFG["dps"] + 3 * depth


def integ(f, pts, depth, scale=None, pts_adaptive=None):
    if depth == 0 or CFG["inner"] == "adaptive":
        return rquad(f, pts_adaptive or pts, qdps(depth), CFG["method"], scale)
    return fgl(f, pts)


def xstar(s, m, eta, a, w):
    """Location (in x, v = m + eta x) of the maximum of exp(-vaw - v^2 s/2) phi(x)."""
    return -eta * (a * w + m * s) / (1 + eta * eta * s)


def xsig(s, eta):
    """Width (in x) of exp(-vaw - v^2 s/2) phi(x) as a function of x."""
    return 1 / mp.sqrt(1 + eta * eta * s)


def dens1(t, m, eta, a, w, depth):
    """Density with drift variability: int f(t | m + eta x) phi(x) dx (numerical in x).
    f(t|v) = exp(-vaw - v^2 t/2) * S(t), S independent of v and evaluated once."""
    if t <= 0:
        return mpf(0)
    if eta == 0:
        return dens0(t, m, a, w)
    sf = S_factor(t, a, w)
    xs = xstar(t, m, eta, a, w)
    sg = xsig(t, eta)
    aw = a * w
    ht = t / 2
    c = _consts()[1]

    def g(x):
        v = m + eta * x
        return mp.exp(-v * aw - v * v * ht - x * x / 2) * c

    pts = [xs + sg * j for j in (-12, -4, 0, 4, 12)]
    return sf * integ(g, pts, depth, scale=g(xs), pts_adaptive=[xs - 12 * sg, xs, xs + 12 * sg])


def _log_mass_guess(s, m, eta, a, w):
    """Rough log of s * f_eta(s) (leading series term; used ONLY to place break points)."""
    u = s / (a * a)
    if u < 1:
        lf = mp.log(w) - mp.log(2 * mp.pi * u ** 3) / 2 - w * w / (2 * u)
    else:
        lf = mp.log(mp.pi * mp.sin(mp.pi * w)) - mp.pi ** 2 * u / 2
    k = eta * eta
    return (lf - 2 * mp.log(a) - mp.log(1 + k * s) / 2
            + (k * a * a * w * w - 2 * a * m * w - m * m * s) / (2 * (1 + k * s)) + mp.log(s))


def x_points_cdf(t, m, eta, a, w):
    """Break points for int F(t|m+eta x) phi(x) dx.  F(t|v) phi(x) = int_0^t f(s|v) phi(x) ds
    is a superposition over s of Gaussians in x centred at xstar(s) (monotone in s) with
    widths xsig(s) <= 1; only decision times s carrying non-negligible mass are used."""
    cs = []
    j = 0
    while j < 60:
        s = t * mpf(2) ** -j
        cs.append((_log_mass_guess(s, m, eta, a, w), xstar(s, m, eta, a, w), xsig(s, eta)))
        if s / (a * a) < mpf("0.002") and cs[-1][0] < max(c[0] for c in cs) - 80:
            break
        j += 1
    top = max(c[0] for c in cs)
    keep = [(c, sg) for (L, c, sg) in cs if L > top - 50]
    lo = min(c - 12 * sg for c, sg in keep)
    hi = max(c + 12 * sg for c, sg in keep)
    core_lo = min(c - 4 * sg for c, sg in keep)
    core_hi = max(c + 4 * sg for c, sg in keep)

    def lam(p):
        """Smallest width among the Gaussians that are not negligible at p."""
        near = [sg for c, sg in keep if abs(p - c) <= 6 * sg]
        return min(near) if near else mpf(1)

    pts = [core_lo]
    p = core_lo
    while len(pts) < 200:
        step = 3 * lam(p)
        # do not step over a region where narrower components live
        step = 3 * min([lam(p)] + [lam(p + step * f) for f in (0.25, 0.5, 0.75, 1)])
        if p + 1.5 * step >= core_hi:
            break
        p = p + step
        pts.append(p)
    pts.append(core_hi)
    return pts, lo, hi


def tail_points(f, start, end, direction):
    """Sub-intervals for a tail of a positive integrand f decaying from `start` towards
    `end` (direction = +1 or -1): steps of about 30 e-folds of f (numerical log-slope), at
    most 12 units long, until f has dropped by exp(-55) (the rest: one last interval)."""
    pts = []
    p = start
    L = mpf(0)
    f0 = f(p)
    if f0 == 0:
        return [end]
    L0 = mp.log(f0)
    while (end - p) * direction > 0 and len(pts) < 60:
        h = mpf(10) ** -4
        f1 = f(p + direction * h)
        slope = (mp.log(f0) - mp.log(f1)) / h if f1 > 0 else mpf(10) ** 6
        step = min(mpf(12), 30 / max(slope, mpf(10) ** -3))
        p = p + direction * step
        if (end - p) * direction <= 0:
            break
        pts.append(p)
        f0 = f(p)
        if f0 == 0:
            break
        L = mp.log(f0)
        if L < L0 - 55:
            break
    pts.append(end)
    return pts


def cdf1(t, m, eta, a, w, depth):
    """CDF with drift variability: int F(t | m + eta x) phi(x) dx (numerical)."""
    if t <= 0:
        return mpf(0)
    c = Cdf0(t, a, w)
    if eta == 0:
        return c(m)
    g = lambda x: c(m + eta * x) * phi(x)
    core, lo, hi = x_points_cdf(t, m, eta, a, w)
    pts = (tail_points(g, core[0], lo, -1) + core + tail_points(g, core[-1], hi, +1))
    return integ(g, pts, depth)


def w_points(t, m, eta, a, lo, hi):
    """Break points in the start point w' on [lo, hi] (lower-bound frame): walk from lo to hi
    with steps of ~3 e-folds of the integrand, using the numerical log-slope of S(t,w') plus
    the slope of the drift factor, and capping the step by the small-time width sqrt(u)."""
    u = t / (a * a)
    cap = min((hi - lo) / 2, 2 * mp.sqrt(u) if u < 1 else mpf("0.25"))
    k = eta * eta
    drift_slope = (k * a * a * (lo + hi) / 2 - a * m) / (1 + k * t)
    pts = [lo]
    p = lo
    h = (hi - lo) * mpf(10) ** -6
    L = Lmax = mpf(0)   # running log of the integrand relative to its value at lo
    while p < hi and len(pts) < 60:
        x0, x1 = max(p - h, lo / 2), min(p + h, (1 + hi) / 2)
        g = (mp.log(S_factor(t, a, x1)) - mp.log(S_factor(t, a, x0))) / (x1 - x0) + drift_slope
        step = min(cap, 8 / max(abs(g), mpf(10) ** -9))
        p = p + step
        L += g * step
        Lmax = max(L, Lmax)
        if L < Lmax - 70:   # the rest of the range is negligible: one last interval
            break
        pts.append(min(p, hi))
    pts.append(hi)
    return pts


def dens2(t, m, eta, a, w, sz, depth):
    if sz == 0:
        return dens1(t, m, eta, a, w, depth)
    if t <= 0:
        return mpf(0)
    lo, hi = w - sz / 2, w + sz / 2
    return integ(lambda ww: dens1(t, m, eta, a, ww, depth + 1), w_points(t, m, eta, a, lo, hi),
                 depth) / sz


def cdf2(t, m, eta, a, w, sz, depth):
    if sz == 0:
        return cdf1(t, m, eta, a, w, depth)
    if t <= 0:
        return mpf(0)
    lo, hi = w - sz / 2, w + sz / 2
    return integ(lambda ww: cdf1(t, m, eta, a, ww, depth + 1), w_points(t, m, eta, a, lo, hi),
                 depth) / sz


def t_points(t_lo, t_hi, d_min):
    """Geometric grid (ratio 3) on [t_lo, t_hi]; if t_lo == 0 the grid continues down to a
    time where the density is below exp(-120) of its scale (factor exp(-d^2/(2t))), then 0."""
    pts = [t_hi]
    stop = t_lo if t_lo > 0 else min(t_hi, d_min * d_min / 240)
    x = t_hi
    while x / 3 > stop:
        x = x / 3
        pts.append(x)
    pts.append(stop)
    if t_lo == 0:
        pts.append(mpf(0))
    return pts


def quantities(rt, bound, drift, a, w, ndt, eta, sz, st, want=("dens", "cdf")):
    """Return {"dens": density, "cdf": cdf} at response time rt for the given bound (mpf)."""
    if bound == "lower":
        m, wl = drift, w
    else:
        m, wl = -drift, 1 - w
    # mixing order (outer to inner): ndt_range, start_range, drift_sd
    out = {}
    if st == 0:
        t = rt - ndt
        if "dens" in want:
            out["dens"] = dens2(t, m, eta, a, wl, sz, 0)
        if "cdf" in want:
            out["cdf"] = cdf2(t, m, eta, a, wl, sz, 0)
        return out
    t_lo = max(rt - ndt - st / 2, mpf(0))
    t_hi = rt - ndt + st / 2
    d_min = a * (wl - sz / 2)
    tp = t_points(t_lo, t_hi, d_min)
    if "dens" in want:
        # average over tau of f(rt - tau), as an integral over t = rt - tau
        out["dens"] = integ(lambda t: dens2(t, m, eta, a, wl, sz, 1), tp, 0) / st
    if "cdf" in want:
        if eta > 0 and sz == 0:
            out["cdf"] = cdf_st_fubini(t_lo, t_hi, m, eta, a, wl, sz, st, d_min)
        else:
            out["cdf"] = integ(lambda t: cdf2(t, m, eta, a, wl, sz, 1), tp, 0) / st
    return out


def cdf_st_fubini(t_lo, t_hi, m, eta, a, wl, sz, st, d_min):
    """(1/st) int_{t_lo}^{t_hi} F(t) dt = (1/st) int_0^{t_hi} f(s) (t_hi - max(s, t_lo)) ds."""
    sp = t_points(mpf(0), t_hi, d_min)
    if t_lo > 0:
        sp.append(t_lo)
    kern = lambda s: t_hi - (s if s > t_lo else t_lo)
    return integ(lambda s: dens2(s, m, eta, a, wl, sz, 1) * kern(s), sp, 0) / st


# ---------------------------------------------------------------------------------------
# Design of the reference points
# ---------------------------------------------------------------------------------------

def q2(x, bits):
    return round(x * 2 ** bits) / 2 ** bits


def r6(x):
    return float("%.6g" % x)


def design(rng):
    pts = []

    def add(rt, bound, drift, a, w, ndt, eta, sz, st, tag):
        pts.append(dict(rt=float(rt), bound=bound, drift=float(drift), boundary=float(a),
                        start=float(w), ndt=float(ndt), drift_sd=float(eta),
                        start_range=float(sz), ndt_range=float(st), tag=tag))

    # (1) designed corner cases
    for bound in ("lower", "upper"):
        # very small u, start close to / far from the bound being hit
        for wb in (0.05, 0.95):
            for (a, drift, eta) in ((0.3, 0.0, 0.0), (1.0, 3.0, 0.0), (5.0, -5.0, 1.5),
                                    (2.0, 8.0, 0.5)):
                w = wb if bound == "lower" else 1 - wb
                ndt = 0.25
                rt = ndt + 1e-3 * a * a
                add(rt, bound, drift, a, w, ndt, eta, 0, 0, "small-u")
        # deep tails: log density far below -700
        for (u, a, drift, eta, w) in ((20, 5.0, 8.0, 0.0, 0.5), (20, 5.0, -8.0, 0.0, 0.3),
                                      (15, 4.0, 6.0, 0.0, 0.7), (20, 3.0, 8.0, 0.2, 0.5),
                                      (10, 5.0, 7.0, 0.05, 0.6), (20, 0.3, 8.0, 0.0, 0.5),
                                      (12, 2.5, -7.5, 0.0, 0.9)):
            ndt = 0.125
            add(ndt + u * a * a, bound, drift, a, w, ndt, eta, 0, 0, "tail")
    # (2) random base points without start/ndt variability
    n_base = 500 - len(pts)
    for i in range(n_base):
        bound = "upper" if i % 2 == 0 else "lower"
        u = 10 ** rng.uniform(-3, math.log10(20))
        drift = r6(rng.uniform(-8, 8))
        a = r6(10 ** rng.uniform(math.log10(0.3), math.log10(5)))
        w = min(max(q2(rng.uniform(0.05, 0.95), 12), 0.05), 0.95)
        ndt = q2(rng.uniform(0, 0.5), 10)
        eta = 0.0 if rng.random() < 1 / 3 else r6(rng.uniform(0, 3))
        add(ndt + u * a * a, bound, drift, a, w, ndt, eta, 0, 0, "base")
    # (3) start_range and/or ndt_range
    kinds = ["sz"] * 40 + ["st"] * 56 + ["szst"] * 24
    for i, kind in enumerate(kinds):
        bound = "upper" if i % 2 == 0 else "lower"
        u = 10 ** rng.uniform(-3, math.log10(20))
        drift = r6(rng.uniform(-8, 8))
        a = r6(10 ** rng.uniform(math.log10(0.3), math.log10(5)))
        w = min(max(q2(rng.uniform(0.05, 0.95), 12), 0.05), 0.95)
        eta = r6(rng.uniform(0, 3)) if rng.random() < 2 / 3 else 0.0
        if kind == "szst":
            # start_range and ndt_range jointly; with drift_sd as well for a few points only
            # (cost), with moderate u
            u = 10 ** rng.uniform(math.log10(0.02), math.log10(20))
            eta = r6(rng.uniform(0.2, 1.0)) if i % 12 == 0 else 0.0
            if eta > 0:
                u = 10 ** rng.uniform(math.log10(0.5), math.log10(2))
        sz = st = 0.0
        if "sz" in kind:
            smax = min(0.5, 2 * min(w, 1 - w) - 0.02)
            sz = max(q2(rng.uniform(0.02, smax), 11), 2.0 ** -11)
        if "st" in kind:
            st = max(q2(rng.uniform(0.02, 0.3), 9), 2.0 ** -9)
            ndt = q2(rng.uniform(st / 2, 0.5), 10)
            if ndt - st / 2 < 0:
                ndt = st / 2
            if i % 7 == 3 and kind == "st":   # rt inside [ndt - st/2, ndt + st/2]
                rt = ndt - st / 2 + rng.uniform(0.15, 0.95) * st
            else:
                rt = ndt + st / 2 + u * a * a
        else:
            ndt = q2(rng.uniform(0, 0.5), 10)
            rt = ndt + u * a * a
        add(rt, bound, drift, a, w, ndt, eta, sz, st, kind)
    # (4) start_range reaching close to the bound, at very small u
    for bound in ("lower", "upper"):
        for (a, drift, eta) in ((1.0, 2.0, 0.0), (0.5, -4.0, 1.0)):
            wb, sz = 0.080078125, 0.1201171875  # w' in [0.02, 0.14]
            w = wb if bound == "lower" else 1 - wb
            ndt = 0.0
            add(1e-3 * a * a, bound, drift, a, w, ndt, eta, sz, 0, "sz-edge")
    for p in pts:
        assert 0 < p["start"] < 1
        assert p["start"] - p["start_range"] / 2 > 0 and p["start"] + p["start_range"] / 2 < 1
        assert p["ndt"] - p["ndt_range"] / 2 >= 0
        assert p["rt"] - (p["ndt"] - p["ndt_range"] / 2) > 0
    return pts


def point_values(p, want=("dens", "cdf")):
    return quantities(mpf(p["rt"]), p["bound"], mpf(p["drift"]), mpf(p["boundary"]),
                      mpf(p["start"]), mpf(p["ndt"]), mpf(p["drift_sd"]),
                      mpf(p["start_range"]), mpf(p["ndt_range"]), want)


# ---------------------------------------------------------------------------------------
# Self-consistency checks
# ---------------------------------------------------------------------------------------

def relerr(x, y):
    x, y = mpf(x), mpf(y)
    if x == y:
        return mpf(0)
    return abs(x - y) / max(abs(x), abs(y))


def dens_upper_or_lower(t, bound, v, a, w):
    return dens0(t, v, a, w) if bound == "lower" else dens0(t, -v, a, 1 - w)


def cdf_upper_or_lower(t, bound, v, a, w):
    return cdf0(t, v, a, w) if bound == "lower" else cdf0(t, -v, a, 1 - w)


def check_series(rng, report):
    worst = mpf(0)
    for u in ("0.3", "0.45", "0.7", "1", "1.4", "2", "3"):
        for w in ("0.05", "0.3", "0.5", "0.77", "0.95", "0.999"):
            s, l = fstd_small(mpf(u), mpf(w)), fstd_large(mpf(u), mpf(w))
            e = relerr(s, l)
            assert e < mpf("1e-25"), (u, w, e)
            worst = max(worst, e)
    report.append(("density small-time vs large-time series (u in 0.3..3, 42 pts)", worst))

    worst = mpf(0)
    for _ in range(40):
        u = mpf(10 ** rng.uniform(math.log10(0.05), math.log10(3)))
        v, a, w = mpf(rng.uniform(-8, 8)), mpf(10 ** rng.uniform(-0.52, 0.7)), mpf(rng.uniform(0.02, 0.98))
        t = u * a * a
        x, y = cdf_ig_full(t, v, a, w), cdf_large_full(t, v, a, w)
        e = relerr(x, y)
        assert e < mpf("1e-25"), (u, v, a, w, e)
        worst = max(worst, e)
        # the production evaluator (with a-priori image skipping) against the plain sum
        worst = max(worst, relerr(cdf0(t, v, a, w), x))
    report.append(("CDF inverse-Gaussian image sum vs large-time series (u in 0.05..3, 40 pts)", worst))

    worst = mpf(0)
    for _ in range(20):
        u = mpf(10 ** rng.uniform(-3, math.log10(20)))
        v, a, w = mpf(rng.uniform(-8, 8)), mpf(10 ** rng.uniform(-0.52, 0.7)), mpf(rng.uniform(0.05, 0.95))
        bound = rng.choice(["upper", "lower"])
        t = u * a * a
        f = lambda s: dens_upper_or_lower(s, bound, v, a, w)
        d = a * (w if bound == "lower" else 1 - w)
        q = rquad(f, t_points(mpf(0), t, d), 40, "tanh-sinh")
        e = relerr(q, cdf_upper_or_lower(t, bound, v, a, w))
        worst = max(worst, e)
    report.append(("CDF vs quad of density over (0,t] (20 pts)", worst))

    worst_ig = worst_q = mpf(0)
    for _ in range(12):
        v, a, w = mpf(rng.uniform(-4, 4)), mpf(10 ** rng.uniform(-0.52, 0.7)), mpf(rng.uniform(0.05, 0.95))
        v = v if _ % 4 else mpf(0)
        pl = p_lower(v, a, w)
        assert relerr(pl, 1 - p_upper(v, a, w)) < mpf("1e-30")
        # image sum at a very large time (u = 60: the remaining mass is < e^-290)
        worst_ig = max(worst_ig, relerr(cdf_ig_full(60 * a * a, v, a, w), pl))
        pts = [mpf(0)] + [a * a * c for c in (0.01, 0.05, 0.2, 0.5, 1, 2, 5, 10)] + [mp.inf]
        q = rquad(lambda s: dens0(s, v, a, w), pts, 40, "tanh-sinh")
        worst_q = max(worst_q, relerr(q, pl))
    report.append(("F_lower(inf): image sum at u=60 vs closed-form P_lower (12 pts)", worst_ig))
    report.append(("F_lower(inf): quad of density over (0,inf) vs P_lower (12 pts)", worst_q))


def eta_closed_form_lower(t, m, eta, a, w):
    """Blurton, Kesselmeier & Gondan (2017) closed form (cross-check only)."""
    u = t / (a * a)
    e2 = eta * eta
    return (1 / (a * a)) / mp.sqrt(1 + e2 * t) * mp.exp(
        (e2 * a * a * w * w - 2 * a * m * w - m * m * t) / (2 * (1 + e2 * t))) * fstd(u, w)


# ---------------------------------------------------------------------------------------
# Moments
# ---------------------------------------------------------------------------------------

def coth(x):
    return mp.cosh(x) / mp.sinh(x)


def moments_closed(v, a, w):
    """Grasman, Wagenmakers & van der Maas (2009)."""
    if v == 0:
        return (w, w * (1 - w) * a * a, a * a * (1 - w * w) / 3, a * a * (1 - (1 - w) ** 2) / 3)
    pu = p_upper(v, a, w)
    mean = (a * pu - a * w) / v
    mu = (a * coth(v * a) - a * w * coth(v * a * w)) / v
    ml = (a * coth(v * a) - a * (1 - w) * coth(v * a * (1 - w))) / v
    return (pu, mean, mu, ml)


def moments_numeric(v, a, w):
    pts = [mpf(0)] + [a * a * c for c in (0.01, 0.05, 0.2, 1, 4)]
    if v != 0:
        pts += [a / abs(v) * c for c in (0.1, 1)]
    pts.append(mp.inf)
    fu = lambda t: dens0(t, -v, a, 1 - w)
    fl = lambda t: dens0(t, v, a, w)
    pu = rquad(fu, pts, 30, "tanh-sinh")
    pl = rquad(fl, pts, 30, "tanh-sinh")
    mu = rquad(lambda t: t * fu(t), pts, 30, "tanh-sinh")
    ml = rquad(lambda t: t * fl(t), pts, 30, "tanh-sinh")
    return pu, pl, mu, ml


def moment_sets(rng):
    sets = [(0.0, 1.0, 0.5), (0.0, 2.0, 0.3), (0.0, 0.5, 0.9), (0.0, 4.0, 0.1),
            (1e-6, 1.0, 0.5), (-1e-6, 2.0, 0.3), (1e-6, 4.0, 0.8), (3e-4, 1.5, 0.6),
            (5.0, 4.0, 0.5), (-5.0, 4.0, 0.5), (5.0, 0.5, 0.1), (-5.0, 0.5, 0.9),
            (2.0, 1.0, 0.5), (-0.7, 2.5, 0.35)]
    while len(sets) < 40:
        v = r6(rng.uniform(-5, 5))
        a = r6(10 ** rng.uniform(math.log10(0.5), math.log10(4)))
        w = q2(rng.uniform(0.1, 0.9), 12)
        sets.append((v, a, w))
    return sets


# ---------------------------------------------------------------------------------------

def fmt(x):
    return repr(float(x))


def main():
    t0 = time.time()
    rng = random.Random(SEED)
    report = []
    quick = "--quick" in sys.argv

    STATS["context"] = "series checks"
    check_series(random.Random(SEED + 1), report)
    print("series checks done (%.0fs)" % (time.time() - t0), flush=True)
    series_quad = (STATS["max_quad_relerr"], STATS["where"])
    STATS.update(max_quad_relerr=mpf(0), where="", nquad=0)

    pts = design(rng)
    if quick:
        pts = pts[::10]
    rows = []
    eta_cf = mpf(0)
    eta_cf_log = mpf(0)
    tk = {}
    for i, p in enumerate(pts):
        t1 = time.time()
        STATS["context"] = "table row %d" % i
        res = point_values(p)
        d, c = res["dens"], res["cdf"]
        assert d > 0, p
        assert 0 <= c <= 1, p
        ld = mp.log(d)
        p["_ld"], p["_cdf"] = ld, c
        rows.append(p)
        if p["drift_sd"] > 0 and p["start_range"] == 0 and p["ndt_range"] == 0:
            a, w, v = mpf(p["boundary"]), mpf(p["start"]), mpf(p["drift"])
            t = mpf(p["rt"]) - mpf(p["ndt"])
            if p["bound"] == "lower":
                cf = eta_closed_form_lower(t, v, mpf(p["drift_sd"]), a, w)
            else:
                cf = eta_closed_form_lower(t, -v, mpf(p["drift_sd"]), a, 1 - w)
            eta_cf = max(eta_cf, relerr(cf, d))
            eta_cf_log = max(eta_cf_log, abs(mp.log(cf) - ld))
        key = (p["tag"], p["drift_sd"] > 0)
        p["_time"] = time.time() - t1
        tk[key] = tk.get(key, 0) + p["_time"]
        if i % 50 == 0:
            print("point %d/%d  %.0fs" % (i, len(pts), time.time() - t0), flush=True)
        mp.mp._gauss_legendre.interval_count.clear()
        mp.mp._tanh_sinh.interval_count.clear()
    table_quad = (STATS["max_quad_relerr"], STATS["where"], STATS["nquad"])
    STATS.update(max_quad_relerr=mpf(0), where="", nquad=0, context="checks")
    report.append(("drift_sd density: numerical v-integral vs closed form (BKG 2017), rel",
                   eta_cf))
    report.append(("   same, |log difference|", eta_cf_log))
    print("table done (%.0fs)" % (time.time() - t0), flush=True)
    for k in sorted(tk):
        print("   time", k, "%.1fs" % tk[k])

    out = os.path.join(HERE, "first_passage_reference.csv")
    with open(out, "w") as fh:
        fh.write("rt,bound,drift,boundary,start,ndt,drift_sd,start_range,ndt_range,"
                 "log_density,cdf\n")
        for p in rows:
            fh.write(",".join([fmt(p["rt"]), p["bound"], fmt(p["drift"]), fmt(p["boundary"]),
                               fmt(p["start"]), fmt(p["ndt"]), fmt(p["drift_sd"]),
                               fmt(p["start_range"]), fmt(p["ndt_range"]), fmt(p["_ld"]),
                               fmt(p["_cdf"])]) + "\n")

    # ---- checks on the mixtures --------------------------------------------------------
    crng = random.Random(SEED + 2)

    def frame(p):
        v, w = mpf(p["drift"]), mpf(p["start"])
        return (v, w) if p["bound"] == "lower" else (-v, 1 - w)

    # (a) ndt_range density by tau-quadrature vs the exact antiderivative
    #     [F(t_hi) - F(t_lo)] / st, evaluated at higher precision; only points where the
    #     difference is well conditioned (F(t_lo) < 0.9 F(t_hi)).
    worst = mpf(0)
    n_a = 0
    cands = [p for p in rows if p["ndt_range"] > 0 and p["start_range"] == 0]
    save = dict(CFG)
    CFG.update(dps=28)
    for p in crng.sample(cands, len(cands)):
        if n_a >= (8 if not quick else 3):
            break
        m, wl = frame(p)
        rt, nd, st = mpf(p["rt"]), mpf(p["ndt"]), mpf(p["ndt_range"])
        t_hi, t_lo = rt - nd + st / 2, max(rt - nd - st / 2, mpf(0))
        a, eta = mpf(p["boundary"]), mpf(p["drift_sd"])
        f_hi = cdf1(t_hi, m, eta, a, wl, 0)
        f_lo = cdf1(t_lo, m, eta, a, wl, 0)
        if not f_lo < mpf("0.9") * f_hi:
            continue
        worst = max(worst, relerr((f_hi - f_lo) / st, mp.exp(p["_ld"])))
        n_a += 1
    CFG.clear(); CFG.update(save)
    report.append(("ndt_range density: tau-quadrature vs [F(t_hi)-F(t_lo)]/st (%d pts)" % n_a,
                   worst))

    # (b) drift_sd CDF (v-quadrature of fixed-drift CDF) vs time-quadrature of the closed-form
    #     drift_sd density
    worst = mpf(0)
    cands = [p for p in rows if p["drift_sd"] > 0 and p["start_range"] == 0 and p["ndt_range"] == 0]
    cands = crng.sample(cands, min(len(cands), 10 if not quick else 3))
    for p in cands:
        a, eta = mpf(p["boundary"]), mpf(p["drift_sd"])
        m, wl = frame(p)
        t = mpf(p["rt"]) - mpf(p["ndt"])
        q = rquad(lambda s: eta_closed_form_lower(s, m, eta, a, wl) if s > 0 else mpf(0),
                  t_points(mpf(0), t, a * wl), 34, "tanh-sinh")
        worst = max(worst, relerr(q, p["_cdf"]))
    report.append(("drift_sd CDF vs time-quad of closed-form drift_sd density (%d pts)" % len(cands),
                   worst))

    # (c) Fubini form vs direct tau-average of the CDF (drift_sd and ndt_range, no sz)
    worst = mpf(0)
    cands = [p for p in rows if p["ndt_range"] > 0 and p["drift_sd"] > 0 and p["start_range"] == 0]
    cands = crng.sample(cands, min(len(cands), 4 if not quick else 1))
    for p in cands:
        a, eta = mpf(p["boundary"]), mpf(p["drift_sd"])
        m, wl = frame(p)
        rt, nd, st = mpf(p["rt"]), mpf(p["ndt"]), mpf(p["ndt_range"])
        t_lo, t_hi = max(rt - nd - st / 2, mpf(0)), rt - nd + st / 2
        save = dict(CFG)
        CFG.update(dps=26)
        direct = integ(lambda t: cdf1(t, m, eta, a, wl, 1), t_points(t_lo, t_hi, a * wl),
                       0) / st
        CFG.clear(); CFG.update(save)
        worst = max(worst, relerr(direct, p["_cdf"]))
    report.append(("ndt_range+drift_sd CDF: Fubini form vs direct tau-average (%d pts)" % len(cands),
                   worst))

    # (d) quadrature rules and precision.
    def recompute(sub, label, **cfg):
        save = dict(CFG)
        CFG.update(cfg)
        wd = wc = mpf(0)
        try:
            for p in sub:
                res = point_values(p)
                wd = max(wd, relerr(res["dens"], mp.exp(p["_ld"])))
                wc = max(wc, relerr(res["cdf"], p["_cdf"]))
        finally:
            CFG.clear(); CFG.update(save)
        report.append(("%s, density (%d pts)" % (label, len(sub)), wd))
        report.append(("%s, CDF" % label, wc))

    nested = [p for p in rows if (p["drift_sd"] > 0) + (p["start_range"] > 0) + (p["ndt_range"] > 0) >= 2]
    one_d = [p for p in rows if (p["drift_sd"] > 0) + (p["start_range"] > 0) + (p["ndt_range"] > 0) == 1]
    # (d1) 1-D integrals: adaptive Gauss-Legendre at dps 20 vs tanh-sinh at dps 32
    recompute(crng.sample(one_d, min(len(one_d), 10 if not quick else 2)),
              "1-D mixtures: GL@dps20 vs tanh-sinh@dps32", method="tanh-sinh", dps=32)
    # (d2) nested integrals: inner fixed 24-node rule vs 48-node rule, outer at dps 26
    #      (a deterministic selection of the cheaper nested cases)
    def u_of(p):
        return (p["rt"] - p["ndt"]) / p["boundary"] ** 2
    st_eta = [p for p in nested if p["tag"] == "st"]
    sz_eta = [p for p in nested if p["tag"] == "sz" and u_of(p) > 1]
    szst = [p for p in nested if p["tag"] == "szst" and p["drift_sd"] == 0 and u_of(p) > 1]
    sub = (crng.sample(st_eta, min(2, len(st_eta))) + crng.sample(sz_eta, min(2, len(sz_eta)))
           + crng.sample(szst, min(2, len(szst))))
    recompute(sub if not quick else sub[:1],
              "nested: inner 24-node GL@dps20 vs 48-node GL@dps26", gl_deg=5, dps=26)
    # (d3) nested integrals: inner fixed rule vs adaptive tanh-sinh everywhere
    recompute(crng.sample(st_eta, min(2, len(st_eta))) if not quick else st_eta[:1],
              "nested: inner fixed GL vs all-adaptive tanh-sinh@dps24", inner="adaptive",
              method="tanh-sinh", dps=24)
    print("mixture checks done (%.0fs)" % (time.time() - t0), flush=True)

    # ---- moments ------------------------------------------------------------------------
    STATS["context"] = "moments"
    mrows = []
    worst = [mpf(0)] * 4
    mrng = random.Random(SEED + 3)
    for (v, a, w) in moment_sets(mrng):
        V, A, Wm = mpf(v), mpf(a), mpf(w)
        pu, pl, mu, ml = moments_numeric(V, A, Wm)
        num = (pu, mu + ml, mu / pu, ml / pl)
        cf = moments_closed(V, A, Wm)
        for j in range(4):
            worst[j] = max(worst[j], relerr(num[j], cf[j]))
        worst[0] = max(worst[0], relerr(pu + pl, 1))
        mrows.append((v, a, w) + num)
    out2 = os.path.join(HERE, "first_passage_moments.csv")
    with open(out2, "w") as fh:
        fh.write("drift,boundary,start,p_upper,mean_dt,mean_dt_upper,mean_dt_lower\n")
        for r in mrows:
            fh.write(",".join(fmt(x) for x in r) + "\n")
    for name, e in zip(("p_upper (and p_upper+p_lower=1)", "mean_dt", "mean_dt_upper",
                        "mean_dt_lower"), worst):
        report.append(("moments, numerical vs closed form: " + name, e))

    # ---- summary -------------------------------------------------------------------------
    lds = [p["_ld"] for p in rows]
    print()
    print("rows: %d  (sz=st=0: %d, with start_range/ndt_range: %d)" % (
        len(rows), sum(1 for p in rows if p["start_range"] == 0 and p["ndt_range"] == 0),
        sum(1 for p in rows if p["start_range"] > 0 or p["ndt_range"] > 0)))
    print("min log_density: %s   max: %s   rows below -700: %d" % (
        mp.nstr(min(lds), 17), mp.nstr(max(lds), 17), sum(1 for x in lds if x < -700)))
    print("cdf values below 1e-300: %d" % sum(1 for p in rows if p["_cdf"] < mpf("1e-300")))
    print("moment rows: %d" % len(mrows))
    print("table: max adaptive-quad relative error estimate %s (%s) over %d quadratures" % (
        mp.nstr(table_quad[0], 3), table_quad[1], table_quad[2]))
    print("checks/moments: max adaptive-quad relative error estimate %s (%s); series checks %s" % (
        mp.nstr(STATS["max_quad_relerr"], 3), STATS["where"], mp.nstr(series_quad[0], 3)))
    for name, e in report:
        print("  %-86s %s" % (name, mp.nstr(e, 3)))
    print("total time %.0fs" % (time.time() - t0))


if __name__ == "__main__":
    main()
