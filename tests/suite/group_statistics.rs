//! Group statistics of `valuedrift contrast` against external references, and the command end
//! to end.
//!
//! Sources of the expected values:
//! * `tests/reference/group_statistics.csv`, written offline by
//!   `tests/reference/generate_group_statistics.py` with SciPy (`ttest_ind(equal_var=False)`,
//!   `mannwhitneyu(method="asymptotic", use_continuity=True)`, `kruskal`) and, for Hedges' g and
//!   Welch's ANOVA, their formulas evaluated there with NumPy (`scipy.special.gammaln`,
//!   `scipy.stats.norm.ppf`, `scipy.stats.f.sf`);
//! * the worked example of Benjamini & Hochberg (1995, J. R. Statist. Soc. B 57:289–300,
//!   section 4), for the false-discovery-rate procedure;
//! * hand-written `parameters.csv` files below, for the command.

use std::path::{Path, PathBuf};
use std::process::Command;
use valuedrift::group::{
    benjamini_hochberg, hedges_g, kruskal_wallis, mann_whitney_u, welch_anova, welch_t_test,
};

/// Relative tolerance for statistics (and degrees of freedom, interval ends).
const STAT_TOL: f64 = 1e-9;
/// Relative tolerance for p values.
const P_TOL: f64 = 1e-8;

struct Reference {
    case: String,
    test: String,
    samples: Vec<Vec<f64>>,
    statistic: f64,
    df: Option<f64>,
    df2: Option<f64>,
    p: Option<f64>,
    ci_low: Option<f64>,
    ci_high: Option<f64>,
}

fn reference() -> Vec<Reference> {
    let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/reference/group_statistics.csv");
    let mut reader = csv::Reader::from_path(&path).expect("reference table");
    let opt = |s: &str| {
        if s.is_empty() {
            None
        } else {
            Some(s.parse::<f64>().unwrap())
        }
    };
    reader
        .records()
        .map(|r| {
            let r = r.unwrap();
            Reference {
                case: r[0].to_string(),
                test: r[1].to_string(),
                samples: r[2]
                    .split('|')
                    .map(|g| g.split(' ').map(|v| v.parse().unwrap()).collect())
                    .collect(),
                statistic: r[3].parse().unwrap(),
                df: opt(&r[4]),
                df2: opt(&r[5]),
                p: opt(&r[6]),
                ci_low: opt(&r[7]),
                ci_high: opt(&r[8]),
            }
        })
        .collect()
}

fn close(what: &str, case: &str, got: f64, want: f64, tol: f64) {
    let err = (got - want).abs() / want.abs().max(f64::MIN_POSITIVE);
    assert!(
        err <= tol,
        "{case} {what}: got {got:e}, scipy table {want:e} (relative error {err:e} > {tol:e})"
    );
}

fn rows(test: &str) -> Vec<Reference> {
    let r: Vec<Reference> = reference().into_iter().filter(|r| r.test == test).collect();
    assert!(!r.is_empty(), "no '{test}' rows in the reference table");
    r
}

#[test]
fn welch_t_test_matches_scipy_ttest_ind_unequal_var() {
    // Expected: tests/reference/group_statistics.csv, scipy.stats.ttest_ind(equal_var=False).
    for r in rows("welch") {
        let w = welch_t_test(&r.samples[0], &r.samples[1]).expect("defined");
        close("t", &r.case, w.t, r.statistic, STAT_TOL);
        close("df", &r.case, w.df, r.df.unwrap(), STAT_TOL);
        close("p", &r.case, w.p, r.p.unwrap(), P_TOL);
    }
}

#[test]
fn mann_whitney_matches_scipy_asymptotic_with_continuity() {
    // Expected: tests/reference/group_statistics.csv, scipy.stats.mannwhitneyu(method=
    // "asymptotic", use_continuity=True, alternative="two-sided"); includes tied samples.
    for r in rows("mann_whitney") {
        let m = mann_whitney_u(&r.samples[0], &r.samples[1]).expect("defined");
        close("U", &r.case, m.u, r.statistic, STAT_TOL);
        close("p", &r.case, m.p, r.p.unwrap(), P_TOL);
    }
}

#[test]
fn kruskal_wallis_matches_scipy_kruskal() {
    // Expected: tests/reference/group_statistics.csv, scipy.stats.kruskal (tie-corrected H).
    for r in rows("kruskal") {
        let groups: Vec<&[f64]> = r.samples.iter().map(Vec::as_slice).collect();
        let k = kruskal_wallis(&groups).expect("defined");
        close("H", &r.case, k.h, r.statistic, STAT_TOL);
        close("df", &r.case, k.df, r.df.unwrap(), STAT_TOL);
        close("p", &r.case, k.p, r.p.unwrap(), P_TOL);
    }
}

