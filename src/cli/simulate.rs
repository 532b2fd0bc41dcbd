//! `valuedrift simulate`: synthetic trials from a model, parameters and a design.

use super::input::OptionError;
use crate::data::{ColumnMap, TrialTable};
use crate::files::{InputError, refuse_existing, write_atomically};
use crate::model::{Model, load_model};
use crate::results::trials_table;
use crate::simulate::{SimulationSettings, simulate_subject};
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use std::collections::HashMap;
use std::path::Path;

/// Natural-scale values of every model parameter for each subject, read from a CSV with a
/// `subject` column and one column per parameter (fixed parameters may be omitted).
pub fn read_parameters(
    path: &Path,
    model: &Model,
) -> Result<HashMap<String, Vec<f64>>, InputError> {
    let (mut reader, header) = crate::files::open_csv(path)?;
    let subject_column = header.iter().position(|h| h == "subject").ok_or_else(|| {
        InputError::at(
            path,
            1,
            "subject",
            "missing column (expected the subject labels)",
        )
    })?;
    let mut columns = Vec::new();
    for spec in &model.parameters {
        match header.iter().position(|h| *h == spec.name) {
            Some(c) => columns.push(Some(c)),
            None if spec.fixed.is_some() => columns.push(None),
            None => {
                return Err(InputError::at(
                    path,
                    1,
                    &spec.name,
                    format!("missing column (a free parameter of model {})", model.name),
                ));
            }
        }
    }
    let mut out = HashMap::new();
    for (index, record) in reader.records().enumerate() {
        let line = index as u64 + 2;
        let record = record.map_err(|e| InputError {
            line: Some(line),
            ..InputError::file(path, format!("malformed row: {e}"))
        })?;
        let subject = record.get(subject_column).unwrap_or("").to_string();
        let mut values = Vec::with_capacity(model.parameters.len());
        for (spec, column) in model.parameters.iter().zip(&columns) {
            let value = match column {
                None => spec.fixed.expect("only fixed parameters may be omitted"),
                Some(c) => {
                    let text = record.get(*c).unwrap_or("");
                    let x: f64 = text.parse().map_err(|_| {
                        InputError::at(path, line, &spec.name, format!("'{text}' is not a number"))
                    })?;
                    if !(x >= spec.lower && x <= spec.upper) {
                        return Err(InputError::at(
                            path,
                            line,
                            &spec.name,
                            format!(
                                "{x} is outside the model's bounds [{}, {}]",
                                spec.lower, spec.upper
                            ),
                        ));
                    }
                    x
                }
            };
            values.push(value);
        }
        if out.insert(subject.clone(), values).is_some() {
            return Err(InputError::at(
                path,
                line,
                "subject",
                format!("subject '{subject}' appears twice"),
            ));
        }
    }
    Ok(out)
}

/// Simulates every subject of `design` that has parameters; subject i uses stream i of the
/// seeded generator, so the result depends only on the seed.
pub fn simulate_table(
    model: &Model,
    parameters: &HashMap<String, Vec<f64>>,
    design: &TrialTable,
    settings: SimulationSettings,
    seed: u64,
    design_path: &Path,
) -> Result<TrialTable, InputError> {
    let mut subjects = Vec::with_capacity(design.subjects.len());
    for (i, subject) in design.subjects.iter().enumerate() {
        let values = parameters.get(&subject.id).ok_or_else(|| {
            InputError::file(
                design_path,
                format!("subject '{}' has no row in the parameter file", subject.id),
            )
        })?;
        let mut rng = ChaCha8Rng::seed_from_u64(seed);
        rng.set_stream(i as u64);
        subjects.push(
            simulate_subject(model, values, subject, settings, &mut rng)
                .map_err(|e| InputError::file(design_path, e.to_string()))?,
        );
    }
    let mut present = design.present.clone();
    for column in ["outcome"] {
        if !present.iter().any(|c| c == column) {
            present.push(column.to_string());
        }
    }
    Ok(TrialTable { subjects, present })
}

/// The file format of the simulated trial table, from the extension of `--out`.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum OutputFormat {
    /// `.csv`: comma-separated text.
    Csv,
    /// `.parquet`: the same columns as Parquet.
    Parquet,
}

impl OutputFormat {
    /// `.csv` (any case) is CSV, `.parquet` Parquet; any other extension, or none, is an error
    /// naming the expected ones.
    pub fn of(out: &Path) -> Result<OutputFormat, OptionError> {
        let extension = out.extension().and_then(|e| e.to_str()).unwrap_or("");
        if extension.eq_ignore_ascii_case("csv") {
            Ok(OutputFormat::Csv)
        } else if extension.eq_ignore_ascii_case("parquet") {
            Ok(OutputFormat::Parquet)
        } else {
            Err(OptionError::new(
                "--out",
                out.display(),
                "expected a file name ending in .csv or .parquet (the format is chosen by the \
                 extension)",
            ))
        }
    }
}

/// The command: simulates and writes `out` (an existing file only with `replace`).
#[allow(clippy::too_many_arguments)]
pub fn run(
    model: &str,
    params: &Path,
    design: &Path,
    out: &Path,
    seed: u64,
    (lock, deadline): (Option<f64>, Option<f64>),
    columns: &ColumnMap,
    replace: bool,
) -> Result<(), Box<dyn std::error::Error>> {
    let format = OutputFormat::of(out)?;
    refuse_existing(out, replace)?;
    let model = load_model(model)?;
    let parameters = read_parameters(params, &model)?;
    let design_table = super::input::read_table(design, columns)?;
    let settings = SimulationSettings {
        deadline,
        lock,
        ..SimulationSettings::default()
    };
    let table = simulate_table(&model, &parameters, &design_table, settings, seed, design)?;
    let trials = trials_table(&table);
    match format {
        OutputFormat::Csv => write_atomically(out, replace, |w| trials.write_csv(w))?,
        OutputFormat::Parquet => write_atomically(out, replace, |w| trials.write_parquet(w))?,
    }
    let n: usize = table.subjects.iter().map(|s| s.trials.len()).sum();
    println!(
        "simulated {} subjects, {n} trials, model {}, seed {seed} -> {}",
        table.subjects.len(),
        model.name,
        out.display()
    );
    Ok(())
}
