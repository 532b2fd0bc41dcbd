//! Per-trial latent variables of a fitted model, for imaging analyses.
//!
//! From each subject's fitted (natural-scale) parameters the learning recursion is run again over
//! the subject's trials ([`SubjectLikelihood::trace`]), giving per trial the values before the
//! outcome, the subjective values after the effort cost, the decision signal, the prediction
//! error at the outcome, the probability of the choice made and the expected times.
//!
//! Two products:
//! - a tidy table of every trial ([`latents_table`]), raw (unscaled);
//! - events files following the BIDS standard for events ([`events_files`]): one per subject
//!   and run, with `choice` and `outcome` events and one column per parametric modulator,
//!   scaled within the run ([`Scale`]), `n/a` where a value does not exist, and a JSON sidecar
//!   describing every column;
//! - with a repetition time and a number of scans, design matrices ([`hrf::design_file`]): the
//!   events' regressors convolved with the canonical haemodynamic response ([`hrf`]).

pub mod hrf;

use crate::data::{Choice, Subject};
use crate::files::InputError;
use crate::likelihood::{DataMismatch, SubjectLikelihood};
use crate::model::Model;
use crate::results::{Column, Table, number_text};
use std::borrow::Cow;
use std::collections::HashMap;
use std::io::Write;
use std::path::Path;

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
    /// Drift rate (diffusion models only).
    pub drift: Option<f64>,
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
    let diffusion = model.uses_response_times();
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
                drift: diffusion.then(|| tr.signal[0]),
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
/// option: `value_<side>` and `subjective_value_<side>`; per component parameter that varies
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
    varying.iter().enumerate().fold(table, |table, (k, name)| {
        table.with(
            &format!("{name}_on_trial"),
            number(&|r| r.varying.get(k).copied()),
        )
    })
}

// ---------------------------------------------------------------------------------------------
// Fitted parameters

/// Reads the natural-scale estimates of `model` for each subject from a `parameters.csv` written
/// by `valuedrift fit` (columns subject, model, parameter, estimate; others ignored). Returns, per
/// subject of `subjects` and in that order, every model parameter in the model's order (fixed
/// parameters not in the file take their fixed value).
pub fn read_estimates(
    path: &Path,
    model: &Model,
    subjects: &[Subject],
) -> Result<Vec<Vec<f64>>, InputError> {
    let file = std::fs::File::open(path)
        .map_err(|e| InputError::file(path, format!("cannot be read: {e}")))?;
    let mut reader = csv::ReaderBuilder::new().flexible(false).from_reader(file);
    let headers = reader
        .headers()
        .map_err(|e| InputError::file(path, format!("has no readable header: {e}")))?
        .clone();
    let index = |name: &str| {
        headers
            .iter()
            .position(|h| h.trim() == name)
            .ok_or_else(|| {
                InputError::file(
                    path,
                    format!(
                        "has no column `{name}` (expected the parameters.csv written by \
                         `valuedrift fit`)"
                    ),
                )
            })
    };
    let (i_subject, i_model, i_parameter, i_estimate) = (
        index("subject")?,
        index("model")?,
        index("parameter")?,
        index("estimate")?,
    );
    // subject → parameter slot → estimate
    let mut found: HashMap<String, HashMap<usize, f64>> = HashMap::new();
    let mut models_in_file: Vec<String> = Vec::new();
    for record in reader.records() {
        let record = record.map_err(|e| {
            let line = e.position().map_or(0, |p| p.line());
            InputError {
                file: path.to_path_buf(),
                line: (line > 0).then_some(line),
                column: None,
                message: format!("cannot be parsed: {e}"),
            }
        })?;
        let line = record.position().map_or(0, |p| p.line());
        let field = |i: usize| record.get(i).unwrap_or("").trim();
        let row_model = field(i_model);
        if !models_in_file.iter().any(|m| m == row_model) {
            models_in_file.push(row_model.to_string());
        }
        if row_model != model.name {
            continue;
        }
        let name = field(i_parameter);
        let Some(slot) = model.parameters.iter().position(|p| p.name == name) else {
            return Err(InputError::at(
                path,
                line,
                "parameter",
                format!("`{name}` is not a parameter of model {}", model.name),
            ));
        };
        let estimate = crate::files::finite_number(path, line, "estimate", field(i_estimate))?;
        let estimate = within_bounds(path, line, &model.parameters[slot], estimate)?;
        let subject = field(i_subject).to_string();
        if found
            .entry(subject.clone())
            .or_default()
            .insert(slot, estimate)
            .is_some()
        {
            return Err(InputError::at(
                path,
                line,
                "parameter",
                format!(
                    "second estimate of `{name}` for subject {subject} and model {}",
                    model.name
                ),
            ));
        }
    }
    if found.is_empty() {
        return Err(InputError::file(
            path,
            format!(
                "has no estimates of model {} (models in the file: {})",
                model.name,
                if models_in_file.is_empty() {
                    "none".to_string()
                } else {
                    models_in_file.join(", ")
                }
            ),
        ));
    }
    subjects
        .iter()
        .map(|s| {
            let Some(estimates) = found.get(&s.id) else {
                return Err(InputError::file(
                    path,
                    format!(
                        "has no estimates of model {} for subject {} (was it fitted?)",
                        model.name, s.id
                    ),
                ));
            };
            model
                .parameters
                .iter()
                .enumerate()
                .map(|(slot, spec)| match (estimates.get(&slot), spec.fixed) {
                    (Some(&x), _) => Ok(x),
                    (None, Some(fixed)) => Ok(fixed),
                    (None, None) => Err(InputError::file(
                        path,
                        format!(
                            "has no estimate of `{}` of model {} for subject {}",
                            spec.name, model.name, s.id
                        ),
                    )),
                })
                .collect()
        })
        .collect()
}

