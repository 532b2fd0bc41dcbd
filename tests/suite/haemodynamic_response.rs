//! The canonical double-gamma haemodynamic response against scipy.stats.gamma (reference table
//! generated offline by tests/reference/generate_hrf.py), and the convolution against its
//! definition: impulse response, linearity, boxcars as integrals of the kernel.

use valuedrift::exports::hrf::{DoubleGamma, Event, Timing, convolve, microtime_input};

/// Rows (kind, t, value) of tests/reference/hrf_reference.csv.
fn reference() -> Vec<(String, f64, f64)> {
    let path = concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/tests/reference/hrf_reference.csv"
    );
    let mut reader = csv::Reader::from_path(path).unwrap();
    reader
        .records()
        .map(|r| {
            let r = r.unwrap();
            (
                r[0].to_string(),
                r[1].parse().unwrap(),
                r[2].parse().unwrap(),
            )
        })
        .collect()
}

fn rows(kind: &str) -> Vec<(f64, f64)> {
    reference()
        .into_iter()
        .filter(|r| r.0 == kind)
        .map(|r| (r.1, r.2))
        .collect()
}

fn relative(a: f64, b: f64) -> f64 {
    (a - b).abs() / b.abs()
}

#[test]
fn kernel_values_and_peak_match_the_double_gamma_of_scipy() {
    let hrf = DoubleGamma::CANONICAL;
    let values = rows("value");
    assert!(values.len() >= 20);
    // h(t) = gamma.pdf(t, 6) − gamma.pdf(t, 16)/6 (scipy.stats.gamma; generate_hrf.py).
    // Relative to the size of the two terms, g1 + c·g2 (scipy; generate_hrf.py): near the zero
    // crossing of h (about 12 s) their difference loses digits in any implementation.
    let times: Vec<f64> = values.iter().map(|v| v.0).collect();
    let magnitude = rows("magnitude");
    for (((t, expected), got), (t2, size)) in values.iter().zip(hrf.values(&times)).zip(magnitude) {
        assert_eq!(*t, t2);
        assert!(
            (got - expected).abs() < 1e-12 * size,
            "h({t}) = {got}, scipy {expected}"
        );
    }
    // Peak: root of h' by scipy.optimize.brentq (generate_hrf.py), about 4.9985 s.
    let (t_peak, h_peak) = rows("peak")[0];
    let peak = hrf.peak_time();
    assert!((peak - t_peak).abs() < 1e-9, "peak {peak}, scipy {t_peak}");
    assert!(relative(hrf.value(peak), h_peak) < 1e-12);
    // Undershoot minimum (same method): value there.
    let (t_dip, h_dip) = rows("undershoot")[0];
    assert!(relative(hrf.value(t_dip), h_dip) < 1e-12);
    assert!(h_dip < 0.0);
    // No response before the event (the gamma densities are zero for t ≤ 0; definition).
    assert_eq!(hrf.value(0.0), 0.0);
    assert_eq!(hrf.value(-3.0), 0.0);
}

