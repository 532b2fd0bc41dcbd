//! CSV and TSV: tokenised here so that every data row is tied to the file line it starts on and
//! quoting mistakes and rows of the wrong width are reported with their line, then read by polars
//! with every column as text.

use std::io::Cursor;
use std::path::Path;

use polars::prelude::*;

use super::super::TrialTable;
use super::ReadNotes;
use super::cells::*;
use super::columns::*;
use super::rows::build;
use crate::files::InputError;

/// Result of tokenising a delimited file.
struct Scan {
    /// Header names, trimmed.
    header: Vec<String>,
    /// Line of the header.
    header_line: u64,
    /// Line each data row starts on.
    rows: Vec<u64>,
}

pub(super) fn read_delimited(
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
