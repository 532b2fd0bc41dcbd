//! valuedrift: reinforcement-learning drift-diffusion models of reward-versus-effort choice.
//!
//! Researchers who study motivation fit these models to each participant's choices and response
//! times. The crate is layered: trial data → model (registry of components) → likelihood →
//! fitter → results → exports. Its numerical core, [`first_passage`], stands alone.
//!
//! Parameters estimated with this crate are research measurements, not diagnoses.
#![deny(missing_docs)]

pub mod check;
pub mod cli;
pub mod data;
pub mod exports;
pub mod files;
pub mod first_passage;
pub mod fit;
pub mod group;
pub mod likelihood;
pub mod model;
pub mod plan;
pub mod progress;
#[cfg(feature = "python")]
pub mod python;
pub mod race;
pub mod report;
pub mod results;
pub mod simulate;