#[test]
fn sampled_kernel_has_unit_area_and_the_formula_s_shape() {
    let hrf = DoubleGamma::CANONICAL;
    let dt = 2.0 / 16.0;
    let k = hrf.sampled(dt);
    // 32 s at δ = 0.125 s: j = 0 … 256 (definition of the grid).
    assert_eq!(k.len(), 257);
    // Unit area on the grid: δ Σ k_j = 1 (the normalisation's definition).
    assert!((dt * k.iter().sum::<f64>() - 1.0).abs() < 1e-12);
    // Proportional to h(j δ) from scipy at the grid times of the reference table (t = 2, 4, …
    // are multiples of δ), with one common factor: the grid area of h, which is close to the
    // integral H(32) = gamma.cdf(32, 6) − gamma.cdf(32, 16)/6 (scipy; generate_hrf.py).
    let h32 = rows("integral").last().unwrap().1;
    let area = dt * (0..257).map(|j| hrf.value(j as f64 * dt)).sum::<f64>();
    let magnitude = rows("magnitude");
    for (t, h) in rows("value") {
        let j = t / dt;
        if j.fract() == 0.0 {
            let size = magnitude.iter().find(|m| m.0 == t).unwrap().1;
            let got = k[j as usize];
            assert!((got - h / area).abs() < 1e-12 * size / area, "k at {t} s");
        }
    }
    // Riemann-sum bound (from memory: |δ Σ f − ∫ f| ≤ δ·total variation of f, plus the
    // endpoint term δ|h(32)|), total variation of h ≤ 2 (peak − undershoot) (shape in the table).
    let variation = 2.0 * (rows("peak")[0].1 - rows("undershoot")[0].1);
    assert!(
        (area - h32).abs() <= dt * (variation + hrf.value(32.0).abs()),
        "grid area {area}, integral {h32}"
    );
}

fn impulse(onset: f64, amplitude: f64) -> Event {
    Event {
        onset,
        duration: 0.0,
        amplitude,
    }
}

#[test]
fn a_unit_impulse_reproduces_the_sampled_kernel() {
    // Convolving a unit impulse (a delta of area 1) with k returns k shifted to the onset
    // (definition of convolution); sampled at the start of each scan t_n = n·TR.
    let hrf = DoubleGamma::CANONICAL;
    let timing = Timing {
        tr: 2.0,
        scans: 30,
        bins: 16,
    };
    let k = hrf.sampled(timing.dt());
    let onset = 3.0; // on the grid: bin 24
    for amplitude in [1.0, 2.5] {
        let y = convolve(&[impulse(onset, amplitude)], &hrf, timing);
        assert_eq!(y.len(), 30);
        for (n, got) in y.iter().enumerate() {
            let lag = 16 * n as i64 - 24;
            let expected = if (0..k.len() as i64).contains(&lag) {
                amplitude * k[lag as usize]
            } else {
                0.0
            };
            assert!(
                (got - expected).abs() <= 1e-13 * expected.abs().max(1e-3),
                "scan {n}: {got} against {expected}"
            );
        }
        // The sampled regressor peaks near onset + peak time (3 + 5 s: scan 4, t = 8 s).
        let best = (0..30).max_by(|&a, &b| y[a].total_cmp(&y[b])).unwrap();
        assert_eq!(best, 4);
    }
}

#[test]
fn convolution_is_linear() {
    // Linearity of convolution (definition): the response to two events is the sum of the
    // responses to each; scaling an amplitude scales its response.
    let hrf = DoubleGamma::CANONICAL;
    let timing = Timing {
        tr: 1.5,
        scans: 60,
        bins: 16,
    };
    let a = impulse(4.1, 1.5);
    let b = Event {
        onset: 10.37,
        duration: 3.3,
        amplitude: -0.7,
    };
    let both = convolve(&[a, b], &hrf, timing);
    let ya = convolve(&[a], &hrf, timing);
    let yb = convolve(&[b], &hrf, timing);
    let b2 = Event {
        amplitude: -1.4,
        ..b
    };
    let yb2 = convolve(&[b2], &hrf, timing);
    let scale = both.iter().map(|y| y.abs()).fold(0.0, f64::max);
    assert!(scale > 0.1);
    for n in 0..60 {
        assert!((both[n] - ya[n] - yb[n]).abs() < 1e-12 * scale, "scan {n}");
        assert!((yb2[n] - 2.0 * yb[n]).abs() < 1e-12 * scale, "scan {n}");
    }
}

