//! Participant scores in the empirical-Bayes group prior: the prior mean as a linear function of
//! each participant's scores (a questionnaire score such as an apathy or anhedonia scale).
//!
//! # Model
//! With scores s_i = (s_i1, …, s_ip) of participant i, the group prior of [`super::fit_group`]
//! becomes
//!
//! θ_i ~ N(B z_i, Σ),  z_i = (1, s_i1 − c_1, …, s_ip − c_p),
//!
//! B a k × (p + 1) matrix of regression coefficients (column 0 the intercept), Σ diagonal or full
//! as before, c_l the mean of score l over the participants of the prior ("centred" scores, the
//! default: the intercept is then the group mean of a participant with the average scores, and
//! the slopes do not change). With `centred = false`, c_l = 0 and the intercept is the group mean
//! at scores of 0. This is the second-level (between-participant) regression of a two-level
//! linear model (Laird & Ware 1982; Raudenbush & Bryk 2002, ch. 2–3; Gelman & Hill 2007, ch. 12),
//! with the Laplace-approximated first level of Huys et al. (2011).
//!
//! # M-step ([`regression_coefficients`])
//! Given the posterior modes θ̂_i and covariances P_i of the E-step,
//!
//! B = (Σ_i θ̂_i z_iᵀ)(Σ_i z_i z_iᵀ)⁻¹,
//! Σ = (1/N) Σ_i [(θ̂_i − B z_i)(θ̂_i − B z_i)ᵀ + P_i]
//!
//! (only the diagonal when Σ is diagonal). With Σ common to all participants, generalised least
//! squares of the modes on z_i is ordinary least squares per parameter (Zellner 1962), so B does
//! not depend on Σ. Without scores (z_i = 1) these are the usual μ = mean θ̂_i and Σ.
//!
//! # Standard errors ([`coefficient_covariance`])
//! At the fixed point of EM, B is the maximum of the Laplace-approximated marginal likelihood
//! (Dempster, Laird & Rubin 1977). In the Gaussian approximation of the first level, each
//! participant's likelihood-only estimate θ̃_i has covariance C_i = H_i⁻¹, H_i = P_i⁻¹ − Σ⁻¹ (the
//! data's information: the posterior precision less the prior's), and the posterior mode is
//! θ̂_i − B z_i = Σ (Σ + C_i)⁻¹ (θ̃_i − B z_i). The M-step equation Σ_i (θ̂_i − B z_i) z_iᵀ = 0 is
//! then Σ_i W_i (θ̃_i − B z_i) z_iᵀ = 0 with W_i = (Σ + C_i)⁻¹: the generalised least-squares
//! equation of θ̃_i ~ N(B z_i, Σ + C_i). Its covariance (the fixed effects of Laird & Ware
//! 1982; the random-effects meta-regression of Berkey et al. 1995) is
//!
//! Cov(vec B̂) = [Σ_i (z_i z_iᵀ) ⊗ W_i]⁻¹,  W_i = (Σ̃ + C_i)⁻¹ = R_i (I + R_i Σ̃ R_i)⁻¹ R_i,
//!
//! R_i = H_i^{1/2} (symmetric square root, negative eigenvalues of H_i from rounding or a
//! likelihood that is not concave set to 0, so that W_i = 0 when participant i's data say
//! nothing; the last form is the push-through identity, e.g. Henderson & Searle 1981, and needs
//! no inverse of H_i). A participant without a covariance (Hessian not positive definite) has
//! W_i = 0: it adds nothing to the information. Σ̃ = Σ · N / (N − p − 1) is the residual
//! covariance with the divisor of the unbiased residual variance of the linear model (Seber &
//! Lee 2003, ch. 3): when every participant is measured exactly (P_i → 0), the standard errors,
//! t statistics and p values are exactly those of ordinary least squares of θ_i on z_i. With
//! p = 0, a diagonal Σ and diagonal P_i and Σ̃ = Σ, the variance of the intercept is the
//! normal–normal 1/SE² = Σ_i 1/(σ² + C_i) of the group mean (Gelman et al. 2013, §5.4).
//!
//! Each coefficient is tested against 0 with t = B̂_jl / SE(B̂_jl) and a two-sided p value from
//! Student's t with N − p − 1 degrees of freedom (the residual degrees of freedom of the
//! second-level regression).
//!
//! What the standard error accounts for: the spread of the participants around the regression
//! (Σ) and each participant's own estimation uncertainty (P_i, through C_i), weighting each
//! participant by how well its data determine its parameters. What it does not account for: the
//! uncertainty of Σ beyond the degrees-of-freedom divisor and the t reference (Σ is plugged in,
//! the usual optimism of empirical Bayes: Morris 1983; Kass & Steffey 1989); the error of the
//! Laplace approximation (posteriors far from Gaussian, estimates at a bound, parameters the
//! data barely identify); measurement error in the scores themselves; and, since the test is a
//! Wald test of one coefficient, any correction for the number of coefficients tested.
//! Coefficients are on the unconstrained scale of each parameter (log, logit, …) and describe
//! associations in the sample, not causes. Non-decision time's unconstrained scale is the
//! position between 0 and a bound below each participant's fastest response, so a score that
//! changes response speed through another parameter moves ndt's coefficients too
//! ([`PriorCoefficient::scale_per_participant`]): measured in tests/suite/group_prior_covariates.rs, a
//! score that raised the boundary gave ndt a slope with t = −5.2 although ndt did not depend on
//! it.

