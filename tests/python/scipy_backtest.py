"""Reference values for the VaR backtests and forecast regressions, computed live.

Reads one JSON object on stdin and prints one JSON object on stdout.

  {"exceptions": [{"hits": [0, 1, ...], "p": 0.01}, ...]}
      -> "exceptions": [{"lr_pof", "p_pof", "lr_ind", "p_ind", "lr_cc", "p_cc",
                          "n00", "n01", "n10", "n11"}, ...]
     Kupiec (1995) POF and Christoffersen (1998) independence / conditional
     coverage likelihood ratios written out with numpy; 0*log(0) = 0 through
     scipy.special.xlogy / xlog1py; p-values from scipy.stats.chi2.sf.

  {"binom": [{"n": 250, "p": 0.01, "k": 4}, ...]}
      -> "binom": [P(X <= k), ...] from scipy.stats.binom.cdf.

  {"zone_thresholds": [{"n": 97500, "p": 0.01, "q": 0.95}, ...]}
      -> "zone_thresholds": [smallest k with P(X <= k) >= q, ...] from
     scipy.stats.binom.ppf(q, n, p) (the scaled traffic-light bounds).

  {"pit": [{"z": [...], "law": "gaussian" | "student", "nu": 6, "bins": 20}, ...]}
      -> "pit": [{"counts", "chi2", "chi2_p", "ks_d", "ks_p"}, ...]
     u = F(z) with scipy.stats.norm.cdf, or for the standardized Student t
     scipy.stats.t.cdf(z * sqrt(nu / (nu - 2)), nu); counts from numpy.histogram
     on equal bins of [0, 1]; chi-square and its p from scipy.stats.chisquare;
     D and p from scipy.stats.kstest(u, "uniform", method="asymp") (two-sided,
     the limiting Kolmogorov distribution, scipy.stats.kstwobign).

  {"ols": [{"y": [...], "x": [...]}, ...]}
      -> "ols": [{"params": [a, b], "bse": [...], "bse_hc0": [...], "rsquared"}]
     from statsmodels.api.OLS(y, add_constant(x)).fit() and .fit(cov_type="HC0").
"""
import json
import sys

import numpy as np
from scipy import special, stats


def bern_loglik(k, m, q):
    # log[(1-q)^(m-k) q^k] with 0*log(0) = 0.
    return special.xlog1py(m - k, -q) + special.xlogy(k, q)


def exception_tests(hits, p):
    h = np.asarray(hits, dtype=np.int64)
    n = h.size
    x = int(h.sum())
    lr_pof = -2.0 * bern_loglik(x, n, p) + 2.0 * bern_loglik(x, n, x / n)
    prev, cur = h[:-1], h[1:]
    n00 = int(np.sum((prev == 0) & (cur == 0)))
    n01 = int(np.sum((prev == 0) & (cur == 1)))
    n10 = int(np.sum((prev == 1) & (cur == 0)))
    n11 = int(np.sum((prev == 1) & (cur == 1)))
    row0, row1 = n00 + n01, n10 + n11
    pairs = row0 + row1
    pi = (n01 + n11) / pairs
    pi01 = n01 / row0 if row0 else 0.0
    pi11 = n11 / row1 if row1 else 0.0
    l0 = bern_loglik(n01 + n11, pairs, pi)
    l1 = bern_loglik(n01, row0, pi01) + bern_loglik(n11, row1, pi11)
    lr_ind = max(0.0, -2.0 * l0 + 2.0 * l1)
    lr_pof = max(0.0, lr_pof)
    lr_cc = lr_pof + lr_ind
    return {
        "lr_pof": float(lr_pof), "p_pof": float(stats.chi2.sf(lr_pof, 1)),
        "lr_ind": float(lr_ind), "p_ind": float(stats.chi2.sf(lr_ind, 1)),
        "lr_cc": float(lr_cc), "p_cc": float(stats.chi2.sf(lr_cc, 2)),
        "n00": n00, "n01": n01, "n10": n10, "n11": n11,
    }


def ols(y, x):
    import statsmodels.api as sm
    X = sm.add_constant(np.asarray(x, dtype=float))
    y = np.asarray(y, dtype=float)
    classic = sm.OLS(y, X).fit()
    robust = sm.OLS(y, X).fit(cov_type="HC0")
    return {"params": classic.params.tolist(), "bse": classic.bse.tolist(),
            "bse_hc0": robust.bse.tolist(), "rsquared": float(classic.rsquared)}


def pit(z, law, nu, bins):
    z = np.asarray(z, dtype=float)
    if law == "student":
        u = stats.t.cdf(z * np.sqrt(nu / (nu - 2.0)), nu)
    else:
        u = stats.norm.cdf(z)
    counts, _ = np.histogram(u, bins=bins, range=(0.0, 1.0))
    chi = stats.chisquare(counts)
    ks = stats.kstest(u, "uniform", method="asymp")
    return {"counts": counts.tolist(), "chi2": float(chi.statistic), "chi2_p": float(chi.pvalue),
            "ks_d": float(ks.statistic), "ks_p": float(ks.pvalue)}


def main():
    req = json.load(sys.stdin)
    out = {}
    if "exceptions" in req:
        out["exceptions"] = [exception_tests(c["hits"], c["p"]) for c in req["exceptions"]]
    if "binom" in req:
        out["binom"] = [float(stats.binom.cdf(c["k"], c["n"], c["p"])) for c in req["binom"]]
    if "zone_thresholds" in req:
        out["zone_thresholds"] = [int(stats.binom.ppf(c["q"], c["n"], c["p"]))
                                  for c in req["zone_thresholds"]]
    if "pit" in req:
        out["pit"] = [pit(c["z"], c["law"], c.get("nu", 0.0), c["bins"]) for c in req["pit"]]
    if "ols" in req:
        out["ols"] = [ols(c["y"], c["x"]) for c in req["ols"]]
    json.dump(out, sys.stdout)


if __name__ == "__main__":
    main()
