"""Live reference values from statsmodels / scipy for the statistics and ARMA tests.

Usage: statsmodels_ref.py MODE < input.json; prints one JSON object.

MODE "stats": input {"x": [...], "lags": h, "model_df": d, "arch_lags": m,
  "arch_ddof": k, "pacf_lags": K, "z": [...]}.
  - statsmodels.stats.diagnostic.acorr_ljungbox(x, lags=[h], model_df=0 and d)
  - McLeod-Li: acorr_ljungbox(x**2, lags=[h], model_df=d)
  - statsmodels.stats.diagnostic.het_arch(x, nlags=m, ddof=0 and k)
  - statsmodels.tsa.stattools.pacf(x, nlags=K, method="ldb") and acf(x, nlags=K, fft=False)
  - statsmodels.stats.stattools.jarque_bera(x)
  - acorr_ljungbox(z, lags=[h], model_df=d)
  - Engle-Ng sign-bias regression with statsmodels.regression.linear_model.OLS on z
MODE "chi2": input {"cases": [[df, upper_tail_prob], ...]}; scipy.stats.chi2.ppf(1 - a, df)
  plus a set of distribution values (chi2.sf, f.sf, norm.cdf/ppf, t.cdf) at
  input "points".
MODE "arma": input {"jobs": [{"y": [...], "p": p, "q": q}, ...]}; for each job
  statsmodels.tsa.arima.model.ARIMA(y, order=(p,0,q), trend="c").fit(): params,
  llf, aic, bic, nobs and the one-step prediction errors (resid) at the fitted
  parameters; output {"results": [...]} in job order.
"""
import json
import sys
import warnings

import numpy as np
import scipy
import scipy.stats as st
import statsmodels

warnings.simplefilter("ignore")


def versions():
    return {"statsmodels": statsmodels.__version__, "scipy": scipy.__version__,
            "numpy": np.__version__}


def stats_mode(d):
    from statsmodels.regression.linear_model import OLS
    from statsmodels.stats.diagnostic import acorr_ljungbox, het_arch
    from statsmodels.stats.stattools import jarque_bera
    from statsmodels.tsa.stattools import acf, pacf

    x = np.asarray(d["x"], dtype=float)
    h = int(d["lags"])
    dof = int(d["model_df"])
    out = versions()
    q0, p0 = acorr_ljungbox(x, lags=[h], model_df=0, return_df=False)
    q1, p1 = acorr_ljungbox(x, lags=[h], model_df=dof, return_df=False)
    out["lb"] = [float(q0[0]), float(p0[0])]
    out["lb_dof"] = [float(q1[0]), float(p1[0])]
    q2, p2 = acorr_ljungbox(x ** 2, lags=[h], model_df=dof, return_df=False)
    out["mcleod_li_dof"] = [float(q2[0]), float(p2[0])]
    m = int(d["arch_lags"])
    out["het_arch"] = [float(v) for v in het_arch(x, nlags=m)]
    out["het_arch_ddof"] = [float(v) for v in het_arch(x, nlags=m, ddof=int(d["arch_ddof"]))]
    k = int(d["pacf_lags"])
    out["pacf"] = pacf(x, nlags=k, method="ldb").tolist()
    out["acf"] = acf(x, nlags=k, fft=False).tolist()
    jb, jbp, skew, kurt = jarque_bera(x)
    out["jarque_bera"] = [float(jb), float(jbp), float(skew), float(kurt)]
    z = np.asarray(d["z"], dtype=float)
    q3, p3 = acorr_ljungbox(z, lags=[h], model_df=dof, return_df=False)
    out["lb_z_dof"] = [float(q3[0]), float(p3[0])]
    zl = z[:-1]
    neg = (zl < 0).astype(float)
    design = np.column_stack([np.ones_like(zl), neg, neg * zl, (1 - neg) * zl])
    res = OLS(z[1:] ** 2, design).fit()
    out["sign_bias"] = {
        "coef": res.params[1:].tolist(),
        "t": res.tvalues[1:].tolist(),
        "p": res.pvalues[1:].tolist(),
        "joint": float(res.nobs * res.rsquared),
        "joint_p": float(st.chi2.sf(res.nobs * res.rsquared, 3)),
    }
    return out


def chi2_mode(d):
    out = versions()
    out["ppf"] = [float(st.chi2.ppf(1.0 - a, df)) for df, a in d["cases"]]
    pts = d["points"]
    out["chi2_sf"] = [float(st.chi2.sf(x, df)) for x, df in pts["chi2_sf"]]
    out["chi2_ppf"] = [float(st.chi2.ppf(p, df)) for p, df in pts["chi2_ppf"]]
    out["f_sf"] = [float(st.f.sf(x, a, b)) for x, a, b in pts["f_sf"]]
    out["norm_cdf"] = [float(st.norm.cdf(x)) for x in pts["norm_cdf"]]
    out["norm_ppf"] = [float(st.norm.ppf(p)) for p in pts["norm_ppf"]]
    out["t_cdf"] = [float(st.t.cdf(x, df)) for x, df in pts["t_cdf"]]
    return out


def arma_mode(d):
    from statsmodels.tsa.arima.model import ARIMA

    results = []
    for job in d["jobs"]:
        y = np.asarray(job["y"], dtype=float)
        res = ARIMA(y, order=(int(job["p"]), 0, int(job["q"])), trend="c").fit()
        out = versions()
        # Parameter order: const (the mean), ar.L1.., ma.L1.., sigma2.
        out["params"] = [float(v) for v in res.params]
        out["param_names"] = list(res.param_names)
        out["llf"] = float(res.llf)
        out["aic"] = float(res.aic)
        out["bic"] = float(res.bic)
        out["nobs"] = int(res.nobs)
        out["resid"] = np.asarray(res.resid, dtype=float).tolist()
        results.append(out)
    return {"results": results}


def main():
    mode = sys.argv[1]
    d = json.load(sys.stdin)
    fn = {"stats": stats_mode, "chi2": chi2_mode, "arma": arma_mode}[mode]
    print(json.dumps(fn(d)))


if __name__ == "__main__":
    main()
