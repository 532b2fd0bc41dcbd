//! Observed information, standard errors and intervals at the optimum.

use super::optimise::StartResult;
use super::search::{Verdict, at_bound};
use super::{ParameterEstimate, SubjectFit};
use crate::likelihood::SubjectLikelihood;
use nalgebra::DMatrix;

/// 97.5 % quantile of the standard normal distribution.
pub(crate) const Z_975: f64 = 1.959_963_984_540_054;

/// Hessian of the negative log-posterior by central differences of its exact gradient,
/// step 1e-5·max(1, |θ_j|), symmetrised (common practice; Nocedal & Wright 2006, §8.1).
pub(crate) fn hessian(likelihood: &SubjectLikelihood<'_>, theta: &[f64]) -> DMatrix<f64> {
    let n = theta.len();
    let mut h = DMatrix::zeros(n, n);
    for j in 0..n {
        let step = 1e-5 * theta[j].abs().max(1.0);
        let mut up = theta.to_vec();
        let mut down = theta.to_vec();
        up[j] += step;
        down[j] -= step;
        let g_up = likelihood.evaluate(&up).gradient;
        let g_down = likelihood.evaluate(&down).gradient;
        for i in 0..n {
            h[(i, j)] = -(g_up[i] - g_down[i]) / (2.0 * step);
        }
    }
    (&h + h.transpose()) * 0.5
}

/// Likelihood evaluations [`summarise`] makes for `n_free` free parameters: the point itself
/// and two gradients per parameter for the Hessian.
pub(crate) fn evaluations(n_free: usize) -> usize {
    1 + 2 * n_free
}

/// Builds the fit record from the best start; `known` is [`hessian`] at the best point when it
/// has been computed already.
pub fn summarise(
    likelihood: &SubjectLikelihood<'_>,
    best: &StartResult,
    starts_at_best: usize,
    starts: usize,
    verdict: Verdict,
    known: Option<DMatrix<f64>>,
) -> SubjectFit {
    let model = likelihood.model();
    let subject = likelihood.subject();
    let theta = &best.theta;
    let evaluation = likelihood.evaluate(theta);
    let natural = likelihood.natural(theta);
    let transforms = likelihood.transforms();
    let free = model.free_slots();
    let bounded: Vec<bool> = free
        .iter()
        .zip(transforms)
        .map(|(&slot, t)| at_bound(natural[slot], t))
        .collect();
    let interior: Vec<usize> = (0..free.len()).filter(|&j| !bounded[j]).collect();
    let full = known.unwrap_or_else(|| hessian(likelihood, theta));
    let sub = DMatrix::from_fn(interior.len(), interior.len(), |a, b| {
        full[(interior[a], interior[b])]
    });
    let cholesky = sub.clone().cholesky();
    // ln|H| = 2 Σ ln L_ii for H = L Lᵀ.
    let ln_det_hessian = cholesky
        .as_ref()
        .map(|c| 2.0 * c.l_dirty().diagonal().iter().map(|d| d.ln()).sum::<f64>());
    let covariance = cholesky.map(|c| c.inverse());
    let hessian_ok = covariance.is_some() && sub.iter().all(|x| x.is_finite());
    let mut covariance_theta = None;
    let mut variance = vec![None; free.len()];
    if let Some(cov) = &covariance {
        for (a, &j) in interior.iter().enumerate() {
            variance[j] = Some(cov[(a, a)]);
        }
        if interior.len() == free.len() {
            covariance_theta = Some(
                (0..free.len())
                    .map(|i| (0..free.len()).map(|k| cov[(i, k)]).collect())
                    .collect(),
            );
        }
    }
    let mut estimates = Vec::with_capacity(model.parameters.len());
    for (slot, spec) in model.parameters.iter().enumerate() {
        let Some(j) = free.iter().position(|&s| s == slot) else {
            estimates.push(ParameterEstimate {
                name: spec.name.clone(),
                estimate: natural[slot],
                std_error: None,
                interval: None,
                at_bound: false,
                fixed: true,
            });
            continue;
        };
        let t = transforms[j];
        let (std_error, interval) = match variance[j] {
            Some(v) if v > 0.0 && v.is_finite() => {
                let se_theta = v.sqrt();
                // Delta method: SE(x) = |dx/dθ|·SE(θ).
                (
                    Some(t.slope(theta[j]).abs() * se_theta),
                    Some((
                        t.natural(theta[j] - Z_975 * se_theta),
                        t.natural(theta[j] + Z_975 * se_theta),
                    )),
                )
            }
            _ => (None, None),
        };
        estimates.push(ParameterEstimate {
            name: spec.name.clone(),
            estimate: natural[slot],
            std_error,
            interval,
            at_bound: bounded[j],
            fixed: false,
        });
    }
    let gradient_norm = evaluation
        .gradient
        .iter()
        .fold(0.0_f64, |m, g| m.max(g.abs()));
    let k = free.len() as f64;
    let n = likelihood.n_observations() as f64;
    let ln_l = evaluation.ln_likelihood;
    let log_evidence = match ln_det_hessian {
        Some(ln_det) if covariance_theta.is_some() && likelihood.has_proper_prior() => {
            // A declared prior is a density of x, the Hessian is of θ: ln p(x̂) + Σ ln|dx/dθ|
            // is the prior density of θ̂.
            let jacobian: f64 = if likelihood.group_prior().is_some() {
                0.0
            } else {
                theta
                    .iter()
                    .zip(transforms)
                    .map(|(&t, tr)| tr.slope(t).abs().ln())
                    .sum()
            };
            let value = laplace_log_evidence(ln_l + evaluation.ln_prior + jacobian, k, ln_det);
            value.is_finite().then_some(value)
        }
        _ => None,
    };
    SubjectFit {
        subject: subject.id.clone(),
        group: subject.group.clone(),
        model: model.name.clone(),
        scores_response_times: model.uses_response_times(),
        n_trials: likelihood.n_observations(),
        n_params: free.len(),
        log_likelihood: ln_l,
        log_prior: evaluation.ln_prior,
        aic: 2.0 * k - 2.0 * ln_l,
        bic: k * n.ln() - 2.0 * ln_l,
        starts_at_best,
        starts,
        converged: verdict.converged,
        status: verdict.status,
        hessian_ok,
        termination: verdict.stop.describe().to_string(),
        gradient_norm,
        estimates,
        theta: theta.clone(),
        covariance_theta,
        log_evidence,
    }
}

/// The Laplace approximation of the log marginal likelihood (Tierney & Kadane 1986; MacKay
/// 2003, §27): ln p(y) ≈ ln p(y | θ̂) + ln p(θ̂) + (k/2) ln 2π − ½ ln|H|, with θ̂ the posterior
/// mode, k its dimension and H the Hessian of −ln p(y, θ) at θ̂. `ln_joint` is
/// ln p(y | θ̂) + ln p(θ̂) and `ln_det_hessian` is ln|H|.
pub fn laplace_log_evidence(ln_joint: f64, k: f64, ln_det_hessian: f64) -> f64 {
    ln_joint + 0.5 * k * std::f64::consts::TAU.ln() - 0.5 * ln_det_hessian
}
