#!/usr/bin/env python3
"""Independent reference implementation of the GARCH-family conditional
log-likelihood, written with numpy and scipy.stats (Debian python3-scipy), for
the live cross-check in tests/estimation/likelihood_test.cc.

Input (stdin, JSON): {"returns": [...], "spec": {"mean": "constant"|"zero"|"arma",
"p": int, "q": int, "variance": "garch"|"gjr"|"arch"|"ewma"|"flat",
"na": int, "no": int, "nb": int, "innovations": "gaussian"|"student"},
"params": [...], "presample": "mean-square"|"robust-start"}

Presample rules (README "Models"): mean-square is the mean of all squared
residuals; robust-start is (1.4826 * m)^2 with m the weighted median of |eps|
over the first 50 residuals, weights 2^(-j/10), the median being the smallest
|eps| whose cumulative weight in ascending order reaches half the total.
Output (stdout, JSON): {"loglik": float, "scipy": version}

The density comes from scipy.stats (norm.logpdf, t.logpdf with the scale that
gives unit variance), not from the formulas used in the C++ code.
"""
import json
import sys

import numpy as np
import scipy
from scipy import stats


def main():
    req = json.load(sys.stdin)
    r = np.asarray(req["returns"], dtype=float)
    sp = req["spec"]
    th = list(req["params"])
    pos = 0
    p = q = 0
    mu = 0.0
    ar, ma = [], []
    if sp["mean"] != "zero":
        mu = th[pos]; pos += 1
    if sp["mean"] == "arma":
        p, q = sp["p"], sp["q"]
        ar = th[pos:pos + p]; pos += p
        ma = th[pos:pos + q]; pos += q
    # Mean recursion, conditioning on the first p returns, presample eps = 0.
    n = len(r) - p
    eps = np.zeros(n)
    for k in range(n):
        t = k + p
        m = mu
        for i in range(p):
            m += ar[i] * r[t - 1 - i]
        for j in range(q):
            if k - 1 - j >= 0:
                m += ma[j] * eps[k - 1 - j]
        eps[k] = r[t] - m
    e2 = eps ** 2
    s2 = float(np.mean(e2))
    if req["presample"] == "robust-start":
        m = min(n, 50)
        a = np.abs(eps[:m])
        w = np.power(2.0, -np.arange(m) / 10.0)
        idx = np.argsort(a, kind="stable")
        cum = np.cumsum(w[idx])
        med = a[idx[np.searchsorted(cum, 0.5 * np.sum(w))]]
        # 1 / Phi^-1(3/4) from scipy, not the constant of the C++ code.
        c = 1.0 / stats.norm.ppf(0.75)
        if med > 0:
            s2 = float((c * med) ** 2)
    var = sp["variance"]
    sig2 = np.zeros(n)
    if var == "flat":
        sig2[:] = th[pos]; pos += 1
    elif var == "ewma":
        lam = th[pos]; pos += 1
        prev_s, prev_e = s2, s2
        for k in range(n):
            sig2[k] = lam * prev_s + (1 - lam) * prev_e
            prev_s, prev_e = sig2[k], e2[k]
    else:
        na, no, nb = sp["na"], sp["no"], sp["nb"]
        omega = th[pos]; pos += 1
        alpha = th[pos:pos + na]; pos += na
        gamma = th[pos:pos + no]; pos += no
        beta = th[pos:pos + nb]; pos += nb
        neg = np.where(eps < 0, e2, 0.0)
        for k in range(n):
            v = omega
            for i in range(na):
                v += alpha[i] * (e2[k - 1 - i] if k - 1 - i >= 0 else s2)
            for i in range(no):
                v += gamma[i] * (neg[k - 1 - i] if k - 1 - i >= 0 else 0.5 * s2)
            for j in range(nb):
                v += beta[j] * (sig2[k - 1 - j] if k - 1 - j >= 0 else s2)
            sig2[k] = v
    sd = np.sqrt(sig2)
    if sp["innovations"] == "student":
        nu = th[pos]; pos += 1
        scale = sd * np.sqrt((nu - 2.0) / nu)
        ll = float(np.sum(stats.t.logpdf(eps, df=nu, loc=0.0, scale=scale)))
    else:
        ll = float(np.sum(stats.norm.logpdf(eps, loc=0.0, scale=sd)))
    assert pos == len(th), "parameter count mismatch"
    json.dump({"loglik": ll, "scipy": scipy.__version__}, sys.stdout)


if __name__ == "__main__":
    main()
