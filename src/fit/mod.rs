//! Per-subject maximum-likelihood (or, with declared priors, maximum a posteriori) fitting.
//!
//! For each subject: quasi-random starts inside the declared start ranges, screened by their
//! log-posterior ([`starts`]); from each, L-BFGS (Nocedal 1980; Liu & Nocedal 1989) with a
//! Moré–Thuente line search from argmin, on the unconstrained scale, with the exact gradient of
//! [`crate::likelihood`]; then an examination of the best point on the natural scale that finds
//! and escapes stalls at bounds, flat directions and value-blind optima ([`search`]), so that a
//! fit is either a real local optimum or says what is wrong. The number of runs that reached
//! the best optimum (within 0.01 log-likelihood) is reported. Standard errors come from the
//! observed information: the Hessian of the negative log-posterior at the optimum, by central
//! differences of the exact gradient, inverted by Cholesky factorisation, and mapped to the
//! natural scale by the delta method; 95 % intervals are θ̂ ± 1.96·SE(θ̂) mapped through the
//! parameter transform (so they respect the bounds). A parameter at a bound or a Hessian that
//! is not positive definite is flagged and gets no standard error.

mod hierarchical;
mod optimise;
pub mod prior_regression;
pub mod search;
pub mod starts;
mod uncertainty;

use crate::data::{Subject, TrialTable};
use crate::likelihood::{DataMismatch, SubjectLikelihood};
use crate::model::Model;
use rayon::prelude::*;
use search::Verdict;
use starts::StartPlan;

pub use hierarchical::{
    EmOptions, EmProgress, GroupFit, GroupParameter, PriorRegression, fit_group, prior_m_step,
    sampled_log_marginal,
};
pub use optimise::{StartResult, Stop};
pub use uncertainty::laplace_log_evidence;

/// Settings of a fit.
#[derive(Clone, Debug, PartialEq)]
pub struct FitOptions {
    /// Starts per subject.
    pub starts: usize,
    /// Seed of the start points; results depend on it and on nothing else (not the threads).
    pub seed: u64,
    /// L-BFGS iterations per start.
    pub max_iterations: u64,
    /// Response deadline in seconds (trials without response then enter the likelihood).
    pub deadline: Option<f64>,
    /// Response lock in seconds from offer onset (no response possible before it).
    pub lock: Option<f64>,
}

impl Default for FitOptions {
    fn default() -> Self {
        FitOptions {
            starts: 10,
            seed: 1,
            max_iterations: 400,
            deadline: None,
            lock: None,
        }
    }
}

/// One parameter's estimate.
#[derive(Clone, Debug, PartialEq)]
pub struct ParameterEstimate {
    /// Name.
    pub name: String,
    /// Estimate on the natural scale (the fixed value for fixed parameters).
    pub estimate: f64,
    /// Standard error on the natural scale (delta method); None when fixed, at a bound, or the
    /// Hessian is not positive definite.
    pub std_error: Option<f64>,
    /// 95 % interval on the natural scale.
    pub interval: Option<(f64, f64)>,
    /// The estimate lies at (numerically indistinguishable from) a bound.
    pub at_bound: bool,
    /// The parameter was fixed, not estimated.
    pub fixed: bool,
}

/// The fit of one model to one subject.
#[derive(Clone, Debug, PartialEq)]
pub struct SubjectFit {
    /// Subject label.
    pub subject: String,
    /// Group label.
    pub group: String,
    /// Model name.
    pub model: String,
    /// The likelihood scores response times as well as choices.
    pub scores_response_times: bool,
    /// Trials entering the likelihood.
    pub n_trials: usize,
    /// Free parameters.
    pub n_params: usize,
    /// ln L at the optimum.
    pub log_likelihood: f64,
    /// ln prior at the optimum (0 without priors).
    pub log_prior: f64,
    /// Akaike information criterion, 2k − 2 ln L (Akaike 1974).
    pub aic: f64,
    /// Bayesian information criterion, k ln n − 2 ln L (Schwarz 1978).
    pub bic: f64,
    /// Runs whose optimum is within 0.01 of the best log-posterior.
    pub starts_at_best: usize,
    /// L-BFGS runs made (screened starts and escape searches).
    pub starts: usize,
    /// The best point is a real local optimum: see [`search`] for the tests it passed.
    pub converged: bool,
    /// What the examination of the best point found, in words ("converged", or what is wrong).
    pub status: String,
    /// The Hessian at the optimum is positive definite.
    pub hessian_ok: bool,
    /// Why the optimiser stopped on the best run, in words.
    pub termination: String,
    /// Largest |∂ log-posterior/∂θ| at the optimum.
    pub gradient_norm: f64,
    /// All parameters (fixed ones included), in model order.
    pub estimates: Vec<ParameterEstimate>,
    /// Unconstrained optimum of the free parameters.
    pub theta: Vec<f64>,
    /// Covariance of θ (inverse observed information) when the Hessian is positive definite.
    pub covariance_theta: Option<Vec<Vec<f64>>>,
    /// Laplace approximation of ln p(data) when every free parameter has a proper prior
    /// (declared, or the group prior of an empirical-Bayes fit) and the Hessian is positive
    /// definite; see [`laplace_log_evidence`].
    pub log_evidence: Option<f64>,
}

