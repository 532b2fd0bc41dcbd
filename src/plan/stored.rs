//! Simulated studies written and read back exactly: what a shard of `plan` keeps so that
//! `merge` can summarise every study as a single run does (recovery, model selection per study
//! and power need all studies).
//!
//! One row per number kept of a participant: its generating values (`record` = `truth`, one
//! row per parameter of the generating model), each fit (`fit`: per design size, candidate
//! model and parameter: estimate, interval, at-bound flag, with the fit's BIC and convergence)
//! and the empirical-Bayes estimates where they exist (`eb`: per design size and parameter).
//! Numbers are written with the shortest digits that read back to the same f64.

use super::cohort::{Estimate, FitRecord, Participant, Study};
use crate::results::{Column, Table};

/// `record` of a generating value.
const TRUTH: &str = "truth";
/// `record` of a fit's estimate.
const FIT: &str = "fit";
/// `record` of an empirical-Bayes estimate.
const EB: &str = "eb";

/// One row: (study, participant, record, design size, candidate, estimate, BIC, converged).
type Row<'a> = (
    &'a Study,
    &'a Participant,
    &'static str,
    usize,
    usize,
    Estimate,
    Option<f64>,
    bool,
);

/// The table of `studies` (see the module documentation).
pub fn stored_studies_table(studies: &[Study]) -> Table {
    let mut rows: Vec<Row<'_>> = Vec::new();
    for study in studies {
        for p in &study.participants {
            let value = |v: f64| Estimate {
                value: v,
                interval: None,
                at_bound: false,
            };
            rows.extend(
                p.truth
                    .iter()
                    .map(|&v| (study, p, TRUTH, 0, 0, value(v), None, false)),
            );
            for (t, per_size) in p.fits.iter().enumerate() {
                for (c, fit) in per_size.iter().enumerate() {
                    rows.extend(
                        fit.estimates
                            .iter()
                            .map(|&e| (study, p, FIT, t, c, e, Some(fit.bic), fit.converged)),
                    );
                }
                if let Some(Some(eb)) = p.empirical_bayes.get(t) {
                    rows.extend(eb.iter().map(|&e| (study, p, EB, t, 0, e, None, false)));
                }
            }
        }
    }
    let integer =
        |f: &dyn Fn(&Row<'_>) -> usize| Column::Integer(rows.iter().map(|r| f(r) as i64).collect());
    let number = |f: &dyn Fn(&Row<'_>) -> Option<f64>| Column::Number(rows.iter().map(f).collect());
    Table::default()
        .with("generating", integer(&|r| r.0.generating))
        .with("study", integer(&|r| r.0.study))
        .with(
            "participant",
            Column::Text(rows.iter().map(|r| r.1.label.clone()).collect()),
        )
        .with("group", integer(&|r| r.1.group))
        .with("index", integer(&|r| r.1.index))
        .with(
            "record",
            Column::Text(rows.iter().map(|r| r.2.to_string()).collect()),
        )
        .with("size", integer(&|r| r.3))
        .with("candidate", integer(&|r| r.4))
        .with("value", number(&|r| Some(r.5.value)))
        .with("ci_low", number(&|r| r.5.interval.map(|i| i.0)))
        .with("ci_high", number(&|r| r.5.interval.map(|i| i.1)))
        .with(
            "at_bound",
            Column::Flag(rows.iter().map(|r| r.5.at_bound).collect()),
        )
        .with("bic", number(&|r| r.6))
        .with(
            "converged",
            Column::Flag(rows.iter().map(|r| r.7).collect()),
        )
}

/// The studies of a table written by [`stored_studies_table`] (read back with it as template),
/// in the table's order; `source` names the file in errors, with the row (from 1).
pub fn studies_from_stored(table: &Table, source: &str) -> Result<Vec<Study>, String> {
    let integer = |name: &str| table.integers(name).unwrap_or_default();
    let number = |name: &str| table.numbers(name).unwrap_or_default();
    let flag = |name: &str| table.flags(name).unwrap_or_default();
    let text = |name: &str| table.texts(name).unwrap_or_default();
    let mut studies: Vec<Study> = Vec::new();
    for r in 0..table.rows() {
        let bad = |what: &str| format!("{source}, row {}: {what}", r + 1);
        let (generating, study) = (
            integer("generating")[r] as usize,
            integer("study")[r] as usize,
        );
        if studies
            .last()
            .is_none_or(|s| (s.generating, s.study) != (generating, study))
        {
            studies.push(Study {
                generating,
                study,
                participants: Vec::new(),
            });
        }
        let participants = &mut studies.last_mut().expect("pushed above").participants;
        let label = &text("participant")[r];
        if participants.last().is_none_or(|p| p.label != *label) {
            participants.push(Participant {
                label: label.clone(),
                group: integer("group")[r] as usize,
                index: integer("index")[r] as usize,
                truth: Vec::new(),
                fits: Vec::new(),
                empirical_bayes: Vec::new(),
            });
        }
        let p = participants.last_mut().expect("pushed above");
        let value = number("value")[r].ok_or_else(|| bad("an empty value; expected a number"))?;
        let estimate = Estimate {
            value,
            interval: number("ci_low")[r].zip(number("ci_high")[r]),
            at_bound: flag("at_bound")[r],
        };
        let (size, candidate) = (
            integer("size")[r] as usize,
            integer("candidate")[r] as usize,
        );
        match text("record")[r].as_str() {
            TRUTH => p.truth.push(value),
            FIT => {
                if size == p.fits.len() {
                    p.fits.push(Vec::new());
                }
                let per_size = p
                    .fits
                    .get_mut(size)
                    .ok_or_else(|| bad("a design size out of order"))?;
                if candidate == per_size.len() {
                    per_size.push(FitRecord {
                        bic: number("bic")[r].ok_or_else(|| bad("a fit without its BIC"))?,
                        converged: flag("converged")[r],
                        estimates: Vec::new(),
                    });
                }
                per_size
                    .get_mut(candidate)
                    .ok_or_else(|| bad("a candidate model out of order"))?
                    .estimates
                    .push(estimate);
            }
            EB => {
                p.empirical_bayes.resize(p.fits.len(), None);
                p.empirical_bayes
                    .get_mut(size)
                    .ok_or_else(|| bad("empirical-Bayes estimates before their fits"))?
                    .get_or_insert_with(Vec::new)
                    .push(estimate);
            }
            other => return Err(bad(&format!("record {other:?}; expected truth, fit or eb"))),
        }
    }
    for p in studies.iter_mut().flat_map(|s| &mut s.participants) {
        p.empirical_bayes.resize(p.fits.len(), None);
    }
    Ok(studies)
}
