#!/usr/bin/python3
"""Reference average run lengths for the EWMA tests (spc/ewma_arl_test.go).

Run with Debian's python3-scipy:  /usr/bin/python3 ewma_arl_reference.py
It writes ewma_arl_reference.json beside itself. Both parts use limits at
their steady width, P0 +- L*sqrt(lambda/(2-lambda))*sigma, and start at
Z0 = P0, as the published designs do.

normal: the two-sided EWMA Z = lambda*X + (1-lambda)*Z of normal
  observations X with standard deviation 1 and mean `shift`; its ARL
  solves the integral equation of Crowder (1987), Technometrics 29,
  401-407, here by the Nystrom method on Gauss-Legendre nodes. Computed
  with 200 and 400 nodes; the script stops if they differ by more than
  1e-6 (relative). The designs are those of Lucas & Saccucci (1990),
  Technometrics 32, 1-12, with an in-control ARL of 500.

counts: the EWMA of the rates of binomial or Poisson counts (a lot's
  count over its size; the count itself on a c chart), lot sizes drawn
  with equal chance from `sizes`, by the Markov chain of Lucas & Saccucci
  on 6000 cells between the limits (20 times spc/ewma_arl.go's), Z at the
  middle of its cell; SciPy's binomial and Poisson probabilities. The
  script stops if 3000 and 6000 cells differ by more than 0.2 %.
"""
import json
import math
import os

import numpy as np
import scipy
from scipy import stats


def normal_arl(lam, width, shift, nodes):
    """ARL from Z0 = 0 of the two-sided EWMA of N(shift, 1) observations."""
    h = width * math.sqrt(lam / (2 - lam))
    x, w = np.polynomial.legendre.leggauss(nodes)
    z = x * h
    w = w * h
    kern = lambda start: w / lam * stats.norm.pdf((z - (1 - lam) * start) / lam - shift)
    a = np.eye(nodes) - np.array([kern(s) for s in z])
    arl = np.linalg.solve(a, np.ones(nodes))
    return float(1 + kern(0.0) @ arl)


def count_moves(chart, p, sizes):
    """The rates a lot may have at rate p and their probabilities."""
    xs, ps = [], []
    for n in sorted(set(sizes)):
        wt = sizes.count(n) / len(sizes)
        if chart == "c":
            n = 1
        dist = stats.binom(n, p) if chart in ("p", "np") else stats.poisson(n * p)
        mean, sd = dist.mean(), dist.std()
        lo = max(0, math.floor(mean - 12 * sd - 10))
        hi = math.ceil(mean + 12 * sd + 10)
        if chart in ("p", "np"):
            hi = min(hi, n)
        k = np.arange(lo, hi + 1)
        xs.append(k / n)
        ps.append(wt * dist.pmf(k))
    return np.concatenate(xs), np.concatenate(ps)


def count_arl(chart, p0, lam, width, sizes, p, cells):
    """ARL from Z0 = p0 by the Markov chain on `cells` cells."""
    if chart in ("p", "np"):
        var = np.mean([p0 * (1 - p0) / n for n in sizes])
    elif chart == "u":
        var = np.mean([p0 / n for n in sizes])
    else:
        var = p0
    half = width * math.sqrt(lam / (2 - lam) * var)
    lcl, ucl = max(0.0, p0 - half), p0 + half
    w = (ucl - lcl) / cells
    xs, ps = count_moves(chart, p, sizes)
    q = np.zeros((cells, cells))
    for i in range(cells):
        nxt = lam * xs + (1 - lam) * (lcl + (i + 0.5) * w)
        inside = (nxt >= lcl) & (nxt <= ucl)
        j = np.minimum(((nxt[inside] - lcl) / w).astype(int), cells - 1)
        np.add.at(q[i], j, ps[inside])
    arl = np.linalg.solve(np.eye(cells) - q, np.ones(cells))
    return float(arl[min(int((p0 - lcl) / w), cells - 1)])


def main():
    out = {"scipy": scipy.__version__, "normal": [], "counts": []}
    for lam, width in [(0.05, 2.615), (0.10, 2.814), (0.20, 2.962), (0.25, 2.998), (0.40, 3.054), (0.20, 3.0)]:
        for shift in [0, 0.5, 1, 2]:
            a, b = normal_arl(lam, width, shift, 200), normal_arl(lam, width, shift, 400)
            if abs(a / b - 1) > 1e-6:
                raise SystemExit(f"normal lambda={lam} L={width} shift={shift}: {a} vs {b}")
            out["normal"].append({"lambda": lam, "width": width, "shift": shift, "arl": b})
    cases = [
        ("c", 4.0, 0.2, 3.0, [1], [4.0, 6.0]),
        ("p", 0.02, 0.1, 2.7, [200], [0.02, 0.03]),
        ("u", 0.05, 0.2, 3.0, [50, 100, 200], [0.05, 0.08]),
    ]
    for chart, p0, lam, width, sizes, rates in cases:
        for p in rates:
            a = count_arl(chart, p0, lam, width, sizes, p, 3000)
            b = count_arl(chart, p0, lam, width, sizes, p, 6000)
            if abs(a / b - 1) > 0.002:
                raise SystemExit(f"counts {chart} p0={p0} p={p}: {a} (3000) vs {b} (6000)")
            out["counts"].append({"chart": chart, "p0": p0, "lambda": lam, "width": width,
                                  "sizes": sizes, "p": p, "arl": b})
    path = os.path.join(os.path.dirname(os.path.abspath(__file__)), "ewma_arl_reference.json")
    with open(path, "w") as f:
        json.dump(out, f, indent=1)
        f.write("\n")


if __name__ == "__main__":
    main()
