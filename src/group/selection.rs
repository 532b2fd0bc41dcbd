//! Model comparison across subjects: information criteria and their weights per subject, and
//! random-effects Bayesian model selection across a cohort.
//!
//! Per subject and model: AIC (Akaike 1974), BIC (Schwarz 1978), the log evidence used for
//! selection (−BIC/2 by default, −AIC/2, or the Laplace approximation written by `fit`), Akaike
//! and Schwarz weights (Burnham & Anderson 2002; Wagenmakers & Farrell 2004).
//!
//! Across subjects: the variational Bayesian treatment of a Dirichlet prior over model
//! frequencies (Stephan, Penny, Daunizeau, Moran & Friston 2009, "Bayesian model selection for
//! group studies", NeuroImage 46:1004–1017), giving posterior Dirichlet counts α, expected
//! frequencies α/Σα, per-subject posterior assignments g_nk and exceedance probabilities; the
//! Bayesian omnibus risk and protected exceedance probabilities (Rigoux, Stephan, Friston &
//! Daunizeau 2014, "Bayesian model selection for group studies — revisited", NeuroImage
//! 84:971–985); and the between-group test of that paper (do groups share their model
//! frequencies?).
//!
//! Only likelihoods of the same data can be compared: a model scored on choices alone and one
//! scored on choices and response times are not comparable. [`data_kind`] tells them apart for
//! built-in models; [`assemble`] keeps only the response-time models when both kinds are present.
//!
//! Special functions (ψ, ln Γ, the regularised incomplete beta I_x) come from `statrs`. Every
//! exponential of a log evidence goes through log-sum-exp; no result is NaN.

use crate::files::{InputError, csv_rows, finite_number};
use crate::results::{Column, Table};
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use rand_distr::{Distribution, Gamma};
use statrs::function::beta::beta_reg;
use statrs::function::gamma::{digamma, ln_gamma};
use std::collections::{BTreeMap, BTreeSet};
use std::path::Path;

/// The per-subject log evidence that enters selection.
#[derive(Clone, Copy, Debug, PartialEq, Eq, clap::ValueEnum)]
pub enum Evidence {
    /// ln p(y | m) ≈ −BIC/2 (Schwarz 1978).
    Bic,
    /// −AIC/2 (Akaike 1974), as in Penny (2012, NeuroImage 59:319) for a less conservative
    /// complexity penalty.
    Aic,
    /// The Laplace approximation at the MAP estimate, column `log_evidence_laplace` of
    /// `fit_summary.csv` (MacKay 2003, ch. 27).
    Laplace,
}

impl Evidence {
    /// How the evidence is written in outputs.
    pub fn label(self) -> &'static str {
        match self {
            Evidence::Bic => "-BIC/2",
            Evidence::Aic => "-AIC/2",
            Evidence::Laplace => "laplace",
        }
    }
}

/// One row of `fit_summary.csv`.
#[derive(Clone, Debug, PartialEq)]
pub struct FitRecord {
    /// Subject label.
    pub subject: String,
    /// Value of the `--by` column.
    pub group: String,
    /// Model name.
    pub model: String,
    /// Trials in the likelihood.
    pub n_trials: i64,
    /// Free parameters.
    pub n_params: i64,
    /// Akaike information criterion.
    pub aic: f64,
    /// Bayesian information criterion.
    pub bic: f64,
    /// Laplace log evidence, when the file has it for this row.
    pub log_evidence_laplace: Option<f64>,
    /// What the likelihood scored (column `scored`: `choices_and_times` or `choices`), when the
    /// file records it.
    pub scored: Option<DataKind>,
    /// Line in the file (header = line 1).
    pub line: u64,
}

