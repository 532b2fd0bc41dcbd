//! The per-subject estimates table of a fit folder (`parameters.csv`, `eb_parameters.csv`): its
//! column names, written by [`super::parameters_table`] and read back here, once, for every
//! command that uses a fit's estimates (`contrast`, `check`, `export`).

use crate::files::{InputError, csv_rows, finite_number};
use std::collections::BTreeMap;
use std::path::Path;

/// Columns of the estimates table, in order.
pub const COLUMNS: [&str; 10] = [
    "subject",
    "group",
    "model",
    "parameter",
    "estimate",
    "std_error",
    "ci_low",
    "ci_high",
    "at_bound",
    "fixed",
];

/// One row of an estimates table, as read back.
#[derive(Clone, Debug, PartialEq)]
pub struct EstimateRow {
    /// Subject label.
    pub subject: String,
    /// The value of the column asked for as the grouping (empty when none was asked for).
    pub group: String,
    /// Model name.
    pub model: String,
    /// Parameter name.
    pub parameter: String,
    /// Point estimate (finite).
    pub estimate: f64,
    /// The estimate lies at a bound.
    pub at_bound: bool,
    /// The parameter was fixed, not estimated.
    pub fixed: bool,
    /// Line in the file (header = line 1).
    pub line: u64,
}

/// Reads the rows of `model` from an estimates table, the grouping taken from column `by` when
/// asked for. `subject`, `model`, `parameter` and `estimate` are required; `at_bound` and
/// `fixed` are read when present (else false). Errors name the file, line and column: a missing
/// column, a value that is not a finite number or a flag, an empty subject or parameter, a
/// parameter given twice for a subject, and a file without any row of `model` (listing the
/// models it has).
pub fn read_rows(
    path: &Path,
    model: &str,
    by: Option<&str>,
) -> Result<Vec<EstimateRow>, InputError> {
    let (mut reader, header) = crate::files::open_csv(path)?;
    let find = |name: &str| crate::files::column_index(path, &header, name);
    let [subject_c, model_c, parameter_c, estimate_c] = [
        find("subject")?,
        find("model")?,
        find("parameter")?,
        find("estimate")?,
    ];
    let optional = |name: &str| header.iter().position(|h| h.trim() == name);
    let (bound_c, fixed_c) = (optional("at_bound"), optional("fixed"));
    let by_c = by.map(find).transpose()?;
    let mut models: Vec<String> = Vec::new();
    let mut seen: BTreeMap<(String, String), u64> = BTreeMap::new();
    let mut out = Vec::new();
    for row in csv_rows(path, &mut reader) {
        let (line, record) = row?;
        let cell = |c: usize| record.get(c).unwrap_or("").trim();
        let flag = |c: Option<usize>, name: &str| -> Result<bool, InputError> {
            let Some(c) = c else { return Ok(false) };
            match cell(c).to_ascii_lowercase().as_str() {
                "true" | "1" => Ok(true),
                "false" | "0" => Ok(false),
                other => Err(InputError::at(
                    path,
                    line,
                    name,
                    format!("'{other}' is not a flag (expected true or false)"),
                )),
            }
        };
        let row_model = cell(model_c);
        if !models.iter().any(|m| m == row_model) {
            models.push(row_model.to_string());
        }
        if row_model != model {
            continue;
        }
        let subject = cell(subject_c).to_string();
        if subject.is_empty() {
            return Err(InputError::at(path, line, "subject", "empty subject"));
        }
        let parameter = cell(parameter_c).to_string();
        if parameter.is_empty() {
            return Err(InputError::at(path, line, "parameter", "empty parameter"));
        }
        if let Some(first) = seen.insert((subject.clone(), parameter.clone()), line) {
            return Err(InputError::at(
                path,
                line,
                "parameter",
                format!(
                    "subject '{subject}' has parameter '{parameter}' of model '{model}' twice \
                     (first on line {first})"
                ),
            ));
        }
        out.push(EstimateRow {
            estimate: finite_number(path, line, "estimate", cell(estimate_c))?,
            at_bound: flag(bound_c, "at_bound")?,
            fixed: flag(fixed_c, "fixed")?,
            group: by_c.map_or(String::new(), |c| cell(c).to_string()),
            model: row_model.to_string(),
            subject,
            parameter,
            line,
        });
    }
    if out.is_empty() {
        return Err(InputError::file(
            path,
            format!(
                "has no estimates of model {model} (models in the file: {})",
                if models.is_empty() {
                    "none".to_string()
                } else {
                    models.join(", ")
                }
            ),
        ));
    }
    Ok(out)
}
