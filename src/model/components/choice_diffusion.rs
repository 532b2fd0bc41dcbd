//! Diffusion choice stage: choices and response times jointly through the Wiener first-passage
//! density (Ratcliff 1978; Navarro & Fuss 2009), choosing `a` at the upper bound. Optional
//! across-trial variability of the full diffusion model (Ratcliff & Tuerlinckx 2002): a normal
//! drift with standard deviation `drift_sd`, a uniform relative start of width `start_range`
//! centred on `start`, a uniform non-decision time of width `ndt_range` centred on `ndt`; and a
//! lapse mixture in which, with probability `lapse`, a response is a guess (either option, time
//! uniform over the subject's observed range). A choice whose time is not used (trimmed) scores
//! the absorption probability of its bound alone.
//!
//! # Across-trial ranges
//! The ranges enter through the first-passage engine's averages, whose partial derivatives
//! (on the quadrature nodes, see [`crate::first_passage::ln_density_with_gradient`]) are
//! chained to the free parameters like the others. The model file keeps start ± start_range/2
//! inside (0, 1) and ndt − ndt_range/2 ≥ 0 for every allowed value (src/model/spec.rs). The
//! earliest possible response is ndt − ndt_range/2, so ndt itself may lie above the fastest
//! response: the likelihood bounds ndt by the fastest response plus half the largest allowed
//! ndt_range (src/likelihood/mod.rs); a point where ndt − ndt_range/2 reaches the fastest response
//! has likelihood zero and the fitter treats it as invalid. A lock conditions the process when it
//! is later than ndt − ndt_range/2.
//!
//! # Response windows
//! With a deadline D, a trial without response scores S(D) = S_a(D) + S_b(D), the probability
//! that no bound is reached by D, where S_c(t) = P(bound c, T > t) and T = decision time + ndt.
//! With a lock L (no response possible before L: the buttons unlock then), what is observed
//! is the process conditioned on not having ended before L. By Bayes' rule, for a response c at
//! time t ≥ L, f(c, t | T > L) = f(c, t)/S(L); a trial without response scores S(D)/S(L); a
//! choice without its time scores S_c(L)/S(L), the probability of c among processes still
//! running at L. When L ≤ ndt, S(L) = 1 and nothing changes. Lapse guesses (uniform over the
//! observed times, all after the lock) are mixed in after the conditioning. The simulator
//! matches it by rejection: draws with T < L are redrawn, which yields exactly the conditioned
//! process (tests/suite/response_window.rs compares the two).

use super::{
    ChoiceStage, Entry, LocalStretch, NoLocalForm, Observation, Options, PreparedChoice, Signal,
    Slots, SubjectContext, local_trial, local_trial_by_trial, only_options,
};
use crate::data::Choice;
use crate::first_passage::{
    Bound, DensityGradient, DiffusionParams, ln_bound_probability_with_gradient,
    ln_density_with_gradient, ln_survival, ln_survival_with_gradient, mean_decision_time, sample,
};
use crate::model::dual::{D, chain};
use nalgebra::{Const, SVector, U1};
use num_dual::{Derivative, DualNum, DualSVec64};
use rand::{Rng, RngExt};
use std::cell::RefCell;

/// The table entry.
pub const ENTRY: Entry<dyn ChoiceStage> = Entry {
    name: "diffusion",
    parameters: &[
        "boundary",
        "ndt",
        "start",
        "drift_sd",
        "start_range",
        "ndt_range",
        "lapse",
    ],
    defaults: &[
        ("start", 0.5),
        ("drift_sd", 0.0),
        ("start_range", 0.0),
        ("ndt_range", 0.0),
        ("lapse", 0.0),
    ],
    equation: "(choice, rt) ~ Wiener first passage(drift' ~ N(drift, drift_sd²), boundary, \
               start' ~ U(start ± start_range/2), ndt' ~ U(ndt ± ndt_range/2)); a = upper bound; \
               with lapse: (1 − lapse)·f + lapse·½/(rt_max − rt_min)  \
               (Navarro & Fuss 2009; Ratcliff & Tuerlinckx 2002)",
    build,
};

struct Diffusion {
    boundary: usize,
    ndt: usize,
    start: usize,
    drift_sd: usize,
    start_range: usize,
    ndt_range: usize,
    lapse: usize,
}

