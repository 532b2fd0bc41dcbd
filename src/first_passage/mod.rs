//! First passage of a Wiener diffusion between two absorbing bounds.
//!
//! This module is the numerical core of the crate and depends on nothing else in it. It gives,
//! for a process with drift v, boundary separation a, relative start w, non-decision time and
//! optional across-trial variability (see [`DiffusionParams`] for the unit-noise convention):
//!
//! * [`ln_density`] and [`ln_density_with_gradient`]: the defective density of each bound in log
//!   space (Navarro & Fuss 2009), with drift variability in closed form (Blurton, Kesselmeier &
//!   Gondan 2017) and start / non-decision variability by quadrature (the full diffusion model of
//!   Ratcliff & Tuerlinckx 2002); the gradient covers all seven parameters, the two ranges by
//!   differentiating the quadrature's integrand on its nodes;
//! * [`cdf`], [`survival`], [`ln_prob_no_response`]: the defective distribution function
//!   (Blurton, Kesselmeier & Gondan 2012); [`ln_survival_with_gradient`] with all seven partial
//!   derivatives;
//! * [`bound_probability`]: the probability of each bound (Cox & Miller 1965);
//!   [`ln_bound_probability_with_gradient`] with its partial derivatives;
//! * [`mean_decision_time`], [`mean_decision_time_given`]: mean decision times overall and per
//!   bound (Grasman, Wagenmakers & van der Maas 2009);
//! * [`sample`]: exact draws of (bound, response time);
//! * [`numerical`]: time-varying (collapsing) bounds, urgency and leak, by the integral-equation
//!   method, with controllable accuracy.
//!
//! # Example
//! ```
//! use valuedrift::first_passage::{Bound, DiffusionParams, bound_probability, ln_density};
//!
//! // Drift 1, boundary separation 1.5, unbiased start, 0.3 s non-decision time (unit noise).
//! let p = DiffusionParams::new(1.0, 1.5, 0.5, 0.3).unwrap();
//! let ln_f = ln_density(0.8, Bound::Upper, &p);
//! assert!(ln_f.is_finite());
//! // P(upper) = (1 − e^(−2vaw)) / (1 − e^(−2va)) (Cox & Miller 1965).
//! let expected = (1.0 - (-1.5f64).exp()) / (1.0 - (-3.0f64).exp());
//! assert!((bound_probability(Bound::Upper, &p) - expected).abs() < 1e-15);
//! // Slower drifts mean fewer upper-bound responses.
//! let slower = p.with_drift(0.2);
//! assert!(bound_probability(Bound::Upper, &slower) < expected);
//! ```
//!
//! # Design
//! Every quantity is reduced to a standardised lower-bound problem (unit separation, time
//! u = t/a², scaled drift λ = v·a); the upper bound is the lower bound of the mirrored process.
//! Sums are carried in log space so that densities far below 1e-300 remain finite and accurate.

mod density;
mod distribution;
mod moments;
mod normal;
pub mod numerical;
mod params;
mod quadrature;
mod sampler;
mod series;

pub use density::{DensityGradient, ln_density, ln_density_with_gradient};
pub(crate) use density::{ln_density_at, ln_density_with_gradient_at};
pub use distribution::{
    bound_probability, cdf, ln_bound_probability, ln_bound_probability_with_gradient, ln_cdf,
    ln_prob_no_response, ln_survival, ln_survival_with_gradient, survival,
};
pub use moments::{mean_decision_time, mean_decision_time_given, mean_response_time};
pub use normal::ln_normal_cdf;
pub use params::{Bound, DiffusionParams, ParamError};
pub use sampler::sample;

pub(crate) use quadrature::gauss_legendre as gauss_legendre_rule;
