//! What the simulated studies say: parameter recovery, model recovery, power, and the trials
//! needed for a target recovery.

use super::Plan;
use super::cohort::{Estimate, Participant, Study};
use crate::check::quantile_sorted;
use crate::group::power::{welch_power, wilson_interval};
use crate::group::selection::{BmsOptions, random_effects_bms};
use crate::group::{mean, variance, welch_t_test};

/// Which estimates a recovery row is of.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum EstimateKind {
    /// Per-subject maximum likelihood (or MAP with declared priors), as `fit`.
    PerSubject,
    /// Empirical-Bayes estimates under a fitted group prior, as `fit --hierarchical --by group`.
    EmpiricalBayes,
}

impl EstimateKind {
    /// Label in the tables.
    pub fn as_str(self) -> &'static str {
        match self {
            EstimateKind::PerSubject => "per_subject",
            EstimateKind::EmpiricalBayes => "empirical_bayes",
        }
    }
}

/// Pearson's product-moment correlation r = Σ(x − x̄)(y − ȳ)/√(Σ(x − x̄)² Σ(y − ȳ)²)
/// (Pearson 1896); `None` with fewer than 3 pairs or a variable that does not vary.
pub fn pearson(x: &[f64], y: &[f64]) -> Option<f64> {
    if x.len() != y.len() || x.len() < 3 {
        return None;
    }
    let (mx, my) = (mean(x)?, mean(y)?);
    let sxy: f64 = x.iter().zip(y).map(|(a, b)| (a - mx) * (b - my)).sum();
    let sxx: f64 = x.iter().map(|a| (a - mx) * (a - mx)).sum();
    let syy: f64 = y.iter().map(|b| (b - my) * (b - my)).sum();
    let r = sxy / (sxx * syy).sqrt();
    r.is_finite().then_some(r)
}

/// Recovery of one parameter of one generating model at one design size.
#[derive(Clone, Debug, PartialEq)]
pub struct Recovery {
    /// Generating (and fitted) model.
    pub model: String,
    /// Trials per participant.
    pub trials: usize,
    /// Which estimates.
    pub kind: EstimateKind,
    /// Parameter.
    pub parameter: String,
    /// Participants with an estimate (all studies and groups).
    pub n: usize,
    /// Of them, per-subject fits that passed the fitter's examination.
    pub n_converged: usize,
    /// Pearson r between generating values and estimates, all participants pooled.
    pub r: Option<f64>,
    /// Median, 2.5 % and 97.5 % quantile (type 7) of r within single studies.
    pub r_within_studies: Option<(f64, f64, f64)>,
    /// Mean of estimate − generating value.
    pub bias: f64,
    /// √ mean (estimate − generating value)².
    pub rmse: f64,
    /// Share of 95 % intervals that contain the generating value.
    pub coverage: Option<f64>,
    /// Estimates that had an interval.
    pub n_intervals: usize,
    /// Share of estimates at a bound.
    pub at_bound: f64,
}

fn estimate_of(
    p: &Participant,
    t: usize,
    model: usize,
    kind: EstimateKind,
    slot: usize,
) -> Option<Estimate> {
    match kind {
        EstimateKind::PerSubject => Some(p.fits[t][model].estimates[slot]),
        EstimateKind::EmpiricalBayes => p.empirical_bayes[t].as_ref().map(|e| e[slot]),
    }
}

