#!/usr/bin/python3
"""Reference average run lengths for the CUSUM tests (spc/cusum_test.go).

Run with Debian's python3-scipy:  /usr/bin/python3 cusum_arl_reference.py
It writes cusum_arl_reference.json beside itself. Two independent
computations, neither the Markov chain of rounded scores that
spc/cusum.go uses:

normal: the one-sided CUSUM S = max(0, S + x - k) of standard normal
  observations with mean `shift`, zero start, signal at S >= h; its ARL
  solves the integral equation of Page (1954) / Goel & Wu (1971), here by
  the Nystrom method on Gauss-Legendre nodes (Vance 1986, JQT 18, 189-193),
  with the atom of S at 0 kept as its own unknown. Computed with 200 and
  400 nodes; the script stops if they differ by more than 1e-6
  (relative). These are the values of Lucas & Crosier (1982),
  Technometrics 24, 199-205, Table 1 (one-sided, zero start).

poisson_lattice: the Poisson CUSUM of a c chart in counts,
  S = max(0, S + c - k), signal at S >= h, with k and h whole numbers, so
  that S takes whole values only and the Markov chain on 0 .. h-1 is exact
  (Brook & Evans 1972, Biometrika 59, 539-549, the discrete case; the
  Poisson CUSUM of Lucas 1985, Technometrics 27, 129-144). k is the
  reference value of the likelihood-ratio score for a shift from c0 to c1,
  k = (c1 - c0) / ln(c1/c0); c1 is solved for (scipy.optimize.brentq) so
  that k is the whole number asked. In the score's own units (those of
  spc.CUSUM) the decision interval is h * ln(c1/c0). Poisson
  probabilities from scipy.stats.poisson.
"""
import json
import math
import os

import numpy as np
import scipy
from scipy import optimize, stats


def normal_arl(k, h, shift, nodes):
    """Zero-start ARL of the one-sided normal CUSUM by Nystrom's method."""
    x, w = np.polynomial.legendre.leggauss(nodes)
    y = (x + 1) * h / 2
    w = w * h / 2
    n = nodes + 1
    a = np.zeros((n, n))
    starts = np.concatenate(([0.0], y))
    for i, s in enumerate(starts):
        a[i, i] += 1
        a[i, 0] -= stats.norm.cdf(k - s - shift, loc=0)  # to the atom at 0
        a[i, 1:] -= w * stats.norm.pdf(y - s + k - shift)
    arl = np.linalg.solve(a, np.ones(n))
    return float(arl[0])


def lattice_arl(mean, k, h):
    """Exact zero-start ARL of S = max(0, S + c - k), c ~ Poisson(mean),
    signal at S >= h, all whole numbers: states 0 .. h-1."""
    q = np.zeros((h, h))
    for j in range(h):
        q[j, 0] = stats.poisson.cdf(k - j, mean)  # c - k <= -j: back to 0
        for to in range(1, h):
            q[j, to] = stats.poisson.pmf(to - j + k, mean)
    arl = np.linalg.solve(np.eye(h) - q, np.ones(h))
    return float(arl[0])


def bernoulli_arl(p, m, h):
    """Exact zero-start ARL of the Bernoulli CUSUM in whole units: a
    conforming unit takes 1 off S (not below 0), a nonconforming one adds
    m; signal at S >= h: states 0 .. h-1."""
    q = np.zeros((h, h))
    for j in range(h):
        q[j, max(j - 1, 0)] += 1 - p
        if j + m < h:
            q[j, j + m] += p
    arl = np.linalg.solve(np.eye(h) - q, np.ones(h))
    return float(arl[0])


def main():
    out = {
        "scipy": scipy.__version__,
        "numpy": np.__version__,
        "normal": [],
        "poisson_lattice": [],
        "poisson_off_lattice": [],
        "bernoulli": [],
    }
    for h in (4.0, 5.0):
        for shift in (0.0, 0.5, 1.0, 2.0):
            a200 = normal_arl(0.5, h, shift, 200)
            a400 = normal_arl(0.5, h, shift, 400)
            if abs(a200 - a400) > 1e-6 * a400:
                raise SystemExit("Nystrom not converged at h=%g shift=%g: %r %r" % (h, shift, a200, a400))
            out["normal"].append({"k": 0.5, "h": h, "shift": shift, "arl": a400})
    c0, k = 4.0, 5
    c1 = optimize.brentq(lambda c: (c - c0) / math.log(c / c0) - k, c0 + 1e-9, 4 * c0, xtol=1e-15, rtol=1e-15)
    for h in (8, 10):
        for mean in (c0, c1, 2 * c0):
            out["poisson_lattice"].append({"c0": c0, "c1": c1, "k": k, "h": h,
                                           "h_score": h * math.log(c1 / c0), "mean": mean,
                                           "arl": lattice_arl(mean, k, h)})
    for h in (6.5, 8.5, 11.5):
        for mean in (c0, c1):
            out["poisson_off_lattice"].append({"c0": c0, "c1": c1, "k": k, "h": h,
                                               "h_score": h * math.log(c1 / c0), "mean": mean,
                                               "arl": lattice_arl(mean, k, math.ceil(h))})
    # The Bernoulli CUSUM of lots of one unit, p0 = 1 %, p1 near 2 %
    # chosen so that a nonconforming unit scores m times what a
    # conforming one loses: in units of that loss S is whole.
    p0, m = 0.01, 68
    p1 = optimize.brentq(lambda p: math.log(p / p0) + m * math.log((1 - p) / (1 - p0)), 0.015, 0.03, xtol=1e-15, rtol=1e-15)
    b = -math.log((1 - p1) / (1 - p0))
    for h in (200.5, 295.5):
        for p in (p0, p1):
            out["bernoulli"].append({"p0": p0, "p1": p1, "m": m, "h": h, "h_score": h * b,
                                     "p": p, "arl": bernoulli_arl(p, m, math.ceil(h))})
    path = os.path.join(os.path.dirname(os.path.abspath(__file__)), "cusum_arl_reference.json")
    with open(path, "w") as f:
        json.dump(out, f, indent=1)
        f.write("\n")


if __name__ == "__main__":
    main()
