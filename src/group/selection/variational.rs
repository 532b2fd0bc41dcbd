//! Random-effects Bayesian model selection: the variational Dirichlet of Stephan et al. 2009,
//! free energies, the Bayesian omnibus risk and protected exceedance probabilities of Rigoux et
//! al. 2014, exceedance by closed form (two models) and Monte Carlo, and the between-group test.

use super::evidence::*;
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use rand_distr::{Distribution, Gamma};
use statrs::function::beta::beta_reg;
use statrs::function::gamma::{digamma, ln_gamma};

/// The logistic function 1/(1 + exp(−x)), without overflow for any finite x.
fn logistic(x: f64) -> f64 {
    if x >= 0.0 {
        1.0 / (1.0 + (-x).exp())
    } else {
        let e = x.exp();
        e / (1.0 + e)
    }
}

/// Settings of [`random_effects_bms`].
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct BmsOptions {
    /// Prior Dirichlet count of every model, α₀ (1: uniform prior over frequencies).
    pub alpha0: f64,
    /// Stop when no α changes by more than this between iterations.
    pub tolerance: f64,
    /// Iteration limit.
    pub max_iterations: usize,
    /// Monte Carlo samples for exceedance probabilities with more than two models.
    pub samples: usize,
    /// Seed of the Monte Carlo draws.
    pub seed: u64,
    /// Stream of the Monte Carlo draws (one per scope, so scopes do not share draws).
    pub stream: u64,
}

impl Default for BmsOptions {
    fn default() -> Self {
        BmsOptions {
            alpha0: 1.0,
            tolerance: 1e-10,
            max_iterations: 100_000,
            samples: 1_000_000,
            seed: 1,
            stream: 0,
        }
    }
}

/// The variational fixed point of Stephan et al. (2009, NeuroImage 46:1004, their variational
/// Bayesian algorithm): starting from α = α₀,
///
/// ln u_nk = L_nk + ψ(α_k) − ψ(Σ_j α_j),  g_nk = u_nk / Σ_j u_nj,  α_k = α₀ + Σ_n g_nk,
///
/// repeated until no α_k changes by more than `tolerance` (L_nk: log evidence of model k for
/// subject n; g_nk is normalised by log-sum-exp). Returns (α, g, iterations, converged); g is
/// the assignment at the final α.
pub fn variational_dirichlet(
    log_evidence: &[Vec<f64>],
    alpha0: f64,
    tolerance: f64,
    max_iterations: usize,
) -> (Vec<f64>, Vec<Vec<f64>>, usize, bool) {
    let k = log_evidence.first().map_or(0, Vec::len);
    let assign = |alpha: &[f64]| -> Vec<Vec<f64>> {
        let total = digamma(alpha.iter().sum());
        log_evidence
            .iter()
            .map(|row| {
                let log_u: Vec<f64> = row
                    .iter()
                    .zip(alpha)
                    .map(|(l, a)| l + digamma(*a) - total)
                    .collect();
                let norm = log_sum_exp(&log_u);
                log_u.iter().map(|u| (u - norm).exp()).collect()
            })
            .collect()
    };
    let mut alpha = vec![alpha0; k];
    let mut iterations = 0;
    let mut converged = false;
    while iterations < max_iterations {
        iterations += 1;
        let g = assign(&alpha);
        let next: Vec<f64> = (0..k)
            .map(|j| alpha0 + g.iter().map(|row| row[j]).sum::<f64>())
            .collect();
        let change = next
            .iter()
            .zip(&alpha)
            .map(|(a, b)| (a - b).abs())
            .fold(0.0, f64::max);
        alpha = next;
        if change <= tolerance {
            converged = true;
            break;
        }
    }
    let g = assign(&alpha);
    (alpha, g, iterations, converged)
}

