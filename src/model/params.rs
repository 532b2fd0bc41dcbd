//! Declared parameters: bounds, start ranges, fixed values, priors, and the map between the
//! natural scale and the unconstrained scale the optimiser works on.

use super::dual::{D, chain, gradient};
use num_dual::DualNum;
use statrs::distribution::{Beta, Continuous, Gamma, LogNormal, Normal};

/// A prior density on the natural scale of a parameter (for maximum a posteriori fits).
#[derive(Clone, Debug, PartialEq, serde::Serialize, serde::Deserialize)]
#[serde(tag = "family", rename_all = "lowercase", deny_unknown_fields)]
pub enum Prior {
    /// Normal(mean, sd).
    Normal {
        /// Mean.
        mean: f64,
        /// Standard deviation (> 0).
        sd: f64,
    },
    /// Beta(a, b), for parameters in (0, 1).
    Beta {
        /// First shape (> 0).
        a: f64,
        /// Second shape (> 0).
        b: f64,
    },
    /// Gamma(shape, rate), for positive parameters.
    Gamma {
        /// Shape (> 0).
        shape: f64,
        /// Rate (> 0).
        rate: f64,
    },
    /// LogNormal(mu, sigma) of the log, for positive parameters.
    Lognormal {
        /// Mean of the log.
        mu: f64,
        /// Standard deviation of the log (> 0).
        sigma: f64,
    },
}

impl Prior {
    /// Checks the hyper-parameters; the message says what is wrong.
    pub fn validate(&self) -> Result<(), String> {
        let ok = match *self {
            Prior::Normal { mean, sd } => Normal::new(mean, sd).is_ok(),
            Prior::Beta { a, b } => Beta::new(a, b).is_ok(),
            Prior::Gamma { shape, rate } => Gamma::new(shape, rate).is_ok(),
            Prior::Lognormal { mu, sigma } => LogNormal::new(mu, sigma).is_ok(),
        };
        if ok {
            Ok(())
        } else {
            Err(format!(
                "invalid prior hyper-parameters {self:?} (scales and shapes must be finite and > 0)"
            ))
        }
    }

    /// ln p(x) on the natural scale and its derivative d ln p / dx (statrs densities; the
    /// derivatives are those of the standard formulas, e.g. Johnson, Kotz & Balakrishnan 1994).
    pub fn ln_density_with_slope(&self, x: f64) -> (f64, f64) {
        match *self {
            Prior::Normal { mean, sd } => {
                let d = Normal::new(mean, sd).expect("validated");
                (d.ln_pdf(x), -(x - mean) / (sd * sd))
            }
            Prior::Beta { a, b } => {
                let d = Beta::new(a, b).expect("validated");
                (d.ln_pdf(x), (a - 1.0) / x - (b - 1.0) / (1.0 - x))
            }
            Prior::Gamma { shape, rate } => {
                let d = Gamma::new(shape, rate).expect("validated");
                (d.ln_pdf(x), (shape - 1.0) / x - rate)
            }
            Prior::Lognormal { mu, sigma } => {
                let d = LogNormal::new(mu, sigma).expect("validated");
                (d.ln_pdf(x), -1.0 / x - (x.ln() - mu) / (sigma * sigma * x))
            }
        }
    }
}

/// How a free parameter maps from the unconstrained scale θ to its natural scale.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum Transform {
    /// x = lower + (upper − lower)·σ(θ), σ the logistic function.
    Logistic {
        /// Lower bound.
        lower: f64,
        /// Upper bound.
        upper: f64,
    },
    /// x = lower + e^θ.
    Exp {
        /// Lower bound.
        lower: f64,
    },
    /// x = upper − e^θ.
    ExpBelow {
        /// Upper bound.
        upper: f64,
    },
    /// x = θ.
    Identity,
}

impl Transform {
    /// From declared bounds (either may be infinite).
    pub fn from_bounds(lower: f64, upper: f64) -> Transform {
        match (lower.is_finite(), upper.is_finite()) {
            (true, true) => Transform::Logistic { lower, upper },
            (true, false) => Transform::Exp { lower },
            (false, true) => Transform::ExpBelow { upper },
            (false, false) => Transform::Identity,
        }
    }

    /// Natural value for θ, as a dual number carrying ∂x/∂θ when θ carries ∂θ.
    pub fn to_natural(&self, theta: D) -> D {
        match *self {
            Transform::Logistic { lower, upper } => {
                let s = logistic(theta.re);
                let width = upper - lower;
                chain(lower + width * s, &[(width * s * (1.0 - s), &theta)])
            }
            Transform::Exp { lower } => theta.exp() + lower,
            Transform::ExpBelow { upper } => -theta.exp() + upper,
            Transform::Identity => theta,
        }
    }

    /// Natural value for θ (plain numbers).
    pub fn natural(&self, theta: f64) -> f64 {
        self.to_natural(D::from_re(theta)).re
    }

    /// dx/dθ at θ: (upper − lower)·σ(θ)(1 − σ(θ)), e^θ, −e^θ or 1 (exact, through the dual
    /// number of [`Transform::to_natural`]).
    pub fn slope(&self, theta: f64) -> f64 {
        gradient(&self.to_natural(D::from_re(theta).derivative(0)))[0]
    }

    /// θ for a natural value strictly inside the bounds.
    pub fn unconstrained(&self, x: f64) -> f64 {
        match *self {
            Transform::Logistic { lower, upper } => {
                let p = (x - lower) / (upper - lower);
                (p / (1.0 - p)).ln()
            }
            Transform::Exp { lower } => (x - lower).ln(),
            Transform::ExpBelow { upper } => (upper - x).ln(),
            Transform::Identity => x,
        }
    }
}

/// σ(θ) = 1/(1 + e^−θ), evaluated without overflow for any θ.
pub fn logistic(theta: f64) -> f64 {
    if theta >= 0.0 {
        1.0 / (1.0 + (-theta).exp())
    } else {
        let e = theta.exp();
        e / (1.0 + e)
    }
}

/// One declared parameter of a model.
#[derive(Clone, Debug, PartialEq)]
pub struct ParameterSpec {
    /// Name used in files and outputs.
    pub name: String,
    /// Lower bound (may be −∞).
    pub lower: f64,
    /// Upper bound (may be +∞).
    pub upper: f64,
    /// Range on the natural scale from which starting values are drawn.
    pub start_range: (f64, f64),
    /// A fixed value: the parameter is not estimated.
    pub fixed: Option<f64>,
    /// Optional prior (makes the fit maximum a posteriori).
    pub prior: Option<Prior>,
    /// What the parameter means, for listings.
    pub description: String,
}

impl ParameterSpec {
    /// True when the parameter is estimated.
    pub fn is_free(&self) -> bool {
        self.fixed.is_none()
    }

    /// The transform between the natural and the unconstrained scale.
    pub fn transform(&self) -> Transform {
        Transform::from_bounds(self.lower, self.upper)
    }
}
