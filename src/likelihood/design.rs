//! What a model reads from a subject's other columns, bound once per subject: for every trial,
//! the level intercept each varying parameter takes and the covariate values its slopes multiply
//! (the equation is in [`crate::model::varying`]), and the values of cost attributes other than
//! effort (columns `<attribute>_a`, `<attribute>_b`).

use super::DataMismatch;
use crate::data::{CovariateColumn, Subject, Trial};
use crate::model::dual::{D, constant};
use crate::model::varying::{Source, Variation};
use crate::model::{Model, Transform};

/// Per trial, where each varying parameter's value comes from, and the per-option attributes.
#[derive(Clone, Debug, Default)]
pub struct TrialColumns {
    /// Values per trial of the cost attributes other than effort, then of the drift mapping's
    /// attribute: one per option for each attribute.
    attribute_values: Vec<f64>,
    /// Number of those values per trial (one per option and attribute).
    n_attribute_values: usize,
    /// Number of varying component parameters.
    n_varying: usize,
    /// Number of slopes over all varying parameters.
    n_slopes: usize,
    /// Per trial and varying parameter: the model slot of the trial's level intercept.
    level_slots: Vec<usize>,
    /// Per trial and slope: the trial's covariate value.
    covariates: Vec<f64>,
}

impl TrialColumns {
    /// Binds the model's varying parameters to the subject's columns; a trial whose condition
    /// is not among the declared levels, or whose covariate is missing or not a number, is an
    /// error naming the trial and the column.
    pub fn bind(model: &Model, subject: &Subject) -> Result<Self, DataMismatch> {
        let mismatch = |message: String| DataMismatch {
            subject: subject.id.clone(),
            message,
        };
        let variations: Vec<(&str, &Variation)> = model
            .sources
            .iter()
            .zip(&model.component_parameters)
            .filter_map(|(source, name)| match source {
                Source::Varying(v) => Some((name.as_str(), v)),
                Source::Constant(_) => None,
            })
            .collect();
        let column = |name: &str, parameter: &str| {
            subject.covariate_column(name).ok_or_else(|| {
                mismatch(format!(
                    "{parameter} of model {} varies with column `{name}`, which the trial table \
                     does not have (its other columns: {})",
                    model.name,
                    if subject.covariates.is_empty() {
                        "none".to_string()
                    } else {
                        subject.covariates.join(", ")
                    }
                ))
            })
        };
        let mut by_columns: Vec<Option<CovariateColumn>> = Vec::new();
        let mut slope_columns: Vec<CovariateColumn> = Vec::new();
        for (name, v) in &variations {
            by_columns.push(match &v.column {
                Some(c) => Some(column(c, name)?),
                None => None,
            });
            for (c, _) in &v.slopes {
                slope_columns.push(column(c, name)?);
            }
        }
        let n_trials = subject.trials.len();
        let mut level_slots = Vec::with_capacity(n_trials * variations.len());
        let mut covariates = Vec::with_capacity(n_trials * slope_columns.len());
        for trial in &subject.trials {
            let at = if trial.run.is_empty() {
                format!("trial {}", trial.trial)
            } else {
                format!("trial {} of run {:?}", trial.trial, trial.run)
            };
            for ((name, v), by) in variations.iter().zip(&by_columns) {
                let slot = match (by, &v.column) {
                    (Some(col), Some(cname)) => {
                        let cell = trial.covariate(*col).ok_or_else(|| {
                            mismatch(format!(
                                "{at}: column `{cname}` is empty; expected one of the levels of \
                                 {name} ({})",
                                level_list(v)
                            ))
                        })?;
                        let cell = cell.trim();
                        v.levels
                            .iter()
                            .find(|(level, _)| same_level(level, cell))
                            .map(|(_, slot)| *slot)
                            .ok_or_else(|| {
                                mismatch(format!(
                                    "{at}: column `{cname}` is {cell:?}, which is not a level of \
                                     {name} in model {} (expected one of: {}); add it to the \
                                     parameter's `levels`",
                                    model.name,
                                    level_list(v)
                                ))
                            })?
                    }
                    _ => v.levels[0].1,
                };
                level_slots.push(slot);
            }
            let mut k = 0;
            for (name, v) in &variations {
                for (cname, _) in &v.slopes {
                    let x = finite_number(trial, slope_columns[k]).map_err(|shown| {
                        mismatch(format!(
                            "{at}: column `{cname}` is {shown}; expected a finite number (the \
                             covariate of {name}'s slope)"
                        ))
                    })?;
                    covariates.push(x);
                    k += 1;
                }
            }
        }
        let (attribute_values, n_attribute_values) = bind_cost_attributes(model, subject)?;
        Ok(TrialColumns {
            attribute_values,
            n_attribute_values,
            n_varying: variations.len(),
            n_slopes: slope_columns.len(),
            level_slots,
            covariates,
        })
    }

