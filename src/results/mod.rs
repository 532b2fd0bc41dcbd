//! Tidy result tables (CSV and Parquet) and the run record (JSON) of a fit.

pub mod fit_folder;
pub mod parameters_file;
mod table_reader;
pub use table_reader::TableChunks;
mod table_writer;

pub use table_writer::TableParts;

pub use fit_folder::EstimateSource;

use crate::data::{ColumnMap, Subject, Trial, TrialTable};
use crate::files::OutputSet;
use crate::fit::SubjectFit;
use polars_arrow::array::{Array, BooleanArray, PrimitiveArray, Utf8Array};
use polars_arrow::datatypes::{ArrowSchema, Field};
use polars_arrow::record_batch::RecordBatchT;
use polars_parquet::write::{
    CompressionOptions, FileWriter, RowGroupIterator, StatisticsOptions, Version, WriteOptions,
    get_dtype_encoding,
};
use std::io::Write;
use std::path::Path;

/// How every Parquet file is written: Snappy compression, format version 1, the default
/// statistics.
fn parquet_options() -> WriteOptions {
    WriteOptions {
        statistics: StatisticsOptions::default(),
        compression: CompressionOptions::Snappy,
        version: Version::V1,
        data_page_size: None,
    }
}

/// Text that parses back to exactly `x`, never longer than 24 characters: Rust's `{}` (the
/// shortest round-trip digits, plain decimal) for 0 and for 10⁻⁵ ≤ |x| < 10¹⁶, where it is what
/// a reader expects (`100`, `0.25`); outside that range the shorter of `{}` and `{:e}` (the same
/// digits with an exponent), since `{}` never uses an exponent and would write a value near 0 with
/// hundreds of digits. Non-finite values are written as `inf`, `-inf` or `NaN`.
///
/// Rust's float formatting prints the shortest digit string that reads back to the same f64
/// (Steele & White 1990; Adams 2018). Every CSV and TSV writer of the crate formats its numbers
/// here.
pub fn number_text(x: f64) -> String {
    let plain = format!("{x}");
    if !x.is_finite() || x == 0.0 || (1e-5..1e16).contains(&x.abs()) {
        return plain;
    }
    let exponent = format!("{x:e}");
    if exponent.len() < plain.len() {
        exponent
    } else {
        plain
    }
}

/// One column of a tidy table.
#[derive(Clone, Debug, PartialEq)]
pub enum Column {
    /// Text values.
    Text(Vec<String>),
    /// Text values that may be missing: an empty CSV field and a Parquet null.
    OptionalText(Vec<Option<String>>),
    /// Numbers; `None` is written as an empty CSV field and a Parquet null.
    Number(Vec<Option<f64>>),
    /// Whole numbers.
    Integer(Vec<i64>),
    /// Flags.
    Flag(Vec<bool>),
    /// Flags that may be missing: an empty CSV field and a Parquet null.
    OptionalFlag(Vec<Option<bool>>),
}

impl Column {
    fn len(&self) -> usize {
        match self {
            Column::Text(v) => v.len(),
            Column::OptionalText(v) => v.len(),
            Column::Number(v) => v.len(),
            Column::Integer(v) => v.len(),
            Column::Flag(v) => v.len(),
            Column::OptionalFlag(v) => v.len(),
        }
    }

    fn cell(&self, row: usize) -> String {
        match self {
            Column::Text(v) => v[row].clone(),
            Column::OptionalText(v) => v[row].clone().unwrap_or_default(),
            Column::Number(v) => v[row].map_or(String::new(), number_text),
            Column::Integer(v) => v[row].to_string(),
            Column::Flag(v) => v[row].to_string(),
            Column::OptionalFlag(v) => v[row].map_or(String::new(), |b| b.to_string()),
        }
    }
}

/// A table: named columns of equal length.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct Table {
    /// (name, values) in output order.
    pub columns: Vec<(String, Column)>,
}

impl Table {
    /// Adds a column.
    pub fn with(mut self, name: &str, column: Column) -> Self {
        self.columns.push((name.to_string(), column));
        self
    }

    /// Number of rows.
    pub fn rows(&self) -> usize {
        self.columns.first().map_or(0, |(_, c)| c.len())
    }

