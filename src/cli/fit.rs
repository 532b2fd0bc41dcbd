//! `valuedrift fit`: per-subject fits of one or more models, with tidy outputs and a run record.

use super::input::ColumnsError;
use super::journal::{self, Journal};
use super::shard::{self, Shard};
use crate::data::{ColumnMap, ScreenSettings, TrialTable};
use crate::files::OutputSet;
use crate::fit::prior_regression::{INTERCEPT, SubjectScores};
use crate::fit::{EmOptions, FitOptions, GroupFit, Skipped, SubjectFit, fit_table_hierarchical};
use crate::model::{Model, load_model};
use crate::progress::Progress;
use crate::results::fit_folder::{self, EstimateSource, key};
use crate::results::{
    estimates_wide_table, group_correlation_table, group_evidence_table, group_prior_table,
    parameters_table, prior_regression_table, summary_table,
};
use std::collections::HashMap;
use std::path::Path;

/// Everything `fit` needs, resolved from the command line.
pub struct FitRun<'a> {
    /// Trial table.
    pub data: &'a Path,
    /// Model names or paths.
    pub models: &'a [String],
    /// Output folder.
    pub out: &'a Path,
    /// Replace an existing result set in `out`.
    pub replace: bool,
    /// Fit settings.
    pub options: FitOptions,
    /// Threads (0: all cores).
    pub threads: usize,
    /// Column mapping.
    pub columns: ColumnMap,
    /// Empirical-Bayes group priors as well, when set.
    pub hierarchical: Option<Hierarchical>,
    /// The data screen's settings (fast floor, trimming).
    pub screen: ScreenSettings,
    /// Fit only this shard's subjects (`--shard I/N`; with `--hierarchical` the per-subject
    /// fits only, and each fit's unconstrained optimum for the EM that `merge` runs).
    pub shard: Option<Shard>,
    /// What to do with the journal of an interrupted run (None: keep no journal).
    pub journal: Option<journal::Mode>,
    /// The per-subject fits of every shard of this run, gathered by `merge`: used instead of
    /// fitting, so that the EM of `--hierarchical` starts from exactly the shards' fits.
    pub from_shards: Option<FromShards>,
}

/// The per-subject fits and pairs not fitted of all shards of a run, in a single run's order.
pub struct FromShards {
    /// Successful fits in (model, subject) order.
    pub fits: Vec<SubjectFit>,
    /// Pairs that could not be fitted, in (model, subject) order.
    pub skipped: Vec<Skipped>,
    /// `merge --replace`: replace an existing result (the shards' own option is not used).
    pub replace: bool,
}

/// Settings of the empirical-Bayes fit.
#[derive(Clone, Debug)]
pub struct Hierarchical {
    /// One prior per group rather than one over all subjects.
    pub per_group: bool,
    /// EM settings.
    pub em: EmOptions,
    /// Only these models get group priors (empty: every model).
    pub models: Vec<String>,
    /// Columns of participant scores on which the prior mean depends (empty: none).
    pub covariates: Vec<String>,
    /// Centre the scores on their mean over the participants of each prior.
    pub centred: bool,
}

/// The column names of `--prior-covariates`, trimmed; refuses an empty name and a name given
/// twice.
pub fn check_prior_covariates(names: Vec<String>) -> Result<Vec<String>, CovariateNamesError> {
    let names: Vec<String> = names.iter().map(|n| n.trim().to_string()).collect();
    for (l, name) in names.iter().enumerate() {
        if name.is_empty() {
            return Err(CovariateNamesError::Empty {
                given: names.join(","),
            });
        }
        if names[..l].contains(name) {
            return Err(CovariateNamesError::Twice {
                given: names.join(","),
                name: name.clone(),
            });
        }
    }
    Ok(names)
}

