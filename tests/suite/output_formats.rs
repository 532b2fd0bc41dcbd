//! The files other software reads: numbers written in the shortest text that reads back to the
//! same f64, Parquet twins whose column types and values match their CSV, the one-row-per-subject
//! estimates table against the long parameters table, and `simulate --out` in both formats.

use polars::prelude::{DataType, ParquetReader, SerReader};
use std::collections::HashMap;
use std::path::{Path, PathBuf};
use std::process::Command;
use valuedrift::data::{ColumnMap, TrialTable, read_trials};
use valuedrift::results::number_text;

/// Runs the binary with `args`, then each (option, path) of `paths`.
fn valuedrift(args: &[&str], paths: &[(&str, &Path)]) -> std::process::Output {
    let mut command = Command::new(env!("CARGO_BIN_EXE_valuedrift"));
    command.args(args);
    for (option, path) in paths {
        command.arg(option).arg(path);
    }
    command.output().unwrap()
}

/// Asserts that a run succeeded, showing its error output when not.
fn assert_success(output: &std::process::Output) {
    let stderr = String::from_utf8_lossy(&output.stderr);
    assert!(output.status.success(), "{stderr}");
}

#[test]
fn numbers_read_back_bit_for_bit_and_are_never_longer_than_either_rust_form() {
    // Source: IEEE 754 binary64; parsing the text back must give the same bits (round trip),
    // which needs no reference beyond the standard. The length bound compares with the two
    // shortest-digit forms of Rust's formatter (`{}` and `{:e}`).
    let values = [
        f64::from_bits(1),       // smallest subnormal
        f64::MIN_POSITIVE / 3.0, // a subnormal
        1e-300,
        1.5e-300,
        1e-7,
        0.1,
        1.0 / 3.0,
        2.0 / 3.0,
        123_456.789,
        1e21,
        1e300,
        f64::MAX,
        -0.0,
        0.0,
        -1.0 / 3.0,
        -2.5e-12,
        -123_456.789,
        100.0,
        1000.0,
        0.000123,
        9_007_199_254_740_993.0,
        std::f64::consts::PI,
    ];
    for x in values {
        let text = number_text(x);
        let back: f64 = text.parse().unwrap();
        assert_eq!(back.to_bits(), x.to_bits(), "{x:e} written as {text}");
        assert!(text.len() <= 24, "{x:e} written as {text}");
        if x == 0.0 || (1e-5..1e16).contains(&x.abs()) {
            assert_eq!(
                text,
                format!("{x}"),
                "ordinary magnitudes stay plain decimals"
            );
        } else {
            let shorter = format!("{x}").len().min(format!("{x:e}").len());
            assert_eq!(text.len(), shorter, "{x:e} written as {text}");
        }
    }
    // Examples: plain decimals for ordinary magnitudes, an exponent for extreme ones
    // (from the definitions of the two forms).
    assert_eq!(number_text(1.5e-300), "1.5e-300");
    assert_eq!(number_text(0.1), "0.1");
    assert_eq!(number_text(123_456.789), "123456.789");
    assert_eq!(number_text(1e21), "1e21");
    assert_eq!(number_text(-0.0), "-0");
    // Non-finite values are written so that the usual readers parse them (common practice).
    assert_eq!(number_text(f64::NEG_INFINITY), "-inf");
    assert_eq!(
        number_text(f64::NEG_INFINITY).parse::<f64>(),
        Ok(f64::NEG_INFINITY)
    );
}

/// A CSV file as header and rows of cells.
fn read_csv(path: &Path) -> (Vec<String>, Vec<Vec<String>>) {
    let mut reader = csv::Reader::from_path(path).unwrap();
    let header = reader.headers().unwrap().iter().map(String::from).collect();
    let rows = reader
        .records()
        .map(|r| r.unwrap().iter().map(String::from).collect())
        .collect();
    (header, rows)
}