#[test]
fn hedges_g_matches_its_formula_in_numpy() {
    // Expected: tests/reference/group_statistics.csv, Hedges (1981) g with exact J and the
    // Hedges & Olkin (1985) large-sample 95 % interval, evaluated with numpy/scipy.special.
    for r in rows("hedges") {
        let h = hedges_g(&r.samples[0], &r.samples[1], 0.95).expect("defined");
        close("g", &r.case, h.g, r.statistic, STAT_TOL);
        close("ci_low", &r.case, h.ci_low, r.ci_low.unwrap(), STAT_TOL);
        close("ci_high", &r.case, h.ci_high, r.ci_high.unwrap(), STAT_TOL);
    }
}

#[test]
fn welch_anova_matches_its_formula_in_numpy_and_reduces_to_welch_t() {
    // Expected: tests/reference/group_statistics.csv, Welch (1951) F and df2 evaluated with
    // numpy, p from scipy.stats.f.sf.
    for r in rows("welch_anova") {
        let groups: Vec<&[f64]> = r.samples.iter().map(Vec::as_slice).collect();
        let w = welch_anova(&groups).expect("defined");
        close("F", &r.case, w.f, r.statistic, STAT_TOL);
        close("df1", &r.case, w.df1, r.df.unwrap(), STAT_TOL);
        close("df2", &r.case, w.df2, r.df2.unwrap(), STAT_TOL);
        close("p", &r.case, w.p, r.p.unwrap(), P_TOL);
    }
    // With two groups Welch's F is t² and df2 the Welch–Satterthwaite df (Welch 1951, sec. 2):
    // compared with the scipy ttest_ind rows of the same cases.
    for t in rows("welch") {
        let groups: Vec<&[f64]> = t.samples.iter().map(Vec::as_slice).collect();
        let w = welch_anova(&groups).expect("defined");
        close("F = t²", &t.case, w.f, t.statistic * t.statistic, STAT_TOL);
        close("df2 = Welch df", &t.case, w.df2, t.df.unwrap(), STAT_TOL);
        close("p", &t.case, w.p, t.p.unwrap(), P_TOL);
    }
}

#[test]
fn benjamini_hochberg_reproduces_the_worked_example() {
    // Benjamini & Hochberg (1995), section 4: 15 p values from a study of myocardial infarction
    // treatments (written here from memory). At q* = 0.05 the step-up procedure rejects the four
    // smallest (p(4) = 0.0095 <= 4/15 * 0.05, and no larger p(k) <= k/15 * 0.05), whereas the
    // Bonferroni bound 0.05/15 rejects only three.
    let p = [
        0.0201, 0.7590, 0.0001, 0.0298, 0.4262, 0.0004, 0.0344, 0.5719, 0.0019, 0.0278, 0.6528,
        0.0095, 1.0, 0.0459, 0.3240,
    ];
    let q = benjamini_hochberg(&p);
    let rejected: Vec<f64> = p
        .iter()
        .zip(&q)
        .filter(|(_, q)| **q <= 0.05)
        .map(|(p, _)| *p)
        .collect();
    assert_eq!(rejected, vec![0.0001, 0.0004, 0.0019, 0.0095]);
    let bonferroni = p.iter().filter(|p| **p <= 0.05 / 15.0).count();
    assert_eq!(bonferroni, 3);
    // The smallest q values by the definition q(i) = min over j >= i of m p(j) / j, by hand:
    // 15 * 0.0095 / 4 = 0.035625 is the smallest of 15 p(j)/j for j >= 4, so q(4) = 0.035625.
    close("q(4)", "BH 1995", q[11], 15.0 * 0.0095 / 4.0, 1e-12);
    // q(5) = min(15*0.0201/5, 15*0.0278/6, 15*0.0298/7, 15*0.0344/8, 15*0.0459/9, ...) = 0.0603.
    close("q(5)", "BH 1995", q[0], 15.0 * 0.0201 / 5.0, 1e-12);
}

// ----- the command end to end -------------------------------------------------------------

fn bin() -> Command {
    Command::new(env!("CARGO_BIN_EXE_valuedrift"))
}

fn files_in(dir: &Path) -> Vec<PathBuf> {
    let mut v: Vec<PathBuf> = std::fs::read_dir(dir)
        .unwrap()
        .map(|e| e.unwrap().path())
        .collect();
    v.sort();
    v
}