/// Tolerance on the log-posterior for counting starts that reached the best optimum.
pub const SAME_OPTIMUM: f64 = 0.01;

/// Fits one model to one subject: L-BFGS from the screened starts of [`StartPlan`], then the
/// examination and escape search of [`search`], then standard errors at the best point. The
/// starts depend on the seed and the subject's label only.
pub fn fit_subject(likelihood: &SubjectLikelihood<'_>, options: &FitOptions) -> SubjectFit {
    fit_subject_with_work(likelihood, options).0
}

/// As [`fit_subject`], with the likelihood evaluations each stage made (for benchmarks).
pub fn fit_subject_with_work(
    likelihood: &SubjectLikelihood<'_>,
    options: &FitOptions,
) -> (SubjectFit, search::Work) {
    let plan = StartPlan::new(likelihood, options.seed);
    let starts = options.starts.max(1);
    // A model computed on a grid searches on a coarser one first (search::search_refined).
    let coarse_model = likelihood.model().on_coarser_grid();
    let coarse = coarse_model
        .as_ref()
        .and_then(|m| likelihood.with_model(m).ok());
    let searched = match &coarse {
        Some(coarse) => {
            search::search_refined(likelihood, coarse, &plan, starts, options.max_iterations)
        }
        None => search::search(likelihood, &plan, starts, options.max_iterations),
    };
    let mut work = searched.work;
    // The curvature taken at the first optimum is the observed information when that optimum
    // is the best point (the same function at the same θ).
    let known = searched
        .curvature
        .filter(|(theta, _)| *theta == searched.runs[searched.best].theta)
        .map(|(_, h)| h);
    work.standard_errors = if known.is_some() {
        1
    } else {
        uncertainty::evaluations(likelihood.n_free())
    };
    let fit = uncertainty::summarise(
        likelihood,
        &searched.runs[searched.best],
        searched.starts_at_best,
        searched.verdict.runs,
        searched.verdict,
        known,
    );
    (fit, work)
}

/// The fit record of run `best` of several, counting the runs that reached it.
fn summarise_best(
    likelihood: &SubjectLikelihood<'_>,
    results: &[StartResult],
    best: usize,
    verdict: Verdict,
) -> SubjectFit {
    uncertainty::summarise(
        likelihood,
        &results[best],
        search::at_best(results, best),
        results.len(),
        verdict,
        None,
    )
}

/// A (model, subject) pair that could not be fitted.
#[derive(Clone, Debug, PartialEq)]
pub struct Skipped {
    /// Model name.
    pub model: String,
    /// Why.
    pub reason: DataMismatch,
}

/// The outcome of fitting one model to one subject: the fit, or why the pair could not be fitted.
pub type Outcome = Result<SubjectFit, Skipped>;

/// Fits every model to every subject, subjects in parallel on `threads` threads (0: all cores).
/// Results come in (model, subject) order and do not depend on the number of threads: each
/// subject's starts come from the seed and its label.
pub fn fit_table(
    models: &[Model],
    table: &TrialTable,
    options: &FitOptions,
    threads: usize,
    progress: &(dyn Fn() + Sync),
) -> Result<(Vec<SubjectFit>, Vec<Skipped>), rayon::ThreadPoolBuildError> {
    let outcomes = fit_table_each(models, table, options, threads, &|_| progress())?;
    let mut fits = Vec::new();
    let mut skipped = Vec::new();
    for outcome in outcomes {
        match outcome {
            Ok(f) => fits.push(f),
            Err(s) => skipped.push(s),
        }
    }
    Ok((fits, skipped))
}

