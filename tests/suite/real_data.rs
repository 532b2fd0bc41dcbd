//! Fits on published data that nobody here wrote: the online effort-offer study of Mehrhof &
//! Nord (2025, eLife 13:RP96803), 958 participants × 64 accept/reject offers (efforts 1–4,
//! points 2–5) with response times, MIT licence (tests/data/effort-offers-2025/README.md and
//! LICENSE-data.txt travel with the copy).
//!
//! Targets of the issue "Fits a researcher can trust on real data":
//! - built-in `offered-linear` on all 958 participants: value_scale at a bound for at most 5 %
//!   of them and a summed BIC no worse than 278,619 (the measurement with a hand-narrowed model
//!   file that the issue reports);
//! - recovery on data simulated on that design (the real offers of the first 40 participants,
//!   generating values inside the range the real fits span): Pearson r ≥ 0.9 for value_scale and
//!   effort_weight, at most 5 % of those estimates at a bound — with each participant's 64
//!   offers given twice (128 trials); at the study's own 64 trials recovery is limited by the
//!   information in the data (r ≈ 0.8 for value_scale), which the test states, and every fit
//!   must still reach at least the likelihood of the generating values (the defining property
//!   of a maximum-likelihood estimate, so a fit below it has missed the maximum).

use crate::common::{draw_values, pearson};
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use std::path::Path;
use valuedrift::data::{ColumnMap, TrialTable, read_trials};
use valuedrift::fit::{FitOptions, SubjectFit, fit_table};
use valuedrift::likelihood::SubjectLikelihood;
use valuedrift::model::load_model;
use valuedrift::simulate::{SimulationSettings, simulate_subject};

fn real_table() -> TrialTable {
    let path =
        Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/data/effort-offers-2025/trials.csv");
    read_trials(&path, &ColumnMap::default()).expect("the committed copy of the real data")
}

fn estimate(fit: &SubjectFit, name: &str) -> (f64, bool) {
    let e = fit.estimates.iter().find(|e| e.name == name).unwrap();
    (e.estimate, e.at_bound)
}

#[test]
fn offered_linear_on_the_real_study_meets_the_targets() {
    let table = real_table();
    assert_eq!(table.subjects.len(), 958, "the README's participant count");
    let model = load_model("offered-linear").unwrap();
    let (fits, skipped) = fit_table(
        std::slice::from_ref(&model),
        &table,
        &FitOptions::default(),
        0,
        &|| {},
    )
    .unwrap();
    assert!(skipped.is_empty(), "{} subjects skipped", skipped.len());
    let at_bound = fits.iter().filter(|f| estimate(f, "value_scale").1).count();
    let summed_bic: f64 = fits.iter().map(|f| f.bic).sum();
    let not_converged = fits.iter().filter(|f| !f.converged).count();
    println!(
        "value_scale at a bound {at_bound}/958, summed BIC {summed_bic:.1}, not converged {not_converged}"
    );
    assert!(
        at_bound * 20 <= fits.len(),
        "value_scale at a bound for {at_bound} of {}",
        fits.len()
    );
    assert!(summed_bic <= 278_619.0, "summed BIC {summed_bic}");
    // A fit is either right or flagged: every fit not flagged as converged says why.
    for f in fits.iter().filter(|f| !f.converged) {
        assert!(f.status.starts_with("not converged: "), "{}", f.status);
    }
}

