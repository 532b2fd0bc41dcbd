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

/// A file of generating values: one column per parameter, one row per participant profile.
#[derive(Clone, Debug, PartialEq)]
pub struct ValuesFile {
    /// Column names (parameters; other columns such as `subject` are ignored by models that
    /// do not have them).
    pub columns: Vec<String>,
    /// Rows of numbers, in file order.
    pub rows: Vec<Vec<f64>>,
}

impl ValuesFile {
    /// Reads a CSV of generating values; columns `subject` and `group` are skipped, every other
    /// cell must be a finite number (errors name the file, line and column).
    pub fn read(path: &Path) -> Result<ValuesFile, InputError> {
        let (mut reader, header) = crate::files::open_csv(path)?;
        let keep: Vec<usize> = (0..header.len())
            .filter(|&i| !matches!(header[i].as_str(), "subject" | "group"))
            .collect();
        let mut rows = Vec::new();
        for row in crate::files::csv_rows(path, &mut reader) {
            let (line, record) = row?;
            let mut row = Vec::with_capacity(keep.len());
            for &i in &keep {
                let text = record.get(i).unwrap_or("");
                row.push(crate::files::finite_number(path, line, &header[i], text)?);
            }
            rows.push(row);
        }
        if rows.is_empty() {
            return Err(InputError::file(path, "no rows of values"));
        }
        Ok(ValuesFile {
            columns: keep.iter().map(|&i| header[i].clone()).collect(),
            rows,
        })
    }
}

/// Where one parameter's generating value comes from.
#[derive(Clone, Debug, PartialEq)]
pub enum Source {
    /// The model fixes it.
    ModelFixed(f64),
    /// A distribution of the plan.
    Drawn(Distribution),
    /// A column of the file of values.
    FileColumn(usize),
    /// Named by nothing: uniform over the model's start range (low, high).
    StartRange(f64, f64),
}

impl Source {
    /// How the value is generated, in words, for the run record and the report.
    pub fn describe(&self, file_columns: &[String]) -> String {
        match self {
            Source::ModelFixed(x) => format!("fixed by the model at {x}"),
            Source::Drawn(Distribution::Uniform([a, b])) => format!("uniform on [{a}, {b}]"),
            Source::Drawn(Distribution::Normal { mean, sd }) => {
                format!("normal (mean {mean}, sd {sd}), truncated to the bounds")
            }
            Source::Drawn(Distribution::Fixed(x)) => format!("fixed at {x}"),
            Source::FileColumn(c) => format!(
                "column `{}` of the population file, a row drawn at random",
                file_columns[*c]
            ),
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
}

/// A plan's population that does not suit a model.
#[derive(Debug, thiserror::Error)]
#[error("model `{model}`, parameter `{parameter}`: {message}")]
pub struct PopulationError {
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
        let fail = |parameter: &str, message: String| PopulationError {
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
                    ));
                }
                Source::Drawn(d.clone())
            } else if let Some(c) = file.and_then(|f| f.columns.iter().position(|n| *n == p.name)) {
                let file = file.expect("found in it");
                if let Some(row) = file.rows.iter().position(|r| !inside(r[c])) {
                    return Err(fail(
                        &p.name,
                        format!(
                            "row {} of the population file has {}, outside the bounds ({}, {})",
                            row + 1,
                            file.rows[row][c],
                            p.lower,
                            p.upper
                        ),
                    ));
                }
                Source::FileColumn(c)
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
        let population = Population {
            sources,
            bounds,
            shift,
        };
        // A population whose shifted values almost never fit inside the bounds is refused now,
        // not after hours of simulation.
        let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(0x5eed);
        for shifted in [false, true] {
            if population.draw(&mut rng, shifted, file).is_none() {
                let name = population
                    .shift
                    .map_or("?", |(s, _)| model.parameters[s].name.as_str());
                return Err(fail(
                    name,
                    format!(
                        "no value inside the bounds in {MOST_DRAWS} draws (is the shift too large \
                         for the bounds?)"
                    ),
                ));
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
    /// file of values stay together). `None` after [`MOST_DRAWS`] failures.
    pub fn draw(
        &self,
        rng: &mut dyn Rng,
        shifted: bool,
        file: Option<&ValuesFile>,
    ) -> Option<Vec<f64>> {
        for _ in 0..MOST_DRAWS {
            let row = file.map(|f| &f.rows[rng.random_range(0..f.rows.len())]);
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
                    Source::FileColumn(c) => row?[*c],
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