const HEADER: &str =
    "subject,group,model,parameter,estimate,std_error,ci_low,ci_high,at_bound,fixed";

/// Hand-written fits of model "m": free parameters alpha and beta, a fixed ndt, rows of another
/// model "other" that must be ignored. Group A: s1–s3, group B: s4–s6; s6's alpha is at a bound.
fn two_group_rows() -> Vec<String> {
    let alpha = [
        ("s1", "A", 0.20),
        ("s2", "A", 0.35),
        ("s3", "A", 0.30),
        ("s4", "B", 0.55),
        ("s5", "B", 0.60),
        ("s6", "B", 1.00),
    ];
    let beta = [2.0, 2.5, 1.5, 3.0, 2.0, 2.5];
    let mut rows = vec![HEADER.to_string()];
    for (i, (s, g, a)) in alpha.iter().enumerate() {
        let bound = *s == "s6";
        rows.push(format!("{s},{g},m,alpha,{a},0.05,0.1,0.5,{bound},false"));
        rows.push(format!("{s},{g},m,beta,{},0.3,1,3,false,false", beta[i]));
        rows.push(format!("{s},{g},m,ndt,0.3,,,,false,true"));
        rows.push(format!("{s},{g},other,alpha,99,0.1,0,1,false,false"));
    }
    rows
}

fn read_table(path: &Path) -> (Vec<String>, Vec<Vec<String>>) {
    let mut reader = csv::Reader::from_path(path).unwrap();
    let header = reader
        .headers()
        .unwrap()
        .iter()
        .map(str::to_string)
        .collect();
    let rows = reader
        .records()
        .map(|r| r.unwrap().iter().map(str::to_string).collect())
        .collect();
    (header, rows)
}

#[test]
fn contrast_command_writes_the_documented_columns() {
    let dir = tempfile::tempdir().unwrap();
    let fits = dir.path().join("fits");
    std::fs::create_dir(&fits).unwrap();
    std::fs::write(
        fits.join("parameters.csv"),
        two_group_rows().join("\n") + "\n",
    )
    .unwrap();
    let out = dir.path().join("out");
    let output = bin()
        .args(["contrast", "--model", "m", "--by", "group", "--fits"])
        .arg(&fits)
        .arg("--out")
        .arg(&out)
        .output()
        .unwrap();
    assert!(
        output.status.success(),
        "{}",
        String::from_utf8_lossy(&output.stderr)
    );
    let names: Vec<String> = files_in(&out)
        .iter()
        .map(|p| p.file_name().unwrap().to_string_lossy().into_owned())
        .collect();
    assert_eq!(
        names,
        [
            "contrast.csv",
            "contrast.parquet",
            "contrast_groups.csv",
            "contrast_groups.parquet"
        ]
    );
    let (header, rows) = read_table(&out.join("contrast.csv"));
    // Required columns (source: the task's column list, src/group/contrast.rs docs).
    for column in [
        "parameter",
        "group_1",
        "group_2",
        "n_1",
        "n_2",
        "n_at_bound",
        "mean_1",
        "mean_2",
        "welch_t",
        "welch_df",
        "welch_p",
        "mann_whitney_u",
        "mann_whitney_p",
        "hedges_g",
        "g_ci_low",
        "g_ci_high",
        "q_value",
    ] {
        assert!(
            header.iter().any(|h| h == column),
            "missing column {column}"
        );
    }
    let get = |row: &[String], name: &str| -> String {
        row[header.iter().position(|h| h == name).unwrap()].clone()
    };
    // Only the free parameters of model m, in file order; ndt (fixed) and model "other" left out.
    let params: Vec<String> = rows.iter().map(|r| get(r, "parameter")).collect();
    assert_eq!(params, ["alpha", "beta"]);
    let alpha = &rows[0];
    assert_eq!(get(alpha, "group_1"), "A");
    assert_eq!(get(alpha, "group_2"), "B");
    assert_eq!(get(alpha, "n_1"), "3");
    assert_eq!(get(alpha, "n_2"), "3");
    assert_eq!(get(alpha, "n_at_bound"), "1"); // s6, kept and counted
    // Means by hand from the rows above: (0.20+0.35+0.30)/3 and (0.55+0.60+1.00)/3.
    let num = |row: &[String], name: &str| get(row, name).parse::<f64>().unwrap();
    close("mean_1", "cli", num(alpha, "mean_1"), 0.85 / 3.0, 1e-12);
    close("mean_2", "cli", num(alpha, "mean_2"), 2.15 / 3.0, 1e-12);
    // U of group A by hand: every A value is below every B value, so U1 = 0.
    assert_eq!(num(alpha, "mann_whitney_u"), 0.0);
    // The file's Welch columns are those of the library function on the same values.
    let w = welch_t_test(&[0.20, 0.35, 0.30], &[0.55, 0.60, 1.00]).unwrap();
    close("welch_t", "cli", num(alpha, "welch_t"), w.t, 1e-12);
    // q values: two Welch p values, BH by hand: q = min over j >= i of 2 p(j)/j.
    let (pa, pb) = (num(&rows[0], "welch_p"), num(&rows[1], "welch_p"));
    let (lo, hi) = (pa.min(pb), pa.max(pb));
    let q_hi = hi;
    let q_lo = (2.0 * lo).min(q_hi);
    let q_alpha = if pa <= pb { q_lo } else { q_hi };
    close("q_value", "cli", num(&rows[0], "q_value"), q_alpha, 1e-12);
    let stdout = String::from_utf8_lossy(&output.stdout);
    assert!(
        stdout.contains("alpha") && stdout.contains("not diagnoses"),
        "{stdout}"
    );
}

