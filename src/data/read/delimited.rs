//! CSV and TSV, read a part at a time: records are tokenised here (so that every data row is
//! tied to the file line it starts on and quoting mistakes and rows of the wrong width are
//! reported with their line), gathered into parts of whole subjects, and each part is read by
//! polars with every column as text and checked row by row. Only one part is in memory at once,
//! so a table of any number of subjects can be streamed; reading the whole table is one part.

use std::borrow::Cow;
use std::io::{Cursor, Read};
use std::path::{Path, PathBuf};

use polars::prelude::*;

use super::super::TrialTable;
use super::ReadNotes;
use super::cells::*;
use super::columns::*;
use super::rows::{ReadState, build, no_trials};
use crate::files::InputError;

/// Bytes read from the file at a time.
const READ_SIZE: usize = 1 << 20;

/// Reads the whole delimited file at `path`, checking every row.
pub(super) fn read_delimited(
    path: &Path,
    columns: &ColumnMap,
    sep: u8,
) -> Result<(TrialTable, ReadNotes), InputError> {
    let mut stream = DelimitedStream::open(path, columns, sep)?;
    let mut table: Option<TrialTable> = None;
    while let Some(part) = stream.next_part(usize::MAX)? {
        match table.as_mut() {
            Some(t) => t.subjects.extend(part.subjects),
            None => table = Some(part),
        }
    }
    let table = table.ok_or_else(|| InputError::file(path, "has no trials"))?;
    Ok((table, stream.state.notes))
}

/// A delimited trial table being read a part (some whole subjects) at a time.
pub(super) struct DelimitedStream {
    path: PathBuf,
    columns: ColumnMap,
    sep: u8,
    file: std::fs::File,
    /// Bytes read from the file at a time.
    read_size: usize,
    /// Bytes read but not yet handed out; `buf[0]` starts a record on line `line`.
    buf: Vec<u8>,
    line: u64,
    /// The whole file has been read into `buf` at some point.
    eof: bool,
    /// Header names, trimmed, the header record's bytes (ending in a line break) and its line.
    header: Vec<String>,
    header_bytes: Vec<u8>,
    header_line: u64,
    /// Index of the subject column, when the header has one.
    subject_field: Option<usize>,
    /// Data rows seen, and subjects handed out, so far.
    rows_seen: usize,
    subjects_seen: usize,
    /// What the row checks carry from part to part.
    pub(super) state: ReadState,
}

/// One record found by [`scan_record`].
struct Record {
    /// Offset just after the record (after its line break, if any).
    end: usize,
    /// Line on which the next record starts.
    next_line: u64,
    /// Number of fields.
    fields: usize,
    /// Every field is empty or white space.
    all_empty: bool,
    /// Text of the fields asked for.
    texts: Vec<String>,
}

/// Which fields' text [`scan_record`] keeps.
#[derive(Clone, Copy)]
enum Keep {
    All,
    One(usize),
    None,
}

impl DelimitedStream {
    /// Opens `path` and reads its header (after any empty lines and a byte-order mark).
    pub(super) fn open(path: &Path, columns: &ColumnMap, sep: u8) -> Result<Self, InputError> {
        Self::open_reading(path, columns, sep, READ_SIZE)
    }

    /// [`Self::open`], reading `read_size` bytes at a time.
    fn open_reading(
        path: &Path,
        columns: &ColumnMap,
        sep: u8,
        read_size: usize,
    ) -> Result<Self, InputError> {
        let file = std::fs::File::open(path)
            .map_err(|e| InputError::file(path, format!("cannot be read: {e}")))?;
        let mut stream = DelimitedStream {
            path: path.to_path_buf(),
            columns: columns.clone(),
            sep,
            file,
            read_size: read_size.max(1),
            buf: Vec::new(),
            line: 1,
            eof: false,
            header: Vec::new(),
            header_bytes: Vec::new(),
            header_line: 1,
            subject_field: None,
            rows_seen: 0,
            subjects_seen: 0,
            state: ReadState::default(),
        };
        while stream.buf.len() < 3 && !stream.eof {
            stream.fill()?;
        }
        if stream.buf.starts_with(b"\xEF\xBB\xBF") {
            stream.buf.drain(..3);
        }
        // Skip empty lines before the header.
        loop {
            match stream.buf.iter().position(|&b| b == b'\n') {
                Some(i) if stream.buf[..i].is_empty() || &stream.buf[..i] == b"\r" => {
                    stream.buf.drain(..=i);
                    stream.line += 1;
                }
                Some(_) => break,
                None if stream.eof => {
                    if stream.buf.is_empty() || stream.buf == b"\r" {
                        return Err(InputError::file(
                            path,
                            "is empty; expected a header line naming the columns, then one row \
                             per trial",
                        ));
                    }
                    break;
                }
                None => stream.fill()?,
            }
        }
        let header = loop {
            match stream.scan_record(0, stream.line, Keep::All)? {
                Some(record) => break record,
                None => stream.fill()?,
            }
        };
        stream.check_utf8(&stream.buf[..header.end], stream.line)?;
        stream.header = header.texts.iter().map(|t| t.trim().to_string()).collect();
        stream.header_bytes = stream.buf[..header.end].to_vec();
        if !stream.header_bytes.ends_with(b"\n") {
            stream.header_bytes.push(b'\n');
        }
        stream.header_line = stream.line;
        stream.buf.drain(..header.end);
        stream.line = header.next_line;
        let subject = columns.file_name("subject");
        stream.subject_field = stream.header.iter().position(|h| h == subject);
        Ok(stream)
    }