    /// The values on trial `t` of the cost attributes other than effort, in the model's order:
    /// one per offered option (a, b, …) for each.
    pub fn attribute_values(&self, t: usize) -> &[f64] {
        &self.attribute_values[t * self.n_attribute_values..(t + 1) * self.n_attribute_values]
    }

    /// The end (exclusive) of the stretch of trials from `t` on whose parameters are the same:
    /// the same levels and no slopes (with slopes every trial has its own values).
    pub fn same_parameters_until(&self, t: usize) -> usize {
        if self.n_slopes > 0 || self.n_varying == 0 {
            return t + 1;
        }
        let n = self.level_slots.len() / self.n_varying;
        let levels = self.levels_of(t);
        (t + 1..n)
            .find(|&u| self.levels_of(u) != levels)
            .unwrap_or(n)
    }

    /// The model slots of the level intercepts used on trial `t`, one per varying parameter.
    pub fn levels_of(&self, t: usize) -> &[usize] {
        &self.level_slots[t * self.n_varying..(t + 1) * self.n_varying]
    }

    /// Where each component parameter's value on trial `t` comes from (in the order of
    /// [`Model::component_parameters`]): `visit` sees each [`Origin`].
    pub(crate) fn origins<'s>(
        &'s self,
        model: &'s Model,
        t: usize,
        mut visit: impl FnMut(Origin<'s>),
    ) {
        let levels = self.levels_of(t);
        let xs = &self.covariates[t * self.n_slopes..(t + 1) * self.n_slopes];
        let (mut v, mut k) = (0, 0);
        for source in &model.sources {
            match source {
                Source::Constant(slot) => visit(Origin::Natural(*slot)),
                Source::Varying(variation) => {
                    let slot = levels[v];
                    v += 1;
                    let n = variation.slopes.len();
                    visit(if n == 0 {
                        Origin::Natural(slot)
                    } else {
                        Origin::Linear {
                            level: slot,
                            slopes: &variation.slopes,
                            covariates: &xs[k..k + n],
                        }
                    });
                    k += n;
                }
            }
        }
    }

    /// The component parameters on trial `t` (in the order of
    /// [`Model::component_parameters`]), written into `out`: a constant parameter's value from
    /// `natural`; a varying one as g(θ_level + Σ β_j·c_j) with g the transform of its level's
    /// slot, θ and β from `theta` (by model slot).
    pub(crate) fn values_into(
        &self,
        model: &Model,
        t: usize,
        natural: &[D],
        theta: &[D],
        transforms: &[Transform],
        out: &mut Vec<D>,
    ) {
        out.clear();
        self.origins(model, t, |origin| {
            out.push(match origin {
                Origin::Natural(slot) => natural[slot],
                Origin::Linear {
                    level,
                    slopes,
                    covariates,
                } => transforms[level].to_natural(origin_linear(
                    theta[level],
                    slopes,
                    covariates,
                    theta,
                )),
            })
        });
    }

    /// The component parameters on trial `t` from natural values of every model parameter
    /// (for simulation and checks), slopes applied on the scale of the declared bounds.
    pub fn natural_values(&self, model: &Model, t: usize, natural: &[f64]) -> Vec<D> {
        let transforms: Vec<Transform> = model.parameters.iter().map(|p| p.transform()).collect();
        let theta: Vec<D> = natural
            .iter()
            .zip(&transforms)
            .map(|(&x, g)| constant(g.unconstrained(x)))
            .collect();
        let duals: Vec<D> = natural.iter().map(|&x| constant(x)).collect();
        let mut out = Vec::with_capacity(model.sources.len());
        self.values_into(model, t, &duals, &theta, &transforms, &mut out);
        out
    }
}

