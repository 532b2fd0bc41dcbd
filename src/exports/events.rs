//! BIDS events files: choice and outcome events with one column per parametric modulator, scaled
//! within each run, and their JSON sidecars.

use super::bids::*;
use super::latents::*;
use crate::data::Subject;
use crate::model::Model;
use crate::results::number_text;
use std::borrow::Cow;
use std::io::Write;

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
