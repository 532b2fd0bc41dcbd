//! Boundary shapes of the numerical engine: the half-width of the two bounds as a fraction s(t)
//! of its starting value a/2, so that the bounds are ±(a/2)·s(t) around the midpoint.

use num_dual::DualNum;

/// How the half-width of the bounds changes with decision time t (seconds): the upper bound is
/// (a/2)·s(t) above the midpoint and the lower bound as far below it, with s(0) = 1.
///
/// Each variant is generic over the number type so that its parameters can carry derivatives.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum Collapse<N> {
    /// s(t) = 1: the fixed bounds of the Wiener diffusion (Ratcliff 1978).
    Constant,
    /// s(t) = 1 − r·t, a linear collapse at rate r ≥ 0 per second, the bounds meeting at
    /// t = 1/r (Voskuilen, Ratcliff & Smith 2016: linearly collapsing bounds). After the
    /// meeting no process is undecided, so a later response has density zero.
    Linear {
        /// r: the fraction of the half-width lost per second.
        rate: N,
    },
    /// s(t) = 1 − k·t/(t + c), a hyperbolic-ratio collapse to 1 − k with half of it reached at
    /// t = c (Voskuilen, Ratcliff & Smith 2016; from memory).
    Hyperbolic {
        /// k ∈ [0, 1]: the fraction of the half-width lost as t → ∞.
        fraction: N,
        /// c > 0: the time (s) at which half of that is lost.
        half_time: N,
    },
    /// s(t) = 1 − k·(1 − exp(−(t/λ)^κ)), the Weibull collapse of Hawkins, Forstmann,
    /// Wagenmakers, Ratcliff & Brown (2015), from 1 to 1 − k.
    Weibull {
        /// k ∈ [0, 1]: the fraction of the half-width lost as t → ∞.
        fraction: N,
        /// λ > 0: the scale (s) of the Weibull distribution function.
        scale: N,
        /// κ > 0: its shape (κ > 1 delays the collapse, then makes it steep).
        shape: N,
    },
    /// An urgency gain γ(t) = 1 + m·t multiplying the accumulated evidence (its distance from
    /// the midpoint) before it is compared with fixed bounds ±a/2 (a linearly rising urgency
    /// signal, Ditterich 2006; Cisek, Puskas & El-Murr 2009). The gained process reaches ±a/2
    /// exactly when the evidence reaches ±(a/2)/γ(t), so s(t) = 1/(1 + m·t): the same first
    /// passage as a hyperbolic collapse with k = 1 and c = 1/m. The gain multiplies the
    /// accumulated evidence with its noise, not the momentary input.
    Urgency {
        /// m ≥ 0: the gain's rise per second.
        gain: N,
    },
}

impl<N: DualNum<Primitive = f64> + Copy> Collapse<N> {
    /// (s(t), ds/dt) at decision time t > 0.
    pub fn factor(&self, t: N) -> (N, N) {
        let one = N::from(1.0);
        match *self {
            Collapse::Constant => (one, N::from(0.0)),
            Collapse::Linear { rate } => (one - rate * t, -rate),
            Collapse::Hyperbolic {
                fraction,
                half_time,
            } => {
                let denominator = t + half_time;
                (
                    one - fraction * t / denominator,
                    -fraction * half_time / (denominator * denominator),
                )
            }
            Collapse::Weibull {
                fraction,
                scale,
                shape,
            } => {
                // z = (t/λ)^κ; d/dt (1 − e^{−z}) = e^{−z}·κ·z/t.
                let z = (shape * (t / scale).ln()).exp();
                let survive = (-z).exp();
                (
                    one - fraction * (one - survive),
                    -fraction * survive * shape * z / t,
                )
            }
            Collapse::Urgency { gain } => {
                let gamma = one + gain * t;
                (gamma.recip(), -gain / (gamma * gamma))
            }
        }
    }

    /// The shape's parameters as (name, value) pairs, for checks and messages.
    pub fn parameters(&self) -> Vec<(&'static str, N)> {
        match *self {
            Collapse::Constant => Vec::new(),
            Collapse::Linear { rate } => vec![("collapse_rate", rate)],
            Collapse::Hyperbolic {
                fraction,
                half_time,
            } => vec![("collapse", fraction), ("half_time", half_time)],
            Collapse::Weibull {
                fraction,
                scale,
                shape,
            } => vec![
                ("collapse", fraction),
                ("collapse_scale", scale),
                ("collapse_shape", shape),
            ],
            Collapse::Urgency { gain } => vec![("urgency", gain)],
        }
    }

    /// Checks the parameters' domains (see each variant).
    pub(super) fn check(&self) -> Result<(), super::NumericalError> {
        for (name, value) in self.parameters() {
            let v = value.re();
            let ok = match name {
                "collapse" => (0.0..=1.0).contains(&v),
                "collapse_rate" | "urgency" => v >= 0.0 && v.is_finite(),
                _ => v > 0.0 && v.is_finite(),
            };
            if !ok {
                return Err(super::NumericalError::Parameter {
                    name,
                    value: v,
                    expected: match name {
                        "collapse" => "a fraction in [0, 1]",
                        "collapse_rate" | "urgency" => "a finite number ≥ 0",
                        _ => "a finite number > 0",
                    },
                });
            }
        }
        Ok(())
    }
}
