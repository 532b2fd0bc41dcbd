"""First passage of a Wiener diffusion between two absorbing bounds, over numpy arrays.

The crate's engine (``valuedrift::first_passage``) on arrays: every argument may be a scalar or
an array, and the arguments broadcast together as numpy's arithmetic does; the result has the
broadcast shape. Units: unit within-trial noise (s = 1) — parameters published for s = 0.1
convert by multiplying ``drift``, ``boundary`` and ``drift_sd`` by 10. ``start`` is the relative
start w in (0, 1), a fraction of ``boundary`` from the lower bound; ``ndt`` the non-decision
time in seconds; ``drift_sd`` the across-trial standard deviation of a normal drift;
``start_range`` and ``ndt_range`` the widths of uniform across-trial start and non-decision
time distributions. ``bound`` is ``"upper"`` or ``"lower"``, an array of those, or a boolean
array (True for upper).

A value outside its domain raises ``ValueError`` naming the element (of the flattened broadcast
arrays) and the parameter; no NaN is returned silently.

Accuracy (from the Rust documentation, checked against mpmath references in
tests/reference/first_passage_reference.csv): log density and distribution function within 1e-8
absolute over t/a² in [1e-3, 20], |v| <= 8, a in [0.3, 5], w in [0.05, 0.95], drift_sd <= 3.
"""

from __future__ import annotations

from typing import Any, Optional, Tuple

import numpy as np
import numpy.typing as npt

from ._native import first_passage as _engine

ArrayLike = npt.ArrayLike


def _bound_flags(bound: Any) -> np.ndarray:
    """1.0 for upper, 0.0 for lower, NaN for None (either bound)."""
    if bound is None:
        return np.array(np.nan)
    array = np.asarray(bound)
    if array.dtype == bool:
        return array.astype(np.float64)
    if array.dtype.kind in "US" or array.dtype == object:
        flags = np.full(array.shape, -1.0)
        text = array.astype(str)
        flags[text == "upper"] = 1.0
        flags[text == "lower"] = 0.0
        bad = np.flatnonzero(flags.ravel() < 0)
        if bad.size:
            raise ValueError(
                f"element {bad[0]}: bound {str(text.ravel()[bad[0]])!r} is not 'upper' or 'lower'"
            )
        return flags
    raise TypeError(f"bound: expected 'upper'/'lower' text or booleans; got dtype {array.dtype}")


def _call(quantity: str, rt: Any, bound: Any, drift: Any, boundary: Any, start: Any, ndt: Any,
          drift_sd: Any, start_range: Any, ndt_range: Any, seed: int = 1) -> Tuple[np.ndarray, Tuple[int, ...]]:
    arrays = np.broadcast_arrays(
        np.asarray(rt, dtype=np.float64),
        _bound_flags(bound),
        *(np.asarray(a, dtype=np.float64) for a in (drift, boundary, start, ndt, drift_sd, start_range, ndt_range)),
    )
    shape = arrays[0].shape
    flat = [np.ascontiguousarray(a, dtype=np.float64).ravel() for a in arrays]
    values = np.frombuffer(_engine(quantity, flat, seed), dtype=np.float64)
    return values, shape


def ln_density(rt: ArrayLike, bound: Any, drift: ArrayLike, boundary: ArrayLike, start: ArrayLike,
               ndt: ArrayLike, drift_sd: ArrayLike = 0.0, start_range: ArrayLike = 0.0,
               ndt_range: ArrayLike = 0.0) -> np.ndarray:
    """Log of the defective first-passage density f_b(rt) of ending at ``bound`` at response
    time ``rt``.

    Lower bound, decision time t = rt - ndt, u = t/a², D = 1 + η²t (Navarro & Fuss 2009, eq. 4,
    with the normal drift integrated out in closed form as in Blurton, Kesselmeier & Gondan
    2017, eq. 8)::

        ln f = -2 ln a - ½ ln D + (η²a²w² - 2avw - v²t) / (2D) + ln g(u, w)

    where g is the standardised small-time or large-time series of Navarro & Fuss (2009); the
    upper bound is the lower bound of the mirrored process (v -> -v, w -> 1 - w). Start and
    non-decision ranges are averaged by Gauss-Legendre quadrature (Ratcliff & Tuerlinckx 2002).
    ``-inf`` exactly where the density is zero (rt at or before the earliest response).
    """
    values, shape = _call("ln_density", rt, bound, drift, boundary, start, ndt, drift_sd, start_range, ndt_range)
    return values.reshape(shape)