/// Checks that `model` is the model that was fitted: its definition must equal the one recorded
/// for a model of the same name in `fits/run.json` (`models[].definition`, written by
/// `valuedrift fit`). Returns false, with nothing checked, when the folder has no run.json (a
/// parameters table put together by hand). A model missing from the record, an unreadable record
/// or a changed definition is an error; a changed definition is reported at the first line that
/// differs, with both versions of that line.
pub fn check_recorded_model(fits: &Path, model: &Model) -> Result<bool, InputError> {
    let record_path = fits.join("run.json");
    let text = match std::fs::read_to_string(&record_path) {
        Ok(text) => text,
        Err(e) if e.kind() == std::io::ErrorKind::NotFound => return Ok(false),
        Err(e) => {
            return Err(InputError::file(
                &record_path,
                format!("cannot be read: {e}"),
            ));
        }
    };
    let record: serde_json::Value = serde_json::from_str(&text).map_err(|e| {
        InputError::file(
            &record_path,
            format!("is not the JSON run record written by `valuedrift fit`: {e}"),
        )
    })?;
    let Some(models) = record.get("models").and_then(|m| m.as_array()) else {
        return Err(InputError::file(
            &record_path,
            "has no `models` list (expected the run record written by `valuedrift fit`)",
        ));
    };
    let name_of =
        |m: &serde_json::Value| m.get("name").and_then(|n| n.as_str()).map(str::to_string);
    let Some(recorded) = models
        .iter()
        .find(|m| name_of(m).as_deref() == Some(model.name.as_str()))
    else {
        let names: Vec<String> = models.iter().filter_map(name_of).collect();
        return Err(InputError::file(
            &record_path,
            format!(
                "records no fit of model {} (models fitted: {})",
                model.name,
                names.join(", ")
            ),
        ));
    };
    let Some(definition) = recorded.get("definition").and_then(|d| d.as_str()) else {
        return Err(InputError::file(
            &record_path,
            format!("has no definition of model {}", model.name),
        ));
    };
    if definition == model.text {
        return Ok(true);
    }
    let (then, now): (Vec<&str>, Vec<&str>) =
        (definition.lines().collect(), model.text.lines().collect());
    let line = (0..then.len().max(now.len()))
        .find(|&i| then.get(i) != now.get(i))
        .unwrap_or(0);
    let show = |l: Option<&&str>| l.map_or("(no line)".to_string(), |l| format!("`{}`", l.trim()));
    Err(InputError {
        file: std::path::PathBuf::from(&model.origin),
        line: Some(line as u64 + 1),
        column: None,
        message: format!(
            "model {} has changed since the fit: its definition differs from the one recorded in \
             {} (models[].definition) from this line on (recorded {}, now {}). Export and check \
             need the fitted model: save the recorded definition as a .toml file and pass it \
             with --model, or fit again",
            model.name,
            record_path.display(),
            show(then.get(line)),
            show(now.get(line)),
        ),
    })
}

