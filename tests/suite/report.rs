//! The HTML report: one self-contained file (no script, no outside address: the issue's
//! requirement, checked in a real browser by tests/scripts/report_browser.sh) with a section for
//! each table beside the fit, every figure with a legend and axis labels, the run's settings, a
//! methods paragraph and the research-use caution; and its refusals.

use crate::common::{MODEL, bin, demo_file, succeed};
use std::path::Path;

fn run(args: &[&str], paths: &[&Path]) {
    let mut command = bin();
    command.args(args);
    for p in paths {
        command.arg(p);
    }
    succeed(&mut command);
}

/// The text between each `<svg` and its `</svg>`.
fn svgs(page: &str) -> Vec<&str> {
    page.split("<svg")
        .skip(1)
        .map(|rest| rest.split("</svg>").next().unwrap())
        .collect()
}

#[test]
fn report_holds_every_section_and_figure_in_one_file() {
    let dir = tempfile::tempdir().unwrap();
    let fits = dir.path().join("fits");
    let check = dir.path().join("check");
    let plan = dir.path().join("plan");
    let data = demo_file("orchard_trials.csv");
    let models = format!("{MODEL},gainloss-quadratic");
    let mut fit = bin();
    fit.args(["fit", "--model", &models, "--starts", "2", "--data"])
        .arg(&data)
        .arg("--out")
        .arg(&fits);
    succeed(&mut fit);
    run(&["compare", "--samples", "1000", "--fits"], &[&fits]);
    run(&["contrast", "--model", MODEL, "--fits"], &[&fits]);
    let mut checking = bin();
    checking
        .args(["check", "--model", MODEL, "--sims", "10", "--fits"])
        .arg(&fits)
        .arg("--data")
        .arg(&data)
        .arg("--out")
        .arg(&check);
    succeed(&mut checking);
    let quick = Path::new(env!("CARGO_MANIFEST_DIR")).join("examples/plan/quick-plan.toml");
    run(&["plan", "--plan"], &[&quick, Path::new("--out"), &plan]);
    let page_path = dir.path().join("report.html");
    let mut report = bin();
    report
        .args(["report", "--fits"])
        .arg(&fits)
        .arg("--check")
        .arg(&check)
        .arg("--plan")
        .arg(&plan)
        .arg("--out")
        .arg(&page_path);
    succeed(&mut report);
    let page = std::fs::read_to_string(&page_path).unwrap();

    // Self-contained: no script, no address outside the file (the requirement).
    for forbidden in [
        "<script",
        "http://",
        "https://",
        "url(",
        "src=\"//",
        "href=\"//",
    ] {
        assert!(!page.contains(forbidden), "the report holds `{forbidden}`");
    }
    // The research-use caution (the project's rule for reports) and the de-identification reminder.
    assert!(page.contains("not diagnoses") && page.contains("De-identify"));
    for heading in [
        "Data screen",
        "Fits",
        "Estimates by group",
        "Model selection",
        "Group contrast",
        "Predictive check",
        "Plan: parameter recovery",
        "Plan: power",
        "Plan: model recovery",
        "Settings of the run",
        "Methods",
    ] {
        assert!(
            page.contains(&format!("<h2>{heading}</h2>")),
            "no section {heading}"
        );
    }
    // Every check figure is inlined (one per SVG file of the check folder).
    let check_figures = std::fs::read_dir(&check)
        .unwrap()
        .filter(|e| {
            e.as_ref()
                .unwrap()
                .path()
                .extension()
                .is_some_and(|x| x == "svg")
        })
        .count();
    let figures = svgs(&page);
    // 2 models × 6 free parameters (per-subject strips), 3 selection scopes, the check's
    // figures, 2 × 6 plan scatter plots and 2 power figures.
    assert_eq!(
        figures.len(),
        12 + 3 + check_figures + 12 + 2,
        "figures in the report"
    );
    // Every figure has a legend and labelled axes (the issue: legends and units).
    let legends = [
        "one participant",
        "expected frequency",
        "estimate = generating value",
        "95 % interval",
        "observed",
    ];
    for svg in &figures {
        assert!(
            legends.iter().any(|l| svg.contains(l)),
            "a figure without a legend: {}",
            &svg[..svg.len().min(300)]
        );
    }
    assert!(page.contains("ndt (s)") && page.contains("generating value (s)"));
    assert!(page.contains("participants per group"));
    // The methods paragraph cites what the run did.
    for citation in [
        "Liu &amp; Nocedal 1989",
        "Schwarz 1978",
        "Stephan et al. 2009",
        "Welch 1947",
        "Wilson 1927",
    ] {
        assert!(
            page.contains(citation),
            "methods paragraph lacks {citation}"
        );
    }
    // An existing report is kept unless --replace.
    let again = bin()
        .args(["report", "--fits"])
        .arg(&fits)
        .arg("--out")
        .arg(&page_path)
        .output()
        .unwrap();
    assert!(!again.status.success());
    assert_eq!(std::fs::read_to_string(&page_path).unwrap(), page);
}

#[test]
fn report_without_anything_to_show_is_refused() {
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("report.html");
    let output = bin()
        .args(["report", "--fits"])
        .arg(dir.path())
        .arg("--out")
        .arg(&out)
        .output()
        .unwrap();
    let message = String::from_utf8_lossy(&output.stderr);
    assert!(
        !output.status.success() && message.contains("nothing to report"),
        "{message}"
    );
    assert!(!out.exists());
}
