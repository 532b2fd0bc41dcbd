//! Properties of the first-passage engine that follow from published results, checked with
//! integration rules written here (independent of the engine's own quadrature).

use valuedrift::first_passage::{
    Bound, DiffusionParams, bound_probability, cdf, ln_density, ln_density_with_gradient,
    mean_decision_time, mean_decision_time_given, survival,
};

/// Composite Simpson's rule on [lo, hi] with n (even) intervals.
fn simpson(lo: f64, hi: f64, n: usize, f: impl Fn(f64) -> f64) -> f64 {
    let h = (hi - lo) / n as f64;
    let mut total = f(lo) + f(hi);
    for i in 1..n {
        let weight = if i % 2 == 1 { 4.0 } else { 2.0 };
        total += weight * f(lo + i as f64 * h);
    }
    total * h / 3.0
}

/// ∫_0^∞ of a first-passage integrand by Simpson's rule in log-time (s = e^y).
fn integrate_time(f: impl Fn(f64) -> f64) -> f64 {
    simpson(-14.0, 6.0, 40_000, |y| {
        let s = y.exp();
        s * f(s)
    })
}

fn sets() -> Vec<DiffusionParams> {
    [
        (0.0, 1.0, 0.5, 0.0),
        (1.5, 1.2, 0.3, 0.2),
        (-2.5, 2.0, 0.7, 0.1),
        (4.0, 0.8, 0.5, 0.3),
        (-0.7, 3.0, 0.15, 0.05),
        (0.3, 1.8, 0.85, 0.4),
    ]
    .iter()
    .map(|&(v, a, w, t)| DiffusionParams::new(v, a, w, t).unwrap())
    .collect()
}

#[test]
fn density_integrates_to_the_closed_form_bound_probability() {
    // ∫ f_b(t) dt = P_b, with P_upper = (1 − e^{−2vaw})/(1 − e^{−2va}) (Cox & Miller 1965, §5.7).
    for p in sets() {
        let mut total = 0.0;
        for bound in [Bound::Upper, Bound::Lower] {
            let integral = integrate_time(|t| ln_density(t + p.ndt(), bound, &p).exp());
            let closed = bound_probability(bound, &p);
            assert!(
                (integral - closed).abs() < 1e-9,
                "{bound} {p:?}: {integral} vs {closed}"
            );
            total += closed;
        }
        assert!((total - 1.0).abs() < 1e-14, "probabilities sum to {total}");
    }
}

#[test]
fn density_with_drift_variability_integrates_to_the_mixed_bound_probability() {
    // With v ~ N(ν, η²), P_upper = E[P_upper(v)]; the expectation is taken here by Simpson's
    // rule over the normal density (common practice).
    let p = DiffusionParams::new(0.8, 1.5, 0.45, 0.2)
        .unwrap()
        .with_variability(1.2, 0.0, 0.0)
        .unwrap();
    let expected = simpson(-10.0, 10.0, 4000, |z| {
        let v = 0.8 + 1.2 * z;
        let q = DiffusionParams::new(v, 1.5, 0.45, 0.2).unwrap();
        bound_probability(Bound::Upper, &q) * (-0.5 * z * z).exp()
            / (2.0 * std::f64::consts::PI).sqrt()
    });
    let integral = integrate_time(|t| ln_density(t + 0.2, Bound::Upper, &p).exp());
    assert!(
        (integral - expected).abs() < 1e-9,
        "{integral} vs {expected}"
    );
    assert!((bound_probability(Bound::Upper, &p) - expected).abs() < 1e-9);
}

