//! The exact sampler against the engine's distribution function: Kolmogorov–Smirnov tests of the
//! conditional response-time distribution per bound, and bound frequencies within 4 standard
//! errors of the bound probability. Fixed seeds, so the outcome is reproducible.

use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use valuedrift::first_passage::{Bound, DiffusionParams, bound_probability, cdf, sample};

/// Critical value of the one-sample Kolmogorov–Smirnov statistic at α = 0.001 for large n:
/// K_{0.999} = 1.9495 / √n (Kolmogorov's limiting distribution; Smirnov 1948 tables).
const KS_999: f64 = 1.9495;

const SAMPLES: usize = 8_000;

fn sets() -> Vec<DiffusionParams> {
    let plain = [
        (0.0, 1.0, 0.5, 0.2),
        (1.0, 1.5, 0.5, 0.3),
        (-2.0, 2.0, 0.4, 0.25),
        (3.5, 1.0, 0.6, 0.15),
        (-0.5, 3.0, 0.2, 0.4),
        (0.8, 0.6, 0.8, 0.1),
        (5.0, 2.5, 0.5, 0.3),
        (-6.0, 0.8, 0.9, 0.2),
        (0.2, 4.0, 0.55, 0.35),
        (2.0, 1.2, 0.1, 0.0),
    ];
    let mut out: Vec<DiffusionParams> = plain
        .iter()
        .map(|&(v, a, w, t)| DiffusionParams::new(v, a, w, t).unwrap())
        .collect();
    out.push(
        DiffusionParams::new(1.2, 1.6, 0.45, 0.3)
            .unwrap()
            .with_variability(1.0, 0.0, 0.0)
            .unwrap(),
    );
    out.push(
        DiffusionParams::new(-0.8, 2.0, 0.5, 0.3)
            .unwrap()
            .with_variability(0.5, 0.2, 0.1)
            .unwrap(),
    );
    out
}

#[test]
fn sampler_matches_distribution_function_and_bound_probability() {
    for (index, p) in sets().into_iter().enumerate() {
        let mut rng = ChaCha8Rng::seed_from_u64(1000 + index as u64);
        let mut times = [Vec::new(), Vec::new()];
        for _ in 0..SAMPLES {
            let (bound, rt) = sample(&p, &mut rng);
            assert!(rt.is_finite() && rt > p.ndt() - p.ndt_range() / 2.0);
            times[usize::from(bound == Bound::Lower)].push(rt);
        }
        let p_upper = bound_probability(Bound::Upper, &p);
        let observed = times[0].len() as f64 / SAMPLES as f64;
        let se = (p_upper * (1.0 - p_upper) / SAMPLES as f64).sqrt();
        assert!(
            (observed - p_upper).abs() <= 4.0 * se.max(1e-12),
            "set {index}: upper frequency {observed} vs {p_upper}"
        );
        for (slot, bound) in [(0, Bound::Upper), (1, Bound::Lower)] {
            let sample_times = &mut times[slot];
            let n = sample_times.len();
            if n < 50 {
                continue;
            }
            sample_times.sort_by(f64::total_cmp);
            let prob = bound_probability(bound, &p);
            let mut d: f64 = 0.0;
            for (i, &t) in sample_times.iter().enumerate() {
                let f = cdf(t, bound, &p) / prob;
                d = d
                    .max((f - i as f64 / n as f64).abs())
                    .max(((i + 1) as f64 / n as f64 - f).abs());
            }
            let critical = KS_999 / (n as f64).sqrt();
            assert!(
                d < critical,
                "set {index} {bound}: KS D = {d} over {n} draws, critical {critical}"
            );
        }
    }
}

#[test]
fn sampler_is_reproducible_for_a_seed() {
    // Value stability: the same seed gives the same draws (common practice for seeded RNGs).
    let p = DiffusionParams::new(1.0, 1.5, 0.5, 0.3).unwrap();
    let draw = |seed| {
        let mut rng = ChaCha8Rng::seed_from_u64(seed);
        (0..20).map(|_| sample(&p, &mut rng)).collect::<Vec<_>>()
    };
    assert_eq!(draw(7), draw(7));
    assert_ne!(draw(7), draw(8));
}