use crate::data::TrialTable;
use crate::files::InputError;
use nalgebra::{DMatrix, DVector, SymmetricEigen};
use statrs::distribution::{ContinuousCDF, StudentsT};
use std::collections::HashMap;
use std::path::Path;

/// Name of the intercept term in the coefficient tables.
pub const INTERCEPT: &str = "intercept";

/// Smallest eigenvalue of the scores' correlation matrix (or, uncentred, of the scaled design's
/// Gram matrix) accepted: below it the scores are taken as collinear (common practice).
const COLLINEAR: f64 = 1e-8;

/// Per-participant scores, checked to be one number per participant.
#[derive(Clone, Debug, PartialEq)]
pub struct SubjectScores {
    /// Column names, in the order given.
    pub names: Vec<String>,
    /// Scores of each participant (by label), in the order of `names`.
    pub values: HashMap<String, Vec<f64>>,
    /// Subtract each score's mean over the participants of a prior (the default).
    pub centred: bool,
}

impl SubjectScores {
    /// The scores in columns `names` of the table read from `path`: each must be a finite
    /// number, given on every row of a participant and the same on all of them. Errors name the
    /// file, the column, the participant and the trial (and run) of the offending cell, and for
    /// a score that changes, both values.
    pub fn from_table(
        path: &Path,
        table: &TrialTable,
        names: &[String],
        centred: bool,
    ) -> Result<SubjectScores, InputError> {
        let columns: std::sync::Arc<[String]> = table
            .subjects
            .first()
            .map(|s| s.covariates.clone())
            .unwrap_or_else(|| std::sync::Arc::from([]));
        let mut indices = Vec::with_capacity(names.len());
        for (l, name) in names.iter().enumerate() {
            if names[..l].contains(name) {
                return Err(InputError::file(
                    path,
                    format!("participant score {name:?} is named twice"),
                ));
            }
            let Some(k) = columns.iter().position(|c| c == name) else {
                return Err(InputError::file(
                    path,
                    format!(
                        "no column {name:?} for a participant score; expected one of the \
                         table's columns other than the trial columns ({})",
                        if columns.is_empty() {
                            "the table has none".to_string()
                        } else {
                            columns.join(", ")
                        }
                    ),
                ));
            };
            indices.push(k);
        }
        let mut values = HashMap::with_capacity(table.subjects.len());
        for subject in &table.subjects {
            let mut scores = Vec::with_capacity(names.len());
            for (name, &k) in names.iter().zip(&indices) {
                let error = |message: String| InputError {
                    column: Some(name.clone()),
                    ..InputError::file(path, format!("participant {:?}: {message}", subject.id))
                };
                let mut first: Option<(f64, &str, String)> = None;
                for trial in &subject.trials {
                    let at = if trial.run.is_empty() {
                        format!("trial {}", trial.trial)
                    } else {
                        format!("trial {} of run {:?}", trial.trial, trial.run)
                    };
                    let Some(cell) = trial.covariates.get(k).and_then(|c| c.as_deref()) else {
                        return Err(error(format!(
                            "the score is missing on {at}; expected the participant's score \
                             on every one of its rows"
                        )));
                    };
                    let x = cell.trim().parse::<f64>().ok().filter(|x| x.is_finite());
                    let Some(x) = x else {
                        return Err(error(format!(
                            "{cell:?} on {at} is not a finite number; expected a numeric score"
                        )));
                    };
                    match &first {
                        None => first = Some((x, cell, at)),
                        Some((y, seen, seen_at)) if *y != x => {
                            return Err(error(format!(
                                "the score changes within the participant: {seen:?} on \
                                 {seen_at}, {cell:?} on {at}; expected one score per \
                                 participant"
                            )));
                        }
                        Some(_) => {}
                    }
                }
                let Some((x, _, _)) = first else {
                    return Err(error("the participant has no rows".to_string()));
                };
                scores.push(x);
            }
            values.insert(subject.id.clone(), scores);
        }
        Ok(SubjectScores {
            names: names.to_vec(),
            values,
            centred,
        })
    }
}

