//! Command-line interface: argument definitions and dispatch to one small function per command.

mod check;
mod compare;
mod contrast;
mod demo;
mod density;
mod export;
mod fit;
mod input;
mod journal;
mod merge;
pub mod models;
pub mod plan;
mod report;
mod shard;
mod simulate;

use crate::results::fit_folder::{RUN_RECORD, RunRecord};
use clap::{Parser, Subcommand};
use std::path::PathBuf;

/// Caution printed in the help of every command.
pub const RESEARCH_CAUTION: &str = "Parameters from valuedrift are research measurements, not diagnoses: \
it is not a clinical or diagnostic instrument. De-identify participant data before analysis and \
follow your ethics approval.";

/// valuedrift: reinforcement-learning drift-diffusion models of reward-versus-effort choice,
/// fitted to choices and response times.
#[derive(Debug, Parser)]
#[command(name = "valuedrift", version, about, after_help = RESEARCH_CAUTION)]
pub struct Cli {
    /// The command to run.
    #[command(subcommand)]
    pub command: Command,
}

/// The commands.
#[derive(Debug, Subcommand)]
pub enum Command {
    /// Run the main job on the embedded demo study: fit every built-in model (but the races) to two invented
    /// cohorts (per-subject maximum likelihood, L-BFGS with exact gradients), fit one
    /// empirical-Bayes group prior per cohort for the reference model (Huys et al. 2011), print
    /// model comparison by BIC (Schwarz 1978), iBIC and random-effects Bayesian model selection
    /// per cohort (Stephan et al. 2009; Rigoux et al. 2014), and per-cohort parameter medians
    /// beside the values that generated the data; run a predictive check of the reference model
    /// (OUT/check) and write the full outputs with one self-contained HTML report
    /// (OUT/report.html).
    #[command(after_help = RESEARCH_CAUTION)]
    Demo {
        /// Output folder.
        #[arg(long, default_value = "valuedrift-demo")]
        out: PathBuf,
        /// Whether an existing result may be replaced.
        #[command(flatten)]
        replace: ReplaceArg,
        /// Threads (0: all cores); results do not depend on it.
        #[arg(long, default_value_t = 0)]
        threads: usize,
    },
    /// Fit models to each subject of a trial table (maximum likelihood, or MAP where a model
    /// declares priors): quasi-random starts from the declared start ranges (Halton 1960),
    /// screened, then L-BFGS (Liu & Nocedal 1989) with exact gradients; the best point is checked
    /// on the natural scale (bounds confirmed from the interior, the faces of the parameter box
    /// tried, flat and value-blind optima escaped) so that a fit is a real optimum or says what
    /// is wrong; standard errors and 95 % intervals from the observed information. A data screen
    /// runs first.
    ///
    /// Writes DIR/parameters.csv (one row per subject, model and parameter), DIR/estimates_wide.csv
    /// (one row per subject and model), DIR/fit_summary.csv (with each fit's status),
    /// DIR/data_screen.csv, their Parquet twins, and DIR/run.json. Each finished (model,
    /// subject) pair is journalled beside DIR (.<DIR>.valuedrift-journal) until DIR is written,
    /// so a stopped run continues with --resume.
    #[command(after_help = RESEARCH_CAUTION)]
    Fit {
        /// Trial table (.csv, .tsv or .parquet); see the README for its columns.
        #[arg(long)]
        data: PathBuf,
        /// Model names (see `valuedrift models`) or model files, comma-separated.
        #[arg(long, value_delimiter = ',', required = true)]
        model: Vec<String>,
        /// Output folder.
        #[arg(long)]
        out: PathBuf,
        /// Starts per subject.
        #[arg(long, default_value_t = 10)]
        starts: usize,
        /// Seed of the start points.
        #[arg(long, default_value_t = 1)]
        seed: u64,
        /// Threads (0: all cores); results do not depend on it.
        #[arg(long, default_value_t = 0)]
        threads: usize,
        /// Response deadline in seconds: trials without response then count as "no bound
        /// reached by the deadline".
        #[arg(long)]
        deadline: Option<f64>,
        /// Response lock in seconds from offer onset, for tasks whose buttons unlock only then:
        /// each trial scores the process conditioned on no bound before the lock.
        #[arg(long)]
        lock: Option<f64>,
        /// Column names of your file, as canonical=yours pairs: subject=participant,rt=RT.
        #[arg(long, default_value = "")]
        columns: String,
        /// Choice codes and missing-value tokens of your file.
        #[command(flatten)]
        reading: input::ReadingArgs,
        /// The data screen before fitting: fast floor and trimming of response times.
        #[command(flatten)]
        screen: input::ScreenArgs,
        /// Also fit empirical-Bayes group priors (EM with the Laplace approximation, Huys et
        /// al. 2011): a Gaussian on each free parameter's unconstrained scale, shrunken
        /// per-subject estimates and the integrated BIC. Writes eb_parameters.csv,
        /// eb_fit_summary.csv, eb_group_priors.csv and eb_model_evidence.csv (+ Parquet).
        #[arg(long)]
        hierarchical: bool,
        /// With --hierarchical: one group prior per value of this column of the trial table
        /// (e.g. --by diagnosis) instead of one over all subjects.
        #[arg(long, requires = "hierarchical")]
        by: Option<String>,
        /// EM stops when no group mean or SD (unconstrained scale) changes by more than this.
        #[arg(long, default_value_t = 1e-3, requires = "hierarchical")]
        em_tolerance: f64,
        /// Most EM iterations.
        #[arg(long, default_value_t = 200, requires = "hierarchical")]
        em_iterations: usize,
        /// Draws from the fitted group prior per subject for the integrated BIC.
        #[arg(long, default_value_t = 2000, requires = "hierarchical")]
        ibic_samples: usize,
        /// With --hierarchical: estimate the full covariance of the group prior (correlated
        /// parameters; writes eb_group_correlations.csv) instead of only the variances.
        #[arg(long, requires = "hierarchical")]
        full_covariance: bool,
        /// With --hierarchical: columns of the trial table holding a score of each participant
        /// (e.g. --prior-covariates apathy,anhedonia; one number per participant, repeated on
        /// each of its rows) on which the mean of the group prior depends linearly,
        /// θ_i ~ N(B·(1, scores_i − centres), Σ) on the unconstrained scale. Scores are centred
        /// on the participants' mean, so the intercept is the group mean at the average scores.
        /// Writes eb_prior_regression.csv (+ Parquet): per parameter and score the coefficient,
        /// its standard error, t and p value. With --by, each group gets its own regression.
        /// The coefficients are associations in the sample, not diagnoses.
        #[arg(long, value_delimiter = ',', requires = "hierarchical")]
        prior_covariates: Vec<String>,
        /// Use the scores of --prior-covariates as given instead of centring them: the
        /// intercept is then the group mean of a participant whose scores are all 0.
        #[arg(long, requires = "prior_covariates")]
        covariates_as_given: bool,
        /// Fit only shard I of N (e.g. --shard 3/8, one job of a cluster array): the subjects
        /// whose label hashes to shard I. `valuedrift merge` combines the N folders into the
        /// folder a single run writes. With --hierarchical the shards fit their subjects and
        /// `merge` runs the EM steps (which need every subject) on one node.
        #[arg(long, value_name = "I/N")]
        shard: Option<String>,
        /// Whether an existing result may be replaced.
        #[command(flatten)]
        replace: ReplaceArg,
        /// Resuming an interrupted run (--resume) or discarding its journal (--restart).
        #[command(flatten)]
        journal: journal::JournalArgs,
    },
    /// Combines the folders of `fit --shard 1/N` … `--shard N/N` into the folder a single run of
    /// the same fit writes, byte for byte (its run.json records the command line without
    /// --shard, with this command's --out). With shards of `fit --hierarchical` it then runs the
    /// EM steps here from the shards' fits; with shards of `check` or `plan` it pools their
    /// subjects or studies into the folder a single check or plan writes. Refuses folders of
    /// different runs (data checksum, models, seed, options) and names missing or repeated
    /// shards.
    #[command(after_help = RESEARCH_CAUTION)]
    Merge {
        /// The shard folders (any order; a shell glob such as fits/shard-* works).
        #[arg(long, num_args = 1.., required = true)]
        shards: Vec<PathBuf>,
        /// Output folder.
        #[arg(long)]
        out: PathBuf,
        /// Whether an existing result may be replaced.
        #[command(flatten)]
        replace: ReplaceArg,
    },
    /// Per-trial latent variables of a fitted model for imaging analyses: values, subjective
    /// values, value difference, prediction errors, drift, choice probability and expected times
    /// at each subject's estimates in DIR/parameters.csv (from `valuedrift fit`).
    ///
    /// Writes OUT/latents.csv and OUT/latents.parquet (raw values, one row per trial) and, when
    /// the trial table has onsets, makes OUT a BIDS derivative dataset: one events file per
    /// subject and run, OUT/sub-<label>/func/sub-<label>_task-<task>[_run-<index>]_desc-<model>
    /// _events.tsv with a .json sidecar, with choice and outcome events and one column per
    /// modulator; OUT/dataset_description.json, README, participants.tsv (+ .json; the BIDS
    /// label of each subject of the trial table) and .bidsignore (naming the latents tables and
    /// design matrices, which the BIDS specification does not cover).
    #[command(after_help = RESEARCH_CAUTION)]
    Export {
        /// The fit folder, trial table, model and output folder.
        #[command(flatten)]
        input: FittedRun,
        /// Scaling of the modulators within each run, in the events and design files.
        #[arg(long, value_enum, default_value_t = crate::exports::Scale::Center)]
        scale: crate::exports::Scale,
        /// Repetition time in seconds; with --scans, also write one design matrix per subject
        /// and run (beside its events file, ending _desc-<model>_design.tsv + .json): the events'
        /// regressors convolved with the canonical double-gamma haemodynamic response
        /// (Friston et al. 1998; Glover 1999), sampled at the start of each scan.
        #[arg(long)]
        tr: Option<f64>,
        /// Number of scans (volumes) of every run; needs --tr.
        #[arg(long)]
        scans: Option<usize>,
        /// Microtime bins per scan for the convolution (default 16); needs --tr and --scans.
        #[arg(long)]
        microtime_bins: Option<usize>,
        /// BIDS task label put in the events and design file names (letters and digits; the
        /// BIDS specification requires a task label in the names of functional files).
        #[arg(long, default_value = "choice")]
        task: String,
    },
    /// Predictive check of a fitted model: simulate each subject's data N times at its
    /// estimates in DIR/parameters.csv (freely where the table gives outcome_if_a and
    /// outcome_if_b, else one trial ahead of the observed history) and compare observed with
    /// predicted proportions of correct-by-value choices and response-time quantiles
    /// (.1 .3 .5 .7 .9; Ratcliff & Tuerlinckx 2002) in quintiles of |value difference| and by
    /// the effort of the better option, and per option side (a, b, c, ...) the share of responses
    /// choosing it and the quantiles of their times; bands are 2.5-97.5 % across replicate
    /// datasets, pooled statistics average subjects' quantiles (Ratcliff 1979).
    ///
    /// Writes OUT/check_choices.csv, check_quantiles.csv, check_misfit.csv (+ Parquet) and
    /// check_choices.svg, check_rt_quantiles.svg, check_options.svg (pooled), and the same
    /// figures for the three worst-fitting subjects (check_worst1_choices.svg, ...), and run.json.
    #[command(after_help = RESEARCH_CAUTION)]
    Check {
        /// The fit folder, trial table, model and output folder.
        #[command(flatten)]
        input: FittedRun,
        /// Replicate datasets per subject (at least 10, the fewest that give a 95 % band).
        #[arg(long, default_value_t = 100)]
        sims: usize,
        /// Seed (each subject has its own stream of it).
        #[arg(long, default_value_t = 1)]
        seed: u64,
        /// Response deadline in seconds, as in the fit: slower simulated responses become no
        /// response.
        #[arg(long)]
        deadline: Option<f64>,
        /// Also give every level of this column of the trial table (a condition, block or
        /// session; `run` for runs) statistics of its own: choice proportions and response-time
        /// quantiles per level, with a `level` column in the tables.
        #[arg(long)]
        by: Option<String>,
        /// Check only shard I of N of the subjects (e.g. --shard 3/8, one job of a cluster
        /// array; the subjects whose label hashes to shard I, as for `fit --shard`). The folder
        /// holds the shard's replicate statistics (shard_checks.csv) and run.json;
        /// `valuedrift merge` pools the N folders into the folder a single check writes.
        #[arg(long, value_name = "I/N")]
        shard: Option<String>,
    },
    /// Compare one model's fitted parameters between groups of subjects: per free parameter,
    /// Welch's t test (Welch 1947), Mann-Whitney U (normal approximation with tie and continuity
    /// corrections), Hedges' g with a 95 % interval (Hedges 1981; Hedges & Olkin 1985) and, with
    /// more than two groups, Welch's ANOVA (Welch 1951) and Kruskal-Wallis H (Kruskal & Wallis
    /// 1952); Benjamini-Hochberg q values (1995) across parameters of the Welch p values.
    ///
    /// Reads DIR/parameters.csv of `valuedrift fit`; writes contrast.csv, contrast_groups.csv
    /// and their Parquet twins. Estimates at a bound are kept and counted in n_at_bound.
    #[command(after_help = RESEARCH_CAUTION)]
    Contrast {
        /// Folder written by `valuedrift fit` (holding parameters.csv).
        #[arg(long)]
        fits: PathBuf,
        /// Model whose parameters are compared.
        #[arg(long)]
        model: String,
        /// Column of parameters.csv that defines the groups.
        #[arg(long, default_value = "group")]
        by: String,
        /// Output folder (default: the --fits folder, whose other files stay).
        #[arg(long)]
        out: Option<PathBuf>,
        /// Per-subject or empirical-Bayes estimates.
        #[command(flatten)]
        estimates: EstimatesArg,
        /// Whether an existing result may be replaced.
        #[command(flatten)]
        replace: ReplaceArg,
    },
    /// Compare models across the subjects of a fit folder: per subject AIC (Akaike 1974), BIC
    /// (Schwarz 1978), Akaike and Schwarz weights (Burnham & Anderson 2002; Wagenmakers &
    /// Farrell 2004); across subjects random-effects Bayesian model selection (Stephan et al.
    /// 2009) with expected frequencies, exceedance probabilities, protected exceedance
    /// probabilities and the Bayesian omnibus risk (Rigoux et al. 2014), pooled and per group,
    /// and the between-group test of Rigoux et al. (2014).
    ///
    /// Reads DIR/fit_summary.csv of `valuedrift fit`; writes model_selection.csv,
    /// model_evidence.csv, model_group_difference.csv and their Parquet twins. Choices-only
    /// models are left out when response-time models are present (different data); subjects
    /// missing a compared model are left out with a warning.
    #[command(after_help = RESEARCH_CAUTION)]
    Compare {
        /// Folder written by `valuedrift fit` (holding fit_summary.csv).
        #[arg(long)]
        fits: PathBuf,
        /// Column of fit_summary.csv that defines the groups.
        #[arg(long, default_value = "group")]
        by: String,
        /// Summary file inside the --fits folder: fit_summary.csv, or eb_fit_summary.csv for
        /// the empirical-Bayes estimates of `fit --hierarchical` (which carry the Laplace log
        /// evidence under the fitted group prior).
        #[arg(long, default_value_t = crate::results::fit_folder::SUMMARY.csv())]
        summary: String,
        /// Output folder (default: the --fits folder, whose other files stay).
        #[arg(long)]
        out: Option<PathBuf>,
        /// Log evidence used for selection: -BIC/2, -AIC/2 or the Laplace approximation.
        #[arg(long, value_enum, default_value_t = crate::group::selection::Evidence::Bic)]
        evidence: crate::group::selection::Evidence,
        /// Monte Carlo draws for exceedance probabilities of three or more models.
        #[arg(long, default_value_t = 1_000_000)]
        samples: usize,
        /// Seed of the Monte Carlo draws.
        #[arg(long, default_value_t = 1)]
        seed: u64,
        /// Whether an existing result may be replaced.
        #[command(flatten)]
        replace: ReplaceArg,
    },
    /// Simulate choices, response times and outcomes from a model on a trial design.
    ///
    /// The design is a trial table whose choice, rt and outcome columns may be empty, with
    /// outcome_if_a and outcome_if_b giving what each option would deliver; the parameter file
    /// has a subject column and one column per free parameter (natural scale).
    #[command(after_help = RESEARCH_CAUTION)]
    Simulate {
        /// Model name or file.
        #[arg(long)]
        model: String,
        /// Parameter values per subject (CSV).
        #[arg(long)]
        params: PathBuf,
        /// Trial design (.csv, .tsv or .parquet).
        #[arg(long)]
        design: PathBuf,
        /// Output trial table: .csv (comma-separated) or .parquet, chosen by the extension.
        #[arg(long)]
        out: PathBuf,
        /// Seed.
        #[arg(long, default_value_t = 1)]
        seed: u64,
        /// Responses later than this many seconds are recorded as no response.
        #[arg(long)]
        deadline: Option<f64>,
        /// Response lock in seconds: processes that end before it are redrawn (the simulated
        /// responses follow the process conditioned on no bound before the lock).
        #[arg(long)]
        lock: Option<f64>,
        /// Whether an existing result may be replaced.
        #[command(flatten)]
        replace: ReplaceArg,
        /// Choice codes and missing-value tokens of the design file.
        #[command(flatten)]
        reading: input::ReadingArgs,
    },
    /// Plan a study before collecting data: simulate cohorts from a design with the exact
    /// sampler, fit them exactly as `fit` would, and report parameter recovery per design size
    /// (Pearson r, bias, RMSE, 95 % interval coverage, share at a bound; per-subject and
    /// empirical-Bayes estimates), model recovery (per-subject confusion by BIC, Schwarz 1978;
    /// random-effects selection per study, Stephan et al. 2009, Rigoux et al. 2014) and the power
    /// of the group contrast (Welch 1947) per number of participants, with Wilson (1927)
    /// intervals and the normal-theory power from the noncentral t (Lenth 1989).
    ///
    /// The plan is a TOML file (see the README's section on `valuedrift plan`, and
    /// examples/plan/). Writes OUT/plan_recovery, plan_confusion, plan_model_recovery,
    /// plan_power, plan_trials_needed, plan_estimates (.csv + .parquet) and plan.json. Results
    /// depend on the seed only, not on --threads.
    #[command(after_help = RESEARCH_CAUTION)]
    Plan {
        /// The plan file (TOML).
        #[arg(long)]
        plan: PathBuf,
        /// Output folder.
        #[arg(long)]
        out: PathBuf,
        /// Threads (0: all cores); results do not depend on it.
        #[arg(long, default_value_t = 0)]
        threads: usize,
        /// Simulate only shard I of N of the studies (e.g. --shard 3/8, one job of a cluster
        /// array; studies dealt to the shards in turn, in plan order). The folder holds the
        /// shard's studies (shard_studies.csv) and plan.json; `valuedrift merge` summarises the
        /// N folders into the folder a single plan writes.
        #[arg(long, value_name = "I/N")]
        shard: Option<String>,
        /// Whether an existing result may be replaced.
        #[command(flatten)]
        replace: ReplaceArg,
    },
    /// One self-contained HTML report (inline SVG figures, no script, nothing fetched from
    /// anywhere) of a fit folder and what sits beside it: data screen, fits, estimates by group,
    /// model selection with protected exceedance probabilities, group contrast, empirical-Bayes
    /// priors, predictive-check figures (--check), a plan's recovery, model recovery and power
    /// (--plan), the run's settings and a methods paragraph with references.
    #[command(after_help = RESEARCH_CAUTION)]
    Report {
        /// Folder written by `valuedrift fit` (with `compare` and `contrast` outputs, if any).
        #[arg(long)]
        fits: Option<PathBuf>,
        /// Folder written by `valuedrift check` (default: the fit folder's `check/`, if any).
        #[arg(long)]
        check: Option<PathBuf>,
        /// Folder written by `valuedrift plan` (default: the fit folder's `plan/`, if any).
        #[arg(long)]
        plan: Option<PathBuf>,
        /// The HTML file to write.
        #[arg(long)]
        out: PathBuf,
        /// Whether an existing result may be replaced.
        #[command(flatten)]
        replace: ReplaceArg,
    },
    /// List the built-in models (or describe one, by name or file) with their components,
    /// equations and parameters.
    #[command(after_help = RESEARCH_CAUTION)]
    Models {
        /// A model name or file.
        name: Option<String>,
    },
    /// Log-density and distribution function of the Wiener first-passage time for each row of a
    /// CSV file (Navarro & Fuss 2009; Blurton, Kesselmeier & Gondan 2012, 2017).
    ///
    /// Input columns: rt (seconds), bound (upper|lower), drift, boundary, start (0..1 from the
    /// lower bound), ndt; optional drift_sd, start_range, ndt_range. Unit within-trial noise
    /// (s = 1): multiply drift, boundary and drift_sd stated for s = 0.1 by 10. Output: the same
    /// rows and columns plus log_density and cdf (defective distribution at rt for that bound).
    #[command(after_help = RESEARCH_CAUTION)]
    Density {
        /// CSV file to read.
        #[arg(long)]
        input: PathBuf,
        /// CSV file to write (written atomically); standard output when omitted.
        #[arg(long)]
        output: Option<PathBuf>,
        /// Whether an existing result may be replaced.
        #[command(flatten)]
        replace: ReplaceArg,
    },
}

