//! Empirical-Bayes group priors: expectation–maximisation with the Laplace approximation
//! (Huys et al. 2011, PLoS Comput Biol 7:e1002028; the same scheme as in Daw 2011).
//!
//! The free parameters of subject i on the unconstrained scale, θ_i, are taken to come from a
//! Gaussian group distribution N(μ, Σ), Σ diagonal by default (Σ = diag σ²) or full. Starting
//! from the spread of the per-subject maximum-likelihood fits, the two steps alternate:
//!
//! - E-step: each subject's posterior mode θ̂_i = argmax ln p(y_i | θ) + ln N(θ; μ, σ²) (L-BFGS
//!   from the previous mode and from μ) and its covariance Σ_i, the inverse Hessian of the
//!   negative log-posterior there (Laplace approximation);
//! - M-step: μ = (1/N) Σ_i θ̂_i and Σ = (1/N) Σ_i [(θ̂_i − μ)(θ̂_i − μ)ᵀ + Σ_i], only the
//!   diagonal when Σ is diagonal (σ_j² = (1/N) Σ_i [(θ̂_ij − μ_j)² + (Σ_i)_jj]);
//!
//! until no group mean, standard deviation or (full Σ) scaled covariance moves by more than the
//! tolerance. The fitted prior then gives the
//! shrunken estimates θ̂_i and, by sampling θ from it, the integrated BIC
//! iBIC = −2 Σ_i ln[(1/S) Σ_s p(y_i | θ_s)] + m ln n (m group parameters: 2k for k free
//! parameters with diagonal Σ, k + k(k+1)/2 with full Σ; n trials in all; Huys et al. 2011). Subject i's draws come from stream i of the
//! seeded generator.
//!
//! With participant scores ([`super::prior_regression`]) the prior mean of subject i is B z_i,
//! z_i = (1, scores − centres): the M-step regresses the modes on z_i (μ above is the case
//! z_i = 1), the E-step of subject i uses N(B z_i, Σ), its iBIC draws come from that prior, and
//! the iBIC counts k(p + 1) means instead of k. [`GroupParameter::theta_mean`] is then the
//! intercept (the group mean at the centre of the scores), `theta_sd` the residual spread, and
//! the natural-scale summaries describe a participant at the centre.
//!
//! Non-decision time has a subject-specific upper bound (below the fastest response), so its θ
//! means "position between 0 and that bound"; natural-scale group summaries of ndt use the median
//! of the subjects' bounds.

use super::prior_regression::{
    Design, PriorCoefficient, SubjectScores, coefficient_covariance, coefficient_table,
    regression_coefficients,
};
use super::{FitOptions, SubjectFit, optimise, uncertainty};
use crate::data::Subject;
use crate::likelihood::{DataMismatch, GroupPrior, SubjectLikelihood};
use crate::model::{Model, Transform};
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use rayon::prelude::*;

/// Settings of the expectation–maximisation.
#[derive(Clone, Debug, PartialEq)]
pub struct EmOptions {
    /// Stop when no group mean or standard deviation (unconstrained scale) moves by more.
    pub tolerance: f64,
    /// At most this many iterations.
    pub max_iterations: usize,
    /// Samples from the fitted prior per subject for the integrated BIC.
    pub ibic_samples: usize,
    /// Seed of those samples.
    pub seed: u64,
    /// Estimate the full covariance of the group prior (correlated parameters) rather than
    /// only the variances.
    pub full_covariance: bool,
}

impl Default for EmOptions {
    fn default() -> Self {
        EmOptions {
            tolerance: 1e-3,
            max_iterations: 200,
            ibic_samples: 2000,
            seed: 1,
            full_covariance: false,
        }
    }
}

/// Stream of the draws behind the natural-scale summaries (subjects use streams 0, 1, …).
const SUMMARY_STREAM: u64 = u64::MAX;

/// Smallest group variance on the unconstrained scale: keeps the prior proper when every
/// subject agrees (common practice).
const MIN_VARIANCE: f64 = 1e-6;

/// |θ| above which a maximum-likelihood start is pulled in (a logistic parameter at a bound has
/// θ → ±∞; |θ| = 8 is within 3.4e-4 of the bound).
const START_LIMIT: f64 = 8.0;

