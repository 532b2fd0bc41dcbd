//! The plan's tidy tables (CSV and Parquet twins), one row per summary.
//!
//! * `plan_recovery`: `model, trials, estimates, parameter, n, n_converged, r, r_study_median,
//!   r_study_low, r_study_high, bias, rmse, coverage, n_intervals, share_at_bound`;
//! * `plan_confusion`: `trials, generating, selected, count, share`;
//! * `plan_model_recovery`: `trials, generating, studies, won, share_won, share_won_low,
//!   share_won_high, mean_pxp, subjects_correct`;
//! * `plan_power`: `model, parameter, trials, participants_per_group, studies, significant,
//!   power, power_low, power_high, power_normal_theory, true_difference, estimated_difference`;
//! * `plan_trials_needed`: `model, estimates, parameter, target_r, trials, r_at_largest`;
//! * `plan_estimates`: one row per simulated participant, design size, kind of estimate and
//!   parameter of its generating model: `model, study, group, participant, trials, estimates,
//!   parameter, true_value, estimate, ci_low, ci_high, at_bound, converged`.

use super::Plan;
use super::cohort::Study;
use super::summaries::{Confusion, EstimateKind, ModelRecovery, Power, Recovery, TrialsNeeded};
use crate::results::{Column, Table};

fn text<T>(rows: &[T], f: impl Fn(&T) -> String) -> Column {
    Column::Text(rows.iter().map(f).collect())
}
fn number<T>(rows: &[T], f: impl Fn(&T) -> Option<f64>) -> Column {
    Column::Number(rows.iter().map(f).collect())
}
fn integer<T>(rows: &[T], f: impl Fn(&T) -> usize) -> Column {
    Column::Integer(rows.iter().map(|r| f(r) as i64).collect())
}
fn finite(x: f64) -> Option<f64> {
    x.is_finite().then_some(x)
}

/// The recovery table.
pub fn recovery_table(rows: &[Recovery]) -> Table {
    Table::default()
        .with("model", text(rows, |r| r.model.clone()))
        .with("trials", integer(rows, |r| r.trials))
        .with("estimates", text(rows, |r| r.kind.as_str().to_string()))
        .with("parameter", text(rows, |r| r.parameter.clone()))
        .with("n", integer(rows, |r| r.n))
        .with("n_converged", integer(rows, |r| r.n_converged))
        .with("r", number(rows, |r| r.r))
        .with(
            "r_study_median",
            number(rows, |r| r.r_within_studies.map(|x| x.0)),
        )
        .with(
            "r_study_low",
            number(rows, |r| r.r_within_studies.map(|x| x.1)),
        )
        .with(
            "r_study_high",
            number(rows, |r| r.r_within_studies.map(|x| x.2)),
        )
        .with("bias", number(rows, |r| finite(r.bias)))
        .with("rmse", number(rows, |r| finite(r.rmse)))
        .with("coverage", number(rows, |r| r.coverage))
        .with("n_intervals", integer(rows, |r| r.n_intervals))
        .with("share_at_bound", number(rows, |r| finite(r.at_bound)))
}

/// The per-subject confusion matrix, long form.
pub fn confusion_table(rows: &[Confusion]) -> Table {
    Table::default()
        .with("trials", integer(rows, |r| r.trials))
        .with("generating", text(rows, |r| r.generating.clone()))
        .with("selected", text(rows, |r| r.selected.clone()))
        .with("count", integer(rows, |r| r.count))
        .with("share", number(rows, |r| Some(r.share)))
}

/// The group-level model recovery.
pub fn model_recovery_table(rows: &[ModelRecovery]) -> Table {
    Table::default()
        .with("trials", integer(rows, |r| r.trials))
        .with("generating", text(rows, |r| r.generating.clone()))
        .with("studies", integer(rows, |r| r.studies))
        .with("won", integer(rows, |r| r.won))
        .with("share_won", number(rows, |r| r.share_won.map(|x| x.0)))
        .with("share_won_low", number(rows, |r| r.share_won.map(|x| x.1)))
        .with("share_won_high", number(rows, |r| r.share_won.map(|x| x.2)))
        .with("mean_pxp", number(rows, |r| r.mean_pxp))
        .with(
            "subjects_correct",
            number(rows, |r| Some(r.subjects_correct)),
        )
}

