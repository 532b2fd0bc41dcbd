"""Reference values for random-effects Bayesian model selection (tests/suite/model_selection.rs).

Implements, independently of the Rust code and with numpy/scipy only:
  * the variational Dirichlet scheme of Stephan, Penny, Daunizeau, Moran & Friston (2009),
    "Bayesian model selection for group studies", NeuroImage 46:1004-1017;
  * its free energy F1, the null log evidence F0 (all models equally frequent), the Bayesian
    omnibus risk omnibus risk = 1 / (1 + exp(F1 - F0)) and the protected exceedance probabilities
    protected = (1 - omnibus risk) exceedance + omnibus risk / K of Rigoux, Stephan, Friston & Daunizeau (2014), "Bayesian model
    selection for group studies - revisited", NeuroImage 84:971-985;
  * exceedance probabilities by numpy Monte Carlo from Dirichlet(alpha) (4e6 draws, seeded; the
    standard error sqrt(exceedance (1 - exceedance) / draws) is written beside each value) and, for two models,
    exactly as 1 - I_{1/2}(alpha_1, alpha_2) with scipy.special.betainc.

Limitation: F1 here follows the same expansion of the free energy as the Rust code (expected
log joint + entropy − KL of the Dirichlets), so it is a second implementation, not a second
derivation; tests/suite/model_selection.rs also checks F1 against the exactly summed evidence (a lower
bound, equal when the assignments are certain).

The log-evidence matrices are drawn here from a seeded generator and written into the table,
so the Rust test reads its inputs and the expected outputs from the same committed file.

Output: tests/reference/model_selection_reference.csv in long form with columns
  case, quantity, subject, model, value
where quantity is one of log_evidence (subject, model), alpha, expected_frequency, exceedance,
exceedance_se (model), protected_exceedance (model), assignment (subject, model), omnibus_risk,
free_energy, null_free_energy (neither); for the between-group case also group (subject: 0 or
1), free_energy_same, free_energy_different and probability_same (neither). Indices are 0-based; empty when not applicable.

Run: python3 tests/reference/generate_model_selection.py (numpy 2.x, scipy 1.x).
"""

import csv
import os

import numpy as np
from scipy.special import betainc, digamma, gammaln, logsumexp

DRAWS = 4_000_000


def vb_dirichlet(L, alpha0=1.0, tol=1e-13, max_iter=1_000_000):
    """Stephan et al. (2009): iterate g = softmax(L + psi(alpha) - psi(sum alpha)),
    alpha = alpha0 + sum_n g until alpha stops changing; g is recomputed at the final alpha."""
    n, k = L.shape
    alpha = np.full(k, alpha0)

    def assign(a):
        log_u = L + digamma(a) - digamma(a.sum())
        return np.exp(log_u - logsumexp(log_u, axis=1, keepdims=True))

    for _ in range(max_iter):
        new = alpha0 + assign(alpha).sum(axis=0)
        change = np.max(np.abs(new - alpha))
        alpha = new
        if change <= tol:
            break
    else:
        raise RuntimeError("no convergence")
    return alpha, assign(alpha)


def free_energy(L, alpha0, alpha, g):
    """F1 = E_q[ln p(y|m)] + E_q[ln p(m|r)] - E_q[ln q(m)] - KL(Dir(alpha) || Dir(alpha0))."""
    k = len(alpha)
    elr = digamma(alpha) - digamma(alpha.sum())
    with np.errstate(divide="ignore", invalid="ignore"):
        glogg = np.where(g > 0, g * np.log(g), 0.0)
    expected = np.sum(g * (L + elr)) - np.sum(glogg)
    a0 = np.full(k, alpha0)
    # KL between Dirichlet distributions, written out directly.
    kl = (
        gammaln(alpha.sum())
        - np.sum(gammaln(alpha))
        - gammaln(a0.sum())
        + np.sum(gammaln(a0))
        + np.sum((alpha - a0) * elr)
    )
    return expected - kl


def null_log_evidence(L):
    """F0 = sum_n ln( (1/K) sum_k exp(L_nk) ), Rigoux et al. (2014)."""
    return float(np.sum(logsumexp(L, axis=1) - np.log(L.shape[1])))


def exceedance_mc(alpha, rng):
    counts = np.zeros(len(alpha))
    remaining = DRAWS
    while remaining > 0:
        size = min(remaining, 500_000)
        r = rng.dirichlet(alpha, size=size)
        counts += np.bincount(np.argmax(r, axis=1), minlength=len(alpha))
        remaining -= size
    exceedance = counts / DRAWS
    return exceedance, np.sqrt(exceedance * (1 - exceedance) / DRAWS)


