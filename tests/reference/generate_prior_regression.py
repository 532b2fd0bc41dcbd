"""Reference values for the regression of the group prior's mean on participant scores.

Writes prior_regression_reference.csv next to this script; tests/suite/group_prior_covariates.rs reads
it (Python is not needed to run the tests). Regenerate with

    pip install numpy scipy statsmodels
    python3 tests/reference/generate_prior_regression.py

Measured with numpy 2.4.6, scipy 1.17.1, statsmodels 0.15.0.

Model (the module documentation of src/fit/prior_regression.rs): participant i has posterior
mode theta_i (k parameters), posterior covariance P_i (found under the prior covariance Sigma)
and scores s_i (p of them); z_i = (1, s_i - c), c the mean score over participants when centred,
else 0. The quantities computed here, each by a route of its own:

- coefficients B (k x (p+1)): numpy.linalg.lstsq of theta on Z (least squares by SVD), the
  M-step of the EM of Huys et al. (2011) with a regression in the prior mean;
- the M-step covariance Sigma_new = (1/N) sum_i [(theta_i - B z_i)(theta_i - B z_i)^T + P_i]
  (its diagonal for a diagonal prior; a participant without P_i contributes the prior Sigma);
- standard errors: Cov(vec B) = [sum_i (z_i z_i^T) kron W_i]^-1 with
  W_i = (Sigma * N/(N-p-1) + C_i)^-1, C_i = (P_i^-1 - Sigma^-1)^-1 the likelihood-only
  covariance, by explicit inverses (numpy.linalg.inv) and numpy.kron; a participant without P_i
  has W_i = 0 (the generalised least-squares covariance of Laird & Ware 1982 and Berkey et al.
  1995);
- t = B / SE and p = 2 P(T_{N-p-1} > |t|) by scipy.stats.t.sf.

Independent checks against statsmodels, whose results are written as the expected values where
they apply (the script asserts that the numpy route above agrees with them to 1e-9 relative):

- case "exact": every P_i = 1e-10 I (participants measured almost exactly) and the prior Sigma
  equal to the M-step Sigma (a fixed point of EM): standard errors, t and p are those of
  ordinary least squares of each parameter on Z, statsmodels OLS (bse, tvalues, pvalues), up to
  terms of order 1e-10;
- case "weighted": a diagonal prior and diagonal P_i: per parameter, the standard errors of
  weighted least squares with weights 1/(sigma_j^2 N/(N-p-1) + C_ij) and the scale fixed at 1,
  statsmodels WLS(..., cov_type="fixed scale", use_t=True);
- case "correlated": a full prior, full P_i, one participant without a covariance and scores
  used as given (not centred): numpy route only.

Output: long format, columns case, full (1 for a full Sigma in the M-step, else 0), centred,
quantity, i, j, value, with quantity one of
  score (i participant, j score), mode (i participant, j parameter),
  posterior (i participant, j = a*k + b; no rows for a participant without one),
  prior (i = 0, j = a*k + b), coefficient (i parameter, j term, 0 the intercept),
  sigma (i = 0, j = a*k + b, the M-step covariance), std_error, t, p (i parameter, j term).
"""

import csv
import os

import numpy as np
import scipy.stats
import statsmodels.api as sm

N, K, P = 12, 2, 2
RNG = np.random.default_rng(20_260_501)


def design(scores, centred):
    centre = scores.mean(axis=0) if centred else np.zeros(scores.shape[1])
    return np.column_stack([np.ones(len(scores)), scores - centre])


def m_step(theta, posteriors, prior, z, full):
    b = np.linalg.lstsq(z, theta, rcond=None)[0].T  # k x q
    resid = theta - z @ b.T
    sigma = np.zeros((K, K))
    for i in range(len(theta)):
        own = posteriors[i] if posteriors[i] is not None else prior
        sigma += np.outer(resid[i], resid[i]) + own
    sigma /= len(theta)
    if not full:
        sigma = np.diag(np.diag(sigma))
    return b, sigma


def coefficient_covariance(prior, posteriors, z):
    n, q = z.shape
    inflated = prior * n / (n - q)
    info = np.zeros((K * q, K * q))
    for i in range(n):
        if posteriors[i] is None:
            continue
        h = np.linalg.inv(posteriors[i]) - np.linalg.inv(prior)
        c = np.linalg.inv(h)
        w = np.linalg.inv(inflated + c)
        info += np.kron(np.outer(z[i], z[i]), w)
    return np.linalg.inv(info)


def tests(b, cov, n, q):
    se = np.sqrt(np.diag(cov)).reshape(q, K).T  # index c*k + j -> [j, c]
    t = b / se
    p = 2 * scipy.stats.t.sf(np.abs(t), n - q)
    return se, t, p


def posterior_under(prior, h):
    return np.linalg.inv(np.linalg.inv(prior) + h)


def random_spd(scale):
    a = RNG.normal(size=(K, K))
    return scale * (a @ a.T + 0.5 * np.eye(K))


rows = []


def emit(case, full, centred, quantity, i, j, value):
    rows.append([case, int(full), int(centred), quantity, i, j, repr(float(value))])


