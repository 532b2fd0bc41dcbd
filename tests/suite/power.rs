//! Power of the group contrast: the noncentral t distribution function, the normal-theory power
//! of Welch's test and the Wilson interval against SciPy (committed table
//! tests/reference/power.csv, written by tests/reference/generate_power.py with SciPy 1.17.1),
//! and the planning command's Monte Carlo power with its interval against the normal theory.

use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use rand_distr::{Distribution, Normal};
use valuedrift::group::power::{noncentral_t_cdf, welch_power, wilson_interval};
use valuedrift::plan::summaries::rejection_share;

struct Row {
    kind: String,
    numbers: Vec<Option<f64>>,
    value: f64,
}

fn reference() -> Vec<Row> {
    let path = concat!(env!("CARGO_MANIFEST_DIR"), "/tests/reference/power.csv");
    let mut reader = csv::Reader::from_path(path).expect("reference table");
    reader
        .records()
        .map(|r| {
            let r = r.unwrap();
            let numbers = (1..10).map(|i| r[i].parse::<f64>().ok()).collect();
            Row {
                kind: r[0].to_string(),
                numbers,
                value: r[10].parse().unwrap(),
            }
        })
        .collect()
}

/// scipy.stats.nct.cdf on 385 points (t −6…12, 2–200 degrees of freedom, δ −3…8).
#[test]
fn noncentral_t_matches_scipy() {
    let mut worst: f64 = 0.0;
    let mut count = 0;
    for row in reference().iter().filter(|r| r.kind == "nct_cdf") {
        let [t, df, ncp] = [0, 1, 2].map(|i| row.numbers[i].unwrap());
        let ours = noncentral_t_cdf(t, df, ncp);
        let error = (ours - row.value).abs();
        assert!(
            error <= 1e-10,
            "F({t}; {df}, {ncp}) = {ours}, SciPy {} (|Δ| = {error:e})",
            row.value
        );
        worst = worst.max(error);
        count += 1;
    }
    assert_eq!(count, 385);
    println!("noncentral t: largest |Δ| {worst:e} on {count} points");
}

/// Normal-theory power of the Welch test (SciPy's nct and t quantile, same formula).
#[test]
fn welch_power_matches_scipy() {
    let mut count = 0;
    for row in reference().iter().filter(|r| r.kind == "welch_power") {
        let n = |i: usize| row.numbers[i].unwrap();
        let ours = welch_power(n(3), n(4), n(5), n(6) as usize, n(7) as usize, n(8)).unwrap();
        assert!(
            (ours - row.value).abs() <= 1e-9,
            "power {ours}, SciPy {} for {:?}",
            row.value,
            &row.numbers[3..9]
        );
        count += 1;
    }
    assert_eq!(count, 9);
}

/// SciPy's binomtest(k, n).proportion_ci(method="wilson"); the first case is the worked example
/// of Newcombe (1998), 81 of 263: 0.2553 to 0.3662.
#[test]
fn wilson_interval_matches_scipy() {
    let rows = reference();
    let mut count = 0;
    for row in rows.iter().filter(|r| r.kind.starts_with("wilson")) {
        let (k, n, level) = (
            row.numbers[0].unwrap() as usize,
            row.numbers[1].unwrap() as usize,
            row.numbers[2].unwrap(),
        );
        let (low, high) = wilson_interval(k, n, level).unwrap();
        let ours = if row.kind == "wilson_low" { low } else { high };
        assert!(
            (ours - row.value).abs() <= 1e-12,
            "{} of {k}/{n} at {level}: {ours}, SciPy {}",
            row.kind,
            row.value
        );
        count += 1;
    }
    assert_eq!(count, 12);
    assert_eq!(wilson_interval(1, 0, 0.95), None);
}

/// The planning command's power (share of simulated studies whose Welch test rejects, with its
/// Wilson 95 % interval) on normally distributed estimates: the interval covers the power of the
/// noncentral t at every setting (the normal theory is exact up to the Welch test's random
/// degrees of freedom, far below the Monte Carlo error here). Fixed seed.
#[test]
fn monte_carlo_power_intervals_cover_the_noncentral_t() {
    let mut rng = ChaCha8Rng::seed_from_u64(20_261_202);
    let settings = [
        (0.5, 1.0, 1.0, 20),
        (0.3, 0.5, 0.5, 30),
        (0.8, 1.0, 1.5, 15),
        (0.0, 1.0, 1.0, 25),
        (1.0, 1.0, 1.0, 8),
    ];
    for (difference, sd0, sd1, n) in settings {
        let g0 = Normal::new(0.0, sd0).unwrap();
        let g1 = Normal::new(difference, sd1).unwrap();
        let studies: Vec<(Vec<f64>, Vec<f64>)> = (0..4000)
            .map(|_| {
                let a = (0..n).map(|_| g0.sample(&mut rng)).collect();
                let b = (0..n).map(|_| g1.sample(&mut rng)).collect();
                (a, b)
            })
            .collect();
        let (significant, count, share, (low, high)) = rejection_share(&studies, 0.05).unwrap();
        let theory = welch_power(difference, sd1, sd0, n, n, 0.05).unwrap();
        println!(
            "δ {difference}, sd {sd0}/{sd1}, n {n}: {significant}/{count} = {share:.4} \
             [{low:.4}, {high:.4}], noncentral t {theory:.4}"
        );
        assert!(
            low <= theory && theory <= high,
            "power {share} [{low}, {high}] does not cover {theory}"
        );
    }
}
