//! Parameter and model recovery for the time-varying decision models (a study, not a test).
//!
//! For each of three generating models, the fixed-bound `gainloss-linear`, the linear collapse
//! `gainloss-collapse-linear` and the leaky `gainloss-leaky`, simulates `N` orchard participants
//! of 300 trials (default N = 30; generating values from `orchard_generating_values`: collapse
//! rate 0.05–0.3 per second, leak 0.5–3 per second; seed 2026 + model index, then the
//! participant's index) and fits every participant with all three models (10 starts). Prints:
//! 1. the correlation of generating and fitted collapse rate (collapsing data, collapsing fit)
//!    and leak (leaky data, leaky fit), with their medians of |error| and how often the fit's
//!    95 % interval (from the observed information, on the optimiser's scale) holds the
//!    generating value;
//! 2. the confusion matrix of model recovery: for each generating model, how many participants
//!    each fitted model wins by BIC (Schwarz 1978);
//! 3. how many fits were flagged as not converged, and the time taken.
//!
//! The leaky model runs on a coarser grid than its default (time step 0.004 s, 100 points:
//! about 4.8e-3 in ln g on the Wiener table instead of 1e-3), in simulation and fit alike, to
//! keep the study near an hour on two cores (51 and 74 min measured, before the leaky stage
//! mirrored its drift nodes; see the README); its solves, one per drift node, are what make it
//! slow. Run with
//! `cargo run --release --example collapse_recovery [-- N [generators [fitted [starts [trials [spread [only]]]]]]]`
//! (indices 0 fixed, 1 collapse, 2 leaky, comma-separated; default all three for both; the
//! confusion matrix then has a column for each fitted model; `starts` per fit, default 10;
//! `trials` per participant, default 300; `spread` either `orchard`, the ranges above, or
//! `spanning`: the collapse rate drawn from 0–0.6 per second (from fixed bounds to bounds 60 %
//! closed after 1 s) and the leak from 0–4 per second (from perfect integration to a time
//! constant of 0.25 s), each from its own stream seeded by the participant, so every other
//! generating value, the design and the seed of the simulation are those of the `orchard`
//! study; `only`, comma-separated participant indices, fits just those, as the study made them).
//! `fitted` may be `-`: the participants are then only simulated. Every run also writes them
//! as a trial table, `collapse_recovery_trials.csv` (response times to 0.1 ms), with their
//! generating values in `collapse_recovery_truth.csv`, so that the same data can be fitted by
//! the command line, e.g. `valuedrift fit --hierarchical`.
//! A line per fit goes to `collapse_recovery.csv.partial` in the working folder as soon as its
//! participant is done, renamed `collapse_recovery.csv` when the study ends; besides the fit it
//! gives the seconds, the likelihood evaluations and how many of them were on the model's own
//! grid (the rest on the coarser grid of the search, about 1/16 of the solve each), the 95 %
//! intervals of the collapse rate and the leak where the fitted model has them, and, for the
//! generating model's own fit, ln L at the generating values (an estimate far from the truth
//! with a higher ln L than the truth's is the data's limit, not the search's).

use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use rayon::prelude::*;
use std::io::Write;
use std::sync::Mutex;
use std::sync::atomic::{AtomicUsize, Ordering};
use std::time::Instant;
use valuedrift::data::Subject;
use valuedrift::fit::{FitOptions, SubjectFit, fit_subject_with_work};
use valuedrift::likelihood::SubjectLikelihood;
use valuedrift::model::{Model, load_model, parse_model};
use valuedrift::plan::summaries::pearson;
// Only its table writer is used here.
#[allow(dead_code)]
#[path = "common/mod.rs"]
mod common;

use valuedrift::simulate::{
    SimulationSettings, orchard_design, orchard_generating_values, simulate_subject,
};

/// The study's three models: fixed bounds, linear collapse, leak (on the coarser grid).
fn models() -> Vec<Model> {
    let leaky = load_model("gainloss-leaky").expect("built in");
    let text = std::fs::read_to_string(
        std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("models/gainloss-leaky.toml"),
    )
    .expect("the model file");
    let coarse = text.replacen("[choice]\n", "[choice]\nstep = 0.004\npoints = 100\n", 1);
    let coarse = parse_model(&coarse, "gainloss-leaky (coarse grid)").expect("a valid model");
    assert_eq!(coarse.parameters.len(), leaky.parameters.len());
    vec![
        load_model("gainloss-linear").expect("built in"),
        load_model("gainloss-collapse-linear").expect("built in"),
        coarse,
    ]
}