/// Simulates 40 participants on the real offers (each participant's 64 offers `repeats` times in
/// a row), fits them, and returns (generating values, fits, ln L at the generating values).
fn recovery(repeats: usize) -> (Vec<Vec<f64>>, Vec<SubjectFit>, Vec<f64>) {
    let design = real_table();
    let model = load_model("offered-linear").unwrap();
    // Inside the 5-95 % range of the real participants' fits (value_scale 0.18-0.71,
    // effort_weight 0-0.92, boundary 2.3-4.6, ndt 0.25-1.7 s).
    let ranges = [
        ("effort_weight", 0.1, 1.0),
        ("value_scale", 0.2, 0.8),
        ("boundary", 2.0, 4.5),
        ("ndt", 0.4, 0.9),
    ];
    let mut rng = ChaCha8Rng::seed_from_u64(20_261_202);
    let mut truth: Vec<Vec<f64>> = Vec::new();
    let mut subjects = Vec::new();
    for offers in design.subjects.iter().take(40) {
        let mut offers = offers.clone();
        let n = offers.trials.len() as i64;
        offers.trials = (0..repeats)
            .flat_map(|k| {
                offers.trials.iter().map(move |t| {
                    let mut t = t.clone();
                    t.trial += k as i64 * n;
                    t
                })
            })
            .collect();
        let values = draw_values(&model, &ranges, &mut rng);
        subjects.push(
            simulate_subject(
                &model,
                &values,
                &offers,
                SimulationSettings::default(),
                &mut rng,
            )
            .expect("the design suits the model"),
        );
        truth.push(values);
    }
    let table = TrialTable {
        subjects,
        present: design.present.clone(),
    };
    let (fits, _) = fit_table(
        std::slice::from_ref(&model),
        &table,
        &FitOptions::default(),
        0,
        &|| {},
    )
    .unwrap();
    let at_truth = table
        .subjects
        .iter()
        .zip(&truth)
        .map(|(s, values)| {
            let lik = SubjectLikelihood::new(&model, s, None).unwrap();
            let free: Vec<f64> = model.free_slots().iter().map(|&k| values[k]).collect();
            lik.evaluate(&lik.unconstrained(&free)).ln_likelihood
        })
        .collect();
    (truth, fits, at_truth)
}

/// Checks the maximum-likelihood property (ln L at the estimate ≥ ln L at the generating
/// values, for every subject: a fit below it has missed the maximum) and returns Pearson's r
/// and the count at a bound for value_scale and effort_weight.
fn recovered(repeats: usize) -> Vec<(&'static str, f64, usize)> {
    let model = load_model("offered-linear").unwrap();
    let (truth, fits, at_truth) = recovery(repeats);
    assert_eq!(fits.len(), 40);
    for (f, lt) in fits.iter().zip(&at_truth) {
        assert!(
            f.log_likelihood >= lt - 0.05,
            "{}: ln L {} below its value {lt} at the generating parameters ({})",
            f.subject,
            f.log_likelihood,
            f.status
        );
    }
    ["value_scale", "effort_weight"]
        .into_iter()
        .map(|name| {
            let slot = model
                .parameters
                .iter()
                .position(|p| p.name == name)
                .unwrap();
            let generating: Vec<f64> = truth.iter().map(|v| v[slot]).collect();
            let fitted: Vec<f64> = fits.iter().map(|f| estimate(f, name).0).collect();
            let bounded = fits.iter().filter(|f| estimate(f, name).1).count();
            let r = pearson(&generating, &fitted);
            println!("{repeats} x 64 trials, {name}: r = {r:.3}, at a bound {bounded}/40");
            (name, r, bounded)
        })
        .collect()
}

#[test]
fn offered_linear_fits_on_the_real_design_reach_the_maximum() {
    // 64 trials (the study's own length): recovery is limited by the information in 64
    // trials, not by the search; every fit must still be a maximum.
    for (name, r, bounded) in recovered(1) {
        assert!(r >= 0.7, "{name}: r = {r}");
        assert!(bounded * 20 <= 40, "{name}: {bounded} of 40 at a bound");
    }
}

#[test]
fn offered_linear_parameters_are_recovered_on_the_real_design() {
    // The same offers twice (128 trials): the targets.
    for (name, r, bounded) in recovered(2) {
        assert!(r >= 0.9, "{name}: r = {r}");
        assert!(bounded * 20 <= 40, "{name}: {bounded} of 40 at a bound");
    }
}