/// The second-level design of one group prior: one row z_i per participant.
#[derive(Clone, Debug, PartialEq)]
pub struct Design {
    /// Term names: [`INTERCEPT`], then the scores.
    pub terms: Vec<String>,
    /// Value subtracted from each score (its mean over the participants when centred, else 0).
    pub centres: Vec<f64>,
    /// z_i = (1, s_i1 − c_1, …), one row per participant.
    pub rows: Vec<Vec<f64>>,
}

impl Design {
    /// The design of the participants `subjects` (labels), in that order. Refuses, saying why,
    /// a participant without scores, fewer than p + 3 participants (so the residual covariance
    /// has at least 2 degrees of freedom), a score with one value for all of them and collinear
    /// scores.
    pub fn new(scores: &SubjectScores, subjects: &[&str]) -> Result<Design, DesignError> {
        let p = scores.names.len();
        let n = subjects.len();
        if n < p + 3 {
            return Err(DesignError::TooFewParticipants {
                participants: n,
                scores: p,
            });
        }
        let mut raw = Vec::with_capacity(n);
        for id in subjects {
            let s = scores
                .values
                .get(*id)
                .ok_or_else(|| DesignError::NoScores {
                    participant: id.to_string(),
                })?;
            raw.push(s.clone());
        }
        let mean: Vec<f64> = (0..p)
            .map(|l| raw.iter().map(|s| s[l]).sum::<f64>() / n as f64)
            .collect();
        for (l, name) in scores.names.iter().enumerate() {
            if raw.iter().all(|s| s[l] == raw[0][l]) {
                return Err(DesignError::Constant {
                    score: name.clone(),
                    value: raw[0][l],
                    participants: n,
                });
            }
        }
        let centres = if scores.centred {
            mean.clone()
        } else {
            vec![0.0; p]
        };
        let rows: Vec<Vec<f64>> = raw
            .iter()
            .map(|s| {
                std::iter::once(1.0)
                    .chain(s.iter().zip(&centres).map(|(x, c)| x - c))
                    .collect()
            })
            .collect();
        // Collinearity: the correlation matrix of the scores (centred), or the Gram matrix of
        // the design with unit-length columns (uncentred, where a score nearly constant relative
        // to its size is collinear with the intercept).
        let gram = if scores.centred {
            let sd: Vec<f64> = (0..p)
                .map(|l| {
                    raw.iter()
                        .map(|s| (s[l] - mean[l]).powi(2))
                        .sum::<f64>()
                        .sqrt()
                })
                .collect();
            DMatrix::from_fn(p, p, |a, b| {
                raw.iter()
                    .map(|s| (s[a] - mean[a]) * (s[b] - mean[b]))
                    .sum::<f64>()
                    / (sd[a] * sd[b])
            })
        } else {
            scaled_gram(&rows).0
        };
        let smallest = SymmetricEigen::new(gram)
            .eigenvalues
            .iter()
            .copied()
            .fold(f64::INFINITY, f64::min);
        if smallest.is_nan() || smallest <= COLLINEAR {
            return Err(DesignError::Collinear {
                scores: scores.names.clone(),
                centred: scores.centred,
                participants: n,
            });
        }
        let mut terms = vec![INTERCEPT.to_string()];
        terms.extend(scores.names.iter().cloned());
        Ok(Design {
            terms,
            centres,
            rows,
        })
    }

    /// Residual degrees of freedom N − p − 1.
    pub fn residual_df(&self) -> usize {
        self.rows.len() - self.terms.len()
    }
}

