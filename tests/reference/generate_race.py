#!/usr/bin/env python3
"""Generate high-precision reference tables for race models of choice and response time:
races of Wiener (single-bound diffusion) accumulators and of linear ballistic accumulators.

Offline tool: the Rust tests only read the two CSV files written next to this script.

    pip install mpmath        # (gmpy2 is optional; mpmath uses it automatically if present)
    python3 tests/reference/generate_race.py            # full tables
    python3 tests/reference/generate_race.py --quick    # a subset, for trying changes (writes
                                                        # the CSVs too; do not commit those)

Deterministic: fixed seeds, no parallelism; every quantity is computed by mpmath.

Models (the parameterisation the Rust code uses)
------------------------------------------------
Wiener race accumulator (Logan, Van Zandt, Verbruggen & Wagenmakers 2014; Tillman, Van Zandt
& Logan 2020): Brownian motion from 0 with drift v (any real number), unit diffusion
coefficient, one absorbing bound alpha > 0.  Its first-passage time at decision time u > 0
(Wald 1947, the inverse-Gaussian law):
    f(u) = alpha / sqrt(2 pi u^3) * exp(-(alpha - v u)^2 / (2 u))
    F(u) = Phi((v u - alpha)/sqrt(u)) + exp(2 v alpha) * Phi(-(v u + alpha)/sqrt(u))
    S(u) = 1 - F(u)
F is defective for v < 0: F(inf) = exp(2 v alpha) (the probability that Brownian motion with
negative drift ever reaches the level alpha; Cox & Miller 1965); F(inf) = 1 for v >= 0.

Linear ballistic accumulator, LBA (Brown & Heathcote 2008): start point x ~ Uniform[0, A],
drift d ~ Normal(v, s^2), threshold b > A; finishing time (b - x)/d when d > 0, never when
d <= 0.  Closed forms (Brown & Heathcote 2008), z1 = (b - A - u v)/(u s), z2 = (b - u v)/(u s):
    f(u) = (1/A) [ -v Phi(z1) + s phi(z1) + v Phi(z2) - s phi(z2) ]
    F(u) = 1 + ((b - A - u v)/A) Phi(z1) - ((b - u v)/A) Phi(z2)
             + (u s/A) phi(z1) - (u s/A) phi(z2)
    S(u) = 1 - F(u),   F(inf) = Phi(v/s)
and, from the definition (conditioning on the start point x; the same model, not the closed
form):
    f(u) = (1/A) int_0^A ((b - x)/u^2) phi(((b - x)/u - v)/s) / s dx
    F(u) = (1/A) int_0^A Phi((v - (b - x)/u)/s) dx
    S(u) = (1/A) int_0^A Phi(((b - x)/u - v)/s) dx            (= 1 - F(u))

Race (Brown & Heathcote 2008 for the LBA; Logan et al. 2014 for the Wiener race): N
accumulators that share alpha, or (A, b, s), one drift v_k each, plus a non-decision time
tau.  Winner k at response time t, u = t - tau:
    g_k(t) = f_k(u) * prod_{j != k} S_j(u)
    P(k)   = int_tau^inf g_k(t) dt
    P(no finisher) = prod_j (1 - F_j(inf))
Phi is the standard normal distribution function, evaluated as erfc(-x/sqrt 2)/2 (through
the upper tail erfc(x/sqrt 2)/2 for x > 0 so that both tails keep full relative accuracy);
phi is the standard normal density.

How each tabulated number is computed (independently of the closed forms where possible)
-----------------------------------------------------------------------------------------
* Wiener ln f: the closed form above, evaluated as a logarithm with 20 extra digits (it is
  exact; the table is there to catch floating-point cancellation in the Rust code).
* Wiener F(u): mpmath.quad (tanh-sinh; Takahasi & Mori 1974) of f over (0, u].
  Wiener S(u): mpmath.quad of f over [u, inf) plus the never-finishing mass
  1 - exp(2 v alpha) for v < 0 (-expm1(2 v alpha)).  The two integrals are separate, so
  F + S = 1 is a check.
* LBA ln f, F(u), S(u): mpmath.quad over the start point x (the three integrals above).
* ln_cdf = ln F when F <= 1/2, else log1p(-S); ln_survival = ln S when S <= 1/2, else
  log1p(-F) (so values near 0 keep their relative accuracy, e.g. ln S = -1e-100).
* Race ln g_k(t): ln f_k(u) + sum_{j != k} ln S_j(u), with ln f and ln S computed exactly as
  for the accumulator table (Wiener: ln f closed, S by time quadrature; LBA: start-point
  quadratures).
* Race P(k): mpmath.quad (tanh-sinh) of g_k over decision time u in (0, inf).  Inside this
  integral f and S are evaluated from the closed forms (two nested quadratures per node would
  be too slow); the closed forms are first verified against the quadratures on every
  accumulator row.  For the LBA density inside the integral the same closed form is written as
  f = (1/A)[v (Phi(z2) - Phi(z1)) + s (phi(z1) - phi(z2))] with the Phi difference taken in
  the tail where it is small and phi(z1) - phi(z2) = -phi(z1) expm1(-(z2 - z1)(z2 + z1)/2),
  z2 - z1 = A/(u s); the
  survivals as the literal 1 - F expanded (Wiener: Phi((alpha - v u)/sqrt u)
  - exp(2 v alpha) Phi(-(v u + alpha)/sqrt u), using 1 - Phi(x) = Phi(-x)).
  P(no finisher) from the closed F_j(inf) (1 - exp(2 v alpha) for v < 0, else 0; Phi(-v/s)).

Every closed-form evaluation starts at 40 digits and is accepted at d digits only when
(1) the digits lost to cancellation, log10(largest term of the sum / |value|), leave at least
37, and (2) a second evaluation at d + 20 digits agrees to 1e-32 relative; otherwise d is
raised (to what (1) asks for, at least doubled).  (1) is needed because Phi(z) for large z is
rounded to exactly 1 at every precision below -log10(1 - Phi(z)), so (2) alone can be fooled.

Quadrature layout.  Time integrals (over decision time u) are done in y = ln u over a
grid-scanned range: the log of the integrand (times u) is sampled every 0.1 in y (race:
u from 1e-5 to 1e6; accumulator F(u): 30 e-folds below ln u; tail from u: 50 e-folds above),
the range where it is within 110 e-folds of its maximum is kept, cut every 1.0 in y and
bisected further until the log integrand changes by less than 12 over each piece.  The end
pieces are integrated in u, so that a finite end (u itself) is hit exactly: (0, u_first] in u;
[u_last, u] in u; [u_last, inf) in z with u = u_last / z^2, z in (0, 1], which turns the
algebraic tails (u^-3/2 for a Wiener accumulator with v = 0, u^-2 for the LBA) into smooth
integrands.  (mpmath's own map of [a, inf) leaves an x^-1/2 endpoint singularity there that
tanh-sinh resolves only to about 1e-18.)  Start-point integrals (LBA) have a concave log
integrand on [0, A]; they are cut at its maximum (golden section) and where it has dropped by
1, 3, 8, 16, 30, 50, 80 and 115 e-folds.  Every integrand is divided by its maximum times an
estimate of its width (end pieces: by the largest of a few samples, redone with their own
value as the scale when that is far off), so mpmath's absolute error criterion acts as a
relative one.  Working precision of all quadratures: 30 significant digits (mpmath adds 20 bits
inside quad).  mpmath's tanh-sinh error estimate is replaced by the conservative
|I_k - I_(k-1)| (difference of the last two levels; see _ts_conservative_error).  Subsets are
recomputed at 45 digits as a check (report at the end).

Checks (asserted; the largest discrepancies are printed at the end)
* Wiener F by quadrature vs the closed-form F (at escalating precision): relative agreement
  1e-20 where F > 1e-250 (all rows are compared and reported); the same for S = 1 - F.
* Wiener F(u) + S(u) = 1 from the two separate integrals; F(u) + int_u^inf f = F(inf) (the
  closed total mass exp(2 v alpha) for v < 0, 1 otherwise).
* LBA f, F and S by start-point quadrature vs the closed forms: relative 1e-20.
* The closed forms used inside the race integrals vs the literal closed forms.
* Race ln g_k at the tabulated t: quadrature-based vs closed-form-based values.
* Race: sum_k P(k) + P(no finisher) = 1 to 1e-15; P(k) equal across options when all drifts
  are equal.

Outputs (in this directory; every number written as repr(float(x)), i.e. the double nearest to
the mpmath value, 17 significant digits at most)
---------------------------------------------------------------------------------------------
race_accumulators.csv   model,t,threshold,start_range,drift,drift_sd,ln_density,ln_cdf,
                        ln_survival
    model        wiener | lba
    t            decision time u (s)
    threshold    wiener: alpha; lba: b
    start_range  wiener: 0; lba: A
    drift        v
    drift_sd     wiener: 0; lba: s
    ln_density   ln f(t)
    ln_cdf       ln F(t)
    ln_survival  ln S(t) = ln(1 - F(t))
  Rows whose ln f < -700 are left out.  Parameter ranges: t in [0.02, 20]; wiener v in
  [-3, 8], alpha in [0.3, 4]; lba A in [0.05, 2], b - A in [0.05, 3], v in [-2, 6],
  s in [0.3, 2].

race_choices.csv        model,ndt,threshold,start_range,drift_sd,drifts,option,t,
                        ln_race_density,choice_probability
    ndt                 tau (s)
    threshold, start_range, drift_sd   as above (shared by all accumulators)
    drifts              v_0;v_1;...;v_{N-1}, N = 2, 3 or 4
    option              k, 0-based index of the winning accumulator
    t                   response time (s), t > ndt
    ln_race_density     ln g_k(t)
    choice_probability  P(k) for this parameter set (the same on every row of the set/option)
  ndt and t are multiples of 2^-12, so t - ndt is exact in double arithmetic.  For each
  parameter set the response times are tau + m u*, m in {0.4, 1, 2.5, 6}, u* the mode of the
  first-finisher density (sum_k g_k, on the 0.1-in-ln-u scan grid), rounded to a multiple of
  2^-12.  Rows are grouped by parameter set, then t, then option.  P(no finisher) is not
  written; it is 1 - sum_k P(k) of the set.
  Parameter sets, 60 per model (see race_sets_wiener / race_sets_lba): hand-picked sets first
  (all drifts equal, including all 0 and all negative; one negative drift; a 0 drift; large
  contrasts; alpha from 0.3 to 4 or A down to 0.05), then random ones: N in {2, 3, 4};
  wiener alpha in [0.5, 3], drifts in [-0.5, 4.5]; lba A in [0.1, 1.5], b - A in [0.1, 1.5],
  s in [0.3, 1.5], drifts in [0, 4]; with probability 0.3 one drift replaced by a negative
  one, with probability 0.1 all drifts equal; ndt in [0.1, 0.5] (lba [0.1, 0.4]).

All parameter values are first rounded to a few significant digits and written to the CSV;
everything is computed for exactly those doubles.  Design points in the tails were placed by
solving (closed form, bisection) for the t at which ln f or ln S reaches a target; that only
chooses where to look, the tabulated values are computed as described above.
"""

