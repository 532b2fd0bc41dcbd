//! The race engine against high-precision references computed offline with mpmath (PyPI) by
//! `tests/reference/generate_race.py`: the Wald accumulator's density from its closed form at
//! 30+ digits and its distribution function by mpmath quadrature of the density; the linear
//! ballistic accumulator's density and distribution function by mpmath quadrature over the
//! start point (Brown & Heathcote 2008's integral definition, not their closed form); race
//! winner densities from those, and choice probabilities by mpmath quadrature of the winner
//! density over time.

use std::path::Path;
use valuedrift::race::{
    Accumulator, BallisticAccumulator, WaldAccumulator, ln_choice_probability, ln_wald_cdf,
    ln_winner_density,
};

fn rows(name: &str) -> Vec<csv::StringRecord> {
    let path = Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("tests/reference")
        .join(name);
    let mut reader =
        csv::Reader::from_path(&path).unwrap_or_else(|e| panic!("{}: {e}", path.display()));
    reader.records().map(|r| r.unwrap()).collect()
}

fn number(row: &csv::StringRecord, k: usize) -> f64 {
    row[k]
        .parse()
        .unwrap_or_else(|_| panic!("not a number: {:?}", &row[k]))
}

/// |a − b| in log space, treating two −∞ as equal.
fn log_gap(a: f64, b: f64) -> f64 {
    if a == b { 0.0 } else { (a - b).abs() }
}

#[test]
fn accumulator_densities_and_survivals_match_mpmath_within_1e_8() {
    // Columns: model,t,threshold,start_range,drift,drift_sd,ln_density,ln_cdf,ln_survival.
    let table = rows("race_accumulators.csv");
    assert!(table.len() >= 500, "{} rows", table.len());
    let (mut worst_density, mut worst_survival, mut worst_cdf) = (0.0f64, 0.0f64, 0.0f64);
    for row in &table {
        let (t, threshold, a, v, s) = (
            number(row, 1),
            number(row, 2),
            number(row, 3),
            number(row, 4),
            number(row, 5),
        );
        let (ln_f, ln_cdf, ln_s) = (number(row, 6), number(row, 7), number(row, 8));
        let (got_f, got_s, got_cdf) = match &row[0] {
            "wiener" => {
                let acc = WaldAccumulator { threshold };
                (
                    acc.ln_density(t, v),
                    acc.ln_survival(t, v),
                    Some(ln_wald_cdf(t, threshold, v)),
                )
            }
            "lba" => {
                let acc = BallisticAccumulator {
                    start_range: a,
                    threshold_gap: threshold - a,
                    drift_sd: s,
                };
                (acc.ln_density(t, v), acc.ln_survival(t, v), None)
            }
            other => panic!("unknown model {other}"),
        };
        let d = log_gap(got_f, ln_f);
        let e = log_gap(got_s, ln_s);
        assert!(d <= 1e-8, "{row:?}: ln density {got_f} vs {ln_f}");
        // The survival is compared in log space where it is at least 1e-300; above that a
        // relative 1e-8 is the engine's standard.
        assert!(e <= 1e-8, "{row:?}: ln survival {got_s} vs {ln_s}");
        worst_density = worst_density.max(d);
        worst_survival = worst_survival.max(e);
        if let Some(c) = got_cdf {
            let g = log_gap(c, ln_cdf);
            assert!(g <= 1e-8, "{row:?}: ln cdf {c} vs {ln_cdf}");
            worst_cdf = worst_cdf.max(g);
        }
    }
    println!(
        "race accumulators: largest |Δ ln density| {worst_density:.1e}, |Δ ln survival| \
         {worst_survival:.1e}, |Δ ln cdf| (Wald) {worst_cdf:.1e} on {} points",
        table.len()
    );
}

#[test]
fn race_densities_and_choice_probabilities_match_mpmath() {
    // Columns: model,ndt,threshold,start_range,drift_sd,drifts,option,t,ln_race_density,
    // choice_probability.
    let table = rows("race_choices.csv");
    assert!(table.len() >= 200, "{} rows", table.len());
    let (mut worst_density, mut worst_probability) = (0.0f64, 0.0f64);
    for row in &table {
        let (ndt, threshold, a, s) = (
            number(row, 1),
            number(row, 2),
            number(row, 3),
            number(row, 4),
        );
        let drifts: Vec<f64> = row[5].split(';').map(|x| x.parse().unwrap()).collect();
        let k: usize = row[6].parse().unwrap();
        let t = number(row, 7) - ndt;
        let (ln_g, p) = (number(row, 8), number(row, 9));
        let (got_g, got_p) = match &row[0] {
            "wiener" => {
                let acc = WaldAccumulator { threshold };
                (
                    ln_winner_density(&acc, &drifts, k, t),
                    ln_choice_probability(&acc, &drifts, k, 0.0).exp(),
                )
            }
            "lba" => {
                let acc = BallisticAccumulator {
                    start_range: a,
                    threshold_gap: threshold - a,
                    drift_sd: s,
                };
                (
                    ln_winner_density(&acc, &drifts, k, t),
                    ln_choice_probability(&acc, &drifts, k, 0.0).exp(),
                )
            }
            other => panic!("unknown model {other}"),
        };
        let d = log_gap(got_g, ln_g);
        let e = (got_p - p).abs() / p.max(1e-300);
        assert!(d <= 1e-8, "{row:?}: ln winner density {got_g} vs {ln_g}");
        assert!(e <= 1e-8, "{row:?}: P(option {k}) {got_p} vs {p}");
        worst_density = worst_density.max(d);
        worst_probability = worst_probability.max(e);
    }
    println!(
        "race winners: largest |Δ ln density| {worst_density:.1e}, relative |Δ P(k)| \
         {worst_probability:.1e} on {} rows",
        table.len()
    );
}