/// One generated participant: its generating values and the three fits.
struct Case {
    generator: usize,
    index: usize,
    truth: Vec<f64>,
    subject: Subject,
    fits: Vec<SubjectFit>,
}

fn value_of(model: &Model, values: &[f64], name: &str) -> f64 {
    let slot = model
        .parameters
        .iter()
        .position(|p| p.name == name)
        .expect("the parameter is in the model");
    values[slot]
}

/// The table line of fitted model `f` on `case` (without the time).
fn fit_line(models: &[Model], names: [&str; 3], case: &Case, f: usize, fit: &SubjectFit) -> String {
    let generator = &models[case.generator];
    let fitted = &models[f];
    let estimates: Vec<f64> = fit.estimates.iter().map(|e| e.estimate).collect();
    let triple = |name: &str| -> [String; 3] {
        let has = |m: &Model| {
            m.parameters
                .iter()
                .any(|p| p.name == name && p.fixed.is_none())
        };
        let truth = if has(generator) {
            format!("{}", value_of(generator, &case.truth, name))
        } else {
            String::new()
        };
        let (estimate, interval) = if has(fitted) {
            (
                format!("{}", value_of(fitted, &estimates, name)),
                interval_of(fitted, fit, name).map_or(",".into(), |(lo, hi)| format!("{lo},{hi}")),
            )
        } else {
            (String::new(), ",".into())
        };
        [truth, estimate, interval]
    };
    let [tr, er, ir] = triple("collapse_rate");
    let [tl, el, il] = triple("leak");
    format!(
        "{},{},{},{},{},{},\"{}\",{tr},{er},{ir},{tl},{el},{il}",
        names[case.generator],
        case.index,
        names[f],
        fit.log_likelihood,
        fit.bic,
        fit.converged,
        fit.status
    )
}

/// The 95 % interval of parameter `name` in `fit` (of `model`), where the fit gives one.
fn interval_of(model: &Model, fit: &SubjectFit, name: &str) -> Option<(f64, f64)> {
    let slot = model.parameters.iter().position(|p| p.name == name)?;
    fit.estimates[slot].interval
}

/// The `spanning` study's ranges (natural scale) for the parameters that carry the hypotheses.
const SPANNING: [(&str, f64, f64); 2] = [("collapse_rate", 0.0, 0.6), ("leak", 0.0, 4.0)];

/// Replaces the collapse rate or leak in `truth` (values of `model`) with a draw from its
/// [`SPANNING`] range, from a stream of its own seeded by `seed`.
fn spanning(model: &Model, truth: &mut [f64], seed: u64) {
    use rand::RngExt;
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    for (name, lo, hi) in SPANNING {
        if let Some(slot) = model.parameters.iter().position(|p| p.name == name) {
            truth[slot] = rng.random_range(lo..hi);
        }
    }
}

/// Writes the simulated participants as a trial table (`collapse_recovery_trials.csv`, response
/// times to 0.1 ms, for `valuedrift fit`, e.g. with `--hierarchical`) and their generating values
/// (`collapse_recovery_truth.csv`: participant, generating model, parameter, value).
fn write_participants(models: &[Model], cases: &[Case]) {
    let mut trials =
        std::fs::File::create("collapse_recovery_trials.csv").expect("a writable folder");
    let subjects = cases.iter().map(|c| c.subject.clone()).collect();
    common::write_subjects(&mut trials, subjects, true);
    let mut truth = String::from("participant,generator,parameter,value\n");
    for case in cases {
        let model = &models[case.generator];
        for (p, value) in model.parameters.iter().zip(&case.truth) {
            truth.push_str(&format!(
                "{},{},{},{value}\n",
                case.subject.id, model.name, p.name
            ));
        }
    }
    std::fs::write("collapse_recovery_truth.csv", truth).expect("a writable folder");
}

/// One parameter's recovery: generating values, estimates and 95 % intervals, by participant.
#[derive(Default)]
struct Recovery {
    truth: Vec<f64>,
    estimate: Vec<f64>,
    interval: Vec<Option<(f64, f64)>>,
}

fn median(mut x: Vec<f64>) -> f64 {
    x.sort_by(f64::total_cmp);
    x[x.len() / 2]
}

