//! The Gaussian group prior on the unconstrained parameters of an empirical-Bayes fit.

use nalgebra::{DMatrix, DVector};
use rand::Rng;
use rand_distr::{Distribution, StandardNormal};

/// θ ~ N(μ, Σ) on the unconstrained scale of the free parameters, with Σ diagonal (independent
/// parameters) or full (the group level of Huys et al. 2011).
#[derive(Clone, Debug, PartialEq)]
pub struct GroupPrior {
    /// Mean μ of each free parameter.
    pub mean: Vec<f64>,
    /// Covariance Σ (row by row); diagonal for [`GroupPrior::diagonal`].
    pub covariance: Vec<Vec<f64>>,
    /// Lower Cholesky factor L of Σ = L Lᵀ.
    cholesky: DMatrix<f64>,
    /// ln|Σ|.
    ln_det: f64,
    /// Σ is diagonal.
    is_diagonal: bool,
}

impl GroupPrior {
    /// Independent parameters: Σ = diag(variance); None unless every variance is finite and
    /// positive.
    pub fn diagonal(mean: Vec<f64>, variance: Vec<f64>) -> Option<GroupPrior> {
        let k = mean.len();
        let covariance: Vec<Vec<f64>> = (0..k)
            .map(|i| {
                (0..k)
                    .map(|j| if i == j { variance[i] } else { 0.0 })
                    .collect()
            })
            .collect();
        let mut prior = GroupPrior::full(mean, covariance)?;
        prior.is_diagonal = true;
        Some(prior)
    }

    /// A full covariance; None unless it is finite, symmetric to rounding (relative 1e-10) and
    /// positive definite (Cholesky succeeds). It is stored symmetrised, (Σ + Σᵀ)/2.
    pub fn full(mean: Vec<f64>, covariance: Vec<Vec<f64>>) -> Option<GroupPrior> {
        let k = mean.len();
        if covariance.len() != k || covariance.iter().any(|r| r.len() != k) {
            return None;
        }
        let raw = DMatrix::from_fn(k, k, |i, j| covariance[i][j]);
        if raw.iter().any(|x| !x.is_finite())
            || (&raw - raw.transpose()).amax() > 1e-10 * raw.amax()
        {
            return None;
        }
        let matrix = (&raw + raw.transpose()) * 0.5;
        let covariance: Vec<Vec<f64>> = (0..k)
            .map(|i| (0..k).map(|j| matrix[(i, j)]).collect())
            .collect();
        let cholesky = matrix.cholesky()?.l();
        let ln_det = 2.0 * cholesky.diagonal().iter().map(|d| d.ln()).sum::<f64>();
        let is_diagonal = (0..k).all(|i| (0..k).all(|j| i == j || covariance[i][j] == 0.0));
        Some(GroupPrior {
            mean,
            covariance,
            cholesky,
            ln_det,
            is_diagonal,
        })
    }

    /// Number of parameters.
    pub fn dimension(&self) -> usize {
        self.mean.len()
    }

    /// The variances Σ_jj.
    pub fn variance(&self) -> Vec<f64> {
        (0..self.dimension())
            .map(|j| self.covariance[j][j])
            .collect()
    }

    /// Σ is diagonal.
    pub fn is_diagonal(&self) -> bool {
        self.is_diagonal
    }

    /// ln N(θ; μ, Σ) = −½[(θ − μ)ᵀ Σ⁻¹ (θ − μ) + ln|Σ| + k ln 2π] and its gradient −Σ⁻¹(θ − μ)
    /// (the multivariate normal density; e.g. Bishop 2006, eq. 2.43), through the Cholesky
    /// factor: z = L⁻¹(θ − μ), quadratic form zᵀz, gradient −L⁻ᵀz.
    pub fn ln_density_with_gradient(&self, theta: &[f64]) -> (f64, Vec<f64>) {
        let k = self.dimension();
        let d = DVector::from_fn(k, |i, _| theta[i] - self.mean[i]);
        let z = self
            .cholesky
            .solve_lower_triangular(&d)
            .expect("a Cholesky factor has a positive diagonal");
        let slope = self
            .cholesky
            .transpose()
            .solve_upper_triangular(&z)
            .expect("a Cholesky factor has a positive diagonal");
        let value = -0.5 * (z.norm_squared() + self.ln_det + k as f64 * std::f64::consts::TAU.ln());
        (value, slope.iter().map(|g| -g).collect())
    }

    /// One draw θ = μ + L z, z standard normal.
    pub fn sample(&self, rng: &mut dyn Rng) -> Vec<f64> {
        let k = self.dimension();
        let z = DVector::from_fn(k, |_, _| {
            let x: f64 = StandardNormal.sample(&mut *rng);
            x
        });
        let x = &self.cholesky * z;
        (0..k).map(|i| self.mean[i] + x[i]).collect()
    }
}