/// Column names of `--prior-covariates` that cannot be used (`given`: the names, trimmed, as a
/// comma-separated list; empty names included).
#[derive(Clone, Debug, PartialEq, Eq, thiserror::Error)]
pub enum CovariateNamesError {
    /// An empty name.
    #[error(
        "--prior-covariates {given}: an empty column name; expected column names separated by \
         commas"
    )]
    Empty {
        /// The names given.
        given: String,
    },
    /// A name given twice.
    #[error("--prior-covariates {given}: column {name:?} is named twice")]
    Twice {
        /// The names given.
        given: String,
        /// The name given twice.
        name: String,
    },
}

/// The participant scores of `--prior-covariates` in the table read from `data`, checked before
/// any fit: a column the reader uses for the trials is refused, as are the errors of
/// [`SubjectScores::from_table`] (naming file, column, participant and trial).
fn participant_scores(
    data: &Path,
    table: &TrialTable,
    columns: &ColumnMap,
    settings: &Hierarchical,
) -> Result<Option<SubjectScores>, Box<dyn std::error::Error>> {
    if settings.covariates.is_empty() {
        return Ok(None);
    }
    for name in &settings.covariates {
        if let Some(canonical) = ColumnMap::CANONICAL
            .iter()
            .find(|c| columns.file_name(c) == name.as_str())
        {
            return Err(crate::files::InputError {
                column: Some(name.clone()),
                ..crate::files::InputError::file(
                    data,
                    format!(
                        "--prior-covariates: this is the trial table's {canonical} column, \
                         read for the trials; expected another column holding a score per \
                         participant"
                    ),
                )
            }
            .into());
        }
    }
    Ok(Some(SubjectScores::from_table(
        data,
        table,
        &settings.covariates,
        settings.centred,
    )?))
}

/// The column mapping of `--columns`, with `--by COLUMN` read as the group column.
pub fn column_map(spec: &str, by: Option<&str>) -> Result<ColumnMap, ColumnsError> {
    let spec = match by {
        Some(column) if column != "group" => {
            if ColumnMap::parse(spec)
                .map_err(ColumnsError::Mapping)?
                .file_name("group")
                != "group"
            {
                return Err(ColumnsError::GroupNamedTwice {
                    by: column.to_string(),
                });
            }
            format!("{spec},group={column}")
        }
        _ => spec.to_string(),
    };
    ColumnMap::parse(&spec).map_err(ColumnsError::Mapping)
}

/// Loads models by name or path.
pub fn load_models(names: &[String]) -> Result<Vec<Model>, Box<dyn std::error::Error>> {
    let mut models = Vec::new();
    for name in names {
        models.push(load_model(name.trim())?);
    }
    Ok(models)
}

/// The outcome of fitting a table.
pub struct Fitted {
    /// The group labels of the subjects fitted, sorted, each once.
    pub group_labels: Vec<String>,
    /// The models.
    pub models: Vec<Model>,
    /// Successful fits in (model, subject) order.
    pub fits: Vec<SubjectFit>,
    /// Pairs that could not be fitted.
    pub skipped: Vec<Skipped>,
    /// Empirical-Bayes fits (with --hierarchical), per model and scope.
    pub groups: Vec<GroupFit>,
}

