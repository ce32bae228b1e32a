#!/usr/bin/python3
"""Reference values for the spc control-chart engine tests.

Run with Debian's python3-scipy:  /usr/bin/python3 engine_reference.py
It writes engine_reference.json beside itself. Every value is computed
with SciPy (scipy.stats binom, poisson, chi2, norm, chi2_contingency,
chisquare) or NumPy; the SciPy and NumPy versions are recorded in the
JSON. The inputs are fixed small examples chosen for the tests.
"""
import json
import os

import numpy as np
import scipy
from scipy import stats


def exact_limits(dist, alpha2):
    """ucl = smallest u with P(X > u) <= alpha2; lcl = largest l with
    P(X < l) <= alpha2, by direct search over SciPy's sf and cdf."""
    u = 0
    while dist.sf(u) > alpha2:
        u += 1
    l = 0
    while dist.cdf(l) <= alpha2:  # P(X < l+1) = P(X <= l)
        l += 1
    return int(u), int(l)


def tail(dist, count):
    """One-sided tail in the observed direction."""
    if count >= dist.mean():
        return float(dist.sf(count - 1))  # P(X >= count)
    return float(dist.cdf(count))  # P(X <= count)


out = {
    "generator": "spc/testdata/engine_reference.py",
    "scipy": scipy.__version__,
    "numpy": np.__version__,
}

# Exact probability limits.
exact = []
for k in (3.0, 2.0):
    alpha2 = float(stats.norm.sf(k))
    for n, p in ((50, 347 / 1500), (200, 0.02), (1000, 0.005), (20, 0.5), (5000, 0.001), (80, 0.9)):
        u, l = exact_limits(stats.binom(n, p), alpha2)
        exact.append({"dist": "binomial", "k": k, "n": n, "p": p, "ucl": u, "lcl": l})
    for lam in (0.5, 4.2, 25.0, 180.5):
        u, l = exact_limits(stats.poisson(lam), alpha2)
        exact.append({"dist": "poisson", "k": k, "lambda": lam, "ucl": u, "lcl": l})
out["exact_limits"] = exact

# Tail probabilities in the observed direction.
tails = []
for n, p, c in ((50, 0.2, 22), (50, 0.2, 3), (50, 0.2, 10), (500, 0.01, 15), (500, 0.01, 0), (10000, 0.003, 55), (10000, 0.003, 12)):
    tails.append({"dist": "binomial", "n": n, "p": p, "count": c, "tail": tail(stats.binom(n, p), c)})
for lam, c in ((3.5, 11), (3.5, 0), (3.5, 4), (120.0, 160), (120.0, 85)):
    tails.append({"dist": "poisson", "lambda": lam, "count": c, "tail": tail(stats.poisson(lam), c)})
out["tails"] = tails

# Chi-square upper tails.
out["chi2_sf"] = [{"x": x, "df": df, "sf": float(stats.chi2.sf(x, df))}
                  for x, df in ((29.0, 29), (61.3, 29), (12.0, 4), (150.0, 99), (3.2, 10))]

# Pearson homogeneity chi-square of a p chart (2 x m table, no
# continuity correction) and of a u chart (observed against n_i * u-bar).
p_lots = [[50, c] for c in (12, 15, 8, 10, 4, 7, 16, 9, 14, 10, 5, 6, 17, 12, 22,
                            8, 10, 5, 13, 11, 20, 18, 24, 15, 9, 12, 7, 13, 9, 6)]
d = np.array([c for _, c in p_lots])
n = np.array([m for m, _ in p_lots])
chi, pval, dof, _ = stats.chi2_contingency(np.vstack([d, n - d]), correction=False)
out["p_homogeneity"] = {"lots": p_lots, "chi2": float(chi), "df": int(dof), "p": float(pval)}

u_lots = [[n_, c] for n_, c in ((10, 14), (12, 20), (8, 9), (15, 30), (10, 12), (11, 25), (9, 8), (14, 21), (10, 17), (13, 15))]
c = np.array([x for _, x in u_lots], dtype=float)
n = np.array([x for x, _ in u_lots], dtype=float)
ubar = c.sum() / n.sum()
r = stats.chisquare(c, n * ubar)
out["u_homogeneity"] = {"lots": u_lots, "chi2": float(r.statistic), "df": len(u_lots) - 1, "p": float(r.pvalue)}

# Laney p' by direct application of Laney (2002): z_i from the sigma
# method, sigma_z = mean |z_i - z_{i-1}| / 1.128, limits
# p-bar +/- 3 sigma_i sigma_z.
l_lots = [[n_, c] for n_, c in ((1200, 31), (980, 12), (1500, 52), (1100, 20), (1320, 45), (900, 9), (1450, 30),
                                  (1010, 38), (1250, 18), (1600, 61), (1180, 25), (950, 14))]
n = np.array([x for x, _ in l_lots], dtype=float)
d = np.array([x for _, x in l_lots], dtype=float)
pbar = d.sum() / n.sum()
sig = np.sqrt(pbar * (1 - pbar) / n)
z = (d / n - pbar) / sig
sz = np.mean(np.abs(np.diff(z))) / 1.128
out["laney_p"] = {
    "lots": l_lots, "pbar": float(pbar), "sigma_z": float(sz),
    "ucl": [float(x) for x in pbar + 3 * sig * sz],
    "lcl": [float(max(0.0, x)) for x in pbar - 3 * sig * sz],
    "z": [float(x) for x in z / sz],
}

with open(os.path.join(os.path.dirname(os.path.abspath(__file__)), "engine_reference.json"), "w") as f:
    json.dump(out, f, indent=1)
    f.write("\n")