/// What `export` and `check` read and where they write: a fitted model run forward over the
/// trial table it was fitted to.
#[derive(Debug, clap::Args)]
pub struct FittedRun {
    /// Folder written by `valuedrift fit` (reads its parameters.csv, or eb_parameters.csv).
    #[arg(long)]
    pub fits: PathBuf,
    /// Trial table (.csv, .tsv or .parquet) that was fitted.
    #[arg(long)]
    pub data: PathBuf,
    /// Model name or file (one model).
    #[arg(long)]
    pub model: String,
    /// Output folder.
    #[arg(long)]
    pub out: PathBuf,
    /// Column names of your file, as canonical=yours pairs: subject=participant,rt=RT.
    #[arg(long, default_value = "")]
    pub columns: String,
    /// Choice codes and missing-value tokens of your file.
    #[command(flatten)]
    pub reading: input::ReadingArgs,
    /// Per-subject or empirical-Bayes estimates.
    #[command(flatten)]
    pub estimates: EstimatesArg,
    /// Whether an existing output folder may be replaced.
    #[command(flatten)]
    pub replace: ReplaceArg,
}

/// The trial table, the model and each subject's estimates (all parameters, model order).
pub type FittedInputs = (crate::data::TrialTable, crate::model::Model, Vec<Vec<f64>>);