// ---------------------------------------------------------------------------------------------
// BIDS labels and run indices

/// Width of the band around a parameter's bounds, relative to the larger of the bounds' width and
/// magnitudes, within which an estimate counts as on the bound (and is set onto it): estimates
/// written by `valuedrift fit` at a bound can differ from it by rounding in the back-transform
/// (common practice: a few ulps, far below 1e-9 of that scale).
const BOUND_TOLERANCE: f64 = 1e-9;

/// The estimate `x` of `spec` if it lies within the model's bounds (values within
/// [`BOUND_TOLERANCE`] of the width outside a bound are set onto it), else an error at `line`,
/// column `estimate`, with the value and the bounds.
fn within_bounds(
    path: &Path,
    line: u64,
    spec: &crate::model::ParameterSpec,
    x: f64,
) -> Result<f64, InputError> {
    let scale = (spec.upper - spec.lower)
        .max(spec.lower.abs())
        .max(spec.upper.abs())
        .max(f64::MIN_POSITIVE);
    let slack = BOUND_TOLERANCE * scale;
    if x >= spec.lower - slack && x <= spec.upper + slack {
        return Ok(x.clamp(spec.lower, spec.upper));
    }
    let expected = match spec.fixed {
        Some(v) => format!("the model fixes `{}` at {v}", spec.name),
        None => format!(
            "outside the bounds [{}, {}] of `{}` in the model",
            spec.lower, spec.upper, spec.name
        ),
    };
    Err(InputError::at(
        path,
        line,
        "estimate",
        format!(
            "{x}: {expected}; the estimates do not belong to this model (was the model file \
             changed after the fit?)"
        ),
    ))
}

/// A BIDS label (alphanumeric only) for a participant label: a leading `sub-` is removed, then
/// every character that is not an ASCII letter or digit. None when nothing is left.
pub fn bids_label(raw: &str) -> Option<String> {
    let trimmed = raw.trim();
    let rest = match trimmed.get(..4) {
        Some(prefix) if prefix.eq_ignore_ascii_case("sub-") => &trimmed[4..],
        _ => trimmed,
    };
    let label: String = rest.chars().filter(|c| c.is_ascii_alphanumeric()).collect();
    (!label.is_empty()).then_some(label)
}

/// The `dataset_description.json` of a BIDS derivative dataset (BIDS specification, "Derived
/// dataset and pipeline description": Name, BIDSVersion, DatasetType = derivative, GeneratedBy).
pub fn dataset_description(model: &Model, caution: &str) -> serde_json::Value {
    serde_json::json!({
        "Name": format!("valuedrift per-trial latent variables of model {}", model.name),
        "BIDSVersion": "1.9.0",
        "DatasetType": "derivative",
        "GeneratedBy": [{
            "Name": "valuedrift",
            "Version": env!("CARGO_PKG_VERSION"),
            "Description": format!(
                "Reinforcement-learning drift-diffusion model {} run forward at fitted estimates. {caution}",
                model.name
            ),
        }],
    })
}