/// Parameter recovery of every free parameter of every generating model, per design size and
/// kind of estimate: each generating model fitted by itself.
pub fn recovery(plan: &Plan, studies: &[Study]) -> Vec<Recovery> {
    let mut rows = Vec::new();
    let kinds: &[EstimateKind] = if plan.spec.empirical_bayes {
        &[EstimateKind::PerSubject, EstimateKind::EmpiricalBayes]
    } else {
        &[EstimateKind::PerSubject]
    };
    for g in plan.generating() {
        let model = &plan.candidates[g];
        let own: Vec<&Study> = studies.iter().filter(|s| s.generating == g).collect();
        for (t, &trials) in plan.spec.trials.iter().enumerate() {
            for &kind in kinds {
                for slot in model.free_slots() {
                    let (mut truth, mut estimate) = (Vec::new(), Vec::new());
                    let (mut converged, mut covered, mut intervals, mut at_bound) = (0, 0, 0, 0);
                    let mut r_studies = Vec::new();
                    for study in &own {
                        let (mut x, mut y) = (Vec::new(), Vec::new());
                        for p in &study.participants {
                            let Some(e) = estimate_of(p, t, g, kind, slot) else {
                                continue;
                            };
                            let value = p.truth[slot];
                            x.push(value);
                            y.push(e.value);
                            converged += usize::from(p.fits[t][g].converged);
                            at_bound += usize::from(e.at_bound);
                            if let Some((lo, hi)) = e.interval {
                                intervals += 1;
                                covered += usize::from(lo <= value && value <= hi);
                            }
                        }
                        if let Some(r) = pearson(&x, &y) {
                            r_studies.push(r);
                        }
                        truth.extend(x);
                        estimate.extend(y);
                    }
                    let n = truth.len();
                    let errors: Vec<f64> =
                        estimate.iter().zip(&truth).map(|(e, x)| e - x).collect();
                    r_studies.sort_by(f64::total_cmp);
                    rows.push(Recovery {
                        model: model.name.clone(),
                        trials,
                        kind,
                        parameter: model.parameters[slot].name.clone(),
                        n,
                        n_converged: converged,
                        r: pearson(&truth, &estimate),
                        r_within_studies: quantile_sorted(&r_studies, 0.5).and_then(|m| {
                            Some((
                                m,
                                quantile_sorted(&r_studies, 0.025)?,
                                quantile_sorted(&r_studies, 0.975)?,
                            ))
                        }),
                        bias: mean(&errors).unwrap_or(f64::NAN),
                        rmse: mean(&errors.iter().map(|e| e * e).collect::<Vec<_>>())
                            .map_or(f64::NAN, f64::sqrt),
                        coverage: (intervals > 0).then(|| covered as f64 / intervals as f64),
                        n_intervals: intervals,
                        at_bound: if n > 0 {
                            at_bound as f64 / n as f64
                        } else {
                            f64::NAN
                        },
                    });
                }
            }
        }
    }
    rows
}

/// The candidate with the lowest BIC (the first of equals).
fn best_by_bic(p: &Participant, t: usize) -> usize {
    (0..p.fits[t].len())
        .min_by(|&a, &b| p.fits[t][a].bic.total_cmp(&p.fits[t][b].bic))
        .unwrap_or(0)
}

/// One cell of the per-subject confusion matrix.
#[derive(Clone, Debug, PartialEq)]
pub struct Confusion {
    /// Trials per participant.
    pub trials: usize,
    /// The model that generated the data.
    pub generating: String,
    /// The candidate with the lowest BIC.
    pub selected: String,
    /// Participants for which it was.
    pub count: usize,
    /// Share of the generating model's participants.
    pub share: f64,
}

/// The per-subject confusion matrix by BIC (Schwarz 1978) at each design size: how often each
/// candidate has the lowest BIC on data of each generating model.
pub fn confusion(plan: &Plan, studies: &[Study]) -> Vec<Confusion> {
    let mut rows = Vec::new();
    for (t, &trials) in plan.spec.trials.iter().enumerate() {
        for g in plan.generating() {
            let mut counts = vec![0usize; plan.candidates.len()];
            for study in studies.iter().filter(|s| s.generating == g) {
                for p in &study.participants {
                    counts[best_by_bic(p, t)] += 1;
                }
            }
            let total: usize = counts.iter().sum();
            for (m, &count) in counts.iter().enumerate() {
                rows.push(Confusion {
                    trials,
                    generating: plan.candidates[g].name.clone(),
                    selected: plan.candidates[m].name.clone(),
                    count,
                    share: count as f64 / total.max(1) as f64,
                });
            }
        }
    }
    rows
}

/// The group-level verdict of model selection on one generating model's studies.
#[derive(Clone, Debug, PartialEq)]
pub struct ModelRecovery {
    /// Trials per participant.
    pub trials: usize,
    /// The model that generated the data.
    pub generating: String,
    /// Studies whose model selection could be run.
    pub studies: usize,
    /// Of them, studies in which the generating model had the highest protected exceedance
    /// probability.
    pub won: usize,
    /// won / studies with its Wilson 95 % interval.
    pub share_won: Option<(f64, f64, f64)>,
    /// Mean protected exceedance probability of the generating model.
    pub mean_pxp: Option<f64>,
    /// Share of participants whose lowest BIC is the generating model's.
    pub subjects_correct: f64,
}