/// The first subjects of the demo study (our own simulation, demo-data/README.md), trimmed to
/// their first `trials` trials, written as CSV.
fn small_demo_table(dir: &Path, subjects: usize, trials: usize) -> PathBuf {
    let demo = read_trials(
        Path::new("demo-data/orchard_trials.csv"),
        &ColumnMap::default(),
    )
    .unwrap();
    let mut small = TrialTable {
        subjects: demo.subjects.into_iter().take(subjects).collect(),
        present: demo.present,
    };
    for s in &mut small.subjects {
        s.trials.truncate(trials);
    }
    let path = dir.join("trials.csv");
    let mut bytes = Vec::new();
    valuedrift::results::trials_table(&small)
        .write_csv(&mut bytes)
        .unwrap();
    std::fs::write(&path, bytes).unwrap();
    path
}

/// Every Parquet twin in `dir` against its CSV: same columns in the same order, text as text,
/// flags as Parquet booleans, numbers as doubles or 64-bit integers, and the same values (the
/// CSV cell is the text of the Parquet value; null is an empty cell). The Parquet format's own
/// types (Apache Parquet format specification) are what other readers see.
fn check_parquet_twins(dir: &Path) -> usize {
    let mut checked = 0;
    for entry in std::fs::read_dir(dir).unwrap() {
        let path = entry.unwrap().path();
        if path.extension().and_then(|e| e.to_str()) != Some("parquet") {
            continue;
        }
        let frame = ParquetReader::new(std::fs::File::open(&path).unwrap())
            .finish()
            .unwrap();
        let (header, rows) = read_csv(&path.with_extension("csv"));
        let names: Vec<String> = frame
            .get_column_names()
            .iter()
            .map(|n| n.to_string())
            .collect();
        assert_eq!(names, header, "{}", path.display());
        assert_eq!(frame.height(), rows.len(), "{}", path.display());
        for (k, column) in frame.columns().iter().enumerate() {
            let series = column.as_materialized_series();
            let cells: Vec<String> = match series.dtype() {
                DataType::String => series
                    .str()
                    .unwrap()
                    .iter()
                    .map(|v| v.unwrap_or("").to_string())
                    .collect(),
                DataType::Boolean => series
                    .bool()
                    .unwrap()
                    .iter()
                    .map(|v| v.map_or(String::new(), |b| b.to_string()))
                    .collect(),
                DataType::Float64 => series
                    .f64()
                    .unwrap()
                    .iter()
                    .map(|v| v.map_or(String::new(), number_text))
                    .collect(),
                DataType::Int64 => series
                    .i64()
                    .unwrap()
                    .iter()
                    .map(|v| v.map_or(String::new(), |i| i.to_string()))
                    .collect(),
                other => panic!("{}: column {} has type {other}", path.display(), header[k]),
            };
            let is_flag = rows
                .iter()
                .all(|r| ["true", "false", ""].contains(&r[k].as_str()))
                && rows.iter().any(|r| !r[k].is_empty());
            if is_flag {
                assert_eq!(
                    series.dtype(),
                    &DataType::Boolean,
                    "{}: flag column {} must be a Parquet boolean",
                    path.display(),
                    header[k]
                );
            }
            for (row, cell) in rows.iter().zip(&cells) {
                assert_eq!(&row[k], cell, "{}: column {}", path.display(), header[k]);
            }
        }
        checked += 1;
    }
    checked
}

