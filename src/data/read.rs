//! Reading a trial table from CSV, TSV or Parquet, checking every row.
//!
//! CSV and TSV files are first tokenised here (so that every data row is tied to the file line it
//! starts on, quoting mistakes are reported with their line, and rows with the wrong number of
//! fields are caught), then read by polars with every column as text; all numbers are parsed here
//! so that each problem can be reported with its line and column. Parquet columns may hold
//! numbers or text; problems in them are reported by 1-based data row.

use std::borrow::Cow;
use std::collections::{HashMap, HashSet};
use std::io::Cursor;
use std::path::Path;
use std::str::FromStr;

use polars::prelude::*;

use super::{Choice, Offer, SIDES, Subject, Trial, TrialTable};
use crate::files::InputError;

/// Canonical column names, in the order of the column table in [`crate::data`].
const CANONICAL: [&str; 17] = [
    "subject",
    "group",
    "run",
    "trial",
    "option_a",
    "option_b",
    "effort_a",
    "effort_b",
    "reward_a",
    "reward_b",
    "choice",
    "rt",
    "outcome",
    "onset",
    "outcome_onset",
    "outcome_if_a",
    "outcome_if_b",
];

/// Columns every file must have.
const REQUIRED: [&str; 6] = ["subject", "trial", "effort_a", "effort_b", "choice", "rt"];

/// Optional columns that only make sense together.
const PAIRS: [(&str, &str); 3] = [
    ("option_a", "option_b"),
    ("reward_a", "reward_b"),
    ("outcome_if_a", "outcome_if_b"),
];

/// How a file's columns and codes map to ours: column names, and optionally the file's choice
/// codes and missing-value tokens.
///
/// The default maps every canonical name to itself, reads choices as `a`/`b` and only empty cells
/// as missing. [`ColumnMap::parse`] reads a comma-separated list of `canonical=file` pairs, such
/// as `subject=participant,rt=RT_sec`; names not listed keep their canonical name.
/// [`ColumnMap::with_choice_codes`] and [`ColumnMap::with_missing`] add the codes.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct ColumnMap {
    /// File column name for each entry of [`CANONICAL`], in the same order.
    file: Vec<String>,
    /// The file's choice codes and the option each stands for (empty: `a` and `b`).
    choice_codes: Vec<(String, Choice)>,
    /// Cell texts read as missing besides the empty cell.
    missing: Vec<String>,
}

impl Default for ColumnMap {
    fn default() -> Self {
        ColumnMap {
            file: CANONICAL.iter().map(|c| c.to_string()).collect(),
            choice_codes: Vec::new(),
            missing: Vec::new(),
        }
    }
}