/// Random-effects Bayesian model selection (Stephan et al. 2009; Rigoux et al. 2014) in every
/// study, with log evidence −BIC/2 of each candidate for each participant of the study (all
/// groups): how often the generating model has the highest protected exceedance probability.
/// Empty with a single candidate.
pub fn model_recovery(plan: &Plan, studies: &[Study]) -> Vec<ModelRecovery> {
    if plan.candidates.len() < 2 {
        return Vec::new();
    }
    let mut rows = Vec::new();
    for (t, &trials) in plan.spec.trials.iter().enumerate() {
        for g in plan.generating() {
            let (mut ran, mut won, mut pxp_sum) = (0usize, 0usize, 0.0);
            let (mut correct, mut subjects) = (0usize, 0usize);
            for study in studies.iter().filter(|s| s.generating == g) {
                let evidence: Vec<Vec<f64>> = study
                    .participants
                    .iter()
                    .map(|p| p.fits[t].iter().map(|f| -f.bic / 2.0).collect())
                    .collect();
                for p in &study.participants {
                    subjects += 1;
                    correct += usize::from(best_by_bic(p, t) == g);
                }
                let options = BmsOptions {
                    samples: plan.spec.selection_samples,
                    seed: plan.spec.seed,
                    stream: ((g * plan.spec.studies + study.study) * plan.spec.trials.len() + t)
                        as u64,
                    ..BmsOptions::default()
                };
                let Ok(bms) = random_effects_bms(&evidence, &options) else {
                    continue;
                };
                ran += 1;
                let protected_exceedance = &bms.protected_exceedance;
                let top = (0..protected_exceedance.len())
                    .max_by(|&a, &b| protected_exceedance[a].total_cmp(&protected_exceedance[b]))
                    .unwrap_or(0);
                won += usize::from(top == g);
                pxp_sum += protected_exceedance[g];
            }
            rows.push(ModelRecovery {
                trials,
                generating: plan.candidates[g].name.clone(),
                studies: ran,
                won,
                share_won: wilson_interval(won, ran, 0.95)
                    .map(|(lo, hi)| (won as f64 / ran as f64, lo, hi)),
                mean_pxp: (ran > 0).then(|| pxp_sum / ran as f64),
                subjects_correct: correct as f64 / subjects.max(1) as f64,
            });
        }
    }
    rows
}

/// The power of the group contrast at one design size and number of participants per group.
#[derive(Clone, Debug, PartialEq)]
pub struct Power {
    /// Generating (and fitted) model.
    pub model: String,
    /// The parameter that differs.
    pub parameter: String,
    /// Trials per participant.
    pub trials: usize,
    /// Participants per group.
    pub participants: usize,
    /// Studies.
    pub studies: usize,
    /// Studies whose Welch test rejected at α (two-sided).
    pub significant: usize,
    /// significant / studies.
    pub power: f64,
    /// Wilson 95 % interval of the power (Monte Carlo uncertainty).
    pub interval: (f64, f64),
    /// Normal-theory power of the Welch test at the estimates' group means and SDs.
    pub normal_theory: Option<f64>,
    /// Mean generating difference (shifted − baseline group).
    pub true_difference: f64,
    /// Mean estimated difference.
    pub estimated_difference: f64,
}

/// Share of studies in which the two-sided Welch test of `pairs` (second sample minus first)
/// rejects at `alpha`, with its Wilson 95 % interval: (significant, studies, power, interval).
/// A study whose test is undefined (a sample without variance) counts as not significant.
pub fn rejection_share(
    pairs: &[(Vec<f64>, Vec<f64>)],
    alpha: f64,
) -> Option<(usize, usize, f64, (f64, f64))> {
    let significant = pairs
        .iter()
        .filter(|(a, b)| welch_t_test(b, a).is_some_and(|w| w.p < alpha))
        .count();
    let interval = wilson_interval(significant, pairs.len(), 0.95)?;
    Some((
        significant,
        pairs.len(),
        significant as f64 / pairs.len() as f64,
        interval,
    ))
}

