//! Reading trial tables: a good file in each format, column mapping, and malformed inputs, each
//! of which must be reported with its file, line (or Parquet row) and column.
//!
//! Line numbers follow the reader's documented convention: the header is line 1, the first data
//! row line 2 (source of every expected line below: the hand-written file in the same test).

use std::path::{Path, PathBuf};

use polars::prelude::*;
use valuedrift::data::{
    Choice, ColumnMap, SubjectParts, TrialTable, read_trials, read_trials_noted,
};
use valuedrift::files::InputError;

const GOOD: &str = "\
subject,group,run,trial,option_a,option_b,effort_a,effort_b,reward_a,reward_b,choice,rt,outcome,onset,outcome_onset
s01,control,r1,1,apple,pear,0,2,1,3,a,0.8,1,0.5,1.5
s01,control,r1,2,pear,fig,1.5,0,3,2,B,1.25,,10,11
s01,control,r2,3,fig,apple,0,0,2,1,,,,20,
s02,patient,r1,1,fig,apple,3,1,2,1, a ,0.6,0,0,1
s02,patient,r1,5,apple,pear,2,2,,,b,2.0,1,4,5
";

/// Header with only the required columns.
const MINIMAL: &str = "subject,trial,effort_a,effort_b,choice,rt";

fn write(dir: &Path, name: &str, content: &[u8]) -> PathBuf {
    let path = dir.join(name);
    std::fs::write(&path, content).unwrap();
    path
}

fn read(path: &Path) -> TrialTable {
    match read_trials(path, &ColumnMap::default()) {
        Ok(table) => table,
        Err(e) => panic!("expected {} to read, got: {e}", path.display()),
    }
}

fn read_err(path: &Path, columns: &ColumnMap) -> InputError {
    match read_trials(path, columns) {
        Ok(table) => panic!("expected an error, read {table:?}"),
        Err(e) => e,
    }
}

/// Writes `content` to `bad.csv` and returns the error of reading it with the default mapping.
fn csv_err(content: &str) -> (PathBuf, InputError, tempfile::TempDir) {
    let dir = tempfile::tempdir().unwrap();
    let path = write(dir.path(), "bad.csv", content.as_bytes());
    let err = read_err(&path, &ColumnMap::default());
    (path, err, dir)
}

fn assert_at(err: &InputError, file: &Path, line: Option<u64>, column: Option<&str>, text: &str) {
    assert_eq!(err.file, file, "file of {err}");
    assert_eq!(err.line, line, "line of {err}");
    assert_eq!(err.column.as_deref(), column, "column of {err}");
    assert!(
        err.message.contains(text),
        "message of `{err}` should contain `{text}`"
    );
}

// ---------------------------------------------------------------------------------------------
// Good files

#[test]
fn good_csv_structure() {
    let dir = tempfile::tempdir().unwrap();
    let table = read(&write(dir.path(), "good.csv", GOOD.as_bytes()));
    // source: the GOOD file above, read by hand.
    assert_eq!(table.subjects.len(), 2);
    let s1 = &table.subjects[0];
    assert_eq!((s1.id.as_str(), s1.group.as_str()), ("s01", "control"));
    assert_eq!(s1.options, ["apple", "pear", "fig"]); // order of first appearance
    let sides: Vec<(usize, usize)> = s1
        .trials
        .iter()
        .map(|t| (t.offers[0].option, t.offers[1].option))
        .collect();
    assert_eq!(sides, [(0, 1), (1, 2), (2, 0)]);
    assert_eq!(s1.trials[0].choice, Some(Choice::A));
    assert_eq!(s1.trials[1].choice, Some(Choice::B)); // "B" accepted
    assert_eq!(s1.trials[1].rt, Some(1.25));
    assert_eq!(s1.trials[1].outcome, None); // empty optional cell
    assert_eq!(s1.trials[1].offers[0].effort, 1.5);
    let missed = &s1.trials[2];
    assert_eq!(
        (missed.choice, missed.rt, missed.outcome),
        (None, None, None)
    );
    assert_eq!(missed.run, "r2");
    assert_eq!((missed.onset, missed.outcome_onset), (Some(20.0), None));
    assert_eq!(s1.n_responses(), 2);

    let s2 = &table.subjects[1];
    assert_eq!((s2.id.as_str(), s2.group.as_str()), ("s02", "patient"));
    assert_eq!(s2.options, ["fig", "apple", "pear"]); // per subject, own order
    let sides: Vec<(usize, usize)> = s2
        .trials
        .iter()
        .map(|t| (t.offers[0].option, t.offers[1].option))
        .collect();
    assert_eq!(sides, [(0, 1), (1, 2)]);
    assert_eq!(s2.trials[0].choice, Some(Choice::A)); // " a " trimmed
    assert_eq!(
        s2.trials.iter().map(|t| t.trial).collect::<Vec<_>>(),
        [1, 5]
    );
    assert_eq!(
        (s2.trials[1].offers[0].reward, s2.trials[1].offers[1].reward),
        (None, None)
    );
    assert_eq!(s2.trials[1].offers[0].outcome_if, None); // column absent

    assert_eq!(
        table.present,
        [
            "group",
            "run",
            "option_a",
            "option_b",
            "reward_a",
            "reward_b",
            "outcome",
            "onset",
            "outcome_onset"
        ]
    );
    assert!(table.has_column("reward_a") && !table.has_column("outcome_if_a"));
}

