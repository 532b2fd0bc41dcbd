"""The first-passage engine over numpy arrays, against the committed mpmath reference tables
(tests/reference/first_passage_reference.csv and first_passage_moments.csv, made by
tests/reference/generate_first_passage.py) and against numpy's broadcasting rules."""

from __future__ import annotations

import numpy as np
import pyarrow.csv as pacsv
import pytest

import valuedrift as vd
from conftest import REFERENCE, run_cli


def reference(name: str) -> dict:
    table = pacsv.read_csv(REFERENCE / name)
    return {c: table[c].to_numpy(zero_copy_only=False) for c in table.column_names}


def test_log_density_and_cdf_match_mpmath_within_1e_8():
    # Source: mpmath integrals/series in first_passage_reference.csv; 1e-8 absolute is the
    # accuracy the Rust documentation states (tests/suite/first_passage_reference.rs).
    t = reference("first_passage_reference.csv")
    args = (t["rt"], t["bound"], t["drift"], t["boundary"], t["start"], t["ndt"],
            t["drift_sd"], t["start_range"], t["ndt_range"])
    ln_f = vd.ln_density(*args)
    f = vd.cdf(*args)
    assert ln_f.shape == t["rt"].shape and len(ln_f) >= 500
    worst_ln = np.max(np.abs(ln_f - t["log_density"]))
    worst_cdf = np.max(np.abs(f - t["cdf"]))
    print(f"worst |d ln f| = {worst_ln:.3e}, worst |d cdf| = {worst_cdf:.3e} over {len(ln_f)} rows")
    assert worst_ln <= 1e-8
    assert worst_cdf <= 1e-8
    # The table reaches densities below 1e-300, which must stay finite in log space.
    assert np.any(t["log_density"] < -690) and np.all(np.isfinite(ln_f))


def test_bound_probability_and_mean_decision_times_match_mpmath_integrals():
    # Source: mpmath.quad of the densities in first_passage_moments.csv; closed forms of
    # Grasman, Wagenmakers & van der Maas (2009) here; 1e-10 relative as in the Rust test.
    t = reference("first_passage_moments.csv")
    v, a, w = t["drift"], t["boundary"], t["start"]
    checks = {
        "p_upper": vd.bound_probability("upper", v, a, w),
        "mean_dt": vd.mean_decision_time(v, a, w),
        "mean_dt_upper": vd.mean_decision_time(v, a, w, bound="upper"),
        "mean_dt_lower": vd.mean_decision_time(v, a, w, bound=np.full(v.shape, "lower")),
    }
    for name, values in checks.items():
        rel = np.abs((values - t[name]) / t[name])
        assert rel.max() < 1e-10, (name, rel.max())


def test_arguments_broadcast_as_numpy_does():
    # Source: numpy's broadcasting rules (shapes (3, 1) and (4,) give (3, 4)); each element
    # must equal the scalar call.
    rt = np.array([[0.5], [0.8], [1.3]])
    drift = np.array([-1.0, 0.0, 0.7, 2.0])
    grid = vd.ln_density(rt, "upper", drift, 1.5, 0.4, 0.3)
    assert grid.shape == (3, 4)
    for i in range(3):
        for j in range(4):
            single = vd.ln_density(rt[i, 0], "upper", drift[j], 1.5, 0.4, 0.3)
            assert single.shape == ()
            assert grid[i, j] == single
    # Booleans and text name the same bounds.
    upper = np.array([True, False])
    assert np.array_equal(
        vd.cdf(0.9, upper, 1.0, 1.2, 0.5, 0.2), vd.cdf(0.9, np.array(["upper", "lower"]), 1.0, 1.2, 0.5, 0.2)
    )


def test_bound_probabilities_sum_to_one():
    # Source: absorption at one of the two bounds is certain (Feller 1968, XIV.2).
    v = np.linspace(-3, 3, 13)
    total = vd.bound_probability("upper", v, 1.3, 0.35, drift_sd=0.8) + vd.bound_probability(
        "lower", v, 1.3, 0.35, drift_sd=0.8
    )
    assert np.max(np.abs(total - 1.0)) < 1e-12


def test_samples_follow_the_bound_probability_and_mean_time():
    # Source: P(upper) of Cox & Miller (1965) and E[T] of Grasman et al. (2009); the sample
    # proportion and mean must fall within 4.5 standard errors (a false alarm about 1 in 10^5).
    n = 20000
    upper, rt = vd.sample(0.8, 1.6, 0.45, 0.3, size=(n,), seed=7)
    assert upper.dtype == bool and rt.shape == (n,)
    p = float(vd.bound_probability("upper", 0.8, 1.6, 0.45))
    assert abs(upper.mean() - p) < 4.5 * np.sqrt(p * (1 - p) / n)
    mean = 0.3 + float(vd.mean_decision_time(0.8, 1.6, 0.45))
    assert abs(rt.mean() - mean) < 4.5 * rt.std(ddof=1) / np.sqrt(n)
    assert np.all(rt > 0.3)
    # The same seed gives the same draws; another seed other draws (common practice).
    again = vd.sample(0.8, 1.6, 0.45, 0.3, size=(n,), seed=7)
    assert np.array_equal(again[1], rt)
    assert not np.array_equal(vd.sample(0.8, 1.6, 0.45, 0.3, size=(n,), seed=8)[1], rt)


def test_values_outside_the_domain_raise_naming_element_and_parameter():
    # Source: the domains of DiffusionParams (boundary > 0, start in (0, 1)).
    with pytest.raises(ValueError, match=r"element 2: boundary = -1 is not allowed"):
        vd.ln_density(0.7, "upper", 1.0, np.array([1.0, 2.0, -1.0]), 0.5, 0.2)
    with pytest.raises(ValueError, match=r"element 1: rt = NaN is not a response time"):
        vd.cdf(np.array([0.5, np.nan]), "lower", 1.0, 1.0, 0.5, 0.2)
    with pytest.raises(ValueError, match=r"element 0: bound 'up' is not 'upper' or 'lower'"):
        vd.cdf(0.5, "up", 1.0, 1.0, 0.5, 0.2)


def test_vectorised_values_equal_the_density_command(tmp_path, cli_binary):
    # Source: `valuedrift density` (src/cli/density.rs), the command line's own evaluation of
    # the same rows; its numbers are written as the shortest text that reads back exactly.
    t = reference("first_passage_reference.csv")
    inputs = ["rt", "bound", "drift", "boundary", "start", "ndt", "drift_sd", "start_range", "ndt_range"]
    pacsv.write_csv(pacsv.read_csv(REFERENCE / "first_passage_reference.csv").select(inputs),
                    tmp_path / "in.csv")
    run_cli("density", "--input", tmp_path / "in.csv", "--output", tmp_path / "out.csv")
    out = pacsv.read_csv(tmp_path / "out.csv")
    args = (t["rt"], t["bound"], t["drift"], t["boundary"], t["start"], t["ndt"],
            t["drift_sd"], t["start_range"], t["ndt_range"])
    assert np.array_equal(vd.ln_density(*args), out["log_density"].to_numpy())
    assert np.array_equal(vd.cdf(*args), out["cdf"].to_numpy())
