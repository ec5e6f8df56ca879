"""Reference Benjamini-Hochberg discoveries from statsmodels.

Regenerate from the repository root with:

    /usr/bin/python3 testdata/reference/fdr/make_bh.py

It writes bh.json next to this script: for each case the p-values (null for
a missing one), the level q and which hypotheses are discoveries according
to statsmodels.stats.multitest.multipletests(p, alpha=q, method="fdr_bh").
multipletests does not accept missing p-values; curvewatch leaves them out
of the family (they are never discoveries and do not count in m), so for a
case with nulls the script passes only the present p-values and marks the
missing ones as not discovered.
"""
import json
import math
import os

import numpy as np
import statsmodels
from statsmodels.stats.multitest import multipletests


def bh(p, q):
    present = [i for i, v in enumerate(p) if v is not None and not math.isnan(v)]
    reject = [False] * len(p)
    if present:
        r, _, _, _ = multipletests([p[i] for i in present], alpha=q, method="fdr_bh")
        for i, flag in zip(present, r):
            reject[i] = bool(flag)
    return reject


def main():
    rng = np.random.default_rng(20240506)
    cases = []

    def add(name, p, q):
        p = [None if (v is None or math.isnan(v)) else float(v) for v in p]
        cases.append({"name": name, "q": q, "p": p, "reject": bh(p, q)})

    # The fifteen p-values of the worked example in Benjamini & Hochberg
    # (1995), section 4 (recalled from memory; statsmodels gives the
    # discoveries).
    paper = [0.0201, 0.0001, 0.6528, 0.0004, 0.0019, 0.0095, 0.3240, 0.0278,
             0.0298, 0.0344, 0.0459, 0.4262, 0.5719, 0.7590, 1.0]
    add("bh1995_example_q0.05", paper, 0.05)
    add("bh1995_example_q0.2", paper, 0.2)
    # Step-up: the second smallest is above its threshold, the largest is
    # below its own, so all four are discoveries.
    add("step_up", [0.046, 0.001, 0.04, 0.045], 0.05)
    # p-values exactly at the thresholds i*q/m.
    add("at_thresholds", [0.01, 0.02, 0.03, 0.04, 0.05], 0.05)
    add("just_above_thresholds", [0.0101, 0.0201, 0.0301, 0.0401, 0.0501], 0.05)
    # Ties.
    add("ties", [0.04, 0.5, 0.04, 0.04, 0.9], 0.1)
    add("all_ones", [1.0, 1.0, 1.0], 0.1)
    add("single_small", [0.03], 0.05)
    add("single_large", [0.07], 0.05)
    # Missing p-values: left out of m.
    add("nan_left_out", [0.02, None, 0.03, None, 0.5], 0.1)
    add("all_nan", [None, None], 0.1)
    # Random families: a mixture of nulls (uniform) and signals (one-sided
    # z-tests with a shifted mean), in random order.
    for m, m1, q in [(20, 0, 0.1), (20, 5, 0.1), (50, 10, 0.05), (50, 25, 0.2), (200, 40, 0.1)]:
        z = rng.normal(size=m)
        z[:m1] += 3.0
        p = [0.5 * math.erfc(v / math.sqrt(2)) for v in z]
        perm = rng.permutation(m)
        add(f"random_m{m}_signals{m1}_q{q}", [p[i] for i in perm], q)
    z = rng.normal(size=30)
    z[:8] += 3.0
    p = [0.5 * math.erfc(v / math.sqrt(2)) for v in z]
    for i in rng.choice(30, size=6, replace=False):
        p[i] = None
    add("random_m30_with_nan_q0.1", p, 0.1)

    doc = {
        "source": "statsmodels %s multipletests(p, alpha=q, method=\"fdr_bh\")" % statsmodels.__version__,
        "cases": cases,
    }
    out = os.path.join(os.path.dirname(os.path.abspath(__file__)), "bh.json")
    # One case a line, so that a diff shows which case changed.
    lines = ["{", ' "source": %s,' % json.dumps(doc["source"]), ' "cases": [']
    lines.append(",\n".join("  " + json.dumps(c, allow_nan=False) for c in cases))
    lines += [" ]", "}"]
    with open(out, "w") as f:
        f.write("\n".join(lines) + "\n")


if __name__ == "__main__":
    main()