/// Variational free energy of the random-effects model (the lower bound on ln p(y) of
/// Stephan et al. 2009, as used by Rigoux et al. 2014), with q(r) = Dir(α) and q(m_n) = g_n:
///
/// F₁ = Σ_n Σ_k g_nk [L_nk + ψ(α_k) − ψ(Σα) − ln g_nk]
///      + ln Γ(Σα₀) − Σ_k ln Γ(α₀) − ln Γ(Σα) + Σ_k ln Γ(α_k) + Σ_k (α₀ − α_k)[ψ(α_k) − ψ(Σα)],
///
/// that is E_q[ln p(y|m)] + E_q[ln p(m|r)] − E_q[ln q(m)] − KL(Dir(α) ‖ Dir(α₀)). Terms with
/// g_nk = 0 contribute nothing (0 ln 0 = 0).
pub fn free_energy(log_evidence: &[Vec<f64>], alpha0: f64, alpha: &[f64], g: &[Vec<f64>]) -> f64 {
    let k = alpha.len() as f64;
    let sum_alpha: f64 = alpha.iter().sum();
    let psi_total = digamma(sum_alpha);
    let expected_log_r: Vec<f64> = alpha.iter().map(|a| digamma(*a) - psi_total).collect();
    let mut f = 0.0;
    for (row, gn) in log_evidence.iter().zip(g) {
        for ((l, gnk), elr) in row.iter().zip(gn).zip(&expected_log_r) {
            if *gnk > 0.0 {
                f += gnk * (l + elr - gnk.ln());
            }
        }
    }
    f += ln_gamma(k * alpha0) - k * ln_gamma(alpha0) - ln_gamma(sum_alpha);
    f += alpha
        .iter()
        .zip(&expected_log_r)
        .map(|(a, elr)| ln_gamma(*a) + (alpha0 - a) * elr)
        .sum::<f64>();
    f
}

/// Log evidence of the null hypothesis that all K models are equally frequent (Rigoux et al.
/// 2014, NeuroImage 84:971): each subject's model is drawn with probability 1/K, so
///
/// F₀ = ln p(y | H₀) = Σ_n ln Σ_k (1/K) exp(L_nk) = Σ_n [LSE_k(L_nk) − ln K] (exact).
pub fn null_free_energy(log_evidence: &[Vec<f64>]) -> f64 {
    log_evidence
        .iter()
        .map(|row| log_sum_exp(row) - (row.len() as f64).ln())
        .sum()
}

/// Bayesian omnibus risk (Rigoux et al. 2014), the posterior probability of the null
/// of equal frequencies against the random-effects model under equal prior odds:
///
/// omnibus risk = 1 / (1 + exp(F₁ − F₀)) (computed as a logistic of F₀ − F₁, no overflow).
pub fn bayesian_omnibus_risk(f1: f64, f0: f64) -> f64 {
    logistic(f0 - f1)
}

/// Protected exceedance probabilities (Rigoux et al. 2014):
/// protected_k = (1 − omnibus risk) exceedance_k + omnibus risk / K.
pub fn protected_exceedance(exceedance: &[f64], omnibus_risk: f64) -> Vec<f64> {
    let k = exceedance.len() as f64;
    exceedance
        .iter()
        .map(|x| (1.0 - omnibus_risk) * x + omnibus_risk / k)
        .collect()
}

/// Exact exceedance probabilities of two models (Stephan et al. 2009): with
/// r₁ ~ Beta(α₁, α₂), P₁ = P(r₁ > 1/2) = 1 − I_{1/2}(α₁, α₂) and P₂ = I_{1/2}(α₁, α₂)
/// (I_x the regularised incomplete beta function, statrs `beta_reg`). P₁ is evaluated as
/// I_{1/2}(α₂, α₁) (by I_x(a, b) = 1 − I_{1−x}(b, a)) so that small values keep their relative
/// accuracy.
pub fn exceedance_two(alpha: [f64; 2]) -> [f64; 2] {
    [
        beta_reg(alpha[1], alpha[0], 0.5),
        beta_reg(alpha[0], alpha[1], 0.5),
    ]
}