import math
import os
import random
import sys
import time

import mpmath as mp
from mpmath import mpf

HERE = os.path.dirname(os.path.abspath(__file__))
SEED = 20250712
QDPS = 30          # working precision (digits) of the quadratures
CF_DPS = 40        # first precision of the closed-form evaluations (escalated as needed)
LN_FLOOR = -700    # rows with ln density below this are left out

mp.mp.dps = QDPS


def _ts_conservative_error(results, prec, epsilon):
    """Error estimate for mpmath's tanh-sinh rule taken as |I_k - I_(k-1)|.  mpmath's default
    extrapolates from the last three levels assuming the digits double per level; on pieces
    with steep integrands that accepted results wrong by up to 1e-26 relative (found while
    writing this script, by recomputing at 50 digits)."""
    return abs(results[-1] - results[-2])


mp.mp._tanh_sinh.estimate_error = _ts_conservative_error

STATS = {
    "quad_relerr": mpf(0), "quad_where": "", "nquad": 0, "cf_max_dps": CF_DPS,
    "context": "",
}


# ---------------------------------------------------------------------------------------
# Normal distribution
# ---------------------------------------------------------------------------------------

_CONST = {}


def _c():
    """(1/sqrt 2, 1/sqrt(2 pi), ln(2 pi)) at the current precision."""
    p = mp.mp.prec
    c = _CONST.get(p)
    if c is None:
        c = (1 / mp.sqrt(2), 1 / mp.sqrt(2 * mp.pi), mp.log(2 * mp.pi))
        _CONST[p] = c
    return c


def Q(x):
    """Upper tail 1 - Phi(x) = erfc(x/sqrt 2)/2."""
    return mp.erfc(x * _c()[0]) / 2


def Phi(x):
    return Q(-x) if x < 0 else 1 - Q(x)


def phi(x):
    return mp.exp(-x * x / 2) * _c()[1]


def relerr(x, y):
    if x == y:
        return mpf(0)
    return abs(x - y) / max(abs(x), abs(y))


# ---------------------------------------------------------------------------------------
# Closed forms (Wald 1947; Brown & Heathcote 2008), evaluated at escalating precision
# ---------------------------------------------------------------------------------------

def _lost_digits(x, m):
    """Decimal digits lost when x is the sum of terms of magnitude up to m."""
    if m == 0:
        return 0
    if x == 0:
        return 10 ** 9
    return max(0, (mp.mag(m) - mp.mag(x)) * 0.30103)


def stable(fn, args, tol=32, d0=CF_DPS):
    """A closed form fn(*args) -> (values, term magnitudes) evaluated so that every value is
    good to about 10^-tol relative.  At d digits (d = d0 first) two conditions must hold:
    (1) the digits lost to cancellation, log10(largest term / |value|), leave tol + 5 digits;
    (2) the values agree with a second evaluation at d + 20 digits to 10^-tol.  (1) catches
    information lost identically at both precisions (e.g. Phi(z) rounded to exactly 1 when
    1 - Phi(z) < 10^-d); (2) catches the rest.  Otherwise d is raised and both are redone.
    Returns the values of the higher-precision evaluation."""
    d = d0
    while True:
        with mp.workdps(d):
            a, ma = fn(*args)
            lost = max(_lost_digits(x, m) for x, m in zip(a, ma))
        if lost > d - tol - 5:
            # a value of exactly 0 (lost = 10^9) says nothing about the digits needed
            d = 2 * d if lost >= 10 ** 9 else max(2 * d, int(lost) + tol + 15)
        else:
            with mp.workdps(d + 20):
                b, _ = fn(*args)
                ok = all(x == y or abs(x - y) <= abs(y) * mpf(10) ** -tol for x, y in zip(a, b))
            if ok:
                if d > STATS["cf_max_dps"]:
                    STATS["cf_max_dps"] = d
                return b
            d *= 2
        if d > 20000:
            raise RuntimeError("closed form did not stabilise: %s %s" % (fn.__name__, args))


