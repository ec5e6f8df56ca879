"""Reference values for comparing a model with the same model minus some terms.

Regenerate from the repository root with:

    /usr/bin/python3 testdata/reference/nested/nested.py

Every case gets a folder next to this script with data.csv (only the columns
the full model needs), model.yaml (the FULL model as a curvewatch spec; the
terms to drop are listed in expected.json under "drop") and expected.json.

Cases:
  * gaussian models without curves: statsmodels OLS for the full and the
    reduced model and full.compare_f_test(reduced) -- the classical
    nested-model F test F = ((RSS_r - RSS_f) / df_diff) / (RSS_f / df_resid_f);
    the script also recomputes F and p by hand and asserts they agree;
  * poisson: statsmodels GLM deviances of both fits; the likelihood-ratio
    statistic is the deviance change, its p-value scipy.stats.chi2.sf;
  * gamma: statsmodels GLM deviances and the full fit's Pearson scale
    (pearson_chi2 / df_resid, statsmodels' default); F = (dD / df_diff) /
    scale referred to F(df_diff, df_resid_full) with scipy.stats.f.sf.

The design matrices are built here, not by a formula interface, with
curvewatch's factor coding (levels sorted by bytes, the first one the
baseline, a 0/1 column for each other level).
"""
import csv
import json
import os
import warnings

import numpy as np
import scipy
import scipy.stats
import statsmodels
import statsmodels.api as sm

HERE = os.path.dirname(os.path.abspath(__file__))
SM = statsmodels.__version__
SP = scipy.__version__
TOL = 1e-13
MAXITER = 1000


def case_longley():
    d = sm.datasets.longley.load_pandas().data
    names = {"TOTEMP": "y", "GNPDEFL": "x1", "GNP": "x2", "UNEMP": "x3",
             "ARMED": "x4", "POP": "x5", "YEAR": "x6"}
    data = {new: d[old].to_numpy(float) for old, new in names.items()}
    return dict(
        name="longley", folder="longley_drop_x3",
        dataset="statsmodels.datasets.longley (16 rows, the NIST StRD Longley "
                "data): y = TOTEMP ~ x1..x6 = GNPDEFL, GNP, UNEMP, ARMED, POP, "
                "YEAR; the reduced model drops x3 (UNEMP)",
        family="gaussian", link="identity", data=data, response="y",
        linear=["x1", "x2", "x3", "x4", "x5", "x6"], factors=[], drop=["x3"])


def case_grunfeld():
    d = sm.datasets.grunfeld.load_pandas().data
    return dict(
        name="grunfeld", folder="grunfeld_drop_firm",
        dataset="statsmodels.datasets.grunfeld (220 rows, 11 firms): invest ~ "
                "value + capital + factor(firm); the reduced model drops the "
                "firm factor (10 coefficients)",
        family="gaussian", link="identity",
        data={"invest": d["invest"].to_numpy(float), "value": d["value"].to_numpy(float),
              "capital": d["capital"].to_numpy(float), "firm": list(d["firm"])},
        response="invest", linear=["value", "capital"], factors=["firm"],
        drop=["firm"])


def case_cpunish():
    d = sm.datasets.cpunish.load_pandas().data
    cols = ["EXECUTIONS", "INCOME", "PERPOVERTY", "PERBLACK", "VC100k96", "SOUTH", "DEGREE"]
    return dict(
        name="cpunish-poisson", folder="cpunish_poisson_drop_two",
        dataset="statsmodels.datasets.cpunish (17 rows): EXECUTIONS ~ INCOME + "
                "PERPOVERTY + PERBLACK + VC100k96 + SOUTH + DEGREE, all as "
                "linear terms; the reduced model drops PERPOVERTY and DEGREE",
        family="poisson", link="log",
        data={c: d[c].to_numpy(float) for c in cols},
        response="EXECUTIONS", linear=cols[1:], factors=[],
        drop=["PERPOVERTY", "DEGREE"])


def case_scotland():
    d = sm.datasets.scotland.load_pandas().data
    cols = ["YES", "COUTAX", "UNEMPF", "MOR", "ACT", "GDP", "AGE", "COUTAX_FEMALEUNEMP"]
    return dict(
        name="scotland-gamma", folder="scotland_gamma_drop_two",
        dataset="statsmodels.datasets.scotland (32 rows): YES ~ the 7 "
                "covariates, gamma with inverse link; the reduced model drops "
                "GDP and AGE",
        family="gamma", link="inverse",
        data={c: d[c].to_numpy(float) for c in cols},
        response="YES", linear=cols[1:], factors=[], drop=["GDP", "AGE"])


CASES = [case_longley, case_grunfeld, case_cpunish, case_scotland]

FAMILIES = {
    ("poisson", "log"): lambda: sm.families.Poisson(sm.families.links.log()),
    ("gamma", "inverse"): lambda: sm.families.Gamma(sm.families.links.inverse_power()),
}


def design(case, drop):
    y = case["data"][case["response"]]
    cols = [np.ones(len(y))]
    for c in case["linear"]:
        if c not in drop:
            cols.append(np.asarray(case["data"][c], float))
    for f in case["factors"]:
        if f in drop:
            continue
        vals = list(case["data"][f])
        levels = sorted(set(vals), key=lambda s: s.encode("utf-8"))
        for level in levels[1:]:
            cols.append(np.array([1.0 if v == level else 0.0 for v in vals]))
    X = np.column_stack(cols)
    assert np.linalg.matrix_rank(X) == X.shape[1]
    return X