#[test]
fn gain_loss_fits_on_a_kink_of_the_likelihood_are_maxima_and_reported_as_such() {
    // Source: the published effort-offer data (MIT licence, above) and common practice (a
    // maximum is a point where the objective rises on no side). The gain-loss rule switches its
    // learning rate where a prediction error changes sign, so ln L has kinks; on two of the
    // first six participants `gainloss-linear`'s best point sits on one, where the analytic
    // gradient is one side's slope (0.21 and 0.12) and the fit used to be flagged "not
    // converged". Here a step of 1e-5 to either side along every interior parameter must not
    // raise ln L + ln prior by more than 1e-3 per unit, and the status must name the kink.
    let table = real_table();
    let model = load_model("gainloss-linear").unwrap();
    for id in ["00a5b18a18", "0126247ea4"] {
        let subject = table.subjects.iter().find(|s| s.id == id).unwrap();
        let lik = SubjectLikelihood::new(&model, subject, None).unwrap();
        let fit = valuedrift::fit::fit_subject(&lik, &FitOptions::default());
        assert!(fit.converged, "{id}: {}", fit.status);
        assert!(fit.status.contains("on a kink"), "{id}: {}", fit.status);
        for (name, rise) in crate::common::rises_beside_fit(&lik, &fit) {
            assert!(
                rise < 1e-3,
                "{id}, {name}: ln L rises at {rise:.2e} beside the best point"
            );
        }
    }
}

/// A gain-loss fit of a participant of the effort-offer data (MIT licence, above), with its
/// likelihood.
fn gainloss_fit<'a>(
    table: &'a TrialTable,
    model: &'a valuedrift::model::Model,
    id: &str,
) -> (SubjectLikelihood<'a>, SubjectFit) {
    let subject = table.subjects.iter().find(|s| s.id == id).unwrap();
    let lik = SubjectLikelihood::new(model, subject, None).unwrap();
    let fit = valuedrift::fit::fit_subject(&lik, &FitOptions::default());
    (lik, fit)
}

/// The fitted point of `fit` on the optimiser's scale.
fn fitted_theta(lik: &SubjectLikelihood<'_>, fit: &SubjectFit) -> Vec<f64> {
    let free = lik.model().free_slots();
    let natural: Vec<f64> = free.iter().map(|&s| fit.estimates[s].estimate).collect();
    lik.unconstrained(&natural)
}

/// Checks that `status` states, after `prefix`, a gradient "X at the best point along NAME"
/// that is the gradient at the fitted point (to the rounding of its one decimal).
fn stated_gradient_is_found(lik: &SubjectLikelihood<'_>, fit: &SubjectFit, prefix: &str) {
    let rest = fit
        .status
        .split_once(prefix)
        .unwrap_or_else(|| panic!("{}", fit.status))
        .1;
    let (stated, rest) = rest.split_once(" at the best point along ").unwrap();
    let name = rest.split([',', ';']).next().unwrap();
    let stated: f64 = stated.parse().unwrap();
    let model = lik.model();
    let j = model
        .free_slots()
        .iter()
        .position(|&s| model.parameters[s].name == name)
        .unwrap();
    let found = lik.evaluate(&fitted_theta(lik, fit)).gradient[j].abs();
    assert!(
        (found - stated).abs() <= 0.051 * stated,
        "the status says {stated:.1e} along {name}; the gradient there is {found:.3e}"
    );
}

#[test]
fn the_verdict_is_on_the_point_the_fit_reports() {
    // Source: the published effort-offer data (MIT licence, above) and common practice (a fit's
    // status describes its estimates). On these participants a restart from a point where
    // L-BFGS had stopped short moved the best point by less than the tolerance that ends the
    // search (SAME_OPTIMUM); the status then still described the earlier point ("not converged:
    // gradient 1.5e-3 / 1.2e-2 / 2.2e-2 at the best point") while the estimates were the
    // restart's, a maximum on a kink of the gain-loss likelihood. At the reported estimates the
    // objective must rise on no side by more than 1e-3 per unit along any interior parameter,
    // and the fit must say converged.
    let table = real_table();
    let model = load_model("gainloss-linear").unwrap();
    for id in ["1ca60ed9ea", "ed85eca034", "8055f24909"] {
        let (lik, fit) = gainloss_fit(&table, &model, id);
        assert!(fit.converged, "{id}: {}", fit.status);
        for (name, rise) in crate::common::rises_beside_fit(&lik, &fit) {
            assert!(
                rise < 1e-3,
                "{id}, {name}: ln L rises at {rise:.2e} beside the reported point"
            );
        }
    }
}