    /// Writes the table as CSV.
    pub fn write_csv(&self, w: &mut dyn Write) -> Result<(), csv::Error> {
        self.write_delimited(w, b',')
    }

    /// Writes the table as tab-separated values.
    pub fn write_delimited(&self, w: &mut dyn Write, delimiter: u8) -> Result<(), csv::Error> {
        let mut writer = csv::WriterBuilder::new()
            .delimiter(delimiter)
            .from_writer(w);
        writer.write_record(self.columns.iter().map(|(n, _)| n))?;
        self.write_rows(&mut writer)?;
        writer.flush()?;
        Ok(())
    }

    /// Writes the rows (no header) to a CSV writer.
    fn write_rows<W: Write>(&self, writer: &mut csv::Writer<W>) -> Result<(), csv::Error> {
        for row in 0..self.rows() {
            writer.write_record(self.columns.iter().map(|(_, c)| c.cell(row)))?;
        }
        Ok(())
    }

    /// Writes the table as Parquet that old and new Arrow readers read as it is (checked with
    /// pyarrow 12.0.1 and the current pyarrow by tests/scripts/parquet_readers.sh): text as UTF-8
    /// byte arrays, numbers as doubles, whole numbers as 64-bit integers,
    /// flags as Parquet booleans, missing values as nulls; Snappy compression; no embedded Arrow
    /// schema, so each reader derives the column types from the Parquet schema alone (the Arrow
    /// schema polars' own writer embeds declares string views, which older readers reject:
    /// pyarrow 12.0.1 fails with "Unrecognized type: 24").
    pub fn write_parquet(&self, w: &mut dyn Write) -> Result<(), polars::error::PolarsError> {
        let (schema, arrays) = self.arrow();
        let mut writer = FileWriter::try_new(w, schema.clone(), parquet_options())?;
        self.write_row_group(&mut writer, &schema, arrays)?;
        // An empty key-value list instead of the default embedded Arrow schema (see above).
        writer.end(Some(Vec::new()))?;
        Ok(())
    }

    /// The columns as Arrow arrays, with their schema (nullable where a value may be missing).
    fn arrow(&self) -> (ArrowSchema, Vec<Box<dyn Array>>) {
        let mut fields = Vec::with_capacity(self.columns.len());
        let mut arrays: Vec<Box<dyn Array>> = Vec::with_capacity(self.columns.len());
        for (name, column) in &self.columns {
            let array: Box<dyn Array> = match column {
                Column::Text(v) => Box::new(Utf8Array::<i64>::from_slice(v)),
                Column::OptionalText(v) => Box::new(Utf8Array::<i64>::from(v)),
                Column::Number(v) => Box::new(PrimitiveArray::<f64>::from(v.as_slice())),
                Column::Integer(v) => Box::new(PrimitiveArray::<i64>::from_slice(v)),
                Column::Flag(v) => Box::new(BooleanArray::from_slice(v)),
                Column::OptionalFlag(v) => Box::new(BooleanArray::from(v.as_slice())),
            };
            let nullable = matches!(
                column,
                Column::OptionalText(_) | Column::Number(_) | Column::OptionalFlag(_)
            );
            fields.push(Field::new(
                name.as_str().into(),
                array.dtype().clone(),
                nullable,
            ));
            arrays.push(array);
        }
        let schema: ArrowSchema = fields.into_iter().map(|f| (f.name.clone(), f)).collect();
        (schema, arrays)
    }

    /// Writes `arrays` (this table's, from [`Table::arrow`]) as one row group.
    fn write_row_group<W: Write>(
        &self,
        writer: &mut FileWriter<W>,
        schema: &ArrowSchema,
        arrays: Vec<Box<dyn Array>>,
    ) -> Result<(), polars::error::PolarsError> {
        let encodings = schema
            .iter_values()
            .map(|f| get_dtype_encoding(&f.dtype))
            .collect();
        let batch =
            RecordBatchT::try_new(self.rows(), std::sync::Arc::new(schema.clone()), arrays)?;
        let row_groups = RowGroupIterator::try_new(
            std::iter::once(Ok(batch)),
            schema,
            parquet_options(),
            encodings,
        )?;
        for group in row_groups {
            writer.write(self.rows() as u64, group?)?;
        }
        Ok(())
    }