#[test]
fn default_options_are_a_and_b() {
    let dir = tempfile::tempdir().unwrap();
    let text = format!("{MINIMAL}\nx,1,0,1,a,0.5\nx,2,1,0,,\n");
    let table = read(&write(dir.path(), "min.csv", text.as_bytes()));
    // source: module documentation ("default: fixed identities a and b").
    let s = &table.subjects[0];
    assert_eq!(s.options, ["a", "b"]);
    assert!(
        s.trials
            .iter()
            .all(|t| (t.offers[0].option, t.offers[1].option) == (0, 1))
    );
    assert_eq!(s.group, ""); // no group column
    assert_eq!(s.trials[0].run, ""); // no run column
    assert!(table.present.is_empty());
}

#[test]
fn tsv_txt_and_crlf_give_the_same_table() {
    let dir = tempfile::tempdir().unwrap();
    let csv = read(&write(dir.path(), "good.csv", GOOD.as_bytes()));
    let tabbed = GOOD.replace(',', "\t");
    // source: the same rows, only the separator (or line ending) differs.
    assert_eq!(read(&write(dir.path(), "good.tsv", tabbed.as_bytes())), csv);
    assert_eq!(read(&write(dir.path(), "good.TXT", tabbed.as_bytes())), csv);
    let crlf = GOOD.replace('\n', "\r\n");
    assert_eq!(read(&write(dir.path(), "crlf.csv", crlf.as_bytes())), csv);
    let bom = format!("\u{feff}{GOOD}");
    assert_eq!(read(&write(dir.path(), "bom.csv", bom.as_bytes())), csv);
}

fn good_frame() -> DataFrame {
    // The GOOD rows, with numbers stored as numbers.
    df!(
        "subject" => ["s01", "s01", "s01", "s02", "s02"],
        "group" => ["control", "control", "control", "patient", "patient"],
        "run" => ["r1", "r1", "r2", "r1", "r1"],
        "trial" => [1i64, 2, 3, 1, 5],
        "option_a" => ["apple", "pear", "fig", "fig", "apple"],
        "option_b" => ["pear", "fig", "apple", "apple", "pear"],
        "effort_a" => [0.0, 1.5, 0.0, 3.0, 2.0],
        "effort_b" => [2i32, 0, 0, 1, 2],
        "reward_a" => [Some(1.0), Some(3.0), Some(2.0), Some(2.0), None],
        "reward_b" => [Some(3.0), Some(2.0), Some(1.0), Some(1.0), None],
        "choice" => [Some("a"), Some("B"), None, Some(" a "), Some("b")],
        "rt" => [Some(0.8), Some(1.25), None, Some(0.6), Some(2.0)],
        "outcome" => [Some(1.0), None, None, Some(0.0), Some(1.0)],
        "onset" => [0.5, 10.0, 20.0, 0.0, 4.0],
        "outcome_onset" => [Some(1.5), Some(11.0), None, Some(1.0), Some(5.0)],
    )
    .unwrap()
}

fn write_parquet(path: &Path, frame: &mut DataFrame) {
    let file = std::fs::File::create(path).unwrap();
    ParquetWriter::new(file).finish(frame).unwrap();
}

#[test]
fn parquet_gives_the_same_table() {
    let dir = tempfile::tempdir().unwrap();
    let csv = read(&write(dir.path(), "good.csv", GOOD.as_bytes()));
    let path = dir.path().join("good.parquet");
    write_parquet(&path, &mut good_frame());
    // source: good_frame holds the GOOD rows.
    assert_eq!(read(&path), csv);

    // A column the reader does not use may be of any type, such as lists.
    let lists = || {
        let cell = Series::new("".into(), [1i64, 2]);
        Series::new("notes".into(), vec![cell; 5])
    };
    let mut frame = good_frame();
    frame.with_column(lists().into()).unwrap();
    write_parquet(&path, &mut frame);
    // source: other columns are kept as covariates only when they hold numbers or text (module
    // documentation of valuedrift::data); a list column is left out.
    assert_eq!(read(&path), csv);

    // A used column must hold numbers or text.
    let mut frame = good_frame();
    frame.replace("run", lists().into()).unwrap();
    write_parquet(&path, &mut frame);
    let err = read_err(&path, &ColumnMap::default());
    // source: run was replaced by a list column; the problem is the whole column.
    assert_at(&err, &path, None, Some("run"), "expected numbers or text");
}

