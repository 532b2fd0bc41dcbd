//! Scaled standard normal tails for the race engine's linear-space paths: the upper tail
//! Φ(−x) and the partial moment G(−x) = φ(x) − xΦ(−x) (G(z) = zΦ(z) + φ(z), so G' = Φ), each
//! with the Gaussian factor e^{−x²/2} taken out, so that neither underflows and a race's terms
//! can be combined with one exponential and one logarithm instead of several erfc, exp and ln
//! calls.
//!
//! # Method
//! The rational Chebyshev approximations of W. J. Cody (1969, "Rational Chebyshev
//! approximations for the error function", Math. Comp. 23, 631–637), in the form and with the
//! coefficients of his normal distribution routine ANORM (Cody 1993, ACM TOMS Algorithm 715,
//! SPECFUN), with thresholds 0.66291 and √32:
//!
//! * 0 ≤ x ≤ 0.66291: Φ(−x) = ½ − x·P₁(x²)/Q₁(x²) (degrees 4/4), times e^{x²/2};
//! * 0.66291 < x ≤ √32: Φ(−x)·e^{x²/2} = P₂(x)/Q₂(x) (degrees 8/8);
//! * x > √32: Φ(−x)·e^{x²/2} = (1/√(2π) − r)/x with r = x⁻²·P₃(x⁻²)/Q₃(x⁻²) (degrees 5/5),
//!   evaluated as polynomials in x² (numerator and denominator times x¹⁰) so that one division
//!   serves; beyond x = 1e20 the leading asymptotic terms 1/(x√(2π)) and 1/(x²√(2π))
//!   (Abramowitz & Stegun 1964, 26.2.12), exact there in double precision.
//!
//! Cody states that the approximations of Φ are accurate to at least 18 significant digits, so
//! in double precision Φ(−x)·e^{x²/2} carries rounding only.
//!
//! # Accuracy
//! Measured against mpmath at 40 digits (tests/reference/normal_tails.csv, written by
//! tests/reference/generate_normal_tails.py, 979 points on 0 ≤ x ≤ 3e30): relative error of
//! [`scaled_tails`]'s Φ(−x)·e^{x²/2} at most 5.0e-16 (test bound 1e-15) and of G(−x)·e^{x²/2} at
//! most 1.4e-14 (test bound 2e-14). The second is 1/√(2π) − x·M below √32, a difference that
//! amplifies rounding by up to about x² ≤ 32; above √32 it is r itself, formed without
//! cancellation, but limited to about 4.4e-15 by the approximation (Cody's fit controls the
//! relative error of Φ, of which r is a correction of relative size x⁻²; the leading ratio
//! p₄/q₄ differs from 1/√(2π) by 4.4e-15 relative).

use super::real::LN_SQRT_2PI;

/// 1/√(2π).
pub(crate) const INV_SQRT_2PI: f64 = 0.398_942_280_401_432_7;

/// Cody's (1993) coefficients as published (20 significant digits; the compiler rounds them to
/// the nearest double). Small arguments: numerator a₀…a₄ (a₄ multiplies the highest power).
#[allow(clippy::excessive_precision)]
const SMALL_NUM: [f64; 5] = [
    2.2352520354606839287,
    161.02823106855587881,
    1067.6894854603709582,
    18154.981253343561249,
    0.065682337918207449113,
];
#[allow(clippy::excessive_precision)]
const SMALL_DEN: [f64; 4] = [
    47.20258190468824187,
    976.09855173777669322,
    10260.932208618978205,
    45507.789335026729956,
];
/// Middle arguments: numerator c₀…c₈ (c₈ multiplies the highest power) and denominator.
#[allow(clippy::excessive_precision)]
const MID_NUM: [f64; 9] = [
    0.39894151208813466764,
    8.8831497943883759412,
    93.506656132177855979,
    597.27027639480026226,
    2494.5375852903726711,
    6848.1904505362823326,
    11602.651437647350124,
    9842.7148383839780218,
    1.0765576773720192317e-8,
];
#[allow(clippy::excessive_precision)]
const MID_DEN: [f64; 8] = [
    22.266688044328115691,
    235.38790178262499861,
    1519.377599407554805,
    6485.558298266760755,
    18615.571640885098091,
    34900.952721145977266,
    38912.003286093271411,
    19685.429676859990727,
];
/// Large arguments, in x⁻²: numerator p₀…p₅ (p₅ multiplies the highest power) and denominator.
#[allow(clippy::excessive_precision)]
const LARGE_NUM: [f64; 6] = [
    0.21589853405795699,
    0.1274011611602473639,
    0.022235277870649807,
    0.001421619193227893466,
    2.9112874951168792e-5,
    0.02307344176494017303,
];
#[allow(clippy::excessive_precision)]
const LARGE_DEN: [f64; 5] = [
    1.28426009614491121,
    0.468238212480865118,
    0.0659881378689285515,
    0.00378239633202758244,
    7.29751555083966205e-5,
];

/// Cody's (1993) switch from the small-argument to the middle approximation.
const SMALL_END: f64 = 0.66291;
/// √32, Cody's (1993) switch to the asymptotic-form approximation.
const MIDDLE_END: f64 = 5.656_854_249_492_381;
/// Beyond this the leading asymptotic terms are exact in double precision (the next are 1e-40
/// relative), and x¹³ in the large-argument form would overflow.
const ASYMPTOTIC: f64 = 1e20;

