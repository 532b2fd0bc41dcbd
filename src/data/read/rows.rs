//! Checking every row and building the table: required columns and pairs, the options of each
//! side, order of subjects, runs and trials, choices and response times, the other columns kept
//! as covariates.

use std::borrow::Cow;
use std::collections::{HashMap, HashSet};
use std::path::Path;

use polars::prelude::*;

use super::super::{Choice, Offer, SIDES, Subject, Trial, TrialTable};
use super::ReadNotes;
use super::cells::*;
use super::columns::*;
use crate::files::InputError;

/// What reading one part of a table hands on to the next part, so that a table read in parts
/// (subjects at a time) is checked exactly as a table read whole.
#[derive(Debug, Default)]
pub(super) struct ReadState {
    /// Subject label → line (or row) of its first row, for every subject started so far.
    started: HashMap<String, u64>,
    /// The last subject read.
    previous: Option<String>,
    /// What was accepted with a note so far.
    pub(super) notes: ReadNotes,
}

/// Checks the rows of `series` (one part of a table, or all of it) and builds their subjects;
/// subjects already begun in an earlier part (`state`) may not appear again. The table may be
/// empty when every row is empty; callers decide whether that is an error.
pub(super) fn build(
    path: &Path,
    columns: &ColumnMap,
    header: &[String],
    series: &[Series],
    height: usize,
    positions: &Positions,
    state: &mut ReadState,
) -> Result<TrialTable, InputError> {
    let header_error = |column: &str, message: String| InputError {
        line: positions.header(),
        column: Some(column.to_string()),
        ..InputError::file(path, message)
    };

    // Locate every canonical column.
    let mut index: [Option<usize>; CANONICAL.len()] = [None; CANONICAL.len()];
    for (k, canonical) in CANONICAL.iter().enumerate() {
        let name = columns.file_name(canonical);
        let mut found = header.iter().enumerate().filter(|(_, h)| *h == name);
        if let Some((i, _)) = found.next() {
            if found.next().is_some() {
                return Err(header_error(
                    name,
                    format!("column `{name}` appears more than once; expected each column once"),
                ));
            }
            index[k] = Some(i);
        }
    }
    let slot = |canonical: &str| CANONICAL.iter().position(|c| *c == canonical).unwrap_or(0);
    for required in REQUIRED {
        if index[slot(required)].is_none() {
            let name = columns.file_name(required);
            let mapped = if name == required {
                String::new()
            } else {
                format!(" (mapped from `{required}`)")
            };
            return Err(header_error(
                name,
                format!(
                    "missing required column `{name}`{mapped}; the file has columns: {}",
                    header.join(", ")
                ),
            ));
        }
    }
    for (first, second) in PAIRS {
        let (a, b) = (index[slot(first)], index[slot(second)]);
        if a.is_some() != b.is_some() {
            let (have, lack) = if a.is_some() {
                (first, second)
            } else {
                (second, first)
            };
            return Err(header_error(
                columns.file_name(have),
                format!(
                    "column `{}` is present but `{}` is not; expected both or neither",
                    columns.file_name(have),
                    columns.file_name(lack)
                ),
            ));
        }
    }

    let views: Vec<Option<Values<'_>>> = index
        .iter()
        .map(|i| i.map(|i| values_of(&series[i])))
        .collect();
    let present: Vec<String> = CANONICAL
        .iter()
        .zip(&index)
        .filter(|(c, i)| i.is_some() && !REQUIRED.contains(c))
        .map(|(c, _)| c.to_string())
        .collect();

    // Further options (c, d, …): each side whose effort_<side> column exists, in order; their
    // columns are named as written (not remapped).
    let mut sides: Vec<&str> = SIDES[..2].to_vec();
    for side in &SIDES[2..] {
        if header.iter().any(|h| *h == format!("effort_{side}")) {
            sides.push(side);
        } else {
            break;
        }
    }
    if let Some(h) = header.iter().find(|h| {
        h.strip_prefix("effort_")
            .is_some_and(|s| SIDES[2..].contains(&s) && !sides.contains(&s))
    }) {
        return Err(header_error(
            h,
            format!(
                "column `{h}` has no option before it (the file's options are {}); expected \
                 the sides a, b, c, … without a gap",
                sides.join(", ")
            ),
        ));
    }
    let mut side_columns: Vec<(String, Values<'_>)> = Vec::new();
    let mut side_indices: Vec<usize> = Vec::new();
    for side in &sides[2..] {
        for (prefix, canonical_a) in [
            ("option", "option_a"),
            ("effort", "effort_a"),
            ("reward", "reward_a"),
            ("outcome_if", "outcome_if_a"),
        ] {
            let name = format!("{prefix}_{side}");
            let found = header.iter().position(|h| *h == name);
            if found.is_some() != index[slot(canonical_a)].is_some() {
                return Err(header_error(
                    &name,
                    format!(
                        "column `{name}` is {} but `{}` is {}; expected the same columns for \
                         every option",
                        if found.is_some() {
                            "present"
                        } else {
                            "missing"
                        },
                        columns.file_name(canonical_a),
                        if found.is_some() { "not" } else { "present" },
                    ),
                ));
            }
            if let Some(i) = found {
                side_indices.push(i);
                side_columns.push((name, values_of(&series[i])));
            }
        }
    }

    // Every other named column of numbers or text is kept as a per-trial covariate, cells as
    // written (columns of other types, such as lists in a Parquet file, cannot be covariates).
    let extra: Vec<usize> = (0..header.len())
        .filter(|&i| {
            let s = &series[i];
            !index.contains(&Some(i))
                && !side_indices.contains(&i)
                && !header[i].trim().is_empty()
                && (s.i64().is_ok() || s.f64().is_ok() || s.str().is_ok())
        })
        .collect();
    let covariate_names: std::sync::Arc<[String]> =
        extra.iter().map(|&i| header[i].clone()).collect();
    let extra_views: Vec<Values<'_>> = extra.iter().map(|&i| values_of(&series[i])).collect();

    let reader = RowReader {
        path,
        columns,
        views: &views,
        side_columns: &side_columns,
        n_sides: sides.len(),
        positions,
    };
    let has_options = index[slot("option_a")].is_some();

    let mut subjects: Vec<Subject> = Vec::new();
    let started = &mut state.started;
    let mut option_index: HashMap<String, usize> = HashMap::new();
    let mut group_line: u64 = 0;
    // Runs of the current subject seen so far (each run's rows must be together).
    let mut runs_seen: HashSet<String> = HashSet::new();
    let notes = &mut state.notes;

    // The columns of each side, named once rather than on every row.
    let side_names: Vec<[String; 4]> = sides
        .iter()
        .map(|side| ["option", "effort", "reward", "outcome_if"].map(|c| format!("{c}_{side}")))
        .collect();
    for row in 0..height {
        if (0..CANONICAL.len()).all(|k| columns.reads_as_missing(reader.canonical_cell(row, k))) {
            continue; // an empty line or row carries no trial
        }
        let at = positions.of(row);
        let id = reader.required_text(row, "subject", "a subject label")?;
        let group = reader.text(row, "group").unwrap_or_default();
        let run = reader.text(row, "run").unwrap_or_default();
        let trial = reader.integer(row, "trial")?;

        let new_subject = subjects.last().is_none_or(|s| s.id.as_str() != id.as_ref());
        if new_subject {
            if let Some(first) = started.get(id.as_ref()) {
                let previous = subjects
                    .last()
                    .map(|s| s.id.as_str())
                    .or(state.previous.as_deref())
                    .unwrap_or_default();
                return Err(reader.error(
                    row,
                    "subject",
                    format!(
                        "subject {id:?} appears again after subject {previous:?} (its rows \
                         began on {} {first}); the file is unsorted: expected all rows of a \
                         subject together, sorted by subject, then trial",
                        positions.unit()
                    ),
                ));
            }
            started.insert(id.to_string(), at);
            option_index.clear();
            runs_seen.clear();
            runs_seen.insert(run.to_string());
            subjects.push(Subject {
                id: id.to_string(),
                group: String::new(),
                options: if has_options {
                    Vec::new()
                } else {
                    sides.iter().map(|s| s.to_string()).collect()
                },
                trials: Vec::new(),
                covariates: covariate_names.clone(),
            });
        }
        let Some(subject) = subjects.last_mut() else {
            continue;
        };

        if !group.is_empty() {
            if subject.group.is_empty() {
                subject.group = group.to_string();
                group_line = at;
            } else if subject.group.as_str() != group.as_ref() {
                return Err(reader.error(
                    row,
                    "group",
                    format!(
                        "group changes within subject {:?}: {:?} here, {:?} on {} {group_line}; \
                         expected one group per subject",
                        subject.id,
                        group,
                        subject.group,
                        positions.unit()
                    ),
                ));
            }
        }

        if let Some(last) = subject.trials.last() {
            if last.run != run.as_ref() {
                // A new run: its trial numbers may start again.
                if !runs_seen.insert(run.to_string()) {
                    return Err(reader.error(
                        row,
                        "run",
                        format!(
                            "run {run:?} of subject {:?} appears again after run {:?}; expected \
                             the rows of each run together (sorted by subject, run, trial)",
                            subject.id, last.run
                        ),
                    ));
                }
            } else if trial <= last.trial {
                let what = if trial == last.trial {
                    format!("trial {trial} is repeated")
                } else {
                    format!("trial {trial} comes after trial {}", last.trial)
                };
                let (within, order) = if run.is_empty() {
                    (String::new(), "subject, then trial")
                } else {
                    (format!("run {run:?} of "), "subject, run, trial")
                };
                return Err(reader.error(
                    row,
                    "trial",
                    format!(
                        "{what} within {within}subject {:?}; expected trial numbers that \
                         increase within each subject and run (sort by {order})",
                        subject.id
                    ),
                ));
            }
        }

        let mut offers = Vec::with_capacity(sides.len());
        for (k, (side, [column, effort, reward, outcome_if])) in
            sides.iter().zip(&side_names).enumerate()
        {
            let option = if has_options {
                let name = reader.required_text(row, column, "an option identity")?;
                if let Some(same) = offers
                    .iter()
                    .position(|o: &Offer| subject.options[o.option] == name.as_ref())
                {
                    return Err(reader.error(
                        row,
                        column,
                        if sides.len() == 2 {
                            format!(
                                "offers option {name:?} on both sides; expected two different \
                                 options"
                            )
                        } else {
                            format!(
                                "offers option {name:?} on sides {} and {side}; expected a \
                                 different option on every side",
                                SIDES[same]
                            )
                        },
                    ));
                }
                match option_index.get(name.as_ref()) {
                    Some(&i) => i,
                    None => {
                        let i = subject.options.len();
                        subject.options.push(name.to_string());
                        option_index.insert(name.to_string(), i);
                        i
                    }
                }
            } else {
                k
            };
            offers.push(Offer {
                option,
                effort: reader.effort(row, effort)?,
                reward: reader.number(row, reward)?,
                outcome_if: reader.number(row, outcome_if)?,
            });
        }
        let choice = reader.choice(row)?;
        let rt = reader.rt(row)?;
        match (choice, rt) {
            (Some(c), None) => {
                return Err(reader.error(
                    row,
                    "rt",
                    format!(
                        "is empty but the choice is {:?}; expected a response time with every \
                         choice (leave both empty for no response)",
                        c.as_str()
                    ),
                ));
            }
            (None, Some(t)) => {
                return Err(reader.error(
                    row,
                    "choice",
                    format!(
                        "is empty but the response time is {t}; expected a choice with every \
                         response time (leave both empty for no response)"
                    ),
                ));
            }
            _ => {}
        }
        let outcome = reader.number(row, "outcome")?;
        if outcome.is_some() && choice.is_none() {
            notes.outcomes_without_response += 1;
            notes.first_outcome_without_response.get_or_insert(at);
        }
        let onset = reader.time(row, "onset")?;
        let outcome_onset = reader.time(row, "outcome_onset")?;

        subject.trials.push(Trial {
            trial,
            run: run.to_string(),
            offers,
            choice,
            rt,
            outcome,
            onset,
            outcome_onset,
            covariates: extra_views
                .iter()
                .map(|v| {
                    let cell = v.cell(row);
                    if columns.reads_as_missing(cell) {
                        None
                    } else {
                        cell.text().map(Cow::into_owned)
                    }
                })
                .collect(),
        });
    }

    if let Some(last) = subjects.last() {
        state.previous = Some(last.id.clone());
    }
    Ok(TrialTable { subjects, present })
}

/// The error for a table in which every row is empty.
pub(super) fn no_trials(path: &Path) -> InputError {
    InputError::file(
        path,
        "has no trials (every row is empty); expected one row per trial",
    )
}

/// Reads typed values from one row, turning problems into positioned errors.
struct RowReader<'r, 'v> {
    path: &'r Path,
    columns: &'r ColumnMap,
    views: &'r [Option<Values<'v>>],
    /// Columns of the options after a and b (effort_c, …), by name.
    side_columns: &'r [(String, Values<'v>)],
    /// Number of options on every trial.
    n_sides: usize,
    positions: &'r Positions,
}

