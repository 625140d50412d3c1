#!/usr/bin/env python3
"""Vectorized SciPy reference fit of the Gaussian GARCH(1,1) likelihood with a
constant mean, mean-square presample (the same likelihood as aftershock's), used
by bench/fit_bench.cc to put aftershock's fit time next to SciPy's in one run.

The recursion sigma2_t = omega + alpha*eps2_{t-1} + beta*sigma2_{t-1} is a
first-order linear filter, evaluated with scipy.signal.lfilter; the analytic
gradient uses the same filter. Optimizer: scipy.optimize.minimize(L-BFGS-B)
with bounds, on data scaled to unit variance (as aftershock does).

Input: one number a line on stdin. Output (JSON): estimates, loglik, and the
median wall time of `--repeat` fits in seconds.
"""
import argparse
import json
import sys
import time

import numpy as np
import scipy
from scipy.optimize import minimize
from scipy.signal import lfilter


def negloglik_and_grad(theta, y):
    mu, omega, alpha, beta = theta
    n = y.size
    eps = y - mu
    e2 = eps * eps
    s2 = e2.mean()
    # x_t = omega + alpha*e2_{t-1}, e2_{-1} = s2; sigma2_t = x_t + beta*sigma2_{t-1}, sigma2_{-1} = s2
    e2_lag = np.empty(n)
    e2_lag[0] = s2
    e2_lag[1:] = e2[:-1]
    x = omega + alpha * e2_lag
    zi = np.array([beta * s2])
    sig2, _ = lfilter([1.0], [1.0, -beta], x, zi=zi)
    if np.any(sig2 <= 0) or not np.all(np.isfinite(sig2)):
        return 1e10, np.zeros(4)
    ll = -0.5 * (np.log(2 * np.pi) + np.log(sig2) + e2 / sig2)
    f = -ll.sum() / n
    dl_dv = 0.5 * (e2 / sig2 - 1.0) / sig2
    dl_de = -eps / sig2
    # d s2/d mu = -2 mean(eps)
    ds2 = -2.0 * eps.mean()
    de2_lag = np.empty(n)
    de2_lag[0] = ds2
    de2_lag[1:] = -2.0 * eps[:-1]
    dsig_mu, _ = lfilter([1.0], [1.0, -beta], alpha * de2_lag, zi=np.array([beta * ds2]))
    dsig_om, _ = lfilter([1.0], [1.0, -beta], np.ones(n), zi=np.array([0.0]))
    dsig_al, _ = lfilter([1.0], [1.0, -beta], e2_lag, zi=np.array([0.0]))
    sig_lag = np.empty(n)
    sig_lag[0] = s2
    sig_lag[1:] = sig2[:-1]
    dsig_be, _ = lfilter([1.0], [1.0, -beta], sig_lag, zi=np.array([0.0]))
    g = np.array([
        np.sum(dl_dv * dsig_mu + dl_de * -1.0),
        np.sum(dl_dv * dsig_om),
        np.sum(dl_dv * dsig_al),
        np.sum(dl_dv * dsig_be),
    ])
    return f, -g / n


def fit(r):
    c = r.std()
    y = r / c
    x0 = np.array([y.mean(), 0.1, 0.1, 0.8])
    res = minimize(negloglik_and_grad, x0, args=(y,), jac=True, method="L-BFGS-B",
                   bounds=[(-100, 100), (1e-8, 100), (0, 1), (0, 0.9999)],
                   options={"ftol": 1e-12, "gtol": 1e-8, "maxiter": 1000})
    mu, omega, alpha, beta = res.x
    ll = -res.fun * y.size - y.size * np.log(c)
    return {"mu": mu * c, "omega": omega * c * c, "alpha": alpha, "beta": beta,
            "loglik": ll, "nit": int(res.nit), "success": bool(res.success)}


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--repeat", type=int, default=20)
    args = ap.parse_args()
    r = np.array([float(v) for v in sys.stdin.read().split()])
    times = []
    out = None
    for _ in range(args.repeat):
        t0 = time.perf_counter()
        out = fit(r)
        times.append(time.perf_counter() - t0)
    out["median_seconds"] = float(np.median(times))
    out["scipy"] = scipy.__version__
    out["numpy"] = np.__version__
    json.dump(out, sys.stdout)


if __name__ == "__main__":
    main()