impl ColumnMap {
    /// All canonical column names, in the order of the column table.
    pub const CANONICAL: &'static [&'static str] = &CANONICAL;

    /// Parses `canonical=file` pairs separated by commas. Unknown canonical names, a name given
    /// twice, empty names and two canonical columns read from the same file column are errors.
    pub fn parse(spec: &str) -> Result<ColumnMap, String> {
        let mut map = ColumnMap::default();
        let mut given = [false; CANONICAL.len()];
        for item in spec.split(',') {
            let item = item.trim();
            if item.is_empty() {
                continue;
            }
            let Some((canonical, file)) = item.split_once('=') else {
                return Err(format!(
                    "column mapping `{item}` has no `=`: expected canonical=file, \
                     e.g. subject=participant"
                ));
            };
            let (canonical, file) = (canonical.trim(), file.trim());
            let Some(index) = CANONICAL.iter().position(|c| *c == canonical) else {
                return Err(format!(
                    "unknown column `{canonical}` in column mapping `{item}`; valid columns are: {}",
                    CANONICAL.join(", ")
                ));
            };
            if file.is_empty() {
                return Err(format!(
                    "column mapping `{item}` gives no file column name for `{canonical}`"
                ));
            }
            if given[index] {
                return Err(format!("column `{canonical}` is mapped more than once"));
            }
            given[index] = true;
            map.file[index] = file.to_string();
        }
        let named: Vec<(&str, &str)> = CANONICAL
            .iter()
            .zip(&map.file)
            .map(|(c, f)| (*c, f.as_str()))
            .collect();
        for (i, (first, file)) in named.iter().enumerate() {
            if let Some((second, _)) = named[i + 1..].iter().find(|(_, f)| f == file) {
                return Err(format!(
                    "columns `{first}` and `{second}` would both be read from file column `{file}`"
                ));
            }
        }
        Ok(map)
    }

    /// The same mapping reading the choice column through `spec`, comma-separated `code=option`
    /// pairs with option `a`, `b` (or `c`, … for more options), such as `1=a,2=b` or
    /// `accept=a,reject=b` (codes compared without regard to ASCII case, after trimming). An
    /// empty `spec` keeps the side labels. Each code once; a and b must have a code; a code may
    /// not also be a missing-value token.
    pub fn with_choice_codes(mut self, spec: &str) -> Result<ColumnMap, String> {
        let mut codes: Vec<(String, Choice)> = Vec::new();
        for item in spec.split(',').map(str::trim).filter(|i| !i.is_empty()) {
            let Some((code, option)) = item.split_once('=') else {
                return Err(format!(
                    "choice code `{item}` has no `=`: expected code=a or code=b, e.g. 1=a,2=b"
                ));
            };
            let (code, option) = (code.trim(), option.trim());
            let Some(choice) = Choice::from_label(option) else {
                return Err(format!(
                    "choice code `{item}` maps to `{option}`; expected an option a, b, c, …, \
                     e.g. 1=a,2=b"
                ));
            };
            if code.is_empty() {
                return Err(format!(
                    "choice code `{item}` has no code before `=`; expected code=a or code=b \
                     (an empty cell is always no response)"
                ));
            }
            if codes.iter().any(|(c, _)| c.eq_ignore_ascii_case(code)) {
                return Err(format!("choice code `{code}` is given more than once"));
            }
            if self.is_missing_token(code) {
                return Err(format!(
                    "choice code `{code}` is also a missing-value token (--missing); expected \
                     it in only one of them"
                ));
            }
            codes.push((code.to_string(), choice));
        }
        if !codes.is_empty() {
            for (choice, name) in [(Choice::A, "a"), (Choice::B, "b")] {
                if !codes.iter().any(|(_, c)| *c == choice) {
                    return Err(format!(
                        "choice codes `{spec}` give no code for option {name}; expected at least \
                         one code for each of a and b, e.g. 1=a,2=b"
                    ));
                }
            }
        }
        self.choice_codes = codes;
        Ok(self)
    }

    /// The same mapping reading every cell equal to one of the comma-separated tokens of `spec`
    /// (such as `NA,NaN,N/A,.`; compared without regard to ASCII case, after trimming) as missing,
    /// like an empty cell, in every column. In Parquet files a token `NaN` also matches
    /// floating-point NaN, and a numeric token (such as `-99`) matches that number.
    pub fn with_missing(mut self, spec: &str) -> Result<ColumnMap, String> {
        let mut tokens: Vec<String> = Vec::new();
        for token in spec.split(',').map(str::trim) {
            if token.is_empty() {
                if spec.trim().is_empty() {
                    continue;
                }
                return Err(format!(
                    "missing-value tokens `{spec}` include an empty token; expected tokens such \
                     as NA,NaN separated by single commas (empty cells are always missing)"
                ));
            }
            if let Some((code, _)) = self
                .choice_codes
                .iter()
                .find(|(c, _)| c.eq_ignore_ascii_case(token))
            {
                return Err(format!(
                    "missing-value token `{token}` is also the choice code `{code}`; expected it \
                     in only one of them"
                ));
            }
            if !tokens.iter().any(|t| t.eq_ignore_ascii_case(token)) {
                tokens.push(token.to_string());
            }
        }
        self.missing = tokens;
        Ok(self)
    }

    /// The choice codes given with [`ColumnMap::with_choice_codes`] (empty: `a` and `b`).
    pub fn choice_codes(&self) -> &[(String, Choice)] {
        &self.choice_codes
    }

    /// The missing-value tokens given with [`ColumnMap::with_missing`].
    pub fn missing_tokens(&self) -> &[String] {
        &self.missing
    }

    fn is_missing_token(&self, text: &str) -> bool {
        self.missing.iter().any(|t| t.eq_ignore_ascii_case(text))
    }

    /// True when a cell of the file stands for a missing value.
    fn reads_as_missing(&self, cell: Cell<'_>) -> bool {
        match cell {
            Cell::Missing => true,
            Cell::Text(s) => self.is_missing_token(s),
            Cell::Int(i) => self
                .missing
                .iter()
                .any(|t| t.parse::<f64>().is_ok_and(|x| x == i as f64)),
            Cell::Float(x) if x.is_nan() => self.is_missing_token("NaN"),
            Cell::Float(x) => self
                .missing
                .iter()
                .any(|t| t.parse::<f64>().is_ok_and(|y| y == x)),
        }
    }

    /// The file's name for canonical column `canonical` (unknown names are returned unchanged).
    pub fn file_name<'a>(&'a self, canonical: &'a str) -> &'a str {
        match CANONICAL.iter().position(|c| *c == canonical) {
            Some(index) => &self.file[index],
            None => canonical,
        }
    }
}

