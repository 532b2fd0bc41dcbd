//! Benchmark of per-subject fitting and of the whole `fit` process (a benchmark, not a test).
//!
//! Takes 10 invented participants of the orchard design (300 trials, model `gainloss-linear`,
//! generating values inside the documented ranges): `examples/data/fit_speed_trials.csv`, which
//! this benchmark's simulation (seed 7) wrote with the sampler of commit aceef5b, every number
//! at full precision, so that a later change of the sampler (its draws move within its
//! tolerance, and ln L with them by about 1e-11) does not move the data the fits are compared
//! on. Another model named as the argument is simulated here instead. Then:
//! 1. fits the first 8 with 10 starts on one thread in this process, printing per subject ln L
//!    beside the value the fitter of commit f3593c4 reached on the same subject, and the
//!    likelihood-with-gradient evaluations of each stage of the fit (screen, each start's
//!    L-BFGS run, restarts, searches from the interior, face probes, fresh starts, examinations
//!    of the best point, standard errors);
//! 2. runs the release binary's `fit --model gainloss-linear --threads 1` on that table (for
//!    another model, on its 10 subjects written as a CSV trial table) several times, printing
//!    the whole process's wall and processor time per subject beside the processor time of
//!    fitting the same 10 subjects in this process and the start-up of the binary
//!    (`--version`); the rest of the processor time is start-up, reading, the data screen,
//!    writing the tables and run.json. On a machine shared with other work, the processor time
//!    is the steadier figure.
//!
//! Run with `cargo build --release && cargo run --release --example fit_speed`; another
//! built-in model may be named as the argument (for example `-- gainloss-wald-race`; the
//! process part and the comparison with f3593c4 are then for that model too, without the
//! earlier values). The last lines read `seconds_per_subject=X likelihoods_per_second=Y` (Y
//! counts likelihood-with-gradient evaluations of one subject's 300 trials) and
//! `process_seconds_per_subject=… (min–max) process_cpu_seconds_per_subject=… (min–max)
//! fitting_cpu_seconds_per_subject=… startup_seconds=… rest_cpu_per_subject=…`.

use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use std::path::{Path, PathBuf};
use std::process::Command;
use std::time::Instant;
use valuedrift::data::{ColumnMap, Subject, read_trials};
use valuedrift::fit::{FitOptions, fit_subject, fit_subject_with_work};
use valuedrift::likelihood::SubjectLikelihood;
use valuedrift::model::{Model, load_model};
use valuedrift::simulate::orchard_participant;

#[path = "common/mod.rs"]
mod common;

const SUBJECTS: usize = 8;
const PROCESS_SUBJECTS: usize = 10;
const PROCESS_RUNS: usize = 5;
const TRIALS: usize = 300;

/// ln L of `gainloss-linear` on s00…s07 as fitted by commit f3593c4 (before the early stops and
/// the likelihood's fast path), on the same simulated data: that commit's program run with the
/// orchard generating values of commit c3b3d5f (a model's fixed parameters kept at their value)
/// and the sampler of commit 6df2953 (draws within 6e-13 of its own). The reference the fits
/// must equal or beat.
const EARLIER_LN_L: [f64; SUBJECTS] = [
    182.39367178403447,
    52.28191072296144,
    87.28556134887054,
    183.01388366721497,
    -188.84763854450378,
    330.16223031318026,
    -47.406168223226686,
    12.414037318946114,
];

fn main() {
    let name = std::env::args()
        .nth(1)
        .unwrap_or_else(|| "gainloss-linear".into());
    let model = load_model(&name).expect("a built-in model");
    let committed = (name == "gainloss-linear").then(committed_data);
    let subjects = if let Some(path) = &committed {
        read_trials(path, &ColumnMap::default())
            .expect("the committed trial table")
            .subjects
    } else {
        let mut rng = ChaCha8Rng::seed_from_u64(7);
        (0..PROCESS_SUBJECTS)
            .map(|i| {
                orchard_participant(&model, &format!("s{i:02}"), "bench", TRIALS, &mut rng)
                    .expect("the model runs on the orchard design")
            })
            .collect()
    };
    assert_eq!(subjects.len(), PROCESS_SUBJECTS);
    let options = FitOptions::default();
    // Likelihood evaluations per second on its own.
    let lik = SubjectLikelihood::new(&model, &subjects[0], None).unwrap();
    let theta = vec![0.1; lik.n_free()];
    let evaluations = 2000;
    let start = Instant::now();
    let mut sink = 0.0;
    for k in 0..evaluations {
        let mut t = theta.clone();
        t[0] += 1e-9 * k as f64;
        sink += lik.evaluate(&t).ln_likelihood;
    }
    let per_second = evaluations as f64 / start.elapsed().as_secs_f64();
    let start = Instant::now();
    let mut fits = Vec::new();
    for subject in &subjects[..SUBJECTS] {
        let lik = SubjectLikelihood::new(&model, subject, None).unwrap();
        fits.push(fit_subject_with_work(&lik, &options));
    }
    let per_subject = start.elapsed().as_secs_f64() / SUBJECTS as f64;
    println!(
        "subject: ln L (f3593c4; new - f3593c4), starts at best/runs, converged | evaluations \
         by stage"
    );
    let mut total = 0;
    for (i, (fit, work)) in fits.iter().enumerate() {
        sink += fit.log_likelihood;
        total += work.total();
        let earlier = if name == "gainloss-linear" {
            format!(
                "{}; {:+.1e}",
                EARLIER_LN_L[i],
                fit.log_likelihood - EARLIER_LN_L[i]
            )
        } else {
            "-".to_string()
        };
        println!(
            "{}: ln L = {} ({earlier}), {}/{}, {} | {work}",
            fit.subject, fit.log_likelihood, fit.starts_at_best, fit.starts, fit.converged,
        );
    }
    println!(
        "evaluations_per_subject={:.0}",
        total as f64 / SUBJECTS as f64
    );
    assert!(sink.is_finite());
    let process = whole_process(&model, &subjects, &options, committed.as_deref());
    println!(
        "{SUBJECTS} subjects x {TRIALS} trials of model {name}, {} starts, 1 thread",
        options.starts
    );
    println!("seconds_per_subject={per_subject:.4} likelihoods_per_second={per_second:.0}");
    println!("{process}");
}

