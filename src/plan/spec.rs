//! The plan file: a TOML document of our own that says what to simulate and what to ask of it.
//!
//! ```toml
//! design = "design.csv"          # trial table without responses (relative to this file)
//! models = ["gainloss-linear", "gainloss-quadratic"]   # candidates, fitted to every cohort
//! generating = ["gainloss-linear"]                     # default: every candidate
//! participants = [10, 20, 40]    # per group
//! trials = [100, 200, 300]       # per participant: the first N trials of the design
//! studies = 50                   # simulated studies per generating model
//! seed = 1
//! alpha = 0.05                   # level of the group contrast
//! target_r = 0.8                 # optional: the trials needed for this recovery r
//! groups = ["controls", "patients"]
//!
//! [difference]                   # what the contrast should find
//! parameter = "effort_weight"
//! shift = 0.4                    # added to the second group's values (natural scale)
//!
//! [population]                   # generating values, per parameter (all groups)
//! gain_rate = { uniform = [0.1, 0.7] }
//! value_scale = { normal = { mean = 4.0, sd = 1.0 } }   # truncated to the bounds
//! ndt = { fixed = 0.3 }
//! ```
//!
//! A `population_file` (CSV: one column per parameter, one row per plausible participant, e.g.
//! the estimates of a pilot study) can replace or complement the distributions: each simulated
//! participant takes one of its rows at random. A free parameter named by neither is drawn
//! uniformly from its model's declared start range (the run record lists those defaults).

use serde::Deserialize;
use std::collections::BTreeMap;
use std::path::PathBuf;

/// A distribution of generating values of one parameter (natural scale).
#[derive(Clone, Debug, Deserialize, PartialEq, serde::Serialize)]
#[serde(rename_all = "lowercase", deny_unknown_fields)]
pub enum Distribution {
    /// Uniform on [low, high].
    Uniform([f64; 2]),
    /// Normal(mean, sd), truncated to the parameter's bounds (values outside are redrawn).
    Normal {
        /// Mean.
        mean: f64,
        /// Standard deviation (> 0).
        sd: f64,
    },
    /// Every participant has this value.
    Fixed(f64),
}

/// The group difference the contrast should detect.
#[derive(Clone, Debug, Deserialize, PartialEq, serde::Serialize)]
#[serde(deny_unknown_fields)]
pub struct Difference {
    /// The parameter that differs.
    pub parameter: String,
    /// Added to the second group's generating values, on the natural scale; a shifted value
    /// outside the parameter's bounds is redrawn.
    pub shift: f64,
}

/// A plan file as written (before its models and design are read).
#[derive(Clone, Debug, Deserialize, PartialEq, serde::Serialize)]
#[serde(deny_unknown_fields)]
pub struct PlanSpec {
    /// Trial table without responses (path relative to the plan file).
    pub design: PathBuf,
    /// Candidate models (names or model files relative to the plan file).
    pub models: Vec<String>,
    /// Models that generate cohorts (default: every candidate); each must be a candidate.
    #[serde(default)]
    pub generating: Option<Vec<String>>,
    /// Participants per group; each study simulates the largest number and the smaller sizes
    /// use its first participants.
    pub participants: Vec<usize>,
    /// Trials per participant (the first N trials of each design subject); the smaller sizes
    /// are the first trials of the same simulated sessions.
    pub trials: Vec<usize>,
    /// Simulated studies per generating model.
    pub studies: usize,
    /// Seed of everything random.
    #[serde(default = "default_seed")]
    pub seed: u64,
    /// Starts per fit, as `fit --starts`.
    #[serde(default = "default_starts")]
    pub starts: usize,
    /// Level of the two-sided Welch test of the group contrast.
    #[serde(default = "default_alpha")]
    pub alpha: f64,
    /// Report the fewest listed trials per participant at which recovery reaches this r.
    #[serde(default)]
    pub target_r: Option<f64>,
    /// Group labels (default: one group `all`, or `baseline` and `shifted` with a difference).
    #[serde(default)]
    pub groups: Option<Vec<String>>,
    /// The difference to detect between the first two groups.
    #[serde(default)]
    pub difference: Option<Difference>,
    /// Generating distributions per parameter.
    #[serde(default)]
    pub population: BTreeMap<String, Distribution>,
    /// A CSV of generating values (one column per parameter, one row per participant profile).
    #[serde(default)]
    pub population_file: Option<PathBuf>,
    /// Also fit empirical-Bayes group priors (one per group) to every cohort, as
    /// `fit --hierarchical --by group` would.
    #[serde(default = "default_true")]
    pub empirical_bayes: bool,
    /// Response deadline in seconds, for simulation and fits.
    #[serde(default)]
    pub deadline: Option<f64>,
    /// Response lock in seconds, for simulation and fits.
    #[serde(default)]
    pub lock: Option<f64>,
    /// Monte Carlo draws for the exceedance probabilities of three or more models.
    #[serde(default = "default_selection_samples")]
    pub selection_samples: usize,
}

fn default_seed() -> u64 {
    1
}
fn default_starts() -> usize {
    10
}
fn default_alpha() -> f64 {
    0.05
}
fn default_true() -> bool {
    true
}
fn default_selection_samples() -> usize {
    20_000
}