def glm_fit(case, X):
    y = case["data"][case["response"]]
    fam = FAMILIES[(case["family"], case["link"])]
    first = sm.GLM(y, X, family=fam()).fit(tol=TOL, maxiter=MAXITER)
    # restart at the solution so the reported values belong to it exactly
    res = sm.GLM(y, X, family=fam()).fit(tol=TOL, maxiter=MAXITER, start_params=first.params)
    assert first.converged and res.converged
    return res


def side(res, deviance, kind):
    out = {"deviance": float(deviance), "df_resid": float(res.df_resid),
           "params": int(len(res.params))}
    if kind == "glm":
        out["scale"] = float(res.scale)
        out["aic"] = float(res.aic)
        out["null_deviance"] = float(res.null_deviance)
    return out


def run(case):
    y = case["data"][case["response"]]
    n = len(y)
    Xf, Xr = design(case, []), design(case, case["drop"])
    if case["family"] == "gaussian":
        full = sm.OLS(y, Xf).fit()
        red = sm.OLS(y, Xr).fit()
        f, p, df_diff = full.compare_f_test(red)
        f, p, df_diff = float(f), float(p), float(df_diff)
        # the same test written out
        f2 = ((red.ssr - full.ssr) / df_diff) / (full.ssr / full.df_resid)
        p2 = scipy.stats.f.sf(f2, df_diff, full.df_resid)
        assert abs(f2 - f) <= 1e-10 * f and abs(p2 - p) <= 1e-10 * p, (f, f2, p, p2)
        test = {"name": "F", "statistic": f, "p_value": p, "df_diff": df_diff,
                "df_denom": float(full.df_resid),
                "produced_by": "statsmodels %s OLS(...).fit() for both models, "
                               "full.compare_f_test(reduced) -> (F, p, df_diff)" % SM}
        source = "statsmodels %s OLS.compare_f_test" % SM
        sides = side(full, full.ssr, "ols"), side(red, red.ssr, "ols")
        extra = {"null_deviance": float(full.centered_tss)}
    elif case["family"] == "poisson":
        full, red = glm_fit(case, Xf), glm_fit(case, Xr)
        dd = red.deviance - full.deviance
        df_diff = float(full.df_model - red.df_model)
        p = float(scipy.stats.chi2.sf(dd, df_diff))
        test = {"name": "likelihood-ratio", "statistic": float(dd), "p_value": p,
                "df_diff": df_diff,
                "produced_by": "statsmodels %s GLM(Poisson, log) deviances of both "
                               "fits (IRLS tol=%g, restarted at the solution); "
                               "statistic = deviance change, p = scipy %s "
                               "scipy.stats.chi2.sf(statistic, df_diff)" % (SM, TOL, SP)}
        source = "statsmodels %s GLM deviances, scipy %s stats.chi2.sf" % (SM, SP)
        sides = side(full, full.deviance, "glm"), side(red, red.deviance, "glm")
        extra = {}
    else:
        full, red = glm_fit(case, Xf), glm_fit(case, Xr)
        dd = red.deviance - full.deviance
        df_diff = float(full.df_model - red.df_model)
        f = float(dd / df_diff / full.scale)
        p = float(scipy.stats.f.sf(f, df_diff, full.df_resid))
        test = {"name": "F", "statistic": f, "p_value": p, "df_diff": df_diff,
                "df_denom": float(full.df_resid),
                "produced_by": "statsmodels %s GLM(Gamma, inverse) deviances of both "
                               "fits (IRLS tol=%g, restarted at the solution) and "
                               "the full fit's scale (pearson_chi2/df_resid); "
                               "F = (deviance change / df_diff) / scale, p = scipy %s "
                               "scipy.stats.f.sf(F, df_diff, df_resid_full)" % (SM, TOL, SP)}
        source = "statsmodels %s GLM deviances and Pearson scale, scipy %s stats.f.sf" % (SM, SP)
        sides = side(full, full.deviance, "glm"), side(red, red.deviance, "glm")
        extra = {}
    out = {
        "source": source,
        "dataset": case["dataset"] + "; statsmodels %s" % SM,
        "family": case["family"], "link": case["link"], "n": n,
        "drop": case["drop"],
        "full": sides[0], "reduced": sides[1],
        "test": test,
    }
    out.update(extra)
    folder = os.path.join(HERE, case["folder"])
    os.makedirs(folder, exist_ok=True)
    write_csv(os.path.join(folder, "data.csv"), case)
    write_yaml(os.path.join(folder, "model.yaml"), case)
    with open(os.path.join(folder, "expected.json"), "w", newline="\n") as fh:
        json.dump(out, fh, indent=1)
        fh.write("\n")
    return "%s: %s = %.10g on %g df, p = %.6g" % (case["folder"], test["name"],
                                                   test["statistic"], test["df_diff"],
                                                   test["p_value"])


def write_csv(path, case):
    cols = [case["response"]] + case["linear"] + case["factors"]
    n = len(case["data"][case["response"]])
    with open(path, "w", newline="") as fh:
        w = csv.writer(fh, lineterminator="\n")
        w.writerow(cols)
        for i in range(n):
            row = []
            for c in cols:
                v = case["data"][c][i]
                row.append(v if isinstance(v, str) else repr(float(v)))
            w.writerow(row)


def write_yaml(path, case):
    lines = ["name: %s" % case["name"], "response: %s" % case["response"],
             "family: %s" % case["family"], "link: %s" % case["link"], "terms:"]
    lines += ["  - linear: %s" % c for c in case["linear"]]
    lines += ["  - factor: %s" % f for f in case["factors"]]
    with open(path, "w", newline="\n") as fh:
        fh.write("\n".join(lines) + "\n")


def main():
    warnings.simplefilter("ignore", sm.tools.sm_exceptions.DomainWarning)
    for make in CASES:
        print(run(make()))


if __name__ == "__main__":
    main()