/// BIDS labels of all subjects, in order; an error when a label would be empty or two subjects
/// would share one.
pub fn bids_labels(subjects: &[Subject]) -> Result<Vec<String>, String> {
    let mut labels: Vec<String> = Vec::with_capacity(subjects.len());
    let mut owner: HashMap<String, &str> = HashMap::new();
    for s in subjects {
        let label = bids_label(&s.id).ok_or_else(|| {
            format!(
                "subject `{}` has no letter or digit, so it has no BIDS label",
                s.id
            )
        })?;
        if let Some(other) = owner.insert(label.clone(), &s.id) {
            return Err(format!(
                "subjects `{other}` and `{}` would both get the BIDS label `{label}` \
                 (labels keep letters and digits only); rename one of them",
                s.id
            ));
        }
        labels.push(label);
    }
    Ok(labels)
}

/// The runs of a subject in order of appearance, each with its BIDS run index: the run label
/// itself when every label of the subject is a positive integer, else the order of appearance
/// (1, 2, …). A single run gets no index (no `run` entity in the file name).
pub fn run_indices(subject: &Subject) -> Vec<(String, Option<u64>)> {
    let mut runs: Vec<String> = Vec::new();
    for t in &subject.trials {
        if !runs.contains(&t.run) {
            runs.push(t.run.clone());
        }
    }
    if runs.len() == 1 {
        return vec![(runs.remove(0), None)];
    }
    let numeric: Option<Vec<u64>> = runs
        .iter()
        .map(|r| r.trim().parse::<u64>().ok().filter(|&n| n > 0))
        .collect();
    let indices: Vec<u64> = match numeric {
        Some(n) => {
            let mut unique = n.clone();
            unique.sort_unstable();
            unique.dedup();
            if unique.len() == n.len() {
                n
            } else {
                (1..=runs.len() as u64).collect()
            }
        }
        None => (1..=runs.len() as u64).collect(),
    };
    runs.into_iter()
        .zip(indices)
        .map(|(r, i)| (r, Some(i)))
        .collect()
}

// ---------------------------------------------------------------------------------------------
// Scaling

/// How modulators are scaled within each run (events files only).
#[derive(Clone, Copy, Debug, PartialEq, Eq, clap::ValueEnum)]
pub enum Scale {
    /// Mean subtracted.
    Center,
    /// Mean subtracted, divided by the sample standard deviation (n − 1).
    Zscore,
    /// Raw values.
    None,
}

/// What scaling did to one column.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Scaled {
    /// Mean subtracted (None: not centred).
    pub mean: Option<f64>,
    /// Standard deviation divided by (None: not divided).
    pub sd: Option<f64>,
}

/// Scales the present values in place: `Center` subtracts their mean, `Zscore` also divides by
/// their sample standard deviation (n − 1 denominator); a z-score is only centred when fewer
/// than two values are present or they do not vary.
pub fn scale_values(values: &mut [Option<f64>], scale: Scale) -> Scaled {
    let present: Vec<f64> = values.iter().flatten().copied().collect();
    if scale == Scale::None || present.is_empty() {
        return Scaled {
            mean: None,
            sd: None,
        };
    }
    let n = present.len() as f64;
    let mean = present.iter().sum::<f64>() / n;
    let sd = if scale == Scale::Zscore && present.len() >= 2 {
        let ss: f64 = present.iter().map(|x| (x - mean).powi(2)).sum();
        let sd = (ss / (n - 1.0)).sqrt();
        (sd > 0.0 && sd.is_finite()).then_some(sd)
    } else {
        None
    };
    for x in values.iter_mut().flatten() {
        *x -= mean;
        if let Some(sd) = sd {
            *x /= sd;
        }
    }
    Scaled {
        mean: Some(mean),
        sd,
    }
}

// ---------------------------------------------------------------------------------------------
// Events files

/// One modulator column: name, long name, description, units, event type it belongs to, value.
#[derive(Clone)]
struct Modulator {
    name: Cow<'static, str>,
    long_name: Cow<'static, str>,
    description: Cow<'static, str>,
    units: Cow<'static, str>,
    at_outcome: bool,
    value: ModulatorValue,
}

/// Where a modulator's value comes from.
#[derive(Clone, Copy)]
enum ModulatorValue {
    /// A latent variable of the trial.
    Latent(fn(&Latent) -> Option<f64>),
    /// The trial's value of the k-th component parameter that varies over trials.
    Varying(usize),
}

