//! Densities of a process with leak at any drift, from solves at fixed drifts.
//!
//! Without leak one solve serves every drift (Girsanov's theorem, module docs). With a leak λ the
//! likelihood ratio of drift v against drift u is exp((v − u)·(X_t − y₀) − (v² − u²)t/2 +
//! (v − u)·λ∫₀ᵗX_s ds), which depends on the path's integral and not on the passage alone, so each
//! drift needs its own solve, and a learning task gives every trial its own drift. Instead the
//! stage solves at fixed drift nodes v_j = j·Δ and interpolates in v, by the Lagrange polynomial
//! of degree 5 through the six nodes around v (Abramowitz & Stegun 1964, 25.2.13), the part of
//! ln g_v that carries most of its dependence on v removed first and added back exactly:
//!
//! ```text
//! ln g_v(t) ≈ Σⱼ ℓⱼ(v)·(ln g_{vⱼ}(t) − τ(vⱼ)) + τ(v),  τ(u) = u·(B(t) − y₀) − u²t/2,
//! ```
//!
//! τ being the exponent that is exact without leak; what is left is ln E[exp(u·λ∫X ds) | passage
//! at t] under drift 0, smooth in u and 0 at λ = 0. The nodes do not depend on the parameters, so
//! the interpolant is a fixed smooth function of v between nodes, and its derivative in v is the
//! derivative of the Lagrange weights. Accuracy: see [`NODE_SPACING`].

use num_dual::DualNum;

/// Spacing Δ of the drift nodes v_j = j·Δ.
///
/// # Accuracy
/// Against a solve at the drift itself, measured by tests/suite/numerical_passage.rs (boundaries
/// 1–2.5, leaks 0.5–3, drifts −14.3 to 17.2, times 0.15–2.9 s, ln g > −30): see that test for
/// the worst |Δ ln g|: 5.4e-5 with six nodes (four gave 4.9e-4; nodes spaced wider at strong
/// drifts gave 1e-1). Cost: one solve per node the subject's drifts reach, 6 more than
/// (range of drifts)/Δ (a subject whose drifts span ±10 needs 46); a process that starts midway
/// needs only the nodes at or above zero, those below being mirror images (the
/// `leaky-diffusion` stage uses this: ±10 then needs 24).
pub const NODE_SPACING: f64 = 0.5;

/// How many nodes the interpolation uses.
pub const NODES: usize = 6;

/// The six drift nodes around v: j·Δ for j from ⌊v/Δ⌋ − 2 to ⌊v/Δ⌋ + 3.
pub fn nodes_around(v: f64) -> [f64; NODES] {
    let j = (v / NODE_SPACING).floor();
    std::array::from_fn(|k| (j + k as f64 - 2.0) * NODE_SPACING)
}

/// Σⱼ ℓⱼ(v)·valuesⱼ, the Lagrange polynomial through (nodesⱼ, valuesⱼ) at v, with
/// ℓⱼ(v) = Πₖ≠ⱼ (v − vₖ)/(vⱼ − vₖ); `None` when a value is not finite (a density of zero on
/// the grid at a node, far in a tail, which the polynomial cannot bridge: solve at v instead).
pub fn interpolate<N: DualNum<Primitive = f64> + Copy>(
    v: N,
    nodes: [f64; NODES],
    values: [N; NODES],
) -> Option<N> {
    if values.iter().any(|x| !x.re().is_finite()) {
        return None;
    }
    let mut total = N::from(0.0);
    for (j, &value) in values.iter().enumerate() {
        let mut weight = N::from(1.0);
        for (k, &node) in nodes.iter().enumerate() {
            if k != j {
                weight *= (v - node) / (nodes[j] - node);
            }
        }
        total += weight * value;
    }
    Some(total)
}