def wiener_literal(u, a, v):
    """(f, F, 1 - F) exactly as published (Wald 1947), with term magnitudes."""
    r = mp.sqrt(u)
    f = a / mp.sqrt(2 * mp.pi * u ** 3) * mp.exp(-(a - v * u) ** 2 / (2 * u))
    F = Phi((v * u - a) / r) + mp.exp(2 * v * a) * Phi(-(v * u + a) / r)
    return (f, F, 1 - F), (f, F, max(F, mpf(1)))


def wiener_fs(u, a, v):
    """(f, S) as used inside the race integrals: S = 1 - F expanded with 1 - Phi(x) = Phi(-x)."""
    r = mp.sqrt(u)
    f = a / mp.sqrt(2 * mp.pi * u ** 3) * mp.exp(-(a - v * u) ** 2 / (2 * u))
    t1 = Phi((a - v * u) / r)
    t2 = mp.exp(2 * v * a) * Phi(-(v * u + a) / r)
    return (f, t1 - t2), (f, max(t1, t2))


def wiener_ln_pdf(u, a, v):
    """ln f, the closed form (Wald 1947) as a logarithm."""
    return mp.log(a) - (_c()[2] + 3 * mp.log(u)) / 2 - (a - v * u) ** 2 / (2 * u)


def wiener_ln_pdf_table(u, a, v):
    """ln f for the tables: the closed form evaluated with 20 extra digits, so that values of
    ln f near 0 (a sum of O(1..10) terms) keep their relative accuracy."""
    with mp.workdps(mp.mp.dps + 20):
        r = wiener_ln_pdf(u, a, v)
    return +r


def wiener_mass(a, v):
    """F(inf): exp(2 v alpha) for v < 0, else 1 (Cox & Miller 1965)."""
    return mp.exp(2 * v * a) if v < 0 else mpf(1)


def wiener_never(a, v):
    """1 - F(inf) = -expm1(2 v alpha) for v < 0, else 0."""
    return -mp.expm1(2 * v * a) if v < 0 else mpf(0)


def lba_literal(u, A, b, v, s):
    """(f, F, 1 - F) exactly as published (Brown & Heathcote 2008), with term magnitudes."""
    z1 = (b - A - u * v) / (u * s)
    z2 = (b - u * v) / (u * s)
    P1, P2, p1, p2 = Phi(z1), Phi(z2), phi(z1), phi(z2)
    tf = (-v * P1, s * p1, v * P2, -s * p2)
    f = mp.fsum(tf) / A
    tF = (A, (b - A - u * v) * P1, -(b - u * v) * P2, u * s * p1, -u * s * p2)
    F = mp.fsum(tF) / A
    mf = max(abs(x) for x in tf) / A
    mF = max(abs(x) for x in tF) / A
    return (f, F, 1 - F), (mf, mF, max(mF, mpf(1)))


def lba_fs(u, A, b, v, s):
    """(f, S) as used inside the race integrals (the same closed forms, see docstring)."""
    us = u * s
    z1 = (b - A - u * v) / us
    z2 = (b - u * v) / us
    if z1 >= 0:
        q1, q2 = Q(z1), Q(z2)
        dP, mP = q1 - q2, q1
        P1, P2 = 1 - q1, 1 - q2
    else:
        P1, P2 = Phi(z1), Phi(z2)
        dP, mP = P2 - P1, P2
    p1 = phi(z1)
    dp = -p1 * mp.expm1(-(A / us) * (z2 + z1) / 2)      # phi(z1) - phi(z2)
    f = (v * dP + s * dp) / A
    tS = (-(b - A - u * v) * P1, (b - u * v) * P2, -us * dp)
    S = mp.fsum(tS) / A
    return (f, S), (max(abs(v) * mP, s * abs(dp)) / A, max(abs(x) for x in tS) / A)


def lba_mass(v, s):
    return Phi(v / s)


def lba_never(v, s):
    return Q(v / s)


# ---------------------------------------------------------------------------------------
# Quadrature helpers
# ---------------------------------------------------------------------------------------

def _quad(h, pts, label):
    r, e = mp.quad(h, pts, method="tanh-sinh", error=True)
    return r, e


def _note_err(total, err):
    STATS["nquad"] += 1
    if total != 0:
        rel = abs(err / total)
        if rel > STATS["quad_relerr"]:
            STATS["quad_relerr"] = rel
            STATS["quad_where"] = STATS["context"]


Y_STEP = mpf("0.1")
Y_COARSE = 10          # grid steps per coarse piece (1.0 in y)
Y_DROP = 110           # e-folds below the maximum that still count as significant
Y_E = 12               # max change of the log integrand over a piece


def plan_y(lngs, y_lo, y_hi):
    """Break points in y = ln u shared by the log integrands lngs[k](u) (each returns
    ln(integrand)).  Returns (points, [(scale_k, width_k)])."""
    n = int(mp.ceil((y_hi - y_lo) / Y_STEP))
    ys = [y_lo + (y_hi - y_lo) * i / n for i in range(n + 1)]
    ys[0], ys[-1] = y_lo, y_hi          # exactly (tquad recognises the ends)
    caches = [dict() for _ in lngs]

    def L(k, y):
        c = caches[k]
        r = c.get(y)
        if r is None:
            r = lngs[k](mp.exp(y)) + y
            c[y] = r
        return r

    grids = [[L(k, y) for y in ys] for k in range(len(lngs))]
    i0, i1 = n, 0
    for g in grids:
        top = max(g)
        keep = [i for i, l in enumerate(g) if l > top - Y_DROP]
        i0 = min(i0, keep[0])
        i1 = max(i1, keep[-1])
    i0 = max(i0 - 1, 0)
    i1 = min(i1 + 1, n)
    coarse = ys[i0:i1 + 1:Y_COARSE]
    if coarse[-1] != ys[i1]:
        coarse.append(ys[i1])
    pts = [coarse[0]]

    def bad(a, b):
        m = (a + b) / 2
        for k in range(len(lngs)):
            la, lb, lm = L(k, a), L(k, b), L(k, m)
            top = max(grids[k])
            if max(la, lb, lm) < top - Y_DROP:
                continue
            if abs(lb - la) > Y_E or abs(lm - (la + lb) / 2) > mpf(Y_E) / 4:
                return True
        return False

    def refine(a, b, depth):
        if depth < 40 and bad(a, b):
            m = (a + b) / 2
            refine(a, m, depth + 1)
            refine(m, b, depth + 1)
        else:
            pts.append(b)

    for a, b in zip(coarse[:-1], coarse[1:]):
        refine(a, b, 0)
    scales = []
    for k, g in enumerate(grids):
        top = max(caches[k].values())
        width = Y_STEP * max(1, sum(1 for l in g if l > top - 2))
        scales.append((top, width))
    return pts, scales, ys


FRACS = (mpf("0.5"), mpf("0.9"), mpf("0.99"), mpf("0.999"), mpf("0.999999"), mpf("0.01"))


