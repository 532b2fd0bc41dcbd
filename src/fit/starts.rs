//! Start points of the per-subject search.
//!
//! Starts are drawn inside each free parameter's declared start range, narrowed to the
//! subject's own bounds (non-decision time is capped below the fastest response) but never
//! replaced by them: only when the declared range lies wholly outside the subject's bounds are
//! starts spread over the middle 80 % of the subject's range instead. Points are spread
//! uniformly on the optimiser's unconstrained scale between the images of the range's ends (for
//! a range far from its bounds, or a positive parameter with an open upper bound, this is close
//! to log-uniform, so a range that spans orders of magnitude is covered evenly), by a Halton
//! sequence (Halton 1960) shifted by a Cranley–Patterson rotation (Cranley & Patterson 1976).
//!
//! The rotation comes from the seed and the subject's label (SHA-256 of the label selects the
//! stream of the seeded ChaCha8 generator), so a subject gets the same starts whether it is
//! fitted alone or inside a larger file, whatever its row position.
//!
//! Screening: [`StartPlan::screened`] evaluates [`SCREEN_FACTOR`] candidates per start and keeps
//! the best, so that no L-BFGS run begins where the model predicts the data badly (for example
//! strongly negative drifts for a participant who accepts most offers), from where it tends to
//! walk onto a flat region of the likelihood.

use super::optimise::Begin;
use crate::likelihood::SubjectLikelihood;
use rand::{RngExt, SeedableRng};
use rand_chacha::ChaCha8Rng;
use sha2::{Digest, Sha256};

/// Candidates evaluated per start kept by [`StartPlan::screened`].
pub const SCREEN_FACTOR: usize = 4;

/// Share of the subject's range kept free at each end when the declared start range lies wholly
/// outside the subject's bounds.
const FALLBACK_MARGIN: f64 = 0.1;

/// Where one subject's starts come from: per free parameter the interval on the unconstrained
/// scale, and the rotation of the Halton sequence.
#[derive(Clone, Debug)]
pub struct StartPlan {
    /// (θ at the low end, θ at the high end) of each free parameter's start range.
    intervals: Vec<(f64, f64)>,
    /// Cranley–Patterson shift of each coordinate.
    shift: Vec<f64>,
}

/// The generator stream of a subject: the first eight bytes of SHA-256 of its label.
pub fn subject_stream(label: &str) -> u64 {
    let digest = Sha256::digest(label.as_bytes());
    u64::from_le_bytes(
        digest[..8]
            .try_into()
            .expect("a SHA-256 digest has 32 bytes"),
    )
}

impl StartPlan {
    /// The plan of `likelihood`'s subject for `seed`.
    pub fn new(likelihood: &SubjectLikelihood<'_>, seed: u64) -> StartPlan {
        let model = likelihood.model();
        let bounds = likelihood.free_bounds();
        let transforms = likelihood.transforms();
        let intervals = model
            .free_slots()
            .iter()
            .enumerate()
            .map(|(j, &slot)| {
                let (lo, hi) = natural_start_range(model.parameters[slot].start_range, bounds[j]);
                (
                    transforms[j].unconstrained(lo),
                    transforms[j].unconstrained(hi),
                )
            })
            .collect::<Vec<_>>();
        let mut rng = ChaCha8Rng::seed_from_u64(seed);
        rng.set_stream(subject_stream(&likelihood.subject().id));
        let shift = intervals.iter().map(|_| rng.random::<f64>()).collect();
        StartPlan { intervals, shift }
    }

    /// The i-th point of the rotated Halton sequence (unconstrained scale), i ≥ 0.
    pub fn point(&self, i: usize) -> Vec<f64> {
        self.intervals
            .iter()
            .enumerate()
            .map(|(j, &(lo, hi))| {
                let u = (halton(i as u64 + 1, PRIMES[j % PRIMES.len()]) + self.shift[j]).fract();
                lo + u * (hi - lo)
            })
            .collect()
    }

    /// θ at quantile `q` ∈ [0, 1] of free parameter j's start interval.
    pub fn level(&self, j: usize, q: f64) -> f64 {
        let (lo, hi) = self.intervals[j];
        lo + q * (hi - lo)
    }