#[test]
fn fit_writes_a_wide_estimates_table_equal_to_the_long_one_and_parquet_twins_equal_to_csv() {
    let dir = tempfile::tempdir().unwrap();
    let data = small_demo_table(dir.path(), 6, 80);
    let out = dir.path().join("fits");
    let fit = [
        "fit",
        "--model",
        "gainloss-linear,delta-linear",
        "--starts",
        "2",
        "--hierarchical",
        "--ibic-samples",
        "50",
    ];
    assert_success(&valuedrift(&fit, &[("--data", &data), ("--out", &out)]));
    for (long, wide) in [
        ("parameters", "estimates_wide"),
        ("eb_parameters", "eb_estimates_wide"),
    ] {
        let (long_header, long_rows) = read_csv(&out.join(format!("{long}.csv")));
        let (wide_header, wide_rows) = read_csv(&out.join(format!("{wide}.csv")));
        assert_eq!(wide_header[..3], ["subject", "group", "model"]);
        let at = |header: &[String], name: &str| header.iter().position(|h| h == name).unwrap();
        let l = |name: &str| at(&long_header, name);
        // One row per subject and model: the distinct (subject, model) pairs of the long table.
        let mut pairs: Vec<(String, String)> = long_rows
            .iter()
            .map(|r| (r[l("subject")].clone(), r[l("model")].clone()))
            .collect();
        pairs.dedup();
        assert_eq!(wide_rows.len(), pairs.len(), "{wide}");
        let by_key: HashMap<(String, String), &Vec<String>> = wide_rows
            .iter()
            .map(|r| ((r[0].clone(), r[2].clone()), r))
            .collect();
        let mut parameters_seen: HashMap<String, Vec<String>> = HashMap::new();
        for row in &long_rows {
            let key = (row[l("subject")].clone(), row[l("model")].clone());
            let wide_row = by_key[&key];
            let name = &row[l("parameter")];
            assert_eq!(wide_row[1], row[l("group")]);
            assert_eq!(
                wide_row[at(&wide_header, name)],
                row[l("estimate")],
                "{name}"
            );
            assert_eq!(
                wide_row[at(&wide_header, &format!("{name}_se"))],
                row[l("std_error")],
                "{name}_se"
            );
            assert_eq!(
                wide_row[at(&wide_header, &format!("{name}_at_bound"))],
                row[l("at_bound")],
                "{name}_at_bound"
            );
            parameters_seen
                .entry(key.1.clone())
                .or_default()
                .push(name.clone());
        }
        // A parameter that one model lacks is empty in that model's rows: delta-linear has no
        // gain_rate (models/delta-linear.toml).
        assert!(!parameters_seen["delta-linear"].contains(&"gain_rate".to_string()));
        for row in wide_rows.iter().filter(|r| r[2] == "delta-linear") {
            assert_eq!(row[at(&wide_header, "gain_rate")], "");
            assert_eq!(row[at(&wide_header, "gain_rate_at_bound")], "");
        }
        assert!(wide_rows.iter().any(|r| r[2] == "delta-linear"));
    }
    // Every Parquet file of the fit folder: parameters, summaries, wide tables, group priors,
    // model evidence.
    assert!(check_parquet_twins(&out) >= 8);
}

#[test]
fn simulate_writes_parquet_that_reads_back_as_the_same_table_as_its_csv() {
    let dir = tempfile::tempdir().unwrap();
    let design = Path::new("demo-data/orchard_design.csv");
    let params = Path::new("demo-data/generating_values.csv");
    let mut tables = Vec::new();
    for name in ["sim.csv", "sim.parquet"] {
        let out = dir.path().join(name);
        let output = valuedrift(
            &["simulate", "--model", "gainloss-linear", "--seed", "5"],
            &[("--params", params), ("--design", design), ("--out", &out)],
        );
        assert_success(&output);
        tables.push(read_trials(&out, &ColumnMap::default()).unwrap());
    }
    // The Parquet file is Parquet (magic bytes PAR1 at both ends: Apache Parquet format
    // specification), not CSV under another name.
    let bytes = std::fs::read(dir.path().join("sim.parquet")).unwrap();
    assert_eq!(&bytes[..4], b"PAR1");
    assert_eq!(&bytes[bytes.len() - 4..], b"PAR1");
    assert_eq!(tables[0], tables[1]);
    assert_eq!(tables[0].subjects.len(), 40);
    assert!(
        tables[1]
            .subjects
            .iter()
            .flat_map(|s| &s.trials)
            .any(|t| t.choice.is_some())
    );
    // Written again from the table read back, the Parquet file holds the same table.
    let again = dir.path().join("again.parquet");
    let mut bytes = Vec::new();
    valuedrift::results::trials_table(&tables[1])
        .write_parquet(&mut bytes)
        .unwrap();
    std::fs::write(&again, bytes).unwrap();
    assert_eq!(
        read_trials(&again, &ColumnMap::default()).unwrap(),
        tables[1]
    );

    // Any other extension is refused by name, and nothing is written.
    let out = dir.path().join("sim.txt");
    let output = valuedrift(
        &["simulate", "--model", "gainloss-linear"],
        &[("--params", params), ("--design", design), ("--out", &out)],
    );
    assert!(!output.status.success());
    let stderr = String::from_utf8_lossy(&output.stderr);
    assert!(
        stderr.contains("sim.txt") && stderr.contains(".csv") && stderr.contains(".parquet"),
        "{stderr}"
    );
    assert!(!out.exists());
}