def tquad(lng, u_lo, u_hi, pts, scale, y_lo, y_hi):
    """int_{u_lo}^{u_hi} exp(lng(u)) du (u_lo >= 0, u_hi <= inf).

    The pieces between the break points pts are integrated in y = ln u (integrand
    exp(lng(e^y) + y)).  The two end pieces are integrated in u so that a finite end is hit
    exactly (ln u rounded to the working precision would shift it; the error would be
    multiplied by the log-slope of the integral, up to several hundred in steep tails):
      [u_lo, e^y_first] in u, and [e^y_last, u_hi] in u when u_hi is finite;
      [U, inf) with U = e^y_last in z, u = U / z^2, z in (0, 1]: an algebraic tail u^-p
      becomes z^(2p-3) times a function of z^2/U, so the u^-3/2 tail of a Wiener accumulator
      with v = 0 and the u^-2 tail of the LBA are smooth in z (mpmath's own map of [1, inf)
      leaves x^-1/2 endpoint singularities that tanh-sinh resolves only to about 1e-18).
    A break point equal to a finite end of the y-range is dropped (its piece joins the end
    piece).  End pieces are divided by the largest of a few samples of their integrand, and
    integrated again with their own value as the scale when that normalised integral is far
    from 1 and the piece is not negligible, so the error criterion stays relative."""
    top, width = scale
    sh = top + mp.log(width)
    ypts = list(pts)
    if u_lo > 0 and ypts[0] == y_lo:
        ypts = ypts[1:]
    if u_hi != mp.inf and ypts and ypts[-1] == y_hi:
        ypts = ypts[:-1]

    def hy(y):
        return mp.exp(lng(mp.exp(y)) + y - sh)

    def hu(u):
        return mp.exp(lng(u) - sh)

    r = e = mpf(0)
    if len(ypts) >= 2:
        r, e = _quad(hy, ypts, "bulk")
    if not ypts:
        ends = [u_lo, u_hi]
    else:
        ends = [u_lo, mp.exp(ypts[0]), mp.exp(ypts[-1]), u_hi]
    pieces = []       # (integrand, [a, b], factor, samples)
    a, b = ends[0], ends[1]
    if b > a:
        pieces.append((hu, [a, b], 1, [a + (b - a) * f for f in FRACS]))
    if ypts:
        a, b = ends[2], ends[3]
        if b == mp.inf:
            U = a
            hz = lambda z: 2 / z ** 3 * hu(U / (z * z)) if z > 0 else mpf(0)
            pieces.append((hz, [mpf(0), mpf(1)], U, [1 - f for f in FRACS]))
        elif b > a:
            pieces.append((hu, [a, b], 1, [a + (b - a) * f for f in FRACS]))
    done = []
    for h, ab, fac, smp in pieces:
        sc = max(abs(h(x)) for x in smp)
        if sc == 0:
            sc = mpf(1)
        rp, ep = _quad(lambda x: h(x) / sc, ab, "end piece")
        done.append([h, ab, fac, sc, rp, ep])
    total = r + mp.fsum(d[2] * d[3] * d[4] for d in done)
    for d in done:
        h, ab, fac, sc, rp, ep = d
        # a piece that matters but whose normalised integral is far from 1 is redone with
        # its own value as the scale (mpmath's error criterion is absolute)
        if abs(fac * sc * rp) > abs(total) * mpf(10) ** -(mp.mp.dps + 6) and not (
                mpf(10) ** -3 < abs(rp) < mpf(10) ** 3):
            sc2 = sc * abs(rp)
            d[3] = sc2
            d[4], d[5] = _quad(lambda x: h(x) / sc2, ab, "end piece, rescaled")
    for h, ab, fac, sc, rp, ep in done:
        r, e = r + fac * sc * rp, e + fac * sc * ep
    _note_err(r, e)
    return r * mp.exp(sh), (abs(e / r) if r != 0 else mpf(0))


def time_integral(lng, u_lo, u_hi, y_lo, y_hi):
    pts, scales, _ = plan_y([lng], y_lo, y_hi)
    return tquad(lng, u_lo, u_hi, pts, scales[0], y_lo, y_hi)[0]


C_LEVELS = (1, 3, 8, 16, 30, 50, 80, 115)


def concave_integral(lnh, lo, hi):
    """int_lo^hi exp(lnh(x)) dx for a concave lnh: cut at the maximum (golden section) and at
    the points where lnh has dropped by C_LEVELS e-folds (bisection)."""
    with mp.workdps(20):
        g = (mp.sqrt(5) - 1) / 2
        a, b = mpf(lo), mpf(hi)
        c, d = b - g * (b - a), a + g * (b - a)
        fc, fd = lnh(c), lnh(d)
        for _ in range(60):
            if fc >= fd:
                b, d, fd = d, c, fc
                c = b - g * (b - a)
                fc = lnh(c)
            else:
                a, c, fc = c, d, fd
                d = a + g * (b - a)
                fd = lnh(d)
        m = (a + b) / 2
        cands = [(lnh(x), x) for x in (mpf(lo), m, mpf(hi))]
        Lm, m = max(cands)
        pts = {mpf(lo), mpf(hi), m}
        w_lo, w_hi = mpf(lo), mpf(hi)
        for end in (mpf(lo), mpf(hi)):
            Le = lnh(end)
            for lev in C_LEVELS:
                target = Lm - lev
                if Le >= target:
                    break
                p, q = m, end          # lnh(p) > target >= lnh(q)
                for _ in range(30):
                    x = (p + q) / 2
                    if lnh(x) > target:
                        p = x
                    else:
                        q = x
                x = (p + q) / 2
                pts.add(x)
                if lev == 3:
                    if end < m:
                        w_lo = x
                    else:
                        w_hi = x
        width = w_hi - w_lo
    pts = sorted(mpf(p) for p in pts)
    pts = [p for i, p in enumerate(pts) if i == 0 or p > pts[i - 1]]
    sh = lnh(m) + mp.log(width)
    r, e = _quad(lambda x: mp.exp(lnh(x) - sh), pts, "start point")
    _note_err(r, e)
    return r * mp.exp(sh)


# ---------------------------------------------------------------------------------------
# Accumulator quantities by quadrature
# ---------------------------------------------------------------------------------------

SPAN = 30        # y-range (e-folds of u) scanned below ln u for F
SPAN_TAIL = 50   # and above ln u for the tail (|v| = 1e-9 cuts the u^-3/2 tail off at ~1e18)


def wiener_by_quad(u, a, v):
    """(ln f, F, S, tail) with F = int_0^u f, tail = int_u^inf f, S = tail + 1 - F(inf)."""
    lng = lambda x: wiener_ln_pdf(x, a, v)
    yu = mp.log(u)
    F = time_integral(lng, mpf(0), u, yu - SPAN, yu)
    tail = time_integral(lng, u, mp.inf, yu, yu + SPAN_TAIL)
    S = tail + wiener_never(a, v)
    return wiener_ln_pdf_table(u, a, v), F, S, tail


def lba_by_quad(u, A, b, v, s):
    """(ln f, F, S, f) by integration over the start point x in [0, A]."""
    lnA, lns = mp.log(A), mp.log(s)

    def ln_dens(x):
        w = (b - x) / u
        z = (w - v) / s
        return mp.log(w / u) - z * z / 2 - _c()[2] / 2 - lns - lnA

    def ln_cdf(x):
        return mp.log(Phi((v - (b - x) / u) / s)) - lnA

    def ln_sf(x):
        return mp.log(Phi(((b - x) / u - v) / s)) - lnA

    f = concave_integral(ln_dens, 0, A)
    F = concave_integral(ln_cdf, 0, A)
    S = concave_integral(ln_sf, 0, A)
    return mp.log(f), F, S, f


def ln_pair(F, S):
    """(ln F, ln S) keeping relative accuracy near 0."""
    lF = mp.log(F) if F <= mpf("0.5") else mp.log1p(-S)
    lS = mp.log(S) if S <= mpf("0.5") else mp.log1p(-F)
    return lF, lS


# ---------------------------------------------------------------------------------------
# Design of the accumulator table
# ---------------------------------------------------------------------------------------

