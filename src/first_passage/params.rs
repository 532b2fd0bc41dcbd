//! Parameters of the Wiener diffusion and the two absorbing bounds.

use std::f64::consts::PI;
use std::fmt;

/// Which absorbing bound the process reached.
///
/// With a positive drift the process tends towards [`Bound::Upper`]. In the choice models of this
/// crate choosing option `a` is the upper bound.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, serde::Serialize, serde::Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Bound {
    /// The bound at `boundary`, reached first more often when the drift is positive.
    Upper,
    /// The bound at 0.
    Lower,
}

impl Bound {
    /// The other bound.
    pub fn other(self) -> Bound {
        match self {
            Bound::Upper => Bound::Lower,
            Bound::Lower => Bound::Upper,
        }
    }

    /// Parses `upper` or `lower` (case-insensitive, surrounding white space ignored).
    pub fn parse(text: &str) -> Option<Bound> {
        let t = text.trim();
        if t.eq_ignore_ascii_case("upper") {
            Some(Bound::Upper)
        } else if t.eq_ignore_ascii_case("lower") {
            Some(Bound::Lower)
        } else {
            None
        }
    }

    /// The lowercase name used in files.
    pub fn as_str(self) -> &'static str {
        match self {
            Bound::Upper => "upper",
            Bound::Lower => "lower",
        }
    }
}

impl fmt::Display for Bound {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.as_str())
    }
}

/// A parameter value outside its domain.
#[derive(Clone, Debug, PartialEq, thiserror::Error)]
#[error("{name} = {value} is not allowed: {expected}")]
pub struct ParamError {
    /// Name of the parameter as used in files and on the command line.
    pub name: &'static str,
    /// The value that was given.
    pub value: f64,
    /// What the value must be.
    pub expected: &'static str,
}

/// Parameters of one Wiener first-passage process, validated at construction.
///
/// # Scaling convention
/// The within-trial noise has unit standard deviation per unit time (s = 1): the accumulated
/// evidence after time t with drift v has variance t. Parameters published under the convention
/// s = 0.1 convert by dividing `drift`, `boundary` and `drift_sd` by 0.1 (that is, multiplying them
/// by 10); `start`, `ndt`, `start_range` and `ndt_range` are unchanged.
///
/// # Fields
/// * `drift` v (any finite value; positive heads to the upper bound),
/// * `boundary` a > 0 (boundary separation),
/// * `start` w in (0, 1): starting point as a fraction of `boundary`, measured from the lower bound,
/// * `ndt` ≥ 0: non-decision time in seconds,
/// * `drift_sd` η ≥ 0: across-trial standard deviation of a normal drift,
/// * `start_range` ≥ 0: width of a uniform across-trial start distribution centred on `start`
///   (it must stay inside (0, 1)),
/// * `ndt_range` ≥ 0: width of a uniform non-decision time distribution centred on `ndt`
///   (it must stay at or above 0).
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct DiffusionParams {
    pub(crate) drift: f64,
    pub(crate) boundary: f64,
    pub(crate) start: f64,
    pub(crate) ndt: f64,
    pub(crate) drift_sd: f64,
    pub(crate) start_range: f64,
    pub(crate) ndt_range: f64,
    /// ln a, cached for the density kernels.
    pub(crate) ln_boundary: f64,
    /// Functions of the current start cached for the series; see [`StartTerms`].
    pub(crate) start_terms: StartTerms,
    /// ln(1 − w), to mirror `start_terms` without a logarithm.
    pub(crate) ln_start_complement: f64,
}

/// Functions of the relative start w that the density series need at every evaluation:
/// ln w, sin πw, cos πw and ln sin πw. Mirroring w → 1 − w swaps ln w with ln(1 − w), keeps the
/// sine and negates the cosine.
#[derive(Clone, Copy, Debug, PartialEq)]
pub(crate) struct StartTerms {
    pub w: f64,
    pub ln_w: f64,
    pub sin_pi_w: f64,
    pub cos_pi_w: f64,
    pub ln_sin_pi_w: f64,
}

impl StartTerms {
    pub(crate) fn new(w: f64) -> StartTerms {
        let (sin_pi_w, cos_pi_w) = (PI * w).sin_cos();
        StartTerms {
            w,
            ln_w: w.ln(),
            sin_pi_w,
            cos_pi_w,
            ln_sin_pi_w: sin_pi_w.ln(),
        }
    }
}

fn check(
    name: &'static str,
    value: f64,
    ok: bool,
    expected: &'static str,
) -> Result<(), ParamError> {
    if ok && value.is_finite() {
        Ok(())
    } else {
        Err(ParamError {
            name,
            value,
            expected,
        })
    }
}

