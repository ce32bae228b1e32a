#!/usr/bin/python3
"""Reference values for spc/interval.go, compare.go and plan.go.

Run with Debian's python3-scipy and python3-statsmodels:

    /usr/bin/python3 spc/testdata/intervals_reference.py > spc/testdata/intervals_reference.json

Sources of each block:
  proportion   statsmodels.stats.proportion.proportion_confint
               (wilson, beta = Clopper-Pearson, agresti_coull, jeffreys, normal = Wald)
  poisson      scipy.stats.chi2.ppf: exact (Garwood) limits chi2(a/2; 2c)/2e, chi2(1-a/2; 2c+2)/2e
  two_prop     statsmodels confint_proportions_2indep(method="newcomb", compare="diff")
               and proportions_ztest (pooled variance, two-sided)
  two_rate     scipy.stats.binomtest (exact conditional test of equal Poisson rates);
               the MOVER score interval is the formula of Zou & Donner (2008) written
               out here with scipy.stats.norm, a second implementation of the same
               formula rather than an outside library.
  plan         limit counts from exact rational arithmetic (fractions.Fraction),
               signal probabilities from scipy.stats.binom.sf / cdf
  smallest_n   a plain scan over n with the same exact limit counts and scipy tails
  smallest_n_floor  the same scan, also requiring ARL0 >= min_arl0
"""
import json
import math
import sys
from fractions import Fraction

import scipy
import statsmodels
from scipy import stats
from statsmodels.stats.proportion import (confint_proportions_2indep,
                                          proportion_confint,
                                          proportions_ztest)

LEVELS = [0.8, 0.9, 0.95, 0.99, 0.999]