/// Reads, fits and writes; returns what was fitted for the caller's summary.
///
/// Per-subject fits read the trial table a part at a time, twice (the data screen, then the
/// fits), so memory does not grow with the number of subjects; a table that fits in one part is
/// read once. `--hierarchical` holds the whole table, since every EM step refits every subject.
pub fn run(run: FitRun<'_>, command_line: &[String]) -> Result<Fitted, Box<dyn std::error::Error>> {
    let mut outputs = OutputSet::create(run.out, run.replace)?;
    let window = (run.options.lock, run.options.deadline);
    let (models, mut screened, mut whole, scores) = match &run.hierarchical {
        Some(settings) => {
            let mut table = super::input::read_table(run.data, &run.columns)?;
            if settings.per_group && !table.has_column("group") {
                return Err(format!(
                    "{}: --by {}: no such column; the file has no group column to give each \
                     group its own prior",
                    run.data.display(),
                    run.columns.file_name("group")
                )
                .into());
            }
            let scores = participant_scores(run.data, &table, &run.columns, settings)?;
            let models = load_models(run.models)?;
            let screened = super::input::screen_before_fit(
                run.data,
                &mut table,
                &run.screen,
                &models,
                window,
            )?;
            (models, screened, Some(table), scores)
        }
        None => {
            let (tally, single) =
                super::input::screen_streamed(run.data, &run.columns, &run.screen, window)?;
            let models = load_models(run.models)?;
            let screened = tally.judge(run.data, &models)?;
            // A table read in one part is fitted from memory rather than read again.
            (models, screened, single, None)
        }
    };
    let table_subjects: Vec<String> = screened
        .subjects
        .iter()
        .map(|s| s.subject.clone())
        .collect();
    if let Some(shard) = run.shard {
        match whole.as_mut() {
            Some(table) => shard.restrict(table, &mut screened),
            None => shard.restrict_screen(&mut screened),
        }
    }
    let data_sha256 = crate::files::sha256_of_file(run.data)?;
    let (journal, earlier) = match run.journal {
        Some(mode) => {
            let header = journal::Header::new(
                &data_sha256,
                &run.columns,
                &models,
                &run.options,
                &run.screen,
                run.shard,
            );
            let (journal, earlier) = Journal::open(run.out, mode, &header)?;
            (Some(journal), earlier)
        }
        None => (None, Vec::new()),
    };
    // merge's EM step takes every fit from the shards and fits none here.
    let jobs = match run.from_shards {
        Some(_) => 0,
        None => super::input::screened_jobs(&screened),
    };
    if !earlier.is_empty() {
        eprintln!(
            "resuming: {} of the {jobs} (model, subject) pairs from the journal; fitting the \
             other {}",
            earlier.len(),
            jobs.saturating_sub(earlier.len())
        );
    }
    let bar = Progress::new("fitting", jobs.saturating_sub(earlier.len()));
    let finished = |outcome: &crate::fit::Outcome| {
        if let Some(journal) = &journal {
            journal.append(outcome);
        }
        bar.inc();
    };
    let (fits, skipped) = match (run.from_shards, &whole) {
        (Some(done), _) => (done.fits, done.skipped),
        (None, Some(table)) => super::input::fit_screened(
            &models,
            table,
            &screened,
            &run.options,
            run.threads,
            earlier,
            &finished,
        )?,
        (None, None) => super::input::fit_streamed(
            run.data,
            &run.columns,
            &models,
            &screened,
            &|label| run.shard.is_none_or(|s| s.holds(label)),
            &run.options,
            run.threads,
            earlier,
            &finished,
        )?,
    };
    bar.finish();
    if crate::progress::stop_requested() {
        return Err(crate::progress::Stopped.into());
    }
    // A shard may hold no subject, or only subjects that cannot be fitted: `merge` judges the
    // whole run.
    if fits.is_empty() && run.shard.is_none() {
        let reasons: Vec<String> = skipped
            .iter()
            .take(3)
            .map(|s| format!("{}: {}", s.model, s.reason))
            .collect();
        return Err(format!("no subject could be fitted ({})", reasons.join("; ")).into());
    }
    let mut groups = Vec::new();
    // A shard's EM waits for `merge`, which has every subject's fit.
    if let Some(settings) = run.hierarchical.as_ref().filter(|_| run.shard.is_none()) {
        let spinner = crate::progress::Iterations::new(
            "empirical Bayes: EM iterations of",
            settings.em.max_iterations,
        );
        let report = |model: &str, scope: &str, iteration: usize, change: f64| {
            spinner.report(&format!("{model} ({scope})"), iteration, change);
        };
        let chosen: Vec<&Model> = models
            .iter()
            .filter(|m| settings.models.is_empty() || settings.models.contains(&m.name))
            .collect();
        let table = whole
            .as_ref()
            .ok_or("empirical Bayes needs the whole table in memory")?;
        let (fitted, not_fitted) = fit_table_hierarchical(
            &chosen,
            table,
            &fits,
            &run.options,
            &settings.em,
            settings.per_group,
            scores.as_ref(),
            run.threads,
            &report,
        )?;
        spinner.finish();
        for s in &not_fitted {
            eprintln!("empirical Bayes skipped for {}: {}", s.model, s.reason);
        }
        for g in fitted
            .iter()
            .filter(|g| g.n_group_parameters > g.subjects.len())
        {
            eprintln!(
                "warning: the group prior of {} ({}) has {} parameters but only {} subjects: \
                 its variances{} are poorly determined and the shrinkage they imply is unreliable",
                g.model,
                g.scope,
                g.n_group_parameters,
                g.subjects.len(),
                if settings.em.full_covariance {
                    " and covariances"
                } else {
                    ""
                }
            );
        }
        groups = fitted;
        if crate::progress::stop_requested() {
            return Err(crate::progress::Stopped.into());
        }
    }
    // A resumed run records the command line of an uninterrupted one.
    let command_line = journal::without_flags(command_line);
    let command_line = match run.shard {
        Some(_) => shard::without_shard(&command_line),
        None => command_line,
    };
    let mut record = run_record(
        &command_line,
        &run.options,
        run.data,
        &data_sha256,
        &models,
        &fits,
        &skipped,
    );
    record[key::GROUP_COLUMN] = serde_json::json!(run.columns.file_name("group"));
    record["data_screen"] = super::input::screen_record(&screened);
    if let Some(shard) = run.shard {
        record[key::SHARD] = shard.record(&table_subjects);
    }
    super::input::screen_table_output(&screened).stage_both(
        &mut outputs,
        run.out,
        fit_folder::DATA_SCREEN.stem,
    )?;
    stage_estimates(&mut outputs, run.out, &fits, EstimateSource::PerSubject)?;
    if let Some(settings) = &run.hierarchical {
        record[key::EMPIRICAL_BAYES] = serde_json::json!({
            "method": format!(
                "EM with the Laplace approximation (Huys et al. 2011); Gaussian prior, {} covariance, on the unconstrained scale",
                if settings.em.full_covariance { "full" } else { "diagonal" }
            ),
            (key::PER_GROUP): settings.per_group,
            "tolerance": settings.em.tolerance,
            "max_iterations": settings.em.max_iterations,
            "ibic_samples": settings.em.ibic_samples,
            "full_covariance": settings.em.full_covariance,
            "seed": settings.em.seed,
        });
        if !settings.covariates.is_empty() {
            record[key::EMPIRICAL_BAYES]["prior_covariates"] = serde_json::json!({
                "columns": settings.covariates,
                "centred": settings.centred,
                "model": "theta_i ~ N(B z_i, Sigma), z_i = (1, scores_i - centres), on the unconstrained scale",
                "centres": if settings.centred {
                    format!(
                        "each score's mean over the participants of each prior (column centre of {})",
                        fit_folder::EB_PRIOR_REGRESSION.csv()
                    )
                } else {
                    "none: scores as given".to_string()
                },
                "standard_errors": "inverse information of the Laplace-approximated marginal likelihood, [sum_i (z_i z_i^T) kron (Sigma N/(N-p-1) + C_i)^-1]^-1, C_i each participant's likelihood-only covariance; t test with N - p - 1 degrees of freedom",
                "table": fit_folder::EB_PRIOR_REGRESSION.csv(),
            });
        }
        if run.shard.is_some() {
            shard::stage_em_starts(&mut outputs, run.out, &fits)?;
        } else {
            stage_group_tables(&mut outputs, run.out, settings, &groups)?;
        }
    }
    outputs.stage(&run.out.join(fit_folder::RUN_RECORD), |w| {
        serde_json::to_writer_pretty(w, &record)
    })?;
    outputs.commit()?;
    if let Some(journal) = journal {
        journal.finish();
    }
    Ok(Fitted {
        group_labels: group_labels(&screened),
        models,
        fits,
        skipped,
        groups,
    })
}