/// Monte Carlo exceedance probabilities exceedance_k = P(r_k > r_j for all j ≠ k) for r ~ Dir(α)
/// (Stephan et al. 2009): `samples` draws of r_k = γ_k / Σγ with γ_k ~ Gamma(α_k, 1)
/// (the Dirichlet as normalised gammas; the arg max needs no normalising). Standard error of
/// each estimate √(exceedance(1 − exceedance)/samples) (≤ 0.0005 at 10⁶ samples). Deterministic for a seed.
/// Returns `None` when an α is not finite and positive.
pub fn exceedance_monte_carlo(
    alpha: &[f64],
    samples: usize,
    rng: &mut ChaCha8Rng,
) -> Option<Vec<f64>> {
    let gammas: Vec<Gamma<f64>> = alpha
        .iter()
        .map(|&a| Gamma::new(a, 1.0).ok().filter(|_| a.is_finite() && a > 0.0))
        .collect::<Option<_>>()?;
    let mut wins = vec![0u64; alpha.len()];
    let samples = samples.max(1);
    for _ in 0..samples {
        let mut best = 0;
        let mut best_value = f64::NEG_INFINITY;
        for (k, g) in gammas.iter().enumerate() {
            let v = g.sample(rng);
            if v > best_value {
                best_value = v;
                best = k;
            }
        }
        wins[best] += 1;
    }
    Some(wins.iter().map(|&w| w as f64 / samples as f64).collect())
}

/// Random-effects Bayesian model selection on one cohort.
#[derive(Clone, Debug, PartialEq)]
pub struct Bms {
    /// Posterior Dirichlet counts α.
    pub alpha: Vec<f64>,
    /// Expected model frequencies α_k / Σα.
    pub expected_frequency: Vec<f64>,
    /// Exceedance probabilities.
    pub exceedance: Vec<f64>,
    /// Monte Carlo standard errors of the exceedance probabilities (`None`: exact).
    pub exceedance_se: Option<Vec<f64>>,
    /// Protected exceedance probabilities.
    pub protected_exceedance: Vec<f64>,
    /// Bayesian omnibus risk.
    pub omnibus_risk: f64,
    /// Free energy F₁ of the random-effects model.
    pub free_energy: f64,
    /// Log evidence F₀ of the equal-frequency null.
    pub null_free_energy: f64,
    /// Posterior model assignments g_nk.
    pub assignment: Vec<Vec<f64>>,
    /// Iterations of the fixed point.
    pub iterations: usize,
    /// Whether the fixed point met the tolerance.
    pub converged: bool,
}

/// Log evidence (or settings) that [`random_effects_bms`] cannot select with; subjects are
/// counted from 1.
#[derive(Clone, Debug, PartialEq, thiserror::Error)]
pub enum BmsError {
    /// No subject, or fewer than two models.
    #[error(
        "model selection needs at least one subject and two models (got {subjects} subjects, \
         {models} models)"
    )]
    TooFew {
        /// Subjects given.
        subjects: usize,
        /// Models of the first subject.
        models: usize,
    },
    /// A subject with another number of log evidences than the first.
    #[error("subject {subject} has {found} log evidences, expected {expected}")]
    Ragged {
        /// The subject.
        subject: usize,
        /// Its log evidences.
        found: usize,
        /// Those of the first subject.
        expected: usize,
    },
    /// A log evidence that is not finite.
    #[error("subject {subject} has a log evidence that is not finite")]
    NotFinite {
        /// The subject.
        subject: usize,
    },
    /// A prior count α₀ that is not > 0.
    #[error("prior count α₀ = {0} must be > 0")]
    PriorCount(f64),
    /// Posterior counts of which not all are positive.
    #[error("posterior counts {alpha:?} are not all positive")]
    PosteriorCounts {
        /// The posterior counts α.
        alpha: Vec<f64>,
    },
}

