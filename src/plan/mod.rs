//! Planning a study before its data exist: can this design recover the parameters, tell the
//! candidate models apart, and detect the expected group difference with this many participants?
//!
//! A plan ([`spec::PlanSpec`], a TOML file) names a design (a trial table without responses,
//! with what each option would deliver), candidate and generating models, a population of
//! generating values per group, numbers of participants per group and of trials per participant,
//! and the difference to detect. For each generating model the plan simulates `studies`
//! independent studies ([`cohort`]: exact sampler, the same fitter and settings as `fit`), and
//! summarises them ([`summaries`]):
//! - parameter recovery per design size (Pearson r, bias, RMSE, 95 % interval coverage, share at
//!   a bound), per-subject and empirical-Bayes estimates side by side;
//! - model recovery: the per-subject confusion matrix by BIC, and the group-level verdict of
//!   random-effects Bayesian model selection in each study (Stephan et al. 2009; protected
//!   exceedance probabilities, Rigoux et al. 2014);
//! - power: the share of studies whose Welch test (Welch 1947) finds the difference at level α,
//!   per number of participants per group, with its Wilson (1927) interval, beside the
//!   normal-theory power of the same test ([`crate::group::power::welch_power`]);
//! - the fewest listed trials per participant at which recovery reaches a target r.
//!
//! Everything depends on the seed and the plan only, not on the number of threads: each
//! participant has its own random stream ([`cohort::participant_rng`]), results are collected
//! in plan order, and each study's model selection has its own stream of the seed.

pub mod cohort;
pub mod population;
pub mod spec;
pub mod stored;
pub mod summaries;
pub mod tables;

use crate::data::{Subject, TrialTable};
use crate::likelihood::{DataMismatch, TrialColumns};
use crate::model::Model;
use population::{Population, PopulationError, ValuesFile};
use spec::PlanSpec;

/// A checked plan: its settings, design subjects, candidate models and populations.
pub struct Plan {
    /// The plan as written.
    pub spec: PlanSpec,
    /// Design subjects; simulated participant i of a group follows design subject i mod their
    /// number.
    pub design: Vec<Subject>,
    /// Candidate models, plan order.
    pub candidates: Vec<Model>,
    /// Per candidate: its generating population when it generates cohorts.
    pub populations: Vec<Option<Population>>,
    /// Generating values read from the plan's population file.
    pub values_file: Option<ValuesFile>,
    /// Group labels.
    pub groups: Vec<String>,
}

/// A plan that does not suit its models or design.
#[derive(Debug, thiserror::Error)]
pub enum PlanMismatch {
    /// A generating model that is not among the candidates.
    #[error("generating model `{0}` is not among the plan's models")]
    NotACandidate(String),
    /// The design has no subject.
    #[error("the design has no trials")]
    EmptyDesign,
    /// A design subject with fewer trials than the largest design size.
    #[error(
        "design subject `{subject}` has {found} trials; the plan's largest design size is \
         {needed} (use a longer design or smaller `trials`)"
    )]
    ShortDesign {
        /// The design subject.
        subject: String,
        /// Its trials.
        found: usize,
        /// The largest design size.
        needed: usize,
    },
    /// A learning model on a design without potential outcomes.
    #[error(
        "model `{model}` learns from outcomes, but design subject `{subject}`, trial {trial} does \
         not say what every option would deliver (columns outcome_if_a, outcome_if_b, …)"
    )]
    NoOutcomes {
        /// The model.
        model: String,
        /// The design subject.
        subject: String,
        /// The trial number.
        trial: i64,
    },
    /// A candidate that cannot read the design.
    #[error("model `{model}` cannot read the design: {reason}")]
    Design {
        /// The model.
        model: String,
        /// Why.
        reason: DataMismatch,
    },
    /// A population that does not suit a generating model.
    #[error(transparent)]
    Population(#[from] PopulationError),
    /// The difference names a parameter no generating model estimates.
    #[error("the difference's parameter `{0}` is not a free parameter of any generating model")]
    DifferenceParameter(String),
}