    /// Stages `stem.csv` and `stem.parquet` in `dir`.
    pub fn stage_both(
        &self,
        outputs: &mut OutputSet,
        dir: &Path,
        stem: &str,
    ) -> Result<(), crate::files::OutputError> {
        outputs.stage(&dir.join(format!("{stem}.csv")), |w| self.write_csv(w))?;
        outputs.stage(&dir.join(format!("{stem}.parquet")), |w| {
            self.write_parquet(w)
        })
    }
}

/// One row per subject, model and parameter: estimate, standard error, 95 % interval, flags.
pub fn parameters_table(fits: &[SubjectFit]) -> Table {
    let rows: Vec<(&SubjectFit, &crate::fit::ParameterEstimate)> = fits
        .iter()
        .flat_map(|f| f.estimates.iter().map(move |e| (f, e)))
        .collect();
    let text = |f: &dyn Fn(&(&SubjectFit, &crate::fit::ParameterEstimate)) -> String| {
        Column::Text(rows.iter().map(f).collect())
    };
    let number = |f: &dyn Fn(&(&SubjectFit, &crate::fit::ParameterEstimate)) -> Option<f64>| {
        Column::Number(rows.iter().map(f).collect())
    };
    let columns = [
        text(&|r| r.0.subject.clone()),
        text(&|r| r.0.group.clone()),
        text(&|r| r.0.model.clone()),
        text(&|r| r.1.name.clone()),
        number(&|r| Some(r.1.estimate)),
        number(&|r| r.1.std_error),
        number(&|r| r.1.interval.map(|i| i.0)),
        number(&|r| r.1.interval.map(|i| i.1)),
        Column::Flag(rows.iter().map(|r| r.1.at_bound).collect()),
        Column::Flag(rows.iter().map(|r| r.1.fixed).collect()),
    ];
    named(&parameters_file::COLUMNS, columns)
}

/// One row per subject and model: `subject`, `group`, `model`, then for every parameter
/// `<name>` (the estimate, as in [`parameters_table`]), `<name>_se` (its standard error) and
/// `<name>_at_bound`. Parameters are those of all models, in order of first appearance; a
/// model without a parameter has empty cells (Parquet nulls) there.
pub fn estimates_wide_table(fits: &[SubjectFit]) -> Table {
    let rows: Vec<WideRow<'_>> = fits
        .iter()
        .map(|f| WideRow {
            subject: &f.subject,
            group: &f.group,
            model: &f.model,
            estimates: &f.estimates,
        })
        .collect();
    wide_table(&rows)
}

/// One row of [`estimates_wide_table`]: a subject's estimates under one model.
pub struct WideRow<'a> {
    /// Subject label.
    pub subject: &'a str,
    /// Group label.
    pub group: &'a str,
    /// Model name.
    pub model: &'a str,
    /// The estimates, in the model's parameter order.
    pub estimates: &'a [crate::fit::ParameterEstimate],
}

