//! Simulated studies: participants drawn from a generating population, simulated on the design
//! with the exact sampler, and fitted by every candidate model at every design size exactly as
//! `fit` would (same fitter, starts and settings); empirical-Bayes fits per group as
//! `fit --hierarchical --by group` would.
//!
//! Nesting (common random numbers): a participant is simulated once, on the largest number of
//! trials; a smaller design size is the first trials of the same session (a session's trials do
//! not depend on later ones), and a smaller number of participants per group is the first
//! participants of the same study. Differences between design sizes are then differences of
//! design, not of luck.

use super::Plan;
use crate::data::Subject;
use crate::fit::{EmOptions, FitOptions, SubjectFit, fit_group, fit_subject};
use crate::likelihood::SubjectLikelihood;
use crate::simulate::{SimulationSettings, simulate_subject};
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use rayon::prelude::*;

/// One parameter's estimate from one fit.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Estimate {
    /// Point estimate (natural scale).
    pub value: f64,
    /// 95 % interval, when the fit has standard errors.
    pub interval: Option<(f64, f64)>,
    /// At a bound of the parameter's range.
    pub at_bound: bool,
}

/// What is kept of one fit of one candidate model.
#[derive(Clone, Debug, PartialEq)]
pub struct FitRecord {
    /// Bayesian information criterion.
    pub bic: f64,
    /// The fit passed the fitter's examination.
    pub converged: bool,
    /// Every parameter of the candidate (model order).
    pub estimates: Vec<Estimate>,
}

/// One simulated participant with its fits.
#[derive(Clone, Debug, PartialEq)]
pub struct Participant {
    /// Label (generating model, study, group, index).
    pub label: String,
    /// Index of the group in the plan's groups.
    pub group: usize,
    /// Index within its group (0-based).
    pub index: usize,
    /// Generating values of every parameter of the generating model (model order).
    pub truth: Vec<f64>,
    /// Per design size (plan order), per candidate model (plan order).
    pub fits: Vec<Vec<FitRecord>>,
    /// Per design size: the empirical-Bayes estimates of the generating model (model order),
    /// when the plan asks for them and the group prior could be fitted.
    pub empirical_bayes: Vec<Option<Vec<Estimate>>>,
}

/// One simulated study of one generating model.
#[derive(Clone, Debug, PartialEq)]
pub struct Study {
    /// Index of the generating model among the plan's candidates.
    pub generating: usize,
    /// Study index (0-based).
    pub study: usize,
    /// Participants, group by group, in index order.
    pub participants: Vec<Participant>,
}

/// The random generator of a simulated participant: ChaCha8 seeded by the plan's seed, on the
/// stream of [`crate::fit::starts::subject_stream`] of `simulate:` and its label, so that every
/// participant's values and data depend on the seed and the label only (not on threads, nor on
/// the other participants).
pub fn participant_rng(seed: u64, label: &str) -> ChaCha8Rng {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    rng.set_stream(crate::fit::starts::subject_stream(&format!(
        "simulate:{label}"
    )));
    rng
}

/// The label of participant `index` of group `group` in study `study` of model `model`.
pub fn participant_label(model: &str, study: usize, group: &str, index: usize) -> String {
    format!("{model}-s{:03}-{group}-{:03}", study + 1, index + 1)
}

/// The first `n` trials of a subject.
pub fn first_trials(subject: &Subject, n: usize) -> Subject {
    Subject {
        trials: subject.trials[..n.min(subject.trials.len())].to_vec(),
        ..subject.clone()
    }
}

fn estimates_of(fit: &SubjectFit) -> Vec<Estimate> {
    fit.estimates
        .iter()
        .map(|e| Estimate {
            value: e.estimate,
            interval: e.interval,
            at_bound: e.at_bound,
        })
        .collect()
}

impl Plan {
    /// The fit settings of every fit of the plan.
    pub fn fit_options(&self) -> FitOptions {
        FitOptions {
            starts: self.spec.starts,
            seed: self.spec.seed,
            deadline: self.spec.deadline,
            lock: self.spec.lock,
            ..FitOptions::default()
        }
    }

    /// The simulation settings of every participant.
    pub fn simulation_settings(&self) -> SimulationSettings {
        SimulationSettings {
            deadline: self.spec.deadline,
            lock: self.spec.lock,
            ..SimulationSettings::default()
        }
    }

    /// Simulates one participant of the generating model `generating` (index among the
    /// candidates) on the largest design size: its values and data.
    pub fn simulate_participant(
        &self,
        generating: usize,
        study: usize,
        group: usize,
        index: usize,
    ) -> (String, Vec<f64>, Subject) {
        let model = &self.candidates[generating];
        let label = participant_label(&model.name, study, &self.groups[group], index);
        let mut rng = participant_rng(self.spec.seed, &label);
        let population = &self.populations[generating];
        let shifted = group == 1 && population.as_ref().is_some_and(|p| p.shifts());
        let truth = population
            .as_ref()
            .expect("generating models have a population")
            .draw(&mut rng, shifted)
            .expect("checked feasible when the plan was built");
        let design = &self.design[index % self.design.len()];
        let mut design = first_trials(design, self.largest_trials());
        design.id = label.clone();
        design.group = self.groups[group].clone();
        let subject =
            simulate_subject(model, &truth, &design, self.simulation_settings(), &mut rng)
                .expect("the design was bound to the model when the plan was built");
        (label, truth, subject)
    }