#[test]
fn mean_decision_times_equal_integrals_of_the_density() {
    // E[T | b] = ∫ t f_b(t) dt / P_b; closed forms of Grasman, Wagenmakers & van der Maas (2009).
    for p in sets() {
        let mut unconditional = 0.0;
        for bound in [Bound::Upper, Bound::Lower] {
            let moment = integrate_time(|t| t * ln_density(t + p.ndt(), bound, &p).exp());
            let prob = bound_probability(bound, &p);
            let closed = mean_decision_time_given(bound, &p);
            assert!(
                ((moment / prob - closed) / closed).abs() < 1e-8,
                "{bound} {p:?}: {} vs {closed}",
                moment / prob
            );
            unconditional += moment;
        }
        let closed = mean_decision_time(&p);
        assert!(((unconditional - closed) / closed).abs() < 1e-8);
    }
}

#[test]
fn mean_decision_time_matches_the_unbiased_formula() {
    // Unbiased start, unit noise: E[T] = a/(2v)·(1 − e^{−va})/(1 + e^{−va})
    // (Wagenmakers, van der Maas & Grasman 2007, eq. 9 with s = 1); v → 0 limit a²/4.
    for (v, a) in [(0.5, 1.0), (2.0, 1.5), (-1.3, 2.2), (5.0, 0.6)] {
        let p = DiffusionParams::new(v, a, 0.5, 0.0).unwrap();
        let ez = a / (2.0 * v) * (1.0 - (-v * a).exp()) / (1.0 + (-v * a).exp());
        assert!(((mean_decision_time(&p) - ez) / ez).abs() < 1e-13);
    }
    let p = DiffusionParams::new(0.0, 1.7, 0.5, 0.0).unwrap();
    assert!((mean_decision_time(&p) - 1.7 * 1.7 / 4.0).abs() < 1e-13);
    // Tiny drifts approach the limit continuously (Taylor branch against the closed form).
    let p = DiffusionParams::new(1e-3, 1.7, 0.3, 0.0).unwrap();
    let q = DiffusionParams::new(0.02, 1.7, 0.3, 0.0).unwrap();
    let r = DiffusionParams::new(0.0, 1.7, 0.3, 0.0).unwrap();
    let (m_p, m_q, m_r) = (
        mean_decision_time(&p),
        mean_decision_time(&q),
        mean_decision_time(&r),
    );
    assert!(
        (m_r - 1.7 * 1.7 * 0.3 * 0.7).abs() < 1e-13,
        "w(1-w)a² at v = 0"
    );
    assert!((m_p - m_r).abs() < 1e-3 && (m_q - m_r).abs() < 2e-2);
}

#[test]
fn cdf_plus_survival_is_the_bound_probability_on_both_sides_of_the_switch() {
    // F_b(t) + S_b(t) = P_b by definition; the two are computed from different series
    // (Blurton, Kesselmeier & Gondan 2012), so this checks them against each other.
    for p in sets() {
        for bound in [Bound::Upper, Bound::Lower] {
            let prob = bound_probability(bound, &p);
            for u in [0.01, 0.2, 0.49, 0.51, 1.0, 4.0] {
                let rt = p.ndt() + u * p.boundary() * p.boundary();
                let total = cdf(rt, bound, &p) + survival(rt, bound, &p);
                assert!(
                    (total - prob).abs() < 1e-14,
                    "{bound} u={u}: {total} vs {prob}"
                );
                // dF/dt = f (definition of the density), by the fourth-order central difference
                // (8(F(t+h) − F(t−h)) − (F(t+2h) − F(t−2h)))/(12h) (Abramowitz & Stegun 1964, 25.3.6).
                let h = 1e-5 * rt;
                let diff = |k: f64| cdf(rt + k * h, bound, &p) - cdf(rt - k * h, bound, &p);
                let slope = (8.0 * diff(1.0) - diff(2.0)) / (12.0 * h);
                let f = ln_density(rt, bound, &p).exp();
                assert!(
                    (slope - f).abs() < 1e-6 * f.max(1e-3),
                    "{bound} u={u} {p:?}: {slope} vs {f}"
                );
            }
        }
    }
}