/// Reads `fit_summary.csv` of `valuedrift fit`, grouping by column `by`. The column
/// `log_evidence_laplace` is optional and may be empty. Errors name the file, line (header =
/// line 1) and column.
pub fn read_fit_summary(path: &Path, by: &str) -> Result<Vec<FitRecord>, InputError> {
    let (mut reader, header) = crate::files::open_csv(path)?;
    let find = |name: &str| crate::files::column_index(path, &header, name);
    let [subject_c, model_c, trials_c, params_c, aic_c, bic_c] = [
        find("subject")?,
        find("model")?,
        find("n_trials")?,
        find("n_params")?,
        find("aic")?,
        find("bic")?,
    ];
    let by_c = find(by)?;
    let laplace_c = header.iter().position(|h| h == "log_evidence_laplace");
    let scored_c = header.iter().position(|h| h == "scored");
    let mut seen: BTreeMap<(String, String), u64> = BTreeMap::new();
    let mut out = Vec::new();
    for row in csv_rows(path, &mut reader) {
        let (line, record) = row?;
        let cell = |c: usize| record.get(c).unwrap_or("");
        let number = |c: usize, name: &str| finite_number(path, line, name, cell(c));
        let count = |c: usize, name: &str| -> Result<i64, InputError> {
            let text = cell(c);
            text.parse::<i64>().ok().filter(|&x| x >= 0).ok_or_else(|| {
                InputError::at(
                    path,
                    line,
                    name,
                    format!("'{text}' is not a whole number ≥ 0"),
                )
            })
        };
        let text = |c: usize, name: &str| -> Result<String, InputError> {
            match cell(c) {
                "" => Err(InputError::at(
                    path,
                    line,
                    name,
                    format!("empty {name} (expected a label)"),
                )),
                t => Ok(t.to_string()),
            }
        };
        let subject = text(subject_c, "subject")?;
        let model = text(model_c, "model")?;
        let group = text(by_c, by)?;
        let log_evidence_laplace = match laplace_c {
            Some(c) if !cell(c).is_empty() => Some(number(c, "log_evidence_laplace")?),
            _ => None,
        };
        let scored = match scored_c.map(cell) {
            None | Some("") => None,
            Some("choices_and_times") => Some(DataKind::ChoicesAndTimes),
            Some("choices") => Some(DataKind::ChoicesOnly),
            Some(other) => {
                return Err(InputError::at(
                    path,
                    line,
                    "scored",
                    format!("'{other}': expected choices_and_times or choices"),
                ));
            }
        };
        let row = FitRecord {
            scored,
            n_trials: count(trials_c, "n_trials")?,
            n_params: count(params_c, "n_params")?,
            aic: number(aic_c, "aic")?,
            bic: number(bic_c, "bic")?,
            log_evidence_laplace,
            line,
            subject,
            group,
            model,
        };
        if let Some(first) = seen.insert((row.subject.clone(), row.model.clone()), line) {
            return Err(InputError::at(
                path,
                line,
                "model",
                format!(
                    "subject '{}' has model '{}' twice (first on line {first})",
                    row.subject, row.model
                ),
            ));
        }
        out.push(row);
    }
    if out.is_empty() {
        return Err(InputError::file(path, "has no data rows"));
    }
    Ok(out)
}

/// What a model's likelihood is a likelihood of.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum DataKind {
    /// Choices and response times (diffusion choice stage).
    ChoicesAndTimes,
    /// Choices only (softmax choice stage).
    ChoicesOnly,
    /// Not recorded in the file and not a built-in model.
    Unknown,
}

/// The data kind of `model` in `rows`: as recorded in the `scored` column of fit_summary.csv
/// (written by every fit since it exists), else by name for built-in models, else unknown.
pub fn recorded_data_kind(model: &str, rows: &[FitRecord]) -> DataKind {
    rows.iter()
        .find(|r| r.model == model)
        .and_then(|r| r.scored)
        .unwrap_or_else(|| data_kind(model))
}

/// The data kind of a model by name: known for built-in models
/// (`crate::model::Model::uses_response_times`), [`DataKind::Unknown`] otherwise.
pub fn data_kind(model: &str) -> DataKind {
    crate::model::built_in_models()
        .iter()
        .find(|m| m.name == model)
        .map_or(DataKind::Unknown, |m| {
            if m.uses_response_times() {
                DataKind::ChoicesAndTimes
            } else {
                DataKind::ChoicesOnly
            }
        })
}

