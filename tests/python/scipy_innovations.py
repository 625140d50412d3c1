"""Reference values for the standardized innovation laws, computed live with scipy.

Reads lines "<what> <nu> <x>" on stdin, where nu is "inf" for the standard
normal, and prints one value per line (repr, full precision):
  logpdf  nu z   log density of the standardized law at z
  cdf     nu z   P(Z <= z)
  ppf     nu p   quantile at probability p (refined, see below)
  rawppf  nu p   scipy's own ppf, unrefined
  es      nu a   -E[Z | Z <= q_a], by scipy.stats.<law>.expect (adaptive quad)
The standardized t is Z = T * sqrt((nu-2)/nu) with T ~ scipy.stats.t(nu).

scipy 1.10's t.ppf (cephes stdtrit) is accurate to only ~2e-9 relative (checked
against a 40-digit mpmath inversion of the incomplete-beta cdf: nu=4, p=0.05 gives
-1.50744331906232 standardized, scipy -1.50744331553). The "ppf" answer is
therefore scipy's ppf followed by Newton steps on scipy's own cdf and pdf, which
are accurate to a few ulps; "rawppf" is kept so the test can show the difference.
"""
import math
import sys

from scipy import stats


def refined_ppf(dist, p):
    x = dist.ppf(p)
    for _ in range(4):
        f = dist.pdf(x)
        if f <= 0.0:
            break
        step = (dist.cdf(x) - p) / f
        x -= step
        if abs(step) <= 1e-17 * max(1.0, abs(x)):
            break
    return x


def main():
    out = []
    for line in sys.stdin:
        parts = line.split()
        if not parts:
            continue
        what, nu_s, x_s = parts
        x = float(x_s)
        if nu_s == "inf":
            dist, scale = stats.norm(), 1.0
        else:
            nu = float(nu_s)
            dist, scale = stats.t(nu), math.sqrt((nu - 2.0) / nu)
        if what == "logpdf":
            v = dist.logpdf(x / scale) - math.log(scale)
        elif what == "cdf":
            v = dist.cdf(x / scale)
        elif what == "ppf":
            v = scale * refined_ppf(dist, x)
        elif what == "rawppf":
            v = scale * dist.ppf(x)
        elif what == "es":
            raw_q = refined_ppf(dist, x)
            tail_mean = dist.expect(lambda u: u, lb=-math.inf, ub=raw_q, conditional=True,
                                    epsabs=1e-14, epsrel=1e-13, limit=200)
            v = -scale * tail_mean
        else:
            raise SystemExit("unknown request " + what)
        out.append(repr(float(v)))
    sys.stdout.write("\n".join(out) + "\n")


if __name__ == "__main__":
    main()
