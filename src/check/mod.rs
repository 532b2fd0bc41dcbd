//! Predictive checks of a fitted model: does the model, run forward with a subject's fitted
//! parameters, reproduce that subject's choices and response times?
//!
//! Each subject is simulated `sims` times with its fitted (natural-scale) parameters, on a
//! ChaCha8 generator seeded with the run's seed and set to the subject's own stream (the first
//! eight bytes of SHA-256 of its label), so results depend neither on the thread count nor on
//! the other subjects (a shard of the subjects gives each the replicates of a single run). Two modes:
//! - **free** ([`Mode::Free`]) where every trial gives what each option would have delivered
//!   (`outcome_if_a`, `outcome_if_b`): the whole task is simulated, learning from the simulated
//!   choices ([`crate::simulate::simulate_subject`]);
//! - **one step ahead** ([`Mode::OneStepAhead`]) otherwise: the learning recursion follows the
//!   observed choices and outcomes ([`crate::likelihood::SubjectLikelihood::trace`]) and each trial's choice and
//!   response time is drawn from the choice stage at that trial's decision signal
//!   ([`crate::simulate::draw_trial`], the simulator's own code path).
//!
//! Statistics of a dataset (observed or simulated), per bin: the proportion of responses that
//! chose the option with the larger subjective value under the fitted model ("correct by value"),
//! and the response-time quantiles .1 .3 .5 .7 .9 (Ratcliff & Tuerlinckx 2002) of correct-by-value
//! and of other responses (at least [`MIN_RTS`] response times in the cell). Trials whose best
//! two subjective values are equal have no correct-by-value option and are left out of these.
//! Bins:
//! - [`Factor::ValueDifference`]: quintiles of the subject's own observed |SV_a − SV_b| (the
//!   best option's margin over the next best with more than two);
//! - [`Factor::Effort`]: the effort demanded by the correct-by-value option (the better option's
//!   effort), one bin per distinct observed level when there are at most six levels, else
//!   quintiles. A dataset's trials are classified by its own value trajectory (in free mode each
//!   replicate learns differently), and binned with the observed bin edges;
//! - [`Factor::Condition`], with [`CheckSettings::condition`]: one bin per level of a column of
//!   the trial table (a condition, block or session), levels in order of first appearance in the
//!   table, so that the bins of every subject line up for pooling; trials whose cell is empty
//!   are left out.
//!
//! Per option side, for every model (a side bias shows with two options as with more): factor
//! [`Factor::Option`] (label `option`) has one bin per side a, b, c, … of the subject's trials,
//! with the share of all responses that chose the side ([`Kind::ChoiceShare`], label
//! `choice_share`; the shares of a dataset sum to 1, ties included) and, for models of time, the
//! response-time quantiles of the responses that chose it ([`Response::All`], label `all`).
//! The misfit summaries leave out the share of the last side, which the others fix.
//!
//! Predicted: the mean, standard deviation and the 2.5 % and 97.5 % quantiles across replicate
//! datasets of each statistic. Pooled statistics average the per-subject statistics of the same
//! bin index (quantile averaging, "Vincentizing": Ratcliff 1979), the observed ones and those of
//! each replicate alike, so the pooled band is the spread of the pooled replicate datasets.
//! Quantiles are of type 7 of Hyndman & Fan (1996) ([`quantile_sorted`]).

pub mod plots;
mod replicates;
mod statistics;
mod stored;
mod tables;

pub use replicates::*;
pub use statistics::*;
pub use stored::*;
pub use tables::*;