fn build(options: &Options, slots: Slots<'_>) -> Result<Box<dyn ChoiceStage>, String> {
    only_options(options, &[])?;
    Ok(Box::new(Diffusion {
        boundary: slots("boundary"),
        ndt: slots("ndt"),
        start: slots("start"),
        drift_sd: slots("drift_sd"),
        start_range: slots("start_range"),
        ndt_range: slots("ndt_range"),
        lapse: slots("lapse"),
    }))
}

impl ChoiceStage for Diffusion {
    fn signal(&self) -> Signal {
        Signal::DriftDifference
    }

    fn uses_response_times(&self) -> bool {
        true
    }

    fn max_options(&self) -> Option<usize> {
        Some(2)
    }

    fn diffusion(&self) -> Option<DiffusionSlots> {
        Some(DiffusionSlots(self.slots()))
    }

    fn prepare<'a>(&'a self, p: &'a [D], context: SubjectContext) -> Box<dyn PreparedChoice + 'a> {
        let base = DiffusionSlots(self.slots()).base(|slot| p[slot].re);
        let lapse = p[self.lapse];
        let guess_density = 0.5 / (context.rt_max - context.rt_min).max(1e-3);
        // The lapse rate as a stage number: the last of its local partial derivatives.
        let local_lapse = Local8::from_re(lapse.re).derivative(LAPSE);
        Box::new(Prepared {
            stage: self,
            p,
            base,
            lapse: lapse_terms(lapse, guess_density),
            local_lapse,
            local_lapse_terms: lapse_terms(local_lapse, guess_density),
            context,
            survivals: RefCell::new(Vec::new()),
        })
    }
}

/// Most survival integrals kept per prepared stage (a subject's distinct offers).
const SURVIVAL_CACHE: usize = 64;

/// A stage quantity with its partial derivatives with respect to the trial's drift and the
/// stage's seven parameters (in the order of [`Diffusion::slots`]), for the likelihood's fast path.
type Local8 = DualSVec64<8>;

/// Position of the lapse rate among a [`Local8`]'s partial derivatives.
const LAPSE: usize = 7;

/// (ln(1 − lapse), ln(lapse·guess density)) when the lapse rate is above zero.
fn lapse_terms<N: DualNum<Primitive = f64> + Copy>(lapse: N, guess_density: f64) -> Option<(N, N)> {
    (lapse.re() > 0.0).then(|| ((-lapse).ln_1p(), lapse.ln() + guess_density.ln()))
}

/// The slots of the diffusion stage's parameters in the order boundary, start, ndt, drift_sd,
/// start_range, ndt_range, lapse (the order of a [`Local8`]'s partial derivatives after the
/// drift), for the likelihood's fused kernel.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct DiffusionSlots(pub [usize; 7]);

impl DiffusionSlots {
    /// Slot of the lapse rate.
    pub(crate) fn lapse(&self) -> usize {
        self.0[LAPSE - 1]
    }

    /// The process at drift 0 with the stage's parameters (`value` of each slot), or `None`
    /// when they are invalid. The fitter keeps every parameter inside its declared bounds, so
    /// this cannot fail for a valid model; a NaN proposal falls back to a neutral process and
    /// an infinite cost.
    pub(crate) fn base(&self, value: impl Fn(usize) -> f64) -> Option<DiffusionParams> {
        let [boundary, start, ndt, drift_sd, start_range, ndt_range, _] = self.0.map(value);
        DiffusionParams::new(0.0, boundary, start, ndt)
            .and_then(|q| q.with_variability(drift_sd, start_range, ndt_range))
            .ok()
    }
}

impl Diffusion {
    /// The slots of the stage's parameters, in the order of a [`Local8`]'s partial derivatives
    /// after the drift.
    fn slots(&self) -> [usize; 7] {
        let d = self;
        [
            d.boundary,
            d.start,
            d.ndt,
            d.drift_sd,
            d.start_range,
            d.ndt_range,
            d.lapse,
        ]
    }
}

/// How one trial's stage numbers are made: the engine's partial derivatives chained into a
/// number, and the lapse rate with its terms.
struct Numbers<N, F> {
    chain: F,
    lapse_rate: N,
    lapse: Option<(N, N)>,
}

