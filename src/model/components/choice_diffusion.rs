//! Diffusion choice stage: choices and response times jointly through the Wiener first-passage
//! density (Ratcliff 1978; Navarro & Fuss 2009), choosing `a` at the upper bound. Optional
//! across-trial drift variability and a lapse mixture in which, with probability `lapse`, a
//! response is a guess (either option, time uniform over the subject's observed range). A
//! choice whose time is not used (trimmed) scores the absorption probability of its bound alone.

use super::{
    ChoiceStage, Entry, Observation, Options, PreparedChoice, Slots, SubjectContext, only_options,
};
use crate::data::Choice;
use crate::first_passage::{
    Bound, DiffusionParams, ln_bound_probability_with_gradient, ln_density_with_gradient,
    ln_survival_with_gradient, mean_decision_time, sample,
};
use crate::model::dual::{D, chain};
use num_dual::DualNum;
use rand::{Rng, RngExt};

/// The table entry.
pub const ENTRY: Entry<dyn ChoiceStage> = Entry {
    name: "diffusion",
    parameters: &["boundary", "ndt", "start", "drift_sd", "lapse"],
    defaults: &[("start", 0.5), ("drift_sd", 0.0), ("lapse", 0.0)],
    equation: "(choice, rt) ~ Wiener first passage(drift, boundary, start, ndt, drift_sd); a = upper bound; \
               with lapse: (1 − lapse)·f + lapse·½/(rt_max − rt_min)  (Navarro & Fuss 2009)",
    build,
};

struct Diffusion {
    boundary: usize,
    ndt: usize,
    start: usize,
    drift_sd: usize,
    lapse: usize,
}

fn build(options: &Options, slots: Slots<'_>) -> Result<Box<dyn ChoiceStage>, String> {
    only_options(options, &[])?;
    Ok(Box::new(Diffusion {
        boundary: slots("boundary"),
        ndt: slots("ndt"),
        start: slots("start"),
        drift_sd: slots("drift_sd"),
        lapse: slots("lapse"),
    }))
}

impl ChoiceStage for Diffusion {
    fn uses_drift_mapping(&self) -> bool {
        true
    }

    fn uses_response_times(&self) -> bool {
        true
    }

    fn prepare<'a>(&'a self, p: &'a [D], context: SubjectContext) -> Box<dyn PreparedChoice + 'a> {
        let value = |slot: usize| p[slot].re;
        // The fitter keeps every parameter inside its declared bounds, so this cannot fail for
        // a valid model; a NaN proposal falls back to a neutral process and an infinite cost.
        let base = DiffusionParams::new(
            0.0,
            value(self.boundary),
            value(self.start),
            value(self.ndt),
        )
        .and_then(|q| q.with_variability(value(self.drift_sd), 0.0, 0.0))
        .ok();
        let lapse = p[self.lapse];
        let guess_density = 0.5 / (context.rt_max - context.rt_min).max(1e-3);
        Box::new(Prepared {
            stage: self,
            p,
            base,
            lapse: (lapse.re > 0.0).then(|| ((-lapse).ln_1p(), lapse.ln() + guess_density.ln())),
            context,
        })
    }
}

struct Prepared<'a> {
    stage: &'a Diffusion,
    p: &'a [D],
    base: Option<DiffusionParams>,
    /// (ln(1 − lapse), ln(lapse·guess density)) when the lapse rate is above zero.
    lapse: Option<(D, D)>,
    context: SubjectContext,
}

/// ln(e^x + e^y) on dual numbers.
fn ln_add_exp(x: D, y: D) -> D {
    let (hi, lo) = if x.re >= y.re { (x, y) } else { (y, x) };
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
            ],
        )
    }
}

impl PreparedChoice for Prepared<'_> {
    fn ln_likelihood(&self, signal: D, observation: &Observation) -> Option<D> {
        let Some(base) = self.base else {
            return Some(D::from_re(f64::NEG_INFINITY));
        };
        let params = base.with_drift(signal.re);
        match (observation.choice, observation.rt) {
            (Some(choice), Some(rt)) => {
                let bound = match choice {
                    Choice::A => Bound::Upper,
                    Choice::B => Bound::Lower,
                };
                let (ln_f, g) = ln_density_with_gradient(rt, bound, &params).ok()?;
                let ln_f = self.chained(ln_f, g, &signal);
                Some(match self.lapse {
                    Some((ln_keep, ln_guess)) => ln_add_exp(ln_keep + ln_f, ln_guess),
                    None => ln_f,
                })
            }
            (None, _) => {
                let deadline = self.context.deadline?;
                let mut total: Option<D> = None;
                for bound in [Bound::Upper, Bound::Lower] {
                    let (ln_s, g) = ln_survival_with_gradient(deadline, bound, &params).ok()?;
                    let ln_s = self.chained(ln_s, g, &signal);
                    total = Some(match total {
                        Some(t) => ln_add_exp(t, ln_s),
                        None => ln_s,
                    });
                }
                let total = total?;
                Some(match self.lapse {
                    Some((ln_keep, _)) => ln_keep + total,
                    None => total,
                })
            }
            (Some(choice), None) => {
                // A choice without a usable time (trimmed): ln P(bound), the absorption
                // probability (Feller 1968); with lapses (1 − lapse)·P + lapse·½.
                let bound = match choice {
                    Choice::A => Bound::Upper,
                    Choice::B => Bound::Lower,
                };
                let (ln_p, g) = ln_bound_probability_with_gradient(bound, &params).ok()?;
                let ln_p = self.chained(ln_p, g, &signal);
                Some(match self.lapse {
                    Some((ln_keep, _)) => {
                        ln_add_exp(ln_keep + ln_p, self.p[self.stage.lapse].ln() + 0.5f64.ln())
                    }
                    None => ln_p,
                })
            }
        }
    }

    fn probability_a(&self, signal: f64) -> f64 {
        let Some(base) = self.base else {
            return f64::NAN;
        };
        let p = crate::first_passage::bound_probability(Bound::Upper, &base.with_drift(signal));
        match self.lapse {
            Some((ln_keep, _)) => ln_keep.re.exp() * p + 0.5 * (1.0 - ln_keep.re.exp()),
            None => p,
        }
    }

    fn expected_times(&self, signal: f64) -> Option<(f64, f64)> {
        let params = self.base?.with_drift(signal);
        let decision = mean_decision_time(&params);
        Some((decision, decision + params.ndt()))
    }

    fn simulate(&self, signal: f64, rng: &mut dyn Rng) -> (Choice, Option<f64>) {
        let lapse = self
            .lapse
            .map_or(0.0, |(ln_keep, _)| 1.0 - ln_keep.re.exp());
        if lapse > 0.0 && rng.random::<f64>() < lapse {
            let choice = if rng.random::<bool>() {
                Choice::A
            } else {
                Choice::B
            };
            let (lo, hi) = (self.context.rt_min, self.context.rt_max);
            return (choice, Some(lo + (hi - lo) * rng.random::<f64>()));
        }
        let Some(base) = self.base else {
            return (Choice::A, None);
        };
        let (bound, rt) = sample(&base.with_drift(signal), rng);
        let choice = match bound {
            Bound::Upper => Choice::A,
            Bound::Lower => Choice::B,
        };
        (choice, Some(rt))
    }
}