/// The table of [`estimates_wide_table`] from its rows (also built by `merge` from the long
/// estimates table).
pub fn wide_table(rows: &[WideRow<'_>]) -> Table {
    let mut names: Vec<&str> = Vec::new();
    for e in rows.iter().flat_map(|r| r.estimates) {
        if !names.contains(&e.name.as_str()) {
            names.push(&e.name);
        }
    }
    let text = |f: fn(&WideRow<'_>) -> String| Column::Text(rows.iter().map(f).collect());
    let mut table = Table::default()
        .with("subject", text(|r| r.subject.to_string()))
        .with("group", text(|r| r.group.to_string()))
        .with("model", text(|r| r.model.to_string()));
    for name in names {
        let of = |r: &WideRow<'_>| r.estimates.iter().find(|e| e.name == name).cloned();
        let cells: Vec<Option<crate::fit::ParameterEstimate>> = rows.iter().map(of).collect();
        let number = |f: fn(&crate::fit::ParameterEstimate) -> Option<f64>| {
            Column::Number(cells.iter().map(|e| e.as_ref().and_then(f)).collect())
        };
        let at_bound = cells.iter().map(|e| e.as_ref().map(|e| e.at_bound));
        table = table
            .with(name, number(|e| Some(e.estimate)))
            .with(&format!("{name}_se"), number(|e| e.std_error))
            .with(
                &format!("{name}_at_bound"),
                Column::OptionalFlag(at_bound.collect()),
            );
    }
    table
}

/// Every column of a trial table, in the canonical order of [`crate::data`], one row per
/// trial: text as text (a missing choice is empty), numbers as numbers (missing: empty or
/// null), the trial number as a whole number. Response times are rounded to 0.1 ms, the
/// resolution of the files `simulate` writes.
pub fn trials_table(table: &TrialTable) -> Table {
    let rows: Vec<(&Subject, &Trial)> = table
        .subjects
        .iter()
        .flat_map(|s| s.trials.iter().map(move |t| (s, t)))
        .collect();
    let text = |f: &dyn Fn(&Subject, &Trial) -> String| {
        Column::Text(rows.iter().map(|(s, t)| f(s, t)).collect())
    };
    let number = |f: &dyn Fn(&Trial) -> Option<f64>| {
        Column::Number(rows.iter().map(|(_, t)| f(t)).collect())
    };
    let columns = [
        text(&|s, _| s.id.clone()),
        text(&|s, _| s.group.clone()),
        text(&|_, t| t.run.clone()),
        Column::Integer(rows.iter().map(|(_, t)| t.trial).collect()),
        text(&|s, t| s.options[t.offers[0].option].clone()),
        text(&|s, t| s.options[t.offers[1].option].clone()),
        number(&|t| Some(t.offers[0].effort)),
        number(&|t| Some(t.offers[1].effort)),
        number(&|t| t.offers[0].reward),
        number(&|t| t.offers[1].reward),
        Column::OptionalText(
            rows.iter()
                .map(|(_, t)| t.choice.map(|c| c.as_str().to_string()))
                .collect(),
        ),
        number(&|t| t.rt.map(|rt| (rt * 1e4).round() / 1e4)),
        number(&|t| t.outcome),
        number(&|t| t.onset),
        number(&|t| t.outcome_onset),
        number(&|t| t.offers[0].outcome_if),
        number(&|t| t.offers[1].outcome_if),
    ];
    let mut canonical = ColumnMap::CANONICAL
        .iter()
        .zip(columns)
        .fold(Table::default(), |table, (name, column)| {
            table.with(name, column)
        });
    // Options after a and b (c, d, …), in the reader's layout.
    let n_sides = rows.iter().map(|(_, t)| t.offers.len()).max().unwrap_or(2);
    for (k, side) in crate::data::SIDES.iter().enumerate().take(n_sides).skip(2) {
        let offer = |t: &Trial| t.offers.get(k).cloned();
        canonical = canonical
            .with(
                &format!("option_{side}"),
                Column::OptionalText(
                    rows.iter()
                        .map(|(s, t)| offer(t).map(|o| s.options[o.option].clone()))
                        .collect(),
                ),
            )
            .with(
                &format!("effort_{side}"),
                number(&|t| offer(t).map(|o| o.effort)),
            )
            .with(
                &format!("reward_{side}"),
                number(&|t| offer(t).and_then(|o| o.reward)),
            )
            .with(
                &format!("outcome_if_{side}"),
                number(&|t| offer(t).and_then(|o| o.outcome_if)),
            );
    }
    // The other columns of the table (per-trial covariates), cells as read.
    let names = table
        .subjects
        .first()
        .map(|s| s.covariates.clone())
        .unwrap_or_default();
    names.iter().enumerate().fold(canonical, |out, (k, name)| {
        out.with(
            name,
            Column::OptionalText(
                rows.iter()
                    .map(|(_, t)| t.covariates.get(k).cloned().flatten())
                    .collect(),
            ),
        )
    })
}

/// One row per subject and model: fit statistics.
pub fn summary_table(fits: &[SubjectFit]) -> Table {
    let text = |f: fn(&SubjectFit) -> String| Column::Text(fits.iter().map(f).collect());
    let number =
        |f: fn(&SubjectFit) -> f64| Column::Number(fits.iter().map(|x| Some(f(x))).collect());
    let integer =
        |f: fn(&SubjectFit) -> usize| Column::Integer(fits.iter().map(|x| f(x) as i64).collect());
    let flag = |f: fn(&SubjectFit) -> bool| Column::Flag(fits.iter().map(f).collect());
    let columns = [
        text(|f| f.subject.clone()),
        text(|f| f.group.clone()),
        text(|f| f.model.clone()),
        text(|f| {
            fit_folder::Scored::of(f.scores_response_times)
                .label()
                .to_string()
        }),
        integer(|f| f.n_trials),
        integer(|f| f.n_params),
        number(|f| f.log_likelihood),
        number(|f| f.log_prior),
        number(|f| f.aic),
        number(|f| f.bic),
        Column::Number(fits.iter().map(|f| f.log_evidence).collect()),
        integer(|f| f.starts_at_best),
        integer(|f| f.starts),
        flag(|f| f.converged),
        text(|f| f.status.clone()),
        flag(|f| f.hessian_ok),
        number(|f| f.gradient_norm),
        text(|f| f.termination.clone()),
    ];
    named(&fit_folder::SUMMARY_COLUMNS, columns)
}

/// A table of `columns` under `names`, in order.
fn named<const N: usize>(names: &[&str; N], columns: [Column; N]) -> Table {
    names
        .iter()
        .zip(columns)
        .fold(Table::default(), |table, (name, column)| {
            table.with(name, column)
        })
}

/// One row per model, scope and free parameter of empirical-Bayes fits: the group distribution
/// on the unconstrained scale and its natural-scale summaries.
pub fn group_prior_table(groups: &[crate::fit::GroupFit]) -> Table {
    let rows: Vec<(&crate::fit::GroupFit, &crate::fit::GroupParameter)> = groups
        .iter()
        .flat_map(|g| g.parameters.iter().map(move |p| (g, p)))
        .collect();
    let text = |f: &dyn Fn(&crate::fit::GroupFit, &crate::fit::GroupParameter) -> String| {
        Column::Text(rows.iter().map(|(g, p)| f(g, p)).collect())
    };
    let number = |f: &dyn Fn(&crate::fit::GroupParameter) -> f64| {
        Column::Number(
            rows.iter()
                .map(|(_, p)| Some(f(p)).filter(|x| x.is_finite()))
                .collect(),
        )
    };
    Table::default()
        .with("model", text(&|g, _| g.model.clone()))
        .with("scope", text(&|g, _| g.scope.clone()))
        .with("parameter", text(&|_, p| p.name.clone()))
        .with(
            "n_subjects",
            Column::Integer(rows.iter().map(|(g, _)| g.subjects.len() as i64).collect()),
        )
        .with("theta_mean", number(&|p| p.theta_mean))
        .with("theta_mean_se", number(&|p| p.theta_mean_se))
        .with("theta_sd", number(&|p| p.theta_sd))
        .with("natural_median", number(&|p| p.natural_median))
        .with(
            "natural_median_ci_low",
            number(&|p| p.natural_median_interval.0),
        )
        .with(
            "natural_median_ci_high",
            number(&|p| p.natural_median_interval.1),
        )
        .with("natural_mean", number(&|p| p.natural_mean))
        .with("natural_sd", number(&|p| p.natural_sd))
}

/// One row per model, scope, free parameter and term of empirical-Bayes fits whose prior mean
/// depends on participant scores ([`crate::fit::prior_regression`]): `term` is `intercept` or
/// the score's column, `centre` the value subtracted from the score (its mean over the scope's
/// participants, or 0 with scores as given; empty for the intercept), `estimate` the
/// coefficient on the parameter's unconstrained scale, `std_error`, `t_statistic`, `df`
/// (N − p − 1), the two-sided `p_value`, `n_subjects` (N) and `scale_per_participant` (the
/// parameter's unconstrained scale differs between participants, as ndt's does: its
/// coefficients then also reflect what changes the fastest responses). Fits without scores add
/// no rows.
pub fn prior_regression_table(groups: &[crate::fit::GroupFit]) -> Table {
    let rows: Vec<(
        &crate::fit::GroupFit,
        &crate::fit::prior_regression::PriorCoefficient,
    )> = groups
        .iter()
        .flat_map(|g| {
            g.regression
                .iter()
                .flat_map(|r| r.coefficients.iter())
                .map(move |c| (g, c))
        })
        .collect();
    let text = |f: &dyn Fn(
        &crate::fit::GroupFit,
        &crate::fit::prior_regression::PriorCoefficient,
    ) -> String| { Column::Text(rows.iter().map(|(g, c)| f(g, c)).collect()) };
    let number = |f: &dyn Fn(&crate::fit::prior_regression::PriorCoefficient) -> Option<f64>| {
        Column::Number(
            rows.iter()
                .map(|(_, c)| f(c).filter(|x| x.is_finite()))
                .collect(),
        )
    };
    Table::default()
        .with("model", text(&|g, _| g.model.clone()))
        .with("scope", text(&|g, _| g.scope.clone()))
        .with("parameter", text(&|_, c| c.parameter.clone()))
        .with("term", text(&|_, c| c.term.clone()))
        .with("centre", number(&|c| c.centre))
        .with("estimate", number(&|c| Some(c.estimate)))
        .with("std_error", number(&|c| c.std_error))
        .with("t_statistic", number(&|c| c.t_statistic))
        .with(
            "df",
            Column::Integer(rows.iter().map(|(_, c)| c.df as i64).collect()),
        )
        .with("p_value", number(&|c| c.p_value))
        .with(
            "n_subjects",
            Column::Integer(rows.iter().map(|(g, _)| g.subjects.len() as i64).collect()),
        )
        .with(
            "scale_per_participant",
            Column::Flag(rows.iter().map(|(_, c)| c.scale_per_participant).collect()),
        )
}

/// One row per model and scope of empirical-Bayes fits: convergence and the integrated BIC.
pub fn group_evidence_table(groups: &[crate::fit::GroupFit]) -> Table {
    let text =
        |f: fn(&crate::fit::GroupFit) -> String| Column::Text(groups.iter().map(f).collect());
    let number = |f: fn(&crate::fit::GroupFit) -> Option<f64>| {
        Column::Number(
            groups
                .iter()
                .map(|g| f(g).filter(|x| x.is_finite()))
                .collect(),
        )
    };
    let integer = |f: fn(&crate::fit::GroupFit) -> usize| {
        Column::Integer(groups.iter().map(|g| f(g) as i64).collect())
    };
    Table::default()
        .with("model", text(|g| g.model.clone()))
        .with("scope", text(|g| g.scope.clone()))
        .with("n_subjects", integer(|g| g.subjects.len()))
        .with("n_trials", integer(|g| g.n_trials))
        .with("n_group_parameters", integer(|g| g.n_group_parameters))
        .with(
            "log_marginal_likelihood",
            number(|g| Some(g.log_marginal_likelihood)),
        )
        .with(
            "log_marginal_likelihood_mc_se",
            number(|g| Some(g.log_marginal_likelihood_se)),
        )
        .with("log_marginal_laplace", number(|g| g.log_marginal_laplace))
        .with("ibic", number(|g| Some(g.ibic)))
        .with("em_iterations", integer(|g| g.iterations))
        .with(
            "em_converged",
            Column::Flag(groups.iter().map(|g| g.converged).collect()),
        )
        .with("em_last_change", number(|g| Some(g.last_change)))
        .with(
            "subjects_without_covariance",
            integer(|g| g.subjects_without_covariance),
        )
}

/// One row per model, scope and pair of free parameters of empirical-Bayes fits with a full
/// covariance: the covariance Σ_jl of the group distribution on the unconstrained scale and the
/// correlation Σ_jl / √(Σ_jj Σ_ll).
pub fn group_correlation_table(groups: &[crate::fit::GroupFit]) -> Table {
    let mut text: [Vec<String>; 4] = Default::default();
    let (mut covariance, mut correlation) = (Vec::new(), Vec::new());
    for g in groups.iter().filter(|g| !g.prior.is_diagonal()) {
        let c = &g.prior.covariance;
        for j in 0..g.parameters.len() {
            for l in j + 1..g.parameters.len() {
                for (column, value) in text.iter_mut().zip([
                    &g.model,
                    &g.scope,
                    &g.parameters[j].name,
                    &g.parameters[l].name,
                ]) {
                    column.push(value.clone());
                }
                covariance.push(Some(c[j][l]));
                correlation.push(Some(c[j][l] / (c[j][j] * c[l][l]).sqrt()));
            }
        }
    }
    let [model, scope, first, second] = text;
    Table::default()
        .with("model", Column::Text(model))
        .with("scope", Column::Text(scope))
        .with("parameter_1", Column::Text(first))
        .with("parameter_2", Column::Text(second))
        .with("covariance", Column::Number(covariance))
        .with("correlation", Column::Number(correlation))
}