struct Prepared<'a> {
    stage: &'a Diffusion,
    p: &'a [D],
    base: Option<DiffusionParams>,
    /// (ln(1 − lapse), ln(lapse·guess density)) when the lapse rate is above zero.
    lapse: Option<(D, D)>,
    /// The lapse rate and its terms as stage numbers.
    local_lapse: Local8,
    local_lapse_terms: Option<(Local8, Local8)>,
    context: SubjectContext,
    /// Survival integrals already computed in this evaluation, by (time, drift, bound): trials
    /// with the same offer share them (the other parameters are fixed while prepared). Each
    /// use chains the stored partial derivatives with its own trial's drift.
    survivals: RefCell<Vec<SurvivalKey>>,
}

/// A cached ln S_c(t) with its partial derivatives: (time bits, drift bits, upper?, value).
type SurvivalKey = (u64, u64, bool, (f64, crate::first_passage::DensityGradient));

/// ln(e^x + e^y) on dual numbers.
fn ln_add_exp<N: DualNum<Primitive = f64> + Copy>(x: N, y: N) -> N {
    let (hi, lo) = if x.re() >= y.re() { (x, y) } else { (y, x) };
    hi + (lo - hi).exp().ln_1p()
}

impl Prepared<'_> {
    fn chained(&self, value: f64, g: crate::first_passage::DensityGradient, drift: &D) -> D {
        let s = self.stage;
        chain(
            value,
            &[
                (g.drift, drift),
                (g.boundary, &self.p[s.boundary]),
                (g.start, &self.p[s.start]),
                (g.ndt, &self.p[s.ndt]),
                (g.drift_sd, &self.p[s.drift_sd]),
                (g.start_range, &self.p[s.start_range]),
                (g.ndt_range, &self.p[s.ndt_range]),
            ],
        )
    }
}

impl Prepared<'_> {
    /// ln S_c(t) for a bound, with its gradient (`chain` makes it a number).
    fn ln_survival<N>(
        &self,
        t: f64,
        bound: Bound,
        params: &DiffusionParams,
        chain: &impl Fn(f64, DensityGradient) -> N,
    ) -> N {
        let key = (t.to_bits(), params.drift().to_bits(), bound == Bound::Upper);
        let cached = self
            .survivals
            .borrow()
            .iter()
            .find(|c| (c.0, c.1, c.2) == key)
            .map(|c| c.3);
        let (ln_s, g) = match cached {
            Some(hit) => hit,
            None => {
                let fresh = ln_survival_with_gradient(t, bound, params);
                let mut cache = self.survivals.borrow_mut();
                if cache.len() < SURVIVAL_CACHE {
                    cache.push((key.0, key.1, key.2, fresh));
                }
                fresh
            }
        };
        chain(ln_s, g)
    }

    /// ln S(t) = ln(S_a(t) + S_b(t)), the probability that no bound is reached by time t.
    fn ln_undecided_by<N: DualNum<Primitive = f64> + Copy>(
        &self,
        t: f64,
        params: &DiffusionParams,
        chain: &impl Fn(f64, DensityGradient) -> N,
    ) -> N {
        ln_add_exp(
            self.ln_survival(t, Bound::Upper, params, chain),
            self.ln_survival(t, Bound::Lower, params, chain),
        )
    }

    /// The lock when it is after the earliest possible response, ndt − ndt_range/2 (so that it
    /// conditions the process), else `None`.
    fn active_lock(&self, params: &DiffusionParams) -> Option<f64> {
        let earliest = params.ndt() - 0.5 * params.ndt_range();
        self.context.lock.filter(|&lock| lock > earliest)
    }
}