impl Modulator {
    fn value_of(&self, latent: &Latent) -> Option<f64> {
        match self.value {
            ModulatorValue::Latent(f) => f(latent),
            ModulatorValue::Varying(k) => latent.varying.get(k).copied(),
        }
    }
}

static MODULATORS: [Modulator; 8] = [
    Modulator {
        name: Cow::Borrowed("value_chosen"),
        long_name: Cow::Borrowed("Subjective value of the chosen option"),
        description: Cow::Borrowed(
            "Learned value of the chosen option before the outcome, after the effort \
                      cost; n/a without response",
        ),
        units: Cow::Borrowed("outcome units"),
        at_outcome: false,
        value: ModulatorValue::Latent(|l| l.value_chosen),
    },
    Modulator {
        name: Cow::Borrowed("value_unchosen"),
        long_name: Cow::Borrowed("Subjective value of the option not chosen"),
        description: Cow::Borrowed(
            "Learned value of the option not chosen before the outcome, after the \
                      effort cost; n/a without response",
        ),
        units: Cow::Borrowed("outcome units"),
        at_outcome: false,
        value: ModulatorValue::Latent(|l| l.value_unchosen),
    },
    Modulator {
        name: Cow::Borrowed("value_difference"),
        long_name: Cow::Borrowed("Subjective value difference"),
        description: Cow::Borrowed(
            "Subjective value of option a minus subjective value of option b, before \
                      the outcome; n/a on trials of more than two options",
        ),
        units: Cow::Borrowed("outcome units"),
        at_outcome: false,
        value: ModulatorValue::Latent(|l| l.value_difference),
    },
    Modulator {
        name: Cow::Borrowed("effort_chosen"),
        long_name: Cow::Borrowed("Effort of the chosen option"),
        description: Cow::Borrowed(
            "Effort demanded by the chosen option, as in the trial table; n/a without \
                      response",
        ),
        units: Cow::Borrowed("effort units of the trial table"),
        at_outcome: false,
        value: ModulatorValue::Latent(|l| l.effort_chosen),
    },
    Modulator {
        name: Cow::Borrowed("choice_probability"),
        long_name: Cow::Borrowed("Probability of the choice made"),
        description: Cow::Borrowed(
            "Model probability of the option that was chosen; n/a without response",
        ),
        units: Cow::Borrowed("probability"),
        at_outcome: false,
        value: ModulatorValue::Latent(|l| l.choice_probability),
    },
    Modulator {
        name: Cow::Borrowed("drift"),
        long_name: Cow::Borrowed("Drift rate"),
        description: Cow::Borrowed(
            "Drift rate of the diffusion on this trial (towards option a when positive)",
        ),
        units: Cow::Borrowed("per second (unit within-trial noise)"),
        at_outcome: false,
        value: ModulatorValue::Latent(|l| l.drift),
    },
    Modulator {
        name: Cow::Borrowed("expected_rt"),
        long_name: Cow::Borrowed("Expected response time"),
        description: Cow::Borrowed(
            "Model expected response time given the offer (decision time plus \
                      non-decision time)",
        ),
        units: Cow::Borrowed("s"),
        at_outcome: false,
        value: ModulatorValue::Latent(|l| l.expected_rt),
    },
    Modulator {
        name: Cow::Borrowed("prediction_error"),
        long_name: Cow::Borrowed("Reward prediction error"),
        description: Cow::Borrowed(
            "Outcome minus the learned value of the chosen option before the outcome; \
                      n/a without response or without outcome",
        ),
        units: Cow::Borrowed("outcome units"),
        at_outcome: true,
        value: ModulatorValue::Latent(|l| l.prediction_error),
    },
];