/// Power of the contrast between the first two groups on the difference's parameter, with the
/// per-subject estimates of each generating model that has it, for every design size and number
/// of participants per group (the first participants of each study). Empty without a
/// difference.
pub fn power(plan: &Plan, studies: &[Study]) -> Vec<Power> {
    let Some(difference) = &plan.spec.difference else {
        return Vec::new();
    };
    let mut rows = Vec::new();
    for g in plan.generating() {
        let model = &plan.candidates[g];
        let Some(slot) = model
            .parameters
            .iter()
            .position(|p| p.name == difference.parameter && p.is_free())
        else {
            continue;
        };
        let own: Vec<&Study> = studies.iter().filter(|s| s.generating == g).collect();
        for (t, &trials) in plan.spec.trials.iter().enumerate() {
            let values = |study: &Study, group: usize, n: usize, truth: bool| -> Vec<f64> {
                study
                    .participants
                    .iter()
                    .filter(|p| p.group == group && p.index < n)
                    .map(|p| {
                        if truth {
                            p.truth[slot]
                        } else {
                            p.fits[t][g].estimates[slot].value
                        }
                    })
                    .collect()
            };
            let most = plan.largest_participants();
            let pooled = |group: usize, truth: bool| -> Vec<f64> {
                own.iter()
                    .flat_map(|s| values(s, group, most, truth))
                    .collect()
            };
            let (e0, e1) = (pooled(0, false), pooled(1, false));
            let (x0, x1) = (pooled(0, true), pooled(1, true));
            let mut sizes = plan.spec.participants.clone();
            sizes.sort_unstable();
            sizes.dedup();
            for n in sizes {
                let pairs: Vec<(Vec<f64>, Vec<f64>)> = own
                    .iter()
                    .map(|s| (values(s, 0, n, false), values(s, 1, n, false)))
                    .collect();
                let Some((significant, count, share, interval)) =
                    rejection_share(&pairs, plan.spec.alpha)
                else {
                    continue;
                };
                let normal_theory = match (mean(&e0), mean(&e1), variance(&e0), variance(&e1)) {
                    (Some(m0), Some(m1), Some(v0), Some(v1)) => {
                        welch_power(m1 - m0, v1.sqrt(), v0.sqrt(), n, n, plan.spec.alpha)
                    }
                    _ => None,
                };
                rows.push(Power {
                    model: model.name.clone(),
                    parameter: difference.parameter.clone(),
                    trials,
                    participants: n,
                    studies: count,
                    significant,
                    power: share,
                    interval,
                    normal_theory,
                    true_difference: mean(&x1).unwrap_or(f64::NAN) - mean(&x0).unwrap_or(f64::NAN),
                    estimated_difference: mean(&e1).unwrap_or(f64::NAN)
                        - mean(&e0).unwrap_or(f64::NAN),
                });
            }
        }
    }
    rows
}

/// The fewest trials reaching a target recovery.
#[derive(Clone, Debug, PartialEq)]
pub struct TrialsNeeded {
    /// Generating model.
    pub model: String,
    /// Which estimates.
    pub kind: EstimateKind,
    /// Parameter.
    pub parameter: String,
    /// The target r.
    pub target_r: f64,
    /// The fewest listed trials per participant whose pooled r reaches it (None: none does).
    pub trials: Option<usize>,
    /// The r at the largest design size.
    pub r_at_largest: Option<f64>,
}

/// Per generating model, kind of estimate and parameter, the fewest listed trials per
/// participant at which the pooled recovery r reaches `target_r`. Empty without a target.
pub fn trials_needed(plan: &Plan, recovery: &[Recovery]) -> Vec<TrialsNeeded> {
    let Some(target) = plan.spec.target_r else {
        return Vec::new();
    };
    let mut rows: Vec<TrialsNeeded> = Vec::new();
    let largest = plan.largest_trials();
    for r in recovery {
        if rows
            .iter()
            .any(|x| x.model == r.model && x.kind == r.kind && x.parameter == r.parameter)
        {
            continue;
        }
        let same: Vec<&Recovery> = recovery
            .iter()
            .filter(|x| x.model == r.model && x.kind == r.kind && x.parameter == r.parameter)
            .collect();
        let trials = same
            .iter()
            .filter(|x| x.r.is_some_and(|v| v >= target))
            .map(|x| x.trials)
            .min();
        rows.push(TrialsNeeded {
            model: r.model.clone(),
            kind: r.kind,
            parameter: r.parameter.clone(),
            target_r: target,
            trials,
            r_at_largest: same.iter().find(|x| x.trials == largest).and_then(|x| x.r),
        });
    }
    rows
}
