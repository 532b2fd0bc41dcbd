//! Group comparisons of fitted parameters: classical two-group and several-group tests, an
//! effect size with its interval, and false-discovery-rate q values.
//!
//! The statistics are plain functions of samples (slices of finite numbers); [`contrast`] reads
//! a `parameters.csv` written by `valuedrift fit` and applies them per parameter.
//!
//! Conventions: sample variances use the divisor n − 1; ties get mid-ranks (the mean of the
//! ranks they occupy); every p value is two-sided (or, for the omnibus tests, upper-tail). A
//! function returns `None` when its statistic is undefined for the samples (too few
//! observations, zero variance, all values tied), never NaN.
//!
//! Distribution functions come from `statrs` (regularised incomplete beta and gamma functions,
//! normal distribution). Accuracy: agreement with SciPy to better than 1e-9 relative for the
//! statistics and 1e-8 relative for the p values on the cases of `tests/suite/group_statistics.rs`.

pub mod contrast;
pub mod power;
pub mod selection;

use statrs::distribution::{ChiSquared, ContinuousCDF, Normal};
use statrs::function::beta::beta_reg;
use statrs::function::gamma::ln_gamma;

/// Arithmetic mean x̄ = Σ xᵢ / n; `None` for an empty sample.
pub fn mean(x: &[f64]) -> Option<f64> {
    if x.is_empty() {
        None
    } else {
        Some(x.iter().sum::<f64>() / x.len() as f64)
    }
}

/// Sample variance s² = Σ (xᵢ − x̄)² / (n − 1) (two-pass); `None` when n < 2.
pub fn variance(x: &[f64]) -> Option<f64> {
    if x.len() < 2 {
        return None;
    }
    let m = mean(x)?;
    Some(x.iter().map(|v| (v - m) * (v - m)).sum::<f64>() / (x.len() - 1) as f64)
}

/// Two-sided p value of Student's t with `df` degrees of freedom:
/// p = P(|T| ≥ |t|) = I_{df/(df+t²)}(df/2, 1/2), the regularised incomplete beta function
/// (Abramowitz & Stegun 1964, 26.7.1 with 26.5.27), computed directly rather than as 1 − cdf so
/// that small p values keep their relative accuracy.
pub fn student_t_two_sided_p(t: f64, df: f64) -> f64 {
    beta_reg(df / 2.0, 0.5, df / (df + t * t)).clamp(0.0, 1.0)
}

/// Upper-tail p value of Fisher's F with (d1, d2) degrees of freedom:
/// p = P(F ≥ f) = I_{d2/(d2+d1 f)}(d2/2, d1/2) (Abramowitz & Stegun 1964, 26.6.2), computed
/// directly rather than as 1 − cdf.
pub fn fisher_f_upper_p(f: f64, d1: f64, d2: f64) -> f64 {
    if f <= 0.0 {
        return 1.0;
    }
    beta_reg(d2 / 2.0, d1 / 2.0, d2 / (d2 + d1 * f)).clamp(0.0, 1.0)
}

/// Result of [`welch_t_test`].
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct WelchT {
    /// t statistic (positive when the first sample has the larger mean).
    pub t: f64,
    /// Welch–Satterthwaite degrees of freedom.
    pub df: f64,
    /// Two-sided p value.
    pub p: f64,
}

/// Welch's unequal-variance t test (Welch 1947, "The generalization of 'Student's' problem when
/// several different population variances are involved", Biometrika 34:28–35):
///
/// t = (x̄₁ − x̄₂) / √(s₁²/n₁ + s₂²/n₂),
/// df = (s₁²/n₁ + s₂²/n₂)² / [ (s₁²/n₁)²/(n₁−1) + (s₂²/n₂)²/(n₂−1) ]
/// (Welch–Satterthwaite; Satterthwaite 1946), two-sided p from Student's t with df.
///
/// `None` when a sample has fewer than 2 values or both variances are zero.
pub fn welch_t_test(x: &[f64], y: &[f64]) -> Option<WelchT> {
    let (n1, n2) = (x.len() as f64, y.len() as f64);
    let a = variance(x)? / n1;
    let b = variance(y)? / n2;
    let se2 = a + b;
    if se2 <= 0.0 || !se2.is_finite() {
        return None;
    }
    let t = (mean(x)? - mean(y)?) / se2.sqrt();
    let df = se2 * se2 / (a * a / (n1 - 1.0) + b * b / (n2 - 1.0));
    Some(WelchT {
        t,
        df,
        p: student_t_two_sided_p(t, df),
    })
}