/// The modulator columns that exist for `model`: the latent variables it has, then the trial's
/// value of every component parameter that varies over trials (by condition or covariate).
fn modulators(model: &Model) -> Vec<Modulator> {
    let mut out: Vec<Modulator> = MODULATORS
        .iter()
        .filter(|m| match m.name.as_ref() {
            "drift" => model.uses_response_times(),
            "expected_rt" => model.uses_response_times(),
            "prediction_error" => model.learns(),
            _ => true,
        })
        .cloned()
        .collect();
    for (k, name) in varying_parameter_names(model).into_iter().enumerate() {
        out.push(Modulator {
            long_name: Cow::Owned(format!("{name} on this trial")),
            description: Cow::Owned(format!(
                "The model's {name} on this trial, from the fitted levels and slopes of the \
                 conditions and covariates it varies with"
            )),
            name: Cow::Owned(format!("{name}_on_trial")),
            units: Cow::Borrowed("units of the parameter"),
            at_outcome: false,
            value: ModulatorValue::Varying(k),
        });
    }
    out
}

/// One events file: path stem (without extension), rows, sidecar.
#[derive(Clone, Debug, PartialEq)]
pub struct EventsFile {
    /// Path relative to the dataset folder, without extension:
    /// `sub-<label>/func/sub-<label>_task-<task>[_run-<index>]_desc-<model>_events`.
    pub stem: String,
    /// Run label of the trial table.
    pub run: String,
    /// Column names, in order.
    pub header: Vec<String>,
    /// Cells, `n/a` for missing values.
    pub rows: Vec<Vec<String>>,
    /// The events of `rows`, in the same order, as numbers (for the design matrix).
    pub timing: Vec<EventTiming>,
    /// The modulator columns of `rows` as numbers, scaled as the file says (None: `n/a`).
    pub modulators: Vec<ModulatorValues>,
    /// JSON sidecar describing every column.
    pub sidecar: serde_json::Value,
    /// Choice events left out because the trial has no onset.
    pub skipped_choice: usize,
    /// Outcome events left out because the trial has no outcome onset.
    pub skipped_outcome: usize,
}

/// Onset, duration and type of one event of an events file.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct EventTiming {
    /// Onset (s from run start).
    pub onset: f64,
    /// Duration (s).
    pub duration: f64,
    /// `choice` or `outcome`.
    pub trial_type: &'static str,
}

/// One modulator column of an events file, by event.
#[derive(Clone, Debug, PartialEq)]
pub struct ModulatorValues {
    /// Column name.
    pub name: String,
    /// The event type it belongs to (`choice` or `outcome`); None on other events.
    pub trial_type: &'static str,
    /// Value per event (scaled within the run), None where the file has `n/a`.
    pub values: Vec<Option<f64>>,
}

impl EventsFile {
    /// Writes the rows as tab-separated values (BIDS events file).
    pub fn write_tsv(&self, w: &mut dyn Write) -> std::io::Result<()> {
        writeln!(w, "{}", self.header.join("\t"))?;
        for row in &self.rows {
            writeln!(w, "{}", row.join("\t"))?;
        }
        Ok(())
    }
}

/// The description label of a model name (alphanumeric only, as BIDS labels are).
pub fn desc_label(model_name: &str) -> String {
    let label: String = model_name
        .chars()
        .filter(|c| c.is_ascii_alphanumeric())
        .collect();
    if label.is_empty() {
        "model".into()
    } else {
        label
    }
}

fn cell(x: Option<f64>) -> String {
    x.map_or_else(|| "n/a".to_string(), number_text)
}