/// What `export` reads before the trials: the column mapping, the model, the fitted subjects'
/// labels and estimates in table order, and the table's optional columns.
pub struct FittedSubjects {
    /// How the trial table is read.
    pub columns: crate::data::ColumnMap,
    /// The model.
    pub model: crate::model::Model,
    /// The subjects fitted with the model, in table order.
    pub subjects: Vec<crate::data::SubjectLabel>,
    /// Each subject's estimates (all parameters, model order).
    pub estimates: Vec<Vec<f64>>,
    /// The table's optional canonical columns present.
    pub present: Vec<String>,
    /// Subjects of the table the fit did not fit with the model.
    skipped: std::collections::HashSet<String>,
}

/// The fitted subjects of one part of a trial table, each with its index into
/// [`FittedSubjects::subjects`] and [`FittedSubjects::estimates`].
pub type FittedPart = Vec<(usize, crate::data::Subject)>;

impl FittedSubjects {
    /// Whether the subject `id` of the table was fitted with the model.
    pub fn keeps(&self, id: &str) -> bool {
        !self.skipped.contains(id)
    }

    /// Reads the trial table at `data` again a part at a time and hands `each` the fitted
    /// subjects of every part, each with its index into [`FittedSubjects::subjects`] and
    /// [`FittedSubjects::estimates`], in table order; refuses a table that changed since
    /// [`FittedRun::load_labels`] read it.
    pub fn for_each_part(
        &self,
        data: &std::path::Path,
        each: &mut dyn FnMut(FittedPart) -> Result<(), Box<dyn std::error::Error>>,
    ) -> Result<(), Box<dyn std::error::Error>> {
        let changed = |what: String| {
            format!(
                "{}: changed while it was being read ({what}); run the command again",
                data.display()
            )
        };
        let mut parts = crate::data::SubjectParts::open(data, &self.columns)?;
        let mut next = 0;
        while let Some(part) = parts.next_part(input::SUBJECTS_PER_PART)? {
            let mut fitted = Vec::with_capacity(part.subjects.len());
            for subject in part.subjects.into_iter().filter(|s| self.keeps(&s.id)) {
                if self.subjects.get(next).map(|s| s.id.as_str()) != Some(subject.id.as_str()) {
                    return Err(
                        changed(format!("subject {:?} was not read before", subject.id)).into(),
                    );
                }
                fitted.push((next, subject));
                next += 1;
            }
            each(fitted)?;
        }
        if next != self.subjects.len() {
            return Err(changed(format!(
                "{} subjects before, {next} now",
                self.subjects.len()
            ))
            .into());
        }
        Ok(())
    }
}

