//! `valuedrift merge`: the folders of `fit --shard 1/N` … `N/N` combined into the folder a single
//! run of the same fit writes, byte for byte.
//!
//! Each table's rows are read back cell for cell ([`Table::read_csv_as`]) and put in the order
//! of a single run: models in the order given, subjects in table order (recorded by every
//! shard); the wide estimates are rebuilt from the long ones by the writer `fit` uses. run.json
//! is a shard's with the per-shard parts (fits, pairs not fitted, trimming) summed over the
//! shards, the shard entry removed and `--out` of the command line set to this command's.

use super::input::Screened;
use super::shard::{self, Shard};
use crate::data::ScreenSettings;
use crate::files::{InputError, OutputSet};
use crate::fit::ParameterEstimate;
use crate::results::fit_folder::{self, FolderTable, key};
use crate::results::{Table, WideRow, parameters_table, summary_table, wide_table};
use record::{ShardFolder, merged_record, read_shards, strings};
use std::collections::HashMap;
use std::path::{Path, PathBuf};

mod check;
mod hierarchical;
mod plan;
mod record;

/// Merges the shard folders `dirs` into `out`.
pub fn run(dirs: &[PathBuf], out: &Path, replace: bool) -> Result<(), Box<dyn std::error::Error>> {
    let shards = read_shards(dirs)?;
    let first = &shards[0];
    if first.record["command"] == super::check::COMMAND {
        return check::run(&shards, out, replace);
    }
    if first.record.get("plan").is_some() {
        return plan::run(&shards, out, replace);
    }
    let order = Order::of(first)?;
    let screen_columns = screen_template(&order.models);
    let screens = read_all(&shards, fit_folder::DATA_SCREEN, &screen_columns)?;
    check_subjects(&shards, &screens, &order)?;
    let screen = merged(&screen_columns, &screens, |t| order.rows(t, false));
    let template = parameters_table(&[]);
    let parameters = merged(
        &template,
        &read_all(&shards, fit_folder::PARAMETERS, &template)?,
        |t| order.rows(t, true),
    );
    let template = summary_table(&[]);
    let summary = merged(
        &template,
        &read_all(&shards, fit_folder::SUMMARY, &template)?,
        |t| order.rows(t, true),
    );
    if summary.rows() == 0 {
        return Err("no subject could be fitted in any shard".into());
    }
    if first.record.get(key::EMPIRICAL_BAYES).is_some() {
        let record = merged_record(&shards, &order, summary.rows(), out);
        return hierarchical::run(&shards, &parameters, &summary, &record, replace);
    }
    let mut outputs = OutputSet::create(out, replace)?;
    screen.stage_both(&mut outputs, out, fit_folder::DATA_SCREEN.stem)?;
    parameters.stage_both(&mut outputs, out, fit_folder::PARAMETERS.stem)?;
    wide_from_long(&summary, &parameters)?.stage_both(
        &mut outputs,
        out,
        fit_folder::ESTIMATES_WIDE.stem,
    )?;
    summary.stage_both(&mut outputs, out, fit_folder::SUMMARY.stem)?;
    let record = merged_record(&shards, &order, summary.rows(), out);
    outputs.stage(&out.join(fit_folder::RUN_RECORD), |w| {
        serde_json::to_writer_pretty(w, &record)
    })?;
    outputs.commit()?;
    println!(
        "merged {} shards: {} fits of {} subjects; outputs in {}",
        shards.len(),
        summary.rows(),
        order.position.len(),
        out.display()
    );
    println!("{}", super::RESEARCH_CAUTION);
    Ok(())
}

/// Runs `line`, the shards' recorded command line (without `--shard`, with the merge's
/// `--out`), with `results` in place of the per-subject work; `first` is the first shard, whose
/// record an unreadable command line is blamed on.
fn run_recorded(
    first: &ShardFolder,
    line: &[String],
    results: super::ShardResults,
) -> Result<(), Box<dyn std::error::Error>> {
    use clap::Parser;
    let cli = super::Cli::try_parse_from(line).map_err(|e| {
        format!(
            "{}: the recorded command line cannot be run again: {e}",
            first.record_path.display()
        )
    })?;
    super::run_as(cli, line, Some(results))
}

/// The order of a single run's rows: models as given, subjects in table order.
struct Order {
    models: Vec<String>,
    subjects: Vec<String>,
    position: HashMap<String, usize>,
    count: usize,
}

impl Order {
    fn of(first: &ShardFolder) -> Result<Order, InputError> {
        let models: Vec<String> = first.record[key::MODELS]
            .as_array()
            .into_iter()
            .flatten()
            .filter_map(|m| m[key::NAME].as_str().map(str::to_string))
            .collect();
        let subjects = strings(&first.record[key::SHARD][shard::KEY_SUBJECTS]);
        if models.is_empty() || subjects.is_empty() {
            return Err(InputError::file(
                &first.dir.join(fit_folder::RUN_RECORD),
                "has no models or no table subjects: expected the run record of `fit --shard`",
            ));
        }
        let position = subjects
            .iter()
            .enumerate()
            .map(|(k, s)| (s.clone(), k))
            .collect();
        Ok(Order {
            models,
            subjects,
            position,
            count: first.shard.count,
        })
    }