impl RowReader<'_, '_> {
    /// The cell, with the user's missing-value tokens read as missing.
    fn cell(&self, row: usize, canonical: &str) -> Cell<'_> {
        match CANONICAL.iter().position(|c| *c == canonical) {
            Some(k) => self.canonical_cell(row, k),
            None => self.as_read(
                self.side_columns
                    .iter()
                    .find(|(name, _)| name == canonical)
                    .map(|(_, v)| v),
                row,
            ),
        }
    }

    /// [`RowReader::cell`] of the `k`-th canonical column.
    fn canonical_cell(&self, row: usize, k: usize) -> Cell<'_> {
        self.as_read(self.views[k].as_ref(), row)
    }

    /// The cell of `view` (missing without the column), missing-value tokens read as missing.
    fn as_read<'s>(&'s self, view: Option<&'s Values<'_>>, row: usize) -> Cell<'s> {
        let cell = view.map_or(Cell::Missing, |v| v.cell(row));
        if self.columns.reads_as_missing(cell) {
            Cell::Missing
        } else {
            cell
        }
    }

    fn error(&self, row: usize, canonical: &str, message: impl Into<String>) -> InputError {
        InputError::at(
            self.path,
            self.positions.of(row),
            self.columns.file_name(canonical),
            message,
        )
    }

    fn text(&self, row: usize, canonical: &str) -> Option<Cow<'_, str>> {
        self.cell(row, canonical).text()
    }

    fn required_text(
        &self,
        row: usize,
        canonical: &str,
        what: &str,
    ) -> Result<Cow<'_, str>, InputError> {
        self.text(row, canonical)
            .ok_or_else(|| self.error(row, canonical, format!("is empty; expected {what}")))
    }

    fn number(&self, row: usize, canonical: &str) -> Result<Option<f64>, InputError> {
        let cell = self.cell(row, canonical);
        cell.number().map_err(|m| {
            let hint = cell.text().map_or(String::new(), |t| missing_hint(&t));
            self.error(row, canonical, format!("{m}{hint}"))
        })
    }

    fn integer(&self, row: usize, canonical: &str) -> Result<i64, InputError> {
        match self.cell(row, canonical).integer() {
            Ok(Some(i)) => Ok(i),
            Ok(None) => Err(self.error(row, canonical, "is empty; expected a trial number")),
            Err(m) => Err(self.error(row, canonical, format!("{m} (the trial number)"))),
        }
    }

    fn effort(&self, row: usize, canonical: &str) -> Result<f64, InputError> {
        match self.number(row, canonical)? {
            None => Err(self.error(row, canonical, "is empty; expected an effort level ≥ 0")),
            Some(x) if x < 0.0 => Err(self.error(
                row,
                canonical,
                format!("is {x}; expected an effort level ≥ 0"),
            )),
            Some(x) => Ok(x),
        }
    }

    fn time(&self, row: usize, canonical: &str) -> Result<Option<f64>, InputError> {
        match self.number(row, canonical)? {
            Some(x) if x < 0.0 => Err(self.error(
                row,
                canonical,
                format!("is {x}; expected seconds from run start, ≥ 0"),
            )),
            other => Ok(other),
        }
    }

    fn choice(&self, row: usize) -> Result<Option<Choice>, InputError> {
        let cell = self.cell(row, "choice");
        let Some(text) = cell.text() else {
            return Ok(None);
        };
        let codes = self.columns.choice_codes();
        let sides = &SIDES[..self.n_sides];
        let on_a_side = |choice: Choice| -> Result<Option<Choice>, InputError> {
            if choice.index() < self.n_sides {
                Ok(Some(choice))
            } else {
                Err(self.error(
                    row,
                    "choice",
                    format!(
                        "is {}; expected {}, or empty for no response (the file has no \
                         effort_{} column, so no option {})",
                        cell.shown(),
                        sides.join(", "),
                        choice.as_str(),
                        choice.as_str()
                    ),
                ))
            }
        };
        if codes.is_empty() {
            if let Some(choice) = Choice::from_label(&text) {
                return on_a_side(choice);
            }
            return Err(self.error(
                row,
                "choice",
                format!(
                    "is {}; expected {}, or empty for no response (other codes such as 1/2 \
                     are mapped with --choice-codes 1=a,2=b){}",
                    cell.shown(),
                    sides.join(", "),
                    missing_hint(&text)
                ),
            ));
        }
        if let Some((_, choice)) = codes.iter().find(|(c, _)| c.eq_ignore_ascii_case(&text)) {
            return on_a_side(*choice);
        }
        let listed: Vec<String> = codes
            .iter()
            .map(|(c, o)| format!("{c} ({})", o.as_str()))
            .collect();
        Err(self.error(
            row,
            "choice",
            format!(
                "is {}; expected one of the choice codes {} (from --choice-codes), or empty for \
                 no response{}",
                cell.shown(),
                listed.join(", "),
                missing_hint(&text)
            ),
        ))
    }

    fn rt(&self, row: usize) -> Result<Option<f64>, InputError> {
        let cell = self.cell(row, "rt");
        let value = cell.number().map_err(|_| {
            self.error(
                row,
                "rt",
                format!(
                    "is {}; expected a response time in seconds > 0, or empty for no response{}",
                    cell.shown(),
                    cell.text().map_or(String::new(), |t| missing_hint(&t))
                ),
            )
        })?;
        match value {
            Some(t) if t <= 0.0 => Err(self.error(
                row,
                "rt",
                format!(
                    "is {t}; expected a response time in seconds > 0, or empty for no response"
                ),
            )),
            other => Ok(other),
        }
    }
}

/// Texts that task software commonly writes for a missing value (common practice).
const COMMON_MISSING: [&str; 8] = ["NA", "N/A", "NaN", ".", "null", "None", "missing", "-"];

/// A hint to map `text` with `--missing` when it looks like a missing-value token.
fn missing_hint(text: &str) -> String {
    if COMMON_MISSING
        .iter()
        .any(|m| m.eq_ignore_ascii_case(text.trim()))
    {
        format!(
            "; if {:?} marks a missing value, pass --missing {}",
            text.trim(),
            text.trim()
        )
    } else {
        String::new()
    }
}