#[test]
fn gradient_matches_central_differences() {
    // Central differences with step h·max(1, |x|), h = 1e-5: truncation error O(h²) (common
    // practice). Required agreement: 1e-6 relative (or 1e-7 absolute near zero).
    let mut cases = Vec::new();
    for &(v, a, w, ndt, sd) in &[
        (1.0, 1.5, 0.5, 0.3, 0.0),
        (-3.0, 2.5, 0.3, 0.2, 0.0),
        (2.0, 0.7, 0.8, 0.1, 0.0),
        (0.5, 1.2, 0.4, 0.25, 1.5),
        (-1.0, 3.0, 0.6, 0.05, 0.7),
    ] {
        for rt_offset in [0.02, 0.15, 0.6, 2.5] {
            for bound in [Bound::Upper, Bound::Lower] {
                cases.push((v, a, w, ndt, sd, ndt + rt_offset, bound));
            }
        }
    }
    for (v, a, w, ndt, sd, rt, bound) in cases {
        let make = |x: [f64; 5]| {
            DiffusionParams::new(x[0], x[1], x[2], x[3])
                .unwrap()
                .with_variability(x[4], 0.0, 0.0)
                .unwrap()
        };
        let x = [v, a, w, ndt, sd];
        let (ln_f, g) = ln_density_with_gradient(rt, bound, &make(x));
        assert!((ln_f - ln_density(rt, bound, &make(x))).abs() < 1e-12);
        let analytic = [g.drift, g.boundary, g.start, g.ndt, g.drift_sd];
        for k in 0..5 {
            if k == 4 && sd == 0.0 {
                assert_eq!(analytic[4], 0.0);
                continue;
            }
            let h = 1e-5 * x[k].abs().max(1.0);
            let (mut up, mut down) = (x, x);
            up[k] += h;
            down[k] -= h;
            let numeric =
                (ln_density(rt, bound, &make(up)) - ln_density(rt, bound, &make(down))) / (2.0 * h);
            let tol = 1e-6 * numeric.abs().max(0.1);
            assert!(
                (analytic[k] - numeric).abs() < tol,
                "parameter {k} at rt={rt} {bound} {x:?}: analytic {} numeric {numeric}",
                analytic[k]
            );
        }
    }
}

#[test]
fn densities_far_below_double_range_stay_finite() {
    // Far below 1e-308 the log-density must be finite and equal the leading term of the series of
    // Navarro & Fuss (2009): at tiny u the small-time k = 0 term (images smaller by
    // e^{-2(1-w)/u}), at large u the large-time k = 1 term (next term smaller by e^{-3π²u/2}).
    let (v, a, w) = (8.0_f64, 5.0_f64, 0.95_f64);
    let p = DiffusionParams::new(v, a, w, 0.0).unwrap();
    let pi = std::f64::consts::PI;
    let t = 5e-4 * a * a;
    let u = t / (a * a);
    let small = -2.0 * a.ln() - v * a * w - 0.5 * v * v * t - 0.5 * (2.0 * pi * u.powi(3)).ln()
        + w.ln()
        - w * w / (2.0 * u);
    let got = ln_density(t, Bound::Lower, &p);
    assert!(got.is_finite() && got < -700.0, "{got}");
    assert!(
        (got - small).abs() < 1e-12 * small.abs(),
        "{got} vs {small}"
    );
    let t = 20.0 * a * a;
    let u = t / (a * a);
    let large = -2.0 * a.ln() - v * a * w - 0.5 * v * v * t + pi.ln() - 0.5 * pi * pi * u
        + (pi * w).sin().ln();
    let got = ln_density(t, Bound::Lower, &p);
    assert!(got.is_finite() && got < -16_000.0, "{got}");
    assert!(
        (got - large).abs() < 1e-12 * large.abs(),
        "{got} vs {large}"
    );
    assert_eq!(ln_density(0.0, Bound::Lower, &p), f64::NEG_INFINITY);
}

