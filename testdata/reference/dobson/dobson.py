"""Dobson (1990) Poisson example: counts ~ outcome + treatment.

Regenerate from the repository root with:

    /usr/bin/python3 testdata/reference/dobson/dobson.py

Writes data.csv, model.yaml and expected.json next to this script.

Three sets of numbers go into expected.json:
  * "published": the values as printed for this example (Dobson 1990,
    p. 93), recalled from memory and rounded as printed;
  * "closed_form": this main-effects log-linear model on a 3x3 table has
    closed-form maximum likelihood estimates (fitted count = row total *
    column total / grand total), so estimates, standard errors and
    deviances are computed here exactly from the margins, independent of
    any GLM software;
  * "statsmodels": statsmodels GLM (Poisson, log link, IRLS, tol=1e-13),
    polished by a second IRLS run started at the solution.
The script asserts that all three agree (the published ones to their
printed precision).
"""
import csv
import json
import math
import os

import numpy as np
import statsmodels
import statsmodels.api as sm

HERE = os.path.dirname(os.path.abspath(__file__))

COUNTS = [18, 17, 15, 20, 10, 20, 25, 13, 12]
OUTCOME = ["o1", "o2", "o3"] * 3
TREATMENT = ["t1"] * 3 + ["t2"] * 3 + ["t3"] * 3

PUBLISHED = {
    "intercept": {"estimate": 3.045, "se": 0.1709},
    "factor": {
        "outcome": {"o2": {"estimate": -0.4543, "se": 0.2022},
                    "o3": {"estimate": -0.2930, "se": 0.1927}},
        "treatment": {"t2": {"estimate": 0.0, "se": 0.2000},
                      "t3": {"estimate": 0.0, "se": 0.2000}},
    },
    "deviance": 5.129,
    "df_resid": 4,
    "null_deviance": 10.58,
    "null_df": 8,
}


def closed_form():
    y = COUNTS
    N = sum(y)
    T = {t: sum(c for c, tt in zip(y, TREATMENT) if tt == t) for t in ("t1", "t2", "t3")}
    O = {o: sum(c for c, oo in zip(y, OUTCOME) if oo == o) for o in ("o1", "o2", "o3")}
    mu = [T[t] * O[o] / N for t, o in zip(TREATMENT, OUTCOME)]
    dev = 2 * sum(c * math.log(c / m) for c, m in zip(y, mu))  # sum(y - mu) = 0
    mbar = N / len(y)
    null_dev = 2 * sum(c * math.log(c / mbar) for c in y)
    # log mu_ij = log T_i + log O_j - log N; with treatment coding the
    # estimates are log ratios of margins and, from the inverse Fisher
    # information of the multinomial-margin parametrisation,
    # var(log O_j/O_1) = 1/O_j + 1/O_1, var(log T_i/T_1) = 1/T_i + 1/T_1,
    # var(intercept) = 1/T_1 + 1/O_1 - 1/N.
    out = {
        "intercept": {"estimate": math.log(T["t1"] * O["o1"] / N),
                      "se": math.sqrt(1 / T["t1"] + 1 / O["o1"] - 1 / N)},
        "factor": {
            "outcome": {o: {"estimate": math.log(O[o] / O["o1"]),
                            "se": math.sqrt(1 / O[o] + 1 / O["o1"])} for o in ("o2", "o3")},
            "treatment": {t: {"estimate": math.log(T[t] / T["t1"]),
                              "se": math.sqrt(1 / T[t] + 1 / T["t1"])} for t in ("t2", "t3")},
        },
        "deviance": dev,
        "null_deviance": null_dev,
        "fitted": mu,
        "margins": {"treatment": T, "outcome": O, "total": N},
    }
    return out


