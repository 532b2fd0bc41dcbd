//! Empirical-Bayes group priors (EM with the Laplace approximation, Huys et al. 2011).
//!
//! A simulated cohort whose parameters come from a known Gaussian group distribution on the
//! unconstrained scale, with few trials per subject (60), is fitted per subject by maximum
//! likelihood and by empirical Bayes. Shrinkage towards a well-estimated group mean lowers the
//! error of individual estimates when each subject's data are weak (James & Stein 1961; Efron &
//! Morris 1975), and the group mean should be recovered within its reported standard error.
//! Fixed seed.

use rand::{RngExt, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rand_distr::{Distribution, StandardNormal};
use statrs::distribution::{Continuous, Normal};
use valuedrift::data::TrialTable;
use valuedrift::fit::{
    EmOptions, FitOptions, fit_table, fit_table_hierarchical, laplace_log_evidence,
};
use valuedrift::likelihood::GroupPrior;
use valuedrift::model::load_model;
use valuedrift::simulate::{SimulationSettings, orchard_design, simulate_subject};

/// Generating group distribution on the unconstrained scale: (name, μ, σ). The transforms are
/// the declared ones of `gainloss-linear` (logistic within the bounds), so for example
/// gain_rate has median 1/(1 + e^0.6) = 0.354.
const GROUP: [(&str, f64, f64); 5] = [
    ("gain_rate", -0.6, 0.5),
    ("loss_rate", -1.4, 0.5),
    ("effort_weight", -3.0, 0.4),
    ("value_scale", -1.6, 0.3),
    ("boundary", -1.2, 0.3),
];

#[test]
fn empirical_bayes_beats_maximum_likelihood_with_few_trials() {
    let model = load_model("gainloss-linear").unwrap();
    let mut rng = ChaCha8Rng::seed_from_u64(20_261_202);
    let n_subjects = 30;
    let mut truth: Vec<Vec<f64>> = Vec::new();
    let mut true_theta: Vec<Vec<f64>> = Vec::new();
    let mut subjects = Vec::new();
    for i in 0..n_subjects {
        let design = orchard_design(&format!("h{i:02}"), "sim", 60, &mut rng);
        let mut theta = Vec::new();
        let values: Vec<f64> = model
            .parameters
            .iter()
            .map(|p| match GROUP.iter().find(|g| g.0 == p.name) {
                Some(&(_, mu, sd)) => {
                    let z: f64 = StandardNormal.sample(&mut rng);
                    theta.push(mu + sd * z);
                    p.transform().natural(mu + sd * z)
                }
                None if p.name == "ndt" => rng.random_range(0.25..0.4),
                None => p.fixed.unwrap(),
            })
            .collect();
        subjects.push(
            simulate_subject(
                &model,
                &values,
                &design,
                SimulationSettings::default(),
                &mut rng,
            )
            .expect("the design suits the model"),
        );
        truth.push(values);
        true_theta.push(theta);
    }
    let table = TrialTable {
        subjects,
        present: Vec::new(),
    };
    let options = FitOptions {
        starts: 4,
        ..FitOptions::default()
    };
    let models = [load_model("gainloss-linear").unwrap()];
    let (ml, skipped) = fit_table(&models, &table, &options, 0, &|| {}).unwrap();
    assert!(skipped.is_empty());
    let em = EmOptions {
        ibic_samples: 200,
        ..EmOptions::default()
    };
    let (groups, skipped) = fit_table_hierarchical(
        &[&models[0]],
        &table,
        &ml,
        &options,
        &em,
        false,
        None,
        0,
        &|_, _, _, _| {},
    )
    .unwrap();
    assert!(skipped.is_empty());
    let group = &groups[0];
    assert!(
        group.converged,
        "EM did not converge: {}",
        group.last_change
    );
    assert!(group.ibic.is_finite());

    // Root-mean-square error against the generating values, natural scale, relative to the
    // spread of the generating values (so that parameters on different scales add up).
    let names: Vec<&str> = GROUP.iter().map(|g| g.0).chain(["ndt"]).collect();
    let errors = |fits: &[valuedrift::fit::SubjectFit]| -> Vec<(f64, f64)> {
        names
            .iter()
            .map(|name| {
                let slot = model
                    .parameters
                    .iter()
                    .position(|p| p.name == *name)
                    .unwrap();
                let t: Vec<f64> = truth.iter().map(|v| v[slot]).collect();
                let n = t.len() as f64;
                let sq: f64 = fits
                    .iter()
                    .zip(&t)
                    .map(|(f, x)| (f.estimates[slot].estimate - x).powi(2))
                    .sum();
                let mean = t.iter().sum::<f64>() / n;
                let spread = (t.iter().map(|x| (x - mean).powi(2)).sum::<f64>() / n).sqrt();
                ((sq / n).sqrt(), (sq / n).sqrt() / spread)
            })
            .collect()
    };
    let relative_total =
        |fits: &[valuedrift::fit::SubjectFit]| -> f64 { errors(fits).iter().map(|e| e.1).sum() };
    let (e_ml, e_eb) = (errors(&ml), errors(&group.subjects));
    let report: Vec<String> = names
        .iter()
        .zip(e_ml.iter().zip(&e_eb))
        .map(|(name, (m, e))| format!("{name}: ML {:.3}, EB {:.3}", m.0, e.0))
        .collect();
    let (total_ml, total_eb) = (relative_total(&ml), relative_total(&group.subjects));
    println!(
        "{}; relative total ML {total_ml:.2}, EB {total_eb:.2}; EM iterations {}",
        report.join("; "),
        group.iterations
    );
    assert!(
        total_eb < total_ml,
        "empirical Bayes is not closer to the generating values: {}",
        report.join("; ")
    );

    // The group mean within 3 reported standard errors (a 99.7 % band under the normal
    // approximation of the estimator) of this cohort's mean generating value. (Against the
    // population mean μ the band is also met for this seed, but over ten seeds 2 of 50 means
    // fell outside it: the diagonal Laplace-EM underestimated the spread of boundary, e.g. σ̂ 0.15
    // where the cohort's was 0.24, and with it the standard error; see the README.) ndt is
    // excluded: its unconstrained scale is subject-specific and it was not drawn from a Gaussian.
    for (j, (name, mu, _)) in GROUP.iter().enumerate() {
        let p = &group.parameters[j];
        assert_eq!(p.name, *name);
        assert!(p.theta_mean_se.is_finite() && p.theta_mean_se > 0.0);
        let cohort = true_theta.iter().map(|t| t[j]).sum::<f64>() / n_subjects as f64;
        let z = (p.theta_mean - cohort) / p.theta_mean_se;
        println!(
            "{name}: group mean {:.3} ± {:.3} (cohort {cohort:.3}, population {mu}), z = {z:.2}",
            p.theta_mean, p.theta_mean_se
        );
        assert!(z.abs() < 3.0, "{name}: group mean off by {z:.2} SE");
    }
    // Shrinkage: the spread of the EB estimates (unconstrained scale) is below that of the ML
    // estimates for every parameter (common practice: the defining property of shrinkage).
    for j in 0..GROUP.len() {
        let spread = |fits: &[valuedrift::fit::SubjectFit]| {
            let x: Vec<f64> = fits.iter().map(|f| f.theta[j].clamp(-8.0, 8.0)).collect();
            let m = x.iter().sum::<f64>() / x.len() as f64;
            x.iter().map(|v| (v - m).powi(2)).sum::<f64>()
        };
        assert!(
            spread(&group.subjects) < spread(&ml),
            "parameter {j} not shrunk"
        );
    }

    // The same cohort with a full group covariance: EM converges, and the estimates are still
    // closer to the generating values than maximum likelihood (same measure as above).
    let full = EmOptions {
        full_covariance: true,
        ..em
    };
    let (groups, _) = fit_table_hierarchical(
        &[&models[0]],
        &table,
        &ml,
        &options,
        &full,
        false,
        None,
        0,
        &|_, _, _, _| {},
    )
    .unwrap();
    let group = &groups[0];
    assert!(group.converged && !group.prior.is_diagonal());
    let total_full = relative_total(&group.subjects);
    println!(
        "full covariance: relative total EB {total_full:.2} (ML {total_ml:.2}), EM iterations {}",
        group.iterations
    );
    assert!(total_full < total_ml);
}

#[test]
fn group_prior_density_matches_the_normal_density() {
    // Reference: statrs Normal::ln_pdf, and the derivative of the normal log-density,
    // −(x − μ)/σ² (any statistics handbook).
    let prior = GroupPrior::diagonal(vec![0.3, -2.0], vec![0.25, 4.0]).unwrap();
    let theta = [1.1, 0.5];
    let (value, slope) = prior.ln_density_with_gradient(&theta);
    let expected: f64 = (0..2)
        .map(|j| {
            Normal::new(prior.mean[j], prior.variance()[j].sqrt())
                .unwrap()
                .ln_pdf(theta[j])
        })
        .sum();
    assert!((value - expected).abs() < 1e-12, "{value} vs {expected}");
    assert!((slope[0] - (-(1.1 - 0.3) / 0.25)).abs() < 1e-12);
    assert!((slope[1] - (-(0.5 + 2.0) / 4.0)).abs() < 1e-12);
}

#[test]
fn full_group_prior_density_matches_the_bivariate_normal_formula() {
    // Reference: the bivariate normal density (e.g. Johnson & Kotz 1972, ch. 36):
    // f = exp(−q/(2(1 − ρ²))) / (2π σ1 σ2 √(1 − ρ²)),
    // q = z1² − 2ρ z1 z2 + z2², z_i = (x_i − μ_i)/σ_i; and its gradient
    // ∂ ln f/∂x1 = −(z1 − ρ z2)/(σ1 (1 − ρ²)), ∂ ln f/∂x2 = −(z2 − ρ z1)/(σ2 (1 − ρ²)).
    let (s1, s2, rho) = (0.5_f64, 2.0_f64, -0.6_f64);
    let mean = vec![0.3, -2.0];
    let covariance = vec![vec![s1 * s1, rho * s1 * s2], vec![rho * s1 * s2, s2 * s2]];
    let prior = GroupPrior::full(mean.clone(), covariance).unwrap();
    assert!(!prior.is_diagonal());
    let x = [1.1, 0.5];
    let (z1, z2) = ((x[0] - mean[0]) / s1, (x[1] - mean[1]) / s2);
    let one = 1.0 - rho * rho;
    let q = z1 * z1 - 2.0 * rho * z1 * z2 + z2 * z2;
    let expected = -q / (2.0 * one) - (std::f64::consts::TAU * s1 * s2 * one.sqrt()).ln();
    let (value, slope) = prior.ln_density_with_gradient(&x);
    assert!((value - expected).abs() < 1e-12, "{value} vs {expected}");
    assert!((slope[0] + (z1 - rho * z2) / (s1 * one)).abs() < 1e-12);
    assert!((slope[1] + (z2 - rho * z1) / (s2 * one)).abs() < 1e-12);
    // Not positive definite: refused (|ρ| > 1).
    assert!(GroupPrior::full(vec![0.0, 0.0], vec![vec![1.0, 2.0], vec![2.0, 1.0]]).is_none());
}

#[test]
fn laplace_evidence_is_exact_for_a_gaussian_integrand() {
    // For ln p(y, θ) = c − ½ θᵀHθ the Laplace approximation is exact:
    // ∫ e^{c − ½ θᵀHθ} dθ = e^c (2π)^{k/2} |H|^{−1/2} (the Gaussian integral). Two dimensions,
    // H = diag(4, 0.5): ln = c + ln 2π − ½ ln 2.
    let c = -12.5;
    let ln_det: f64 = (4.0_f64 * 0.5).ln();
    let expected = c + (2.0 * std::f64::consts::PI).ln() - 0.5 * 2.0_f64.ln();
    assert!((laplace_log_evidence(c, 2.0, ln_det) - expected).abs() < 1e-12);
}

/// A small simulated table in two groups, written as CSV.
fn small_table_csv(dir: &std::path::Path) -> std::path::PathBuf {
    let model = load_model("gainloss-linear").unwrap();
    let mut rng = ChaCha8Rng::seed_from_u64(7);
    let generating = [
        ("gain_rate", 0.4),
        ("loss_rate", 0.25),
        ("effort_weight", 0.8),
        ("value_scale", 5.0),
        ("boundary", 1.6),
        ("ndt", 0.3),
    ];
    let values: Vec<f64> = model
        .parameters
        .iter()
        .map(|p| match generating.iter().find(|g| g.0 == p.name) {
            Some(&(_, x)) => x,
            None => p.fixed.unwrap(),
        })
        .collect();
    let subjects = (0..8)
        .map(|i| {
            let group = if i < 4 { "alpha" } else { "beta" };
            let design = orchard_design(&format!("c{i}"), group, 60, &mut rng);
            simulate_subject(
                &model,
                &values,
                &design,
                SimulationSettings::default(),
                &mut rng,
            )
            .expect("the design suits the model")
        })
        .collect();
    let table = TrialTable {
        subjects,
        present: Vec::new(),
    };
    let path = dir.join("trials.csv");
    let mut file = std::fs::File::create(&path).unwrap();
    valuedrift::results::trials_table(&table)
        .write_csv(&mut file)
        .unwrap();
    path
}

#[test]
fn fit_hierarchical_by_group_writes_the_group_tables() {
    let dir = tempfile::tempdir().unwrap();
    let data = small_table_csv(dir.path());
    let out = dir.path().join("fits");
    let status = std::process::Command::new(env!("CARGO_BIN_EXE_valuedrift"))
        .args([
            "fit",
            "--model",
            "gainloss-linear",
            "--starts",
            "2",
            "--hierarchical",
        ])
        .args(["--by", "group", "--ibic-samples", "50", "--data"])
        .arg(&data)
        .arg("--out")
        .arg(&out)
        .output()
        .unwrap();
    assert!(
        status.status.success(),
        "{}",
        String::from_utf8_lossy(&status.stderr)
    );
    let stdout = String::from_utf8_lossy(&status.stdout);
    assert!(stdout.contains("iBIC"), "{stdout}");
    for stem in [
        "parameters",
        "fit_summary",
        "eb_parameters",
        "eb_fit_summary",
        "eb_group_priors",
        "eb_model_evidence",
    ] {
        assert!(out.join(format!("{stem}.csv")).exists(), "{stem}.csv");
        assert!(
            out.join(format!("{stem}.parquet")).exists(),
            "{stem}.parquet"
        );
    }
    let priors = std::fs::read_to_string(out.join("eb_group_priors.csv")).unwrap();
    let header = priors.lines().next().unwrap();
    assert!(
        header.starts_with("model,scope,parameter,n_subjects,theta_mean,theta_mean_se,theta_sd")
    );
    // One row per group and free parameter: 2 groups × 6 parameters.
    assert_eq!(priors.lines().count(), 1 + 2 * 6);
    assert!(
        priors.lines().any(|l| l.contains(",alpha,"))
            && priors.lines().any(|l| l.contains(",beta,"))
    );
    let summary = std::fs::read_to_string(out.join("eb_fit_summary.csv")).unwrap();
    let columns: Vec<&str> = summary.lines().next().unwrap().split(',').collect();
    let evidence = columns
        .iter()
        .position(|c| *c == "log_evidence_laplace")
        .unwrap();
    // Every subject's Laplace evidence under its group prior is a finite number.
    for line in summary.lines().skip(1) {
        let cell = line.split(',').nth(evidence).unwrap();
        assert!(cell.parse::<f64>().unwrap().is_finite(), "{line}");
    }
    // Later commands read the shrunken estimates on request: the exported latent values then
    // differ from those at the per-subject estimates (shrinkage moves every subject's estimates).
    let export = |source: &str, dir: &str| {
        let output = std::process::Command::new(env!("CARGO_BIN_EXE_valuedrift"))
            .args([
                "export",
                "--model",
                "gainloss-linear",
                "--estimates",
                source,
                "--fits",
            ])
            .arg(&out)
            .arg("--data")
            .arg(&data)
            .arg("--out")
            .arg(dir)
            .output()
            .unwrap();
        assert!(
            output.status.success(),
            "{}",
            String::from_utf8_lossy(&output.stderr)
        );
        std::fs::read_to_string(std::path::Path::new(dir).join("latents.csv")).unwrap()
    };
    let per_subject = export("per-subject", &format!("{}/x1", dir.path().display()));
    let shrunken = export("empirical-bayes", &format!("{}/x2", dir.path().display()));
    assert_eq!(per_subject.lines().count(), shrunken.lines().count());
    assert_ne!(per_subject, shrunken);
}

#[test]
fn by_without_hierarchical_is_refused_and_writes_nothing() {
    let dir = tempfile::tempdir().unwrap();
    let data = small_table_csv(dir.path());
    let out = dir.path().join("fits");
    let output = std::process::Command::new(env!("CARGO_BIN_EXE_valuedrift"))
        .args([
            "fit",
            "--model",
            "gainloss-linear",
            "--by",
            "group",
            "--data",
        ])
        .arg(&data)
        .arg("--out")
        .arg(&out)
        .output()
        .unwrap();
    assert!(!output.status.success());
    assert!(String::from_utf8_lossy(&output.stderr).contains("--hierarchical"));
    assert!(!out.exists());
}