impl DiffusionParams {
    /// A process without across-trial variability.
    pub fn new(drift: f64, boundary: f64, start: f64, ndt: f64) -> Result<Self, ParamError> {
        check("drift", drift, true, "a finite number")?;
        check("boundary", boundary, boundary > 0.0, "a finite number > 0")?;
        check(
            "start",
            start,
            start > 0.0 && start < 1.0,
            "a number strictly between 0 and 1 (fraction of the boundary separation)",
        )?;
        check("ndt", ndt, ndt >= 0.0, "a finite number of seconds >= 0")?;
        Ok(DiffusionParams {
            drift,
            boundary,
            start,
            ndt,
            drift_sd: 0.0,
            start_range: 0.0,
            ndt_range: 0.0,
            ln_boundary: boundary.ln(),
            start_terms: StartTerms::new(start),
            ln_start_complement: (-start).ln_1p(),
        })
    }

    /// Adds across-trial variability; each of the three may be zero.
    pub fn with_variability(
        mut self,
        drift_sd: f64,
        start_range: f64,
        ndt_range: f64,
    ) -> Result<Self, ParamError> {
        check(
            "drift_sd",
            drift_sd,
            drift_sd >= 0.0,
            "a finite number >= 0",
        )?;
        check(
            "start_range",
            start_range,
            start_range >= 0.0
                && self.start - start_range / 2.0 > 0.0
                && self.start + start_range / 2.0 < 1.0,
            "a width >= 0 with start ± start_range/2 inside (0, 1)",
        )?;
        check(
            "ndt_range",
            ndt_range,
            ndt_range >= 0.0 && self.ndt - ndt_range / 2.0 >= 0.0,
            "a width >= 0 with ndt - ndt_range/2 >= 0",
        )?;
        self.drift_sd = drift_sd;
        self.start_range = start_range;
        self.ndt_range = ndt_range;
        Ok(self)
    }

    /// Drift rate v.
    pub fn drift(&self) -> f64 {
        self.drift
    }
    /// Boundary separation a.
    pub fn boundary(&self) -> f64 {
        self.boundary
    }
    /// Relative starting point w.
    pub fn start(&self) -> f64 {
        self.start
    }
    /// Non-decision time in seconds.
    pub fn ndt(&self) -> f64 {
        self.ndt
    }
    /// Across-trial drift standard deviation η.
    pub fn drift_sd(&self) -> f64 {
        self.drift_sd
    }
    /// Width of the uniform start distribution.
    pub fn start_range(&self) -> f64 {
        self.start_range
    }
    /// Width of the uniform non-decision time distribution.
    pub fn ndt_range(&self) -> f64 {
        self.ndt_range
    }

    /// True when start or non-decision time vary across trials (these need numerical integration).
    pub fn has_integrated_variability(&self) -> bool {
        self.start_range > 0.0 || self.ndt_range > 0.0
    }

    /// The same process seen from the other bound: drift and start mirrored, so that
    /// quantities of the upper bound are those of the lower bound of the mirror
    /// (Navarro & Fuss 2009, eq. 2: f_upper(t | v, a, w) = f_lower(t | −v, a, 1 − w)).
    pub(crate) fn mirrored_for(&self, bound: Bound) -> DiffusionParams {
        match bound {
            Bound::Lower => *self,
            Bound::Upper => DiffusionParams {
                drift: -self.drift,
                start: 1.0 - self.start,
                start_terms: StartTerms {
                    w: 1.0 - self.start,
                    ln_w: self.ln_start_complement,
                    cos_pi_w: -self.start_terms.cos_pi_w,
                    ..self.start_terms
                },
                ln_start_complement: self.start_terms.ln_w,
                ..*self
            },
        }
    }

    /// The process started exactly at `start` (no start range): a node of the start average.
    pub(crate) fn with_start(&self, start: f64) -> DiffusionParams {
        DiffusionParams {
            start,
            start_range: 0.0,
            start_terms: StartTerms::new(start),
            ln_start_complement: (-start).ln_1p(),
            ..*self
        }
    }

    /// The same process with another drift rate (any finite value), keeping every cached
    /// quantity: the cheap way to vary drift from trial to trial.
    pub fn with_drift(&self, drift: f64) -> DiffusionParams {
        DiffusionParams { drift, ..*self }
    }

    pub(crate) fn fixed_core(&self) -> DiffusionParams {
        DiffusionParams {
            drift_sd: 0.0,
            start_range: 0.0,
            ndt_range: 0.0,
            ..*self
        }
    }
}

/// x > 0, false for NaN: the test for a positive time or width.
#[inline]
pub(crate) fn positive(x: f64) -> bool {
    x > 0.0
}