def main():
    y = np.array(COUNTS, float)
    X = np.column_stack([np.ones(9)]
                        + [np.array([1.0 if v == lv else 0.0 for v in OUTCOME]) for lv in ("o2", "o3")]
                        + [np.array([1.0 if v == lv else 0.0 for v in TREATMENT]) for lv in ("t2", "t3")])
    first = sm.GLM(y, X, family=sm.families.Poisson()).fit(tol=1e-13, maxiter=1000)
    # statsmodels computes the covariance from the IRLS weights of the last
    # iteration, i.e. at the mean of the previous iterate; restarting IRLS at
    # the solution makes those weights the converged ones (see glm.py).
    res = sm.GLM(y, X, family=sm.families.Poisson()).fit(
        tol=1e-13, maxiter=1000, start_params=first.params)
    names = [("intercept", None), ("outcome", "o2"), ("outcome", "o3"),
             ("treatment", "t2"), ("treatment", "t3")]
    smv = {"intercept": None, "factor": {"outcome": {}, "treatment": {}}}
    for (f, lv), b, se in zip(names, res.params, res.bse):
        e = {"estimate": float(b), "se": float(se)}
        if f == "intercept":
            smv["intercept"] = e
        else:
            smv["factor"][f][lv] = e
    smv.update({
        "source": "statsmodels GLM %s (Poisson, log link, IRLS, tol=1e-13, "
                  "maxiter=1000, nonrobust covariance; refit with "
                  "start_params = first solution so the covariance uses the "
                  "converged weights)" % statsmodels.__version__,
        "first_pass_se": [float(v) for v in first.bse],
        "first_pass_iterations": int(first.fit_history["iteration"]),
        "deviance": float(res.deviance), "null_deviance": float(res.null_deviance),
        "df_resid": float(res.df_resid), "scale": float(res.scale),
        "llf": float(res.llf), "pearson_chi2": float(res.pearson_chi2),
        "aic": float(res.aic),
        "fitted": [float(v) for v in res.mu],
        "converged": bool(res.converged),
        "iterations": int(res.fit_history["iteration"]),
    })
    cf = closed_form()

    # --- agreement checks
    def pairs(d):
        yield ("intercept",), d["intercept"]
        for f in ("outcome", "treatment"):
            for lv, e in d["factor"][f].items():
                yield (f, lv), e
    cfp, smp = dict(pairs(cf)), dict(pairs(smv))
    for k, pub in pairs(PUBLISHED):
        for s in ("estimate", "se"):
            assert abs(cfp[k][s] - smp[k][s]) <= 1e-11 * max(1.0, abs(cfp[k][s])), (k, s)
            # published: 4 significant digits / 4 decimals as printed
            assert abs(cfp[k][s] - pub[s]) <= 5e-4 if k == ("intercept",) and s == "estimate" \
                else abs(cfp[k][s] - pub[s]) <= 5e-5, (k, s, cfp[k][s], pub[s])
    assert abs(cf["deviance"] - smv["deviance"]) <= 1e-11 * cf["deviance"]
    assert abs(cf["deviance"] - PUBLISHED["deviance"]) <= 5e-4
    assert abs(cf["null_deviance"] - smv["null_deviance"]) <= 1e-11 * cf["null_deviance"]
    assert abs(cf["null_deviance"] - PUBLISHED["null_deviance"]) <= 5e-3
    assert res.df_resid == PUBLISHED["df_resid"]
    assert max(abs(a - b) for a, b in zip(cf["fitted"], smv["fitted"])) < 1e-10

    with open(os.path.join(HERE, "data.csv"), "w", newline="") as fh:
        w = csv.writer(fh, lineterminator="\n")
        w.writerow(["counts", "outcome", "treatment"])
        for row in zip(COUNTS, OUTCOME, TREATMENT):
            w.writerow(row)
    with open(os.path.join(HERE, "model.yaml"), "w", newline="\n") as fh:
        fh.write("name: dobson-poisson\nresponse: counts\nfamily: poisson\nlink: log\n"
                 "terms:\n  - factor: outcome\n  - factor: treatment\n")
    out = {
        "source": "Dobson (1990), An Introduction to Generalized Linear Models, p. 93 "
                  "(published values from memory)",
        "dataset": "Dobson (1990) p. 93 Poisson example: counts 18,17,15,20,10,20,25,13,12; "
                   "outcome 1,2,3 cycling fastest, treatment 1,1,1,2,2,2,3,3,3 "
                   "(written as text levels o1..o3, t1..t3); data and published "
                   "values from memory",
        "family": "poisson", "link": "log", "n": 9,
        "factor_levels": {"outcome": ["o1", "o2", "o3"], "treatment": ["t1", "t2", "t3"]},
        "published": dict(PUBLISHED, note=(
            "from memory, not looked up: rounded as printed; the treatment "
            "estimates print as (numerically) zero, they are exactly 0 because "
            "all three treatment totals are 50; null_deviance 10.58 on 8 df is "
            "also from memory")),
        "closed_form": dict(cf, note=(
            "exact MLE of the independence (main effects) log-linear model "
            "from the table margins, computed in double precision by "
            "dobson.py without GLM software")),
        "statsmodels": smv,
    }
    with open(os.path.join(HERE, "expected.json"), "w", newline="\n") as fh:
        json.dump(out, fh, indent=1)
        fh.write("\n")
    print("dobson: deviance closed form %.15g, statsmodels %.15g; first fit "
          "converged %s in %d iterations, restart %d"
          % (cf["deviance"], smv["deviance"], first.converged,
             smv["first_pass_iterations"], smv["iterations"]))


if __name__ == "__main__":
    main()