/// Mid-ranks (1-based; tied values share the mean of the ranks they occupy) of `x`, and the tie
/// sum Σ (t³ − t) over groups of t tied values.
pub fn midranks(x: &[f64]) -> (Vec<f64>, f64) {
    let mut order: Vec<usize> = (0..x.len()).collect();
    order.sort_by(|&i, &j| x[i].total_cmp(&x[j]));
    let mut ranks = vec![0.0; x.len()];
    let mut tie_sum = 0.0;
    let mut start = 0;
    while start < order.len() {
        let mut end = start + 1;
        while end < order.len() && x[order[end]] == x[order[start]] {
            end += 1;
        }
        // Positions start..end (0-based) hold ranks start+1..=end; their mean:
        let rank = (start + 1 + end) as f64 / 2.0;
        for &i in &order[start..end] {
            ranks[i] = rank;
        }
        let t = (end - start) as f64;
        tie_sum += t * t * t - t;
        start = end;
    }
    (ranks, tie_sum)
}

/// Result of [`mann_whitney_u`].
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct MannWhitney {
    /// U of the first sample: U₁ = R₁ − n₁(n₁+1)/2.
    pub u: f64,
    /// Normal-approximation z, with tie and continuity corrections (≥ 0).
    pub z: f64,
    /// Two-sided p value.
    pub p: f64,
}

/// Mann–Whitney U test (Mann & Whitney 1947, Ann. Math. Statist. 18:50–60), two-sided, by the
/// normal approximation WITH the tie correction of the variance and WITH a continuity
/// correction of 1/2 (the convention of SciPy's `mannwhitneyu(method="asymptotic",
/// use_continuity=True)`, against which it is tested):
///
/// U₁ = R₁ − n₁(n₁+1)/2 (R₁ the sum of the first sample's mid-ranks in the pooled sample),
/// U = max(U₁, n₁n₂ − U₁), μ = n₁n₂/2, N = n₁ + n₂,
/// σ² = n₁n₂/12 · [ (N + 1) − Σ(t³ − t) / (N(N − 1)) ] (Lehmann 1975, eq. 1.3.31 tie correction),
/// z = (U − μ − 1/2)/σ, p = min(1, 2 · (1 − Φ(z))).
///
/// The reported statistic is U₁. `None` when a sample is empty or all values are tied.
pub fn mann_whitney_u(x: &[f64], y: &[f64]) -> Option<MannWhitney> {
    if x.is_empty() || y.is_empty() {
        return None;
    }
    let (n1, n2) = (x.len() as f64, y.len() as f64);
    let pooled: Vec<f64> = x.iter().chain(y).copied().collect();
    let (ranks, tie_sum) = midranks(&pooled);
    let r1: f64 = ranks[..x.len()].iter().sum();
    let u1 = r1 - n1 * (n1 + 1.0) / 2.0;
    let u = u1.max(n1 * n2 - u1);
    let n = n1 + n2;
    let var = n1 * n2 / 12.0 * ((n + 1.0) - tie_sum / (n * (n - 1.0)));
    if var <= 0.0 || !var.is_finite() {
        return None;
    }
    let z = (u - n1 * n2 / 2.0 - 0.5) / var.sqrt();
    let normal = Normal::standard();
    let p = (2.0 * normal.sf(z)).clamp(0.0, 1.0);
    Some(MannWhitney { u: u1, z, p })
}