def proportion_block():
    pairs = set()
    for n in [1, 2, 5, 10, 20, 29, 50, 100, 148, 263, 1000, 10000]:
        for d in [0, 1, 2, 3, n // 10, n // 3, n // 2, n - 2, n - 1, n]:
            if 0 <= d <= n:
                pairs.add((d, n))
    pairs |= {(81, 263), (15, 148), (0, 20), (1, 29), (29, 29)}
    out = []
    for d, n in sorted(pairs, key=lambda x: (x[1], x[0])):
        for level in LEVELS:
            row = {"d": d, "n": n, "level": level}
            for ours, theirs in [("wilson", "wilson"), ("clopper-pearson", "beta"),
                                 ("agresti-coull", "agresti_coull"),
                                 ("jeffreys", "jeffreys"), ("wald", "normal")]:
                lo, hi = proportion_confint(d, n, alpha=1 - level, method=theirs)
                row[ours] = [float(lo), float(hi)]
            out.append(row)
    return out


def poisson_block():
    out = []
    for c in [0, 1, 2, 5, 17, 100, 1000]:
        for e in [1.0, 3.5, 250.0]:
            for level in LEVELS:
                a = 1 - level
                lo = 0.0 if c == 0 else stats.chi2.ppf(a / 2, 2 * c) / 2 / e
                hi = stats.chi2.ppf(1 - a / 2, 2 * c + 2) / 2 / e
                out.append({"c": c, "exposure": e, "level": level,
                            "lower": float(lo), "upper": float(hi)})
    return out


def two_prop_block():
    cases = [(56, 70, 48, 80), (9, 10, 3, 10), (6, 7, 2, 7), (5, 56, 0, 29),
             (0, 10, 0, 20), (10, 10, 0, 20), (12, 400, 25, 410), (3, 150, 3, 150),
             (0, 50, 4, 60), (200, 1000, 180, 1000), (1, 2, 0, 3)]
    out = []
    for d1, n1, d2, n2 in cases:
        for level in [0.9, 0.95, 0.99]:
            lo, hi = confint_proportions_2indep(d1, n1, d2, n2, method="newcomb",
                                                compare="diff", alpha=1 - level)
            row = {"d1": d1, "n1": n1, "d2": d2, "n2": n2, "level": level,
                   "lower": float(lo), "upper": float(hi)}
            pbar = (d1 + d2) / (n1 + n2)
            if 0 < pbar < 1:
                z, p = proportions_ztest([d1, d2], [n1, n2])
                row["z"], row["p_value"] = float(z), float(p)
            out.append(row)
    return out


def two_rate_block():
    cases = [(10, 100.0, 25, 120.0), (0, 5.0, 4, 5.0), (7, 1.0, 7, 1.0),
             (3, 2.5, 0, 4.0), (120, 1000.0, 90, 1100.0), (1, 10.0, 9, 10.0),
             (40, 12.0, 20, 12.0)]
    out = []
    for c1, e1, c2, e2 in cases:
        for level in [0.9, 0.95, 0.99]:
            z = stats.norm.isf((1 - level) / 2)

            def score(c, e):
                mid, half = c + z * z / 2, z * math.sqrt(c + z * z / 4)
                lo = 0.0 if c == 0 else max(0.0, (mid - half) / e)
                return lo, (mid + half) / e
            r1, r2 = c1 / e1, c2 / e2
            l1, u1 = score(c1, e1)
            l2, u2 = score(c2, e2)
            row = {"c1": c1, "e1": e1, "c2": c2, "e2": e2, "level": level,
                   "lower": r1 - r2 - math.hypot(r1 - l1, u2 - r2),
                   "upper": r1 - r2 + math.hypot(u1 - r1, r2 - l2)}
            if c1 + c2 > 0:
                pi = e1 / (e1 + e2)
                row["p_value"] = float(stats.binomtest(c1, c1 + c2, pi).pvalue)
            out.append(row)
    return out


def limit_counts(p0, n, k):
    """Exact limit counts for decimal p0 and k (as strings)."""
    p, kk = Fraction(p0), Fraction(k)
    var = kk * kk * n * p * (1 - p)  # (k·sqrt(n p q))^2
    mu = n * p

    def within_upper(d):
        return d <= mu or (d - mu) ** 2 <= var

    def within_lower(d):
        return d >= mu or (mu - d) ** 2 <= var
    spread = math.sqrt(float(var))
    u = min(n, int(math.floor(float(mu) + spread)) + 2)
    while u > 0 and not within_upper(u):
        u -= 1
    while u < n and within_upper(u + 1):
        u += 1
    l = max(0, int(math.ceil(float(mu) - spread)) - 2)
    while l > 0 and within_lower(l - 1):
        l -= 1
    while not within_lower(l):
        l += 1
    return u, (l if l > 0 else -1)


def signal_prob(u, l, n, p):
    prob = float(stats.binom.sf(u, n, p))
    if l > 0:
        prob += float(stats.binom.cdf(l - 1, n, p))
    return prob


def plan_block():
    out = []
    cases = [("0.1", 100, "3", "0.2"), ("0.1", 400, "3", "0.15"), ("0.2", 25, "3", "0.4"),
             ("0.5", 36, "3", "0.7"), ("0.05", 172, "3", "0.1"), ("0.05", 171, "3", "0.02"),
             ("0.02", 50, "3", "0.08"), ("0.02", 500, "3", "0.04"), ("0.01", 1000, "3", "0.005"),
             ("0.01", 2000, "2.5", "0.02"), ("0.3", 60, "2", "0.45"), ("0.5", 1, "3", "0.9"),
             ("0.05", 20, "3", "0.2"), ("0.001", 5000, "3", "0.004"), ("0.1", 82, "3", "0.05"),
             ("0.1", 81, "3", "0.05")]
    for p0, n, k, p1 in cases:
        u, l = limit_counts(p0, n, k)
        out.append({"p0": float(p0), "n": n, "k": float(k), "p1": float(p1),
                    "ucl_count": u, "lcl_count": l,
                    "signal_p0": signal_prob(u, l, n, float(p0)),
                    "signal_p1": signal_prob(u, l, n, float(p1))})
    return out


def smallest_n_block():
    out = []
    for p0, p1, k, target in [("0.02", 0.06, "3", 5.0), ("0.1", 0.2, "3", 2.0),
                              ("0.05", 0.1, "3", 10.0), ("0.1", 0.05, "3", 20.0),
                              ("0.01", 0.03, "2.5", 3.0)]:
        n = 1
        while True:
            u, l = limit_counts(p0, n, k)
            sp = signal_prob(u, l, n, p1)
            if sp > 0 and 1 / sp <= target:
                break
            n += 1
        out.append({"p0": float(p0), "p1": p1, "k": float(k), "target_arl1": target, "n": n})
    return out


def smallest_n_floor_block():
    """The same scan, keeping also to a floor on ARL0 (false alarms)."""
    out = []
    for p0, p1, k, target, floor in [("0.02", 0.06, "3", 2.0, 100.0), ("0.1", 0.2, "3", 2.0, 100.0),
                                     ("0.012", 0.03, "3", 5.0, 100.0), ("0.05", 0.1, "3", 10.0, 200.0),
                                     ("0.02", 0.06, "3", 5.0, 100.0)]:
        n = 1
        while True:
            u, l = limit_counts(p0, n, k)
            sp = signal_prob(u, l, n, p1)
            s0 = signal_prob(u, l, n, float(p0))
            if sp > 0 and 1 / sp <= target and (s0 == 0 or 1 / s0 >= floor):
                break
            n += 1
        u, l = limit_counts(p0, n, k)
        out.append({"p0": float(p0), "p1": p1, "k": float(k), "target_arl1": target, "min_arl0": floor,
                    "n": n, "arl0": 1 / signal_prob(u, l, n, float(p0)), "arl1": 1 / signal_prob(u, l, n, p1)})
    return out


def main():
    ref = {
        "generator": "spc/testdata/intervals_reference.py",
        "python": sys.version.split()[0],
        "scipy": scipy.__version__,
        "statsmodels": statsmodels.__version__,
        "proportion": proportion_block(),
        "poisson": poisson_block(),
        "two_prop": two_prop_block(),
        "two_rate": two_rate_block(),
        "plan": plan_block(),
        "smallest_n": smallest_n_block(),
        "smallest_n_floor": smallest_n_floor_block(),
    }
    json.dump(ref, sys.stdout, indent=1)
    sys.stdout.write("\n")


if __name__ == "__main__":
    main()