/// (M, K) at x ≥ 0: M = Φ(−x)·e^{x²/2} (= √(2π)·φ-scaled Mills ratio) and
/// K = G(−x)·e^{x²/2} = 1/√(2π) − x·M, where G(z) = zΦ(z) + φ(z); Cody's rational
/// approximations (see the module docs for the equations, source and accuracy). Both are
/// positive and decrease like 1/(x√(2π)) and 1/(x²√(2π)) for large x. NaN for negative or NaN
/// x.
#[inline]
pub(crate) fn scaled_tails(x: f64) -> (f64, f64) {
    // Estrin's scheme (the polynomials split into pairs, combined with x², x⁴, x⁸) rather than
    // Horner's: the same terms, all positive, in a shorter chain of dependent operations.
    if x <= SMALL_END {
        if x.is_nan() || x < 0.0 {
            return (f64::NAN, f64::NAN);
        }
        let (a, b) = (&SMALL_NUM, &SMALL_DEN);
        let y = x * x;
        let y2 = y * y;
        let num = (a[3] + a[2] * y) + y2 * ((a[1] + a[0] * y) + y2 * a[4]);
        let den = (b[3] + b[2] * y) + y2 * ((b[1] + b[0] * y) + y2);
        let upper = 0.5 - x * num / den;
        let m = upper * (0.5 * y).exp();
        (m, INV_SQRT_2PI - x * m)
    } else if x <= MIDDLE_END {
        let (c, d) = (&MID_NUM, &MID_DEN);
        let x2 = x * x;
        let x4 = x2 * x2;
        let num = ((c[7] + c[6] * x) + x2 * (c[5] + c[4] * x))
            + x4 * (((c[3] + c[2] * x) + x2 * (c[1] + c[0] * x)) + x4 * c[8]);
        let den = ((d[7] + d[6] * x) + x2 * (d[5] + d[4] * x))
            + x4 * (((d[3] + d[2] * x) + x2 * (d[1] + d[0] * x)) + x4);
        let m = num / den;
        (m, INV_SQRT_2PI - x * m)
    } else if x <= ASYMPTOTIC {
        // P(x⁻²)/Q(x⁻²) with numerator and denominator multiplied by x¹⁰ (polynomials in x²,
        // all terms positive), so that one division gives both M and r.
        let (p, q) = (&LARGE_NUM, &LARGE_DEN);
        let y = x * x;
        let y2 = y * y;
        let y4 = y2 * y2;
        let num = (p[5] + p[0] * y) + y2 * (p[1] + p[2] * y) + y4 * (p[3] + p[4] * y);
        let den = (1.0 + q[0] * y) + y2 * (q[1] + q[2] * y) + y4 * (q[3] + q[4] * y);
        // r = num/(y·den), M = (1/√(2π) − r)/x.
        let scaled = y * den;
        let inverse = 1.0 / (x * scaled);
        ((INV_SQRT_2PI * scaled - num) * inverse, num * x * inverse)
    } else {
        // M = (1 − x⁻² + 3x⁻⁴ − …)/(x√(2π)) and K = (x⁻² − 3x⁻⁴ + …)/√(2π) (Abramowitz &
        // Stegun 1964, 26.2.12): beyond 1e20 the first terms are exact in double precision.
        let inverse = 1.0 / x;
        (INV_SQRT_2PI * inverse, INV_SQRT_2PI * inverse * inverse)
    }
}

/// ln φ(x) = −x²/2 − ½ln(2π).
#[inline]
pub(crate) fn ln_normal_pdf(x: f64) -> f64 {
    -0.5 * x * x - LN_SQRT_2PI
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Φ(−x)·e^{x²/2} and G(−x)·e^{x²/2} against mpmath at 40 digits
    /// (tests/reference/normal_tails.csv, written by tests/reference/generate_normal_tails.py).
    #[test]
    fn scaled_tails_match_mpmath() {
        let path = concat!(
            env!("CARGO_MANIFEST_DIR"),
            "/tests/reference/normal_tails.csv"
        );
        let text = std::fs::read_to_string(path).unwrap();
        let (mut worst_m, mut worst_k, mut rows) = (0.0f64, 0.0f64, 0);
        for line in text.lines().skip(1) {
            let fields: Vec<f64> = line.split(',').map(|f| f.parse().unwrap()).collect();
            let (x, m, k) = (fields[0], fields[1], fields[2]);
            let (got_m, got_k) = scaled_tails(x);
            let (em, ek) = (((got_m - m) / m).abs(), ((got_k - k) / k).abs());
            assert!(em < 1e-15, "M({x}) = {got_m} vs {m}: {em:e}");
            assert!(ek < 2e-14, "K({x}) = {got_k} vs {k}: {ek:e}");
            worst_m = worst_m.max(em);
            worst_k = worst_k.max(ek);
            rows += 1;
        }
        assert!(rows >= 200, "{rows} rows");
        println!("scaled tails: worst relative error M {worst_m:.1e}, K {worst_k:.1e}");
    }

    #[test]
    fn negative_arguments_are_not_numbers() {
        assert!(scaled_tails(-1.0).0.is_nan());
        assert!(scaled_tails(f64::NAN).1.is_nan());
    }
}
