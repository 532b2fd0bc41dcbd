//! One self-contained HTML report of a fit folder and of whatever sits beside it: the data
//! screen, fits, estimates by group, model selection, the group contrast, empirical-Bayes group
//! priors, predictive-check figures, a plan's recovery, model recovery and power, the run's
//! settings, and a methods paragraph with its references.
//!
//! The page holds everything it shows (inline SVG figures and style, no script, no font or
//! image files, no address outside the file), so it opens anywhere, offline, and can be sent as
//! one file. Sections whose tables are absent are left out. The research-use caution heads the
//! page.

pub mod figures;
pub mod html;
mod methods;
mod plan_section;
pub mod tidy;

use crate::files::InputError;
use html::{Section, escape, figure, table};
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use tidy::Tidy;

/// Where the report reads from.
#[derive(Clone, Debug, Default)]
pub struct ReportInputs {
    /// Folder written by `valuedrift fit` (and `compare`, `contrast` into the same folder).
    pub fits: Option<PathBuf>,
    /// Folder written by `valuedrift check`, if any.
    pub check: Option<PathBuf>,
    /// Folder written by `valuedrift plan`, if any.
    pub plan: Option<PathBuf>,
}

/// A report that could not be made.
#[derive(Debug, thiserror::Error)]
pub enum ReportError {
    /// A table that cannot be read.
    #[error(transparent)]
    Input(#[from] InputError),
    /// A figure that could not be drawn.
    #[error(transparent)]
    Figure(#[from] figures::FigureError),
    /// A folder without any table the report shows.
    #[error("nothing to report: no fit folder, check folder or plan folder with their tables")]
    Empty,
}

/// The unit of a parameter's natural scale, for axis labels: seconds for non-decision times,
/// else the parameter's own (dimensionless) scale.
pub fn unit_of(parameter: &str) -> &'static str {
    if parameter == "ndt" || parameter.starts_with("ndt_") || parameter.ends_with("_ndt") {
        "s"
    } else {
        "natural scale"
    }
}

fn read(dir: &Path, name: &str) -> Result<Option<Tidy>, InputError> {
    Tidy::read_if_present(&dir.join(name))
}

/// The report's HTML.
pub fn build(inputs: &ReportInputs, caution: &str) -> Result<String, ReportError> {
    let mut sections = Vec::new();
    let record = inputs.fits.as_ref().and_then(|fits| {
        let text = std::fs::read_to_string(fits.join(crate::results::fit_folder::RUN_RECORD));
        serde_json::from_str::<serde_json::Value>(&text.ok()?).ok()
    });
    if let Some(fits) = &inputs.fits {
        sections.extend(fit_sections(fits)?);
    }
    if let Some(check) = &inputs.check {
        sections.push(check_section(check)?);
    }
    if let Some(plan) = &inputs.plan {
        sections.extend(plan_section::sections(plan)?);
    }
    if sections.is_empty() {
        return Err(ReportError::Empty);
    }
    if let Some(record) = &record {
        sections.push(settings(record));
    }
    sections.push(methods::section(record.as_ref(), inputs));
    Ok(html::page("valuedrift report", caution, &sections))
}

/// The sections of a fit folder's tables.
fn fit_sections(fits: &Path) -> Result<Vec<Section>, ReportError> {
    let mut sections = Vec::new();
    if let Some(screen) = read(fits, "data_screen.csv")? {
        sections.push(data_screen(&screen));
    }
    if let Some(summary) = read(fits, "fit_summary.csv")? {
        sections.push(fit_overview(&summary)?);
    }
    if let Some(parameters) = read(fits, "parameters.csv")? {
        let eb = read(fits, "eb_parameters.csv")?;
        sections.push(estimates(&parameters, eb.as_ref())?);
    }
    if let Some(selection) = read(fits, "model_selection.csv")? {
        sections.push(model_selection(&selection)?);
    }
    if let Some(contrast) = read(fits, "contrast.csv")? {
        sections.push(contrast_section(&contrast));
    }
    if let Some(priors) = read(fits, "eb_group_priors.csv")? {
        sections.push(group_priors(&priors));
    }
    Ok(sections)
}

/// The value kept under `key` in a list ordered by first appearance, inserted empty when new.
fn entry<'a, V: Default>(list: &'a mut Vec<(String, V)>, key: &str) -> &'a mut V {
    let at = match list.iter().position(|(k, _)| k == key) {
        Some(at) => at,
        None => {
            list.push((key.to_string(), V::default()));
            list.len() - 1
        }
    };
    &mut list[at].1
}