impl FittedRun {
    /// Reads the trial table (with the column mapping), loads the model, checks it against the
    /// definition recorded in the fit folder's run.json and reads each subject's estimates of it
    /// (within the model's bounds) from the fit folder, in table order. Subjects the fit did not
    /// fit with this model (run.json's `skipped`, for example too few responses for its free
    /// parameters) are left out with a note.
    pub fn load(&self) -> Result<FittedInputs, Box<dyn std::error::Error>> {
        let columns = self.column_map()?;
        let mut table = input::read_table(&self.data, &columns)?;
        let (model, skipped) = self.fitted_model()?;
        self.keep_fitted(&model, &skipped, &mut table.subjects)?;
        let estimates = crate::exports::read_estimates(
            &self.estimates.estimates.parameters_file(&self.fits),
            &model,
            &table.subjects,
        )?;
        Ok((table, model, estimates))
    }

    /// [`FittedRun::load`] without keeping the trials: the table is read a part at a time for
    /// its subjects' labels (and read again by the caller), so memory does not grow with the
    /// number of subjects.
    pub fn load_labels(&self) -> Result<FittedSubjects, Box<dyn std::error::Error>> {
        let columns = self.column_map()?;
        let mut parts = crate::data::SubjectParts::open(&self.data, &columns)?;
        let mut subjects = Vec::new();
        let mut present = Vec::new();
        while let Some(part) = parts.next_part(input::SUBJECTS_PER_PART)? {
            subjects.extend(part.subjects.iter().map(crate::data::Subject::label));
            present = part.present;
        }
        for line in parts.notes().lines(&self.data) {
            eprintln!("{line}");
        }
        let (model, skipped) = self.fitted_model()?;
        self.keep_fitted(&model, &skipped, &mut subjects)?;
        let estimates = crate::exports::read_estimates(
            &self.estimates.estimates.parameters_file(&self.fits),
            &model,
            &subjects,
        )?;
        Ok(FittedSubjects {
            columns,
            model,
            subjects,
            estimates,
            present,
            skipped,
        })
    }

