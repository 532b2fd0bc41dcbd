//! Synthetic data: a model run forward on a trial design with given parameters.
//!
//! A design gives, per trial, the offer (options, efforts, offered magnitudes) and what each
//! option would deliver if chosen (`outcome_if_a`, `outcome_if_b`), so that learning tasks can be
//! simulated whatever the choices. Response times come from the first-passage engine's exact
//! sampler; a response later than the deadline (if given) is recorded as no response.

use crate::data::{Choice, Subject, Trial};
use crate::likelihood::{DataMismatch, TrialColumns, Values};
use crate::model::Model;
use crate::model::components::{PreparedChoice, SubjectContext};
use crate::model::dual::{D, constant};
use rand::Rng;

/// Settings of a simulation.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct SimulationSettings {
    /// Responses slower than this (seconds) become no response.
    pub deadline: Option<f64>,
    /// Range of the uniform response time of lapse guesses.
    pub guess_rt_range: (f64, f64),
    /// Response lock (s): no response earlier; draws before it are redrawn, so that responses
    /// follow the process conditioned on no bound before the lock, as in the likelihood.
    pub lock: Option<f64>,
}

impl Default for SimulationSettings {
    fn default() -> Self {
        SimulationSettings {
            deadline: None,
            guess_rt_range: (0.2, 2.5),
            lock: None,
        }
    }
}

/// Simulates one subject: `natural` holds every model parameter (by model slot) on the natural
/// scale; the design's trials give offers, potential outcomes and the columns that parameters
/// varying over trials read ([`crate::model::varying`]). Returns the subject with choices,
/// response times and outcomes filled in, or the design's mismatch with the model (a condition
/// level the model does not list, a missing covariate).
pub fn simulate_subject(
    model: &Model,
    natural: &[f64],
    design: &Subject,
    settings: SimulationSettings,
    rng: &mut dyn Rng,
) -> Result<Subject, DataMismatch> {
    let context = SubjectContext {
        rt_min: settings.guess_rt_range.0,
        rt_max: settings.guess_rt_range.1,
        deadline: settings.deadline,
        lock: settings.lock,
    };
    let per_trial = TrialColumns::bind(model, design)?;
    let constant_p: Vec<D> = natural.iter().map(|&x| constant(x)).collect();
    let mut values: Option<Values> = None;
    let mut trials = Vec::with_capacity(design.trials.len());
    for (t, trial) in design.trials.iter().enumerate() {
        let trial_p = if model.varies() {
            per_trial.natural_values(model, t, natural)
        } else {
            constant_p.clone()
        };
        let values =
            values.get_or_insert_with(|| Values::new(model, &trial_p, design.options.len()));
        let prepared = model.choice.prepare(&trial_p, context);
        values.appraise(model, trial, &trial_p, per_trial.attribute_values(t));
        let signal: Vec<f64> = values.appraisal.signal.iter().map(|d| d.re).collect();
        let (choice, rt) = draw_trial(prepared.as_ref(), &signal, settings.deadline, rng);
        let outcome = choice.and_then(|c| trial.offers[c.index()].outcome_if);
        if let (Some(c), Some(r)) = (choice, outcome) {
            values.learn(model, trial, c, r, &trial_p);
        }
        trials.push(Trial {
            choice,
            rt,
            outcome,
            ..trial.clone()
        });
    }
    Ok(Subject {
        trials,
        ..design.clone()
    })
}

/// Draws one trial's choice and response time from a prepared choice stage at decision signal
/// `signal` (the drift rate of diffusion stages: an exact first-passage draw, see
/// [`crate::first_passage::sample`]); a response later than `deadline` becomes no response
/// (None, None), as the likelihood treats it. Shared by [`simulate_subject`] and the one-step-ahead
/// predictive check ([`crate::check`]).
pub fn draw_trial(
    prepared: &dyn PreparedChoice,
    signal: &[f64],
    deadline: Option<f64>,
    rng: &mut dyn Rng,
) -> (Option<Choice>, Option<f64>) {
    let (choice, rt) = prepared.simulate(signal, rng);
    match (deadline, rt) {
        (Some(limit), Some(t)) if t > limit => (None, None),
        _ => (Some(choice), rt),
    }
}