#[test]
fn survival_gradient_matches_the_series_and_central_differences() {
    // ln S from the time quadrature equals, without drift variability, the large-time series
    // (Blurton et al. 2012); its
    // derivatives agree with central differences of the series value (common practice).
    use valuedrift::first_passage::{ln_survival, ln_survival_with_gradient};
    for &(v, a, w, ndt, sd) in &[
        (1.0, 1.6, 0.5, 0.3, 0.0),
        (-2.0, 2.2, 0.35, 0.25, 0.0),
        (0.7, 1.2, 0.6, 0.2, 0.8),
    ] {
        let make = |x: [f64; 5]| {
            DiffusionParams::new(x[0], x[1], x[2], x[3])
                .unwrap()
                .with_variability(x[4], 0.0, 0.0)
                .unwrap()
        };
        let x = [v, a, w, ndt, sd];
        for deadline in [0.6, 1.5] {
            for bound in [Bound::Upper, Bound::Lower] {
                let (ln_s, g) = ln_survival_with_gradient(deadline, bound, &make(x));
                let series = ln_survival(deadline, bound, &make(x));
                assert!((ln_s - series).abs() < 1e-9, "{ln_s} vs {series}");
                let analytic = [g.drift, g.boundary, g.start, g.ndt, g.drift_sd];
                for k in 0..5 {
                    if k == 4 && sd == 0.0 {
                        continue;
                    }
                    let h = 1e-5;
                    let (mut up, mut down) = (x, x);
                    up[k] += h;
                    down[k] -= h;
                    let numeric = (ln_survival(deadline, bound, &make(up))
                        - ln_survival(deadline, bound, &make(down)))
                        / (2.0 * h);
                    assert!(
                        (numeric - analytic[k]).abs() < 1e-6 * numeric.abs().max(1.0),
                        "{bound} k={k}: {} vs {numeric}",
                        analytic[k]
                    );
                }
            }
        }
    }
}

#[test]
fn choice_only_gradient_matches_central_differences() {
    // ∂ ln P(bound)/∂(drift, boundary, start, drift_sd) of the analytic gradient against central
    // differences of ln_bound_probability (common practice), across both signs of the drift,
    // drift 0 (where the closed form's 1/λ terms cancel), biased starts and drift variability;
    // P does not depend on the non-decision time, so that derivative is exactly zero.
    use valuedrift::first_passage::{ln_bound_probability, ln_bound_probability_with_gradient};
    for &(v, a, w, sd) in &[
        (1.0, 1.6, 0.5, 0.0),
        (-2.0, 2.2, 0.35, 0.0),
        (0.0, 1.3, 0.7, 0.0),
        (1e-4, 2.0, 0.4, 0.0),
        (6.0, 3.0, 0.2, 0.0),
        (-5.0, 4.0, 0.9, 0.0),
        (0.7, 1.2, 0.6, 0.8),
    ] {
        let make = |x: [f64; 4]| {
            DiffusionParams::new(x[0], x[1], x[2], 0.3)
                .unwrap()
                .with_variability(x[3], 0.0, 0.0)
                .unwrap()
        };
        let x = [v, a, w, sd];
        for bound in [Bound::Upper, Bound::Lower] {
            let (ln_p, g) = ln_bound_probability_with_gradient(bound, &make(x));
            let direct = ln_bound_probability(bound, &make(x));
            assert!((ln_p - direct).abs() < 1e-9, "{ln_p} vs {direct}");
            assert_eq!(g.ndt, 0.0, "P(bound) does not depend on ndt");
            let analytic = [g.drift, g.boundary, g.start, g.drift_sd];
            for k in 0..4 {
                if k == 3 && sd == 0.0 {
                    continue;
                }
                let h = 1e-5;
                let (mut up, mut down) = (x, x);
                up[k] += h;
                down[k] -= h;
                let numeric = (ln_bound_probability(bound, &make(up))
                    - ln_bound_probability(bound, &make(down)))
                    / (2.0 * h);
                assert!(
                    (numeric - analytic[k]).abs() < 1e-6 * numeric.abs().max(1.0),
                    "{bound} v={v} a={a} w={w} sd={sd} k={k}: {} vs {numeric}",
                    analytic[k]
                );
            }
        }
    }
}