def write_case(case, full, centred, scores, theta, posteriors, prior, b, sigma, se, t, p):
    for i in range(N):
        for j in range(P):
            emit(case, full, centred, "score", i, j, scores[i, j])
        for j in range(K):
            emit(case, full, centred, "mode", i, j, theta[i, j])
        if posteriors[i] is not None:
            for a in range(K):
                for c in range(K):
                    emit(case, full, centred, "posterior", i, a * K + c, posteriors[i][a, c])
    for a in range(K):
        for c in range(K):
            emit(case, full, centred, "prior", 0, a * K + c, prior[a, c])
            emit(case, full, centred, "sigma", 0, a * K + c, sigma[a, c])
    for j in range(K):
        for c in range(P + 1):
            emit(case, full, centred, "coefficient", j, c, b[j, c])
            emit(case, full, centred, "std_error", j, c, se[j, c])
            emit(case, full, centred, "t", j, c, t[j, c])
            emit(case, full, centred, "p", j, c, p[j, c])


def close(a, b, what):
    assert np.allclose(a, b, rtol=1e-9, atol=0), (what, a, b)


# Scores on a questionnaire-like scale; modes depend on them linearly plus noise.
true_b = np.array([[-1.2, 0.3, -0.1], [0.5, 0.0, 0.25]])

# --- case "exact": OLS limit, checked against statsmodels OLS, diagonal and full M-step.
scores = RNG.normal(loc=[20.0, 5.0], scale=[6.0, 2.0], size=(N, P))
z = design(scores, True)
theta = z @ true_b.T + RNG.normal(scale=0.3, size=(N, K))
posteriors = [1e-10 * np.eye(K) for _ in range(N)]
for full in (False, True):
    # The prior is the M-step covariance itself (a fixed point of EM).
    b, sigma = m_step(theta, posteriors, np.eye(K), z, full)
    prior = sigma
    cov = coefficient_covariance(prior, posteriors, z)
    se, t, p = tests(b, cov, N, P + 1)
    for j in range(K):
        ols = sm.OLS(theta[:, j], z).fit()
        close(b[j], ols.params, "OLS coefficients")
        assert np.allclose(se[j], ols.bse, rtol=1e-7), (se[j], ols.bse)
        assert np.allclose(t[j], ols.tvalues, rtol=1e-7), (t[j], ols.tvalues)
        assert np.allclose(p[j], ols.pvalues, rtol=1e-6), (p[j], ols.pvalues)
        se[j], t[j], p[j] = ols.bse, ols.tvalues, ols.pvalues
    write_case("exact", full, True, scores, theta, posteriors, prior, b, sigma, se, t, p)

# --- case "weighted": diagonal prior and diagonal P_i, checked against statsmodels WLS.
scores = RNG.normal(loc=[20.0, 5.0], scale=[6.0, 2.0], size=(N, P))
z = design(scores, True)
theta = z @ true_b.T + RNG.normal(scale=0.4, size=(N, K))
prior = np.diag([0.16, 0.09])
posteriors = [posterior_under(prior, np.diag(RNG.uniform(2.0, 40.0, size=K))) for _ in range(N)]
b, sigma = m_step(theta, posteriors, prior, z, False)
cov = coefficient_covariance(prior, posteriors, z)
se, t, p = tests(b, cov, N, P + 1)
for j in range(K):
    c = np.array([1.0 / (1.0 / post[j, j] - 1.0 / prior[j, j]) for post in posteriors])
    weights = 1.0 / (prior[j, j] * N / (N - P - 1) + c)
    wls = sm.WLS(theta[:, j], z, weights=weights).fit(
        cov_type="fixed scale", cov_kwds={"scale": 1.0}, use_t=True
    )
    close(se[j], wls.bse, "WLS standard errors")
    assert wls.df_resid == N - P - 1
    se[j] = wls.bse
    t[j] = b[j] / wls.bse
    p[j] = 2 * scipy.stats.t.sf(np.abs(t[j]), wls.df_resid)
write_case("weighted", False, True, scores, theta, posteriors, prior, b, sigma, se, t, p)

# --- case "correlated": full prior, full P_i, one participant without, scores as given.
scores = RNG.normal(loc=[50.0, 10.0], scale=[8.0, 3.0], size=(N, P))
z = design(scores, False)
theta = z @ np.array([[-2.0, 0.02, 0.05], [1.0, -0.03, 0.1]]).T + RNG.normal(scale=0.4, size=(N, K))
prior = np.array([[0.20, 0.06], [0.06, 0.12]])
posteriors = [posterior_under(prior, random_spd(8.0)) for _ in range(N)]
posteriors[3] = None
b, sigma = m_step(theta, posteriors, prior, z, True)
cov = coefficient_covariance(prior, posteriors, z)
se, t, p = tests(b, cov, N, P + 1)
write_case("correlated", True, False, scores, theta, posteriors, prior, b, sigma, se, t, p)

here = os.path.dirname(os.path.abspath(__file__))
with open(os.path.join(here, "prior_regression_reference.csv"), "w", newline="") as f:
    writer = csv.writer(f)
    writer.writerow(["case", "full", "centred", "quantity", "i", "j", "value"])
    writer.writerows(rows)
print(f"wrote {len(rows)} rows")