/// Generating values for an invented participant of the orchard scenario, in the model's
/// parameter order: each free parameter drawn uniformly from the range the benchmarks use
/// (learning rates 0.1–0.7, effort weight 0.2–1.5, value scale 2–8, boundary 1–2.5, ndt
/// 0.2–0.5 s, drift intercept 0.5–1.5, threshold 1–2, start range 0.3–1, threshold gap 0.2–0.8),
/// fixed parameters at their value; `None` when the model has a free parameter not listed here.
pub fn orchard_generating_values(model: &Model, rng: &mut dyn Rng) -> Option<Vec<f64>> {
    use rand::RngExt;
    model
        .parameters
        .iter()
        .map(|p| {
            let (lo, hi) = match p.name.as_str() {
                "gain_rate" | "loss_rate" => (0.1, 0.7),
                "effort_weight" => (0.2, 1.5),
                "value_scale" => (2.0, 8.0),
                "boundary" => (1.0, 2.5),
                "ndt" => (0.2, 0.5),
                "drift_intercept" => (0.5, 1.5),
                "threshold" => (1.0, 2.0),
                "start_range" => (0.3, 1.0),
                "threshold_gap" => (0.2, 0.8),
                "collapse_rate" => (0.05, 0.3),
                "collapse" => (0.3, 0.8),
                "collapse_scale" => (0.5, 2.0),
                "urgency" => (0.3, 2.0),
                "leak" => (0.5, 3.0),
                _ => return p.fixed,
            };
            // Drawn even for a fixed parameter, so the random stream does not depend on which
            // parameters a model fixes.
            let drawn = rng.random_range(lo..hi);
            Some(p.fixed.unwrap_or(drawn))
        })
        .collect()
}

/// An invented participant of the orchard scenario: an [`orchard_design`] of `n_trials` trials,
/// generating values from [`orchard_generating_values`], and the model's choices, response times
/// and outcomes simulated on it (default settings). `None` when the model has a free parameter
/// without a generating range there or cannot run on the design.
pub fn orchard_participant(
    model: &Model,
    id: &str,
    group: &str,
    n_trials: usize,
    rng: &mut dyn Rng,
) -> Option<Subject> {
    let design = orchard_design(id, group, n_trials, rng);
    let values = orchard_generating_values(model, rng)?;
    simulate_subject(model, &values, &design, SimulationSettings::default(), rng).ok()
}

/// A reward-versus-effort learning design of our own invention (the "orchard" task): four
/// options (plots) that yield a harvest (outcome 1) with probabilities 0.85, 0.65, 0.35 and
/// 0.15, else nothing (outcome 0); the probabilities reverse (p → 1 − p) at every quarter of the
/// session, so values must be relearned three times. Each trial offers two different plots, each
/// demanding an effort drawn from {0.2, 0.4, 0.6, 0.8} (fraction of maximal grip force). Onsets
/// follow a fixed 6-second trial with the outcome 2.5 s in, the two halves being two scanner
/// runs.
pub fn orchard_design(id: &str, group: &str, n_trials: usize, rng: &mut dyn Rng) -> Subject {
    use rand::RngExt;
    const PROBABILITIES: [f64; 4] = [0.85, 0.65, 0.35, 0.15];
    const EFFORTS: [f64; 4] = [0.2, 0.4, 0.6, 0.8];
    let quarter = (n_trials / 4).max(1);
    let trials = (0..n_trials)
        .map(|i| {
            let a = rng.random_range(0..4usize);
            let b = (a + rng.random_range(1..4usize)) % 4;
            let reversed = (i / quarter) % 2 == 1;
            let mut harvest = |k: usize| {
                let p = if reversed {
                    1.0 - PROBABILITIES[k]
                } else {
                    PROBABILITIES[k]
                };
                f64::from(u8::from(rng.random::<f64>() < p))
            };
            let outcome_if_a = harvest(a);
            let outcome_if_b = harvest(b);
            let offer = |option: usize, effort: f64, outcome: f64| crate::data::Offer {
                option,
                effort,
                reward: None,
                outcome_if: Some(outcome),
            };
            Trial {
                trial: i as i64 + 1,
                run: if i < n_trials / 2 { "1" } else { "2" }.to_string(),
                offers: vec![
                    offer(a, EFFORTS[rng.random_range(0..4usize)], outcome_if_a),
                    offer(b, EFFORTS[rng.random_range(0..4usize)], outcome_if_b),
                ],
                choice: None,
                rt: None,
                outcome: None,
                onset: Some(6.0 * (i % (n_trials / 2).max(1)) as f64),
                outcome_onset: Some(6.0 * (i % (n_trials / 2).max(1)) as f64 + 2.5),
                covariates: Vec::new(),
            }
        })
        .collect();
    Subject {
        id: id.to_string(),
        group: group.to_string(),
        options: ["plot1", "plot2", "plot3", "plot4"]
            .map(String::from)
            .to_vec(),
        trials,
        covariates: std::sync::Arc::from([]),
    }
}