/// Stages the tables of the empirical-Bayes fits `groups` in `dir`.
fn stage_group_tables(
    outputs: &mut OutputSet,
    dir: &Path,
    settings: &Hierarchical,
    groups: &[GroupFit],
) -> Result<(), crate::files::OutputError> {
    let shrunken: Vec<SubjectFit> = groups.iter().flat_map(|g| g.subjects.clone()).collect();
    stage_estimates(outputs, dir, &shrunken, EstimateSource::EmpiricalBayes)?;
    group_prior_table(groups).stage_both(outputs, dir, fit_folder::EB_GROUP_PRIORS.stem)?;
    group_evidence_table(groups).stage_both(outputs, dir, fit_folder::EB_MODEL_EVIDENCE.stem)?;
    if !settings.covariates.is_empty() {
        prior_regression_table(groups).stage_both(
            outputs,
            dir,
            fit_folder::EB_PRIOR_REGRESSION.stem,
        )?;
    }
    if settings.em.full_covariance {
        group_correlation_table(groups).stage_both(
            outputs,
            dir,
            fit_folder::EB_GROUP_CORRELATIONS.stem,
        )?;
    }
    Ok(())
}

/// Stages the estimate tables of `fits` in `dir` under the names of `source`: the parameters
/// (long and wide) and the fit summary.
pub(super) fn stage_estimates(
    outputs: &mut OutputSet,
    dir: &Path,
    fits: &[SubjectFit],
    source: EstimateSource,
) -> Result<(), crate::files::OutputError> {
    parameters_table(fits).stage_both(outputs, dir, source.parameters().stem)?;
    estimates_wide_table(fits).stage_both(outputs, dir, source.estimates_wide().stem)?;
    summary_table(fits).stage_both(outputs, dir, source.summary().stem)
}