#[test]
fn parquet_errors_name_the_data_row() {
    let dir = tempfile::tempdir().unwrap();
    let mut frame = good_frame();
    let rt = Series::new(
        "rt".into(),
        [Some(0.8), Some(1.25), None, Some(-0.6), Some(2.0)],
    );
    frame.replace("rt", rt.into()).unwrap();
    let path = dir.path().join("bad.parquet");
    write_parquet(&path, &mut frame);
    let err = read_err(&path, &ColumnMap::default());
    // source: the fourth data row was given rt = -0.6; Parquet rows are numbered from 1.
    assert_at(&err, &path, Some(4), Some("rt"), "> 0");
    assert!(err.to_string().contains("row 4, column rt"), "{err}");

    let mut frame = good_frame();
    let trial = Series::new("trial".into(), [1.0, 2.0, 2.5, 1.0, 5.0]);
    frame.replace("trial", trial.into()).unwrap();
    write_parquet(&path, &mut frame);
    let err = read_err(&path, &ColumnMap::default());
    // source: the third data row was given trial = 2.5.
    assert_at(&err, &path, Some(3), Some("trial"), "whole number");

    let mut frame = good_frame().drop("choice").unwrap();
    write_parquet(&path, &mut frame);
    let err = read_err(&path, &ColumnMap::default());
    // source: the choice column was dropped; Parquet has no header line.
    assert_at(&err, &path, None, Some("choice"), "missing required column");
}

#[test]
fn blank_lines_and_quoted_newlines_keep_line_numbers() {
    // Empty lines before the header and between rows are skipped but still counted.
    let text = format!("\n{MINIMAL}\nx,1,0,1,a,0.5\n\n,,,,,\nx,2,0,1,b,-1\n");
    let (path, err, _dir) = csv_err(&text);
    // source: the bad row is on line 6 of the text above.
    assert_at(&err, &path, Some(6), Some("rt"), "> 0");

    // A quoted field spanning two lines moves the following rows down by one line.
    let text = "subject,run,trial,effort_a,effort_b,choice,rt\n\
                x,\"first\nhalf\",1,0,1,a,0.5\n\
                x,r2,2,0,1,q,0.5\n";
    let (path, err, _dir) = csv_err(text);
    // source: the row with choice q starts on line 4.
    assert_at(&err, &path, Some(4), Some("choice"), "expected a, b");
}

#[test]
fn reads_a_study_sized_table_of_forty_by_three_hundred() {
    let dir = tempfile::tempdir().unwrap();
    let mut text = String::from(GOOD.lines().next().unwrap());
    text.push('\n');
    for s in 0..40 {
        for t in 1..=300 {
            let (a, b) = if t % 2 == 0 {
                ("o1", "o2")
            } else {
                ("o3", "o1")
            };
            text.push_str(&format!(
                "p{s:02},g{},run{},{t},{a},{b},{},{},1,2,{},{},1,{},{}\n",
                s % 2,
                t / 100,
                t % 4,
                (t + 1) % 4,
                if t % 3 == 0 { "a" } else { "b" },
                0.3 + (t % 7) as f64 / 10.0,
                t * 4,
                t * 4 + 2
            ));
        }
    }
    let path = write(dir.path(), "big.csv", text.as_bytes());
    // A study-sized table (40 subjects × 300 trials) reads completely; its speed is a benchmark
    // matter, not a test (common practice).
    let table = read(&path);
    assert_eq!(table.subjects.len(), 40);
    assert!(table.subjects.iter().all(|s| s.trials.len() == 300));
    assert_eq!(table.subjects[7].options, ["o3", "o1", "o2"]);
}

// ---------------------------------------------------------------------------------------------
// Column mapping

#[test]
fn column_mapping() {
    let dir = tempfile::tempdir().unwrap();
    let plain = format!("{MINIMAL}\nx,1,0,1,a,0.5\nx,2,1,0,,\n");
    let renamed = "participant,trial,ea,eb,resp,RT_sec\nx,1,0,1,a,0.5\nx,2,1,0,,\n";
    let map =
        ColumnMap::parse(" subject=participant, effort_a=ea,effort_b=eb,choice=resp,rt=RT_sec")
            .unwrap();
    assert_eq!(map.file_name("rt"), "RT_sec");
    assert_eq!(map.file_name("trial"), "trial"); // unlisted: identity
    assert_eq!(ColumnMap::default().file_name("subject"), "subject");
    assert_eq!(
        "rt=RT_sec".parse::<ColumnMap>().unwrap().file_name("rt"),
        "RT_sec"
    );
    let expected = read(&write(dir.path(), "plain.csv", plain.as_bytes()));
    let path = write(dir.path(), "renamed.csv", renamed.as_bytes());
    // source: same rows under other column names.
    assert_eq!(read_trials(&path, &map).unwrap(), expected);

    // Errors name the file's column, not the canonical one.
    let bad = "participant,trial,ea,eb,resp,RT_sec\nx,1,0,1,a,0\n";
    let path = write(dir.path(), "bad.csv", bad.as_bytes());
    // source: rt (file column RT_sec) is 0 on line 2.
    assert_at(
        &read_err(&path, &map),
        &path,
        Some(2),
        Some("RT_sec"),
        "> 0",
    );
    // Without the mapping the canonical subject column is missing.
    // source: the header above has no `subject`.
    assert_at(
        &read_err(&path, &ColumnMap::default()),
        &path,
        Some(1),
        Some("subject"),
        "missing required column",
    );
    let map =
        ColumnMap::parse("subject=participant,effort_a=ea,effort_b=eb,choice=resp,rt=seconds")
            .unwrap();
    // source: the header above has no `seconds`.
    assert_at(
        &read_err(&path, &map),
        &path,
        Some(1),
        Some("seconds"),
        "mapped from `rt`",
    );
}