/// As [`fit_table`], with every pair's outcome in (model, subject) order; `finished` sees each
/// outcome as soon as its pair is done (in the order the threads finish them), e.g. to journal
/// it.
pub fn fit_table_each(
    models: &[Model],
    table: &TrialTable,
    options: &FitOptions,
    threads: usize,
    finished: &(dyn Fn(&Outcome) + Sync),
) -> Result<Vec<Outcome>, rayon::ThreadPoolBuildError> {
    let pool = rayon::ThreadPoolBuilder::new()
        .num_threads(threads)
        .build()?;
    let jobs: Vec<(&Model, &Subject)> = models
        .iter()
        .flat_map(|m| table.subjects.iter().map(move |s| (m, s)))
        .collect();
    Ok(pool.install(|| {
        jobs.par_iter()
            .map(|&(model, subject)| {
                // After a stop request the remaining pairs are not fitted; the caller writes
                // nothing (crate::progress::request_stop).
                if crate::progress::stop_requested() {
                    return Err(Skipped {
                        model: model.name.clone(),
                        reason: DataMismatch {
                            subject: subject.id.clone(),
                            message: crate::progress::Stopped.to_string(),
                        },
                    });
                }
                let outcome = SubjectLikelihood::new(model, subject, options.deadline)
                    .map(|lik| fit_subject(&lik.with_lock(options.lock), options))
                    .map_err(|reason| Skipped {
                        model: model.name.clone(),
                        reason,
                    });
                finished(&outcome);
                outcome
            })
            .collect()
    }))
}

/// Empirical-Bayes fits (see [`fit_group`]) of every model, from the per-subject fits `fits` of
/// [`fit_table`]: one group prior over all subjects (scope "all"), or with `per_group` one per
/// group label. Subjects are in table order within each scope; subject i's random draws come
/// from stream i, so results do not depend on `threads`. A scope with fewer than
/// [`MIN_GROUP_SUBJECTS`] fitted subjects is skipped with the reason. With `scores`, each
/// scope's prior mean is a regression on the participants' scores, centred (when asked) within
/// the scope ([`prior_regression`]); a scope whose scores cannot be estimated is skipped with the
/// reason.
#[allow(clippy::too_many_arguments)]
pub fn fit_table_hierarchical(
    models: &[&Model],
    table: &TrialTable,
    fits: &[SubjectFit],
    options: &FitOptions,
    em: &EmOptions,
    per_group: bool,
    scores: Option<&prior_regression::SubjectScores>,
    threads: usize,
    progress: EmProgress<'_>,
) -> Result<(Vec<GroupFit>, Vec<Skipped>), rayon::ThreadPoolBuildError> {
    let pool = rayon::ThreadPoolBuilder::new()
        .num_threads(threads)
        .build()?;
    let mut scopes: Vec<String> = if per_group {
        table.subjects.iter().map(|s| s.group.clone()).collect()
    } else {
        vec!["all".to_string()]
    };
    scopes.sort();
    scopes.dedup();
    let mut groups = Vec::new();
    let mut skipped = Vec::new();
    pool.install(|| {
        for &model in models {
            for scope in &scopes {
                let mut members = Vec::new();
                let mut initial = Vec::new();
                for (i, subject) in table.subjects.iter().enumerate() {
                    if per_group && subject.group != *scope {
                        continue;
                    }
                    if let Some(f) = fits
                        .iter()
                        .find(|f| f.model == model.name && f.subject == subject.id)
                    {
                        members.push((i, subject));
                        initial.push(f);
                    }
                }
                let outcome = if members.len() < MIN_GROUP_SUBJECTS {
                    Err(DataMismatch {
                        subject: format!("scope {scope}"),
                        message: format!(
                            "{} fitted subjects; a group prior needs at least {MIN_GROUP_SUBJECTS}",
                            members.len()
                        ),
                    })
                } else {
                    fit_group(
                        model, scope, &members, &initial, scores, options, em, progress,
                    )
                };
                match outcome {
                    Ok(g) => groups.push(g),
                    Err(reason) => skipped.push(Skipped {
                        model: model.name.clone(),
                        reason,
                    }),
                }
            }
        }
    });
    Ok((groups, skipped))
}

/// Fewest subjects for which a group prior is estimated.
pub const MIN_GROUP_SUBJECTS: usize = 3;