impl Prepared<'_> {
    /// ln P(observation) at `params` (the trial's drift set) in the number type of `numbers`:
    /// dual numbers in θ for the reference path, [`Local8`] for the fast path. One formula, so
    /// both give the same value.
    fn score<N, F>(
        &self,
        params: &DiffusionParams,
        observation: &Observation,
        numbers: &Numbers<N, F>,
    ) -> Option<N>
    where
        N: DualNum<Primitive = f64> + Copy,
        F: Fn(f64, DensityGradient) -> N,
    {
        let chain = &numbers.chain;
        // ln S(lock): what every observation is conditioned on.
        let ln_window = self
            .active_lock(params)
            .map(|lock| self.ln_undecided_by(lock, params, chain));
        let conditioned = |x: N| match ln_window {
            Some(w) => x - w,
            None => x,
        };
        match (observation.choice, observation.rt) {
            (Some(choice), Some(rt)) => {
                let bound = bound_of(choice);
                let (ln_f, g) = ln_density_with_gradient(rt, bound, params);
                let ln_f = conditioned(chain(ln_f, g));
                Some(match numbers.lapse {
                    Some((ln_keep, ln_guess)) => ln_add_exp(ln_keep + ln_f, ln_guess),
                    None => ln_f,
                })
            }
            (None, _) => {
                let deadline = self.context.deadline?;
                let total = conditioned(self.ln_undecided_by(deadline, params, chain));
                Some(match numbers.lapse {
                    Some((ln_keep, _)) => ln_keep + total,
                    None => total,
                })
            }
            (Some(choice), None) => {
                // A choice without a usable time (trimmed): ln P(bound), the absorption
                // probability (Feller 1968); with lapses (1 − lapse)·P + lapse·½.
                let bound = bound_of(choice);
                let ln_p = match self.active_lock(params) {
                    Some(lock) => conditioned(self.ln_survival(lock, bound, params, chain)),
                    None => {
                        let (ln_p, g) = ln_bound_probability_with_gradient(bound, params);
                        chain(ln_p, g)
                    }
                };
                Some(match numbers.lapse {
                    Some((ln_keep, _)) => {
                        ln_add_exp(ln_keep + ln_p, numbers.lapse_rate.ln() + 0.5f64.ln())
                    }
                    None => ln_p,
                })
            }
        }
    }
}

/// The engine's partial derivatives in the order of a [`Local8`].
pub(crate) fn local_partials(g: DensityGradient) -> [f64; 8] {
    let mut partials = [0.0; 8];
    partials[..7].copy_from_slice(&g.to_array());
    partials
}

impl Prepared<'_> {
    /// Writes ∂/∂drift of a [`Local8`]'s partial derivatives to `d_signal` and adds the
    /// stage parameters' to their slots of `d_parameters`.
    fn add_partials(&self, partials: &[f64; 8], d_signal: &mut [f64], d_parameters: &mut [f64]) {
        d_signal[0] = partials[0];
        for (slot, d) in self.stage.slots().into_iter().zip(&partials[1..]) {
            d_parameters[slot] += d;
        }
    }
}

impl PreparedChoice for Prepared<'_> {
    fn ln_likelihood(&self, signal: &[D], observation: &Observation) -> Option<D> {
        let signal = signal[0];
        let Some(base) = self.base else {
            return Some(D::from_re(f64::NEG_INFINITY));
        };
        let numbers = Numbers {
            chain: |value, g| self.chained(value, g, &signal),
            lapse_rate: self.p[self.stage.lapse],
            lapse: self.lapse,
        };
        self.score(&base.with_drift(signal.re), observation, &numbers)
    }

    fn ln_likelihood_local(
        &self,
        signal: &[f64],
        observation: &Observation,
        d_signal: &mut [f64],
        d_parameters: &mut [f64],
    ) -> Result<Option<f64>, NoLocalForm> {
        let Some(base) = self.base else {
            d_signal[0] = 0.0;
            return Ok(Some(f64::NEG_INFINITY));
        };
        let params = base.with_drift(signal[0]);
        if let (None, Some(choice), Some(rt)) =
            (self.local_lapse_terms, observation.choice, observation.rt)
            && self.active_lock(&params).is_none()
        {
            // The common case, where the score is the log-density itself.
            let (ln_f, g) = ln_density_with_gradient(rt, bound_of(choice), &params);
            self.add_partials(&local_partials(g), d_signal, d_parameters);
            return Ok(Some(ln_f));
        }
        let numbers = Numbers {
            chain: |value, g| {
                Local8::new(value, Derivative::some(SVector::from(local_partials(g))))
            },
            lapse_rate: self.local_lapse,
            lapse: self.local_lapse_terms,
        };
        let Some(score) = self.score(&params, observation, &numbers) else {
            return Ok(None);
        };
        let partials: [f64; 8] = score.eps.unwrap_generic(Const::<8>, U1).into();
        self.add_partials(&partials, d_signal, d_parameters);
        Ok(Some(score.re))
    }

    /// Trials whose score is the log-density itself (a response with its time, no lapse, no
    /// active lock) go straight to the engine, the stage parameters' partial derivatives summed
    /// over the stretch before they are added to their slots; the others take
    /// [`PreparedChoice::ln_likelihood_local`].
    fn ln_likelihood_local_batch(&self, stretch: LocalStretch<'_>) -> Result<(), NoLocalForm> {
        let (Some(base), None) = (self.base, self.local_lapse_terms) else {
            return local_trial_by_trial(self, stretch);
        };
        let LocalStretch {
            drifts,
            observations,
            d_drifts,
            d_parameters,
            total,
        } = stretch;
        let mut stage = [0.0; 7];
        for ((drift, observation), d_drift) in drifts.iter().zip(observations).zip(d_drifts) {
            let params = base.with_drift(drift.value);
            if let (Some(choice), Some(rt)) = (observation.choice, observation.rt)
                && self.active_lock(&params).is_none()
            {
                let (ln_f, g) = ln_density_with_gradient(rt, bound_of(choice), &params);
                let partials = local_partials(g);
                *total += ln_f;
                *d_drift = partials[0];
                stage
                    .iter_mut()
                    .zip(&partials[1..])
                    .for_each(|(sum, d)| *sum += d);
            } else {
                local_trial(self, drift.value, observation, d_drift, d_parameters, total)?;
            }
        }
        for (slot, d) in self.stage.slots().into_iter().zip(stage) {
            d_parameters[slot] += d;
        }
        Ok(())
    }

    fn probabilities(&self, signal: &[f64]) -> Vec<f64> {
        let p = self.probability_a(signal[0]);
        vec![p, 1.0 - p]
    }

    fn expected_times(&self, signal: &[f64]) -> Option<(f64, f64)> {
        let params = self.base?.with_drift(signal[0]);
        let decision = mean_decision_time(&params);
        Some((decision, decision + params.ndt()))
    }

    fn simulate(&self, signal: &[f64], rng: &mut dyn Rng) -> (Choice, Option<f64>) {
        self.draw(signal[0], rng)
    }
}