def cases(rng):
    """A few fixed log-evidence matrices (subjects x models)."""
    out = {}
    # Model 0 usually better by a few units.
    L = rng.normal(0, 2, size=(12, 3)) + np.array([3.0, 0.0, -1.0])
    out["clear_winner"] = L - 200.0
    # Two populations: half the subjects favour model 0, half model 1; model 2 never.
    L = rng.normal(0, 1, size=(20, 3))
    L[:10, 0] += 4.0
    L[10:, 1] += 4.0
    L[:, 2] -= 3.0
    out["two_populations"] = L - 500.0
    # Nearly indistinguishable models: a large omnibus risk.
    out["flat"] = rng.normal(0, 0.3, size=(8, 3)) - 80.0
    # Large differences (hundreds of log units): tests log-sum-exp.
    L = rng.normal(0, 50, size=(6, 3)) - 3000.0
    L[:, 2] += 150.0
    out["large_differences"] = L
    # Two models (exact exceedance path).
    L = rng.normal(0, 1.5, size=(15, 2)) + np.array([1.0, 0.0])
    out["two_models"] = L - 120.0
    # Two groups of 10 with different winners (between-group test).
    L = rng.normal(0, 1, size=(20, 3))
    L[:10, 0] += 3.0
    L[10:, 1] += 3.0
    out["group_split"] = L - 300.0
    return out


GROUPS = {"group_split": np.repeat([0, 1], 10)}


def group_difference(L, groups):
    """Rigoux et al. (2014) between-group test: F_same = F1 of all subjects pooled, F_diff = sum
    over groups of F1 of each group alone; P(same) = 1 / (1 + exp(F_diff - F_same))."""
    f_same = free_energy(L, 1.0, *vb_dirichlet(L))
    f_diff = 0.0
    for label in np.unique(groups):
        part = L[groups == label]
        f_diff += free_energy(part, 1.0, *vb_dirichlet(part))
    return f_same, f_diff, 1.0 / (1.0 + np.exp(f_diff - f_same))


def main():
    rng = np.random.default_rng(20261202)
    rows = []
    for name, L in cases(rng).items():
        n, k = L.shape
        alpha, g = vb_dirichlet(L)
        f1 = free_energy(L, 1.0, alpha, g)
        f0 = null_log_evidence(L)
        omnibus_risk = 1.0 / (1.0 + np.exp(f1 - f0))
        if k == 2:
            exceedance_1 = 1.0 - betainc(alpha[0], alpha[1], 0.5)
            exceedance = np.array([exceedance_1, 1.0 - exceedance_1])
            se = np.zeros(2)
        else:
            exceedance, se = exceedance_mc(alpha, rng)
        protected = (1 - omnibus_risk) * exceedance + omnibus_risk / k
        for i in range(n):
            for j in range(k):
                rows.append((name, "log_evidence", i, j, L[i, j]))
                rows.append((name, "assignment", i, j, g[i, j]))
        for j in range(k):
            rows.append((name, "alpha", "", j, alpha[j]))
            rows.append((name, "expected_frequency", "", j, alpha[j] / alpha.sum()))
            rows.append((name, "exceedance", "", j, exceedance[j]))
            rows.append((name, "exceedance_se", "", j, se[j]))
            rows.append((name, "protected_exceedance", "", j, protected[j]))
        rows.append((name, "omnibus_risk", "", "", omnibus_risk))
        rows.append((name, "free_energy", "", "", f1))
        rows.append((name, "null_free_energy", "", "", f0))
        if name in GROUPS:
            groups = GROUPS[name]
            f_same, f_diff, p_same = group_difference(L, groups)
            for i in range(n):
                rows.append((name, "group", i, "", groups[i]))
            rows.append((name, "free_energy_same", "", "", f_same))
            rows.append((name, "free_energy_different", "", "", f_diff))
            rows.append((name, "probability_same", "", "", p_same))
    path = os.path.join(os.path.dirname(os.path.abspath(__file__)), "model_selection_reference.csv")
    with open(path, "w", newline="") as f:
        w = csv.writer(f, lineterminator="\n")
        w.writerow(["case", "quantity", "subject", "model", "value"])
        for case, quantity, subject, model, value in rows:
            w.writerow([case, quantity, subject, model, repr(float(value))])
    print(f"wrote {len(rows)} rows to {path}")


if __name__ == "__main__":
    main()
