//! Reading a trial table from CSV, TSV or Parquet, checking every row.
//!
//! CSV and TSV files are first tokenised here (so that every data row is tied to the file line it
//! starts on, quoting mistakes are reported with their line, and rows with the wrong number of
//! fields are caught), then read by polars with every column as text; all numbers are parsed here
//! so that each problem can be reported with its line and column. Parquet columns may hold
//! numbers or text; problems in them are reported by 1-based data row.

use std::borrow::Cow;
use std::collections::HashMap;
use std::io::Cursor;
use std::path::Path;
use std::str::FromStr;

use polars::prelude::*;

use super::{Choice, Subject, Trial, TrialTable};
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

/// Maps canonical column names to the names used in a file.
///
/// The default maps every canonical name to itself. [`ColumnMap::parse`] reads a comma-separated
/// list of `canonical=file` pairs, such as `subject=participant,rt=RT_sec`; names not listed keep
/// their canonical name.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct ColumnMap {
    /// File column name for each entry of [`CANONICAL`], in the same order.
    file: Vec<String>,
}

impl Default for ColumnMap {
    fn default() -> Self {
        ColumnMap {
            file: CANONICAL.iter().map(|c| c.to_string()).collect(),
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

/// Reads and checks a trial table. The format follows the extension: `.csv` (comma-separated),
/// `.tsv` or `.txt` (tab-separated) or `.parquet`. Column names are looked up through `columns`.
pub fn read_trials(path: &Path, columns: &ColumnMap) -> Result<TrialTable, InputError> {
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

fn read_delimited(path: &Path, columns: &ColumnMap, sep: u8) -> Result<TrialTable, InputError> {
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

fn read_parquet(path: &Path, columns: &ColumnMap) -> Result<TrialTable, InputError> {
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
        if !used.contains(&column.name().trim()) {
            // Columns this reader does not use may hold any type.
            series.push(Series::full_null(
                column.name().clone(),
                s.len(),
                &DataType::String,
            ));
            continue;
        }
        let dtype = s.dtype();
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

    let reader = RowReader {
        path,
        columns,
        views: &views,
        positions,
    };
    let has_options = index[slot("option_a")].is_some();

    let mut subjects: Vec<Subject> = Vec::new();
    // Subject label → line of its first row, for every subject started so far.
    let mut started: HashMap<String, u64> = HashMap::new();
    let mut option_index: HashMap<String, usize> = HashMap::new();
    let mut group_line: u64 = 0;

    for row in 0..height {
        if views
            .iter()
            .flatten()
            .all(|v| matches!(v.cell(row), Cell::Missing))
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
            subjects.push(Subject {
                id: id.to_string(),
                group: String::new(),
                options: if has_options {
                    Vec::new()
                } else {
                    vec!["a".to_string(), "b".to_string()]
                },
                trials: Vec::new(),
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

        if let Some(last) = subject.trials.last()
            && trial <= last.trial
        {
            let what = if trial == last.trial {
                format!("trial {trial} is repeated")
            } else {
                format!("trial {trial} comes after trial {}", last.trial)
            };
            return Err(reader.error(
                row,
                "trial",
                format!(
                    "{what} within subject {:?}; expected trial numbers that increase within \
                     each subject (sort by subject, then trial)",
                    subject.id
                ),
            ));
        }

        let (option_a, option_b) = if has_options {
            let a = reader.required_text(row, "option_a", "an option identity")?;
            let b = reader.required_text(row, "option_b", "an option identity")?;
            if a == b {
                return Err(reader.error(
                    row,
                    "option_b",
                    format!("offers option {a:?} on both sides; expected two different options"),
                ));
            }
            let mut index_of = |name: &str| match option_index.get(name) {
                Some(&i) => i,
                None => {
                    let i = subject.options.len();
                    subject.options.push(name.to_string());
                    option_index.insert(name.to_string(), i);
                    i
                }
            };
            (index_of(&a), index_of(&b))
        } else {
            (0, 1)
        };

        let effort_a = reader.effort(row, "effort_a")?;
        let effort_b = reader.effort(row, "effort_b")?;
        let reward_a = reader.number(row, "reward_a")?;
        let reward_b = reader.number(row, "reward_b")?;
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
            return Err(reader.error(
                row,
                "outcome",
                "has an outcome on a trial without a response; expected it empty when nothing \
                 was chosen",
            ));
        }
        let onset = reader.time(row, "onset")?;
        let outcome_onset = reader.time(row, "outcome_onset")?;
        let outcome_if_a = reader.number(row, "outcome_if_a")?;
        let outcome_if_b = reader.number(row, "outcome_if_b")?;

        subject.trials.push(Trial {
            trial,
            run: run.to_string(),
            option_a,
            option_b,
            effort_a,
            effort_b,
            reward_a,
            reward_b,
            choice,
            rt,
            outcome,
            onset,
            outcome_onset,
            outcome_if_a,
            outcome_if_b,
        });
    }

    if subjects.is_empty() {
        return Err(InputError::file(
            path,
            "has no trials (every row is empty); expected one row per trial",
        ));
    }
    Ok(TrialTable { subjects, present })
}

/// Reads typed values from one row, turning problems into positioned errors.
struct RowReader<'r, 'v> {
    path: &'r Path,
    columns: &'r ColumnMap,
    views: &'r [Option<Values<'v>>],
    positions: &'r Positions,
}

impl RowReader<'_, '_> {
    fn cell(&self, row: usize, canonical: &str) -> Cell<'_> {
        CANONICAL
            .iter()
            .position(|c| *c == canonical)
            .and_then(|k| self.views[k].as_ref())
            .map_or(Cell::Missing, |v| v.cell(row))
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
        self.cell(row, canonical)
            .number()
            .map_err(|m| self.error(row, canonical, m))
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
        match cell.text().as_deref() {
            None => Ok(None),
            Some(s) if s.eq_ignore_ascii_case("a") => Ok(Some(Choice::A)),
            Some(s) if s.eq_ignore_ascii_case("b") => Ok(Some(Choice::B)),
            Some(_) => Err(self.error(
                row,
                "choice",
                format!(
                    "is {}; expected a, b, or empty for no response",
                    cell.shown()
                ),
            )),
        }
    }

    fn rt(&self, row: usize) -> Result<Option<f64>, InputError> {
        let cell = self.cell(row, "rt");
        let value = cell.number().map_err(|_| {
            self.error(
                row,
                "rt",
                format!(
                    "is {}; expected a response time in seconds > 0, or empty for no response",
                    cell.shown()
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