/// Why the participants of a group prior cannot carry a regression on their scores.
#[derive(Clone, Debug, PartialEq, thiserror::Error)]
pub enum DesignError {
    /// Fewer than p + 3 participants for p scores.
    #[error(
        "{participants} participants for {scores} score{} in the group prior; expected at least \
         {} (the scores, the intercept and 2 degrees of freedom for the spread)",
        if *scores == 1 { "" } else { "s" },
        scores + 3
    )]
    TooFewParticipants {
        /// Participants of the prior.
        participants: usize,
        /// Scores in the regression.
        scores: usize,
    },
    /// A participant without scores.
    #[error("participant {participant:?} has no scores")]
    NoScores {
        /// The participant's label.
        participant: String,
    },
    /// A score with one value for every participant.
    #[error(
        "score {score:?} is {value} for all {participants} participants; a score that does not \
         vary cannot be told from the intercept"
    )]
    Constant {
        /// The score's column.
        score: String,
        /// Its one value.
        value: f64,
        /// Participants of the prior.
        participants: usize,
    },
    /// Scores that are linear functions of each other (or, uncentred, of the intercept).
    #[error(
        "the scores {} are collinear{} among these {participants} participants; give scores \
         that are not linear functions of each other",
        scores.join(", "),
        if *centred { "" } else { " with the intercept (uncentred)" }
    )]
    Collinear {
        /// The scores' columns.
        scores: Vec<String>,
        /// The scores were centred.
        centred: bool,
        /// Participants of the prior.
        participants: usize,
    },
}

/// Σ_i z_i z_iᵀ with columns scaled to unit length, D⁻¹ (ZᵀZ) D⁻¹, and the scales D.
fn scaled_gram(rows: &[Vec<f64>]) -> (DMatrix<f64>, Vec<f64>) {
    let q = rows.first().map_or(0, Vec::len);
    let scale: Vec<f64> = (0..q)
        .map(|c| rows.iter().map(|z| z[c] * z[c]).sum::<f64>().sqrt())
        .collect();
    let gram = DMatrix::from_fn(q, q, |a, b| {
        rows.iter().map(|z| z[a] * z[b]).sum::<f64>() / (scale[a] * scale[b])
    });
    (gram, scale)
}

/// The M-step regression B = (Σ_i θ̂_i z_iᵀ)(Σ_i z_i z_iᵀ)⁻¹ of the modes `modes` (θ̂_i, k each)
/// on the design rows `rows` (z_i), as k rows of p + 1 coefficients: ordinary least squares of
/// each parameter on z (normal equations, e.g. Seber & Lee 2003, ch. 3), solved by Cholesky
/// factorisation with the columns of z scaled to unit length. None when Σ z zᵀ is not positive
/// definite (collinear design) or a coefficient is not finite.
pub fn regression_coefficients(modes: &[Vec<f64>], rows: &[Vec<f64>]) -> Option<Vec<Vec<f64>>> {
    let k = modes.first()?.len();
    let (gram, scale) = scaled_gram(rows);
    let q = scale.len();
    let cholesky = gram.cholesky()?;
    let b: Vec<Vec<f64>> = (0..k)
        .map(|j| {
            let rhs = DVector::from_fn(q, |c, _| {
                modes
                    .iter()
                    .zip(rows)
                    .map(|(m, z)| m[j] * z[c])
                    .sum::<f64>()
                    / scale[c]
            });
            let solved = cholesky.solve(&rhs);
            (0..q).map(|c| solved[c] / scale[c]).collect()
        })
        .collect();
    b.iter().flatten().all(|x| x.is_finite()).then_some(b)
}