/// Distinct values of `column`, in order of first appearance.
pub(crate) fn distinct(t: &Tidy, column: &str) -> Vec<String> {
    let mut out: Vec<String> = Vec::new();
    for r in &t.rows {
        let v = t.text(r, column);
        if !out.iter().any(|x| x == v) {
            out.push(v.to_string());
        }
    }
    out
}

fn rows_of(t: &Tidy, columns: &[&str]) -> Vec<Vec<String>> {
    t.rows
        .iter()
        .map(|r| columns.iter().map(|c| t.text(r, c).to_string()).collect())
        .collect()
}

fn data_screen(screen: &Tidy) -> Section {
    let columns = [
        "subject",
        "group",
        "trials",
        "responses",
        "rt_min",
        "rt_median",
        "rt_max",
        "fast_share",
    ];
    let mut per_group: BTreeMap<String, usize> = BTreeMap::new();
    for r in &screen.rows {
        *per_group
            .entry(screen.text(r, "group").to_string())
            .or_default() += 1;
    }
    let groups: Vec<String> = per_group
        .iter()
        .map(|(g, n)| format!("{} ({n})", if g.is_empty() { "no group" } else { g }))
        .collect();
    Section {
        id: "screen",
        title: "Data screen".into(),
        body: format!(
            "<p>{} participants: {}. Response times in seconds; fast_share is the share of \
             responses faster than the fast floor. Full table: data_screen.csv.</p>\
             <details><summary>Per participant</summary>{}</details>",
            screen.rows.len(),
            escape(&groups.join(", ")),
            table(&columns, &rows_of(screen, &columns))
        ),
    }
}

/// Per model: fits, converged fits, summed BIC, flagged fits, what the likelihood scored.
type FitCounts = (usize, usize, f64, Vec<String>, String);

fn fit_overview(summary: &Tidy) -> Result<Section, ReportError> {
    let mut models: Vec<String> = Vec::new();
    let mut stats: BTreeMap<String, FitCounts> = BTreeMap::new();
    for (i, r) in summary.rows.iter().enumerate() {
        let model = summary.text(r, "model").to_string();
        if !models.contains(&model) {
            models.push(model.clone());
        }
        let entry = stats.entry(model).or_default();
        entry.0 += 1;
        entry.4 = summary.text(r, "scored").replace('_', " ");
        if summary.text(r, "converged") == "true" {
            entry.1 += 1;
        } else {
            entry.3.push(format!(
                "{}: {}",
                summary.text(r, "subject"),
                summary.text(r, "status")
            ));
        }
        entry.2 += summary.number(i, "bic")?.unwrap_or(f64::NAN);
    }
    let rows: Vec<Vec<String>> = models
        .iter()
        .map(|m| {
            let (n, ok, bic, _, scored) = &stats[m];
            vec![
                m.clone(),
                scored.clone(),
                n.to_string(),
                ok.to_string(),
                format!("{bic:.1}"),
            ]
        })
        .collect();
    let mut flagged = String::new();
    for m in &models {
        let bad = &stats[m].3;
        if !bad.is_empty() {
            flagged.push_str(&format!(
                "<details><summary>{}: {} fits flagged</summary><pre>{}</pre></details>",
                escape(m),
                bad.len(),
                escape(&bad.join("\n"))
            ));
        }
    }
    Ok(Section {
        id: "fits",
        title: "Fits".into(),
        body: format!(
            "<p>A fit is flagged when the fitter's examination of its best point failed (see \
             the status); flagged estimates should not be interpreted. BIC is comparable only \
             between models that score the same data (column scored).</p>{}{flagged}",
            table(
                &["model", "scored", "participants", "converged", "summed BIC"],
                &rows
            )
        ),
    })
}