    /// (model, subject) of a row as a sort key; unknown names sort last.
    fn key(&self, model: Option<&str>, subject: &str) -> (usize, usize) {
        (
            model.map_or(0, |m| {
                self.models
                    .iter()
                    .position(|x| x == m)
                    .unwrap_or(usize::MAX)
            }),
            self.position.get(subject).copied().unwrap_or(usize::MAX),
        )
    }

    /// The rows of `table` in a single run's order (by model first when `by_model`); rows of one
    /// key keep their order.
    fn rows(&self, table: &Table, by_model: bool) -> Vec<usize> {
        let subjects = table.texts("subject").unwrap_or_default();
        let models = table.texts("model").filter(|_| by_model);
        let mut rows: Vec<usize> = (0..table.rows()).collect();
        rows.sort_by_key(|&r| self.key(models.map(|m| m[r].as_str()), &subjects[r]));
        rows
    }
}

/// Refuses shards whose data screens (`screens`, one per shard) list other subjects than their
/// shard holds (a folder changed after its fit, or shards of tables with other subjects).
fn check_subjects(
    shards: &[ShardFolder],
    screens: &[Table],
    order: &Order,
) -> Result<(), InputError> {
    for (s, screen) in shards.iter().zip(screens) {
        let listed = screen.texts("subject").unwrap_or_default();
        let held: Vec<&String> = order
            .subjects
            .iter()
            .filter(|label| Shard::of(label, order.count) == s.shard.index)
            .collect();
        if listed.len() != held.len() || listed.iter().zip(&held).any(|(a, b)| a != *b) {
            return Err(InputError::file(
                &fit_folder::DATA_SCREEN.csv_in(&s.dir),
                format!(
                    "lists {} subjects, but shard {} of {} of the recorded table holds {}: the \
                     folder does not hold this shard's fit",
                    listed.len(),
                    s.shard.index,
                    s.shard.count,
                    held.len()
                ),
            ));
        }
    }
    Ok(())
}

/// The data screen's columns for `models` (the table `fit` writes, without rows).
fn screen_template(models: &[String]) -> Table {
    super::input::screen_table_output(&Screened {
        settings: ScreenSettings::default(),
        subjects: Vec::new(),
        unmet: models.iter().map(|m| (m.clone(), Vec::new())).collect(),
    })
}

/// The table `name` of every shard, read with the columns of `template`.
fn read_all(
    shards: &[ShardFolder],
    name: FolderTable,
    template: &Table,
) -> Result<Vec<Table>, InputError> {
    shards
        .iter()
        .map(|s| Table::read_csv_as(&name.csv_in(&s.dir), template))
        .collect()
}

/// The rows of `tables` (with the columns of `template`) in one table, in the order `rows`
/// gives.
fn merged(template: &Table, tables: &[Table], rows: impl Fn(&Table) -> Vec<usize>) -> Table {
    let all = Table::concatenated(template, tables);
    all.reordered(&rows(&all))
}

/// The estimates of each (subject, model) fit in the long estimates table `parameters`, in the
/// table's order.
fn estimates_by_fit(
    parameters: &Table,
) -> Result<HashMap<(&str, &str), Vec<ParameterEstimate>>, String> {
    let column = |name: &str| parameters.texts(name).unwrap_or_default();
    let number = |name: &str| parameters.numbers(name).unwrap_or_default();
    let flag = |name: &str| parameters.flags(name).unwrap_or_default();
    let (subject, model, parameter) = (column("subject"), column("model"), column("parameter"));
    let (estimate, std_error, low, high) = (
        number("estimate"),
        number("std_error"),
        number("ci_low"),
        number("ci_high"),
    );
    let (at_bound, fixed) = (flag("at_bound"), flag("fixed"));
    let mut estimates: HashMap<(&str, &str), Vec<ParameterEstimate>> = HashMap::new();
    for r in 0..parameters.rows() {
        let Some(value) = estimate[r] else {
            return Err(format!(
                "{} of a shard: subject {}, model {}, parameter {}: an empty estimate; expected \
                 a number",
                fit_folder::PARAMETERS.csv(),
                subject[r],
                model[r],
                parameter[r]
            ));
        };
        estimates
            .entry((subject[r].as_str(), model[r].as_str()))
            .or_default()
            .push(ParameterEstimate {
                name: parameter[r].clone(),
                estimate: value,
                std_error: std_error[r],
                interval: low[r].zip(high[r]),
                at_bound: at_bound[r],
                fixed: fixed[r],
            });
    }
    Ok(estimates)
}

/// The wide estimates of the fits of `summary` from the long estimates table `parameters`.
fn wide_from_long(summary: &Table, parameters: &Table) -> Result<Table, String> {
    let estimates = estimates_by_fit(parameters)?;
    let text = |name: &str| summary.texts(name).unwrap_or_default();
    let (subjects, groups, models) = (text("subject"), text("group"), text("model"));
    let rows: Vec<WideRow<'_>> = (0..summary.rows())
        .map(|r| WideRow {
            subject: &subjects[r],
            group: &groups[r],
            model: &models[r],
            estimates: estimates
                .get(&(subjects[r].as_str(), models[r].as_str()))
                .map_or(&[], Vec::as_slice),
        })
        .collect();
    Ok(wide_table(&rows))
}
