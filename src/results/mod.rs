//! Tidy result tables (CSV and Parquet) and the run record (JSON) of a fit.

use crate::files::OutputSet;
use crate::fit::SubjectFit;
use polars::prelude::{Column as PolarsColumn, DataFrame, NamedFrom, ParquetWriter, Series};
use std::io::Write;
use std::path::Path;

/// One column of a tidy table.
#[derive(Clone, Debug, PartialEq)]
pub enum Column {
    /// Text values.
    Text(Vec<String>),
    /// Numbers; `None` is written as an empty CSV field and a Parquet null.
    Number(Vec<Option<f64>>),
    /// Whole numbers.
    Integer(Vec<i64>),
    /// Flags.
    Flag(Vec<bool>),
}

impl Column {
    fn len(&self) -> usize {
        match self {
            Column::Text(v) => v.len(),
            Column::Number(v) => v.len(),
            Column::Integer(v) => v.len(),
            Column::Flag(v) => v.len(),
        }
    }

    fn cell(&self, row: usize) -> String {
        match self {
            Column::Text(v) => v[row].clone(),
            Column::Number(v) => v[row].map_or(String::new(), |x| format!("{x}")),
            Column::Integer(v) => v[row].to_string(),
            Column::Flag(v) => v[row].to_string(),
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
        for row in 0..self.rows() {
            writer.write_record(self.columns.iter().map(|(_, c)| c.cell(row)))?;
        }
        writer.flush()?;
        Ok(())
    }

    /// Writes the table as Parquet (polars).
    pub fn write_parquet(&self, w: &mut dyn Write) -> Result<(), polars::error::PolarsError> {
        let columns: Vec<PolarsColumn> = self
            .columns
            .iter()
            .map(|(name, c)| {
                let series = match c {
                    Column::Text(v) => Series::new(name.into(), v),
                    Column::Number(v) => Series::new(name.into(), v),
                    Column::Integer(v) => Series::new(name.into(), v),
                    Column::Flag(v) => Series::new(name.into(), v),
                };
                series.into()
            })
            .collect();
        let mut frame = DataFrame::new_infer_height(columns)?;
        ParquetWriter::new(w).finish(&mut frame)?;
        Ok(())
    }

    /// Stages `stem.csv` and `stem.parquet` in `dir`.
    pub fn stage_both(
        &self,
        outputs: &mut OutputSet,
        dir: &Path,
        stem: &str,
    ) -> Result<(), String> {
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
    Table::default()
        .with("subject", text(&|r| r.0.subject.clone()))
        .with("group", text(&|r| r.0.group.clone()))
        .with("model", text(&|r| r.0.model.clone()))
        .with("parameter", text(&|r| r.1.name.clone()))
        .with("estimate", number(&|r| Some(r.1.estimate)))
        .with("std_error", number(&|r| r.1.std_error))
        .with("ci_low", number(&|r| r.1.interval.map(|i| i.0)))
        .with("ci_high", number(&|r| r.1.interval.map(|i| i.1)))
        .with(
            "at_bound",
            Column::Flag(rows.iter().map(|r| r.1.at_bound).collect()),
        )
        .with(
            "fixed",
            Column::Flag(rows.iter().map(|r| r.1.fixed).collect()),
        )
}

/// One row per subject and model: fit statistics.
pub fn summary_table(fits: &[SubjectFit]) -> Table {
    let text = |f: fn(&SubjectFit) -> String| Column::Text(fits.iter().map(f).collect());
    let number =
        |f: fn(&SubjectFit) -> f64| Column::Number(fits.iter().map(|x| Some(f(x))).collect());
    let integer =
        |f: fn(&SubjectFit) -> usize| Column::Integer(fits.iter().map(|x| f(x) as i64).collect());
    let flag = |f: fn(&SubjectFit) -> bool| Column::Flag(fits.iter().map(f).collect());
    Table::default()
        .with("subject", text(|f| f.subject.clone()))
        .with("group", text(|f| f.group.clone()))
        .with("model", text(|f| f.model.clone()))
        .with("n_trials", integer(|f| f.n_trials))
        .with("n_params", integer(|f| f.n_params))
        .with("log_likelihood", number(|f| f.log_likelihood))
        .with("log_prior", number(|f| f.log_prior))
        .with("aic", number(|f| f.aic))
        .with("bic", number(|f| f.bic))
        .with("starts_at_best", integer(|f| f.starts_at_best))
        .with("starts", integer(|f| f.starts))
        .with("converged", flag(|f| f.converged))
        .with("hessian_ok", flag(|f| f.hessian_ok))
        .with("gradient_norm", number(|f| f.gradient_norm))
        .with("termination", text(|f| f.termination.clone()))
}
