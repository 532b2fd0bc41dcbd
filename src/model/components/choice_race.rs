//! Racing accumulators, one per offered option, for any number of options: each option's drift
//! comes from its own subjective value through the model's drift mapping (v_k = drift(SV_k)),
//! the first accumulator to arrive gives the choice, and its arrival time plus the
//! non-decision time the response time (engine: [`crate::race`]). Two stages:
//!
//! * `wald-race`: single-bound Wiener accumulators with a common threshold (Logan, Van Zandt,
//!   Verbruggen & Wagenmakers 2014; Tillman, Van Zandt & Logan 2020);
//! * `ballistic-race`: linear ballistic accumulators with a common start range, threshold gap
//!   and rate standard deviation (Brown & Heathcote 2008); `drift_sd` fixes the scale (1 unless
//!   declared).
//!
//! # Likelihood
//! A response k at time t scores g_k(t − ndt) = f_k·Π_{j≠k} S_j. Observed responses are
//! conditioned on a response being given: without a deadline, divided by
//! 1 − P(no accumulator ever arrives) (a ballistic rate can be negative); with a deadline D,
//! a trial without response scores S(D − ndt) = Π_j S_j(D − ndt), which counts never arriving.
//! With a lock L (no response before L), everything is conditioned on no arrival before L − ndt
//! as for the two-bound diffusion: divided by S(L − ndt), less P(never) without a deadline. A
//! choice without its time scores P(k after the lock) by quadrature. The simulator matches:
//! draws before the lock, and (without a deadline) draws where nobody arrives, are redrawn.

use super::{
    ChoiceStage, Entry, Observation, Options, PreparedChoice, Signal, Slots, SubjectContext,
    only_options,
};
use crate::data::Choice;
use crate::model::dual::{D, constant};
use crate::race::{
    Accumulator, BallisticAccumulator, WaldAccumulator, ln_arrival_after, ln_choice_probability,
    ln_none_by, ln_some_arrival, ln_winner_density, mean_decision_time, sample_race,
};
use rand::Rng;

/// The Wiener race's table entry.
pub const WALD_ENTRY: Entry<dyn ChoiceStage> = Entry {
    name: "wald-race",
    parameters: &["threshold", "ndt"],
    defaults: &[],
    equation: "(choice k, rt): f_k(rt − ndt)·Π_{j≠k} S_j(rt − ndt), each accumulator a single-bound Wiener \
               process (unit noise) with drift v_k = drift(SV_k) to threshold  (Logan et al. 2014)",
    build: build_wald,
};

/// The ballistic race's table entry.
pub const BALLISTIC_ENTRY: Entry<dyn ChoiceStage> = Entry {
    name: "ballistic-race",
    parameters: &["start_range", "threshold_gap", "drift_sd", "ndt"],
    defaults: &[("drift_sd", 1.0)],
    equation: "(choice k, rt): f_k(rt − ndt)·Π_{j≠k} S_j(rt − ndt), each a linear ballistic accumulator: \
               start ~ U[0, start_range], rate ~ N(drift(SV_k), drift_sd²), threshold start_range + threshold_gap  \
               (Brown & Heathcote 2008)",
    build: build_ballistic,
};

/// Which accumulator the race uses, with the slots of its parameters.
#[derive(Clone, Copy)]
enum Kind {
    Wald {
        threshold: usize,
    },
    Ballistic {
        start_range: usize,
        gap: usize,
        drift_sd: usize,
    },
}

struct Race {
    kind: Kind,
    ndt: usize,
}

fn build_wald(options: &Options, slots: Slots<'_>) -> Result<Box<dyn ChoiceStage>, String> {
    only_options(options, &[])?;
    Ok(Box::new(Race {
        kind: Kind::Wald {
            threshold: slots("threshold"),
        },
        ndt: slots("ndt"),
    }))
}

fn build_ballistic(options: &Options, slots: Slots<'_>) -> Result<Box<dyn ChoiceStage>, String> {
    only_options(options, &[])?;
    Ok(Box::new(Race {
        kind: Kind::Ballistic {
            start_range: slots("start_range"),
            gap: slots("threshold_gap"),
            drift_sd: slots("drift_sd"),
        },
        ndt: slots("ndt"),
    }))
}

impl ChoiceStage for Race {
    fn signal(&self) -> Signal {
        Signal::DriftPerOption
    }

    fn uses_response_times(&self) -> bool {
        true
    }

    fn max_options(&self) -> Option<usize> {
        None
    }