/// Random-effects Bayesian model selection (Stephan et al. 2009) with the omnibus risk and
/// protected exceedance probabilities of Rigoux et al. (2014): [`variational_dirichlet`],
/// [`free_energy`], [`null_free_energy`], [`bayesian_omnibus_risk`], exceedance probabilities
/// exact for two models ([`exceedance_two`]) and by Monte Carlo otherwise
/// ([`exceedance_monte_carlo`], ChaCha8 seeded by `options.seed` on stream `options.stream`),
/// and [`protected_exceedance`]. `log_evidence[n][k]` is subject n, model k. Errors on fewer than
/// two models, no subjects, ragged rows, non-finite log evidence or α₀ ≤ 0.
pub fn random_effects_bms(
    log_evidence: &[Vec<f64>],
    options: &BmsOptions,
) -> Result<Bms, BmsError> {
    let k = log_evidence.first().map_or(0, Vec::len);
    if log_evidence.is_empty() || k < 2 {
        return Err(BmsError::TooFew {
            subjects: log_evidence.len(),
            models: k,
        });
    }
    if let Some(n) = log_evidence.iter().position(|r| r.len() != k) {
        return Err(BmsError::Ragged {
            subject: n + 1,
            found: log_evidence[n].len(),
            expected: k,
        });
    }
    if let Some(n) = log_evidence
        .iter()
        .position(|r| r.iter().any(|x| !x.is_finite()))
    {
        return Err(BmsError::NotFinite { subject: n + 1 });
    }
    if !(options.alpha0.is_finite() && options.alpha0 > 0.0) {
        return Err(BmsError::PriorCount(options.alpha0));
    }
    let (alpha, assignment, iterations, converged) = variational_dirichlet(
        log_evidence,
        options.alpha0,
        options.tolerance,
        options.max_iterations,
    );
    let total: f64 = alpha.iter().sum();
    let expected_frequency = alpha.iter().map(|a| a / total).collect();
    let (exceedance, exceedance_se) = if k == 2 {
        (exceedance_two([alpha[0], alpha[1]]).to_vec(), None)
    } else {
        let mut rng = ChaCha8Rng::seed_from_u64(options.seed);
        rng.set_stream(options.stream);
        let samples = options.samples.max(1);
        let exceedance = exceedance_monte_carlo(&alpha, samples, &mut rng).ok_or_else(|| {
            BmsError::PosteriorCounts {
                alpha: alpha.clone(),
            }
        })?;
        let se = exceedance
            .iter()
            .map(|p| (p * (1.0 - p) / samples as f64).sqrt())
            .collect();
        (exceedance, Some(se))
    };
    let f1 = free_energy(log_evidence, options.alpha0, &alpha, &assignment);
    let f0 = null_free_energy(log_evidence);
    let omnibus_risk = bayesian_omnibus_risk(f1, f0);
    Ok(Bms {
        protected_exceedance: protected_exceedance(&exceedance, omnibus_risk),
        alpha,
        expected_frequency,
        exceedance,
        exceedance_se,
        omnibus_risk,
        free_energy: f1,
        null_free_energy: f0,
        assignment,
        iterations,
        converged,
    })
}

/// The between-group test of Rigoux et al. (2014, NeuroImage 84:971): do the groups
/// share one set of model frequencies?
#[derive(Clone, Debug, PartialEq)]
pub struct GroupDifference {
    /// Group labels, in byte order.
    pub groups: Vec<String>,
    /// Subjects in all groups.
    pub n_subjects: usize,
    /// F₁ of the random-effects model fitted to all subjects pooled (same frequencies).
    pub free_energy_same: f64,
    /// Σ over groups of F₁ fitted to each group alone (different frequencies).
    pub free_energy_different: f64,
    /// Posterior probability of equal frequencies under equal prior odds:
    /// 1 / (1 + exp(F_diff − F_same)).
    pub probability_same: f64,
}

/// Between-group comparison of model frequencies (Rigoux et al. 2014, NeuroImage 84:971): the log evidence of "all groups share frequencies" is approximated by the free energy
/// of one random-effects model on the pooled subjects, F_same = F₁(pooled); that of "each group
/// has its own frequencies" by F_diff = Σ_g F₁(group g). With equal prior odds,
///
/// P(same | y) = 1 / (1 + exp(F_diff − F_same)).
///
/// `pooled` and `per_group` are the [`Bms`] results of those fits.
pub fn group_difference(pooled: &Bms, per_group: &[(String, &Bms)]) -> GroupDifference {
    let free_energy_different: f64 = per_group.iter().map(|(_, b)| b.free_energy).sum();
    let mut groups: Vec<String> = per_group.iter().map(|(g, _)| g.clone()).collect();
    groups.sort();
    GroupDifference {
        groups,
        n_subjects: pooled.assignment.len(),
        free_energy_same: pooled.free_energy,
        free_energy_different,
        probability_same: logistic(pooled.free_energy - free_energy_different),
    }
}