/// Result of [`hedges_g`].
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct HedgesG {
    /// Bias-corrected standardised mean difference (first minus second).
    pub g: f64,
    /// Large-sample standard error of g.
    pub std_error: f64,
    /// Lower end of the interval.
    pub ci_low: f64,
    /// Upper end of the interval.
    pub ci_high: f64,
}

/// Hedges' g, the standardised mean difference with the exact small-sample bias correction
/// (Hedges 1981, "Distribution theory for Glass's estimator of effect size and related
/// estimators", J. Educ. Statist. 6:107–128, eq. 6e), and a normal interval from the
/// large-sample variance of Hedges & Olkin (1985, Statistical Methods for Meta-Analysis,
/// ch. 5, eq. 14):
///
/// s_p² = [(n₁−1)s₁² + (n₂−1)s₂²]/(n₁+n₂−2), d = (x̄₁ − x̄₂)/s_p, m = n₁+n₂−2,
/// J(m) = Γ(m/2) / (√(m/2) Γ((m−1)/2)), g = J(m) d,
/// Var(g) ≈ (n₁+n₂)/(n₁n₂) + g²/(2(n₁+n₂)), interval g ± z_{(1+level)/2} √Var(g).
///
/// `level` is the coverage (0.95 for 95 %). `None` when a sample has fewer than 2 values, the
/// pooled variance is zero, or `level` is not in (0, 1).
pub fn hedges_g(x: &[f64], y: &[f64], level: f64) -> Option<HedgesG> {
    if !(level > 0.0 && level < 1.0) {
        return None;
    }
    let (n1, n2) = (x.len() as f64, y.len() as f64);
    let m = n1 + n2 - 2.0;
    let pooled = ((n1 - 1.0) * variance(x)? + (n2 - 1.0) * variance(y)?) / m;
    if pooled <= 0.0 || !pooled.is_finite() {
        return None;
    }
    let d = (mean(x)? - mean(y)?) / pooled.sqrt();
    let j = (ln_gamma(m / 2.0) - ln_gamma((m - 1.0) / 2.0)).exp() / (m / 2.0).sqrt();
    let g = j * d;
    let std_error = ((n1 + n2) / (n1 * n2) + g * g / (2.0 * (n1 + n2))).sqrt();
    let z = Normal::standard().inverse_cdf(0.5 + level / 2.0);
    Some(HedgesG {
        g,
        std_error,
        ci_low: g - z * std_error,
        ci_high: g + z * std_error,
    })
}

/// Benjamini–Hochberg adjusted p values ("q values") of `p` (Benjamini & Hochberg 1995,
/// "Controlling the false discovery rate", J. R. Statist. Soc. B 57:289–300):
///
/// with p₍₁₎ ≤ … ≤ p₍ₘ₎, q₍ᵢ₎ = min_{j ≥ i} min(1, m p₍ⱼ₎ / j).
///
/// Rejecting every hypothesis with q ≤ α is exactly the step-up procedure of the paper: reject
/// H₍₁₎…H₍ₖ₎ for the largest k with p₍ₖ₎ ≤ k α / m. The result is in the input's order.
pub fn benjamini_hochberg(p: &[f64]) -> Vec<f64> {
    let m = p.len();
    let mut order: Vec<usize> = (0..m).collect();
    order.sort_by(|&i, &j| p[i].total_cmp(&p[j]));
    let mut q = vec![0.0; m];
    let mut running = 1.0_f64;
    for (rank, &i) in order.iter().enumerate().rev() {
        running = running.min(p[i] * m as f64 / (rank + 1) as f64);
        q[i] = running;
    }
    q
}

/// Result of [`welch_anova`].
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct WelchAnova {
    /// F statistic.
    pub f: f64,
    /// Numerator degrees of freedom, k − 1.
    pub df1: f64,
    /// Denominator degrees of freedom.
    pub df2: f64,
    /// Upper-tail p value.
    pub p: f64,
}

