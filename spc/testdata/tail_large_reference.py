#!/usr/bin/python3
"""Reference tail probabilities for large lots, for TestTailLargeLots.

Run with Debian's python3-scipy: /usr/bin/python3 spc/testdata/tail_large_reference.py
It writes spc/testdata/tail_large_reference.json: for lots of n units at a
centre rate p (binomial, p chart) or u (Poisson, u chart), the probability
of a count k or more, at k = the mean and 1, 3 and 5 standard deviations
above it.
"""
import json, math, os, scipy
from scipy.stats import binom, poisson

rows = []
for n in [10**5, 10**6, 3 * 10**6, 10**7]:
    for p in [0.001, 0.1, 0.5, 0.9]:
        sd = math.sqrt(n * p * (1 - p))
        for z in [0, 1, 3, 5]:
            k = int(round(n * p + z * sd))
            rows.append({"chart": "p", "n": n, "rate": p, "k": k, "sf": float(binom.sf(k - 1, n, p))})
    for u in [0.001, 0.5, 3.0]:
        sd = math.sqrt(n * u)
        for z in [0, 1, 3, 5]:
            k = int(round(n * u + z * sd))
            if k <= 10**7:  # spc.MaxInspected bounds counts too
                rows.append({"chart": "u", "n": n, "rate": u, "k": k, "sf": float(poisson.sf(k - 1, n * u))})
out = {"source": "SciPy %s scipy.stats.binom.sf / poisson.sf" % scipy.__version__, "rows": rows}
with open(os.path.join(os.path.dirname(os.path.abspath(__file__)), "tail_large_reference.json"), "w") as f:
    json.dump(out, f, indent=1)
