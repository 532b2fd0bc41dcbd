//! The numerical first-passage engine (`first_passage::numerical`, the integral-equation method of
//! Buonocore, Nobile & Ricciardi 1987) against outside references: the mpmath table of the
//! closed-form Wiener density (tests/reference/first_passage_reference.csv, written by
//! generate_first_passage.py from the series of Navarro & Fuss 2009), an mpmath computation of a
//! linearly collapsing bound (generate_collapse.py), the Ornstein–Uhlenbeck special cases in
//! closed form, and a fine-step simulation.

use rand::{RngExt, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rand_distr::StandardNormal;
use std::path::Path;
use valuedrift::data::Subject;
use valuedrift::first_passage::Bound;
use valuedrift::first_passage::numerical::{Collapse, Grid, Process, solve, solve_settled};
use valuedrift::likelihood::SubjectLikelihood;
use valuedrift::model::components::uses_numerical_engine;
use valuedrift::model::{Model, built_in_models, parse_model};
use valuedrift::simulate::{
    SimulationSettings, orchard_design, orchard_generating_values, simulate_subject,
};

fn read_table(name: &str) -> Vec<std::collections::HashMap<String, String>> {
    let path = Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("tests/reference")
        .join(name);
    let mut reader =
        csv::Reader::from_path(&path).unwrap_or_else(|e| panic!("{}: {e}", path.display()));
    let header: Vec<String> = reader
        .headers()
        .unwrap()
        .iter()
        .map(str::to_string)
        .collect();
    reader
        .records()
        .map(|r| {
            header
                .iter()
                .cloned()
                .zip(r.unwrap().iter().map(str::to_string))
                .collect()
        })
        .collect()
}

fn number(row: &std::collections::HashMap<String, String>, name: &str) -> f64 {
    row[name].parse().unwrap()
}

#[test]
fn constant_bounds_without_leak_match_the_mpmath_wiener_table() {
    // Source: mpmath values of the Navarro & Fuss (2009) series, committed table. Rows with
    // across-trial variability are left out (the numerical engine has none). Domain (where the
    // engine's accuracy is stated): decision times from 0.05 s and from 0.1·d² (d the distance
    // from the start to the bound) to 5 s, start 0.2–0.8, boundary ≥ 0.5, ln f > −30. Outside
    // it, on the leading edge and for starts within a few grid spacings of a bound, the table's
    // points were off by 1e-2 to 8e-2 in ln f. Measured at the default grid (h = 0.002 s,
    // M = 200): worst 9.9e-4 with the drift by Girsanov's theorem (what the choice stages use),
    // 3.2e-3 solved at the drift where ln f > −10 (the grid's advection adds error).
    let mut worst: f64 = 0.0;
    let mut worst_direct: f64 = 0.0;
    let mut checked = 0;
    for row in read_table("first_passage_reference.csv") {
        if ["drift_sd", "start_range", "ndt_range"]
            .iter()
            .any(|c| number(&row, c) != 0.0)
        {
            continue;
        }
        let t = number(&row, "rt") - number(&row, "ndt");
        let expected = number(&row, "log_density");
        let a = number(&row, "boundary");
        let bound = Bound::parse(&row["bound"]).unwrap();
        let w = number(&row, "start");
        // Distance from the start to the bound whose density is checked.
        let d = if bound == Bound::Upper {
            (1.0 - w) * a
        } else {
            w * a
        };
        if !(0.1 * d * d..=5.0).contains(&t)
            || t < 0.05
            || !(0.2..=0.8).contains(&w)
            || a < 0.5
            || expected < -30.0
        {
            continue;
        }
        let drift = number(&row, "drift");
        let process = Process::new(0.0, a, w, 0.0, Collapse::Constant).unwrap();
        let solution = solve(&process, t, Grid::default()).unwrap();
        let got = solution.ln_density_at_drift(t, bound, drift).unwrap();
        worst = worst.max((got - expected).abs());
        if expected > -10.0 {
            let direct = solve(&process.with_drift(drift), t, Grid::default()).unwrap();
            let got = direct.ln_density(t, bound).unwrap();
            worst_direct = worst_direct.max((got - expected).abs());
        }
        checked += 1;
    }
    println!(
        "{checked} points: worst |Δ ln f| {worst:.2e} (drift by Girsanov), {worst_direct:.2e} \
         (solved at the drift, ln f > −10)"
    );
    assert!(checked >= 25, "{checked} points");
    assert!(worst < 2e-3, "worst |Δ ln f| = {worst:.2e}");
    assert!(worst_direct < 5e-3, "worst |Δ ln f| = {worst_direct:.2e}");
}

#[test]
fn linear_collapse_at_zero_drift_matches_the_mpmath_integral_equation() {
    // Source: tests/reference/generate_collapse.py, the two-bound Volterra equations of
    // Buonocore, Nobile & Ricciardi (1987) / Smith (2000) solved in mpmath at 30 digits (a method
    // independent of the engine's grid); only points whose two mpmath grids agree within 1e-4
    // in ln g are used. Measured: worst |Δ ln g| 2.7e-4 at the default grid.
    let mut worst: f64 = 0.0;
    let mut checked = 0;
    for row in read_table("collapse_reference.csv") {
        if number(&row, "step_difference") > 1e-4 {
            continue;
        }
        let t = number(&row, "t");
        let rate = number(&row, "collapse_rate");
        let process = Process::new(
            0.0,
            number(&row, "boundary"),
            number(&row, "start"),
            0.0,
            Collapse::Linear { rate },
        )
        .unwrap();
        let solution = solve(&process, t, Grid::default()).unwrap();
        let bound = Bound::parse(&row["bound"]).unwrap();
        let got = solution.ln_density(t, bound).unwrap();
        worst = worst.max((got - number(&row, "log_density")).abs());
        checked += 1;
    }
    println!("{checked} points: worst |Δ ln g| {worst:.2e}");
    assert!(checked >= 25, "{checked} points");
    assert!(worst < 1.5e-3, "worst |Δ ln g| = {worst:.2e}");
}

/// First passage of the Ornstein–Uhlenbeck process dX = −λX dt + dW from x > 0 to its mean
/// level 0: x/√(2π)·(λ/sinh λt)^{3/2}·exp(λt/2 − λx²e^{−λt}/(2 sinh λt)) (Ricciardi & Sato
/// 1988; Alili, Patie & Pedersen 2005; from memory, checked with mpmath to integrate to 1 for
/// λ = 2, x = 0.4, and it tends to Lévy's density x/√(2πt³)·e^{−x²/2t} as λ → 0).
fn ou_to_mean_level(t: f64, x: f64, leak: f64) -> f64 {
    let s = (leak * t).sinh();
    x / (2.0 * std::f64::consts::PI).sqrt()
        * (leak / s).powf(1.5)
        * (0.5 * leak * t - leak * x * x * (-leak * t).exp() / (2.0 * s)).exp()
}

#[test]
fn leak_towards_the_upper_bound_matches_the_ornstein_uhlenbeck_closed_form() {
    // The process dy = (v − λy)dt + dW with v = λ·S has its mean level at the upper bound S, so
    // its passage there is the OU passage to the mean level (closed form above). Boundary 4
    // (S = 2), start 0.9 (y₀ = 1.6), λ = 2: the lower bound, 8 stationary sd below the mean
    // level, takes a negligible share. (With boundary 2, 4 sd below, the late densities decayed
    // 1.5% faster than the single-bound closed form: the lower bound still absorbed.)
    // Measured: worst |Δ ln g| 2.9e-3 over 0.05–2 s at the default grid (drift 4 solved on the
    // grid: its advection is the larger error, as in the Wiener table's direct solves).
    let leak = 2.0;
    let process = Process::new(2.0 * leak, 4.0, 0.9, leak, Collapse::Constant).unwrap();
    let solution = solve(&process, 2.0, Grid::default()).unwrap();
    let mut worst: f64 = 0.0;
    for k in 1..=40 {
        let t = 0.05 * k as f64;
        let got = solution.ln_density(t, Bound::Upper).unwrap();
        let expected = ou_to_mean_level(t, 0.4, leak).ln();
        worst = worst.max((got - expected).abs());
    }
    println!("worst |Δ ln g| {worst:.2e}");
    assert!(worst < 5e-3, "worst |Δ ln g| = {worst:.2e}");
}

#[test]
fn leaky_absorption_probability_matches_the_scale_function() {
    // P(upper) = ∫_L^{y₀} s(y)dy / ∫_L^U s(y)dy with the scale density s(y) = exp(−2vy + λy²) of
    // dy = (v − λy)dt + dW (Karlin & Taylor 1981, ch. 15), integrated by Simpson's rule on 2000
    // intervals (error far below 1e-9 for this smooth integrand).
    for (drift, boundary, start, leak) in [(1.0, 1.5, 0.4, 3.0), (-0.5, 2.0, 0.6, 1.0)] {
        let half = 0.5 * boundary;
        let y0 = (start - 0.5) * boundary;
        let scale = |y: f64| (-2.0 * drift * y + leak * y * y).exp();
        let simpson = |lo: f64, hi: f64| {
            let n = 2000;
            let h = (hi - lo) / n as f64;
            (0..=n)
                .map(|i| {
                    let w = if i == 0 || i == n {
                        1.0
                    } else if i % 2 == 1 {
                        4.0
                    } else {
                        2.0
                    };
                    w * scale(lo + h * i as f64)
                })
                .sum::<f64>()
                * h
                / 3.0
        };
        let expected = simpson(-half, y0) / simpson(-half, half);
        let process = Process::new(drift, boundary, start, leak, Collapse::Constant).unwrap();
        let solution = solve_settled(&process, 2.0, 60.0, Grid::default(), 1e-9).unwrap();
        let end = solution.horizon();
        let up = solution.absorbed_by(end, Bound::Upper, None).unwrap();
        let down = solution.absorbed_by(end, Bound::Lower, None).unwrap();
        let got = up / (up + down);
        println!(
            "P(upper) {got:.6} vs {expected:.6}; total absorbed {:.6}",
            up + down
        );
        assert!((got - expected).abs() < 1e-3, "{got} vs {expected}");
        assert!((up + down - 1.0).abs() < 1e-3, "total {}", up + down);
    }
}

/// One path of dy = (v − λy)dt + dW between ±S(t) by Euler steps of `dt`, with the Brownian-bridge
/// probability exp(−2(S_k − y_k)(S_{k+1} − y_{k+1})/dt) of a crossing between steps (common
/// practice for discretely monitored passage); the passage is put at the step's middle.
fn simulated_passage(
    process: (f64, f64, f64, f64),
    half_width: &dyn Fn(f64) -> f64,
    dt: f64,
    rng: &mut ChaCha8Rng,
) -> (Bound, f64) {
    let (drift, boundary, start, leak) = process;
    let mut y = (start - 0.5) * boundary;
    let mut t = 0.0;
    loop {
        let s_now = half_width(t);
        let z: f64 = rng.sample(StandardNormal);
        let next = y + (drift - leak * y) * dt + dt.sqrt() * z;
        let s_next = half_width(t + dt);
        t += dt;
        if next >= s_next {
            return (Bound::Upper, t - 0.5 * dt);
        }
        if next <= -s_next {
            return (Bound::Lower, t - 0.5 * dt);
        }
        let u: f64 = rng.random();
        let cross_up = (-2.0 * (s_now - y) * (s_next - next) / dt).exp();
        let cross_down = (-2.0 * (s_now + y) * (s_next + next) / dt).exp();
        if u < cross_up {
            return (Bound::Upper, t - 0.5 * dt);
        }
        if u < cross_up + cross_down {
            return (Bound::Lower, t - 0.5 * dt);
        }
        y = next;
    }
}

/// The Kolmogorov–Smirnov distance between draws of (bound, time) and the engine's distribution
/// of the signed time (−t for the lower bound, t for the upper).
fn ks_distance(
    draws: &mut [(Bound, f64)],
    solution: &valuedrift::first_passage::numerical::Solution<f64>,
    drift: Option<f64>,
) -> f64 {
    let end = solution.horizon();
    let lower_total = solution.absorbed_by(end, Bound::Lower, drift).unwrap();
    let upper_total = solution.absorbed_by(end, Bound::Upper, drift).unwrap();
    let total = lower_total + upper_total;
    let cdf = |bound: Bound, t: f64| -> f64 {
        let t = t.min(end);
        match bound {
            Bound::Lower => {
                (lower_total - solution.absorbed_by(t, Bound::Lower, drift).unwrap()) / total
            }
            Bound::Upper => {
                (lower_total + solution.absorbed_by(t, Bound::Upper, drift).unwrap()) / total
            }
        }
    };
    let signed = |d: &(Bound, f64)| if d.0 == Bound::Upper { d.1 } else { -d.1 };
    draws.sort_by(|x, y| signed(x).total_cmp(&signed(y)));
    let n = draws.len() as f64;
    draws
        .iter()
        .enumerate()
        .map(|(i, d)| {
            let f = cdf(d.0, d.1);
            (f - i as f64 / n).abs().max((f - (i + 1) as f64 / n).abs())
        })
        .fold(0.0, f64::max)
}

/// (name, (drift, boundary, start, leak), shape, drift by Girsanov's theorem?).
type Case = (&'static str, (f64, f64, f64, f64), Collapse<f64>, bool);

#[test]
fn leak_and_collapse_match_a_fine_step_simulation() {
    // Kolmogorov–Smirnov at fixed seeds: 3000 Euler paths (dt = 1e-4 s, bridge-corrected)
    // against the engine's distribution; the critical distance at α = 0.001 is 1.95/√n = 0.036
    // (common practice). Cases: Weibull collapse with leak (solved at the drift), urgency
    // and linear collapse without leak (solved at drift 0, the drift by Girsanov's theorem).
    let n = 3000;
    let cases: Vec<Case> = vec![
        (
            "weibull+leak",
            (0.8, 1.6, 0.45, 1.5),
            Collapse::Weibull {
                fraction: 0.7,
                scale: 0.6,
                shape: 3.0,
            },
            false,
        ),
        (
            "urgency",
            (-0.5, 1.4, 0.55, 0.0),
            Collapse::Urgency { gain: 1.5 },
            true,
        ),
        (
            "linear",
            (1.2, 1.2, 0.5, 0.0),
            Collapse::Linear { rate: 0.4 },
            true,
        ),
    ];
    for (seed, (name, parameters, collapse, tilted)) in cases.into_iter().enumerate() {
        let (drift, boundary, start, leak) = parameters;
        let solve_at = if tilted { 0.0 } else { drift };
        let process = Process::new(solve_at, boundary, start, leak, collapse).unwrap();
        let solution = solve_settled(&process, 2.0, 30.0, Grid::default(), 1e-9).unwrap();
        let half_width = |t: f64| {
            let (s, _) = collapse.factor(t);
            0.5 * boundary * s
        };
        let mut rng = ChaCha8Rng::seed_from_u64(100 + seed as u64);
        let mut draws: Vec<(Bound, f64)> = (0..n)
            .map(|_| simulated_passage(parameters, &half_width, 1e-4, &mut rng))
            .collect();
        let tilt = tilted.then_some(drift);
        let distance = ks_distance(&mut draws, &solution, tilt);
        // The engine's own sampler against its distribution (exact up to its interpolation).
        let mut sampled: Vec<(Bound, f64)> = (0..n)
            .map(|_| solution.sample(tilt, &mut rng).unwrap().unwrap())
            .collect();
        let sampler_distance = ks_distance(&mut sampled, &solution, tilt);
        println!("{name}: KS distance {distance:.4} (simulation), {sampler_distance:.4} (sampler)");
        assert!(distance < 1.95 / (n as f64).sqrt(), "{name}: {distance}");
        assert!(
            sampler_distance < 1.95 / (n as f64).sqrt(),
            "{name}: {sampler_distance}"
        );
    }
}

/// ∂ln L/∂θ_j by central differences with step 1e-6 (common practice).
fn central_difference(lik: &SubjectLikelihood<'_>, theta: &[f64], j: usize) -> f64 {
    let h = 1e-6;
    let at = |d: f64| {
        let mut t = theta.to_vec();
        t[j] += d;
        lik.evaluate(&t).ln_likelihood
    };
    (at(h) - at(-h)) / (2.0 * h)
}

/// The built-in models whose choice stage uses the numerical engine (four of them).
fn numerical_engine_models() -> Vec<Model> {
    let models: Vec<Model> = built_in_models()
        .into_iter()
        .filter(|m| uses_numerical_engine(m.component_names[3]))
        .collect();
    assert_eq!(models.len(), 4);
    models
}

/// An orchard participant of `trials` trials simulated from `model` at generating values drawn
/// inside the documented ranges (src/simulate.rs): (those values, the participant).
fn orchard_participant(model: &Model, trials: usize, rng: &mut ChaCha8Rng) -> (Vec<f64>, Subject) {
    let natural = orchard_generating_values(model, rng).unwrap();
    let design = orchard_design("s", "g", trials, rng);
    let subject =
        simulate_subject(model, &natural, &design, SimulationSettings::default(), rng).unwrap();
    (natural, subject)
}

#[test]
fn gradient_of_every_numerical_engine_model_matches_central_differences() {
    // Central differences, step 1e-6 (common practice), against the engine's forward
    // sensitivities, on a simulated 60-trial orchard participant at generating values inside
    // the documented ranges (src/simulate.rs), for every built-in model whose choice stage uses
    // the numerical engine. Tolerance 1e-4 relative: the grid is constant between the rungs of
    // its distance ladder, so the sensitivities are the objective's derivatives (before the
    // ladder, with the grid moving with boundary and start, differences of 1.9e-4 were seen;
    // measured now: 2.0e-6).
    let mut rng = ChaCha8Rng::seed_from_u64(16);
    let mut worst: f64 = 0.0;
    for model in &numerical_engine_models() {
        let (natural, subject) = orchard_participant(model, 60, &mut rng);
        let timed = subject.trials.iter().filter(|t| t.rt.is_some()).count();
        assert_eq!(
            timed, 60,
            "{}: every simulated trial has a time",
            model.name
        );
        let lik = SubjectLikelihood::new(model, &subject, None).unwrap();
        let free: Vec<f64> = model.free_slots().iter().map(|&s| natural[s]).collect();
        let theta = lik.unconstrained(&free);
        let e = lik.evaluate(&theta);
        assert!(e.ln_likelihood.is_finite(), "{}", model.name);
        for j in 0..theta.len() {
            let numeric = central_difference(&lik, &theta, j);
            let relative = (numeric - e.gradient[j]).abs() / numeric.abs().max(1.0);
            worst = worst.max(relative);
            assert!(
                relative < 1e-4,
                "{} parameter {j}: analytic {} numeric {numeric}",
                model.name,
                e.gradient[j]
            );
        }
    }
    println!("worst relative difference {worst:.1e}");
}

#[test]
fn collapse_parameters_outside_their_domain_are_refused_naming_the_key() {
    // Source: the shapes' domains (src/first_passage/numerical/shape.rs): a collapse fraction
    // above 1 would turn the bounds inside out, a negative leak is not a leak.
    let weibull = built_in_models()
        .into_iter()
        .find(|m| m.name == "gainloss-collapse-weibull")
        .unwrap()
        .text;
    let leaky = built_in_models()
        .into_iter()
        .find(|m| m.name == "gainloss-leaky")
        .unwrap()
        .text;
    for (text, from, to, key) in [
        (
            &weibull,
            "[parameters.collapse]\nlower = 0.0\nupper = 1.0",
            "[parameters.collapse]\nlower = 0.0\nupper = 1.5",
            "parameters.collapse",
        ),
        (
            &leaky,
            "[parameters.leak]\nlower = 0.0",
            "[parameters.leak]\nlower = -1.0",
            "parameters.leak",
        ),
    ] {
        assert!(text.contains(from));
        let err = parse_model(&text.replace(from, to), "bad.toml").unwrap_err();
        assert!(err.key.starts_with(key), "{err}");
        assert_eq!(err.origin, "bad.toml");
    }
}

#[test]
fn drift_nodes_reproduce_a_solve_at_the_drift_itself_with_leak() {
    // Source: the engine's own solve at each drift (checked above against the Ornstein–Uhlenbeck
    // closed forms and the scale function); this bounds the error the interpolation between drift
    // nodes (cubic Lagrange, Abramowitz & Stegun 1964, 25.2.13) adds to it. Drifts between nodes,
    // leaks across the orchard's range (0.5–3), boundaries 1–2.5, times from the leading edge to
    // the tail, drifts up to 17 where ln g > −30. Measured at the default spacing (0.5, six nodes):
    // worst |Δ ln g| 5.4e-5 on 540 points, none left to a direct solve (four nodes gave 4.9e-4 at
    // boundary 2.5, leak 3, t = 2.9 s; nodes spaced like A·sinh(jδ), wider at strong drifts, 1e-1).
    use valuedrift::first_passage::numerical::{NODES, interpolate, nodes_around};
    let mut worst: f64 = 0.0;
    let (mut checked, mut declined) = (0, 0);
    for (boundary, start) in [(1.0, 0.5), (1.6, 0.35), (2.5, 0.6)] {
        for leak in [0.5, 1.5, 3.0] {
            for drift in [-14.3, -8.7, -3.81, -1.23, 0.37, 2.07, 4.62, 9.6, 17.2] {
                let process = |v: f64| Process::new(v, boundary, start, leak, Collapse::Constant);
                let horizon = 3.0;
                let direct = solve(&process(drift).unwrap(), horizon, Grid::default()).unwrap();
                let nodes = nodes_around(drift);
                let solves: Vec<_> = nodes
                    .iter()
                    .map(|&u| solve(&process(u).unwrap(), horizon, Grid::default()).unwrap())
                    .collect();
                for t in [0.15, 0.4, 0.8, 1.5, 2.9] {
                    for bound in [Bound::Upper, Bound::Lower] {
                        let expected = direct.ln_density(t, bound).unwrap();
                        if expected < -30.0 {
                            continue;
                        }
                        let mut values = [0.0; NODES];
                        for ((value, solution), &u) in values.iter_mut().zip(&solves).zip(&nodes) {
                            *value = solution.ln_density(t, bound).unwrap()
                                - solution.drift_exponent(t, bound, u);
                        }
                        // Where a node's density is zero on the grid the stage solves at the
                        // drift itself; counted, not compared.
                        let Some(between) = interpolate(drift, nodes, values) else {
                            declined += 1;
                            continue;
                        };
                        let got = between + direct.drift_exponent(t, bound, drift);
                        worst = worst.max((got - expected).abs());
                        checked += 1;
                    }
                }
            }
        }
    }
    println!("{checked} points: worst |Δ ln g| {worst:.2e}; {declined} left to a direct solve");
    assert!(checked >= 400, "{checked} points");
    assert!(worst < 1e-4, "worst |Δ ln g| = {worst:.2e}");
}

#[test]
fn fits_through_the_engine_reported_converged_sit_where_the_objective_is_flat() {
    // Source: common practice (at a maximum the objective does not rise in any direction: here
    // a step of 1e-5 to either side along every interior parameter rises by less than 2e-3 per
    // unit). The engine's derivatives hold its grid fixed and the objective steps where the
    // grid changes, so the fitter judges these models by the objective itself; this recomputes
    // the rise independently at the reported estimates of simulated orchard participants
    // (gainloss-collapse-linear, 300 trials, fixed seed).
    use valuedrift::fit::{FitOptions, fit_subject};
    use valuedrift::model::load_model;
    use valuedrift::simulate::orchard_participant;
    let model = load_model("gainloss-collapse-linear").unwrap();
    let mut rng = ChaCha8Rng::seed_from_u64(20_261_203);
    let mut converged = 0;
    for i in 0..3 {
        let subject = orchard_participant(&model, &format!("s{i}"), "sim", 300, &mut rng).unwrap();
        let lik = SubjectLikelihood::new(&model, &subject, None).unwrap();
        let fit = fit_subject(&lik, &FitOptions::default());
        if !fit.converged {
            println!("participant {i}: {}", fit.status);
            continue;
        }
        converged += 1;
        for (name, rise) in crate::common::rises_beside_fit(&lik, &fit) {
            assert!(
                rise < 2e-3,
                "participant {i}, {name}: the objective rises at {rise:.2e} beside a fit reported \
                 converged ({})",
                fit.status
            );
        }
    }
    println!("{converged} of 3 fits converged");
    assert!(converged >= 1, "no fit to check");
}

#[test]
fn the_search_on_a_coarser_grid_then_the_models_own_finds_the_optimum_of_a_search_on_its_own() {
    // Source: common practice (a multilevel search must reach the optimum the plain search
    // reaches; Nash 2000 for the method). The fitter searches numerical-engine models on a
    // coarser grid and refines on the model's own; here the plain search (every start, face and
    // probe on the model's own grid) is run beside it on simulated orchard participants
    // (gainloss-collapse-linear, 300 trials, fixed seed), and the refined fit's log-posterior
    // must be at least the plain search's best, to 1e-4.
    use valuedrift::fit::search::search;
    use valuedrift::fit::starts::StartPlan;
    use valuedrift::fit::{FitOptions, fit_subject};
    use valuedrift::model::load_model;
    use valuedrift::simulate::orchard_participant;
    let model = load_model("gainloss-collapse-linear").unwrap();
    assert!(model.on_coarser_grid().is_some());
    let mut rng = ChaCha8Rng::seed_from_u64(20_261_204);
    let options = FitOptions::default();
    for i in 0..3 {
        let subject = orchard_participant(&model, &format!("s{i}"), "sim", 300, &mut rng).unwrap();
        let lik = SubjectLikelihood::new(&model, &subject, None).unwrap();
        let fit = fit_subject(&lik, &options);
        let free = model.free_slots();
        let natural: Vec<f64> = free.iter().map(|&s| fit.estimates[s].estimate).collect();
        let refined = lik.evaluate(&lik.unconstrained(&natural));
        let plain = search(
            &lik,
            &StartPlan::new(&lik, options.seed),
            options.starts,
            options.max_iterations,
        );
        let plain_best = plain.runs[plain.best].objective;
        println!(
            "participant {i}: refined {:.6} ({}), plain {plain_best:.6} ({})",
            refined.ln_likelihood + refined.ln_prior,
            fit.status,
            plain.verdict.status
        );
        assert!(
            refined.ln_likelihood + refined.ln_prior >= plain_best - 1e-4,
            "participant {i}: the refined fit's log-posterior {} is below the plain search's {}",
            refined.ln_likelihood + refined.ln_prior,
            plain_best
        );
    }
}

#[test]
fn mirrored_drift_nodes_give_the_likelihood_and_gradient_of_direct_solves() {
    // Source: the reflection symmetry of a diffusion between bounds symmetric about the
    // midpoint, g_upper(t; v, w) = g_lower(t; −v, 1 − w) (common practice). With the start
    // exactly midway the leaky stage serves drift nodes below zero from the solve at −node with
    // the other bound and the start's derivative negated; a start 1e-9 away makes it solve every
    // node directly. Both must give the same ln L and gradient (to 1e-6; the moved start itself
    // changes ln L by about 1e-9 × its slope), and the start's derivative on the mirrored path
    // must match central differences (step 1e-6, common practice) taken on the direct path.
    let leaky = built_in_models()
        .into_iter()
        .find(|m| m.name == "gainloss-leaky")
        .unwrap();
    let text = format!(
        "{}\n[parameters.start]\nlower = 0.2\nupper = 0.8\nstart = [0.4, 0.6]\n\
         description = \"starting point\"\n",
        leaky.text
    );
    let model = parse_model(&text, "leaky with a free start").unwrap();
    let mut rng = ChaCha8Rng::seed_from_u64(61);
    let mut natural = orchard_generating_values(&leaky, &mut rng).unwrap();
    let slot = model
        .parameters
        .iter()
        .position(|p| p.name == "start")
        .unwrap();
    natural.insert(slot, 0.5);
    let design = orchard_design("s", "g", 60, &mut rng);
    let subject = simulate_subject(
        &model,
        &natural,
        &design,
        SimulationSettings::default(),
        &mut rng,
    )
    .unwrap();
    let lik = SubjectLikelihood::new(&model, &subject, None).unwrap();
    let free_slots = model.free_slots();
    let j = free_slots.iter().position(|&s| s == slot).unwrap();
    let at_start = |start: f64| {
        let free: Vec<f64> = free_slots
            .iter()
            .map(|&s| if s == slot { start } else { natural[s] })
            .collect();
        lik.unconstrained(&free)
    };
    let theta = at_start(0.5);
    assert_eq!(lik.natural(&theta)[j], 0.5, "the start sits exactly midway");
    let mirrored = lik.evaluate(&theta);
    let direct = lik.evaluate(&at_start(0.5 + 1e-9));
    assert!(mirrored.ln_likelihood.is_finite());
    assert!(
        (mirrored.ln_likelihood - direct.ln_likelihood).abs() < 1e-6,
        "ln L mirrored {} direct {}",
        mirrored.ln_likelihood,
        direct.ln_likelihood
    );
    for (k, (m, d)) in mirrored.gradient.iter().zip(&direct.gradient).enumerate() {
        assert!(
            (m - d).abs() < 1e-6 * d.abs().max(1.0),
            "parameter {k}: mirrored {m} direct {d}"
        );
    }
    let numeric = central_difference(&lik, &theta, j);
    assert!(
        (numeric - mirrored.gradient[j]).abs() < 1e-4 * numeric.abs().max(1.0),
        "start: mirrored {} numeric {numeric}",
        mirrored.gradient[j]
    );
}

#[test]
fn a_response_the_model_gives_no_chance_makes_ln_l_minus_infinity_as_the_trial_scores_sum() {
    // Source: ln L is the sum of the trials' log-probabilities (common practice), and a response
    // at or before the non-decision time has density zero: the first-passage time is positive
    // and its density vanishes faster than any power as the time goes to zero (Feller 1968,
    // the small-time series; Ratcliff 1978), and the engine's grid starts after zero. So one
    // such response makes the sum −∞ whatever the other trials add. The likelihood stops
    // summing at that trial (src/likelihood/mod.rs, `run`); this checks, on every model whose
    // choice stage uses the numerical engine, that the shortcut gives what the full per-trial
    // scores of `trace` sum to, and that the fitter is handed no finite gradient there (a
    // derivative of −∞ is undefined).
    let mut rng = ChaCha8Rng::seed_from_u64(61);
    // On a coarse grid (the recovery study's: step 0.004 s, 100 points): the check is of the
    // sum, not of the engine's accuracy, and the leaky stage's solves at drifts of tens per
    // second are slow on the default grid.
    let models: Vec<_> = numerical_engine_models()
        .into_iter()
        .map(|m| {
            let coarse = m
                .text
                .replacen("[choice]\n", "[choice]\nstep = 0.004\npoints = 100\n", 1);
            assert_ne!(coarse, m.text, "{}: a [choice] table", m.name);
            let mut coarse = parse_model(&coarse, "coarse grid").unwrap();
            coarse.name = m.name;
            coarse
        })
        .collect();
    let mut reached = Vec::new();
    for model in &models {
        let (natural, subject) = orchard_participant(model, 24, &mut rng);
        let lik = SubjectLikelihood::new(model, &subject, None).unwrap();
        // ln L at θ, with the check on its gradient.
        let ln_l = |theta: &[f64]| -> f64 {
            let e = lik.evaluate(theta);
            assert!(
                e.ln_likelihood > f64::NEG_INFINITY || e.gradient.iter().all(|g| !g.is_finite()),
                "{}: gradient {:?} at ln L = −∞",
                model.name,
                e.gradient
            );
            e.ln_likelihood
        };
        // (ln L, the sum of trace's per-trial scores, how many of them are −∞) at θ.
        let scores = |theta: &[f64]| -> (f64, f64, usize) {
            let per_trial: Vec<f64> = lik
                .trace(&lik.natural(theta))
                .iter()
                .filter_map(|t| t.ln_likelihood)
                .collect();
            let impossible = per_trial
                .iter()
                .filter(|s| **s == f64::NEG_INFINITY)
                .count();
            (ln_l(theta), per_trial.iter().sum(), impossible)
        };
        let free: Vec<f64> = model.free_slots().iter().map(|&s| natural[s]).collect();
        let truth = lik.unconstrained(&free);
        // The corner of the box where a fit's long first step had landed (2026-12-03): every
        // parameter at its upper bound but ndt at zero (a millionth of the range inside, where
        // θ is finite). Drifts of tens per second against a wide boundary leave responses no
        // chance the engine can represent.
        let bounds = lik.free_bounds();
        let corner_natural: Vec<f64> = (0..free.len())
            .map(|j| {
                let (lower, upper) = bounds[j];
                let inset = 1e-6 * (upper - lower);
                if model.parameters[model.free_slots()[j]].name == "ndt" {
                    lower + inset
                } else {
                    upper - inset
                }
            })
            .collect();
        let corner = lik.unconstrained(&corner_natural);
        // Bisect the segment from the generating values to the corner for the point where the
        // first response loses its chance: there one or a few trials decide ln L.
        let along = |t: f64| -> Vec<f64> {
            truth
                .iter()
                .zip(&corner)
                .map(|(a, b)| a + t * (b - a))
                .collect()
        };
        if ln_l(&corner) > f64::NEG_INFINITY {
            // This stage's engine still gives every response a chance there: nothing to cut.
            continue;
        }
        reached.push(model.name.as_str());
        let (mut possible, mut impossible) = (0.0, 1.0);
        for _ in 0..20 {
            let mid = 0.5 * (possible + impossible);
            if ln_l(&along(mid)) > f64::NEG_INFINITY {
                possible = mid;
            } else {
                impossible = mid;
            }
        }
        let (whole, summed, none) = scores(&along(possible));
        assert_eq!(none, 0, "{}: no trial −∞ where ln L is finite", model.name);
        assert!(
            (whole - summed).abs() <= 1e-9 * summed.abs().max(1.0),
            "{}: ln L {whole} against the trials' sum {summed}",
            model.name
        );
        let (whole, summed, some) = scores(&along(impossible));
        println!(
            "{}: {some} of {} trials −∞ at {impossible:.6} of the way to the corner",
            model.name,
            subject.trials.len()
        );
        assert!(some >= 1, "{}: some trial −∞ where ln L is", model.name);
        assert_eq!(summed, f64::NEG_INFINITY, "{}", model.name);
        assert_eq!(whole, f64::NEG_INFINITY, "{}", model.name);
    }
    println!("ln L reached −∞ on the way to the corner: {reached:?}");
    assert!(
        reached.contains(&"gainloss-leaky"),
        "the leaky model, whose fits met such points, reached none: {reached:?}"
    );
}