impl FromStr for ColumnMap {
    type Err = String;

    fn from_str(spec: &str) -> Result<Self, Self::Err> {
        ColumnMap::parse(spec)
    }
}

/// What the reader accepted but a user should hear about, counted over the whole file.
#[derive(Clone, Debug, Default, PartialEq, Eq)]
pub struct ReadNotes {
    /// Trials without a response that record an outcome (task logs often write 0 or a penalty
    /// there): accepted, and no learning follows them (nothing was chosen).
    pub outcomes_without_response: usize,
    /// Line (or Parquet row) of the first such trial.
    pub first_outcome_without_response: Option<u64>,
}

impl ReadNotes {
    /// One line per note, naming the file, for the console; empty when there is nothing to say.
    pub fn lines(&self, path: &Path) -> Vec<String> {
        let mut lines = Vec::new();
        if self.outcomes_without_response > 0 {
            lines.push(format!(
                "note: {}: {} trial(s) without a response record an outcome (first at line/row \
                 {}); accepted, and no learning follows them since nothing was chosen",
                path.display(),
                self.outcomes_without_response,
                self.first_outcome_without_response.unwrap_or(0)
            ));
        }
        lines
    }
}

/// Reads and checks a trial table. The format follows the extension: `.csv` (comma-separated),
/// `.tsv` or `.txt` (tab-separated) or `.parquet`. Column names, choice codes and missing-value
/// tokens are looked up through `columns`.
pub fn read_trials(path: &Path, columns: &ColumnMap) -> Result<TrialTable, InputError> {
    read_trials_noted(path, columns).map(|(table, _)| table)
}

/// [`read_trials`], also returning what the reader accepted with a note.
pub fn read_trials_noted(
    path: &Path,
    columns: &ColumnMap,
) -> Result<(TrialTable, ReadNotes), InputError> {
    let extension = path
        .extension()
        .and_then(|e| e.to_str())
        .map(str::to_ascii_lowercase);
    match extension.as_deref() {
        Some("csv") => read_delimited(path, columns, b','),
        Some("tsv") | Some("txt") => read_delimited(path, columns, b'\t'),
        Some("parquet") => read_parquet(path, columns),
        Some(other) => Err(InputError::file(
            path,
            format!(
                "has extension .{other}; expected .csv (comma-separated), .tsv or .txt \
                 (tab-separated) or .parquet"
            ),
        )),
        None => Err(InputError::file(
            path,
            "has no extension; expected .csv (comma-separated), .tsv or .txt (tab-separated) \
             or .parquet",
        )),
    }
}

// ---------------------------------------------------------------------------------------------
// Cells and columns

/// One value as found in the file.
#[derive(Clone, Copy, Debug)]
enum Cell<'a> {
    Missing,
    Text(&'a str),
    Int(i64),
    Float(f64),
}

/// One column's values, borrowed from the polars frame.
enum Values<'a> {
    Text(Vec<Option<&'a str>>),
    Int(Vec<Option<i64>>),
    Float(Vec<Option<f64>>),
}

impl Values<'_> {
    fn cell(&self, row: usize) -> Cell<'_> {
        match self {
            Values::Text(v) => match v[row].map(str::trim) {
                Some(s) if !s.is_empty() => Cell::Text(s),
                _ => Cell::Missing,
            },
            Values::Int(v) => v[row].map_or(Cell::Missing, Cell::Int),
            Values::Float(v) => v[row].map_or(Cell::Missing, Cell::Float),
        }
    }
}