/// Where a component parameter's value on a trial comes from.
pub(crate) enum Origin<'s> {
    /// The natural value of the model parameter in this slot.
    Natural(usize),
    /// g(θ_level + Σ β_j·c_j), g the transform of the level's slot: the level's slot, each
    /// slope's (column, slot) and the trial's covariate values.
    Linear {
        level: usize,
        slopes: &'s [(String, usize)],
        covariates: &'s [f64],
    },
}

/// θ_level + Σ β_j·c_j, summed in the order of the slopes (`theta` by model slot).
pub(crate) fn origin_linear<N: Copy + std::ops::AddAssign + std::ops::Mul<f64, Output = N>>(
    level: N,
    slopes: &[(String, usize)],
    covariates: &[f64],
    theta: &[N],
) -> N {
    let mut linear = level;
    for ((_, slope), &x) in slopes.iter().zip(covariates) {
        linear += theta[*slope] * x;
    }
    linear
}

/// Reads every trial's values of the model's per-option attributes: the cost attributes other
/// than effort (columns `<attribute>_a`, `<attribute>_b`, …), then the drift mapping's own
/// attribute (for example gaze shares); each a finite number within the attribute's range,
/// else an error naming the trial and the column.
fn bind_cost_attributes(
    model: &Model,
    subject: &Subject,
) -> Result<(Vec<f64>, usize), DataMismatch> {
    let mismatch = |message: String| DataMismatch {
        subject: subject.id.clone(),
        message,
    };
    let n_sides = subject
        .trials
        .iter()
        .map(|t| t.offers.len())
        .max()
        .unwrap_or(2);
    let unbounded = (f64::NEG_INFINITY, f64::INFINITY);
    let mut attributes: Vec<(&str, (f64, f64), &str)> = model
        .costs
        .iter()
        .filter(|c| !c.is_effort())
        .map(|c| (c.name.as_str(), unbounded, "weighs the cost attribute"))
        .collect();
    if let Some(mapping) = &model.drift
        && let Some(name) = mapping.attribute()
    {
        attributes.push((
            name,
            mapping.attribute_range(),
            "weighs drift by the attribute",
        ));
    }
    let mut columns = Vec::new();
    for &(attribute, range, role) in &attributes {
        for side in &crate::data::SIDES[..n_sides] {
            let name = format!("{attribute}_{side}");
            let column = subject.covariate_column(&name).ok_or_else(|| {
                mismatch(format!(
                    "model {} {role} `{attribute}`, but the trial table has no column `{name}` \
                     (expected {attribute}_a and {attribute}_b: the attribute of each option)",
                    model.name,
                ))
            })?;
            columns.push((name, column, range));
        }
    }
    let mut values = Vec::with_capacity(subject.trials.len() * columns.len());
    for trial in &subject.trials {
        for (name, column, (lo, hi)) in &columns {
            let x = finite_number(trial, *column)
                .and_then(|x| {
                    if (*lo..=*hi).contains(&x) {
                        Ok(x)
                    } else {
                        Err(format!("{x}"))
                    }
                })
                .map_err(|shown| {
                    let expected = if lo.is_finite() || hi.is_finite() {
                        format!("a number from {lo} to {hi}")
                    } else {
                        "a finite number".to_string()
                    };
                    mismatch(format!(
                        "trial {}: column `{name}` is {shown}; expected {expected} (an attribute \
                         of the option)",
                        trial.trial
                    ))
                })?;
            values.push(x);
        }
    }
    Ok((values, columns.len()))
}

/// The trial's cell of `column` as a finite number; otherwise how the cell reads in a message
/// (`empty`, or the quoted text).
fn finite_number(trial: &Trial, column: CovariateColumn) -> Result<f64, String> {
    let cell = trial.covariate(column);
    cell.as_deref()
        .map(str::trim)
        .and_then(|s| s.parse::<f64>().ok())
        .filter(|x| x.is_finite())
        .ok_or_else(|| {
            cell.as_deref()
                .map_or("empty".to_string(), |s| format!("{s:?}"))
        })
}

/// A level as written in the model matches a cell as written in the table, or as the same
/// number (so that level "1" matches a cell 1.0 from a Parquet file).
fn same_level(level: &str, cell: &str) -> bool {
    level == cell || matches!((level.parse::<f64>(), cell.parse::<f64>()), (Ok(a), Ok(b)) if a == b)
}

fn level_list(v: &Variation) -> String {
    v.levels
        .iter()
        .map(|(l, _)| l.as_str())
        .collect::<Vec<_>>()
        .join(", ")
}