#[test]
fn column_mapping_spec_errors() {
    // source: ColumnMap::parse documentation (unknown names list the valid ones).
    let err = ColumnMap::parse("subject=participant,reaction=RT")
        .unwrap_err()
        .to_string();
    assert!(
        err.contains("reaction") && err.contains("outcome_if_b"),
        "{err}"
    );
    let err = |spec: &str| ColumnMap::parse(spec).unwrap_err().to_string();
    assert!(err("subject").contains("="));
    assert!(err("rt=").contains("rt"));
    assert!(err("rt=a,rt=b").contains("more than once"));
    // choice would read the file's `rt` column, which rt also reads.
    assert!(err("choice=rt").contains("both"));
    assert_eq!(ColumnMap::parse("").unwrap(), ColumnMap::default());
}

// ---------------------------------------------------------------------------------------------
// Malformed inputs

#[test]
fn missing_required_column() {
    let (path, err, _dir) = csv_err("subject,trial,effort_a,effort_b,choice\nx,1,0,1,a\n");
    // source: rt is absent from the header (line 1).
    assert_at(
        &err,
        &path,
        Some(1),
        Some("rt"),
        "missing required column `rt`",
    );
    assert!(
        err.message
            .contains("subject, trial, effort_a, effort_b, choice")
    );
}

#[test]
fn empty_file_and_header_only() {
    let (path, err, _dir) = csv_err("");
    // source: the file is empty.
    assert_at(&err, &path, None, None, "is empty");
    let (path, err, _dir) = csv_err("\n\r\n");
    // source: only empty lines.
    assert_at(&err, &path, None, None, "is empty");
    let (path, err, _dir) = csv_err(&format!("{MINIMAL}\n"));
    // source: a header and nothing else.
    assert_at(&err, &path, None, None, "no trials");
    let (path, err, _dir) = csv_err(&format!("{MINIMAL}\n,,,,,\n\n"));
    // source: only empty rows after the header.
    assert_at(&err, &path, None, None, "no trials");
}

#[test]
fn text_in_a_number_column() {
    let (path, err, _dir) = csv_err(&format!("{MINIMAL}\nx,1,0,1,a,0.5\nx,2,lots,1,a,0.5\n"));
    // source: effort_a is "lots" on line 3.
    assert_at(
        &err,
        &path,
        Some(3),
        Some("effort_a"),
        "expected a number, found \"lots\"",
    );
    let text = "subject,trial,effort_a,effort_b,reward_a,reward_b,choice,rt\nx,1,0,1,5,two,a,0.5\n";
    let (path, err, _dir) = csv_err(text);
    // source: reward_b is "two" on line 2.
    assert_at(&err, &path, Some(2), Some("reward_b"), "expected a number");
}

#[test]
fn non_finite_numbers() {
    let (path, err, _dir) = csv_err(&format!("{MINIMAL}\nx,1,0,inf,a,0.5\n"));
    // source: effort_b is "inf" on line 2.
    assert_at(&err, &path, Some(2), Some("effort_b"), "finite");
    let text = "subject,trial,effort_a,effort_b,choice,rt,outcome\nx,1,0,1,a,0.5,NaN\n";
    let (path, err, _dir) = csv_err(text);
    // source: outcome is "NaN" on line 2.
    assert_at(&err, &path, Some(2), Some("outcome"), "finite");
}

#[test]
fn negative_effort() {
    let (path, err, _dir) = csv_err(&format!("{MINIMAL}\nx,1,0,1,a,0.5\nx,2,0,-1,b,0.5\n"));
    // source: effort_b is -1 on line 3; efforts must be ≥ 0 (module documentation).
    assert_at(&err, &path, Some(3), Some("effort_b"), "≥ 0");
}

#[test]
fn response_time_not_positive_or_not_finite() {
    let (path, err, _dir) = csv_err(&format!("{MINIMAL}\nx,1,0,1,a,0\n"));
    // source: rt is 0 on line 2; rt must be > 0 (module documentation).
    assert_at(&err, &path, Some(2), Some("rt"), "> 0");
    let (path, err, _dir) = csv_err(&format!("{MINIMAL}\nx,1,0,1,a,-0.25\n"));
    // source: rt is -0.25 on line 2.
    assert_at(&err, &path, Some(2), Some("rt"), "> 0");
    let (path, err, _dir) = csv_err(&format!("{MINIMAL}\nx,1,0,1,a,inf\n"));
    // source: rt is "inf" on line 2.
    assert_at(&err, &path, Some(2), Some("rt"), "\"inf\"");
    let (path, err, _dir) = csv_err(&format!("{MINIMAL}\nx,1,0,1,a,fast\n"));
    // source: rt is "fast" on line 2.
    assert_at(&err, &path, Some(2), Some("rt"), "\"fast\"");
}