/// One free parameter of a group fit.
#[derive(Clone, Debug, PartialEq)]
pub struct GroupParameter {
    /// Name.
    pub name: String,
    /// Group mean μ on the unconstrained scale.
    pub theta_mean: f64,
    /// Group standard deviation σ on the unconstrained scale.
    pub theta_sd: f64,
    /// Standard error of μ from the Laplace-approximated marginal likelihood:
    /// 1/SE² = Σ_i 1/(σ² + C_ij), C_ij the likelihood-only variance of subject i,
    /// 1/C_ij = 1/(Σ_i)_jj − 1/σ² (normal–normal model; Gelman et al. 2013, §5.4). With
    /// participant scores, the intercept's standard error of the prior regression
    /// ([`super::prior_regression::coefficient_covariance`]).
    pub theta_mean_se: f64,
    /// The transform used for the natural-scale summaries.
    pub transform: Transform,
    /// Median of the group distribution on the natural scale, T(μ) (T is monotone).
    pub natural_median: f64,
    /// 95 % interval of that median, T(μ ± 1.96 SE).
    pub natural_median_interval: (f64, f64),
    /// Mean of the group distribution on the natural scale (from the prior samples).
    pub natural_mean: f64,
    /// Standard deviation of the group distribution on the natural scale (prior samples).
    pub natural_sd: f64,
}

/// The empirical-Bayes fit of one model to one set of subjects (all, or one group).
#[derive(Clone, Debug, PartialEq)]
pub struct GroupFit {
    /// Model name.
    pub model: String,
    /// "all", or the group label when each group has its own prior.
    pub scope: String,
    /// The free parameters' group distribution.
    pub parameters: Vec<GroupParameter>,
    /// The fitted prior.
    pub prior: GroupPrior,
    /// Iterations run.
    pub iterations: usize,
    /// The tolerance was met within the iteration limit.
    pub converged: bool,
    /// Last max |Δμ|, |Δσ|.
    pub last_change: f64,
    /// Subjects whose Hessian was not positive definite in the last E-step (their variance
    /// term in the M-step is the prior variance).
    pub subjects_without_covariance: usize,
    /// Per-subject posterior-mode fits under the fitted prior (the shrunken estimates).
    pub subjects: Vec<SubjectFit>,
    /// Trials entering the likelihood, all subjects.
    pub n_trials: usize,
    /// Σ_i ln[(1/S) Σ_s p(y_i | θ_s)], θ_s from the fitted prior.
    pub log_marginal_likelihood: f64,
    /// Monte Carlo standard error of that sum.
    pub log_marginal_likelihood_se: f64,
    /// Σ_i of the per-subject Laplace approximations of ln p(y_i | μ, σ²).
    pub log_marginal_laplace: Option<f64>,
    /// Group parameters counted by the integrated BIC (means, variances, covariances).
    pub n_group_parameters: usize,
    /// Integrated BIC.
    pub ibic: f64,
    /// With participant scores: the prior mean's regression on them.
    pub regression: Option<PriorRegression>,
}

/// The regression of the prior mean on participant scores of one group fit.
#[derive(Clone, Debug, PartialEq)]
pub struct PriorRegression {
    /// The scores were centred on their mean over the subjects of this prior.
    pub centred: bool,
    /// One per free parameter and term (intercept first), parameter by parameter.
    pub coefficients: Vec<PriorCoefficient>,
}

/// What the caller is told after each EM iteration: (model, scope, iteration, change).
pub type EmProgress<'a> = &'a (dyn Fn(&str, &str, usize, f64) + Sync);