impl<'a> Cell<'a> {
    fn text(self) -> Option<Cow<'a, str>> {
        match self {
            Cell::Missing => None,
            Cell::Text(s) => Some(Cow::Borrowed(s)),
            Cell::Int(i) => Some(Cow::Owned(i.to_string())),
            Cell::Float(x) => Some(Cow::Owned(x.to_string())),
        }
    }

    /// A finite number, or `None` when missing.
    fn number(self) -> Result<Option<f64>, String> {
        let x = match self {
            Cell::Missing => return Ok(None),
            Cell::Int(i) => i as f64,
            Cell::Float(x) => x,
            Cell::Text(s) => s
                .parse::<f64>()
                .map_err(|_| format!("expected a number, found {s:?}"))?,
        };
        if x.is_finite() {
            Ok(Some(x))
        } else {
            Err(format!("expected a finite number, found {}", self.shown()))
        }
    }

    /// A whole number, or `None` when missing.
    fn integer(self) -> Result<Option<i64>, String> {
        match self {
            Cell::Missing => Ok(None),
            Cell::Int(i) => Ok(Some(i)),
            Cell::Float(x) => {
                if x.is_finite() && x.fract() == 0.0 && x.abs() < 9.0e15 {
                    Ok(Some(x as i64))
                } else {
                    Err(format!("expected a whole number, found {}", self.shown()))
                }
            }
            Cell::Text(s) => s
                .parse::<i64>()
                .map(Some)
                .map_err(|_| format!("expected a whole number, found {s:?}")),
        }
    }

    /// The value as it would be quoted in a message.
    fn shown(self) -> String {
        match self {
            Cell::Missing => "nothing".to_string(),
            Cell::Text(s) => format!("{s:?}"),
            Cell::Int(i) => i.to_string(),
            Cell::Float(x) => x.to_string(),
        }
    }
}

/// Where a data row is, for error messages.
enum Positions {
    /// CSV/TSV: the file line each data row starts on, and the header's line.
    Lines { rows: Vec<u64>, header: u64 },
    /// Parquet: data rows are numbered from 1.
    Rows,
}

impl Positions {
    fn of(&self, row: usize) -> u64 {
        match self {
            Positions::Lines { rows, .. } => rows[row],
            Positions::Rows => row as u64 + 1,
        }
    }

    fn unit(&self) -> &'static str {
        match self {
            Positions::Lines { .. } => "line",
            Positions::Rows => "row",
        }
    }

    fn header(&self) -> Option<u64> {
        match self {
            Positions::Lines { header, .. } => Some(*header),
            Positions::Rows => None,
        }
    }
}

// ---------------------------------------------------------------------------------------------
// CSV and TSV

/// Result of tokenising a delimited file.
struct Scan {
    /// Header names, trimmed.
    header: Vec<String>,
    /// Line of the header.
    header_line: u64,
    /// Line each data row starts on.
    rows: Vec<u64>,
}

fn read_delimited(
    path: &Path,
    columns: &ColumnMap,
    sep: u8,
) -> Result<(TrialTable, ReadNotes), InputError> {
    let bytes =
        std::fs::read(path).map_err(|e| InputError::file(path, format!("cannot be read: {e}")))?;
    if let Err(e) = std::str::from_utf8(&bytes) {
        let offset = e.valid_up_to();
        let line = 1 + bytes[..offset].iter().filter(|&&b| b == b'\n').count() as u64;
        return Err(InputError {
            line: Some(line),
            ..InputError::file(path, "is not UTF-8 text; save the file with UTF-8 encoding")
        });
    }
    let scan = scan_delimited(path, &bytes, sep)?;
    if scan.rows.is_empty() {
        return Err(InputError::file(
            path,
            "has a header but no trials; expected one row per trial after the header",
        ));
    }
    let frame = CsvReadOptions::default()
        .with_has_header(true)
        .with_infer_schema_length(Some(0))
        .with_raise_if_empty(false)
        .map_parse_options(|p| p.with_separator(sep).with_quote_char(Some(b'"')))
        .into_reader_with_file_handle(Cursor::new(bytes))
        .finish()
        .map_err(|e| InputError::file(path, format!("cannot be read: {e}")))?;
    if frame.height() != scan.rows.len() || frame.width() != scan.header.len() {
        return Err(InputError::file(
            path,
            format!(
                "was split into {} rows of {} columns, but the reader found {} rows of {}; \
                 check the quoting",
                scan.rows.len(),
                scan.header.len(),
                frame.height(),
                frame.width()
            ),
        ));
    }
    let mut series = Vec::with_capacity(frame.width());
    for column in frame.columns() {
        let s = column.as_materialized_series();
        if s.dtype() != &DataType::String {
            return Err(InputError {
                column: Some(column.name().to_string()),
                ..InputError::file(path, "was not read as text")
            });
        }
        series.push(s.clone());
    }
    let positions = Positions::Lines {
        rows: scan.rows,
        header: scan.header_line,
    };
    build(
        path,
        columns,
        &scan.header,
        &series,
        frame.height(),
        &positions,
    )
}