/// One-way analysis of variance without assuming equal variances (Welch 1951, "On the
/// comparison of several mean values: an alternative approach", Biometrika 38:330–336):
///
/// wᵢ = nᵢ/sᵢ², W = Σwᵢ, x̃ = Σ wᵢ x̄ᵢ / W,
/// Λ = Σ (1 − wᵢ/W)² / (nᵢ − 1),
/// F = [Σ wᵢ (x̄ᵢ − x̃)² / (k − 1)] / [1 + 2(k − 2)Λ/(k² − 1)],
/// df₁ = k − 1, df₂ = (k² − 1)/(3Λ), p = P(F(df₁, df₂) ≥ F).
///
/// With two groups F = t² and df₂ equals the Welch–Satterthwaite df of [`welch_t_test`].
/// `None` with fewer than two groups, a group of fewer than 2 values or a zero variance.
pub fn welch_anova(groups: &[&[f64]]) -> Option<WelchAnova> {
    let k = groups.len() as f64;
    if groups.len() < 2 {
        return None;
    }
    let mut stats = Vec::with_capacity(groups.len());
    for g in groups {
        let v = variance(g)?;
        if v <= 0.0 || !v.is_finite() {
            return None;
        }
        let n = g.len() as f64;
        stats.push((n, mean(g)?, n / v));
    }
    let w: f64 = stats.iter().map(|s| s.2).sum();
    let centre = stats.iter().map(|s| s.2 * s.1).sum::<f64>() / w;
    let between = stats
        .iter()
        .map(|s| s.2 * (s.1 - centre) * (s.1 - centre))
        .sum::<f64>()
        / (k - 1.0);
    let lambda: f64 = stats
        .iter()
        .map(|s| (1.0 - s.2 / w).powi(2) / (s.0 - 1.0))
        .sum();
    let f = between / (1.0 + 2.0 * (k - 2.0) * lambda / (k * k - 1.0));
    let df1 = k - 1.0;
    let df2 = (k * k - 1.0) / (3.0 * lambda);
    Some(WelchAnova {
        f,
        df1,
        df2,
        p: fisher_f_upper_p(f, df1, df2),
    })
}

/// Result of [`kruskal_wallis`].
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct KruskalWallis {
    /// H statistic, tie-corrected.
    pub h: f64,
    /// Degrees of freedom, k − 1.
    pub df: f64,
    /// Upper-tail p value from the chi-squared approximation.
    pub p: f64,
}

/// Kruskal–Wallis rank test with the tie correction (Kruskal & Wallis 1952, "Use of ranks in
/// one-criterion variance analysis", J. Amer. Statist. Assoc. 47:583–621, eqs. 1.1 and 1.2):
///
/// H₀ = 12/(N(N+1)) Σ Rᵢ²/nᵢ − 3(N+1) (Rᵢ the sum of group i's mid-ranks in the pooled sample),
/// H = H₀ / [1 − Σ(t³ − t)/(N³ − N)], p = P(χ²_{k−1} ≥ H).
///
/// `None` with fewer than two groups, an empty group, or all values tied.
pub fn kruskal_wallis(groups: &[&[f64]]) -> Option<KruskalWallis> {
    if groups.len() < 2 || groups.iter().any(|g| g.is_empty()) {
        return None;
    }
    let pooled: Vec<f64> = groups.iter().flat_map(|g| g.iter().copied()).collect();
    let n = pooled.len() as f64;
    let (ranks, tie_sum) = midranks(&pooled);
    let mut offset = 0;
    let mut sum = 0.0;
    for g in groups {
        let r: f64 = ranks[offset..offset + g.len()].iter().sum();
        sum += r * r / g.len() as f64;
        offset += g.len();
    }
    let correction = 1.0 - tie_sum / (n * n * n - n);
    if correction <= 0.0 {
        return None;
    }
    let h = (12.0 / (n * (n + 1.0)) * sum - 3.0 * (n + 1.0)) / correction;
    let df = groups.len() as f64 - 1.0;
    let p = ChiSquared::new(df).ok()?.sf(h.max(0.0)).clamp(0.0, 1.0);
    Some(KruskalWallis { h, df, p })
}