/// Per model and free parameter, the participants' estimates by group.
fn estimates(parameters: &Tidy, eb: Option<&Tidy>) -> Result<Section, ReportError> {
    let mut body = String::from(
        "<p>Each point is one participant's estimate (per-subject fit); bars are group \
         medians, boxes interquartile ranges. Estimates at a bound of their range are included \
         (see parameters.csv, column at_bound).</p>",
    );
    let eb_models: Vec<String> = eb.map(|t| distinct(t, "model")).unwrap_or_default();
    let mut models = distinct(parameters, "model");
    // Models with empirical-Bayes fits (the reference of a study) first and open.
    models.sort_by_key(|m| !eb_models.contains(m));
    for model in &models {
        let mut figures = String::new();
        for (source, label) in [(Some(parameters), "per-subject"), (eb, "empirical-Bayes")] {
            let Some(t) = source else { continue };
            if label == "empirical-Bayes" && !eb_models.contains(model) {
                continue;
            }
            let mut by_parameter: Vec<(String, BTreeMap<String, Vec<f64>>)> = Vec::new();
            for (i, r) in t.rows.iter().enumerate() {
                if t.text(r, "model") != model || t.text(r, "fixed") == "true" {
                    continue;
                }
                let Some(value) = t.number(i, "estimate")? else {
                    continue;
                };
                entry(&mut by_parameter, t.text(r, "parameter"))
                    .entry(t.text(r, "group").to_string())
                    .or_default()
                    .push(value);
            }
            for (parameter, groups) in by_parameter {
                let groups: Vec<(String, Vec<f64>)> = groups.into_iter().collect();
                let title = format!("{model}: {parameter} ({label})");
                let svg = figures::strip(
                    &title,
                    &format!("{parameter} ({})", unit_of(&parameter)),
                    &groups,
                )?;
                figures.push_str(&figure(
                    &svg,
                    &format!("{label} estimates of {parameter} by group, model {model}"),
                ));
            }
        }
        let open = if eb_models.contains(model) || models.len() == 1 {
            " open"
        } else {
            ""
        };
        body.push_str(&format!(
            "<details{open}><summary>{}</summary>{figures}</details>",
            escape(model)
        ));
    }
    Ok(Section {
        id: "estimates",
        title: "Estimates by group".into(),
        body,
    })
}

fn model_selection(selection: &Tidy) -> Result<Section, ReportError> {
    let scopes = distinct(selection, "scope");
    let mut body = String::from(
        "<p>Random-effects Bayesian model selection (Stephan et al. 2009): expected model \
         frequencies and protected exceedance probabilities (Rigoux et al. 2014), per scope \
         (all participants, then each group).</p>",
    );
    for scope in &scopes {
        let (mut models, mut frequency, mut protected_exceedance) =
            (Vec::new(), Vec::new(), Vec::new());
        let mut risk = String::new();
        for (i, r) in selection.rows.iter().enumerate() {
            if selection.text(r, "scope") != scope {
                continue;
            }
            models.push(selection.text(r, "model").to_string());
            frequency.push(selection.number(i, "expected_frequency")?.unwrap_or(0.0));
            protected_exceedance.push(
                selection
                    .number(i, "protected_exceedance_probability")?
                    .unwrap_or(0.0),
            );
            risk = selection.text(r, "bayesian_omnibus_risk").to_string();
        }
        let svg = figures::bars(
            &format!("model selection: {scope}"),
            "probability",
            &models,
            &[
                ("expected frequency".to_string(), frequency),
                (
                    "protected exceedance probability".to_string(),
                    protected_exceedance,
                ),
            ],
        )?;
        body.push_str(&figure(
            &svg,
            &format!(
                "scope {scope}: expected frequency and protected exceedance probability per \
                 model; Bayesian omnibus risk {}",
                html::cell(&risk)
            ),
        ));
    }
    let columns = [
        "scope",
        "model",
        "n_subjects",
        "expected_frequency",
        "exceedance_probability",
        "protected_exceedance_probability",
        "bayesian_omnibus_risk",
        "subjects_won",
        "summed_bic",
    ];
    body.push_str(&table(&columns, &rows_of(selection, &columns)));
    Ok(Section {
        id: "selection",
        title: "Model selection".into(),
        body,
    })
}

fn contrast_section(contrast: &Tidy) -> Section {
    let columns = [
        "parameter",
        "group_1",
        "group_2",
        "mean_1",
        "mean_2",
        "welch_t",
        "welch_df",
        "welch_p",
        "hedges_g",
        "g_ci_low",
        "g_ci_high",
        "mann_whitney_p",
        "q_value",
    ];
    Section {
        id: "contrast",
        title: "Group contrast".into(),
        body: format!(
            "<p>Per free parameter: Welch's t test (Welch 1947), Hedges' g with its 95 % \
             interval (Hedges 1981), Mann–Whitney U, and Benjamini–Hochberg q values (1995) \
             across parameters. Differences are group 1 minus group 2.</p>{}",
            table(&columns, &rows_of(contrast, &columns))
        ),
    }
}

