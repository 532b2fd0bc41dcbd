//! The first-passage engine against high-precision references computed offline with mpmath
//! (PyPI, working precision 20–40 digits) by `tests/reference/generate_first_passage.py`: densities from
//! the series of Navarro & Fuss (2009); distribution functions from the Wald-sum and large-time
//! representations (Blurton, Kesselmeier & Gondan 2012), which the script checks against each
//! other and against the integral of the density; across-trial drift variability integrated by
//! mpmath.quad over the normal drift in the density column (not by the closed form used here), and
//! over time in the distribution column; start and non-decision ranges by mpmath.quad.

use std::path::Path;
use valuedrift::first_passage::{
    Bound, DiffusionParams, bound_probability, cdf, ln_density, mean_decision_time,
    mean_decision_time_given,
};

fn read_table(name: &str) -> (Vec<String>, Vec<Vec<String>>) {
    let path = Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("tests/reference")
        .join(name);
    let mut reader =
        csv::Reader::from_path(&path).unwrap_or_else(|e| panic!("{}: {e}", path.display()));
    let header = reader
        .headers()
        .unwrap()
        .iter()
        .map(str::to_string)
        .collect();
    let rows = reader
        .records()
        .map(|r| r.unwrap().iter().map(str::to_string).collect())
        .collect();
    (header, rows)
}

fn column(header: &[String], name: &str) -> usize {
    header
        .iter()
        .position(|h| h == name)
        .unwrap_or_else(|| panic!("no column {name}"))
}

#[test]
fn log_density_and_cdf_match_mpmath_within_1e_8() {
    let (header, rows) = read_table("first_passage_reference.csv");
    assert!(rows.len() >= 500, "reference table has {} rows", rows.len());
    let get =
        |row: &Vec<String>, name: &str| -> f64 { row[column(&header, name)].parse().unwrap() };
    let mut worst_density: f64 = 0.0;
    let mut worst_cdf: f64 = 0.0;
    let mut failures = Vec::new();
    let mut below_1e300 = 0;
    for row in &rows {
        let params = DiffusionParams::new(
            get(row, "drift"),
            get(row, "boundary"),
            get(row, "start"),
            get(row, "ndt"),
        )
        .unwrap()
        .with_variability(
            get(row, "drift_sd"),
            get(row, "start_range"),
            get(row, "ndt_range"),
        )
        .unwrap();
        let bound = Bound::parse(&row[column(&header, "bound")]).unwrap();
        let rt = get(row, "rt");
        let expected_ln = get(row, "log_density");
        let expected_cdf = get(row, "cdf");
        let ln_f = ln_density(rt, bound, &params);
        let f = cdf(rt, bound, &params);
        let d_ln = (ln_f - expected_ln).abs();
        let d_cdf = (f - expected_cdf).abs();
        if expected_ln < -690.0 {
            below_1e300 += 1;
        }
        worst_density = worst_density.max(d_ln);
        worst_cdf = worst_cdf.max(d_cdf);
        if !(d_ln <= 1e-8 && d_cdf <= 1e-8) {
            failures.push(format!(
                "rt={rt} {bound} {params:?}: ln f {ln_f} vs {expected_ln}, cdf {f} vs {expected_cdf}"
            ));
        }
    }
    println!(
        "worst |Δ ln f| = {worst_density:e}, worst |Δ cdf| = {worst_cdf:e} over {} rows",
        rows.len()
    );
    assert!(
        below_1e300 > 0,
        "the table must include densities below 1e-300"
    );
    assert!(
        failures.is_empty(),
        "{} of {} rows off:\n{}",
        failures.len(),
        rows.len(),
        failures.join("\n")
    );
}

/// Each row of first_passage_moments.csv as a process (with non-decision time `ndt`, which the
/// table's quantities do not depend on) and a lookup of the row's columns by name.
fn moments_rows(ndt: f64) -> Vec<(DiffusionParams, impl Fn(&str) -> f64)> {
    let (header, rows) = read_table("first_passage_moments.csv");
    assert!(rows.len() >= 30);
    rows.into_iter()
        .map(|row| {
            let header = header.clone();
            let get = move |name: &str| -> f64 { row[column(&header, name)].parse().unwrap() };
            let p = DiffusionParams::new(get("drift"), get("boundary"), get("start"), ndt).unwrap();
            (p, get)
        })
        .collect()
}

#[test]
fn bound_probabilities_and_mean_decision_times_match_mpmath_integrals() {
    // The reference obtains P(upper) and the mean decision times by numerically integrating the
    // densities (mpmath.quad); here they come from the closed forms of Grasman, Wagenmakers &
    // van der Maas (2009).
    for (p, get) in moments_rows(0.0) {
        let checks = [
            ("p_upper", bound_probability(Bound::Upper, &p)),
            ("mean_dt", mean_decision_time(&p)),
            ("mean_dt_upper", mean_decision_time_given(Bound::Upper, &p)),
            ("mean_dt_lower", mean_decision_time_given(Bound::Lower, &p)),
        ];
        for (name, value) in checks {
            let expected = get(name);
            let rel = ((value - expected) / expected).abs();
            assert!(
                rel < 1e-10,
                "{name} for {p:?}: {value} vs {expected} (rel {rel:e})"
            );
        }
    }
}

#[test]
fn choice_only_log_probability_matches_the_mpmath_absorption_probabilities() {
    // The value returned with the gradient of ln P(bound) (used for choices whose time was
    // trimmed) against the mpmath integrals of the density in first_passage_moments.csv:
    // p_upper at the upper bound and 1 − p_upper at the lower bound (the two absorption
    // probabilities sum to one; Feller 1968, XIV.2).
    use valuedrift::first_passage::ln_bound_probability_with_gradient;
    for (p, get) in moments_rows(0.3) {
        let upper = get("p_upper");
        // The table stores p_upper in double precision, so 1 − p_upper is known only to about
        // 1e-16 absolute: the lower bound is compared in absolute terms.
        let (ln_up, _) = ln_bound_probability_with_gradient(Bound::Upper, &p);
        let rel = ((ln_up.exp() - upper) / upper).abs();
        assert!(
            rel < 1e-9,
            "upper for {p:?}: {} vs {upper} (rel {rel:e})",
            ln_up.exp()
        );
        let (ln_low, _) = ln_bound_probability_with_gradient(Bound::Lower, &p);
        let diff = (ln_low.exp() - (1.0 - upper)).abs();
        assert!(
            diff < 1e-14,
            "lower for {p:?}: {} vs {} (diff {diff:e})",
            ln_low.exp(),
            1.0 - upper
        );
    }
}