impl Plan {
    /// Checks `spec` against its design and candidate models (in the order of `spec.models`).
    pub fn new(
        spec: PlanSpec,
        design: TrialTable,
        candidates: Vec<Model>,
        values_file: Option<ValuesFile>,
    ) -> Result<Plan, PlanMismatch> {
        if design.subjects.is_empty() {
            return Err(PlanMismatch::EmptyDesign);
        }
        let largest = spec.trials.iter().copied().max().unwrap_or(0);
        for subject in &design.subjects {
            if subject.trials.len() < largest {
                return Err(PlanMismatch::ShortDesign {
                    subject: subject.id.clone(),
                    found: subject.trials.len(),
                    needed: largest,
                });
            }
        }
        for model in &candidates {
            for subject in &design.subjects {
                TrialColumns::bind(model, subject).map_err(|reason| PlanMismatch::Design {
                    model: model.name.clone(),
                    reason,
                })?;
                if model.learns()
                    && let Some(t) = subject.trials[..largest]
                        .iter()
                        .find(|t| t.offers.iter().any(|o| o.outcome_if.is_none()))
                {
                    return Err(PlanMismatch::NoOutcomes {
                        model: model.name.clone(),
                        subject: subject.id.clone(),
                        trial: t.trial,
                    });
                }
            }
        }
        let generating: Vec<String> = spec
            .generating
            .clone()
            .unwrap_or_else(|| candidates.iter().map(|m| m.name.clone()).collect());
        let mut populations: Vec<Option<Population>> = candidates.iter().map(|_| None).collect();
        for name in &generating {
            let Some(k) = candidates.iter().position(|m| m.name == *name) else {
                return Err(PlanMismatch::NotACandidate(name.clone()));
            };
            let shift = spec
                .difference
                .as_ref()
                .map(|d| (d.parameter.as_str(), d.shift));
            populations[k] = Some(Population::of(
                &candidates[k],
                &spec.population,
                values_file.as_ref(),
                shift,
            )?);
        }
        if let Some(d) = &spec.difference
            && !populations.iter().flatten().any(Population::shifts)
        {
            return Err(PlanMismatch::DifferenceParameter(d.parameter.clone()));
        }
        let groups = spec.group_labels();
        Ok(Plan {
            spec,
            design: design.subjects,
            candidates,
            populations,
            values_file,
            groups,
        })
    }

    /// The largest number of trials per participant.
    pub fn largest_trials(&self) -> usize {
        self.spec.trials.iter().copied().max().unwrap_or(0)
    }

    /// The largest number of participants per group.
    pub fn largest_participants(&self) -> usize {
        self.spec.participants.iter().copied().max().unwrap_or(0)
    }

    /// Indices of the generating models among the candidates.
    pub fn generating(&self) -> Vec<usize> {
        (0..self.candidates.len())
            .filter(|&k| self.populations[k].is_some())
            .collect()
    }

    /// Fits the plan will make (for progress): per-subject fits, then one empirical-Bayes
    /// scope per group and design size of each study.
    pub fn total_steps(&self) -> usize {
        let studies = self.generating().len() * self.spec.studies;
        let per_study = self.groups.len()
            * self.largest_participants()
            * self.spec.trials.len()
            * self.candidates.len();
        let eb = if self.spec.empirical_bayes {
            self.groups.len() * self.spec.trials.len()
        } else {
            0
        };
        studies * (per_study + eb)
    }

    /// The studies of the plan as (generating model among the candidates, study), in plan
    /// order: every study of the first generating model, then of the next.
    pub fn jobs(&self) -> Vec<(usize, usize)> {
        self.generating()
            .into_iter()
            .flat_map(|g| (0..self.spec.studies).map(move |s| (g, s)))
            .collect()
    }

    /// Simulates and fits every study of every generating model on `threads` threads (0: all
    /// cores); `tick` is called after each step of [`Plan::total_steps`]. Studies come in plan
    /// order whatever the threads.
    pub fn run(
        &self,
        threads: usize,
        tick: &(dyn Fn() + Sync),
    ) -> Result<Vec<cohort::Study>, rayon::ThreadPoolBuildError> {
        self.run_jobs(&self.jobs(), threads, tick)
    }

    /// Simulates and fits the studies `jobs` (some of [`Plan::jobs`]) as [`Plan::run`] does,
    /// in the order given. A study depends on the seed and its labels only, so each is the one
    /// a run of every study gives.
    pub fn run_jobs(
        &self,
        jobs: &[(usize, usize)],
        threads: usize,
        tick: &(dyn Fn() + Sync),
    ) -> Result<Vec<cohort::Study>, rayon::ThreadPoolBuildError> {
        use rayon::prelude::*;
        let pool = rayon::ThreadPoolBuilder::new()
            .num_threads(threads)
            .build()?;
        Ok(pool.install(|| {
            jobs.par_iter()
                .map(|&(g, s)| self.run_study(g, s, tick))
                .collect()
        }))
    }
}
