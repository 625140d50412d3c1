"""Reference values for recursive tracking (recursive_tracker.h, tracking_study.h),
computed live with scipy.

Reads lines on stdin and prints one answer line each:
  ttest a1,a2,... b1,b2,...   "t p" of scipy.stats.ttest_rel(a, b) (two-sided)
  info nu                     E[(d l / d log sigma2)^2] for the standardized
                              Student-t law with nu degrees of freedom (nu =
                              "inf": the normal), by scipy.integrate.quad over
                              the density: the expected information per bar of
                              log sigma2 that the tracker uses in closed form.
"""
import math
import sys

from scipy import integrate, stats


def info(nu):
    if math.isinf(nu):
        f = lambda z: (0.5 * (z * z - 1.0)) ** 2 * stats.norm.pdf(z)
    else:
        s = math.sqrt((nu - 2.0) / nu)  # Z = T * s
        def f(z):
            u = z * z / (nu - 2.0)
            score = -0.5 + 0.5 * (nu + 1.0) * u / (1.0 + u)
            return score * score * stats.t.pdf(z / s, nu) / s
    v, _ = integrate.quad(f, -math.inf, math.inf, epsabs=1e-13, epsrel=1e-12)
    return v


for line in sys.stdin:
    w = line.split()
    if not w:
        continue
    if w[0] == "ttest":
        a = [float(x) for x in w[1].split(",")]
        b = [float(x) for x in w[2].split(",")]
        r = stats.ttest_rel(a, b)
        print(repr(float(r.statistic)), repr(float(r.pvalue)))
    elif w[0] == "info":
        print(repr(info(float(w[1]))))
    else:
        raise SystemExit("unknown request " + w[0])