    fn column_map(&self) -> Result<crate::data::ColumnMap, Box<dyn std::error::Error>> {
        let columns =
            crate::data::ColumnMap::parse(&self.columns).map_err(input::ColumnsError::Mapping)?;
        Ok(self.reading.apply(columns)?)
    }

    /// The model, checked against the fit folder's record, and the subjects it was not fitted
    /// to there.
    fn fitted_model(
        &self,
    ) -> Result<(crate::model::Model, std::collections::HashSet<String>), Box<dyn std::error::Error>>
    {
        let model = crate::model::load_model(self.model.trim())?;
        if !crate::exports::check_recorded_model(&self.fits, &model)? {
            eprintln!(
                "note: {} has no {RUN_RECORD} (the record of `valuedrift fit`): the model could \
                 not be checked against the one that was fitted",
                self.fits.display()
            );
        }
        let skipped = RunRecord::if_readable(&self.fits)
            .map(|record| record.not_fitted_with(&model.name))
            .unwrap_or_default();
        Ok((model, skipped))
    }

    /// Leaves out of `subjects` those in `skipped`, with a note; refuses when none is left.
    fn keep_fitted<S: AsRef<str>>(
        &self,
        model: &crate::model::Model,
        skipped: &std::collections::HashSet<String>,
        subjects: &mut Vec<S>,
    ) -> Result<(), Box<dyn std::error::Error>> {
        let before = subjects.len();
        subjects.retain(|s| !skipped.contains(s.as_ref()));
        if subjects.len() < before {
            eprintln!(
                "note: {} of {before} subjects were not fitted with model {} ({RUN_RECORD} lists \
                 why under `skipped`); they are left out",
                before - subjects.len(),
                model.name
            );
        }
        if subjects.is_empty() {
            return Err(format!(
                "{}: no subject of {} was fitted with model {}",
                self.fits.display(),
                self.data.display(),
                model.name
            )
            .into());
        }
        Ok(())
    }
}

