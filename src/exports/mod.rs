//! Per-trial latent variables of a fitted model, for imaging analyses.
//!
//! From each subject's fitted (natural-scale) parameters the learning recursion is run again over
//! the subject's trials ([`crate::likelihood::SubjectLikelihood::trace`]), giving per trial the
//! values before the outcome, the subjective values after the costs, the decision signal, the
//! prediction error at the outcome, the probability of the choice made and the expected times.
//!
//! Two products:
//! - a tidy table of every trial ([`latents_table`]), raw (unscaled);
//! - events files following the BIDS standard for events ([`events_files`]): one per subject
//!   and run, with `choice` and `outcome` events and one column per parametric modulator,
//!   scaled within the run ([`Scale`]), `n/a` where a value does not exist, and a JSON sidecar
//!   describing every column;
//! - with a repetition time and a number of scans, design matrices ([`hrf::design_file`]): the
//!   events' regressors convolved with the canonical haemodynamic response ([`hrf`]).

mod bids;
mod estimates;
mod events;
pub mod hrf;
mod latents;

pub use bids::*;
pub use estimates::*;
pub use events::*;
pub use latents::*;