    /// The next part: the rows of at most `subjects` whole subjects (and the empty rows among
    /// them), checked; `None` after the last. A table with no data rows, or only empty ones, is
    /// refused.
    pub(super) fn next_part(&mut self, subjects: usize) -> Result<Option<TrialTable>, InputError> {
        loop {
            let Some((end, rows, next_line)) = self.gather(subjects.max(1))? else {
                if self.rows_seen == 0 {
                    return Err(InputError::file(
                        &self.path,
                        "has a header but no trials; expected one row per trial after the header",
                    ));
                }
                if self.subjects_seen == 0 {
                    return Err(no_trials(&self.path));
                }
                return Ok(None);
            };
            self.check_utf8(&self.buf[..end], self.line)?;
            let table = self.read_part(end, rows)?;
            self.buf.drain(..end);
            self.line = next_line;
            if !table.subjects.is_empty() {
                self.subjects_seen += table.subjects.len();
                return Ok(Some(table));
            }
        }
    }

    /// Scans records from the start of the buffer up to (not including) the first row of the
    /// `subjects + 1`-th subject, or to the end of the file: the end offset, the line of each
    /// record, and the line after. `None` when nothing is left.
    fn gather(&mut self, subjects: usize) -> Result<Option<(usize, Vec<u64>, u64)>, InputError> {
        let keep = self.subject_field.map_or(Keep::None, Keep::One);
        let (mut pos, mut line) = (0, self.line);
        let mut rows = Vec::new();
        let mut current: Option<String> = None;
        let mut count = 0;
        loop {
            if pos == self.buf.len() {
                if self.eof {
                    break;
                }
                self.fill()?;
                continue;
            }
            let Some(record) = self.scan_record(pos, line, keep)? else {
                self.fill()?;
                continue;
            };
            let empty_line = record.fields == 1 && record.all_empty;
            if record.fields != self.header.len() && !empty_line {
                return Err(InputError {
                    line: Some(line),
                    ..InputError::file(
                        &self.path,
                        format!(
                            "has {} fields, but the header (line {}) has {}; expected one field \
                             per column, separated by {}s",
                            record.fields,
                            self.header_line,
                            self.header.len(),
                            self.separator_name()
                        ),
                    )
                });
            }
            // A row whose subject cell is empty or reads as missing starts no subject: it is an
            // empty row, or an error the row checks report.
            let key = record
                .texts
                .first()
                .map(|t| t.trim())
                .filter(|t| !t.is_empty() && !self.columns.reads_as_missing(Cell::Text(t)));
            if let Some(key) = key
                && current.as_deref() != Some(key)
            {
                if count == subjects {
                    break;
                }
                count += 1;
                current = Some(key.to_string());
            }
            rows.push(line);
            pos = record.end;
            line = record.next_line;
        }
        self.rows_seen += rows.len();
        Ok((!rows.is_empty()).then_some((pos, rows, line)))
    }

    /// Reads and checks the records `buf[..end]` (starting on the lines `rows`) with polars.
    fn read_part(&mut self, end: usize, rows: Vec<u64>) -> Result<TrialTable, InputError> {
        let path = self.path.clone();
        let mut bytes = Vec::with_capacity(self.header_bytes.len() + end);
        bytes.extend_from_slice(&self.header_bytes);
        bytes.extend_from_slice(&self.buf[..end]);
        let frame = CsvReadOptions::default()
            .with_has_header(true)
            .with_infer_schema_length(Some(0))
            .with_raise_if_empty(false)
            .map_parse_options(|p| p.with_separator(self.sep).with_quote_char(Some(b'"')))
            .into_reader_with_file_handle(Cursor::new(bytes))
            .finish()
            .map_err(|e| InputError::file(&path, format!("cannot be read: {e}")))?;
        if frame.height() != rows.len() || frame.width() != self.header.len() {
            return Err(InputError::file(
                &path,
                format!(
                    "was split into {} rows of {} columns from line {}, but the reader found {} \
                     rows of {}; check the quoting",
                    rows.len(),
                    self.header.len(),
                    rows[0],
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
                    ..InputError::file(&path, "was not read as text")
                });
            }
            series.push(s.clone());
        }
        let height = frame.height();
        let positions = Positions::Lines {
            rows,
            header: self.header_line,
        };
        build(
            &path,
            &self.columns,
            &self.header,
            &series,
            height,
            &positions,
            &mut self.state,
        )
    }