/// Whether a command may replace an existing result, shared by every command that writes.
#[derive(Debug, Clone, Copy, clap::Args)]
pub struct ReplaceArg {
    /// Replace an existing result at the output path (a non-empty output folder, or an output
    /// file); without it an existing result is refused. The old result is removed only once the
    /// new one is complete, so the path always holds one whole result.
    #[arg(long)]
    pub replace: bool,
}

/// The choice of per-subject or empirical-Bayes estimates, shared by the commands that read a
/// fit folder's parameters.
#[derive(Debug, clap::Args)]
pub struct EstimatesArg {
    /// Which estimates: the per-subject fits (parameters.csv) or the shrunken estimates of
    /// `fit --hierarchical` (eb_parameters.csv). Shrinkage towards one pooled prior pulls groups
    /// together (conservative for contrasts); one prior per group (--by) pulls them apart, so
    /// contrasts of per-group empirical-Bayes estimates are anticonservative.
    #[arg(long, value_enum, default_value_t = crate::results::EstimateSource::PerSubject)]
    pub estimates: crate::results::EstimateSource,
}

/// The column of a fit folder's tables that holds what `--by` names: the tables call the group
/// column `group`, so a `--by` that names the trial table's column the fit read its groups from
/// (recorded as `group_column` in run.json) means `group`.
pub fn group_column(fits: &std::path::Path, by: &str) -> String {
    match RunRecord::if_readable(fits).and_then(|record| record.group_column) {
        Some(column) if column == by => "group".to_string(),
        _ => by.to_string(),
    }
}