def r6(x):
    return float("%.6g" % x)


def r4(x):
    return float("%.4g" % x)


def lu(rng, lo, hi):
    return 10 ** rng.uniform(math.log10(lo), math.log10(hi))


def bisect_log(fn, lo, hi, target, it=60):
    """t in [lo, hi] with fn(t) = target (fn monotone, bracketing); bisection in ln t."""
    with mp.workdps(20):
        flo = fn(mpf(lo)) - target
        a, b = math.log(lo), math.log(hi)
        for _ in range(it):
            m = (a + b) / 2
            fm = fn(mpf(math.exp(m))) - target
            if (fm > 0) == (flo > 0):
                a, flo = m, fm
            else:
                b = m
        return math.exp((a + b) / 2)


def log_mode(fn, lo, hi, n=160):
    ts = [lo * (hi / lo) ** (i / n) for i in range(n + 1)]
    with mp.workdps(20):
        vals = [fn(mpf(t)) for t in ts]
    i = max(range(len(ts)), key=lambda j: vals[j])
    return ts[i]


def w_lnf(a, v):
    return lambda t: wiener_ln_pdf(t, mpf(a), mpf(v))


def w_lnS(a, v):
    return lambda t: mp.log(stable(wiener_fs, (t, mpf(a), mpf(v)), tol=10, d0=20)[1])


def l_lnf(A, b, v, s):
    return lambda t: mp.log(stable(lba_fs, (t, mpf(A), mpf(b), mpf(v), mpf(s)), tol=10, d0=20)[0])


def l_lnS(A, b, v, s):
    return lambda t: mp.log(stable(lba_fs, (t, mpf(A), mpf(b), mpf(v), mpf(s)), tol=10, d0=20)[1])


TMIN, TMAX = 0.02, 20.0


def design_wiener(rng):
    pts = []   # (t, alpha, v, tag)
    for _ in range(205):
        pts.append((r6(lu(rng, TMIN, TMAX)), r6(lu(rng, 0.3, 4)), r6(rng.uniform(-3, 8)), "bulk"))
    for _ in range(24):
        pts.append((r6(lu(rng, TMIN, TMAX)), r6(lu(rng, 0.3, 4)), 0.0, "v0"))
    for v in (1e-9, -1e-9, 1e-6, -1e-6, 1e-3, -1e-3):
        pts.append((r6(lu(rng, 0.05, 5)), r6(lu(rng, 0.3, 4)), v, "small v"))
    for a in (0.3, 0.6, 1.0, 1.5, 2.0, 3.0, 4.0):
        for t in (0.02, 0.03):
            pts.append((t, a, r6(rng.uniform(-3, 8)), "tiny t"))
    # deep right tail of the density (v > 0, t beyond the mode)
    for target in (-30, -60, -100, -150, -200, -250, -300, -350, -400, -450, -500, -550,
                   -600, -640, -680):
        for _ in range(50):
            a, v = r6(lu(rng, 0.3, 4)), r6(rng.uniform(3, 8))
            fn = w_lnf(a, v)
            mode = log_mode(fn, TMIN, TMAX)
            if fn(mpf(TMAX)) < target:
                pts.append((r6(bisect_log(fn, mode, TMAX, target)), a, v, "right tail"))
                break
    # deep left tail (t below the mode)
    for target in (-30, -60, -100, -150, -200, -250, -300, -350):
        for _ in range(50):
            a, v = r6(lu(rng, 1.5, 4)), r6(rng.uniform(-3, 8))
            fn = w_lnf(a, v)
            mode = log_mode(fn, TMIN, TMAX)
            if fn(mpf(TMIN)) < target and mode > TMIN:
                pts.append((r6(bisect_log(fn, TMIN, mode, target)), a, v, "left tail"))
                break
    # tiny survivals (v > 0, large t)
    for ls in (-10, -30, -60, -100, -150, -200, -250, -300, -350, -400, -460):
        for _ in range(50):
            a, v = r6(lu(rng, 0.3, 4)), r6(rng.uniform(3, 8))
            fS = w_lnS(a, v)
            if fS(mpf(TMAX)) < ls * math.log(10) < fS(mpf(TMIN)):
                t = r6(bisect_log(fS, TMIN, TMAX, ls * math.log(10)))
                if wiener_ln_pdf(mpf(t), mpf(a), mpf(v)) > LN_FLOOR + 5:
                    pts.append((t, a, v, "tiny survival"))
                    break
    # negative drifts, long times (defective distribution)
    for _ in range(15):
        pts.append((r6(lu(rng, 2, TMAX)), r6(lu(rng, 0.3, 4)), r6(rng.uniform(-3, -0.2)), "v<0 long"))
    # large v * alpha (exp(2 v alpha) up to e^64 in the closed form)
    for _ in range(10):
        a, v = r6(rng.uniform(3, 4)), r6(rng.uniform(6, 8))
        pts.append((r6(a / v * rng.uniform(0.5, 2.0)), a, v, "large v alpha"))
    return pts


def design_lba(rng):
    pts = []   # (t, A, b, v, s, tag)

    def draw(vlo=-2.0, vhi=6.0, glo=0.05, ghi=3.0, slo=0.3, shi=2.0):
        A = r6(lu(rng, 0.05, 2))
        b = r6(A + lu(rng, glo, ghi))
        return A, b, r6(rng.uniform(vlo, vhi)), r6(lu(rng, slo, shi))

    for _ in range(215):
        A, b, v, s = draw()
        pts.append((r6(lu(rng, TMIN, TMAX)), A, b, v, s, "bulk"))
    for _ in range(20):
        A, b, v, s = draw()
        pts.append((r6(lu(rng, TMIN, TMAX)), A, b, 0.0, s, "v0"))
    for _ in range(16):
        A, b, v, s = draw(ghi=0.3)
        pts.append((rng.choice([0.02, 0.025, 0.03]), A, b, v, s, "tiny t"))
    # deep left tail of the density
    for target in (-30, -60, -100, -150, -200, -250, -300, -350, -400, -450, -500, -550,
                   -600, -640, -680):
        for _ in range(80):
            A, b, v, s = draw()
            fn = l_lnf(A, b, v, s)
            mode = log_mode(fn, TMIN, TMAX)
            if mode > TMIN and fn(mpf(TMIN)) < target:
                pts.append((r6(bisect_log(fn, TMIN, mode, target)), A, b, v, s, "left tail"))
                break
    # right tail: the density decays like 1/t^2 times Phi-type factors; deepest for large v/s
    for target in (-20, -40, -60, -80, -100, -120, -140, -160, -180):
        for _ in range(80):
            A, b, v, s = draw(vlo=3.0, slo=0.3, shi=0.45)
            fn = l_lnf(A, b, v, s)
            mode = log_mode(fn, TMIN, TMAX)
            if fn(mpf(TMAX)) < target < fn(mpf(mode)):
                pts.append((r6(bisect_log(fn, mode, TMAX, target)), A, b, v, s, "right tail"))
                break
    # tiny survivals (bounded below by Phi(-v/s) >= Phi(-20) ~ 3e-89)
    for ls in (-5, -10, -20, -30, -40, -50, -60, -70, -80):
        for _ in range(80):
            A, b, v, s = draw(vlo=3.0, slo=0.3, shi=0.6)
            fS = l_lnS(A, b, v, s)
            if fS(mpf(TMAX)) < ls * math.log(10) < fS(mpf(TMIN)):
                t = r6(bisect_log(fS, TMIN, TMAX, ls * math.log(10)))
                pts.append((t, A, b, v, s, "tiny survival"))
                break
    for _ in range(15):
        A, b, v, s = draw(vlo=-2.0, vhi=-0.01)
        pts.append((r6(lu(rng, TMIN, TMAX)), A, b, v, s, "v<0"))
    # awkward shapes: A small with large t s (z1 ~ z2), A large with a small gap
    for _ in range(6):
        A = 0.05
        b = r6(A + lu(rng, 0.05, 3))
        pts.append((r6(lu(rng, 5, TMAX)), A, b, r6(rng.uniform(-2, 6)), r6(lu(rng, 1, 2)), "A small"))
    for _ in range(6):
        A = r6(rng.uniform(1.5, 2))
        b = r6(A + 0.05)
        pts.append((r6(lu(rng, TMIN, TMAX)), A, b, r6(rng.uniform(-2, 6)), r6(lu(rng, 0.3, 2)), "gap small"))
    return pts