def cdf(rt: ArrayLike, bound: Any, drift: ArrayLike, boundary: ArrayLike, start: ArrayLike,
        ndt: ArrayLike, drift_sd: ArrayLike = 0.0, start_range: ArrayLike = 0.0,
        ndt_range: ArrayLike = 0.0) -> np.ndarray:
    """Defective distribution function F_b(rt) = P(the process ends at ``bound`` with response
    time <= rt): small-time sum of Wald distribution functions for u < 0.5 and the large-time
    series of the survival for u >= 0.5 (Blurton, Kesselmeier & Gondan 2012, eqs. 5 and 8);
    with drift variability the closed-form density integrated over time."""
    values, shape = _call("cdf", rt, bound, drift, boundary, start, ndt, drift_sd, start_range, ndt_range)
    return values.reshape(shape)


def bound_probability(bound: Any, drift: ArrayLike, boundary: ArrayLike, start: ArrayLike,
                      drift_sd: ArrayLike = 0.0, start_range: ArrayLike = 0.0) -> np.ndarray:
    """Probability of ending at ``bound``; without variability (Cox & Miller 1965)::

        P(upper) = (1 - exp(-2 v a w)) / (1 - exp(-2 v a))

    (w at v = 0); with drift or start variability the average over their distributions."""
    values, shape = _call("bound_probability", 0.0, bound, drift, boundary, start, 0.0, drift_sd, start_range, 0.0)
    return values.reshape(shape)


def mean_decision_time(drift: ArrayLike, boundary: ArrayLike, start: ArrayLike,
                       bound: Any = None, drift_sd: ArrayLike = 0.0,
                       start_range: ArrayLike = 0.0) -> np.ndarray:
    """Mean decision time (response time minus non-decision time), overall (``bound=None``) or
    conditional on ending at ``bound``. Without variability (Grasman, Wagenmakers & van der Maas
    2009, eqs. 7-8, z = a·w)::

        E[T | upper] = (a coth(v a) - z coth(v z)) / v
        E[T | lower] = (a coth(v a) - (a - z) coth(v (a - z))) / v

    with the limits (a² - z²)/3 and (a² - (a - z)²)/3 at v = 0, and E[T] the mixture weighted by
    the bound probabilities; with variability, the time integral of t·f_b(t) by quadrature."""
    values, shape = _call("mean_decision_time", 0.0, bound, drift, boundary, start, 0.0, drift_sd, start_range, 0.0)
    return values.reshape(shape)


def sample(drift: ArrayLike, boundary: ArrayLike, start: ArrayLike, ndt: ArrayLike,
           drift_sd: ArrayLike = 0.0, start_range: ArrayLike = 0.0, ndt_range: ArrayLike = 0.0,
           *, size: Optional[Tuple[int, ...]] = None, seed: int = 1) -> Tuple[np.ndarray, np.ndarray]:
    """Exact draws of (bound, response time), one per element of the broadcast parameters (and
    of ``size``, when given, which the parameters are broadcast to). Returns ``(upper, rt)``:
    a boolean array (True for the upper bound) and the response times.

    Method: across-trial drift, start and non-decision time drawn first; the bound with its
    exact probability; the decision time by inversion of the conditional distribution function
    F_b(t)/P_b = U (Devroye 1986, §2.1) by safeguarded Newton steps in log time. No time
    discretisation. Draws come in element order from one ChaCha8 stream seeded with ``seed``,
    so they are reproducible."""
    drift = np.asarray(drift, dtype=np.float64)
    if size is not None:
        drift = np.broadcast_to(drift, size)
    values, shape = _call("sample", 0.0, None, drift, boundary, start, ndt, drift_sd, start_range, ndt_range, seed)
    n = values.size // 2
    return values[:n].reshape(shape) == 1.0, values[n:].reshape(shape)


__all__ = ["bound_probability", "cdf", "ln_density", "mean_decision_time", "sample"]