    /// Simulates and fits one study: every participant of every group, every design size,
    /// every candidate; then the empirical-Bayes fits. `tick` is called after each fit.
    pub fn run_study(&self, generating: usize, study: usize, tick: &(dyn Fn() + Sync)) -> Study {
        let most = self.largest_participants();
        let slots: Vec<(usize, usize)> = (0..self.groups.len())
            .flat_map(|g| (0..most).map(move |i| (g, i)))
            .collect();
        let options = self.fit_options();
        let simulated: Vec<(Participant, Subject, Vec<SubjectFit>)> = slots
            .par_iter()
            .map(|&(group, index)| {
                let (label, truth, subject) =
                    self.simulate_participant(generating, study, group, index);
                let mut own_fits = Vec::new();
                let mut fits = Vec::with_capacity(self.spec.trials.len());
                for &n in &self.spec.trials {
                    let part = first_trials(&subject, n);
                    let mut records = Vec::with_capacity(self.candidates.len());
                    for (m, model) in self.candidates.iter().enumerate() {
                        let fit = SubjectLikelihood::new(model, &part, options.deadline)
                            .map(|lik| fit_subject(&lik.with_lock(options.lock), &options))
                            .expect("the design was bound to every candidate");
                        tick();
                        records.push(FitRecord {
                            bic: fit.bic,
                            converged: fit.converged,
                            estimates: estimates_of(&fit),
                        });
                        if m == generating && self.spec.empirical_bayes {
                            own_fits.push(fit);
                        }
                    }
                    fits.push(records);
                }
                let participant = Participant {
                    label,
                    group,
                    index,
                    truth,
                    fits,
                    empirical_bayes: vec![None; self.spec.trials.len()],
                };
                (participant, subject, own_fits)
            })
            .collect();
        let mut participants = Vec::with_capacity(simulated.len());
        let mut subjects = Vec::with_capacity(simulated.len());
        let mut own_fits = Vec::with_capacity(simulated.len());
        for (p, s, f) in simulated {
            participants.push(p);
            subjects.push(s);
            own_fits.push(f);
        }
        if self.spec.empirical_bayes {
            self.empirical_bayes(generating, &mut participants, &subjects, &own_fits, tick);
        }
        Study {
            generating,
            study,
            participants,
        }
    }

    /// Group priors of the generating model, one per group and design size (EM with the Laplace
    /// approximation, Huys et al. 2011), started from the per-subject fits `own_fits`
    /// (participant, then design size); the shrunken
    /// estimates go to each participant's `empirical_bayes`. A scope whose EM fails keeps
    /// `None` (reported as fewer empirical-Bayes estimates).
    fn empirical_bayes(
        &self,
        generating: usize,
        participants: &mut [Participant],
        subjects: &[Subject],
        own_fits: &[Vec<SubjectFit>],
        tick: &(dyn Fn() + Sync),
    ) {
        let model = &self.candidates[generating];
        let options = self.fit_options();
        let em = EmOptions {
            ibic_samples: EB_IBIC_SAMPLES,
            seed: self.spec.seed,
            ..EmOptions::default()
        };
        let scopes: Vec<(usize, usize)> = (0..self.spec.trials.len())
            .flat_map(|t| (0..self.groups.len()).map(move |g| (t, g)))
            .collect();
        let silent = |_: &str, _: &str, _: usize, _: f64| {};
        let results: Vec<Vec<(usize, Vec<Estimate>)>> = scopes
            .par_iter()
            .map(|&(t, group)| {
                let n = self.spec.trials[t];
                let members: Vec<usize> = (0..participants.len())
                    .filter(|&i| participants[i].group == group)
                    .collect();
                let parts: Vec<Subject> = members
                    .iter()
                    .map(|&i| first_trials(&subjects[i], n))
                    .collect();
                let indexed: Vec<(usize, &Subject)> = parts.iter().enumerate().collect();
                let initial_refs: Vec<&SubjectFit> =
                    members.iter().map(|&i| &own_fits[i][t]).collect();
                let outcome = fit_group(
                    model,
                    &self.groups[group],
                    &indexed,
                    &initial_refs,
                    None,
                    &options,
                    &em,
                    &silent,
                );
                tick();
                match outcome {
                    Ok(fit) => members
                        .iter()
                        .zip(&fit.subjects)
                        .map(|(&i, f)| (i, estimates_of(f)))
                        .collect(),
                    Err(_) => Vec::new(),
                }
            })
            .collect();
        for (&(t, _), found) in scopes.iter().zip(results) {
            for (i, estimates) in found {
                participants[i].empirical_bayes[t] = Some(estimates);
            }
        }
    }
}

/// Draws from the fitted group prior per subject for the integrated BIC of the plan's
/// empirical-Bayes fits: the plan reports their estimates, not their iBIC, so few suffice.
const EB_IBIC_SAMPLES: usize = 16;