#[test]
fn response_time_without_choice_and_choice_without_response_time() {
    let (path, err, _dir) = csv_err(&format!("{MINIMAL}\nx,1,0,1,,0.7\n"));
    // source: line 2 has an rt but an empty choice.
    assert_at(
        &err,
        &path,
        Some(2),
        Some("choice"),
        "is empty but the response time",
    );
    let (path, err, _dir) = csv_err(&format!("{MINIMAL}\nx,1,0,1,a,0.7\nx,2,0,1,b,\n"));
    // source: line 3 has a choice but an empty rt.
    assert_at(&err, &path, Some(3), Some("rt"), "is empty but the choice");
}

#[test]
fn choice_not_a_or_b() {
    let (path, err, _dir) = csv_err(&format!("{MINIMAL}\nx,1,0,1,left,0.7\n"));
    // source: choice is "left" on line 2.
    assert_at(&err, &path, Some(2), Some("choice"), "\"left\"");
    let (path, err, _dir) = csv_err(&format!("{MINIMAL}\nx,1,0,1,ab,0.7\n"));
    // source: choice is "ab" on line 2.
    assert_at(&err, &path, Some(2), Some("choice"), "expected a, b");
}

#[test]
fn trial_not_an_integer() {
    let (path, err, _dir) = csv_err(&format!("{MINIMAL}\nx,1,0,1,a,0.7\nx,2.5,0,1,a,0.7\n"));
    // source: trial is 2.5 on line 3.
    assert_at(&err, &path, Some(3), Some("trial"), "whole number");
    let (path, err, _dir) = csv_err(&format!("{MINIMAL}\nx,,0,1,a,0.7\n"));
    // source: trial is empty on line 2.
    assert_at(&err, &path, Some(2), Some("trial"), "is empty");
}

#[test]
fn trials_not_increasing_within_subject() {
    let text = format!("{MINIMAL}\nx,1,0,1,a,0.7\nx,3,0,1,a,0.7\nx,2,0,1,a,0.7\n");
    let (path, err, _dir) = csv_err(&text);
    // source: trial 2 follows trial 3 on line 4.
    assert_at(
        &err,
        &path,
        Some(4),
        Some("trial"),
        "trial 2 comes after trial 3",
    );
    let text = format!("{MINIMAL}\nx,1,0,1,a,0.7\nx,1,0,1,a,0.7\n");
    let (path, err, _dir) = csv_err(&text);
    // source: trial 1 repeated on line 3.
    assert_at(&err, &path, Some(3), Some("trial"), "repeated");
    // A new subject may start again from trial 1.
    let dir = tempfile::tempdir().unwrap();
    let text = format!("{MINIMAL}\nx,5,0,1,a,0.7\ny,1,0,1,a,0.7\n");
    // source: trials need only increase within a subject (module documentation).
    assert_eq!(
        read(&write(dir.path(), "ok.csv", text.as_bytes()))
            .subjects
            .len(),
        2
    );
}

#[test]
fn subject_rows_not_contiguous() {
    let text = format!("{MINIMAL}\nx,1,0,1,a,0.7\ny,1,0,1,a,0.7\nx,2,0,1,a,0.7\n");
    let (path, err, _dir) = csv_err(&text);
    // source: subject x returns on line 4 after subject y.
    assert_at(&err, &path, Some(4), Some("subject"), "unsorted");
    assert!(err.message.contains("line 2"), "{err}");
    let (path, err, _dir) = csv_err(&format!("{MINIMAL}\n ,1,0,1,a,0.7\n"));
    // source: the subject label is blank on line 2.
    assert_at(&err, &path, Some(2), Some("subject"), "is empty");
}

#[test]
fn group_changes_within_subject() {
    let text = "subject,group,trial,effort_a,effort_b,choice,rt\n\
                x,g1,1,0,1,a,0.7\nx,,2,0,1,a,0.7\nx,g2,3,0,1,a,0.7\n";
    let (path, err, _dir) = csv_err(text);
    // source: subject x is in g1 on line 2 and in g2 on line 4 (line 3 leaves it empty).
    assert_at(
        &err,
        &path,
        Some(4),
        Some("group"),
        "group changes within subject",
    );
}

#[test]
fn negative_onsets() {
    let text = "subject,trial,effort_a,effort_b,choice,rt,onset,outcome_onset\n\
                x,1,0,1,a,0.7,0,2\nx,2,0,1,a,0.7,-3,4\n";
    let (path, err, _dir) = csv_err(text);
    // source: onset is -3 on line 3; onsets must be ≥ 0 (module documentation).
    assert_at(&err, &path, Some(3), Some("onset"), "≥ 0");
    let text = "subject,trial,effort_a,effort_b,choice,rt,onset,outcome_onset\n\
                x,1,0,1,a,0.7,0,-0.5\n";
    let (path, err, _dir) = csv_err(text);
    // source: outcome_onset is -0.5 on line 2.
    assert_at(&err, &path, Some(2), Some("outcome_onset"), "≥ 0");
}