/// The run record: enough to reproduce a result.
pub fn run_record(
    command_line: &[String],
    options: &FitOptions,
    data: &Path,
    data_sha256: &str,
    models: &[Model],
    fits: &[SubjectFit],
    skipped: &[Skipped],
) -> serde_json::Value {
    serde_json::json!({
        "tool": "valuedrift",
        "version": env!("CARGO_PKG_VERSION"),
        "command_line": command_line,
        "seed": options.seed,
        "starts": options.starts,
        "max_iterations": options.max_iterations,
        "deadline": options.deadline,
        (key::LOCK): options.lock,
        "data": {
            "path": data.display().to_string(),
            "sha256": data_sha256,
        },
        (key::MODELS): models.iter().map(|m| serde_json::json!({
            (key::NAME): m.name,
            "origin": m.origin,
            (key::DEFINITION): m.text,
        })).collect::<Vec<_>>(),
        "fits": fits.len(),
        "skipped": skipped.iter().map(|s| format!("{}: {}", s.model, s.reason)).collect::<Vec<_>>(),
        (key::NOT_FITTED): skipped.iter().map(|s| serde_json::json!({
            (key::MODEL): s.model,
            (key::SUBJECT): s.reason.subject,
        })).collect::<Vec<_>>(),
        "caution": super::RESEARCH_CAUTION,
    })
}