# ---------------------------------------------------------------------------------------
# Race
# ---------------------------------------------------------------------------------------

def q12(x):
    """Round to a multiple of 2^-12 (at least 2^-12)."""
    return max(round(x * 4096), 1) / 4096.0


def race_sets_wiener(rng):
    sets = [  # (alpha, ndt, drifts)
        (1.0, 0.25, [1.0, 1.0]),
        (1.5, 0.3, [0.0, 0.0]),
        (2.0, 0.2, [2.0, 2.0, 2.0]),
        (1.2, 0.35, [-0.5, -0.5]),
        (0.8, 0.15, [3.0, 3.0, 3.0, 3.0]),
        (1.0, 0.3, [0.0, 0.0, 0.0]),
        (2.5, 0.4, [-0.3, -0.3, -0.3]),
        (1.0, 0.2, [2.5, -1.0]),
        (2.5, 0.4, [1.5, 0.5, -0.8]),
        (1.5, 0.25, [4.0, 1.0, 0.5, -1.5]),
        (3.0, 0.3, [-1.0, -0.5, -0.2]),
        (0.5, 0.1, [5.0, 0.2]),
        (1.0, 0.2, [0.0, 1.5]),
        (2.0, 0.3, [3.0, 0.0, -0.5, 1.0]),
        (0.3, 0.2, [8.0, 7.5]),
        (4.0, 0.5, [1.0, 0.9, 1.1]),
    ]
    while len(sets) < 60:
        n = rng.choice([2, 2, 3, 3, 4])
        a = r4(lu(rng, 0.5, 3))
        drifts = [r4(rng.uniform(-0.5, 4.5)) for _ in range(n)]
        kind = rng.random()
        if kind < 0.3:
            drifts[rng.randrange(n)] = r4(rng.uniform(-1.5, -0.05))
        elif kind < 0.4:
            drifts = [drifts[0]] * n
        sets.append((a, rng.uniform(0.1, 0.5), drifts))
    return [(r4(a), q12(nd), [float(v) for v in d]) for a, nd, d in sets]


def race_sets_lba(rng):
    sets = [  # (A, b, s, ndt, drifts)
        (0.5, 1.0, 1.0, 0.2, [1.0, 1.0]),
        (0.8, 1.5, 0.5, 0.3, [2.0, 2.0, 2.0]),
        (0.3, 0.6, 1.0, 0.25, [0.0, 0.0]),
        (1.0, 1.4, 0.7, 0.2, [-0.5, -0.5]),
        (0.4, 1.0, 0.3, 0.15, [3.0, 3.0, 3.0, 3.0]),
        (0.5, 1.0, 1.0, 0.2, [2.5, -1.0]),
        (0.7, 1.2, 0.8, 0.3, [1.5, 0.5, -0.8]),
        (1.2, 2.0, 1.2, 0.35, [4.0, 1.0, 0.5, -1.5]),
        (0.5, 0.9, 0.6, 0.2, [-1.0, -0.5, -0.2]),
        (0.1, 0.3, 0.3, 0.1, [4.0, 0.5]),
        (1.5, 1.6, 1.5, 0.2, [1.0, 0.0]),
        (0.6, 1.1, 1.0, 0.3, [3.0, 0.0, -0.5, 1.0]),
        (0.05, 0.5, 0.4, 0.2, [2.0, 1.8]),
        (2.0, 3.0, 2.0, 0.4, [1.0, 0.9, 1.1]),
    ]
    while len(sets) < 60:
        n = rng.choice([2, 2, 3, 3, 4])
        A = r4(lu(rng, 0.1, 1.5))
        b = r4(A + lu(rng, 0.1, 1.5))
        s = r4(lu(rng, 0.3, 1.5))
        drifts = [r4(rng.uniform(0.0, 4.0)) for _ in range(n)]
        kind = rng.random()
        if kind < 0.3:
            drifts[rng.randrange(n)] = r4(rng.uniform(-1.0, -0.05))
        elif kind < 0.4:
            drifts = [drifts[0]] * n
        sets.append((A, b, s, rng.uniform(0.1, 0.4), drifts))
    return [(r4(A), r4(b), r4(s), q12(nd), [float(v) for v in d]) for A, b, s, nd, d in sets]


RACE_Y = (mp.log(mpf("1e-5")), mp.log(mpf("1e6")))


def cf_args(model, u, par, v):
    """(f, S) of one accumulator from the closed forms; par = (alpha,) or (A, b, s)."""
    if model == "wiener":
        return stable(wiener_fs, (u, par[0], v))
    A, b, s = par
    return stable(lba_fs, (u, A, b, v, s))


def race_probabilities(model, par, drifts):
    """P(k) for every option k by tanh-sinh quadrature of g_k over u in (0, inf) (closed-form
    accumulator quantities inside, see docstring); returns (P list, P(no finisher), u_peak,
    worst quad relative error estimate)."""
    n = len(drifts)
    dv = sorted(set(drifts))
    V = {v: mpf(v) for v in dv}
    cache = {}
    pre = tuple(mpf(p) for p in par)

    def acc(u):
        r = cache.get(u)
        if r is None:
            r = {v: cf_args(model, u, pre, V[v]) for v in dv}
            cache[u] = r
        return r

    def make_lng(k):
        def lng(u):
            a = acc(u)
            f = a[drifts[k]][0]
            if f <= 0:
                return mpf("-inf")
            s = mp.log(f)
            for j in range(n):
                if j != k:
                    S = a[drifts[j]][1]
                    if S <= 0:
                        return mpf("-inf")
                    s += mp.log(S)
            return s
        return lng

    lngs = [make_lng(k) for k in range(n)]
    y_lo, y_hi = RACE_Y
    pts, scales, ys = plan_y(lngs, y_lo, y_hi)
    P, worst = [], mpf(0)
    for k in range(n):
        STATS["context"] = "race %s %s %s option %d" % (model, par, drifts, k)
        p, e = tquad(lngs[k], mpf(0), mp.inf, pts, scales[k], y_lo, y_hi)
        P.append(p)
        worst = max(worst, e)
    if model == "wiener":
        none = mp.fprod(wiener_never(pre[0], V[v]) for v in drifts)
    else:
        none = mp.fprod(lba_never(V[v], pre[2]) for v in drifts)
    # mode of the first-finisher density sum_k g_k (on the scan grid, in u)
    tot = []
    for y in ys:
        u = mp.exp(y)
        tot.append((mp.fsum(mp.exp(l(u)) for l in lngs), u))
    u_peak = max(tot)[1]
    return P, none, u_peak, worst


# ---------------------------------------------------------------------------------------

def fmt(x):
    return repr(float(x))