/// −(ln L + ln prior) of `lik` as a function of the free parameters `moving` only (the others
/// held at `theta`), for argmin's Nelder–Mead.
struct HeldExcept<'a, 'b> {
    lik: &'a SubjectLikelihood<'b>,
    theta: Vec<f64>,
    moving: Vec<usize>,
}

impl argmin::core::CostFunction for HeldExcept<'_, '_> {
    type Param = Vec<f64>;
    type Output = f64;

    fn cost(&self, p: &Vec<f64>) -> Result<f64, argmin::core::Error> {
        let mut theta = self.theta.clone();
        for (&j, &x) in self.moving.iter().zip(p) {
            theta[j] = x;
        }
        let e = self.lik.evaluate(&theta);
        Ok(-(e.ln_likelihood + e.ln_prior))
    }
}

#[test]
fn a_slope_left_at_the_best_point_is_converged_only_where_the_curvature_puts_the_maximum_within_reach()
 {
    // Sources: the published effort-offer data (MIT licence, above); the Newton decrement
    // (Boyd & Vandenberghe 2004, Convex Optimization, §9.5.1); an independent derivative-free
    // search (Nelder & Mead 1965, argmin's implementation). On 0a76090a75 and 27e5e64416 L-BFGS
    // ends with a gradient of 5.4e-3 / 3.1e-3 (above the absolute 1e-3) on a kink of the
    // gain-loss likelihood; the Hessian puts the maximum about 1e-3 standard errors away and a
    // Newton step gains about 1e-6 / 1e-5 in ln L, so the fits say converged and give those
    // figures. Checked from outside: a Nelder–Mead search over the interior parameters, started
    // from the reported point, finds nothing higher by more than 1e-4 (twice the test's 5e-5);
    // on 2026-12-03 it found 1.07e-6 and 8.3e-6, what the Newton step predicts (and, in a run
    // by hand with its simplex started 0.05 away along the first interior parameter, it
    // climbed back to the same gains).
    // On 4ed564c629 the Hessian at the reported point is not positive definite: no distance to
    // the maximum can be told, and the fit stays flagged with the gradient it states.
    let table = real_table();
    let model = load_model("gainloss-linear").unwrap();
    for id in ["0a76090a75", "27e5e64416"] {
        let (lik, fit) = gainloss_fit(&table, &model, id);
        assert!(fit.converged, "{id}: {}", fit.status);
        assert!(
            fit.status.contains(", but the curvature puts the maximum "),
            "{id}: {}",
            fit.status
        );
        stated_gradient_is_found(&lik, &fit, "gradient ");
        let theta = fitted_theta(&lik, &fit);
        let free = model.free_slots();
        let moving: Vec<usize> = (0..free.len())
            .filter(|&j| !fit.estimates[free[j]].at_bound)
            .collect();
        let start: Vec<f64> = moving.iter().map(|&j| theta[j]).collect();
        let mut simplex = vec![start.clone()];
        for k in 0..start.len() {
            let mut vertex = start.clone();
            vertex[k] += 0.01;
            simplex.push(vertex);
        }
        let reported = -(fit.log_likelihood + fit.log_prior);
        let problem = HeldExcept {
            lik: &lik,
            theta,
            moving,
        };
        let solver = argmin::solver::neldermead::NelderMead::new(simplex)
            .with_sd_tolerance(1e-12)
            .unwrap();
        let best = argmin::core::Executor::new(problem, solver)
            .configure(|s| s.max_iters(3000))
            .run()
            .unwrap()
            .state
            .best_cost;
        assert!(
            reported - best <= 1e-4,
            "{id}: Nelder–Mead from the reported point gains {:.2e} in ln L",
            reported - best
        );
    }
    let (lik, fit) = gainloss_fit(&table, &model, "4ed564c629");
    assert!(!fit.converged, "{}", fit.status);
    assert!(
        fit.status
            .contains("the Hessian there is not positive definite"),
        "{}",
        fit.status
    );
    stated_gradient_is_found(&lik, &fit, "not converged: gradient ");
}