/// Prints per model: subjects fitted, summed BIC, subjects won by BIC per group, convergence.
///
/// Wins are counted among the models that use response times (their likelihoods are of the same
/// data); choices-only models are listed apart, since their BIC is not comparable.
pub fn print_summary(fitted: &Fitted) {
    let groups = &fitted.group_labels;
    let comparable = |name: &str| {
        fitted
            .models
            .iter()
            .any(|m| m.name == name && m.uses_response_times())
    };
    // The comparable model with the lowest BIC per subject.
    let mut winners: HashMap<(&str, &str), (&str, f64)> = HashMap::new();
    for f in fitted.fits.iter().filter(|f| comparable(&f.model)) {
        let entry = winners
            .entry((f.subject.as_str(), f.group.as_str()))
            .or_insert((f.model.as_str(), f64::INFINITY));
        if f.bic < entry.1 {
            *entry = (f.model.as_str(), f.bic);
        }
    }
    let group_header: String = groups
        .iter()
        .map(|g| {
            format!(
                " {:>14}",
                format!("wins:{}", if g.is_empty() { "all" } else { g })
            )
        })
        .collect();
    println!(
        "{:<26} {:>8} {:>12}{group_header} {:>10}",
        "model (BIC, Schwarz 1978)", "subjects", "summed BIC", "converged"
    );
    for model in &fitted.models {
        let fits: Vec<&SubjectFit> = fitted
            .fits
            .iter()
            .filter(|f| f.model == model.name)
            .collect();
        if fits.is_empty() {
            let n = fitted
                .skipped
                .iter()
                .filter(|s| s.model == model.name)
                .count();
            let why = fitted
                .skipped
                .iter()
                .find(|s| s.model == model.name)
                .map_or(String::new(), |s| s.reason.message.clone());
            println!("{:<26} not fitted for {n} subjects: {why}", model.name);
            continue;
        }
        let bic: f64 = fits.iter().map(|f| f.bic).sum();
        let converged = fits.iter().filter(|f| f.converged).count();
        let wins: String = groups
            .iter()
            .map(|g| {
                if !model.uses_response_times() {
                    return format!(" {:>14}", "-");
                }
                let n = winners
                    .iter()
                    .filter(|((_, group), (m, _))| group == g && *m == model.name)
                    .count();
                format!(" {n:>14}")
            })
            .collect();
        println!(
            "{:<26} {:>8} {:>12.1}{wins} {:>10}",
            model.name,
            fits.len(),
            bic,
            format!("{converged}/{}", fits.len())
        );
    }
    if fitted.models.iter().any(|m| !m.uses_response_times()) {
        println!(
            "(models marked '-' use choices only: their BIC is not comparable with the others)"
        );
    }
}

/// Prints, per model, what a reader of the estimates must know before using them: how many
/// estimates sit at a bound (by parameter), how many Hessians are not positive definite, how
/// many fits did not converge and why (the status column of the summary table), and where the
/// tables are.
pub fn print_diagnostics(fits: &[SubjectFit], models: &[Model], out: &Path) {
    println!();
    for model in models {
        let fits: Vec<&SubjectFit> = fits.iter().filter(|f| f.model == model.name).collect();
        if fits.is_empty() {
            continue;
        }
        let n = fits.len();
        let bounds: Vec<String> = model
            .parameters
            .iter()
            .filter(|p| p.is_free())
            .filter_map(|p| {
                let k = fits
                    .iter()
                    .filter(|f| f.estimates.iter().any(|e| e.name == p.name && e.at_bound))
                    .count();
                (k > 0).then(|| format!("{} {k}/{n}", p.name))
            })
            .collect();
        let not_pd = fits.iter().filter(|f| !f.hessian_ok).count();
        let mut reasons: Vec<(String, usize)> = Vec::new();
        for f in fits.iter().filter(|f| !f.converged) {
            let reason = f
                .status
                .trim_start_matches("not converged: ")
                .split(':')
                .next()
                .unwrap_or_default()
                .to_string();
            match reasons.iter_mut().find(|(r, _)| *r == reason) {
                Some((_, k)) => *k += 1,
                None => reasons.push((reason, 1)),
            }
        }
        let not_converged: usize = reasons.iter().map(|(_, k)| k).sum();
        println!("{}:", model.name);
        println!(
            "  estimates at a bound: {}",
            if bounds.is_empty() {
                "none".to_string()
            } else {
                bounds.join(", ")
            }
        );
        println!("  Hessian not positive definite (no standard errors): {not_pd}/{n}");
        let why: Vec<String> = reasons.iter().map(|(r, k)| format!("{r} {k}")).collect();
        println!(
            "  not converged: {not_converged}/{n}{}",
            if why.is_empty() {
                String::new()
            } else {
                format!(" ({})", why.join("; "))
            }
        );
    }
    println!(
        "per-subject estimates: {}; fit statistics and each fit's status: {}",
        fit_folder::PARAMETERS.csv_in(out).display(),
        fit_folder::SUMMARY.csv_in(out).display()
    );
}