    /// Appends the next bytes of the file to the buffer.
    fn fill(&mut self) -> Result<(), InputError> {
        let start = self.buf.len();
        self.buf.resize(start + self.read_size, 0);
        let read = loop {
            match self.file.read(&mut self.buf[start..]) {
                Ok(n) => break n,
                Err(e) if e.kind() == std::io::ErrorKind::Interrupted => continue,
                Err(e) => {
                    return Err(InputError::file(&self.path, format!("cannot be read: {e}")));
                }
            }
        };
        self.buf.truncate(start + read);
        if read == 0 {
            self.eof = true;
        }
        Ok(())
    }

    /// Refuses bytes that are not UTF-8, naming the line (`bytes` start on line `line`).
    fn check_utf8(&self, bytes: &[u8], line: u64) -> Result<(), InputError> {
        std::str::from_utf8(bytes).map(|_| ()).map_err(|e| {
            let offset = e.valid_up_to();
            InputError {
                line: Some(line + bytes[..offset].iter().filter(|&&b| b == b'\n').count() as u64),
                ..InputError::file(
                    &self.path,
                    "is not UTF-8 text; save the file with UTF-8 encoding",
                )
            }
        })
    }

    fn separator_name(&self) -> &'static str {
        if self.sep == b'\t' { "tab" } else { "comma" }
    }

    /// Scans one record starting at `buf[pos]` (on line `line`), following the usual quoting
    /// rules (a field that starts with `"` runs to the next lone `"`; `""` inside it is a quote).
    /// `None` when the buffer ends inside the record and the file has more to read.
    fn scan_record(&self, pos: usize, line: u64, keep: Keep) -> Result<Option<Record>, InputError> {
        let (bytes, sep, n) = (&self.buf[..], self.sep, self.buf.len());
        let (mut pos, mut line) = (pos, line);
        let more = !self.eof;
        let at_line = |line: u64, message: String| InputError {
            line: Some(line),
            ..InputError::file(&self.path, message)
        };
        let mut fields = 0usize;
        let mut all_empty = true;
        let mut texts = Vec::new();
        loop {
            // One field: borrowed from the buffer unless quoted (then unescaped into a copy).
            let text: Cow<'_, [u8]> = if pos < n && bytes[pos] == b'"' {
                let mut text = Vec::new();
                let quote_line = line;
                pos += 1;
                loop {
                    if pos >= n {
                        if more {
                            return Ok(None);
                        }
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
                        if pos + 1 == n && more {
                            return Ok(None);
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
                if more && (rest.is_empty() || rest == b"\r") {
                    return Ok(None);
                }
                let ok = rest.is_empty()
                    || rest[0] == sep
                    || rest[0] == b'\n'
                    || rest.starts_with(b"\r\n")
                    || rest == b"\r";
                if !ok {
                    return Err(at_line(
                        line,
                        format!(
                            "has text after the closing quote of a field; expected a {} or the \
                             end of the line",
                            self.separator_name()
                        ),
                    ));
                }
                if rest == b"\r" || rest.starts_with(b"\r\n") {
                    pos += 1;
                }
                Cow::Owned(text)
            } else {
                let start = pos;
                while pos < n && bytes[pos] != sep && bytes[pos] != b'\n' {
                    pos += 1;
                }
                if pos == n && more {
                    return Ok(None);
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
                Cow::Borrowed(raw)
            };
            if !text.iter().all(u8::is_ascii_whitespace) {
                all_empty = false;
            }
            let kept = match keep {
                Keep::All => true,
                Keep::One(k) => k == fields,
                Keep::None => false,
            };
            if kept {
                texts.push(String::from_utf8_lossy(&text).into_owned());
            }
            fields += 1;
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
        Ok(Some(Record {
            end: pos,
            next_line: line,
            fields,
            all_empty,
            texts,
        }))
    }
}

#[cfg(test)]
mod tests {
    //! Reading in parts must give the table, notes and errors of reading whole, wherever the
    //! reads and the parts fall (common practice: streaming must not change what is read).
    use super::*;

    /// Reads `text` in parts of `subjects` subjects, `read_size` bytes at a time.
    fn in_parts(
        text: &[u8],
        subjects: usize,
        read_size: usize,
    ) -> Result<(Vec<TrialTable>, ReadNotes), InputError> {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("t.csv");
        std::fs::write(&path, text).unwrap();
        let columns = ColumnMap::default();
        let mut stream = DelimitedStream::open_reading(&path, &columns, b',', read_size)?;
        let mut parts = Vec::new();
        while let Some(part) = stream.next_part(subjects)? {
            parts.push(part);
        }
        Ok((parts, stream.state.notes))
    }

    /// The error (without the temporary path) or the subjects' labels, trial counts and the
    /// whole table's debug text.
    fn outcome(text: &[u8], subjects: usize, read_size: usize) -> String {
        match in_parts(text, subjects, read_size) {
            Ok((parts, notes)) => {
                assert!(parts.iter().all(|p| p.subjects.len() <= subjects.max(1)));
                let all: Vec<_> = parts.into_iter().flat_map(|p| p.subjects).collect();
                format!("{all:?} {notes:?}")
            }
            Err(e) => format!("{:?} {:?} {}", e.line, e.column, e.message),
        }
    }

    const HEADER: &str = "subject,trial,effort_a,effort_b,choice,rt,outcome,note\n";

    fn assert_same_everywhere(text: &[u8]) {
        let whole = outcome(text, usize::MAX, READ_SIZE);
        for subjects in [1, 2, 3, usize::MAX] {
            for read_size in [1, 2, 3, 7, 64] {
                assert_eq!(
                    outcome(text, subjects, read_size),
                    whole,
                    "parts of {subjects} subjects, reads of {read_size} bytes"
                );
            }
        }
    }

    #[test]
    fn parts_read_as_the_whole_table() {
        // A byte-order mark, empty lines before the header and between subjects, CRLF line
        // ends, quoted fields with separators, quotes and line breaks, a quoted subject label,
        // no line break at the end, and an outcome without a response (a note).
        let text = format!(
            "\u{feff}\n\r\n{}s1,1,0.2,0.4,a,0.61,1,\"x, \"\"y\"\"\"\r\ns1,2,0.2,0.4,b,0.7,0,\"two\nlines\"\n\n\
             \"s2\",1,0.1,0.3,,,0,\ns2,2,0.1,0.3,a,0.5,1,z\ns3,1,0.5,0.5,b,0.9,1,\"\"\ns3,2,0.5,0.5,a,1.1,0,end",
            HEADER.replace('\n', "\r\n")
        );
        let whole = outcome(text.as_bytes(), usize::MAX, READ_SIZE);
        assert!(whole.contains("two\\nlines") && whole.contains("outcomes_without_response: 1"));
        assert_same_everywhere(text.as_bytes());
    }

    #[test]
    fn parts_refuse_what_the_whole_table_refuses() {
        let rows = "s1,1,0.2,0.4,a,0.6,1,\ns2,1,0.2,0.4,a,0.6,1,\n";
        for bad in [
            // A subject that comes back after another (in a later part when parts are small).
            format!("{HEADER}{rows}s1,2,0.2,0.4,a,0.6,1,\n"),
            // A bad number in the third subject, a short row, an unclosed quote.
            format!("{HEADER}{rows}s3,1,0.2,x,a,0.6,1,\n"),
            format!("{HEADER}{rows}s3,1,0.2\n"),
            format!("{HEADER}{rows}s3,1,0.2,0.4,a,0.6,1,\"open\n"),
            // Text that is not UTF-8 in a later part (byte 0xFF, replaced below).
            format!("{HEADER}{rows}s3,1,0.2,0.4,a,0.6,1,~\n"),
            // No data rows; only empty rows; no header.
            HEADER.to_string(),
            format!("{HEADER}\n\n"),
            "\n\n".to_string(),
        ] {
            let bad: Vec<u8> = bad
                .bytes()
                .map(|b| if b == b'~' { 0xFF } else { b })
                .collect();
            let whole = outcome(&bad, usize::MAX, READ_SIZE);
            assert!(
                !whole.starts_with('['),
                "refused whole: {bad:?} gave {whole}"
            );
            assert_same_everywhere(&bad);
        }
        let back = outcome(
            format!("{HEADER}{rows}s1,2,0.2,0.4,a,0.6,1,\n").as_bytes(),
            1,
            3,
        );
        assert!(back.contains("after subject \"s2\""), "{back}");
    }
}