/// The events files of one subject (one per run), from its latents (in trial order) and BIDS
/// label. Choice events are at the trial onset with the response time as duration (0 without
/// response); outcome events at the outcome onset with duration 0, when the table has outcome
/// onsets (`with_outcomes`). Events without onset are left out and counted. Modulators are
/// scaled within each run. The files belong in the subject's `func` folder of a BIDS derivative
/// dataset: `sub-<label>/func/sub-<label>_task-<task>[_run-<index>]_desc-<model>_events`
/// (the task entity is required for functional files by the BIDS specification).
pub fn events_files(
    model: &Model,
    subject: &Subject,
    label: &str,
    task: &str,
    latents: &[Latent],
    scale: Scale,
    with_outcomes: bool,
) -> Vec<EventsFile> {
    let modulators = modulators(model);
    let desc = desc_label(&model.name);
    run_indices(subject)
        .into_iter()
        .map(|(run, index)| {
            let run_entity = index.map_or(String::new(), |i| format!("_run-{i}"));
            let stem =
                format!("sub-{label}/func/sub-{label}_task-{task}{run_entity}_desc-{desc}_events");
            // (onset, duration, trial_type, latent)
            let mut events: Vec<(f64, f64, &str, &Latent)> = Vec::new();
            let (mut skipped_choice, mut skipped_outcome) = (0, 0);
            for l in latents.iter().filter(|l| l.run == run) {
                match l.onset {
                    Some(onset) => events.push((onset, l.rt.unwrap_or(0.0), "choice", l)),
                    None => skipped_choice += 1,
                }
                if with_outcomes {
                    match l.outcome_onset {
                        Some(onset) => events.push((onset, 0.0, "outcome", l)),
                        None => skipped_outcome += 1,
                    }
                }
            }
            events.sort_by(|a, b| a.0.total_cmp(&b.0));
            let mut columns: Vec<Vec<Option<f64>>> = modulators
                .iter()
                .map(|m| {
                    events
                        .iter()
                        .map(|e| {
                            if (e.2 == "outcome") == m.at_outcome {
                                m.value_of(e.3)
                            } else {
                                None
                            }
                        })
                        .collect()
                })
                .collect();
            let scaled: Vec<Scaled> = columns.iter_mut().map(|c| scale_values(c, scale)).collect();
            let mut header: Vec<String> = ["onset", "duration", "trial_type", "trial", "choice"]
                .map(String::from)
                .to_vec();
            header.extend(modulators.iter().map(|m| m.name.to_string()));
            let rows = events
                .iter()
                .enumerate()
                .map(|(k, e)| {
                    let mut row = vec![
                        number_text(e.0),
                        number_text(e.1),
                        e.2.to_string(),
                        e.3.trial.to_string(),
                        e.3.choice
                            .map_or_else(|| "n/a".to_string(), |c| c.as_str().to_string()),
                    ];
                    row.extend(columns.iter().map(|c| cell(c[k])));
                    row
                })
                .collect();
            let sidecar = sidecar(model, &modulators, &scaled, scale);
            let timing = events
                .iter()
                .map(|e| EventTiming {
                    onset: e.0,
                    duration: e.1,
                    trial_type: e.2,
                })
                .collect();
            let modulators = modulators
                .iter()
                .zip(columns)
                .map(|(m, values)| ModulatorValues {
                    name: m.name.to_string(),
                    trial_type: if m.at_outcome { "outcome" } else { "choice" },
                    values,
                })
                .collect();
            EventsFile {
                stem,
                run,
                header,
                rows,
                timing,
                modulators,
                sidecar,
                skipped_choice,
                skipped_outcome,
            }
        })
        .collect()
}

