//! Writing a trial table back to CSV (simulated data, demo data).

use super::TrialTable;
use std::io::Write;

/// Writes every column of the trial table as CSV, in the canonical order of [`crate::data`];
/// missing values are empty fields.
pub fn write_trials(table: &TrialTable, w: &mut dyn Write) -> Result<(), csv::Error> {
    let mut writer = csv::Writer::from_writer(w);
    writer.write_record(super::ColumnMap::CANONICAL)?;
    let number = |x: Option<f64>| x.map_or(String::new(), |v| format!("{v}"));
    for subject in &table.subjects {
        for t in &subject.trials {
            writer.write_record([
                subject.id.clone(),
                subject.group.clone(),
                t.run.clone(),
                t.trial.to_string(),
                subject.options[t.option_a].clone(),
                subject.options[t.option_b].clone(),
                format!("{}", t.effort_a),
                format!("{}", t.effort_b),
                number(t.reward_a),
                number(t.reward_b),
                t.choice.map_or(String::new(), |c| c.as_str().to_string()),
                t.rt.map_or(String::new(), |rt| format!("{rt:.4}")),
                number(t.outcome),
                number(t.onset),
                number(t.outcome_onset),
                number(t.outcome_if_a),
                number(t.outcome_if_b),
            ])?;
        }
    }
    writer.flush()?;
    Ok(())
}
