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
//! scored on choices and response times are not comparable. fit_summary.csv records what each
//! likelihood scored ([`recorded_data_kind`], by name for built-in models in older files);
//! [`assemble`] keeps only the response-time models when both kinds are present.
//!
//! Special functions (ψ, ln Γ, the regularised incomplete beta I_x) come from `statrs`. Every
//! exponential of a log evidence goes through log-sum-exp; no result is NaN.

mod evidence;
mod tables;
mod variational;

pub use evidence::*;
pub use tables::*;
pub use variational::*;