#[test]
fn outcome_on_a_no_response_trial_is_accepted_with_a_note() {
    // Task logs often write 0 or a penalty as the outcome of a missed trial (common practice);
    // such a trial is read, counted in the notes with its line, and nothing is chosen on it (so
    // the likelihood, which learns only after a response, learns nothing from it).
    let dir = tempfile::tempdir().unwrap();
    let text = "subject,trial,effort_a,effort_b,choice,rt,outcome\n\
                x,1,0,1,a,0.7,1\nx,2,0,1,,,0\nx,3,0,1,,,-1\n";
    let path = write(dir.path(), "missed.csv", text.as_bytes());
    let (table, notes) = read_trials_noted(&path, &ColumnMap::default()).unwrap();
    // source: lines 3 and 4 have no response but an outcome.
    assert_eq!(notes.outcomes_without_response, 2);
    assert_eq!(notes.first_outcome_without_response, Some(3));
    let lines = notes.lines(&path);
    assert_eq!(lines.len(), 1, "one note per file: {lines:?}");
    assert!(lines[0].contains(path.to_str().unwrap()) && lines[0].contains("2 trial(s)"));
    let trials = &table.subjects[0].trials;
    assert_eq!(trials[1].choice, None);
    assert_eq!(trials[1].outcome, Some(0.0));
}

#[test]
fn same_option_on_both_sides() {
    let text = "subject,trial,option_a,option_b,effort_a,effort_b,choice,rt\n\
                x,1,o1,o2,0,1,a,0.7\nx,2,o2, o2,0,1,a,0.7\n";
    let (path, err, _dir) = csv_err(text);
    // source: line 3 offers o2 on both sides (after trimming).
    assert_at(&err, &path, Some(3), Some("option_b"), "both sides");
    let text = "subject,trial,option_a,option_b,effort_a,effort_b,choice,rt\n\
                x,1,,o2,0,1,a,0.7\n";
    let (path, err, _dir) = csv_err(text);
    // source: option_a is empty on line 2.
    assert_at(&err, &path, Some(2), Some("option_a"), "option identity");
    let text = "subject,trial,option_a,effort_a,effort_b,choice,rt\nx,1,o1,0,1,a,0.7\n";
    let (path, err, _dir) = csv_err(text);
    // source: the header has option_a but no option_b.
    assert_at(&err, &path, Some(1), Some("option_a"), "option_b");
}

#[test]
fn unsupported_extension() {
    let dir = tempfile::tempdir().unwrap();
    let path = write(dir.path(), "trials.xlsx", GOOD.as_bytes());
    let err = read_err(&path, &ColumnMap::default());
    // source: read_trials documentation (accepted extensions).
    assert_at(&err, &path, None, None, ".xlsx");
    assert!(err.message.contains(".csv") && err.message.contains(".parquet"));
    let path = write(dir.path(), "trials", GOOD.as_bytes());
    assert_at(
        &read_err(&path, &ColumnMap::default()),
        &path,
        None,
        None,
        "no extension",
    );
}

#[test]
fn ragged_rows_and_bad_quoting() {
    let (path, err, _dir) = csv_err(&format!("{MINIMAL}\nx,1,0,1,a,0.7\nx,2,0,1,a\n"));
    // source: line 3 has 5 fields, the header 6.
    assert_at(&err, &path, Some(3), None, "has 5 fields");
    let (path, err, _dir) = csv_err(&format!("{MINIMAL}\nx,1,0,1,a,0.7,9\n"));
    // source: line 2 has 7 fields.
    assert_at(&err, &path, Some(2), None, "has 7 fields");
    let (path, err, _dir) = csv_err(&format!("{MINIMAL}\nx,1,0,1,a,0.7\n\"x,2,0,1,a,0.7\n"));
    // source: the quote opened on line 3 is never closed.
    assert_at(&err, &path, Some(3), None, "never closed");
    let (path, err, _dir) = csv_err(&format!("{MINIMAL}\nx,1,0,1,a,0\"7\n"));
    // source: a stray quote on line 2.
    assert_at(&err, &path, Some(2), None, "unquoted field");
    let (path, err, _dir) = csv_err(&format!("{MINIMAL}\n\"x\"y,1,0,1,a,0.7\n"));
    // source: text after a closing quote on line 2.
    assert_at(&err, &path, Some(2), None, "after the closing quote");
}

#[test]
fn duplicate_column_and_non_utf8() {
    let (path, err, _dir) = csv_err(&format!("{MINIMAL},rt\nx,1,0,1,a,0.7,0.8\n"));
    // source: rt appears twice in the header (line 1).
    assert_at(&err, &path, Some(1), Some("rt"), "more than once");
    let dir = tempfile::tempdir().unwrap();
    let mut bytes = format!("{MINIMAL}\nx,1,0,1,a,0.7\n").into_bytes();
    bytes.extend_from_slice(b"\xe9t\xe9,2,0,1,a,0.7\n");
    let path = write(dir.path(), "latin1.csv", &bytes);
    // source: the Latin-1 bytes are on line 3.
    assert_at(
        &read_err(&path, &ColumnMap::default()),
        &path,
        Some(3),
        None,
        "UTF-8",
    );
}

