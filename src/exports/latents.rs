//! The latent variables of every trial of a fitted model: values, subjective values, chosen and
//! unchosen value, prediction error, drift, choice probability, expected times, and the trial's
//! value of every parameter that varies over trials.

use crate::data::{Choice, Subject};
use crate::likelihood::{DataMismatch, SubjectLikelihood};
use crate::model::Model;
use crate::model::components::Signal;
use crate::results::{Column, Table};

/// Every model quantity of one trial, with the trial's identifiers.
#[derive(Clone, Debug, PartialEq)]
pub struct Latent {
    /// Participant label as in the trial table.
    pub subject: String,
    /// Group label.
    pub group: String,
    /// Run label.
    pub run: String,
    /// Trial number.
    pub trial: i64,
    /// Trial onset (s from run start).
    pub onset: Option<f64>,
    /// Outcome onset (s from run start).
    pub outcome_onset: Option<f64>,
    /// The choice made (None: no response).
    pub choice: Option<Choice>,
    /// Response time (s).
    pub rt: Option<f64>,
    /// Outcome delivered.
    pub outcome: Option<f64>,
    /// Value of each offered option (a, b, …) before the outcome.
    pub values: Vec<f64>,
    /// Subjective value of each offered option after its costs.
    pub subjective_values: Vec<f64>,
    /// Subjective value of the chosen option.
    pub value_chosen: Option<f64>,
    /// Subjective value of the option not chosen (with more than two options, the mean of the
    /// options not chosen).
    pub value_unchosen: Option<f64>,
    /// subjective_value_a − subjective_value_b (trials of two options).
    pub value_difference: Option<f64>,
    /// Outcome minus the chosen option's value (None without response, outcome or learning).
    pub prediction_error: Option<f64>,
    /// Effort demanded by the chosen option.
    pub effort_chosen: Option<f64>,
    /// Drift rate (two-bound diffusion models only).
    pub drift: Option<f64>,
    /// Drift of each offered option's accumulator (race models only; empty otherwise).
    pub option_drifts: Vec<f64>,
    /// The choice stage's input: the drift, or the softmax argument.
    pub decision_signal: f64,
    /// Model probability of the choice made.
    pub choice_probability: Option<f64>,
    /// Expected decision time (models of time only).
    pub expected_decision_time: Option<f64>,
    /// Expected response time = decision time + non-decision time (models of time only).
    pub expected_rt: Option<f64>,
    /// The value on this trial of each component parameter that varies over trials (by
    /// condition or covariate), in the order of [`varying_parameter_names`].
    pub varying: Vec<f64>,
}

/// Names of the component parameters of `model` that vary over trials, in model order.
pub fn varying_parameter_names(model: &Model) -> Vec<String> {
    model
        .component_parameters
        .iter()
        .enumerate()
        .filter(|(k, _)| model.component_varies(*k))
        .map(|(_, name)| name.clone())
        .collect()
}

/// The latent variables of every trial of `subject` at natural-scale parameter values `natural`
/// (every model parameter, in the model's order).
pub fn latents(
    model: &Model,
    subject: &Subject,
    natural: &[f64],
) -> Result<Vec<Latent>, DataMismatch> {
    let likelihood = SubjectLikelihood::new(model, subject, None)?;
    let signal = model.signal();
    let traces = likelihood.trace(natural);
    let varying: Vec<usize> = (0..model.component_parameters.len())
        .filter(|&k| model.component_varies(k))
        .collect();
    Ok(subject
        .trials
        .iter()
        .zip(traces)
        .map(|(t, tr)| {
            let sv = &tr.subjective_values;
            let chosen = t.choice.map(|c| {
                let k = c.index();
                let unchosen = (sv.iter().sum::<f64>() - sv[k]) / (sv.len() - 1) as f64;
                (sv[k], unchosen, t.offers[k].effort, tr.probabilities[k])
            });
            Latent {
                subject: subject.id.clone(),
                group: subject.group.clone(),
                run: t.run.clone(),
                trial: t.trial,
                onset: t.onset,
                outcome_onset: t.outcome_onset,
                choice: t.choice,
                rt: t.rt,
                outcome: t.outcome,
                value_chosen: chosen.map(|c| c.0),
                value_unchosen: chosen.map(|c| c.1),
                value_difference: (sv.len() == 2).then(|| sv[0] - sv[1]),
                prediction_error: tr.prediction_error,
                effort_chosen: chosen.map(|c| c.2),
                drift: (signal == Signal::DriftDifference).then(|| tr.signal[0]),
                option_drifts: if signal == Signal::DriftPerOption {
                    tr.signal.clone()
                } else {
                    Vec::new()
                },
                decision_signal: tr.decision_signal(),
                choice_probability: chosen.map(|c| c.3),
                expected_decision_time: tr.expected_times.map(|e| e.0),
                expected_rt: tr.expected_times.map(|e| e.1),
                varying: varying
                    .iter()
                    .map(|&k| tr.parameters.get(k).copied().unwrap_or(f64::NAN))
                    .collect(),
                values: tr.values,
                subjective_values: tr.subjective_values,
            }
        })
        .collect())
}