#[test]
fn a_boxcar_equals_the_integral_of_the_kernel_over_it() {
    let hrf = DoubleGamma::CANONICAL;
    let (onset, duration) = (4.0, 6.0);
    let boxcar = Event {
        onset,
        duration,
        amplitude: 1.0,
    };
    // Exactly, on the grid: a boxcar of height 1 is δ·(one unit impulse per microtime bin it
    // covers) (the definition of the discretised input: area δ per bin).
    let timing = Timing {
        tr: 1.0,
        scans: 45,
        bins: 16,
    };
    let dt = timing.dt();
    let sticks: Vec<Event> = (0..96)
        .map(|m| impulse(onset + m as f64 * dt, dt))
        .collect();
    let x_box = microtime_input(&[boxcar], timing);
    let x_sticks = microtime_input(&sticks, timing);
    for (a, b) in x_box.iter().zip(&x_sticks) {
        assert!((a - b).abs() < 1e-12);
    }
    // Against the continuous definition y(t) = ∫_o^{o+d} k(t − s) ds
    //   = [H(t − o) − H(t − o − d)] / H(32), H(u) = ∫_0^u h (u clamped to [0, 32], the kernel's
    // support), H from scipy.stats.gamma.cdf at whole seconds (generate_hrf.py). The discrete
    // sum is a Riemann sum of the integral: error ≤ δ·total variation of the normalised kernel
    // (from memory), plus the normalisation's own Riemann error (previous test's bound).
    let table = rows("integral");
    let big_h = |u: f64| {
        let u = u.clamp(0.0, 32.0);
        let (t, v) = table[u as usize];
        assert_eq!(t, u);
        v
    };
    let h32 = big_h(32.0);
    let variation = 2.0 * (rows("peak")[0].1 - rows("undershoot")[0].1);
    let error = |bins: usize| -> f64 {
        let timing = Timing { bins, ..timing };
        let y = convolve(&[boxcar], &hrf, timing);
        y.iter()
            .enumerate()
            .map(|(n, got)| {
                let t = n as f64;
                let exact = (big_h(t - onset) - big_h(t - onset - duration)) / h32;
                (got - exact).abs()
            })
            .fold(0.0, f64::max)
    };
    let coarse = error(16);
    let bound = 2.0 * (variation + hrf.value(32.0).abs()) / (16.0 * h32);
    assert!(coarse <= bound, "max error {coarse}, bound {bound}");
    // First-order convergence of a Riemann sum (from memory): 4 times finer, about 4 times
    // smaller error.
    let fine = error(64);
    assert!(fine < coarse / 3.0, "16 bins {coarse}, 64 bins {fine}");
    // A sustained unit input reaches the plateau 1 once it has lasted the kernel's length
    // (unit area: δ Σ k = 1, the normalisation's definition).
    let long = Event {
        onset: 0.0,
        duration: 100.0,
        amplitude: 1.0,
    };
    let y = convolve(&[long], &hrf, timing);
    for (n, value) in y.iter().enumerate().take(45).skip(33) {
        assert!((value - 1.0).abs() < 1e-12, "scan {n}: {value}");
    }
}

#[test]
fn the_response_is_causal_and_sampled_at_the_start_of_each_scan() {
    // An event affects only scans that start after it (h(t) = 0 for t ≤ 0, definition), and
    // scan n is sampled at t_n = n·TR: an impulse at 17 s changes scan 9 (t = 18 s) by the
    // kernel at 1 s and no earlier scan; one after the last scan changes nothing.
    let hrf = DoubleGamma::CANONICAL;
    let timing = Timing {
        tr: 2.0,
        scans: 10,
        bins: 16,
    };
    let base = convolve(&[impulse(2.0, 1.0)], &hrf, timing);
    let with_late = convolve(&[impulse(2.0, 1.0), impulse(17.0, 1.0)], &hrf, timing);
    assert_eq!(base[..9], with_late[..9]);
    let k = hrf.sampled(timing.dt());
    assert!((with_late[9] - base[9] - k[8]).abs() < 1e-12);
    assert!(k[8] > 0.0);
    let after = convolve(&[impulse(2.0, 1.0), impulse(20.5, 1.0)], &hrf, timing);
    assert_eq!(base, after);
}