/// Runs the parsed command.
pub fn run(cli: Cli) -> Result<(), Box<dyn std::error::Error>> {
    let command_line: Vec<String> = std::env::args().collect();
    run_as(cli, &command_line, None)
}

/// Parses `args` (the program name first, as `std::env::args` gives it) and runs that command:
/// the whole command line in one call, for callers inside another program (the Python package).
/// Argument errors come back as clap's message; nothing is printed for them.
pub fn run_args(args: &[String]) -> Result<(), Box<dyn std::error::Error>> {
    let cli = Cli::try_parse_from(args)?;
    run_as(cli, args, None)
}

/// What `merge` gathered from the shards of a run, used by the run's own command in place of
/// the per-subject work (see [`merge`]).
enum ShardResults {
    /// The per-subject fits of `fit --hierarchical --shard`.
    Fit(fit::FromShards),
    /// The per-subject checks of `check --shard`.
    Check(check::FromShards),
    /// The studies of `plan --shard`.
    Plan(plan::FromShards),
}

impl ShardResults {
    /// The fits, if these are fits.
    fn fit(self) -> Option<fit::FromShards> {
        match self {
            ShardResults::Fit(f) => Some(f),
            _ => None,
        }
    }

    /// The checks, if these are checks.
    fn check(self) -> Option<check::FromShards> {
        match self {
            ShardResults::Check(c) => Some(c),
            _ => None,
        }
    }

    /// The studies, if these are studies.
    fn plan(self) -> Option<plan::FromShards> {
        match self {
            ShardResults::Plan(p) => Some(p),
            _ => None,
        }
    }

    /// `merge --replace`: the merged folder may replace an existing result.
    fn replace(&self) -> bool {
        match self {
            ShardResults::Fit(f) => f.replace,
            ShardResults::Check(c) => c.replace,
            ShardResults::Plan(p) => p.replace,
        }
    }
}