fn group_priors(priors: &Tidy) -> Section {
    let columns = [
        "model",
        "scope",
        "parameter",
        "n_subjects",
        "natural_median",
        "natural_median_ci_low",
        "natural_median_ci_high",
        "natural_mean",
        "natural_sd",
    ];
    Section {
        id: "priors",
        title: "Empirical-Bayes group priors".into(),
        body: format!(
            "<p>Gaussian group priors on each parameter's unconstrained scale fitted by EM with \
             the Laplace approximation (Huys et al. 2011); medians with 95 % intervals on the \
             natural scale.</p>{}",
            table(&columns, &rows_of(priors, &columns))
        ),
    }
}

fn check_section(dir: &Path) -> Result<Section, ReportError> {
    let mut svgs: Vec<PathBuf> = std::fs::read_dir(dir)
        .map_err(|e| InputError::file(dir, format!("cannot be read: {e}")))?
        .filter_map(|e| e.ok().map(|e| e.path()))
        .filter(|p| p.extension().is_some_and(|x| x == "svg"))
        .collect();
    svgs.sort();
    let mut body = String::from(
        "<p>Posterior predictive check: observed statistics against the 95 % bands of data \
         simulated at each participant's estimates (choice proportions and response-time \
         quantiles .1 .3 .5 .7 .9; Ratcliff &amp; Tuerlinckx 2002).</p>",
    );
    if let Some(misfit) = read(dir, "check_misfit.csv")? {
        let columns: Vec<&str> = misfit.header.iter().map(String::as_str).collect();
        let pooled: Vec<Vec<String>> = rows_of(&misfit, &columns).into_iter().take(12).collect();
        body.push_str(&format!(
            "<details><summary>Misfit summary (first rows of check_misfit.csv)</summary>{}</details>",
            table(&columns, &pooled)
        ));
    }
    for path in &svgs {
        let text = std::fs::read_to_string(path)
            .map_err(|e| InputError::file(path, format!("cannot be read: {e}")))?;
        let name = path
            .file_name()
            .map_or(String::new(), |n| n.to_string_lossy().into_owned());
        body.push_str(&figure(&figures::inline(&text), &name));
    }
    Ok(Section {
        id: "check",
        title: "Predictive check".into(),
        body,
    })
}

fn settings(record: &serde_json::Value) -> Section {
    let text = |k: &str| {
        record
            .get(k)
            .map(|v| match v {
                serde_json::Value::String(s) => s.clone(),
                serde_json::Value::Null => "none".into(),
                other => other.to_string(),
            })
            .unwrap_or_else(|| "—".into())
    };
    let command = record
        .get("command_line")
        .and_then(|v| v.as_array())
        .map(|a| {
            a.iter()
                .filter_map(|x| x.as_str())
                .collect::<Vec<_>>()
                .join(" ")
        })
        .unwrap_or_default();
    let data = record.get("data");
    let rows = vec![
        vec!["version".to_string(), text("version")],
        vec!["command line".to_string(), command],
        vec![
            "data".to_string(),
            data.and_then(|d| d.get("path"))
                .and_then(|p| p.as_str())
                .unwrap_or("—")
                .to_string(),
        ],
        vec![
            "data SHA-256".to_string(),
            data.and_then(|d| d.get("sha256"))
                .and_then(|p| p.as_str())
                .unwrap_or("—")
                .to_string(),
        ],
        vec!["seed".to_string(), text("seed")],
        vec!["starts per subject".to_string(), text("starts")],
        vec!["deadline (s)".to_string(), text("deadline")],
        vec!["lock (s)".to_string(), text("lock")],
    ];
    let mut body = table(&["setting", "value"], &rows);
    if let Some(models) = record.get("models").and_then(|m| m.as_array()) {
        for m in models {
            let name = m.get("name").and_then(|x| x.as_str()).unwrap_or("?");
            let definition = m.get("definition").and_then(|x| x.as_str()).unwrap_or("");
            body.push_str(&format!(
                "<details><summary>model {}</summary><pre>{}</pre></details>",
                escape(name),
                escape(definition)
            ));
        }
    }
    Section {
        id: "settings",
        title: "Settings of the run".into(),
        body,
    }
}
