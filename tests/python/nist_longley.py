"""Independent check of the NIST StRD Longley certified values with numpy.

Reads JSON {"y": [...], "x": [[...], ...], "coef": [...], "sd": [...], "resid_sd": s}
on stdin (the data and the certified values embedded in the C++ test), solves
the least-squares problem with numpy.linalg.lstsq (after centring the columns,
which the ill-conditioned Longley design needs for ten digits) and prints
numpy's coefficients, coefficient standard deviations and residual standard
deviation with the largest relative differences to the embedded values.
"""
import json
import sys

import numpy as np

d = json.load(sys.stdin)
y = np.asarray(d["y"], dtype=float)
x = np.asarray(d["x"], dtype=float)
n, m = x.shape
xbar = x.mean(axis=0)
ybar = y.mean()
xc = x - xbar
beta, _, rank, _ = np.linalg.lstsq(xc, y - ybar, rcond=None)
resid = (y - ybar) - xc @ beta
dof = n - (m + 1)
s2 = resid @ resid / dof
# (Xc'Xc)^-1 from the SVD of the centred design.
u, sv, vt = np.linalg.svd(xc, full_matrices=False)
inv = (vt.T / sv**2) @ vt
b0 = ybar - xbar @ beta
var0 = s2 / n + s2 * xbar @ inv @ xbar
coef = np.concatenate([[b0], beta])
sd = np.sqrt(np.concatenate([[var0], s2 * np.diag(inv)]))
resid_sd = float(np.sqrt(s2))


def maxrel(a, b):
    a = np.asarray(a, dtype=float)
    b = np.asarray(b, dtype=float)
    return float(np.max(np.abs(a - b) / np.abs(b)))


print(json.dumps({
    "numpy": np.__version__,
    "rank": int(rank),
    "coef": coef.tolist(),
    "sd": sd.tolist(),
    "resid_sd": resid_sd,
    "coef_maxrel": maxrel(coef, d["coef"]),
    "sd_maxrel": maxrel(sd, d["sd"]),
    "resid_sd_rel": abs(resid_sd - d["resid_sd"]) / d["resid_sd"],
}))