/// Runs the command `cli` parsed from `command_line`; with `from_shards` (from `merge`), the
/// command takes its per-subject results from them instead of computing them.
fn run_as(
    cli: Cli,
    command_line: &[String],
    from_shards: Option<ShardResults>,
) -> Result<(), Box<dyn std::error::Error>> {
    match cli.command {
        Command::Demo {
            out,
            threads,
            replace,
        } => demo::run(
            &out,
            input::threads_here(threads, from_shards.is_some())?,
            replace.replace,
            command_line,
        ),
        Command::Fit {
            data,
            model,
            out,
            starts,
            seed,
            threads,
            deadline,
            lock,
            columns,
            hierarchical,
            by,
            em_tolerance,
            em_iterations,
            ibic_samples,
            full_covariance,
            prior_covariates,
            covariates_as_given,
            shard,
            replace,
            journal,
            reading,
            screen,
        } => {
            let shard = shard.as_deref().map(shard::Shard::parse).transpose()?;
            let columns = reading.apply(fit::column_map(&columns, by.as_deref())?)?;
            let starts = input::check_at_least("--starts", starts, 1, "start per subject")?;
            let threads = input::threads_here(threads, from_shards.is_some())?;
            let em_iterations =
                input::check_at_least("--em-iterations", em_iterations, 1, "EM iteration")?;
            let ibic_samples = input::check_at_least(
                "--ibic-samples",
                ibic_samples,
                2,
                "draws per subject (a Monte Carlo error needs two)",
            )?;
            let screen = screen.settings()?;
            if !(em_tolerance.is_finite() && em_tolerance > 0.0) {
                return Err(format!("--em-tolerance {em_tolerance}: expected a number > 0").into());
            }
            let deadline = input::check_deadline(deadline)?;
            let lock = input::check_lock(lock, deadline)?;
            let prior_covariates = fit::check_prior_covariates(prior_covariates)?;
            let run = fit::FitRun {
                data: &data,
                models: &model,
                out: &out,
                // merge's own --replace decides for the folder it writes.
                replace: from_shards
                    .as_ref()
                    .map_or(replace.replace, ShardResults::replace),
                options: crate::fit::FitOptions {
                    starts,
                    seed,
                    deadline,
                    lock,
                    ..crate::fit::FitOptions::default()
                },
                threads,
                columns,
                hierarchical: hierarchical.then(|| fit::Hierarchical {
                    per_group: by.is_some(),
                    em: crate::fit::EmOptions {
                        tolerance: em_tolerance,
                        max_iterations: em_iterations,
                        ibic_samples,
                        seed,
                        full_covariance,
                    },
                    models: Vec::new(),
                    covariates: prior_covariates,
                    centred: !covariates_as_given,
                }),
                screen,
                shard,
                // merge's EM step fits nothing, so it keeps no journal.
                journal: from_shards.is_none().then(|| journal.mode()),
                from_shards: from_shards.and_then(ShardResults::fit),
            };
            let fitted = fit::run(run, command_line)?;
            fit::print_summary(&fitted);
            fit::print_diagnostics(&fitted.fits, &fitted.models, &out);
            fit::print_group_summary(&fitted.groups);
            println!("outputs in {}", out.display());
            println!("{RESEARCH_CAUTION}");
            Ok(())
        }
        Command::Merge {
            shards,
            out,
            replace,
        } => merge::run(&shards, &out, replace.replace),
        Command::Export {
            input,
            scale,
            tr,
            scans,
            microtime_bins,
            task,
        } => export::run(export::ExportRun {
            input: &input,
            scale,
            timing: export::timing(tr, scans, microtime_bins)?,
            task: &task,
        }),
        Command::Check {
            input,
            sims,
            seed,
            deadline,
            by,
            shard,
        } => check::run(check::CheckRun {
            input: &input,
            settings: crate::check::CheckSettings {
                sims,
                seed,
                deadline,
                lock: RunRecord::if_readable(&input.fits).and_then(|record| record.lock),
                condition: None,
            },
            by,
            shard: shard.as_deref().map(shard::Shard::parse).transpose()?,
            from_shards: from_shards.and_then(ShardResults::check),
            command_line,
        }),
        Command::Contrast {
            fits,
            model,
            by,
            out,
            estimates,
            replace,
        } => contrast::run(
            &fits,
            &model,
            &group_column(&fits, &by),
            out.as_deref().unwrap_or(&fits),
            estimates.estimates,
            replace.replace,
        ),
        Command::Compare {
            fits,
            by,
            summary,
            out,
            evidence,
            samples,
            seed,
            replace,
        } => compare::run(compare::CompareRun {
            fits: &fits,
            by: &group_column(&fits, &by),
            summary: &summary,
            out: out.as_deref().unwrap_or(&fits),
            evidence,
            samples,
            seed,
            replace: replace.replace,
        }),
        Command::Simulate {
            model,
            params,
            design,
            out,
            seed,
            deadline,
            lock,
            replace,
            reading,
        } => {
            let columns = reading.apply(crate::data::ColumnMap::default())?;
            let deadline = input::check_deadline(deadline)?;
            let lock = input::check_lock(lock, deadline)?;
            simulate::run(
                &model,
                &params,
                &design,
                &out,
                seed,
                (lock, deadline),
                &columns,
                replace.replace,
            )
        }
        Command::Plan {
            plan: file,
            out,
            threads,
            shard,
            replace,
        } => plan::run(
            &file,
            &out,
            input::threads_here(threads, from_shards.is_some())?,
            replace.replace,
            command_line,
            (
                shard.as_deref().map(shard::Shard::parse).transpose()?,
                from_shards.and_then(ShardResults::plan),
            ),
        )
        .map(|_| ()),
        Command::Report {
            fits,
            check,
            plan,
            out,
            replace,
        } => report::run(
            &crate::report::ReportInputs { fits, check, plan },
            &out,
            replace.replace,
        ),
        Command::Models { name } => models::run(name.as_deref()),
        Command::Density {
            input,
            output,
            replace,
        } => density::run(&input, output.as_deref(), replace.replace),
    }
}
