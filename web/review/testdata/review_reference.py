#!/usr/bin/python3
"""Reference values for the weekly review tests (web/review/review_test.go).

Run with Debian's /usr/bin/python3 (python3-statsmodels, python3-scipy):

    /usr/bin/python3 web/review/testdata/review_reference.py > web/review/testdata/review_reference.json

It invents two processes' lots with a fixed seed (our own scenario, no real
data), then computes independently of lotwatch:
  - the ISO week of each lot on the plant's clocks (zoneinfo + isocalendar),
  - weekly lots, inspected and count,
  - Wilson and Clopper-Pearson intervals (statsmodels proportion_confint,
    methods "wilson" and "beta"),
  - exact Poisson (Garwood) intervals from scipy.stats.chi2.ppf,
  - Newcombe's hybrid score interval for the difference of proportions
    (statsmodels confint_proportions_2indep, method "newcomb"),
  - the pooled two-proportion z test p-value (statsmodels proportions_ztest),
  - the exact conditional Poisson test p-value (scipy.stats.binomtest),
  - the Pareto of the reviewed week's defect categories.
"""
import datetime as dt
import json
import random
from zoneinfo import ZoneInfo

import scipy
import statsmodels
from scipy.stats import binomtest, chi2
from statsmodels.stats.proportion import (confint_proportions_2indep,
                                          proportion_confint, proportions_ztest)

LEVEL = 0.95
REVIEW = (2026, 48)
WEEKS = 12
rng = random.Random(4811)


def monday(year, week, tz):
    d = dt.date.fromisocalendar(year, week, 1)
    return dt.datetime(d.year, d.month, d.day, tzinfo=tz)


def week_list():
    out = []
    d = dt.date.fromisocalendar(*REVIEW, 1)
    for i in range(WEEKS - 1, -1, -1):
        y, w, _ = (d - dt.timedelta(days=7 * i)).isocalendar()
        out.append((y, w))
    return out


def make_lots(prefix, tz, chart, rate, cats, weights, skip_week=None, bump=None):
    lots = []
    for (y, w) in week_list():
        if (y, w) == skip_week:
            continue
        start = monday(y, w, tz)
        n_lots = rng.randint(4, 7)
        for k in range(n_lots):
            # Day 0..6, hour 6..21 local; the first lot of each week at Monday
            # 00:10 and the last at Sunday 23:30, on the plant's clocks.
            if k == 0:
                t = start.replace(hour=0, minute=10)
            elif k == n_lots - 1:
                t = (start + dt.timedelta(days=6)).replace(hour=23, minute=30)
            else:
                t = (start + dt.timedelta(days=rng.randint(0, 6))).replace(hour=rng.randint(6, 21), minute=rng.randint(0, 59))
            n = rng.choice([200, 250, 300, 400])
            r = rate * (bump if bump and (y, w) == REVIEW else 1)
            if chart == "p":
                c = sum(1 for _ in range(n) if rng.random() < r)
            else:
                c = sum(1 for _ in range(n * 3) if rng.random() < r / 3)
            split = {}
            for _ in range(c):
                name = rng.choices(cats, weights)[0]
                split[name] = split.get(name, 0) + 1
            lots.append({"lot": "%s-%d%02d-%d" % (prefix, y, w, k + 1),
                         "time": t.astimezone(dt.timezone.utc).isoformat().replace("+00:00", "Z"),
                         "inspected": n, "count": c, "categories": split})
    lots.sort(key=lambda l: l["time"])
    return lots


def week_key(t, tz):
    local = dt.datetime.fromisoformat(t.replace("Z", "+00:00")).astimezone(tz)
    y, w, _ = local.isocalendar()
    return "%04d-W%02d" % (y, w)


def fnull(x):
    return None if x is None else float(x)


def summarize(proc):
    tz = ZoneInfo(proc["time_zone"])
    weeks = {"%04d-W%02d" % yw: {"lots": 0, "inspected": 0, "count": 0} for yw in week_list()}
    cats = {}
    key_review = "%04d-W%02d" % REVIEW
    for l in proc["lots"]:
        k = week_key(l["time"], tz)
        s = weeks[k]
        s["lots"] += 1
        s["inspected"] += l["inspected"]
        s["count"] += l["count"]
        if k == key_review:
            for c, n in l["categories"].items():
                cats[c] = cats.get(c, 0) + n
    out = []
    for k, s in weeks.items():
        e = dict(week=k, **s)
        d, n = s["count"], s["inspected"]
        if n == 0:
            e.update(rate=None, wilson=None, clopper_pearson=None, poisson_exact=None)
        else:
            e["rate"] = d / n
            e["wilson"] = [float(v) for v in proportion_confint(d, n, alpha=1 - LEVEL, method="wilson")] if d <= n else None
            e["clopper_pearson"] = [float(v) for v in proportion_confint(d, n, alpha=1 - LEVEL, method="beta")] if d <= n else None
            a = 1 - LEVEL
            lo = chi2.ppf(a / 2, 2 * d) / (2 * n) if d > 0 else 0.0
            hi = chi2.ppf(1 - a / 2, 2 * d + 2) / (2 * n)
            e["poisson_exact"] = [float(lo), float(hi)]
        out.append(e)
    cur, prev = out[-1], out[-2]
    change = None
    if cur["inspected"] and prev["inspected"]:
        d1, n1, d2, n2 = cur["count"], cur["inspected"], prev["count"], prev["inspected"]
        change = {"difference": d1 / n1 - d2 / n2}
        if proc["chart"] == "p":
            lo, hi = confint_proportions_2indep(d1, n1, d2, n2, method="newcomb", compare="diff", alpha=1 - LEVEL)
            _, p = proportions_ztest([d1, d2], [n1, n2])
            change.update(lower=float(lo), upper=float(hi), p_value=float(p))
        else:
            change["p_value"] = float(binomtest(d1, d1 + d2, n1 / (n1 + n2)).pvalue)
    total = sum(cats.values())
    bars = sorted(cats.items(), key=lambda kv: (-kv[1], kv[0]))
    pareto, run = [], 0
    for c, n in bars:
        run += n
        pareto.append({"category": c, "count": n, "percent": 100 * n / total, "cumulative_percent": 100 * run / total})
    return {"weeks": out, "change": change, "pareto": pareto}


berlin, chicago = ZoneInfo("Europe/Berlin"), ZoneInfo("America/Chicago")
procs = [
    {"name": "housing-check", "chart": "p", "time_zone": "Europe/Berlin", "categories": ["burr", "crack", "dent", "scratch"],
     "lots": make_lots("HC", berlin, "p", 0.03, ["burr", "crack", "dent", "scratch"], [5, 1, 3, 2], bump=2.0)},
    {"name": "panel-finish", "chart": "u", "time_zone": "America/Chicago", "categories": ["blister", "run", "speck"],
     "lots": make_lots("PF", chicago, "u", 0.05, ["blister", "run", "speck"], [2, 1, 4], skip_week=(2026, 41))},
]
for p in procs:
    p["expect"] = summarize(p)

json.dump({"source": "statsmodels %s, scipy %s; see review_reference.py" % (statsmodels.__version__, scipy.__version__),
           "week": "%04d-W%02d" % REVIEW, "level": LEVEL, "processes": procs}, __import__("sys").stdout, indent=1)
print()