/// The comparison set: subjects that have every compared model, and their log evidence.
#[derive(Clone, Debug, PartialEq)]
pub struct Comparison {
    /// Compared models, in order of first appearance in the file.
    pub models: Vec<String>,
    /// Kept subjects, in order of first appearance.
    pub subjects: Vec<String>,
    /// Group of each kept subject.
    pub groups: Vec<String>,
    /// `records[n][k]`: subject n, model k.
    pub records: Vec<Vec<FitRecord>>,
    /// `log_evidence[n][k]` of the chosen kind.
    pub log_evidence: Vec<Vec<f64>>,
    /// Subjects dropped because they miss compared models, with the models they miss.
    pub dropped: Vec<(String, Vec<String>)>,
    /// Models present in the file but left out of the comparison (choices-only models when
    /// response-time models are present).
    pub excluded: Vec<String>,
    /// Notes for the output (empty when there is nothing to say).
    pub notes: Vec<String>,
}

/// Builds the comparison set from the rows of `path`: keeps comparable models (choices-only
/// models are left out when response-time models are present, see [`data_kind`]), drops
/// subjects that miss a compared model, and takes each row's log evidence of kind `evidence`.
/// Errors when fewer than two models or no subject remain, when a subject's group differs
/// between rows, when the compared models of a subject were fitted to different numbers of
/// trials, or when the Laplace evidence is asked for and missing.
pub fn assemble(
    path: &Path,
    rows: &[FitRecord],
    evidence: Evidence,
    by: &str,
) -> Result<Comparison, InputError> {
    let mut all_models: Vec<String> = Vec::new();
    for r in rows {
        if !all_models.contains(&r.model) {
            all_models.push(r.model.clone());
        }
    }
    let kinds: Vec<DataKind> = all_models
        .iter()
        .map(|m| recorded_data_kind(m, rows))
        .collect();
    let mixed =
        kinds.contains(&DataKind::ChoicesAndTimes) && kinds.contains(&DataKind::ChoicesOnly);
    let mut notes = Vec::new();
    let (models, excluded): (Vec<String>, Vec<String>) = if mixed {
        let (keep, drop): (Vec<_>, Vec<_>) = all_models
            .iter()
            .zip(&kinds)
            .partition(|(_, k)| **k != DataKind::ChoicesOnly);
        let excluded: Vec<String> = drop.into_iter().map(|(m, _)| m.clone()).collect();
        notes.push(format!(
            "choices-only models left out ({}): their likelihoods are not of the same data as \
             the response-time models",
            excluded.join(", ")
        ));
        (keep.into_iter().map(|(m, _)| m.clone()).collect(), excluded)
    } else {
        (all_models.clone(), Vec::new())
    };
    let unknown: Vec<&str> = models
        .iter()
        .filter(|m| recorded_data_kind(m, rows) == DataKind::Unknown)
        .map(String::as_str)
        .collect();
    if !unknown.is_empty() {
        notes.push(format!(
            "what the likelihood scored is not recorded for ({}) (a fit_summary.csv without its \
             `scored` column): make sure every compared likelihood is of the same data",
            unknown.join(", ")
        ));
    }
    if models.len() < 2 {
        return Err(InputError::file(
            path,
            format!(
                "need at least two comparable models, found {} ({}){}",
                models.len(),
                models.join(", "),
                if excluded.is_empty() {
                    String::new()
                } else {
                    format!("; left out as choices-only: {}", excluded.join(", "))
                }
            ),
        ));
    }
    let mut subjects: Vec<String> = Vec::new();
    let mut by_subject: BTreeMap<&str, Vec<&FitRecord>> = BTreeMap::new();
    for r in rows {
        let entry = by_subject.entry(r.subject.as_str()).or_default();
        if entry.is_empty() {
            subjects.push(r.subject.clone());
        } else if entry[0].group != r.group {
            return Err(InputError::at(
                path,
                r.line,
                by,
                format!(
                    "subject '{}' is in group '{}' here but '{}' on line {}",
                    r.subject, r.group, entry[0].group, entry[0].line
                ),
            ));
        }
        entry.push(r);
    }
    let mut out = Comparison {
        models: models.clone(),
        subjects: Vec::new(),
        groups: Vec::new(),
        records: Vec::new(),
        log_evidence: Vec::new(),
        dropped: Vec::new(),
        excluded,
        notes,
    };
    for subject in subjects {
        let fitted = &by_subject[subject.as_str()];
        let found: Vec<Option<&FitRecord>> = models
            .iter()
            .map(|m| fitted.iter().find(|r| &r.model == m).copied())
            .collect();
        if found.iter().any(Option::is_none) {
            let missing = models
                .iter()
                .zip(&found)
                .filter(|(_, f)| f.is_none())
                .map(|(m, _)| m.clone())
                .collect();
            out.dropped.push((subject, missing));
            continue;
        }
        let found: Vec<FitRecord> = found.into_iter().flatten().cloned().collect();
        if let Some(other) = found.iter().find(|r| r.n_trials != found[0].n_trials) {
            return Err(InputError::at(
                path,
                other.line,
                "n_trials",
                format!(
                    "subject '{subject}': model '{}' was fitted to {} trials but '{}' to {} \
                     (line {}); likelihoods of different data cannot be compared",
                    other.model, other.n_trials, found[0].model, found[0].n_trials, found[0].line
                ),
            ));
        }
        let mut evidence_row = Vec::with_capacity(found.len());
        for r in &found {
            evidence_row.push(match evidence {
                Evidence::Bic => -r.bic / 2.0,
                Evidence::Aic => -r.aic / 2.0,
                Evidence::Laplace => r.log_evidence_laplace.ok_or_else(|| {
                    InputError::at(
                        path,
                        r.line,
                        "log_evidence_laplace",
                        format!(
                            "--evidence laplace needs the Laplace log evidence of subject '{}', \
                             model '{}', which is missing or empty (it is written for fits with \
                             priors, and in eb_fit_summary.csv of `fit --hierarchical`: \
                             --summary eb_fit_summary.csv); use --evidence bic or aic",
                            r.subject, r.model
                        ),
                    )
                })?,
            });
        }
        out.groups.push(found[0].group.clone());
        out.subjects.push(subject);
        out.records.push(found);
        out.log_evidence.push(evidence_row);
    }
    if out.subjects.is_empty() {
        return Err(InputError::file(
            path,
            format!(
                "no subject has every compared model fitted ({})",
                models.join(", ")
            ),
        ));
    }
    Ok(out)
}

