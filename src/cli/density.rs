//! `valuedrift density`: the first-passage engine on a table of trials, for checking a
//! likelihood by hand.

use crate::files::{InputError, csv_rows, finite_number, refuse_existing, write_atomically};
use crate::first_passage::{Bound, DiffusionParams, cdf, ln_density};
use std::io::Write;
use std::path::Path;

const REQUIRED: [&str; 6] = ["rt", "bound", "drift", "boundary", "start", "ndt"];
const OPTIONAL: [&str; 3] = ["drift_sd", "start_range", "ndt_range"];

/// Reads `input`, appends `log_density` and `cdf` to every row, and writes the result to
/// `output` (atomically; an existing file only with `replace`) or to standard output.
pub fn run(
    input: &Path,
    output: Option<&Path>,
    replace: bool,
) -> Result<(), Box<dyn std::error::Error>> {
    if let Some(path) = output {
        refuse_existing(path, replace)?;
    }
    let rows = compute(input)?;
    match output {
        Some(path) => write_atomically(path, replace, |w| write_rows(w, &rows))?,
        None => write_rows(&mut std::io::stdout().lock(), &rows)?,
    }
    Ok(())
}

struct Computed {
    header: Vec<String>,
    records: Vec<Vec<String>>,
}

fn compute(input: &Path) -> Result<Computed, InputError> {
    let (mut reader, header) = crate::files::open_csv(input)?;
    let find = |name: &str| header.iter().position(|h| h == name);
    let mut required = [0usize; 6];
    for (slot, name) in required.iter_mut().zip(REQUIRED) {
        *slot = find(name).ok_or_else(|| {
            InputError::file(
                input,
                format!(
                    "missing column '{name}' (expected columns {})",
                    REQUIRED.join(",")
                ),
            )
        })?;
    }
    let optional = OPTIONAL.map(find);
    let mut records = Vec::new();
    for row in csv_rows(input, &mut reader) {
        let (line, record) = row?;
        let number = |column: usize, name: &str| {
            finite_number(input, line, name, record.get(column).unwrap_or(""))
        };
        let rt = number(required[0], "rt")?;
        let bound_text = record.get(required[1]).unwrap_or("");
        let bound = Bound::parse(bound_text).ok_or_else(|| {
            InputError::at(
                input,
                line,
                "bound",
                format!("'{bound_text}' is not 'upper' or 'lower'"),
            )
        })?;
        let mut values = [0.0; 4];
        for (k, name) in ["drift", "boundary", "start", "ndt"].iter().enumerate() {
            values[k] = number(required[k + 2], name)?;
        }
        let mut variability = [0.0; 3];
        for (k, name) in OPTIONAL.iter().enumerate() {
            if let Some(column) = optional[k]
                && !record.get(column).unwrap_or("").is_empty()
            {
                variability[k] = number(column, name)?;
            }
        }
        let params = DiffusionParams::new(values[0], values[1], values[2], values[3])
            .and_then(|p| p.with_variability(variability[0], variability[1], variability[2]))
            .map_err(|e| {
                InputError::at(
                    input,
                    line,
                    e.name,
                    format!("{} must be {}", e.value, e.expected),
                )
            })?;
        if rt < 0.0 {
            return Err(InputError::at(
                input,
                line,
                "rt",
                format!("{rt} is not a response time (must be >= 0 seconds)"),
            ));
        }
        let mut out: Vec<String> = record.iter().map(str::to_string).collect();
        out.resize(header.len(), String::new());
        out.push(crate::results::number_text(ln_density(rt, bound, &params)));
        out.push(crate::results::number_text(cdf(rt, bound, &params)));
        records.push(out);
    }
    let mut header = header;
    header.push("log_density".into());
    header.push("cdf".into());
    Ok(Computed { header, records })
}

fn write_rows(w: &mut dyn Write, rows: &Computed) -> Result<(), csv::Error> {
    let mut writer = csv::Writer::from_writer(w);
    writer.write_record(&rows.header)?;
    for record in &rows.records {
        writer.write_record(record)?;
    }
    writer.flush()?;
    Ok(())
}
