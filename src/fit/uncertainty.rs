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

/// The block of `matrix` on the rows and columns `indices` (a principal submatrix).
pub(crate) fn principal_block(matrix: &DMatrix<f64>, indices: &[usize]) -> DMatrix<f64> {
    DMatrix::from_fn(indices.len(), indices.len(), |a, b| {
        matrix[(indices[a], indices[b])]
    })
}

/// The Newton step and decrement of a maximisation at a point where the objective f has
/// gradient `gradient` and `hessian` is H = −∇²f: the step s = H⁻¹·∇f to the maximum of f's
/// quadratic model, and the decrement λ = (∇fᵀ·H⁻¹·∇f)^½, whose half square λ²/2 is what that
/// step gains in the model (Boyd & Vandenberghe 2004, *Convex Optimization*, §9.5.1: for a
/// quadratic f exactly f(x*) − f(x)). Where H is the observed information, λ is also the
/// distance from x to the model's maximum in standard errors: λ² = sᵀ·H·s, the Mahalanobis
/// distance under the covariance H⁻¹. None where H is not positive definite (Cholesky fails) or
/// anything is not finite.
pub fn newton_decrement(gradient: &[f64], hessian: &DMatrix<f64>) -> Option<(f64, Vec<f64>)> {
    let g = nalgebra::DVector::from_column_slice(gradient);
    if !g.iter().chain(hessian.iter()).all(|x| x.is_finite()) {
        return None;
    }
    let step = hessian.clone().cholesky()?.solve(&g);
    let squared = g.dot(&step);
    // A NaN or infinite product (a numerically singular H) is no decrement; f64::max would
    // turn a NaN into 0.
    (squared.is_finite() && step.iter().all(|x| x.is_finite()))
        .then(|| (squared.max(0.0).sqrt(), step.iter().copied().collect()))
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
    let sub = principal_block(&full, &interior);
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

#[cfg(test)]
mod tests {
    use super::*;

    /// Boyd & Vandenberghe 2004, §9.5.1: for the quadratic f(x) = −½(x − m)ᵀA(x − m) the Newton
    /// step from any x lands on the maximum m, and λ²/2 equals f(m) − f(x) exactly.
    #[test]
    fn on_a_quadratic_the_newton_step_lands_on_the_maximum_and_half_the_squared_decrement_is_the_shortfall()
     {
        let a = DMatrix::from_row_slice(3, 3, &[4.0, 1.0, 0.5, 1.0, 3.0, -0.2, 0.5, -0.2, 2.0]);
        let m = [0.3, -1.2, 2.0];
        let x = [0.5, -1.0, 1.7];
        let d = nalgebra::DVector::from_iterator(3, (0..3).map(|i| x[i] - m[i]));
        let gradient: Vec<f64> = (-(&a * &d)).iter().copied().collect();
        let shortfall = 0.5 * d.dot(&(&a * &d));
        let (decrement, step) = newton_decrement(&gradient, &a).expect("A is positive definite");
        assert!((0.5 * decrement * decrement - shortfall).abs() < 1e-14 * shortfall.max(1.0));
        for i in 0..3 {
            assert!((x[i] + step[i] - m[i]).abs() < 1e-14, "coordinate {i}");
        }
    }

    /// A saddle (an indefinite H) has no Newton decrement: the quadratic model has no maximum.
    #[test]
    fn an_indefinite_curvature_has_no_decrement() {
        let h = DMatrix::from_row_slice(2, 2, &[1.0, 0.0, 0.0, -1.0]);
        assert!(newton_decrement(&[0.1, 0.1], &h).is_none());
        let nan = DMatrix::from_row_slice(1, 1, &[f64::NAN]);
        assert!(newton_decrement(&[0.1], &nan).is_none());
    }
}