fn main() {
    let n: usize = std::env::args()
        .nth(1)
        .map_or(30, |a| a.parse().expect("N: a whole number"));
    let models = models();
    let names = ["fixed", "collapse", "leaky"];
    // Optional second and third arguments: the generating and the fitted models, as indices
    // (e.g. "0,1").
    let indices = |k: usize| -> Vec<usize> {
        std::env::args().nth(k).map_or(vec![0, 1, 2], |a| {
            if a == "-" {
                return Vec::new();
            }
            a.split(',')
                .map(|g| g.parse().expect("indices 0, 1, 2"))
                .collect()
        })
    };
    let (generators, fitted) = (indices(2), indices(3));
    let starts: usize = std::env::args()
        .nth(4)
        .map_or(10, |a| a.parse().expect("starts: a whole number"));
    let trials: usize = std::env::args()
        .nth(5)
        .map_or(300, |a| a.parse().expect("trials: a whole number"));
    let wide = match std::env::args().nth(6).as_deref() {
        None | Some("orchard") => false,
        Some("spanning") => true,
        Some(other) => panic!("spread: orchard or spanning, not {other}"),
    };
    // Optional seventh argument: only these participants (indices, comma-separated), to
    // fit again a few of a study's participants exactly as the study made them.
    let only: Option<Vec<usize>> = std::env::args().nth(7).map(|a| {
        a.split(',')
            .map(|i| i.parse().expect("participant indices"))
            .collect()
    });
    let jobs: Vec<(usize, usize)> = generators
        .into_iter()
        .flat_map(|g| (0..n).map(move |i| (g, i)))
        .filter(|(_, i)| only.as_ref().is_none_or(|o| o.contains(i)))
        .collect();
    let started = Instant::now();
    let done = AtomicUsize::new(0);
    let options = FitOptions {
        starts,
        ..FitOptions::default()
    };
    const PARTIAL: &str = "collapse_recovery.csv.partial";
    let mut file = std::fs::File::create(PARTIAL).expect("a writable folder");
    writeln!(
        file,
        "generator,participant,fitted,log_likelihood,bic,converged,status,true_collapse_rate,\
         collapse_rate,collapse_rate_low,collapse_rate_high,true_leak,leak,leak_low,leak_high,\
         seconds,evaluations,own_grid_evaluations,log_likelihood_at_truth"
    )
    .unwrap();
    let file = Mutex::new(file);
    let cases: Vec<Case> = jobs
        .par_iter()
        .map(|&(g, i)| {
            let generator = &models[g];
            let mut rng = ChaCha8Rng::seed_from_u64((2026 + g as u64) * 1000 + i as u64);
            let design = orchard_design(&format!("{}{i:02}", names[g]), "sim", trials, &mut rng);
            let mut truth = orchard_generating_values(generator, &mut rng).expect("orchard ranges");
            if wide {
                spanning(generator, &mut truth, (9026 + g as u64) * 1000 + i as u64);
            }
            let subject = simulate_subject(
                generator,
                &truth,
                &design,
                SimulationSettings::default(),
                &mut rng,
            )
            .expect("the model runs on the orchard design");
            let (mut seconds, mut counts) = (Vec::new(), Vec::new());
            let fits = models
                .iter()
                .enumerate()
                .filter(|(f, _)| fitted.contains(f))
                .map(|(_, m)| {
                    let clock = Instant::now();
                    let lik = SubjectLikelihood::new(m, &subject, None).expect("a valid subject");
                    let (fit, work) = fit_subject_with_work(&lik, &options);
                    seconds.push(format!("{:.1}", clock.elapsed().as_secs_f64()));
                    // ln L at the generating values, for the generating model's own fit: an
                    // estimate far from the truth with a higher ln L than the truth's is the
                    // design's limit, one with a lower ln L the search's failure.
                    let at_truth = if m.name == generator.name {
                        let free: Vec<f64> = m.free_slots().iter().map(|&s| truth[s]).collect();
                        let theta = lik.unconstrained(&free);
                        format!("{}", lik.evaluate(&theta).ln_likelihood)
                    } else {
                        String::new()
                    };
                    counts.push(format!("{},{},{at_truth}", work.total(), work.refined));
                    fit
                })
                .collect();
            let case = Case {
                generator: g,
                index: i,
                truth,
                subject,
                fits,
            };
            {
                let mut file = file.lock().expect("no panic while writing");
                let rest = seconds.iter().zip(&counts);
                for ((&f, fit), (seconds, counts)) in fitted.iter().zip(&case.fits).zip(rest) {
                    let line = fit_line(&models, names, &case, f, fit);
                    writeln!(file, "{line},{seconds},{counts}").unwrap();
                }
                file.flush().unwrap();
            }
            let k = done.fetch_add(1, Ordering::Relaxed) + 1;
            eprintln!(
                "[{:7.1} s] {k}/{} participants fitted ({} {i}: {} s)",
                started.elapsed().as_secs_f64(),
                jobs.len(),
                names[g],
                seconds.join(", ")
            );
            case
        })
        .collect();
    drop(file);
    std::fs::rename(PARTIAL, "collapse_recovery.csv").expect("the table is renamed");
    write_participants(&models, &cases);
    if fitted.is_empty() {
        println!(
            "{} participants simulated, none fitted: collapse_recovery_trials.csv and \
             collapse_recovery_truth.csv written",
            cases.len()
        );
        return;
    }
    let mut confusion = vec![vec![0usize; models.len()]; models.len()];
    let mut flagged = vec![0usize; models.len()];
    // The hypotheses' parameters, each recovered from the data of its own model: generating
    // values, estimates and 95 % intervals.
    const RECOVERED: [(usize, &str); 2] = [(1, "collapse_rate"), (2, "leak")];
    let mut recovered: [Recovery; 2] = Default::default();
    for case in &cases {
        let generator = &models[case.generator];
        for (&f, fit) in fitted.iter().zip(&case.fits) {
            let fitted = &models[f];
            let estimates: Vec<f64> = fit.estimates.iter().map(|e| e.estimate).collect();
            flagged[f] += usize::from(!fit.converged);
            for ((model, name), into) in RECOVERED.iter().zip(&mut recovered) {
                if f == case.generator && f == *model {
                    into.truth.push(value_of(generator, &case.truth, name));
                    into.estimate.push(value_of(fitted, &estimates, name));
                    into.interval.push(interval_of(fitted, fit, name));
                }
            }
        }
        let winner = (0..fitted.len())
            .min_by(|&a, &b| case.fits[a].bic.total_cmp(&case.fits[b].bic))
            .map(|k| fitted[k])
            .expect("at least one fit");
        confusion[case.generator][winner] += 1;
    }
    let summary = |label: &str, r: &Recovery| {
        if r.truth.is_empty() {
            return;
        }
        let errors = r
            .truth
            .iter()
            .zip(&r.estimate)
            .map(|(t, e)| (e - t).abs())
            .collect();
        let with_interval = r.interval.iter().flatten().count();
        let covered = r
            .truth
            .iter()
            .zip(&r.interval)
            .filter(|(t, i)| i.is_some_and(|(lo, hi)| lo <= **t && **t <= hi))
            .count();
        // A correlation needs at least three participants (fewer when refitting a few).
        let correlation = match pearson(&r.truth, &r.estimate) {
            Some(v) if r.truth.len() >= 3 => format!("r = {v:.3}"),
            _ => "r not computed (fewer than 3 participants)".to_string(),
        };
        println!(
            "{label}: {correlation}, median |error| {:.3} ({} participants); its 95 % interval \
             holds the generating value in {covered} of the {with_interval} fits that give one",
            median(errors),
            r.truth.len()
        );
    };
    let drawn = match &only {
        Some(o) => format!("participants {o:?} of {n}"),
        None => format!("{n} participants"),
    };
    println!(
        "{drawn} × {trials} trials per generating model, {starts} starts per fit, {} ranges",
        if wide { "spanning" } else { "orchard" }
    );
    summary(
        "collapse_rate (collapsing data, collapsing fit)",
        &recovered[0],
    );
    summary("leak (leaky data, leaky fit)", &recovered[1]);
    println!("model recovery by BIC (rows: generating model; columns: winning fitted model)");
    let header: Vec<String> = fitted.iter().map(|&f| format!("{:>9}", names[f])).collect();
    println!("{:>10} {}", "", header.join(" "));
    let mut rows: Vec<usize> = cases.iter().map(|c| c.generator).collect();
    rows.dedup();
    for g in rows {
        let counts: Vec<String> = fitted
            .iter()
            .map(|&f| format!("{:>9}", confusion[g][f]))
            .collect();
        println!("{:>10} {}", names[g], counts.join(" "));
    }
    let flags: Vec<String> = fitted
        .iter()
        .map(|&f| format!("{} {}", names[f], flagged[f]))
        .collect();
    println!(
        "fits flagged not converged: {} (of {} each)",
        flags.join(", "),
        cases.len()
    );
    println!(
        "time: {:.0} s on {} threads",
        started.elapsed().as_secs_f64(),
        rayon::current_num_threads()
    );
}
