"""ARCH-effect tests on simulated tick data, computed live with statsmodels.

Reads a tick CSV "symbol,time,return" on stdin and prints, per symbol in
order of first appearance, one line
  <symbol> <n> <ljung_box_sq_pvalue> <arch_lm_pvalue> <excess_kurtosis>
where
  ljung_box_sq_pvalue: statsmodels.stats.diagnostic.acorr_ljungbox on the
                       squared demeaned returns, lag 10 (Ljung & Box 1978;
                       McLeod & Li 1983 for squares);
  arch_lm_pvalue:      statsmodels.stats.diagnostic.het_arch, 10 lags (Engle 1982);
  excess_kurtosis:     scipy.stats.kurtosis (Fisher definition, 0 for a normal).
"""
import sys

import numpy as np
from scipy import stats
from statsmodels.stats.diagnostic import acorr_ljungbox, het_arch


def main():
    header = sys.stdin.readline().strip().split(",")
    si, vi = header.index("symbol"), header.index("return")
    series = {}
    for line in sys.stdin:
        parts = line.strip().split(",")
        if len(parts) != len(header):
            continue
        series.setdefault(parts[si], []).append(float(parts[vi]))
    for sym, values in series.items():
        r = np.asarray(values)
        e = r - r.mean()
        lb = acorr_ljungbox(e * e, lags=[10], return_df=True)
        lm_p = het_arch(e, nlags=10)[1]
        print(sym, len(r), repr(float(lb["lb_pvalue"].iloc[0])), repr(float(lm_p)),
              repr(float(stats.kurtosis(r))))


if __name__ == "__main__":
    main()
