#!/usr/bin/python3
"""Reference values for the tests behind the weekly review's verdicts
(spc/compare.go FisherExact, spc/fdr.go BenjaminiHochberg).

Run with Debian's python3-scipy and python3-statsmodels:

    /usr/bin/python3 spc/testdata/verdicts_reference.py > spc/testdata/verdicts_reference.json

Sources of each block:
  fisher   scipy.stats.fisher_exact (two-sided) on the table
           [[d1, n1 - d1], [d2, n2 - d2]]
  bh       statsmodels.stats.multitest.multipletests(method="fdr_bh"),
           the adjusted p-values and which are rejected at alpha
"""
import json
import sys

import scipy
import statsmodels
from scipy import stats
from statsmodels.stats.multitest import multipletests


def fisher_block():
    cases = [(1, 5, 0, 25), (0, 25, 1, 5), (3, 20, 0, 20), (5, 56, 0, 29),
             (0, 10, 0, 20), (10, 10, 0, 20), (1, 2, 0, 3), (2, 40, 0, 38),
             (4, 120, 0, 110), (0, 50, 4, 60), (6, 7, 2, 7), (9, 10, 3, 10),
             (3, 1000, 0, 1000), (12, 400, 25, 410), (1, 300, 9, 310),
             (2, 5, 2, 5), (5, 5, 0, 5), (0, 1, 1, 1), (7, 2000, 1, 2100)]
    out = []
    for d1, n1, d2, n2 in cases:
        _, p = stats.fisher_exact([[d1, n1 - d1], [d2, n2 - d2]])
        out.append({"d1": d1, "n1": n1, "d2": d2, "n2": n2, "p_value": float(p)})
    return out


def bh_block():
    families = [
        [0.01, 0.04, 0.03, 0.2],
        [0.001, 0.008, 0.039, 0.041, 0.042, 0.06, 0.074, 0.205, 0.212, 0.216,
         0.222, 0.251, 0.269, 0.275, 0.34, 0.341, 0.384, 0.569, 0.594, 0.696,
         0.762, 0.94, 0.942, 0.975, 0.986],
        [0.5],
        [0.02, 0.02, 0.02],
        [1.0, 0.9, 0.049, 0.0001, 0.3, 0.011, 0.011],
    ]
    out = []
    for ps in families:
        for alpha in [0.05, 0.1]:
            reject, adj, _, _ = multipletests(ps, alpha=alpha, method="fdr_bh")
            out.append({"p": ps, "alpha": alpha,
                        "adjusted": [float(x) for x in adj],
                        "reject": [bool(x) for x in reject]})
    return out


def main():
    ref = {
        "generator": "spc/testdata/verdicts_reference.py",
        "python": sys.version.split()[0],
        "scipy": scipy.__version__,
        "statsmodels": statsmodels.__version__,
        "fisher": fisher_block(),
        "bh": bh_block(),
    }
    json.dump(ref, sys.stdout, indent=1)
    sys.stdout.write("\n")


if __name__ == "__main__":
    main()