    /// The `n` best of `SCREEN_FACTOR·n` candidate points by log-posterior (ties and
    /// non-finite values keep sequence order), in order of decreasing log-posterior, each with
    /// its evaluation, which its L-BFGS run then need not repeat.
    pub fn screened(&self, likelihood: &SubjectLikelihood<'_>, n: usize) -> Vec<Begin> {
        let mut scored: Vec<(f64, usize, Begin)> = (0..n * SCREEN_FACTOR)
            .map(|i| {
                let theta = self.point(i);
                let e = likelihood.evaluate(&theta);
                let objective = e.ln_likelihood + e.ln_prior;
                let score = if objective.is_finite() {
                    objective
                } else {
                    f64::NEG_INFINITY
                };
                let start = Begin {
                    theta,
                    evaluated: Some(e),
                };
                (score, i, start)
            })
            .collect();
        scored.sort_by(|a, b| b.0.total_cmp(&a.0).then(a.1.cmp(&b.1)));
        scored.into_iter().take(n).map(|(_, _, t)| t).collect()
    }

    /// `n` further points that no earlier call used (sequence indices from `first`).
    pub fn fresh(&self, first: usize, n: usize) -> Vec<Vec<f64>> {
        (first..first + n).map(|i| self.point(i)).collect()
    }
}

/// The declared start range narrowed to the subject's bounds (strictly inside them), or, when
/// the two do not overlap, the middle of the subject's bounds.
fn natural_start_range(declared: (f64, f64), bounds: (f64, f64)) -> (f64, f64) {
    let (b_lo, b_hi) = bounds;
    let width = b_hi - b_lo;
    // Keep starts off the bounds themselves, where the transform is singular.
    let inset = if width.is_finite() { 1e-3 * width } else { 0.0 };
    let (lo, hi) = (declared.0.max(b_lo + inset), declared.1.min(b_hi - inset));
    if lo <= hi {
        (lo, hi)
    } else if width.is_finite() {
        (
            b_lo + FALLBACK_MARGIN * width,
            b_hi - FALLBACK_MARGIN * width,
        )
    } else if declared.0 >= b_hi {
        // An open lower end: go below the upper bound by the declared range's width.
        let span = (declared.1 - declared.0).max(1.0);
        (b_hi - 2.0 * span, b_hi - 0.5 * span)
    } else {
        let span = (declared.1 - declared.0).max(1.0);
        (b_lo + 0.5 * span, b_lo + 2.0 * span)
    }
}

const PRIMES: [u64; 12] = [2, 3, 5, 7, 11, 13, 17, 19, 23, 29, 31, 37];

/// The i-th element of the van der Corput sequence in `base` (Halton 1960).
fn halton(mut i: u64, base: u64) -> f64 {
    let mut f = 1.0;
    let mut r = 0.0;
    while i > 0 {
        f /= base as f64;
        r += f * (i % base) as f64;
        i /= base;
    }
    r
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn declared_ranges_are_narrowed_not_replaced() {
        // Inside the bounds: kept exactly.
        assert_eq!(natural_start_range((1.0, 8.0), (0.0, 30.0)), (1.0, 8.0));
        // Overlapping: cut to the bound (with a small inset).
        let (lo, hi) = natural_start_range((0.1, 0.35), (0.0, 0.2));
        assert_eq!(lo, 0.1);
        assert!((hi - (0.2 - 2e-4)).abs() < 1e-12);
        // Disjoint (ndt capped below a fastest response of 0.05 s): middle 80 %.
        let (lo, hi) = natural_start_range((0.1, 0.35), (0.0, 0.04995));
        assert!((lo - 0.004995).abs() < 1e-12 && (hi - 0.044955).abs() < 1e-12);
    }

    #[test]
    fn halton_base_two_is_the_van_der_corput_sequence() {
        // van der Corput (1935): 1/2, 1/4, 3/4, 1/8, 5/8.
        let got: Vec<f64> = (1..=5).map(|i| halton(i, 2)).collect();
        assert_eq!(got, vec![0.5, 0.25, 0.75, 0.125, 0.625]);
    }
}