/// The bound of a choice: a (index 0) is the upper bound, b the lower.
pub(crate) fn bound_of(choice: Choice) -> Bound {
    if choice == Choice::A {
        Bound::Upper
    } else {
        Bound::Lower
    }
}

impl Prepared<'_> {
    /// P(choose a | drift), conditioned on the lock when there is one, with the lapse mixture.
    fn probability_a(&self, signal: f64) -> f64 {
        let Some(base) = self.base else {
            return f64::NAN;
        };
        let params = base.with_drift(signal);
        let p = match self.active_lock(&params) {
            // P(a | no bound before the lock) = S_a(L)/S(L).
            Some(lock) => {
                let (a, b) = (
                    ln_survival(lock, Bound::Upper, &params),
                    ln_survival(lock, Bound::Lower, &params),
                );
                1.0 / (1.0 + (b - a).exp())
            }
            None => crate::first_passage::bound_probability(Bound::Upper, &params),
        };
        match self.lapse {
            Some((ln_keep, _)) => ln_keep.re.exp() * p + 0.5 * (1.0 - ln_keep.re.exp()),
            None => p,
        }
    }

    /// Draws a choice and a response time at drift `signal`.
    fn draw(&self, signal: f64, rng: &mut dyn Rng) -> (Choice, Option<f64>) {
        let lapse = self
            .lapse
            .map_or(0.0, |(ln_keep, _)| 1.0 - ln_keep.re.exp());
        if lapse > 0.0 && rng.random::<f64>() < lapse {
            let choice = if rng.random::<bool>() {
                Choice::A
            } else {
                Choice::B
            };
            let lo = self.context.rt_min.max(self.context.lock.unwrap_or(0.0));
            let hi = self.context.rt_max.max(lo);
            return (choice, Some(lo + (hi - lo) * rng.random::<f64>()));
        }
        let Some(base) = self.base else {
            return (Choice::A, None);
        };
        let params = base.with_drift(signal);
        let (mut bound, mut rt) = sample(&params, rng);
        if let Some(lock) = self.active_lock(&params) {
            // Rejection: a draw that ends before the lock is redrawn, which samples the process
            // conditioned on T > lock exactly. After REDRAWS failures (S(lock) below about
            // 1e-5) the response is put at the lock.
            const REDRAWS: usize = 1_000_000;
            let mut tries = 0;
            while rt < lock && tries < REDRAWS {
                (bound, rt) = sample(&params, rng);
                tries += 1;
            }
            rt = rt.max(lock);
        }
        let choice = if bound == Bound::Upper {
            Choice::A
        } else {
            Choice::B
        };
        (choice, Some(rt))
    }
}
