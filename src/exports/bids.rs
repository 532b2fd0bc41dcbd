//! BIDS naming and the derivative dataset's files: participant labels, run indices, the
//! description label of a model, dataset_description.json, participants.tsv, README and
//! .bidsignore.

use crate::data::{Subject, SubjectLabel};
use crate::model::Model;
use crate::results::{Column, Table};
use std::collections::HashMap;

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
pub fn bids_labels<S: AsRef<str>>(subjects: &[S]) -> Result<Vec<String>, BidsLabelError> {
    let mut labels: Vec<String> = Vec::with_capacity(subjects.len());
    let mut owner: HashMap<String, &str> = HashMap::new();
    for s in subjects {
        let id = s.as_ref();
        let label = bids_label(id).ok_or_else(|| BidsLabelError::Empty {
            subject: id.to_string(),
        })?;
        if let Some(other) = owner.insert(label.clone(), id) {
            return Err(BidsLabelError::Shared {
                first: other.to_string(),
                second: id.to_string(),
                label,
            });
        }
        labels.push(label);
    }
    Ok(labels)
}

/// Subjects that cannot get a BIDS label of their own.
#[derive(Clone, Debug, PartialEq, Eq, thiserror::Error)]
pub enum BidsLabelError {
    /// A subject label without letters or digits.
    #[error("subject `{subject}` has no letter or digit, so it has no BIDS label")]
    Empty {
        /// The subject's label.
        subject: String,
    },
    /// Two subjects whose labels differ only in other characters.
    #[error(
        "subjects `{first}` and `{second}` would both get the BIDS label `{label}` (labels keep \
         letters and digits only); rename one of them"
    )]
    Shared {
        /// The subject met first.
        first: String,
        /// The other subject.
        second: String,
        /// The label they share.
        label: String,
    },
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

/// The `participants.tsv` of the derivative dataset: `participant_id` (`sub-<label>`), the
/// `subject` label of the trial table it stands for (labels keep letters and digits only, so
/// they may differ) and the `group`.
pub fn participants_table(subjects: &[SubjectLabel], labels: &[String]) -> Table {
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