/// One row per trial; missing values are empty (CSV) or null (Parquet). Values are raw. Per
/// option: `value_<side>` and `subjective_value_<side>`, and for race models `drift_<side>`
/// (the drift of that option's accumulator); per component parameter that varies
/// over trials (`varying`, from [`varying_parameter_names`]): `<name>_on_trial`.
pub fn latents_table(rows: &[Latent], varying: &[String]) -> Table {
    let text = |f: &dyn Fn(&Latent) -> String| Column::Text(rows.iter().map(f).collect());
    let number = |f: &dyn Fn(&Latent) -> Option<f64>| Column::Number(rows.iter().map(f).collect());
    let table = Table::default()
        .with("subject", text(&|r| r.subject.clone()))
        .with("group", text(&|r| r.group.clone()))
        .with("run", text(&|r| r.run.clone()))
        .with(
            "trial",
            Column::Integer(rows.iter().map(|r| r.trial).collect()),
        )
        .with("onset", number(&|r| r.onset))
        .with("outcome_onset", number(&|r| r.outcome_onset))
        .with(
            "choice",
            text(&|r| r.choice.map_or(String::new(), |c| c.as_str().to_string())),
        )
        .with("rt", number(&|r| r.rt))
        .with("outcome", number(&|r| r.outcome))
        .with("value_chosen", number(&|r| r.value_chosen))
        .with("value_unchosen", number(&|r| r.value_unchosen))
        .with("value_difference", number(&|r| r.value_difference))
        .with("prediction_error", number(&|r| r.prediction_error))
        .with("effort_chosen", number(&|r| r.effort_chosen))
        .with("drift", number(&|r| r.drift))
        .with("decision_signal", number(&|r| Some(r.decision_signal)))
        .with("choice_probability", number(&|r| r.choice_probability))
        .with(
            "expected_decision_time",
            number(&|r| r.expected_decision_time),
        )
        .with("expected_rt", number(&|r| r.expected_rt));
    let n_sides = rows.iter().map(|r| r.values.len()).max().unwrap_or(2);
    let table = crate::data::SIDES[..n_sides]
        .iter()
        .enumerate()
        .fold(table, |table, (k, side)| {
            table
                .with(
                    &format!("value_{side}"),
                    number(&|r| r.values.get(k).copied()),
                )
                .with(
                    &format!("subjective_value_{side}"),
                    number(&|r| r.subjective_values.get(k).copied()),
                )
        });
    // Per-option drifts of race models.
    let n_drifts = rows
        .iter()
        .map(|r| r.option_drifts.len())
        .max()
        .unwrap_or(0);
    let table =
        crate::data::SIDES[..n_drifts]
            .iter()
            .enumerate()
            .fold(table, |table, (k, side)| {
                table.with(
                    &format!("drift_{side}"),
                    number(&|r| r.option_drifts.get(k).copied()),
                )
            });
    varying.iter().enumerate().fold(table, |table, (k, name)| {
        table.with(
            &format!("{name}_on_trial"),
            number(&|r| r.varying.get(k).copied()),
        )
    })
}