/// Fits the group prior of `model` over `subjects` by EM, starting from their per-subject fits
/// `initial` (same order; maximum likelihood or MAP). `index` gives each subject's stream of the
/// seeded generator (its position in the whole table), so results do not depend on threads.
/// With `scores`, the prior mean is a linear function of each subject's scores (see the module
/// documentation); a design that cannot be estimated (too few subjects, a score that does not
/// vary, collinear scores) is an error saying why.
#[allow(clippy::too_many_arguments)]
pub fn fit_group(
    model: &Model,
    scope: &str,
    subjects: &[(usize, &Subject)],
    initial: &[&SubjectFit],
    scores: Option<&SubjectScores>,
    options: &FitOptions,
    em: &EmOptions,
    progress: EmProgress<'_>,
) -> Result<GroupFit, DataMismatch> {
    if subjects.is_empty() || subjects.len() != initial.len() {
        return Err(DataMismatch {
            subject: format!("scope {scope}"),
            message: format!(
                "{} subjects with {} initial fits: a group prior needs subjects, each with its fit",
                subjects.len(),
                initial.len()
            ),
        });
    }
    let likelihoods: Vec<SubjectLikelihood<'_>> = subjects
        .iter()
        .map(|(_, s)| {
            SubjectLikelihood::new(model, s, options.deadline).map(|l| l.with_lock(options.lock))
        })
        .collect::<Result<_, _>>()?;
    let k = model.free_slots().len();
    let mismatch = |message: String| DataMismatch {
        subject: format!("scope {scope}"),
        message,
    };
    let design: Option<Design> = match scores {
        Some(scores) => {
            let ids: Vec<&str> = subjects.iter().map(|(_, s)| s.id.as_str()).collect();
            Some(Design::new(scores, &ids).map_err(|e| mismatch(e.to_string()))?)
        }
        None => None,
    };
    let rows: Option<&[Vec<f64>]> = design.as_ref().map(|d| d.rows.as_slice());
    let singular = || {
        mismatch(format!(
            "the group prior of model {} could not be estimated: the regression on the \
             participant scores has no unique solution or a mean is not finite",
            model.name
        ))
    };
    let mut modes: Vec<Vec<f64>> = initial
        .iter()
        .map(|f| {
            f.theta
                .iter()
                .map(|t| t.clamp(-START_LIMIT, START_LIMIT))
                .collect()
        })
        .collect();
    let initial_cov: Vec<Option<&Vec<Vec<f64>>>> = initial
        .iter()
        .map(|f| f.covariance_theta.as_ref())
        .collect();
    let (mut prior, mut coefficients) =
        prior_m_step(&modes, &initial_cov, None, rows, em.full_covariance).ok_or_else(singular)?;
    let mut iterations = 0;
    let mut last_change;
    let mut fits: Vec<SubjectFit>;
    loop {
        iterations += 1;
        let priors =
            subject_priors(&prior, &coefficients, rows, subjects.len()).ok_or_else(singular)?;
        fits = e_step(&likelihoods, &priors, &modes, options);
        modes = fits.iter().map(|f| f.theta.clone()).collect();
        let covariances: Vec<Option<&Vec<Vec<f64>>>> =
            fits.iter().map(|f| f.covariance_theta.as_ref()).collect();
        let (next, next_coefficients) =
            prior_m_step(&modes, &covariances, Some(&prior), rows, em.full_covariance)
                .ok_or_else(singular)?;
        last_change = change(&prior, &next).max(slope_change(&coefficients, &next_coefficients));
        progress(&model.name, scope, iterations, last_change);
        prior = next;
        coefficients = next_coefficients;
        // A stop request ends the EM here; the command then writes nothing (crate::progress).
        if last_change < em.tolerance
            || iterations >= em.max_iterations
            || crate::progress::stop_requested()
        {
            break;
        }
    }
    // The reported fits are the modes under the final prior.
    let priors =
        subject_priors(&prior, &coefficients, rows, subjects.len()).ok_or_else(singular)?;
    fits = e_step(&likelihoods, &priors, &modes, options);
    let subjects_without_covariance = fits.iter().filter(|f| f.covariance_theta.is_none()).count();
    // Each subject's draws come from its own stream, so the Monte Carlo errors are independent
    // and add in quadrature.
    let marginals: Vec<(f64, f64)> = likelihoods
        .par_iter()
        .zip(subjects)
        .zip(&priors)
        .map(|((lik, &(index, _)), prior)| {
            let samples = prior_samples(prior, em.ibic_samples, em.seed, index as u64);
            sampled_log_marginal(lik, &samples)
        })
        .collect();
    if let Some(((_, subject), _)) = subjects
        .iter()
        .zip(&marginals)
        .find(|(_, m)| !m.0.is_finite())
    {
        return Err(DataMismatch {
            subject: subject.id.clone(),
            message: format!(
                "no draw from the fitted group prior of model {} gives a finite likelihood,                  so the integrated BIC is undefined (try more --ibic-samples)",
                model.name
            ),
        });
    }
    // The natural-scale summaries of the group distribution use a stream of their own.
    let samples = prior_samples(&prior, em.ibic_samples, em.seed, SUMMARY_STREAM);
    let log_marginal_likelihood: f64 = marginals.iter().map(|m| m.0).sum();
    let log_marginal_likelihood_se = marginals.iter().map(|m| m.1 * m.1).sum::<f64>().sqrt();
    let n_trials: usize = likelihoods.iter().map(|l| l.n_observations()).sum();
    let n_means = k * design.as_ref().map_or(1, |d| d.terms.len());
    let n_group_parameters = if prior.is_diagonal() && !em.full_covariance {
        n_means + k
    } else {
        n_means + k * (k + 1) / 2
    };
    let ibic = -2.0 * log_marginal_likelihood + n_group_parameters as f64 * (n_trials as f64).ln();
    let log_marginal_laplace = fits.iter().map(|f| f.log_evidence).sum::<Option<f64>>();
    let mut parameters = summarise_parameters(model, &likelihoods, &prior, &fits, &samples);
    let regression = design.as_ref().map(|design| {
        let covariances: Vec<Option<&Vec<Vec<f64>>>> =
            fits.iter().map(|f| f.covariance_theta.as_ref()).collect();
        let covariance = coefficient_covariance(&prior.covariance, &covariances, &design.rows);
        let names: Vec<String> = parameters.iter().map(|p| p.name.clone()).collect();
        let mut table = coefficient_table(&names, design, &coefficients, covariance.as_ref());
        for (row, j) in table
            .iter_mut()
            .zip((0..k).flat_map(|j| std::iter::repeat_n(j, design.terms.len())))
        {
            let first = likelihoods[0].transforms()[j];
            row.scale_per_participant = likelihoods.iter().any(|l| l.transforms()[j] != first);
        }
        // The intercept's standard error replaces the one of the model without scores.
        for (parameter, row) in parameters
            .iter_mut()
            .zip(table.iter().step_by(design.terms.len()))
        {
            parameter.theta_mean_se = row.std_error.unwrap_or(f64::INFINITY);
            parameter.natural_median_interval = (
                parameter
                    .transform
                    .natural(row.estimate - uncertainty::Z_975 * parameter.theta_mean_se),
                parameter
                    .transform
                    .natural(row.estimate + uncertainty::Z_975 * parameter.theta_mean_se),
            );
        }
        PriorRegression {
            centred: scores.is_some_and(|s| s.centred),
            coefficients: table,
        }
    });
    Ok(GroupFit {
        model: model.name.clone(),
        scope: scope.to_string(),
        parameters,
        prior,
        iterations,
        converged: last_change < em.tolerance,
        last_change,
        subjects_without_covariance,
        subjects: fits,
        n_trials,
        log_marginal_likelihood,
        log_marginal_likelihood_se,
        log_marginal_laplace,
        n_group_parameters,
        ibic,
        regression,
    })
}