/// The sampling covariance of the coefficients, Cov(vec B̂) = [Σ_i (z_i z_iᵀ) ⊗ W_i]⁻¹ with
/// W_i = R_i (I + R_i Σ̃ R_i)⁻¹ R_i, R_i = (P_i⁻¹ − Σ⁻¹)^{1/2}, Σ̃ = Σ·N/(N − p − 1) (see the module
/// documentation for the derivation and sources). `prior` is the Σ under which the posterior
/// covariances `posterior` (P_i, None without one: W_i = 0) were found; `rows` the design.
/// Element (c·k + j, c'·k + j') is the covariance of B̂_jc and B̂_j'c'. None when the
/// information is not positive definite (a parameter or score no participant informs) or N ≤
/// p + 1.
pub fn coefficient_covariance(
    prior: &[Vec<f64>],
    posterior: &[Option<&Vec<Vec<f64>>>],
    rows: &[Vec<f64>],
) -> Option<DMatrix<f64>> {
    let k = prior.len();
    let q = rows.first()?.len();
    let n = rows.len();
    if n <= q {
        return None;
    }
    let sigma = DMatrix::from_fn(k, k, |a, b| prior[a][b]);
    let sigma_inverse = sigma.clone().cholesky()?.inverse();
    let inflated = &sigma * (n as f64 / (n - q) as f64);
    let mut information = DMatrix::<f64>::zeros(k * q, k * q);
    for (z, post) in rows.iter().zip(posterior) {
        let Some(post) = post else { continue };
        let p_matrix = DMatrix::from_fn(k, k, |a, b| post[a][b]);
        let Some(p_cholesky) = p_matrix.cholesky() else {
            continue; // not a covariance: no information from this participant
        };
        let data = p_cholesky.inverse() - &sigma_inverse;
        let data = (&data + data.transpose()) * 0.5;
        let eigen = SymmetricEigen::new(data);
        let root_values = eigen.eigenvalues.map(|v| v.max(0.0).sqrt());
        let root = &eigen.eigenvectors
            * DMatrix::from_diagonal(&root_values)
            * eigen.eigenvectors.transpose();
        let inner = DMatrix::identity(k, k) + &root * &inflated * &root;
        let w = &root * inner.cholesky()?.inverse() * &root;
        let w = (&w + w.transpose()) * 0.5;
        for c in 0..q {
            for d in 0..q {
                let zz = z[c] * z[d];
                for a in 0..k {
                    for b in 0..k {
                        information[(c * k + a, d * k + b)] += zz * w[(a, b)];
                    }
                }
            }
        }
    }
    // Inverted with symmetric (Jacobi) scaling, so that scores of any size are handled alike.
    let m = k * q;
    let scale: Vec<f64> = (0..m).map(|i| information[(i, i)].sqrt()).collect();
    if scale.iter().any(|s| !(s.is_finite() && *s > 0.0)) {
        return None;
    }
    let scaled = DMatrix::from_fn(m, m, |a, b| information[(a, b)] / (scale[a] * scale[b]));
    let inverse = scaled.cholesky()?.inverse();
    let covariance = DMatrix::from_fn(m, m, |a, b| inverse[(a, b)] / (scale[a] * scale[b]));
    covariance
        .iter()
        .all(|x| x.is_finite())
        .then_some(covariance)
}

/// One coefficient of the prior regression.
#[derive(Clone, Debug, PartialEq)]
pub struct PriorCoefficient {
    /// Parameter (a free parameter of the model).
    pub parameter: String,
    /// Term: [`INTERCEPT`] or a score's column name.
    pub term: String,
    /// Value subtracted from the score before the regression (None for the intercept).
    pub centre: Option<f64>,
    /// B̂ on the parameter's unconstrained scale (per unit of the score for a slope).
    pub estimate: f64,
    /// Its standard error (see the module documentation); None when the information is not
    /// positive definite.
    pub std_error: Option<f64>,
    /// t = estimate / standard error.
    pub t_statistic: Option<f64>,
    /// Two-sided p value of t against Student's t with `df` degrees of freedom.
    pub p_value: Option<f64>,
    /// Degrees of freedom N − p − 1.
    pub df: usize,
    /// The parameter's unconstrained scale differs between participants (ndt, whose upper
    /// bound is below each participant's fastest response): its coefficients then also move
    /// with whatever changes the participants' fastest responses.
    pub scale_per_participant: bool,
}

/// The coefficient table: B̂ (k rows of p + 1, as [`regression_coefficients`]) with standard
/// errors from `covariance` ([`coefficient_covariance`]), t = B̂/SE and the two-sided p value
/// 2·P(T_df > |t|) of Student's t with df = N − p − 1 (statrs). Rows are parameter by
/// parameter, terms in design order.
pub fn coefficient_table(
    parameters: &[String],
    design: &Design,
    coefficients: &[Vec<f64>],
    covariance: Option<&DMatrix<f64>>,
) -> Vec<PriorCoefficient> {
    let k = parameters.len();
    let df = design.residual_df();
    let reference = StudentsT::new(0.0, 1.0, df as f64).ok();
    let mut table = Vec::with_capacity(k * design.terms.len());
    for (j, name) in parameters.iter().enumerate() {
        for (c, term) in design.terms.iter().enumerate() {
            let estimate = coefficients[j][c];
            let std_error = covariance
                .map(|v| v[(c * k + j, c * k + j)])
                .filter(|v| v.is_finite() && *v > 0.0)
                .map(f64::sqrt);
            let t_statistic = std_error.map(|se| estimate / se);
            let p_value = t_statistic
                .zip(reference.as_ref())
                .map(|(t, dist)| (2.0 * dist.sf(t.abs())).min(1.0));
            table.push(PriorCoefficient {
                parameter: name.clone(),
                term: term.clone(),
                centre: (c > 0).then(|| design.centres[c - 1]),
                estimate,
                std_error,
                t_statistic,
                p_value,
                df,
                scale_per_participant: false,
            });
        }
    }
    table
}