#[test]
fn contrast_command_with_three_groups_fills_the_omnibus_columns() {
    let dir = tempfile::tempdir().unwrap();
    let mut rows = vec![HEADER.to_string()];
    for (i, (g, v)) in [
        ("A", 0.1),
        ("A", 0.2),
        ("A", 0.4),
        ("B", 0.5),
        ("B", 0.7),
        ("B", 0.6),
        ("C", 0.9),
        ("C", 0.8),
        ("C", 1.2),
    ]
    .iter()
    .enumerate()
    {
        rows.push(format!("s{i},{g},m,alpha,{v},0.1,0,1,false,false"));
    }
    std::fs::write(dir.path().join("parameters.csv"), rows.join("\n") + "\n").unwrap();
    let output = bin()
        .args(["contrast", "--model", "m", "--by", "group", "--fits"])
        .arg(dir.path())
        .output()
        .unwrap();
    assert!(
        output.status.success(),
        "{}",
        String::from_utf8_lossy(&output.stderr)
    );
    let (header, table) = read_table(&dir.path().join("contrast.csv"));
    let get = |name: &str| table[0][header.iter().position(|h| h == name).unwrap()].clone();
    assert_eq!(get("n_groups"), "3");
    assert_eq!(get("welch_t"), "");
    assert_eq!(get("group_1"), "");
    let groups: [&[f64]; 3] = [&[0.1, 0.2, 0.4], &[0.5, 0.7, 0.6], &[0.9, 0.8, 1.2]];
    let k = kruskal_wallis(&groups).unwrap();
    close(
        "kruskal_h",
        "cli",
        get("kruskal_h").parse().unwrap(),
        k.h,
        1e-12,
    );
    let w = welch_anova(&groups).unwrap();
    close(
        "welch_anova_p",
        "cli",
        get("welch_anova_p").parse().unwrap(),
        w.p,
        1e-12,
    );
    // One parameter: its q value is its p value.
    close(
        "q_value",
        "cli",
        get("q_value").parse().unwrap(),
        w.p,
        1e-12,
    );
    let (_, per_group) = read_table(&dir.path().join("contrast_groups.csv"));
    assert_eq!(per_group.len(), 3);
}

#[test]
fn malformed_estimate_names_file_line_and_column_and_writes_nothing() {
    let dir = tempfile::tempdir().unwrap();
    let mut rows = two_group_rows();
    // Line 6 of the file (header = line 1): s2's alpha row.
    assert!(rows[5].starts_with("s2,A,m,alpha,"));
    rows[5] = "s2,A,m,alpha,abc,0.05,0.1,0.5,false,false".to_string();
    let input = dir.path().join("parameters.csv");
    std::fs::write(&input, rows.join("\n") + "\n").unwrap();
    let out = dir.path().join("out");
    let output = bin()
        .args(["contrast", "--model", "m", "--by", "group", "--fits"])
        .arg(dir.path())
        .arg("--out")
        .arg(&out)
        .output()
        .unwrap();
    assert_eq!(output.status.code(), Some(1));
    let stderr = String::from_utf8_lossy(&output.stderr);
    assert!(stderr.contains(&input.display().to_string()), "{stderr}");
    assert!(stderr.contains("line 6"), "{stderr}");
    assert!(stderr.contains("column estimate"), "{stderr}");
    assert!(stderr.contains("'abc'"), "{stderr}");
    assert!(!out.exists(), "output folder created: {:?}", files_in(&out));
    assert_eq!(files_in(dir.path()), [input]);
}