/// Times the release binary's `fit` on `subjects` (the table at `committed`, or written as CSV
/// here), the binary's start-up and fitting the same subjects here; returns the summary line.
fn whole_process(
    model: &Model,
    subjects: &[Subject],
    options: &FitOptions,
    committed: Option<&Path>,
) -> String {
    let binary = common::release_binary();
    let dir = tempfile::tempdir().expect("a temporary folder");
    let data = committed.map_or_else(
        || {
            let data = dir.path().join("subjects.csv");
            let mut file = std::fs::File::create(&data).expect("a data file");
            common::write_subjects(&mut file, subjects.to_vec(), true);
            data
        },
        Path::to_path_buf,
    );
    let n = subjects.len() as f64;
    let start = processor_seconds();
    for subject in subjects {
        let lik = SubjectLikelihood::new(model, subject, None).unwrap();
        assert!(fit_subject(&lik, options).log_likelihood.is_finite());
    }
    let fitting = (processor_seconds() - start) / n;
    // (wall, processor) seconds of each run.
    let startup: Vec<(f64, f64)> = (0..PROCESS_RUNS)
        .map(|_| {
            let (_, wall, cpu) = common::measure(Command::new(&binary).arg("--version"));
            (wall, cpu)
        })
        .collect();
    let runs: Vec<(f64, f64)> = (0..PROCESS_RUNS)
        .map(|k| {
            let (_, wall, cpu) = common::measure(
                Command::new(&binary)
                    .args(["fit", "--model", &model.name, "--threads", "1", "--data"])
                    .arg(&data)
                    .arg("--out")
                    .arg(dir.path().join(format!("fit{k}"))),
            );
            (wall / n, cpu / n)
        })
        .collect();
    let wall = spread(runs.iter().map(|r| r.0));
    let cpu = spread(runs.iter().map(|r| r.1));
    let startup_wall = spread(startup.iter().map(|r| r.0));
    format!(
        "{} subjects, whole `fit` process, 1 thread, median (min-max) of {PROCESS_RUNS} runs:\n\
         process_seconds_per_subject={:.4} ({:.4}-{:.4}) \
         process_cpu_seconds_per_subject={:.4} ({:.4}-{:.4}) \
         fitting_cpu_seconds_per_subject={fitting:.4} startup_seconds={:.4} \
         rest_cpu_per_subject={:.4}",
        subjects.len(),
        wall.0,
        wall.1,
        wall.2,
        cpu.0,
        cpu.1,
        cpu.2,
        startup_wall.0,
        cpu.0 - fitting
    )
}

/// The 10 participants of `gainloss-linear` as committed (see the module docs).
fn committed_data() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("examples/data/fit_speed_trials.csv")
}

/// Processor time of this process so far, in seconds.
fn processor_seconds() -> f64 {
    let mut t = libc::timespec {
        tv_sec: 0,
        tv_nsec: 0,
    };
    // SAFETY: `t` is a live local that clock_gettime fills.
    let status = unsafe { libc::clock_gettime(libc::CLOCK_PROCESS_CPUTIME_ID, &mut t) };
    assert_eq!(status, 0, "clock_gettime failed");
    t.tv_sec as f64 + t.tv_nsec as f64 * 1e-9
}

/// (median, minimum, maximum) of `values`.
fn spread(values: impl Iterator<Item = f64>) -> (f64, f64, f64) {
    let mut v: Vec<f64> = values.collect();
    v.sort_by(f64::total_cmp);
    (v[v.len() / 2], v[0], v[v.len() - 1])
}
