#!/usr/bin/env python3
"""Generate reference values for the group statistics of valuedrift (src/group/mod.rs).

Offline tool: the Rust tests (tests/suite/group_statistics.rs) only read the CSV written next to this
script, so Python is not needed to run them.

    pip install scipy numpy
    python3 tests/reference/generate_group_statistics.py

Output: group_statistics.csv with columns
    case,test,samples,statistic,df,df2,p_value,ci_low,ci_high
where `samples` holds the groups separated by '|' and the values of a group separated by ' '
(each written with repr, so the Rust side reads back the exact doubles), and, per `test`:
    welch         scipy.stats.ttest_ind(x, y, equal_var=False): statistic = t, df = Welch df
                  (from the result's .df), p_value = two-sided p
    mann_whitney  scipy.stats.mannwhitneyu(x, y, method="asymptotic", use_continuity=True,
                  alternative="two-sided"): statistic = U of the first sample, p_value
    kruskal       scipy.stats.kruskal(*groups): statistic = H (tie-corrected), df = k - 1,
                  p_value
    hedges        Hedges' g computed here with numpy from its formula (Hedges 1981, exact bias
                  correction J(m) = Gamma(m/2) / (sqrt(m/2) Gamma((m-1)/2)) via
                  scipy.special.gammaln), 95 % interval with the large-sample variance of
                  Hedges & Olkin (1985): (n1+n2)/(n1 n2) + g^2/(2(n1+n2)), z = norm.ppf(0.975)
    welch_anova   Welch (1951) one-way ANOVA computed here with numpy from its formula,
                  p from scipy.stats.f.sf: statistic = F, df = k - 1, df2, p_value
Empty fields are not applicable to that test.
"""

import csv
import os

import numpy as np
from scipy import special, stats

HERE = os.path.dirname(os.path.abspath(__file__))


def cases():
    rng = np.random.default_rng(20240611)
    out = {}
    # Continuous samples, unequal sizes and variances (no ties).
    out["normal_unequal"] = [rng.normal(0.3, 1.0, 12), rng.normal(0.0, 2.5, 9)]
    out["shifted_large"] = [rng.normal(2.0, 0.5, 30), rng.normal(0.0, 0.7, 25)]
    out["learning_rates"] = [rng.beta(2.0, 5.0, 15), rng.beta(3.0, 4.0, 18)]
    out["small_equal"] = [np.array([1.2, 3.4, 2.2, 0.7]), np.array([2.9, 4.1, 3.3])]
    # Rounded values: many ties.
    out["ties"] = [np.round(rng.normal(1.0, 1.0, 20), 1), np.round(rng.normal(1.4, 1.0, 16), 1)]
    out["heavy_ties"] = [
        np.array([1.0, 2.0, 2.0, 3.0, 3.0, 3.0, 4.0, 5.0]),
        np.array([2.0, 3.0, 3.0, 4.0, 4.0, 5.0, 5.0, 5.0, 6.0]),
    ]
    # Several groups.
    out["three_groups"] = [rng.normal(0.0, 1.0, 10), rng.normal(0.5, 2.0, 14), rng.normal(1.2, 0.6, 8)]
    out["four_groups_ties"] = [
        np.round(rng.gamma(2.0, 1.0, n), 1) + shift
        for n, shift in [(11, 0.0), (7, 0.4), (13, 0.8), (9, 0.2)]
    ]
    return out


def hedges(x, y):
    n1, n2 = len(x), len(y)
    m = n1 + n2 - 2
    sp = np.sqrt(((n1 - 1) * np.var(x, ddof=1) + (n2 - 1) * np.var(y, ddof=1)) / m)
    d = (np.mean(x) - np.mean(y)) / sp
    j = np.exp(special.gammaln(m / 2) - special.gammaln((m - 1) / 2)) / np.sqrt(m / 2)
    g = j * d
    se = np.sqrt((n1 + n2) / (n1 * n2) + g * g / (2 * (n1 + n2)))
    z = stats.norm.ppf(0.975)
    return g, g - z * se, g + z * se


def welch_anova(groups):
    k = len(groups)
    n = np.array([len(g) for g in groups], dtype=float)
    means = np.array([np.mean(g) for g in groups])
    w = n / np.array([np.var(g, ddof=1) for g in groups])
    centre = np.sum(w * means) / np.sum(w)
    lam = np.sum((1 - w / np.sum(w)) ** 2 / (n - 1))
    f = (np.sum(w * (means - centre) ** 2) / (k - 1)) / (1 + 2 * (k - 2) * lam / (k * k - 1))
    df2 = (k * k - 1) / (3 * lam)
    return f, k - 1, df2, stats.f.sf(f, k - 1, df2)


def main():
    rows = []
    for name, groups in cases().items():
        samples = "|".join(" ".join(repr(float(v)) for v in g) for g in groups)

        def row(test, statistic, df="", df2="", p="", lo="", hi=""):
            fmt = lambda v: "" if v == "" else repr(float(v))
            rows.append([name, test, samples, fmt(statistic), fmt(df), fmt(df2), fmt(p), fmt(lo), fmt(hi)])

        if len(groups) == 2:
            x, y = groups
            t = stats.ttest_ind(x, y, equal_var=False)
            row("welch", t.statistic, t.df, p=t.pvalue)
            u = stats.mannwhitneyu(x, y, method="asymptotic", use_continuity=True, alternative="two-sided")
            row("mann_whitney", u.statistic, p=u.pvalue)
            g, lo, hi = hedges(x, y)
            row("hedges", g, lo=lo, hi=hi)
        h = stats.kruskal(*groups)
        row("kruskal", h.statistic, len(groups) - 1, p=h.pvalue)
        f, df1, df2, p = welch_anova(groups)
        row("welch_anova", f, df1, df2, p)
    path = os.path.join(HERE, "group_statistics.csv")
    with open(path, "w", newline="") as fh:
        w = csv.writer(fh, lineterminator="\n")
        w.writerow(["case", "test", "samples", "statistic", "df", "df2", "p_value", "ci_low", "ci_high"])
        w.writerows(rows)
    print(f"wrote {len(rows)} rows to {path}")


if __name__ == "__main__":
    main()