def main():
    t0 = time.time()
    quick = "--quick" in sys.argv
    report = []

    # ---- accumulator table ------------------------------------------------------------
    wpts = design_wiener(random.Random(SEED + 1))
    lpts = design_lba(random.Random(SEED + 2))
    if quick:
        wpts, lpts = wpts[::8], lpts[::8]
    print("design: %d wiener, %d lba points (%.0fs)" % (len(wpts), len(lpts), time.time() - t0),
          flush=True)

    acc_rows = []     # (model, t, thr, A, v, s, ld, lF, lS)
    chk = {k: mpf(0) for k in ("wF", "wS", "wF_small", "wsum", "wmass", "wS_race",
                               "lf", "lF", "lS", "lsum", "lS_race", "lf_race")}
    skipped = {"wiener": 0, "lba": 0}
    tags = {}
    for (t, a, v, tag) in wpts:
        STATS["context"] = "wiener t=%r a=%r v=%r" % (t, a, v)
        T, A_, V_ = mpf(t), mpf(a), mpf(v)
        ld = wiener_ln_pdf_table(T, A_, V_)
        if ld < LN_FLOOR:
            skipped["wiener"] += 1
            continue
        _, F, S, tail = wiener_by_quad(T, A_, V_)
        fcf, Fcf, Scf = stable(wiener_literal, (T, A_, V_))
        eF, eS = relerr(F, Fcf), relerr(S, Scf)
        if Fcf > mpf("1e-250"):
            assert eF < mpf("1e-20"), (t, a, v, eF)
            chk["wF"] = max(chk["wF"], eF)
        else:
            chk["wF_small"] = max(chk["wF_small"], eF)
        if Scf > mpf("1e-250"):
            assert eS < mpf("1e-20"), (t, a, v, eS)
        chk["wS"] = max(chk["wS"], eS)
        chk["wsum"] = max(chk["wsum"], abs(F + S - 1))
        chk["wmass"] = max(chk["wmass"], relerr(F + tail, wiener_mass(A_, V_)))
        _, Sr = stable(wiener_fs, (T, A_, V_))
        chk["wS_race"] = max(chk["wS_race"], relerr(Sr, Scf))
        assert relerr(mp.exp(ld), fcf) < mpf("1e-25")
        lF, lS = ln_pair(F, S)
        acc_rows.append(("wiener", t, a, 0.0, v, 0.0, ld, lF, lS))
        tags[tag] = tags.get(tag, 0) + 1
    print("wiener rows done (%.0fs)" % (time.time() - t0), flush=True)
    for (t, A, b, v, s, tag) in lpts:
        STATS["context"] = "lba t=%r A=%r b=%r v=%r s=%r" % (t, A, b, v, s)
        T, A_, B_, V_, S_ = (mpf(x) for x in (t, A, b, v, s))
        fr, _ = stable(lba_fs, (T, A_, B_, V_, S_))
        if fr == 0 or mp.log(fr) < LN_FLOOR:
            skipped["lba"] += 1
            continue
        ld, F, S, f = lba_by_quad(T, A_, B_, V_, S_)
        fcf, Fcf, Scf = stable(lba_literal, (T, A_, B_, V_, S_))
        # f itself, not exp(ld): ln f rounded to 30 digits carries |ln f| * 1e-31 absolute
        ef, eF, eS = relerr(f, fcf), relerr(F, Fcf), relerr(S, Scf)
        assert ef < mpf("1e-20") and eF < mpf("1e-20") and eS < mpf("1e-20"), (t, A, b, v, s, ef, eF, eS)
        chk["lf"] = max(chk["lf"], ef)
        chk["lF"] = max(chk["lF"], eF)
        chk["lS"] = max(chk["lS"], eS)
        chk["lsum"] = max(chk["lsum"], abs(F + S - 1))
        chk["lf_race"] = max(chk["lf_race"], relerr(fr, fcf))
        _, Sr = stable(lba_fs, (T, A_, B_, V_, S_))
        chk["lS_race"] = max(chk["lS_race"], relerr(Sr, Scf))
        lF, lS = ln_pair(F, S)
        acc_rows.append(("lba", t, b, A, v, s, ld, lF, lS))
        tags["lba " + tag] = tags.get("lba " + tag, 0) + 1
    print("lba rows done (%.0fs)" % (time.time() - t0), flush=True)
    acc_quad = (STATS["quad_relerr"], STATS["quad_where"], STATS["nquad"])
    STATS.update(quad_relerr=mpf(0), quad_where="", nquad=0)
    t_acc = time.time() - t0

    with open(os.path.join(HERE, "race_accumulators.csv"), "w") as fh:
        fh.write("model,t,threshold,start_range,drift,drift_sd,ln_density,ln_cdf,ln_survival\n")
        for r in acc_rows:
            fh.write(",".join([r[0]] + [fmt(x) for x in r[1:]]) + "\n")

    report += [
        ("wiener F: quad vs closed form, rel (F > 1e-250)", chk["wF"]),
        ("wiener F: quad vs closed form, rel (F <= 1e-250)", chk["wF_small"]),
        ("wiener S: quad (tail + never) vs closed 1 - F, rel", chk["wS"]),
        ("wiener |F + S - 1| (separate integrals)", chk["wsum"]),
        ("wiener F(u) + int_u^inf f vs closed total mass, rel", chk["wmass"]),
        ("wiener S used in race integrals vs literal 1 - F, rel", chk["wS_race"]),
        ("lba f: start-point quad vs closed form, rel", chk["lf"]),
        ("lba F: start-point quad vs closed form, rel", chk["lF"]),
        ("lba S: start-point quad vs closed 1 - F, rel", chk["lS"]),
        ("lba |F + S - 1| (separate integrals)", chk["lsum"]),
        ("lba f used in race integrals vs literal closed form, rel", chk["lf_race"]),
        ("lba S used in race integrals vs literal 1 - F, rel", chk["lS_race"]),
    ]

    # ---- recompute a subset of the accumulator rows at 45 digits --------------------------
    vrng = random.Random(SEED + 3)
    sub = vrng.sample(acc_rows, min(len(acc_rows), 8 if quick else 40))
    worst = mpf(0)
    with mp.workdps(45):
        for r in sub:
            if r[0] == "wiener":
                ld, F, S, _ = wiener_by_quad(mpf(r[1]), mpf(r[2]), mpf(r[4]))
            else:
                ld, F, S, _ = lba_by_quad(mpf(r[1]), mpf(r[3]), mpf(r[2]), mpf(r[4]), mpf(r[5]))
            lF, lS = ln_pair(F, S)
            # ln f: change relative to max(1, |ln f|) (= relative change of f for ln f near 0,
            # where ln f = log(f) of a 30-digit f carries 1e-31 absolute); ln F, ln S: relative
            # (near 0 they are log1p(-x) and carry the relative accuracy of x)
            worst = max(worst, abs(ld - r[6]) / max(1, abs(r[6])))
            for x, y in ((lF, r[7]), (lS, r[8])):
                worst = max(worst, relerr(x, y))
    report.append(("accumulator rows recomputed at 45 digits (%d rows), max change of ln values "
                   "(ln f: /max(1,|ln f|); ln F, ln S: relative)" % len(sub), worst))
    print("accumulator checks done (%.0fs)" % (time.time() - t0), flush=True)

    # ---- race table ----------------------------------------------------------------------
    t1 = time.time()
    wsets = race_sets_wiener(random.Random(SEED + 4))
    lsets = race_sets_lba(random.Random(SEED + 5))
    if quick:
        wsets, lsets = wsets[::6], lsets[::6]
    race_rows = []
    rchk = {"sum": mpf(0), "sum_w": mpf(0), "sum_l": mpf(0), "sym": mpf(0), "lng": mpf(0),
            "quad": mpf(0), "minP": mpf(1)}
    skipped_race = 0
    acc_cache = {}

    def acc_quad_vals(model, u, par, v):
        key = (model, u, par, v)
        r = acc_cache.get(key)
        if r is None:
            if model == "wiener":
                ld, F, S, _ = wiener_by_quad(u, mpf(par[0]), mpf(v))
            else:
                ld, F, S, _ = lba_by_quad(u, mpf(par[0]), mpf(par[1]), mpf(v), mpf(par[2]))
            r = (ld, ln_pair(F, S)[1])
            acc_cache[key] = r
        return r

    all_sets = [("wiener", (a,), nd, d) for a, nd, d in wsets] + \
               [("lba", (A, b, s), nd, d) for A, b, s, nd, d in lsets]
    nsets = {"wiener": 0, "lba": 0}
    for si, (model, par, nd, drifts) in enumerate(all_sets):
        P, none, u_peak, qerr = race_probabilities(model, par, drifts)
        rchk["quad"] = max(rchk["quad"], qerr)
        tot = mp.fsum(P) + none
        dev = abs(tot - 1)
        assert dev < mpf("1e-15"), (model, par, drifts, dev)
        rchk["sum"] = max(rchk["sum"], dev)
        rchk["sum_w" if model == "wiener" else "sum_l"] = max(
            rchk["sum_w" if model == "wiener" else "sum_l"], dev)
        rchk["minP"] = min(rchk["minP"], min(P))
        if len(set(drifts)) == 1:
            rchk["sym"] = max(rchk["sym"], max(relerr(p, P[0]) for p in P))
        nsets[model] += 1
        STATS["context"] = "race rows %s %s %s" % (model, par, drifts)
        for m in (0.4, 1.0, 2.5, 6.0):
            u = q12(float(u_peak) * m)
            t = nd + u
            U = mpf(t) - mpf(nd)
            assert U == mpf(u)
            vals = {v: acc_quad_vals(model, U, par, v) for v in set(drifts)}
            cf = {v: cf_args(model, U, tuple(mpf(p) for p in par), mpf(v)) for v in set(drifts)}
            for k in range(len(drifts)):
                lg = vals[drifts[k]][0] + mp.fsum(vals[drifts[j]][1]
                                                  for j in range(len(drifts)) if j != k)
                lg_cf = mp.log(cf[drifts[k]][0]) + mp.fsum(mp.log(cf[drifts[j]][1])
                                                           for j in range(len(drifts)) if j != k)
                rchk["lng"] = max(rchk["lng"], abs(lg - lg_cf) / max(1, abs(lg)))
                if lg < LN_FLOOR:
                    skipped_race += 1
                    continue
                race_rows.append((model, nd, par, drifts, k, t, lg, P[k]))
        if si % 10 == 0:
            print("race set %d/%d (%.0fs)" % (si, len(all_sets), time.time() - t0), flush=True)
    t_race = time.time() - t1
    race_quad = (STATS["quad_relerr"], STATS["quad_where"], STATS["nquad"])

    with open(os.path.join(HERE, "race_choices.csv"), "w") as fh:
        fh.write("model,ndt,threshold,start_range,drift_sd,drifts,option,t,ln_race_density,"
                 "choice_probability\n")
        for model, nd, par, drifts, k, t, lg, p in race_rows:
            if model == "wiener":
                thr, A, s = par[0], 0.0, 0.0
            else:
                A, thr, s = par
            fh.write(",".join([model, fmt(nd), fmt(thr), fmt(A), fmt(s),
                               ";".join(fmt(v) for v in drifts), str(k), fmt(t), fmt(lg),
                               fmt(p)]) + "\n")

    # ---- recompute a subset of choice probabilities at 45 digits -------------------------
    sub = vrng.sample(all_sets, min(len(all_sets), 2 if quick else 8))
    worst = mpf(0)
    with mp.workdps(45):
        for model, par, nd, drifts in sub:
            P2, none2, _, _ = race_probabilities(model, par, drifts)
            for k, p in enumerate(P2):
                ref = [r[7] for r in race_rows if r[0] == model and r[2] == par and r[3] == drifts
                       and r[4] == k]
                if ref:
                    worst = max(worst, relerr(p, ref[0]))
    report.append(("choice probabilities recomputed at 45 digits (%d sets), max rel change"
                   % len(sub), worst))

    # ---- summary --------------------------------------------------------------------------
    print()
    nw = sum(1 for r in acc_rows if r[0] == "wiener")
    nl = len(acc_rows) - nw
    print("race_accumulators.csv: %d rows (wiener %d, lba %d); left out (ln f < %d): wiener %d, "
          "lba %d" % (len(acc_rows), nw, nl, LN_FLOOR, skipped["wiener"], skipped["lba"]))
    print("   rows per design group:", ", ".join("%s %d" % kv for kv in sorted(tags.items())))
    for model in ("wiener", "lba"):
        rs = [r for r in acc_rows if r[0] == model]
        print("   %s: ln_density in [%s, %s]; ln_survival in [%s, %s]; ln_cdf in [%s, %s]" % (
            model, mp.nstr(min(r[6] for r in rs), 6), mp.nstr(max(r[6] for r in rs), 6),
            mp.nstr(min(r[8] for r in rs), 6), mp.nstr(max(r[8] for r in rs), 6),
            mp.nstr(min(r[7] for r in rs), 6), mp.nstr(max(r[7] for r in rs), 6)))
        sub_d = [r for r in rs if abs(r[7]) < 2.3e-308 or abs(r[8]) < 2.3e-308]
        print("   %s: rows with a ln value below the normal double range: %d" % (model, len(sub_d)))
    nrw = sum(1 for r in race_rows if r[0] == "wiener")
    print("race_choices.csv: %d rows (wiener %d rows from %d sets, lba %d rows from %d sets); "
          "left out (ln g < %d): %d" % (len(race_rows), nrw, nsets["wiener"],
                                        len(race_rows) - nrw, nsets["lba"], LN_FLOOR,
                                        skipped_race))
    print("   ln_race_density in [%s, %s]; smallest choice probability %s" % (
        mp.nstr(min(r[6] for r in race_rows), 6), mp.nstr(max(r[6] for r in race_rows), 6),
        mp.nstr(rchk["minP"], 6)))
    report += [
        ("race: max |sum_k P(k) + P(none) - 1| (all sets)", rchk["sum"]),
        ("   wiener sets", rchk["sum_w"]),
        ("   lba sets", rchk["sum_l"]),
        ("race: equal drifts, max rel spread of P(k)", rchk["sym"]),
        ("race: ln g_k quad-based vs closed-form-based, max |diff|/max(1,|ln g|)", rchk["lng"]),
    ]
    print("accumulator quadratures: max estimated rel error %s (%s) over %d quadratures" % (
        mp.nstr(acc_quad[0], 3), acc_quad[1], acc_quad[2]))
    print("race quadratures: max estimated rel error %s (%s) over %d quadratures" % (
        mp.nstr(race_quad[0], 3), race_quad[1], race_quad[2]))
    print("closed forms: highest precision needed %d digits" % STATS["cf_max_dps"])
    for name, e in report:
        print("  %-92s %s" % (name, mp.nstr(e, 3)))
    print("time: accumulators %.0fs, race %.0fs, total %.0fs" % (t_acc, t_race, time.time() - t0))


if __name__ == "__main__":
    main()
