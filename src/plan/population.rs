//! Generating values of simulated participants: per parameter a distribution, a column of a
//! file of values, or (named by neither) a uniform draw from the model's start range; the
//! planned difference is added to the shifted group's values.

use super::spec::Distribution;
use crate::files::InputError;
use crate::model::Model;
use rand::{Rng, RngExt, SeedableRng};
use rand_distr::{Distribution as _, Normal};
use std::path::Path;

/// Most draws tried for one participant before the plan is declared impossible (values keep
/// falling outside the bounds).
const MOST_DRAWS: usize = 10_000;

/// A file of generating values: one column per parameter, one row per participant profile,
/// kept as text until a model says which columns it needs. It may be the `estimates_wide.csv`
/// of a pilot fit: with a `model` column, each generating model uses only its own rows.
#[derive(Clone, Debug, PartialEq)]
pub struct ValuesFile {
    /// Where it was read from.
    pub path: std::path::PathBuf,
    /// Column names.
    pub columns: Vec<String>,
    /// Rows of cells with their line numbers (header = line 1), in file order.
    pub rows: Vec<(u64, Vec<String>)>,
}

impl ValuesFile {
    /// Reads a CSV of generating values (errors name the file and line).
    pub fn read(path: &Path) -> Result<ValuesFile, InputError> {
        let (mut reader, header) = crate::files::open_csv(path)?;
        let mut rows = Vec::new();
        for row in crate::files::csv_rows(path, &mut reader) {
            let (line, record) = row?;
            rows.push((line, record.iter().map(str::to_string).collect()));
        }
        if rows.is_empty() {
            return Err(InputError::file(path, "no rows of values"));
        }
        Ok(ValuesFile {
            path: path.to_path_buf(),
            columns: header,
            rows,
        })
    }

    /// The rows for `model` (all rows without a `model` column) with the numbers of `columns`:
    /// an error names the line and column of a cell that is not a finite number.
    fn numbers(&self, model: &str, columns: &[usize]) -> Result<Vec<(u64, Vec<f64>)>, InputError> {
        let model_column = self.columns.iter().position(|c| c == "model");
        let mut out = Vec::new();
        for (line, cells) in &self.rows {
            if model_column.is_some_and(|m| cells.get(m).map(String::as_str) != Some(model)) {
                continue;
            }
            let mut values = Vec::with_capacity(columns.len());
            for &c in columns {
                let text = cells.get(c).map_or("", String::as_str);
                values.push(crate::files::finite_number(
                    &self.path,
                    *line,
                    &self.columns[c],
                    text,
                )?);
            }
            out.push((*line, values));
        }
        Ok(out)
    }
}

/// Where one parameter's generating value comes from.
#[derive(Clone, Debug, PartialEq)]
pub enum Source {
    /// The model fixes it.
    ModelFixed(f64),
    /// A distribution of the plan.
    Drawn(Distribution),
    /// A column of the file of values (its name), through the model's rows of the file.
    FileColumn(String),
    /// Named by nothing: uniform over the model's start range (low, high).
    StartRange(f64, f64),
}

impl Source {
    /// How the value is generated, in words, for the run record and the report.
    pub fn describe(&self) -> String {
        match self {
            Source::ModelFixed(x) => format!("fixed by the model at {x}"),
            Source::Drawn(Distribution::Uniform([a, b])) => format!("uniform on [{a}, {b}]"),
            Source::Drawn(Distribution::Normal { mean, sd }) => {
                format!("normal (mean {mean}, sd {sd}), truncated to the bounds")
            }
            Source::Drawn(Distribution::Fixed(x)) => format!("fixed at {x}"),
            Source::FileColumn(c) => {
                format!("column `{c}` of the population file, a row drawn at random")
            }
            Source::StartRange(a, b) => {
                format!("uniform on the model's start range [{a}, {b}] (not given by the plan)")
            }
        }
    }
}

/// The generating population of one model.
#[derive(Clone, Debug, PartialEq)]
pub struct Population {
    /// Per model slot.
    pub sources: Vec<Source>,
    /// Per model slot: the open interval a value must lie in (the parameter's bounds).
    bounds: Vec<(f64, f64)>,
    /// Model slot of the shifted parameter, and the shift.
    shift: Option<(usize, f64)>,
    /// The model's rows of the population file: per row, the values of the file columns in
    /// the order of `file_slots`.
    file_rows: Vec<Vec<f64>>,
    /// Model slots filled from the file, in the order of `file_rows`' values.
    file_slots: Vec<usize>,
    /// Rows of the population file left out: a value at or beyond a bound of the model.
    pub file_rows_left_out: Vec<u64>,
}