    fn prepare<'a>(&'a self, p: &'a [D], context: SubjectContext) -> Box<dyn PreparedChoice + 'a> {
        let ndt = p[self.ndt];
        match self.kind {
            Kind::Wald { threshold } => Box::new(Prepared {
                accumulator: WaldAccumulator {
                    threshold: p[threshold],
                },
                values: WaldAccumulator {
                    threshold: p[threshold].re,
                },
                ndt,
                context,
            }),
            Kind::Ballistic {
                start_range,
                gap,
                drift_sd,
            } => Box::new(Prepared {
                accumulator: BallisticAccumulator {
                    start_range: p[start_range],
                    threshold_gap: p[gap],
                    drift_sd: p[drift_sd],
                },
                values: BallisticAccumulator {
                    start_range: p[start_range].re,
                    threshold_gap: p[gap].re,
                    drift_sd: p[drift_sd].re,
                },
                ndt,
                context,
            }),
        }
    }
}

/// A race with its parameters fixed for one evaluation: the accumulator on dual numbers (for
/// the likelihood) and on values (for probabilities and draws).
struct Prepared<A, V> {
    accumulator: A,
    values: V,
    ndt: D,
    context: SubjectContext,
}

impl<A: Accumulator<D>, V: Accumulator<f64>> Prepared<A, V> {
    /// The decision time at response time `rt`.
    fn decision_time(&self, rt: f64) -> D {
        constant(rt) - self.ndt
    }

    /// ln of the probability every observation is conditioned on: a response (without a
    /// deadline) and no arrival before the lock.
    fn ln_window(&self, drifts: &[D]) -> D {
        let responds = self.context.deadline.is_none();
        match self.context.lock.filter(|&lock| lock > self.ndt.re) {
            Some(lock) if responds => {
                ln_arrival_after(&self.accumulator, drifts, self.decision_time(lock))
            }
            Some(lock) => ln_none_by(&self.accumulator, drifts, self.decision_time(lock)),
            None if responds => ln_some_arrival(&self.accumulator, drifts),
            None => constant(0.0),
        }
    }
}

impl<A: Accumulator<D>, V: Accumulator<f64>> PreparedChoice for Prepared<A, V> {
    fn ln_likelihood(&self, signal: &[D], observation: &Observation) -> Option<D> {
        let window = self.ln_window(signal);
        let ln_p = match (observation.choice, observation.rt) {
            (Some(choice), Some(rt)) => ln_winner_density(
                &self.accumulator,
                signal,
                choice.index(),
                self.decision_time(rt),
            ),
            (None, _) => {
                let deadline = self.context.deadline?;
                ln_none_by(&self.accumulator, signal, self.decision_time(deadline))
            }
            (Some(choice), None) => {
                let from = self
                    .context
                    .lock
                    .map_or(constant(0.0), |lock| self.decision_time(lock));
                let from = if from.re > 0.0 { from } else { constant(0.0) };
                ln_choice_probability(&self.accumulator, signal, choice.index(), from)
            }
        };
        Some(ln_p - window)
    }

    /// P(k | a response after the lock), from the quadrature of the winner densities.
    fn probabilities(&self, signal: &[f64]) -> Vec<f64> {
        let from = self
            .context
            .lock
            .map_or(0.0, |lock| (lock - self.ndt.re).max(0.0));
        let ln_p: Vec<f64> = (0..signal.len())
            .map(|k| ln_choice_probability(&self.values, signal, k, from))
            .collect();
        // Normalised in log space: every P(k) may be far below the smallest double.
        let top = ln_p.iter().copied().fold(f64::NEG_INFINITY, f64::max);
        let total: f64 = ln_p.iter().map(|x| (x - top).exp()).sum();
        ln_p.iter().map(|x| (x - top).exp() / total).collect()
    }

    fn expected_times(&self, signal: &[f64]) -> Option<(f64, f64)> {
        let decision = mean_decision_time(&self.values, signal)?;
        Some((decision, decision + self.ndt.re))
    }

    fn simulate(&self, signal: &[f64], rng: &mut dyn Rng) -> (Choice, Option<f64>) {
        const REDRAWS: usize = 1_000_000;
        let lock = self.context.lock.unwrap_or(0.0);
        for _ in 0..REDRAWS {
            match sample_race(&self.values, signal, rng) {
                Some((k, t)) if t + self.ndt.re >= lock => {
                    return (Choice(k), Some(t + self.ndt.re));
                }
                Some(_) => {}
                // Nobody arrives: no response by any deadline.
                None if self.context.deadline.is_some() => return (Choice(0), Some(f64::INFINITY)),
                None => {}
            }
        }
        // After a million failures (a window of probability below about 1e-5) the response
        // is put at the lock, as for the two-bound diffusion.
        (Choice(0), Some(lock.max(self.ndt.re)))
    }
}