/// Splits a delimited file into records, following the usual quoting rules (a field that starts
/// with `"` runs to the next lone `"`; `""` inside it is a quote). Leading empty lines are skipped;
/// every later line is a record.
fn scan_delimited(path: &Path, bytes: &[u8], sep: u8) -> Result<Scan, InputError> {
    let bytes = bytes.strip_prefix(b"\xEF\xBB\xBF").unwrap_or(bytes);
    let n = bytes.len();
    let mut pos = 0;
    let mut line: u64 = 1;
    // Skip empty lines before the header.
    loop {
        let end = bytes[pos..]
            .iter()
            .position(|&b| b == b'\n')
            .map_or(n, |i| pos + i);
        let content = &bytes[pos..end];
        if content.is_empty() || content == b"\r" {
            if end == n {
                return Err(InputError::file(
                    path,
                    "is empty; expected a header line naming the columns, then one row per trial",
                ));
            }
            pos = end + 1;
            line += 1;
        } else {
            break;
        }
    }
    let sep_name = if sep == b'\t' { "tab" } else { "comma" };
    let at_line = |line: u64, message: String| InputError {
        line: Some(line),
        ..InputError::file(path, message)
    };

    let header_line = line;
    let mut header: Vec<String> = Vec::new();
    let mut rows = Vec::new();
    let mut first = true;
    while pos < n {
        let start_line = line;
        let mut fields = 0usize;
        let mut all_empty = true;
        loop {
            // One field.
            let mut text = Vec::new();
            if pos < n && bytes[pos] == b'"' {
                let quote_line = line;
                pos += 1;
                loop {
                    if pos >= n {
                        return Err(at_line(
                            quote_line,
                            "has a quoted field that is never closed; expected a closing \""
                                .to_string(),
                        ));
                    }
                    let b = bytes[pos];
                    if b == b'"' {
                        if pos + 1 < n && bytes[pos + 1] == b'"' {
                            text.push(b'"');
                            pos += 2;
                            continue;
                        }
                        pos += 1;
                        break;
                    }
                    if b == b'\n' {
                        line += 1;
                    }
                    text.push(b);
                    pos += 1;
                }
                let rest = &bytes[pos..];
                let ok = rest.is_empty()
                    || rest[0] == sep
                    || rest[0] == b'\n'
                    || rest.starts_with(b"\r\n")
                    || rest == b"\r";
                if !ok {
                    return Err(at_line(
                        line,
                        format!(
                            "has text after the closing quote of a field; expected a {sep_name} \
                             or the end of the line"
                        ),
                    ));
                }
                if rest == b"\r" || rest.starts_with(b"\r\n") {
                    pos += 1;
                }
            } else {
                let start = pos;
                while pos < n && bytes[pos] != sep && bytes[pos] != b'\n' {
                    pos += 1;
                }
                let mut raw = &bytes[start..pos];
                if raw.last() == Some(&b'\r') && (pos == n || bytes[pos] == b'\n') {
                    raw = &raw[..raw.len() - 1];
                }
                if raw.contains(&b'"') {
                    return Err(at_line(
                        line,
                        "has a \" inside an unquoted field; quote the whole field and double \
                         the inner quotes (\"\")"
                            .to_string(),
                    ));
                }
                text.extend_from_slice(raw);
            }
            fields += 1;
            if !text.iter().all(u8::is_ascii_whitespace) {
                all_empty = false;
            }
            if first {
                header.push(String::from_utf8_lossy(&text).trim().to_string());
            }
            if pos < n && bytes[pos] == sep {
                pos += 1;
                continue;
            }
            // End of line or of file.
            if pos < n {
                pos += 1;
                line += 1;
            }
            break;
        }
        if first {
            first = false;
        } else {
            let empty_line = fields == 1 && all_empty;
            if fields != header.len() && !empty_line {
                return Err(at_line(
                    start_line,
                    format!(
                        "has {fields} fields, but the header (line {header_line}) has {}; \
                         expected one field per column, separated by {sep_name}s",
                        header.len()
                    ),
                ));
            }
            rows.push(start_line);
        }
    }
    Ok(Scan {
        header,
        header_line,
        rows,
    })
}

// ---------------------------------------------------------------------------------------------
// Parquet