/// A plan's population that does not suit a model.
#[derive(Debug, thiserror::Error)]
pub enum PopulationError {
    /// A distribution or shift that does not suit a parameter.
    #[error(transparent)]
    Parameter(#[from] ParameterError),
    /// A population file whose cells are not numbers.
    #[error(transparent)]
    File(#[from] InputError),
}

/// A population that does not suit one parameter of a model.
#[derive(Debug, thiserror::Error)]
#[error("model `{model}`, parameter `{parameter}`: {message}")]
pub struct ParameterError {
    /// The model.
    pub model: String,
    /// The parameter.
    pub parameter: String,
    /// What is wrong and what was expected.
    pub message: String,
}

impl Population {
    /// The population of `model`: the plan's `distributions`, then the columns of `file`, then
    /// the start ranges; `shift` moves one parameter of the shifted group. Every stated value
    /// range must lie inside the parameter's bounds.
    pub fn of(
        model: &Model,
        distributions: &std::collections::BTreeMap<String, Distribution>,
        file: Option<&ValuesFile>,
        shift: Option<(&str, f64)>,
    ) -> Result<Population, PopulationError> {
        let fail = |parameter: &str, message: String| ParameterError {
            model: model.name.clone(),
            parameter: parameter.to_string(),
            message,
        };
        let mut sources = Vec::new();
        let mut bounds = Vec::new();
        for p in &model.parameters {
            let inside = |x: f64| x > p.lower && x < p.upper;
            let source = if let Some(x) = p.fixed {
                Source::ModelFixed(x)
            } else if let Some(d) = distributions.get(&p.name) {
                let ok = match *d {
                    Distribution::Uniform([a, b]) => {
                        (inside(a) || a == p.lower) && (inside(b) || b == p.upper)
                    }
                    Distribution::Normal { mean, .. } => inside(mean),
                    Distribution::Fixed(x) => inside(x),
                };
                if !ok {
                    return Err(fail(
                        &p.name,
                        format!(
                            "the population {d:?} reaches outside the bounds ({}, {})",
                            p.lower, p.upper
                        ),
                    )
                    .into());
                }
                Source::Drawn(d.clone())
            } else if file.is_some_and(|f| f.columns.contains(&p.name)) {
                Source::FileColumn(p.name.clone())
            } else {
                Source::StartRange(p.start_range.0, p.start_range.1)
            };
            sources.push(source);
            bounds.push((p.lower, p.upper));
        }
        let shift = match shift {
            None => None,
            Some((name, by)) => {
                let slot = model.parameters.iter().position(|p| p.name == name);
                match slot {
                    Some(s) if model.parameters[s].is_free() => Some((s, by)),
                    _ => None,
                }
            }
        };
        let mut file_slots = Vec::new();
        let mut file_columns = Vec::new();
        for (slot, source) in sources.iter().enumerate() {
            if let Source::FileColumn(name) = source {
                file_slots.push(slot);
                file_columns.push(
                    file.and_then(|f| f.columns.iter().position(|c| c == name))
                        .expect("a file column"),
                );
            }
        }
        let (mut file_rows, mut file_rows_left_out) = (Vec::new(), Vec::new());
        if let Some(file) = file.filter(|_| !file_slots.is_empty()) {
            for (line, values) in file.numbers(&model.name, &file_columns)? {
                let inside = file_slots.iter().zip(&values).all(|(&slot, &x)| {
                    x > model.parameters[slot].lower && x < model.parameters[slot].upper
                });
                if inside {
                    file_rows.push(values);
                } else {
                    file_rows_left_out.push(line);
                }
            }
            if file_rows.is_empty() {
                return Err(fail(
                    &model.parameters[file_slots[0]].name,
                    format!(
                        "no row of the population file {} has values of this model inside its \
                         bounds",
                        file.path.display()
                    ),
                )
                .into());
            }
        }
        let population = Population {
            sources,
            bounds,
            shift,
            file_rows,
            file_slots,
            file_rows_left_out,
        };
        // A population whose shifted values almost never fit inside the bounds is refused now,
        // not after hours of simulation.
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(0x5eed);
        for shifted in [false, true] {
            if population.draw(&mut rng, shifted).is_none() {
                let name = population
                    .shift
                    .map_or("?", |(s, _)| model.parameters[s].name.as_str());
                return Err(fail(
                    name,
                    format!(
                        "no value inside the bounds in {MOST_DRAWS} draws (is the shift too large \
                         for the bounds?)"
                    ),
                )
                .into());
            }
        }
        Ok(population)
    }

    /// Whether this population shifts a parameter of the model.
    pub fn shifts(&self) -> bool {
        self.shift.is_some()
    }

    /// One participant's values of every parameter (model order), with the shift when
    /// `shifted`; values outside the bounds are redrawn (the whole profile, so that rows of a
    /// file of values stay together). `None` after `MOST_DRAWS` (10 000) failures.
    pub fn draw(&self, rng: &mut dyn Rng, shifted: bool) -> Option<Vec<f64>> {
        for _ in 0..MOST_DRAWS {
            let row = (!self.file_rows.is_empty())
                .then(|| &self.file_rows[rng.random_range(0..self.file_rows.len())]);
            let mut values = Vec::with_capacity(self.sources.len());
            for source in &self.sources {
                values.push(match source {
                    Source::ModelFixed(x) | Source::Drawn(Distribution::Fixed(x)) => *x,
                    Source::Drawn(Distribution::Uniform([a, b])) | Source::StartRange(a, b) => {
                        rng.random_range(*a..=*b)
                    }
                    Source::Drawn(Distribution::Normal { mean, sd }) => {
                        Normal::new(*mean, *sd).ok()?.sample(rng)
                    }
                    Source::FileColumn(_) => {
                        let slot = values.len();
                        let at = self.file_slots.iter().position(|&s| s == slot)?;
                        row?[at]
                    }
                });
            }
            if shifted && let Some((slot, by)) = self.shift {
                values[slot] += by;
            }
            let inside =
                values
                    .iter()
                    .zip(&self.sources)
                    .zip(&self.bounds)
                    .all(|((x, s), (lo, hi))| {
                        matches!(s, Source::ModelFixed(_)) || (*x > *lo && *x < *hi)
                    });
            if inside {
                return Some(values);
            }
        }
        None
    }
}