#[test]
fn display_names_file_line_and_column() {
    let (path, err, _dir) = csv_err(&format!("{MINIMAL}\nx,1,0,1,a,-1\n"));
    // source: InputError's documented Display format.
    let expected = format!("{} line 2, column rt: ", path.display());
    assert!(err.to_string().starts_with(&expected), "{err}");
}

// ---------------------------------------------------------------------------------------------
// Choice codes, missing-value tokens and runs

/// `MINIMAL` rows read with `columns`.
fn read_with(text: &str, columns: &ColumnMap) -> Result<TrialTable, InputError> {
    let dir = tempfile::tempdir().unwrap();
    let path = write(dir.path(), "coded.csv", text.as_bytes());
    read_trials(&path, columns)
}

#[test]
fn choice_codes_map_to_a_and_b() {
    // Button codes 1/2 and words accept/reject, as task software writes them (common practice).
    let text = format!("{MINIMAL}\nx,1,0,1,1,0.7\nx,2,0,1,2,0.8\nx,3,0,1,,\n");
    let columns = ColumnMap::default().with_choice_codes("1=a, 2=b").unwrap();
    let table = read_with(&text, &columns).unwrap();
    let choices: Vec<Option<Choice>> = table.subjects[0].trials.iter().map(|t| t.choice).collect();
    assert_eq!(choices, [Some(Choice::A), Some(Choice::B), None]);
    let text = format!("{MINIMAL}\nx,1,0,1,Accept,0.7\nx,2,0,1,reject,0.8\n");
    let columns = ColumnMap::default()
        .with_choice_codes("accept=a,reject=b")
        .unwrap();
    let table = read_with(&text, &columns).unwrap();
    assert_eq!(table.subjects[0].trials[0].choice, Some(Choice::A));
    assert_eq!(table.subjects[0].trials[1].choice, Some(Choice::B));
}

#[test]
fn choice_codes_not_given_or_not_listed_are_errors_at_their_cell() {
    let (path, err, _dir) = csv_err(&format!("{MINIMAL}\nx,1,0,1,1,0.7\n"));
    // source: line 2 writes 1 where a/b is expected; the message points to --choice-codes.
    assert_at(&err, &path, Some(2), Some("choice"), "--choice-codes");
    let dir = tempfile::tempdir().unwrap();
    let path = write(
        dir.path(),
        "coded.csv",
        format!("{MINIMAL}\nx,1,0,1,1,0.7\nx,2,0,1,3,0.7\n").as_bytes(),
    );
    let columns = ColumnMap::default().with_choice_codes("1=a,2=b").unwrap();
    let err = read_err(&path, &columns);
    // source: line 3 writes 3, which is not among the codes 1 and 2.
    assert_at(
        &err,
        &path,
        Some(3),
        Some("choice"),
        "expected one of the choice codes 1 (a), 2 (b)",
    );
}

#[test]
fn choice_code_and_missing_token_specifications_are_checked() {
    let cases: [(&str, &str, &str); 7] = [
        ("codes", "1=a", "no code for option b"),
        ("codes", "1=a,2=left", "expected an option a, b, c"),
        ("codes", "1=a,1=b", "more than once"),
        ("codes", "1a,2=b", "has no `=`"),
        ("codes", "=a,2=b", "no code before"),
        ("missing", "NA,,NaN", "empty token"),
        ("both", "1=a,2=b", "also"),
    ];
    for (kind, spec, text) in cases {
        let err = match kind {
            "codes" => ColumnMap::default().with_choice_codes(spec).unwrap_err(),
            "missing" => ColumnMap::default().with_missing(spec).unwrap_err(),
            _ => ColumnMap::default()
                .with_missing("1")
                .unwrap()
                .with_choice_codes(spec)
                .unwrap_err(),
        };
        let err = err.to_string();
        assert!(err.contains(text), "{kind} {spec:?}: {err}");
    }
}

#[test]
fn missing_value_tokens_read_as_empty_cells() {
    // NA and NaN as written by R and pandas for a missing value (common practice).
    let text = format!("{MINIMAL},outcome\nx,1,0,1,a,0.7,1\nx,2,0,1,NA,NA,NaN\nx,3,0,1,b,0.9,na\n");
    let (path, err, _dir) = csv_err(&text);
    // source: line 3 writes NA in choice; without --missing that is an error with a hint.
    assert_at(&err, &path, Some(3), Some("choice"), "--missing NA");
    let columns = ColumnMap::default().with_missing("NA,NaN").unwrap();
    let table = read_with(&text, &columns).unwrap();
    let t = &table.subjects[0].trials;
    assert_eq!((t[1].choice, t[1].rt, t[1].outcome), (None, None, None));
    assert_eq!((t[2].choice, t[2].outcome), (Some(Choice::B), None));
    // Parquet: a floating-point NaN response time is missing when NaN is a token.
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("nan.parquet");
    let mut frame = df!(
        "subject" => ["x", "x"],
        "trial" => [1i64, 2],
        "effort_a" => [0.0, 1.0],
        "effort_b" => [1.0, 0.0],
        "choice" => [Some("a"), None],
        "rt" => [0.7, f64::NAN],
    )
    .unwrap();
    write_parquet(&path, &mut frame);
    let err = read_err(&path, &ColumnMap::default());
    // source: data row 2 holds NaN in rt.
    assert_at(&err, &path, Some(2), Some("rt"), "expected a response time");
    let table = read_trials(&path, &ColumnMap::default().with_missing("NaN").unwrap()).unwrap();
    assert_eq!(table.subjects[0].trials[1].rt, None);
}