/// Each of the `n` subjects' prior: N(B z_i, Σ) with the design `rows`, else the common prior.
/// None when a mean is not finite.
fn subject_priors(
    prior: &GroupPrior,
    coefficients: &[Vec<f64>],
    rows: Option<&[Vec<f64>]>,
    n: usize,
) -> Option<Vec<GroupPrior>> {
    let Some(rows) = rows else {
        return Some(vec![prior.clone(); n]);
    };
    rows.iter()
        .map(|z| {
            let mean: Vec<f64> = coefficients
                .iter()
                .map(|b| b.iter().zip(z).map(|(b, z)| b * z).sum())
                .collect();
            if prior.is_diagonal() {
                GroupPrior::diagonal(mean, prior.variance())
            } else {
                GroupPrior::full(mean, prior.covariance.clone())
            }
        })
        .collect()
}

/// Posterior modes under each subject's prior `priors`, from the previous mode and from the
/// prior mean.
fn e_step(
    likelihoods: &[SubjectLikelihood<'_>],
    priors: &[GroupPrior],
    modes: &[Vec<f64>],
    options: &FitOptions,
) -> Vec<SubjectFit> {
    likelihoods
        .par_iter()
        .zip(modes)
        .zip(priors)
        .map(|((lik, mode), prior)| {
            let lik = lik.clone().with_group_prior(prior.clone());
            let starts = [mode.clone(), prior.mean.clone()];
            let results: Vec<_> = starts
                .into_iter()
                .map(|s| optimise::run_start(&lik, s, options.max_iterations, &[]))
                .collect();
            let best = super::search::best_of(&results);
            let verdict = super::search::verdict_of_run(&lik, &results[best]);
            super::summarise_best(&lik, &results, best, verdict)
        })
        .collect()
}

/// The M-step of the group prior (Huys et al. 2011): without a design, μ = (1/N) Σ_i θ̂_i and
/// Σ = (1/N) Σ_i [(θ̂_i − μ)(θ̂_i − μ)ᵀ + Σ_i]; with design rows z_i (participant scores, see
/// [`super::prior_regression`]), B = (Σ_i θ̂_i z_iᵀ)(Σ_i z_i z_iᵀ)⁻¹ and the same Σ with B z_i in
/// place of μ. `modes` are the θ̂_i, `covariances` the posterior covariances Σ_i; off-diagonal
/// terms of Σ are 0 unless `full`. A subject without a covariance contributes the previous
/// prior covariance (it is taken as uninformative about its deviation); before any prior
/// exists, the spread of the modes alone. Variances are floored at `MIN_VARIANCE`; a full
/// estimate that is not positive definite falls back to its diagonal.
///
/// Returns the prior (its mean: μ, or the intercepts B_j0) and the coefficients, k rows of
/// p + 1 (one, μ_j, without a design); None when the design's regression has no unique solution.
pub fn prior_m_step(
    modes: &[Vec<f64>],
    covariances: &[Option<&Vec<Vec<f64>>>],
    previous: Option<&GroupPrior>,
    rows: Option<&[Vec<f64>]>,
    full: bool,
) -> Option<(GroupPrior, Vec<Vec<f64>>)> {
    let k = modes.first()?.len();
    let n = modes.len() as f64;
    let coefficients: Vec<Vec<f64>> = match rows {
        Some(rows) => regression_coefficients(modes, rows)?,
        None => (0..k)
            .map(|j| vec![modes.iter().map(|m| m[j]).sum::<f64>() / n])
            .collect(),
    };
    let mean: Vec<f64> = coefficients.iter().map(|b| b[0]).collect();
    let mut scatter = vec![vec![0.0; k]; k];
    for (i, (m, c)) in modes.iter().zip(covariances).enumerate() {
        let centre: Vec<f64> = match rows {
            Some(rows) => coefficients
                .iter()
                .map(|b| b.iter().zip(&rows[i]).map(|(b, z)| b * z).sum())
                .collect(),
            None => mean.clone(),
        };
        let own: Option<&Vec<Vec<f64>>> = c.or(previous.map(|p| &p.covariance));
        for j in 0..k {
            for l in 0..k {
                if j != l && !full {
                    continue;
                }
                let c_jl = own.map_or(0.0, |c| c[j][l]);
                scatter[j][l] += ((m[j] - centre[j]) * (m[l] - centre[l]) + c_jl) / n;
            }
        }
    }
    for (j, row) in scatter.iter_mut().enumerate() {
        row[j] = row[j].max(MIN_VARIANCE);
    }
    let variance: Vec<f64> = (0..k).map(|j| scatter[j][j]).collect();
    let diagonal = || GroupPrior::diagonal(mean.clone(), variance.clone());
    let prior = if full {
        GroupPrior::full(mean.clone(), scatter).or_else(diagonal)
    } else {
        diagonal()
    }?;
    Some((prior, coefficients))
}

/// Largest change of a slope of the prior regression (0 without scores).
fn slope_change(a: &[Vec<f64>], b: &[Vec<f64>]) -> f64 {
    a.iter()
        .zip(b)
        .flat_map(|(x, y)| x.iter().zip(y).skip(1).map(|(x, y)| (x - y).abs()))
        .fold(0.0, f64::max)
}

/// Largest change of a group mean, a group standard deviation or (full covariance) a
/// covariance scaled by the new standard deviations.
fn change(a: &GroupPrior, b: &GroupPrior) -> f64 {
    let k = a.dimension();
    let mut largest: f64 = 0.0;
    for j in 0..k {
        largest = largest.max((a.mean[j] - b.mean[j]).abs());
        for l in 0..k {
            let (x, y) = (a.covariance[j][l], b.covariance[j][l]);
            let delta = if j == l {
                (x.sqrt() - y.sqrt()).abs()
            } else {
                (x - y).abs() / (b.covariance[j][j] * b.covariance[l][l]).sqrt()
            };
            largest = largest.max(delta);
        }
    }
    largest
}

/// S draws θ_s ~ N(μ, Σ) from a seeded generator (stream `stream`).
fn prior_samples(prior: &GroupPrior, n: usize, seed: u64, stream: u64) -> Vec<Vec<f64>> {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    rng.set_stream(stream);
    (0..n.max(1)).map(|_| prior.sample(&mut rng)).collect()
}

/// ln[(1/S) Σ_s p(y | θ_s)] by log-sum-exp, with its Monte Carlo standard error by the delta
/// method, sd(w)/(√S · mean(w)) for w_s = p(y | θ_s) (e.g. Robert & Casella 2004, §3.2).
/// Draws where the likelihood is not finite count as p = 0.
pub fn sampled_log_marginal(
    likelihood: &SubjectLikelihood<'_>,
    samples: &[Vec<f64>],
) -> (f64, f64) {
    let logs: Vec<f64> = samples
        .iter()
        .map(|theta| likelihood.ln_likelihood(theta))
        .map(|l| if l.is_finite() { l } else { f64::NEG_INFINITY })
        .collect();
    let top = logs.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    if !top.is_finite() {
        return (f64::NEG_INFINITY, f64::INFINITY);
    }
    let s = logs.len() as f64;
    let w: Vec<f64> = logs.iter().map(|l| (l - top).exp()).collect();
    let mean = w.iter().sum::<f64>() / s;
    let var = w.iter().map(|x| (x - mean).powi(2)).sum::<f64>() / (s - 1.0).max(1.0);
    (top + mean.ln(), (var / s).sqrt() / mean)
}

fn summarise_parameters(
    model: &Model,
    likelihoods: &[SubjectLikelihood<'_>],
    prior: &GroupPrior,
    fits: &[SubjectFit],
    samples: &[Vec<f64>],
) -> Vec<GroupParameter> {
    let free = model.free_slots();
    free.iter()
        .enumerate()
        .map(|(j, &slot)| {
            let transform = reference_transform(likelihoods, j);
            let (mu, var) = (prior.mean[j], prior.covariance[j][j]);
            let precision: f64 = fits
                .iter()
                .map(|f| {
                    let post = f.covariance_theta.as_ref().map_or(var, |c| c[j][j]);
                    let data_precision = (1.0 / post - 1.0 / var).max(0.0);
                    if data_precision > 0.0 {
                        1.0 / (var + 1.0 / data_precision)
                    } else {
                        0.0
                    }
                })
                .sum();
            let se = if precision > 0.0 {
                precision.recip().sqrt()
            } else {
                f64::INFINITY
            };
            let natural: Vec<f64> = samples.iter().map(|s| transform.natural(s[j])).collect();
            let n = natural.len() as f64;
            let natural_mean = natural.iter().sum::<f64>() / n;
            let natural_sd = (natural
                .iter()
                .map(|x| (x - natural_mean).powi(2))
                .sum::<f64>()
                / (n - 1.0).max(1.0))
            .sqrt();
            GroupParameter {
                name: model.parameters[slot].name.clone(),
                theta_mean: mu,
                theta_sd: var.sqrt(),
                theta_mean_se: se,
                transform,
                natural_median: transform.natural(mu),
                natural_median_interval: (
                    transform.natural(mu - uncertainty::Z_975 * se),
                    transform.natural(mu + uncertainty::Z_975 * se),
                ),
                natural_mean,
                natural_sd,
            }
        })
        .collect()
}

/// The transform of free parameter j common to the subjects; where it differs between them
/// (ndt's upper bound), the one with the median upper bound.
fn reference_transform(likelihoods: &[SubjectLikelihood<'_>], j: usize) -> Transform {
    let mut transforms: Vec<Transform> = likelihoods.iter().map(|l| l.transforms()[j]).collect();
    transforms.sort_by(|a, b| upper(a).total_cmp(&upper(b)));
    transforms[transforms.len() / 2]
}

fn upper(t: &Transform) -> f64 {
    match *t {
        Transform::Logistic { upper, .. } | Transform::ExpBelow { upper } => upper,
        Transform::Exp { .. } | Transform::Identity => f64::INFINITY,
    }
}
