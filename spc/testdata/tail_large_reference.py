#!/usr/bin/python3
"""Reference tail probabilities for large lots, for TestTailLargeLots and
TestTailSums.

Run with Debian's python3-scipy and python3-mpmath:
/usr/bin/python3 spc/testdata/tail_large_reference.py
It writes spc/testdata/tail_large_reference.json: for lots of n units at a
centre rate p (binomial, p chart) or u (Poisson, u chart), the probability
of a count k or more, at k = the mean and 1, 3 and 5 standard deviations
above it, twice: "sf" from SciPy (binom.sf / poisson.sf) and "exact" from
mpmath at 40 significant digits, summing the probabilities of k, k+1, …
(each from log-gamma) until the rest is below 10⁻³⁰ of the sum. Rows with
n above 10⁷ are pooled subgroups (several lots summed), which Analyze
takes; SciPy is not recorded for them. SciPy 1.10.1's poisson.sf is
several per cent off at means of 10⁶ and more (e.g. 2.815e-07 for
P(X ≥ 9015000) at mean 9·10⁶, where the sum is 2.889e-07), so the tests
compare with "exact".
"""
import json, math, os, scipy
import mpmath as mp
from scipy.stats import binom, poisson

mp.mp.dps = 40


def exact_sf(k, n, p=None, lam=None):
    """P(X >= k) by summing terms outward from k (k at or above the mean)."""
    if p is not None:
        p = mp.mpf(p)
        t = mp.exp(mp.loggamma(n + 1) - mp.loggamma(k + 1) - mp.loggamma(n - k + 1) + k * mp.log(p) + (n - k) * mp.log(1 - p))
        q = p / (1 - p)
    else:
        lam = mp.mpf(lam)
        t = mp.exp(k * mp.log(lam) - lam - mp.loggamma(k + 1))
    s, j = t, k
    while t > s * mp.mpf("1e-30"):
        if p is not None:
            if j >= n:
                break
            t *= (n - j) * q / (j + 1)
        else:
            t *= lam / (j + 1)
        j += 1
        s += t
    return float(s)


rows = []
for n in [10**5, 10**6, 3 * 10**6, 10**7, 10**8, 10**9]:
    pooled = n > 10**7
    for p in [0.001, 0.1, 0.5, 0.9]:
        if pooled and p != 0.001 and p != 0.1:
            continue
        sd = math.sqrt(n * p * (1 - p))
        for z in [0, 1, 3, 5]:
            k = int(round(n * p + z * sd))
            row = {"chart": "p", "n": n, "rate": p, "k": k, "exact": exact_sf(k, n, p=p)}
            if not pooled:
                row["sf"] = float(binom.sf(k - 1, n, p))
            rows.append(row)
    for u in [0.001, 0.5, 3.0]:
        if pooled and u != 0.001:
            continue
        sd = math.sqrt(n * u)
        for z in [0, 1, 3, 5]:
            k = int(round(n * u + z * sd))
            if not pooled and k > 10**7:  # spc.MaxInspected bounds the counts of one lot
                continue
            row = {"chart": "u", "n": n, "rate": u, "k": k, "exact": exact_sf(k, n, lam=n * u)}
            if not pooled:
                row["sf"] = float(poisson.sf(k - 1, n * u))
            rows.append(row)
out = {"source": "SciPy %s scipy.stats.binom.sf / poisson.sf (sf); mpmath %s sums at 40 digits (exact)" % (scipy.__version__, mp.__version__), "rows": rows}
with open(os.path.join(os.path.dirname(os.path.abspath(__file__)), "tail_large_reference.json"), "w") as f:
    json.dump(out, f, indent=1)