#[test]
fn trial_numbers_may_restart_in_each_run() {
    let header = "subject,run,trial,effort_a,effort_b,choice,rt";
    let dir = tempfile::tempdir().unwrap();
    let text = format!(
        "{header}\nx,r1,1,0,1,a,0.7\nx,r1,2,0,1,a,0.7\nx,r2,1,0,1,b,0.7\nx,r2,2,0,1,a,0.7\n"
    );
    let table = read(&write(dir.path(), "runs.csv", text.as_bytes()));
    // source: two runs of two trials, numbered from 1 in each (module documentation).
    let runs: Vec<(&str, i64)> = table.subjects[0]
        .trials
        .iter()
        .map(|t| (t.run.as_str(), t.trial))
        .collect();
    assert_eq!(runs, [("r1", 1), ("r1", 2), ("r2", 1), ("r2", 2)]);
    let text = format!("{header}\nx,r1,1,0,1,a,0.7\nx,r2,1,0,1,a,0.7\nx,r1,2,0,1,b,0.7\n");
    let (path, err, _dir) = csv_err(&text);
    // source: run r1 returns on line 4 after run r2.
    assert_at(
        &err,
        &path,
        Some(4),
        Some("run"),
        "appears again after run \"r2\"",
    );
    let text = format!("{header}\nx,r1,2,0,1,a,0.7\nx,r1,1,0,1,a,0.7\n");
    let (path, err, _dir) = csv_err(&text);
    // source: trial 1 follows trial 2 within run r1 on line 3.
    assert_at(
        &err,
        &path,
        Some(3),
        Some("trial"),
        "within run \"r1\" of subject",
    );
}

/// Every subject of the table at `path`, read in parts of `subjects` subjects.
fn read_in_parts(path: &Path, subjects: usize) -> TrialTable {
    let mut parts = SubjectParts::open(path, &ColumnMap::default()).unwrap();
    let mut all = Vec::new();
    while let Some(part) = parts.next_part(subjects).unwrap() {
        assert!(!part.subjects.is_empty() && part.subjects.len() <= subjects);
        all.extend(part.subjects);
    }
    let present = read(path).present;
    TrialTable {
        subjects: all,
        present,
    }
}

#[test]
fn streamed_parts_equal_the_whole_table_on_published_and_demo_data() {
    // source: the published effort-offer trials (Mehrhof & Nord 2025, MIT licence; 958
    // participants) and the demo's table, as CSV and as Parquet: reading a few subjects at a
    // time must give exactly the table read whole (common practice: streaming changes nothing).
    let root = Path::new(env!("CARGO_MANIFEST_DIR"));
    let dir = tempfile::tempdir().unwrap();
    let demo = root.join("demo-data/orchard_trials.csv");
    let demo_parquet = dir.path().join("orchard.parquet");
    let mut frame = CsvReadOptions::default()
        .try_into_reader_with_file_path(Some(demo.clone()))
        .unwrap()
        .finish()
        .unwrap();
    write_parquet(&demo_parquet, &mut frame);
    for path in [
        root.join("tests/data/effort-offers-2025/trials.csv"),
        demo.clone(),
        demo_parquet,
    ] {
        let whole = read(&path);
        for subjects in [1, 7, 64, usize::MAX] {
            assert_eq!(
                read_in_parts(&path, subjects),
                whole,
                "{} in parts of {subjects}",
                path.display()
            );
        }
    }
    assert_eq!(
        read(&root.join("tests/data/effort-offers-2025/trials.csv"))
            .subjects
            .len(),
        958
    );
    // A bad response time in a later part is reported at its own data row, in parts as whole.
    let rts: Vec<Option<f64>> = frame
        .column("rt")
        .unwrap()
        .cast(&DataType::Float64)
        .unwrap()
        .f64()
        .unwrap()
        .iter()
        .enumerate()
        .map(|(k, t)| if k == 5000 { Some(-1.0) } else { t })
        .collect();
    frame
        .replace("rt", Series::new("rt".into(), rts).into())
        .unwrap();
    let bad = dir.path().join("bad.parquet");
    write_parquet(&bad, &mut frame);
    let whole = read_err(&bad, &ColumnMap::default());
    // source: row 5001 (1-based data row) holds the negative time written above.
    assert_at(&whole, &bad, Some(5001), Some("rt"), "");
    let mut parts = SubjectParts::open(&bad, &ColumnMap::default()).unwrap();
    let in_parts = loop {
        match parts.next_part(3) {
            Ok(Some(_)) => continue,
            Ok(None) => panic!("the bad row was not reported"),
            Err(e) => break e,
        }
    };
    assert_eq!(in_parts.to_string(), whole.to_string());
}