/// The power table.
pub fn power_table(rows: &[Power]) -> Table {
    Table::default()
        .with("model", text(rows, |r| r.model.clone()))
        .with("parameter", text(rows, |r| r.parameter.clone()))
        .with("trials", integer(rows, |r| r.trials))
        .with("participants_per_group", integer(rows, |r| r.participants))
        .with("studies", integer(rows, |r| r.studies))
        .with("significant", integer(rows, |r| r.significant))
        .with("power", number(rows, |r| Some(r.power)))
        .with("power_low", number(rows, |r| Some(r.interval.0)))
        .with("power_high", number(rows, |r| Some(r.interval.1)))
        .with("power_normal_theory", number(rows, |r| r.normal_theory))
        .with(
            "true_difference",
            number(rows, |r| finite(r.true_difference)),
        )
        .with(
            "estimated_difference",
            number(rows, |r| finite(r.estimated_difference)),
        )
}

/// The trials needed for the target recovery.
pub fn trials_needed_table(rows: &[TrialsNeeded]) -> Table {
    Table::default()
        .with("model", text(rows, |r| r.model.clone()))
        .with("estimates", text(rows, |r| r.kind.as_str().to_string()))
        .with("parameter", text(rows, |r| r.parameter.clone()))
        .with("target_r", number(rows, |r| Some(r.target_r)))
        .with("trials", number(rows, |r| r.trials.map(|t| t as f64)))
        .with("r_at_largest", number(rows, |r| r.r_at_largest))
}

/// One row per simulated participant, design size, kind of estimate and free parameter of its
/// generating model.
pub fn estimates_table(plan: &Plan, studies: &[Study]) -> Table {
    struct Row<'a> {
        model: &'a str,
        study: usize,
        group: &'a str,
        participant: &'a str,
        trials: usize,
        kind: EstimateKind,
        parameter: &'a str,
        truth: f64,
        estimate: super::cohort::Estimate,
        converged: bool,
    }
    let mut rows = Vec::new();
    for study in studies {
        let model = &plan.candidates[study.generating];
        for p in &study.participants {
            for (t, &trials) in plan.spec.trials.iter().enumerate() {
                let fit = &p.fits[t][study.generating];
                for slot in model.free_slots() {
                    let mut push = |kind, estimate| {
                        rows.push(Row {
                            model: &model.name,
                            study: study.study + 1,
                            group: &plan.groups[p.group],
                            participant: &p.label,
                            trials,
                            kind,
                            parameter: &model.parameters[slot].name,
                            truth: p.truth[slot],
                            estimate,
                            converged: fit.converged,
                        });
                    };
                    push(EstimateKind::PerSubject, fit.estimates[slot]);
                    if let Some(eb) = &p.empirical_bayes[t] {
                        push(EstimateKind::EmpiricalBayes, eb[slot]);
                    }
                }
            }
        }
    }
    Table::default()
        .with("model", text(&rows, |r| r.model.to_string()))
        .with("study", integer(&rows, |r| r.study))
        .with("group", text(&rows, |r| r.group.to_string()))
        .with("participant", text(&rows, |r| r.participant.to_string()))
        .with("trials", integer(&rows, |r| r.trials))
        .with("estimates", text(&rows, |r| r.kind.as_str().to_string()))
        .with("parameter", text(&rows, |r| r.parameter.to_string()))
        .with("true_value", number(&rows, |r| Some(r.truth)))
        .with("estimate", number(&rows, |r| Some(r.estimate.value)))
        .with(
            "ci_low",
            number(&rows, |r| r.estimate.interval.map(|i| i.0)),
        )
        .with(
            "ci_high",
            number(&rows, |r| r.estimate.interval.map(|i| i.1)),
        )
        .with(
            "at_bound",
            Column::Flag(rows.iter().map(|r| r.estimate.at_bound).collect()),
        )
        .with(
            "converged",
            Column::Flag(rows.iter().map(|r| r.converged).collect()),
        )
}