/// Prints per model and scope of the empirical-Bayes fits: iBIC, EM convergence and the group
/// medians of the free parameters on the natural scale with their 95 % intervals.
pub fn print_group_summary(groups: &[GroupFit]) {
    if groups.is_empty() {
        return;
    }
    println!();
    println!(
        "empirical-Bayes group priors (EM with Laplace, Huys et al. 2011); lower iBIC is better"
    );
    for g in groups {
        println!(
            "{:<26} {:<12} iBIC {:>10.1} (±{:.1} MC)  EM {} iterations{}",
            g.model,
            g.scope,
            g.ibic,
            2.0 * g.log_marginal_likelihood_se,
            g.iterations,
            if g.converged { "" } else { ", NOT converged" }
        );
        let medians: Vec<String> = g
            .parameters
            .iter()
            .map(|p| {
                format!(
                    "{} {:.3} [{:.3}, {:.3}]",
                    p.name,
                    p.natural_median,
                    p.natural_median_interval.0,
                    p.natural_median_interval.1
                )
            })
            .collect();
        println!("    group medians: {}", medians.join("; "));
        print_prior_regression(g);
    }
}

/// Prints the slopes of a group prior's regression on participant scores with their tests and
/// the caution that goes with them.
fn print_prior_regression(g: &GroupFit) {
    let Some(regression) = &g.regression else {
        return;
    };
    println!(
        "    prior mean on participant scores (unconstrained scale, per unit of score; {}):",
        if regression.centred {
            "scores centred, so the medians above are at the average scores"
        } else {
            "scores as given, so the medians above are at scores of 0"
        }
    );
    for c in regression
        .coefficients
        .iter()
        .filter(|c| c.term != INTERCEPT)
    {
        let test = match (c.std_error, c.t_statistic, c.p_value) {
            (Some(se), Some(t), Some(p)) => {
                format!("SE {se:.4}, t({}) = {t:.2}, p {}", c.df, p_value_text(p))
            }
            _ => "no standard error (the information is not positive definite)".to_string(),
        };
        println!(
            "      {:<16} ~ {:<14} {:>9.4}  ({test}){}",
            c.parameter,
            c.term,
            c.estimate,
            if c.scale_per_participant { " *" } else { "" }
        );
    }
    if regression
        .coefficients
        .iter()
        .any(|c| c.scale_per_participant)
    {
        println!(
            "    * this parameter's unconstrained scale is relative to each participant's fastest \
             response, so its slopes also move with scores that change response speed through \
             other parameters"
        );
    }
    println!(
        "    these are associations between scores and model parameters in this sample, one \
         test per coefficient without correction for multiplicity: research measurements, not \
         diagnoses"
    );
}

/// A p value for the console with its relation: "= 0.0179" (four decimals), or "< 0.0001".
fn p_value_text(p: f64) -> String {
    if p < 1e-4 {
        "< 0.0001".to_string()
    } else {
        format!("= {p:.4}")
    }
}

/// The distinct group labels of the subjects of a data screen, sorted.
pub fn group_labels(screened: &super::input::Screened) -> Vec<String> {
    let mut groups: Vec<String> = screened.subjects.iter().map(|s| s.group.clone()).collect();
    groups.sort();
    groups.dedup();
    groups
}