/// ln Σ exp(xᵢ), computed as m + ln Σ exp(xᵢ − m) with m = max xᵢ.
pub fn log_sum_exp(x: &[f64]) -> f64 {
    let m = x.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    if !m.is_finite() {
        return m;
    }
    m + x.iter().map(|v| (v - m).exp()).sum::<f64>().ln()
}

/// Information-criterion weights w_k = exp(−Δ_k/2) / Σ_j exp(−Δ_j/2) with Δ_k = c_k − min_j c_j
/// (Akaike weights from AIC: Burnham & Anderson 2002, Model Selection and Multimodel Inference,
/// 2nd ed.; Schwarz weights from BIC: Wagenmakers & Farrell 2004, "AIC model selection
/// using Akaike weights", Psychon. Bull. Rev. 11:192–196). Computed by log-sum-exp.
pub fn information_weights(criterion: &[f64]) -> Vec<f64> {
    let half: Vec<f64> = criterion.iter().map(|c| -c / 2.0).collect();
    let total = log_sum_exp(&half);
    half.iter().map(|h| (h - total).exp()).collect()
}

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

/// Random-effects Bayesian model selection (Stephan et al. 2009) with the omnibus risk and
/// protected exceedance probabilities of Rigoux et al. (2014): [`variational_dirichlet`],
/// [`free_energy`], [`null_free_energy`], [`bayesian_omnibus_risk`], exceedance probabilities
/// exact for two models ([`exceedance_two`]) and by Monte Carlo otherwise
/// ([`exceedance_monte_carlo`], ChaCha8 seeded by `options.seed` on stream `options.stream`),
/// and [`protected_exceedance`]. `log_evidence[n][k]` is subject n, model k. Errors on fewer than
/// two models, no subjects, ragged rows, non-finite log evidence or α₀ ≤ 0.
pub fn random_effects_bms(log_evidence: &[Vec<f64>], options: &BmsOptions) -> Result<Bms, String> {
    let k = log_evidence.first().map_or(0, Vec::len);
    if log_evidence.is_empty() || k < 2 {
        return Err(format!(
            "model selection needs at least one subject and two models (got {} subjects, {k} models)",
            log_evidence.len()
        ));
    }
    if let Some(n) = log_evidence.iter().position(|r| r.len() != k) {
        return Err(format!(
            "subject {} has {} log evidences, expected {k}",
            n + 1,
            log_evidence[n].len()
        ));
    }
    if let Some(n) = log_evidence
        .iter()
        .position(|r| r.iter().any(|x| !x.is_finite()))
    {
        return Err(format!(
            "subject {} has a log evidence that is not finite",
            n + 1
        ));
    }
    if !(options.alpha0.is_finite() && options.alpha0 > 0.0) {
        return Err(format!("prior count α₀ = {} must be > 0", options.alpha0));
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
        let exceedance = exceedance_monte_carlo(&alpha, samples, &mut rng)
            .ok_or_else(|| format!("posterior counts {alpha:?} are not all positive"))?;
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

/// Everything `compare` computes: the pooled selection, one per group, and the group test.
#[derive(Clone, Debug, PartialEq)]
pub struct Selection {
    /// The comparison set.
    pub comparison: Comparison,
    /// Evidence used.
    pub evidence: Evidence,
    /// Scope `all`, then one per group (byte order) when there are at least two groups.
    pub scopes: Vec<(String, Bms)>,
    /// The between-group test, when there are at least two groups.
    pub difference: Option<GroupDifference>,
}

/// Scope label of the pooled comparison over all subjects.
pub const POOLED_SCOPE: &str = "all";

/// Runs [`random_effects_bms`] on all subjects (scope `all`, stream 0) and, with two or more
/// groups, on each group (streams 1, 2, … in byte order of the labels), and the between-group
/// test. A group labelled [`POOLED_SCOPE`] is refused.
pub fn select(
    comparison: Comparison,
    evidence: Evidence,
    options: &BmsOptions,
) -> Result<Selection, String> {
    let pooled = random_effects_bms(
        &comparison.log_evidence,
        &BmsOptions {
            stream: 0,
            ..*options
        },
    )?;
    let labels: BTreeSet<&str> = comparison.groups.iter().map(String::as_str).collect();
    if labels.len() >= 2 && labels.contains(POOLED_SCOPE) {
        return Err(format!(
            "a group is labelled '{POOLED_SCOPE}', the name of the pooled scope: relabel it"
        ));
    }
    let mut scopes = vec![(POOLED_SCOPE.to_string(), pooled)];
    if labels.len() >= 2 {
        for (index, label) in labels.iter().enumerate() {
            let rows: Vec<Vec<f64>> = comparison
                .log_evidence
                .iter()
                .zip(&comparison.groups)
                .filter(|(_, g)| g.as_str() == *label)
                .map(|(r, _)| r.clone())
                .collect();
            let bms = random_effects_bms(
                &rows,
                &BmsOptions {
                    stream: index as u64 + 1,
                    ..*options
                },
            )
            .map_err(|e| format!("group '{label}': {e}"))?;
            scopes.push((label.to_string(), bms));
        }
    }
    let difference = (scopes.len() > 1).then(|| {
        let groups: Vec<(String, &Bms)> = scopes[1..].iter().map(|(g, b)| (g.clone(), b)).collect();
        group_difference(&scopes[0].1, &groups)
    });
    Ok(Selection {
        comparison,
        evidence,
        scopes,
        difference,
    })
}

/// One row of the `model_selection.csv` table.
struct SelectionRow<'a> {
    scope: &'a str,
    model: usize,
    bms: &'a Bms,
    won: usize,
    /// Summed log evidence, AIC and BIC over the scope's subjects.
    sums: [f64; 3],
}

/// Index of the largest value (the first of ties).
fn arg_max(x: &[f64]) -> usize {
    x.iter()
        .enumerate()
        .fold((0, f64::NEG_INFINITY), |best, (i, &v)| {
            if v > best.1 { (i, v) } else { best }
        })
        .0
}

impl Selection {
    /// Subjects won by each model within the subjects of `scope` (largest log evidence used).
    pub fn subjects_won(&self, scope: &str) -> Vec<usize> {
        let mut won = vec![0; self.comparison.models.len()];
        for (row, group) in self
            .comparison
            .log_evidence
            .iter()
            .zip(&self.comparison.groups)
        {
            if scope == "all" || scope == group {
                won[arg_max(row)] += 1;
            }
        }
        won
    }

    /// The `model_selection.csv` table: one row per scope and model.
    pub fn selection_table(&self) -> Table {
        let c = &self.comparison;
        let note = c.notes.join("; ");
        let mut rows: Vec<SelectionRow<'_>> = Vec::new();
        for (scope, bms) in &self.scopes {
            let won = self.subjects_won(scope);
            for (k, &won) in won.iter().enumerate() {
                let mut sums = [0.0; 3];
                for ((records, evidence), group) in
                    c.records.iter().zip(&c.log_evidence).zip(&c.groups)
                {
                    if scope == "all" || scope == group {
                        sums[0] += evidence[k];
                        sums[1] += records[k].aic;
                        sums[2] += records[k].bic;
                    }
                }
                rows.push(SelectionRow {
                    scope,
                    model: k,
                    bms,
                    won,
                    sums,
                });
            }
        }
        let number = |f: &dyn Fn(&SelectionRow<'_>) -> Option<f64>| {
            Column::Number(rows.iter().map(f).collect())
        };
        let text =
            |f: &dyn Fn(&SelectionRow<'_>) -> String| Column::Text(rows.iter().map(f).collect());
        Table::default()
            .with("scope", text(&|r| r.scope.to_string()))
            .with("model", text(&|r| c.models[r.model].clone()))
            .with(
                "n_subjects",
                Column::Integer(rows.iter().map(|r| r.bms.assignment.len() as i64).collect()),
            )
            .with("evidence", text(&|_| self.evidence.label().to_string()))
            .with("dirichlet_count", number(&|r| Some(r.bms.alpha[r.model])))
            .with(
                "expected_frequency",
                number(&|r| Some(r.bms.expected_frequency[r.model])),
            )
            .with(
                "exceedance_probability",
                number(&|r| Some(r.bms.exceedance[r.model])),
            )
            .with(
                "exceedance_mc_se",
                number(&|r| r.bms.exceedance_se.as_ref().map(|s| s[r.model])),
            )
            .with(
                "protected_exceedance_probability",
                number(&|r| Some(r.bms.protected_exceedance[r.model])),
            )
            .with(
                "bayesian_omnibus_risk",
                number(&|r| Some(r.bms.omnibus_risk)),
            )
            .with(
                "subjects_won",
                Column::Integer(rows.iter().map(|r| r.won as i64).collect()),
            )
            .with("summed_log_evidence", number(&|r| Some(r.sums[0])))
            .with("summed_aic", number(&|r| Some(r.sums[1])))
            .with("summed_bic", number(&|r| Some(r.sums[2])))
            .with("free_energy", number(&|r| Some(r.bms.free_energy)))
            .with(
                "null_free_energy",
                number(&|r| Some(r.bms.null_free_energy)),
            )
            .with(
                "converged",
                Column::Flag(rows.iter().map(|r| r.bms.converged).collect()),
            )
            .with("note", text(&|_| note.clone()))
    }

    /// The `model_evidence.csv` table: one row per subject and compared model, with the
    /// posterior assignment g_nk of the pooled selection.
    pub fn evidence_table(&self) -> Table {
        let c = &self.comparison;
        let pooled = &self.scopes[0].1;
        let mut rows: Vec<(usize, usize, f64, f64, bool)> = Vec::new();
        for (n, records) in c.records.iter().enumerate() {
            let akaike = information_weights(&records.iter().map(|r| r.aic).collect::<Vec<_>>());
            let schwarz = information_weights(&records.iter().map(|r| r.bic).collect::<Vec<_>>());
            let winner = arg_max(&c.log_evidence[n]);
            for k in 0..records.len() {
                rows.push((n, k, akaike[k], schwarz[k], k == winner));
            }
        }
        let record = |r: &(usize, usize, f64, f64, bool)| &c.records[r.0][r.1];
        Table::default()
            .with(
                "subject",
                Column::Text(rows.iter().map(|r| record(r).subject.clone()).collect()),
            )
            .with(
                "group",
                Column::Text(rows.iter().map(|r| record(r).group.clone()).collect()),
            )
            .with(
                "model",
                Column::Text(rows.iter().map(|r| record(r).model.clone()).collect()),
            )
            .with(
                "n_trials",
                Column::Integer(rows.iter().map(|r| record(r).n_trials).collect()),
            )
            .with(
                "n_params",
                Column::Integer(rows.iter().map(|r| record(r).n_params).collect()),
            )
            .with(
                "aic",
                Column::Number(rows.iter().map(|r| Some(record(r).aic)).collect()),
            )
            .with(
                "bic",
                Column::Number(rows.iter().map(|r| Some(record(r).bic)).collect()),
            )
            .with(
                "log_evidence",
                Column::Number(
                    rows.iter()
                        .map(|r| Some(c.log_evidence[r.0][r.1]))
                        .collect(),
                ),
            )
            .with(
                "evidence",
                Column::Text(
                    rows.iter()
                        .map(|_| self.evidence.label().to_string())
                        .collect(),
                ),
            )
            .with(
                "akaike_weight",
                Column::Number(rows.iter().map(|r| Some(r.2)).collect()),
            )
            .with(
                "schwarz_weight",
                Column::Number(rows.iter().map(|r| Some(r.3)).collect()),
            )
            .with(
                "posterior_assignment",
                Column::Number(
                    rows.iter()
                        .map(|r| Some(pooled.assignment[r.0][r.1]))
                        .collect(),
                ),
            )
            .with("winner", Column::Flag(rows.iter().map(|r| r.4).collect()))
    }

    /// The `model_group_difference.csv` table: one row (none with fewer than two groups).
    pub fn difference_table(&self) -> Table {
        let d: Vec<&GroupDifference> = self.difference.iter().collect();
        Table::default()
            .with(
                "groups",
                Column::Text(d.iter().map(|d| d.groups.join(";")).collect()),
            )
            .with(
                "n_groups",
                Column::Integer(d.iter().map(|d| d.groups.len() as i64).collect()),
            )
            .with(
                "n_subjects",
                Column::Integer(d.iter().map(|d| d.n_subjects as i64).collect()),
            )
            .with(
                "evidence",
                Column::Text(
                    d.iter()
                        .map(|_| self.evidence.label().to_string())
                        .collect(),
                ),
            )
            .with(
                "free_energy_same",
                Column::Number(d.iter().map(|d| Some(d.free_energy_same)).collect()),
            )
            .with(
                "free_energy_different",
                Column::Number(d.iter().map(|d| Some(d.free_energy_different)).collect()),
            )
            .with(
                "log_bayes_factor_different",
                Column::Number(
                    d.iter()
                        .map(|d| Some(d.free_energy_different - d.free_energy_same))
                        .collect(),
                ),
            )
            .with(
                "probability_same_frequencies",
                Column::Number(d.iter().map(|d| Some(d.probability_same)).collect()),
            )
    }
}