fn read_parquet(path: &Path, columns: &ColumnMap) -> Result<(TrialTable, ReadNotes), InputError> {
    let file = std::fs::File::open(path)
        .map_err(|e| InputError::file(path, format!("cannot be read: {e}")))?;
    let frame = ParquetReader::new(file)
        .finish()
        .map_err(|e| InputError::file(path, format!("cannot be read as Parquet: {e}")))?;
    let header: Vec<String> = frame
        .columns()
        .iter()
        .map(|c| c.name().trim().to_string())
        .collect();
    let used: Vec<&str> = CANONICAL.iter().map(|c| columns.file_name(c)).collect();
    let mut series = Vec::with_capacity(frame.width());
    for column in frame.columns() {
        let s = column.as_materialized_series();
        let dtype = s.dtype();
        let scalar = dtype.is_integer()
            || dtype.is_float()
            || dtype == &DataType::String
            || dtype == &DataType::Boolean;
        if !used.contains(&column.name().trim()) && !scalar {
            // Other columns may hold any type; those that are not numbers or text cannot be
            // covariates and are left out.
            series.push(Series::full_null(
                column.name().clone(),
                s.len(),
                &DataType::Null,
            ));
            continue;
        }
        let converted = if dtype.is_integer() {
            s.strict_cast(&DataType::Int64)
        } else if dtype.is_float() {
            s.cast(&DataType::Float64)
        } else if dtype == &DataType::String {
            Ok(s.clone())
        } else {
            s.cast(&DataType::String)
        };
        let converted = converted.map_err(|_| InputError {
            column: Some(column.name().to_string()),
            ..InputError::file(
                path,
                format!("has values of type {dtype}; expected numbers or text"),
            )
        })?;
        series.push(converted);
    }
    if frame.height() == 0 {
        return Err(InputError::file(
            path,
            "has no rows; expected one row per trial",
        ));
    }
    build(
        path,
        columns,
        &header,
        &series,
        frame.height(),
        &Positions::Rows,
    )
}

// ---------------------------------------------------------------------------------------------
// Checking rows and building the table

/// Borrowed views of one series, by its (already converted) type.
fn values_of(series: &Series) -> Values<'_> {
    if let Ok(ca) = series.i64() {
        Values::Int(ca.iter().collect())
    } else if let Ok(ca) = series.f64() {
        Values::Float(ca.iter().collect())
    } else if let Ok(ca) = series.str() {
        Values::Text(ca.iter().collect())
    } else {
        Values::Text(vec![None; series.len()])
    }
}

fn build(
    path: &Path,
    columns: &ColumnMap,
    header: &[String],
    series: &[Series],
    height: usize,
    positions: &Positions,
) -> Result<(TrialTable, ReadNotes), InputError> {
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
    // Subject label → line of its first row, for every subject started so far.
    let mut started: HashMap<String, u64> = HashMap::new();
    let mut option_index: HashMap<String, usize> = HashMap::new();
    let mut group_line: u64 = 0;
    // Runs of the current subject seen so far (each run's rows must be together).
    let mut runs_seen: HashSet<String> = HashSet::new();
    let mut notes = ReadNotes::default();

    for row in 0..height {
        if CANONICAL
            .iter()
            .all(|c| columns.reads_as_missing(reader.cell(row, c)))
        {
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
                let previous = subjects.last().map(|s| s.id.as_str()).unwrap_or_default();
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
        for (k, side) in sides.iter().enumerate() {
            let option = if has_options {
                let column = format!("option_{side}");
                let name = reader.required_text(row, &column, "an option identity")?;
                if let Some(same) = offers
                    .iter()
                    .position(|o: &Offer| subject.options[o.option] == name.as_ref())
                {
                    return Err(reader.error(
                        row,
                        &column,
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
                effort: reader.effort(row, &format!("effort_{side}"))?,
                reward: reader.number(row, &format!("reward_{side}"))?,
                outcome_if: reader.number(row, &format!("outcome_if_{side}"))?,
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

    if subjects.is_empty() {
        return Err(InputError::file(
            path,
            "has no trials (every row is empty); expected one row per trial",
        ));
    }
    Ok((TrialTable { subjects, present }, notes))
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
        let cell = match CANONICAL.iter().position(|c| *c == canonical) {
            Some(k) => self.views[k].as_ref(),
            None => self
                .side_columns
                .iter()
                .find(|(name, _)| name == canonical)
                .map(|(_, v)| v),
        }
        .map_or(Cell::Missing, |v| v.cell(row));
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