/// A plan file that cannot be read or says something impossible.
#[derive(Debug, thiserror::Error)]
pub enum PlanError {
    /// The file could not be read.
    #[error("{path}: cannot read the plan file: {source}")]
    Read {
        /// The plan file.
        path: PathBuf,
        /// Why.
        source: std::io::Error,
    },
    /// Not a plan in TOML (the message gives line and column).
    #[error("{path}: not a valid plan: {message}")]
    Syntax {
        /// The plan file.
        path: PathBuf,
        /// The parser's message.
        message: String,
    },
    /// A key whose value is impossible.
    #[error("{path}: `{key}`: {message}")]
    Value {
        /// The plan file.
        path: PathBuf,
        /// The key.
        key: String,
        /// What is wrong and what was expected.
        message: String,
    },
}

impl PlanSpec {
    /// Reads and checks a plan file (the checks that need no model or design; see
    /// [`crate::plan::Plan::new`] for the others).
    pub fn read(path: &std::path::Path) -> Result<PlanSpec, PlanError> {
        let text = std::fs::read_to_string(path).map_err(|source| PlanError::Read {
            path: path.to_path_buf(),
            source,
        })?;
        PlanSpec::parse(&text, path)
    }

    /// Parses and checks the text of a plan file; `path` names it in messages.
    pub fn parse(text: &str, path: &std::path::Path) -> Result<PlanSpec, PlanError> {
        let spec: PlanSpec = toml::from_str(text).map_err(|e| PlanError::Syntax {
            path: path.to_path_buf(),
            message: e.to_string(),
        })?;
        spec.check(path)?;
        Ok(spec)
    }

    fn check(&self, path: &std::path::Path) -> Result<(), PlanError> {
        let fail = |key: &str, message: String| PlanError::Value {
            path: path.to_path_buf(),
            key: key.to_string(),
            message,
        };
        if self.models.is_empty() {
            return Err(fail("models", "expected at least one model".into()));
        }
        let sizes = |key: &str, list: &[usize], least: usize| {
            if list.is_empty() || list.iter().any(|&n| n < least) {
                Err(fail(
                    key,
                    format!("expected a list of whole numbers of at least {least}, got {list:?}"),
                ))
            } else {
                Ok(())
            }
        };
        let least_participants = if self.empirical_bayes {
            crate::fit::MIN_GROUP_SUBJECTS
        } else {
            2
        };
        sizes("participants", &self.participants, least_participants)?;
        sizes("trials", &self.trials, 1)?;
        if self.studies < 2 {
            return Err(fail(
                "studies",
                format!(
                    "expected at least 2 simulated studies, got {}",
                    self.studies
                ),
            ));
        }
        if self.starts == 0 {
            return Err(fail("starts", "expected at least 1 start".into()));
        }
        if !(self.alpha > 0.0 && self.alpha < 1.0) {
            return Err(fail(
                "alpha",
                format!("expected a level in (0, 1), got {}", self.alpha),
            ));
        }
        if let Some(r) = self.target_r
            && !(r > -1.0 && r < 1.0)
        {
            return Err(fail(
                "target_r",
                format!("expected a correlation in (−1, 1), got {r}"),
            ));
        }
        if let Some(d) = &self.difference
            && !d.shift.is_finite()
        {
            return Err(fail("difference.shift", "expected a finite number".into()));
        }
        let groups = self.group_labels();
        if self.difference.is_some() && groups.len() < 2 {
            return Err(fail(
                "groups",
                "a difference needs at least two groups (it shifts the second)".into(),
            ));
        }
        let mut sorted = groups.clone();
        sorted.sort();
        sorted.dedup();
        if sorted.len() != groups.len() || groups.iter().any(|g| g.trim().is_empty()) {
            return Err(fail(
                "groups",
                format!("expected distinct, non-empty labels, got {groups:?}"),
            ));
        }
        for (name, distribution) in &self.population {
            let key = format!("population.{name}");
            match *distribution {
                Distribution::Uniform([low, high]) if !(low.is_finite() && high > low) => {
                    return Err(fail(
                        &key,
                        format!(
                            "expected uniform = [low, high] with low < high, got [{low}, {high}]"
                        ),
                    ));
                }
                Distribution::Normal { mean, sd } if !(mean.is_finite() && sd > 0.0) => {
                    return Err(fail(
                        &key,
                        format!("expected a finite mean and sd > 0, got mean {mean}, sd {sd}"),
                    ));
                }
                Distribution::Fixed(x) if !x.is_finite() => {
                    return Err(fail(&key, "expected a finite value".into()));
                }
                _ => {}
            }
        }
        if let Some(n) = self.deadline.filter(|d| d.is_nan() || *d <= 0.0) {
            return Err(fail("deadline", format!("expected seconds > 0, got {n}")));
        }
        if let Some(n) = self.lock.filter(|d| d.is_nan() || *d < 0.0) {
            return Err(fail("lock", format!("expected seconds ≥ 0, got {n}")));
        }
        Ok(())
    }

    /// The group labels: as given, or `all` (no difference), or `baseline` and `shifted`.
    pub fn group_labels(&self) -> Vec<String> {
        match (&self.groups, &self.difference) {
            (Some(g), _) => g.clone(),
            (None, Some(_)) => vec!["baseline".into(), "shifted".into()],
            (None, None) => vec!["all".into()],
        }
    }
}