fn sidecar(
    model: &Model,
    modulators: &[Modulator],
    scaled: &[Scaled],
    scale: Scale,
) -> serde_json::Value {
    use serde_json::json;
    let mut map = serde_json::Map::new();
    map.insert(
        "onset".into(),
        json!({
            "LongName": "Event onset",
            "Description": "Time of the event from the start of the run, from the trial \
                            table's onset (choice) or outcome_onset (outcome) column",
            "Units": "s",
        }),
    );
    map.insert(
        "duration".into(),
        json!({
            "LongName": "Event duration",
            "Description": "choice: the response time (0 without response); outcome: 0",
            "Units": "s",
        }),
    );
    map.insert(
        "trial_type".into(),
        json!({
            "LongName": "Event type",
            "Description": "Which part of the trial the event is",
            "Levels": {
                "choice": "offer shown until the response",
                "outcome": "feedback of the chosen option",
            },
        }),
    );
    map.insert(
        "trial".into(),
        json!({
            "LongName": "Trial number",
            "Description": "Trial number in the trial table",
        }),
    );
    map.insert(
        "choice".into(),
        json!({
            "LongName": "Option chosen",
            "Description": "Option chosen on the trial; n/a without response",
            "Levels": { "a": "option a", "b": "option b" },
        }),
    );
    for (m, s) in modulators.iter().zip(scaled) {
        let how = match (scale, s.mean, s.sd) {
            (Scale::None, _, _) | (_, None, _) => "Raw (not scaled).".to_string(),
            (Scale::Center, Some(mean), _) => {
                format!("Mean-centred within this run (mean {mean} subtracted).")
            }
            (Scale::Zscore, Some(mean), Some(sd)) => format!(
                "Z-scored within this run (mean {mean} subtracted, divided by the sample \
                 standard deviation {sd}, n − 1 denominator)."
            ),
            (Scale::Zscore, Some(mean), None) => format!(
                "Mean-centred within this run (mean {mean} subtracted); not divided by the \
                 standard deviation, which is zero or undefined."
            ),
        };
        map.insert(
            m.name.to_string(),
            json!({
                "LongName": m.long_name,
                "Description": format!(
                    "{} ({} events; n/a on other events), from model {} at the subject's fitted \
                     parameters. {how}",
                    m.description,
                    if m.at_outcome { "outcome" } else { "choice" },
                    model.name
                ),
                "Units": m.units,
            }),
        );
    }
    serde_json::Value::Object(map)
}

/// The `participants.tsv` of the derivative dataset: `participant_id` (`sub-<label>`), the
/// `subject` label of the trial table it stands for (labels keep letters and digits only, so
/// they may differ) and the `group`.
pub fn participants_table(subjects: &[Subject], labels: &[String]) -> Table {
    Table::default()
        .with(
            "participant_id",
            Column::Text(labels.iter().map(|l| format!("sub-{l}")).collect()),
        )
        .with(
            "subject",
            Column::Text(subjects.iter().map(|s| s.id.clone()).collect()),
        )
        .with(
            "group",
            Column::Text(subjects.iter().map(|s| s.group.clone()).collect()),
        )
}

/// The `participants.json` data dictionary of [`participants_table`].
pub fn participants_sidecar() -> serde_json::Value {
    serde_json::json!({
        "participant_id": {
            "LongName": "Participant identifier",
            "Description": "BIDS participant label: the trial table's subject label with \
                            everything but letters and digits removed",
        },
        "subject": {
            "LongName": "Subject label in the trial table",
            "Description": "The subject column of the trial table the model was fitted to",
        },
        "group": {
            "LongName": "Group label",
            "Description": "The group column of the trial table (empty without one)",
        },
    })
}

/// The `.bidsignore` of the export folder: the files that the BIDS specification does not name
/// (the tidy latents table, and the design matrices, which have no BIDS suffix), one glob per
/// line, so that validators of the specification skip them rather than report them.
pub const BIDS_IGNORE: &str = "latents.csv\nlatents.parquet\n*_design.tsv\n*_design.json\n";

/// The `README` of the derivative dataset: what the files are and how they were made.
pub fn dataset_readme(model: &Model, caution: &str) -> String {
    format!(
        "Per-trial latent variables of the reinforcement-learning drift-diffusion model {name}, \
         written by valuedrift {version} as a BIDS derivative dataset.\n\n\
         sub-<label>/func/*_desc-{desc}_events.tsv: one events file per participant and run, \
         with choice and outcome events and one column per parametric modulator (the model run \
         forward at the participant's fitted parameters); each has a JSON sidecar describing \
         every column and the scaling applied.\n\
         sub-<label>/func/*_desc-{desc}_design.tsv (when the scan timing was given): the events \
         convolved with the canonical haemodynamic response, one row per scan.\n\
         participants.tsv: the participant labels and the trial table's subject labels.\n\
         latents.csv and latents.parquet: every latent variable of every trial, unscaled.\n\n\
         {caution}\n",
        name = model.name,
        version = env!("CARGO_PKG_VERSION"),
        desc = desc_label(&model.name),
    )
}
