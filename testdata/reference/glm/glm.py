"""Reference GLM fits from statsmodels.

Regenerate from the repository root with:

    /usr/bin/python3 testdata/reference/glm/glm.py

Every case gets a folder next to this script with data.csv (only the columns
the model needs), model.yaml (curvewatch spec) and expected.json.

All fits: statsmodels.api.GLM(...).fit() with the default IRLS method and the
default nonrobust covariance, tightened with tol=1e-13 (deviance criterion)
and maxiter=1000, then restarted at the solution so that the covariance is
evaluated at the converged mean (see the comment in main()).  The design matrix is built here, not by a formula
interface, so the factor coding is exactly curvewatch's: the levels of a
factor are sorted (numerically when every level string parses as a number,
otherwise lexicographically by bytes), the first level is the baseline and
every other level gets a 0/1 dummy column.
"""
import csv
import json
import math
import os

import warnings

import numpy as np
from scipy.special import gammaln
import statsmodels
import statsmodels.api as sm

HERE = os.path.dirname(os.path.abspath(__file__))
VERSION = statsmodels.__version__
SOURCE = "statsmodels GLM %s (statsmodels.api.GLM, IRLS, nonrobust covariance)" % VERSION
TOL = 1e-13
MAXITER = 1000


def sort_levels(levels):
    levels = sorted(set(levels))

    def num(s):
        try:
            v = float(s)
        except ValueError:
            return None
        return v if math.isfinite(v) else None

    if all(num(s) is not None for s in levels):
        return sorted(levels, key=lambda s: (num(s), s.encode("utf-8")))
    return sorted(levels, key=lambda s: s.encode("utf-8"))


def int_label(v):
    """Label for a factor stored as a whole-number float (e.g. 3.0 -> "3")."""
    assert float(v) == int(v)
    return str(int(v))


FAMILIES = {
    ("gaussian", "identity"): lambda: sm.families.Gaussian(sm.families.links.identity()),
    ("poisson", "log"): lambda: sm.families.Poisson(sm.families.links.log()),
    ("binomial", "logit"): lambda: sm.families.Binomial(sm.families.links.logit()),
    ("gamma", "log"): lambda: sm.families.Gamma(sm.families.links.log()),
    ("gamma", "inverse"): lambda: sm.families.Gamma(sm.families.links.inverse_power()),
}

LLF_NOTE = {
    "gaussian": "statsmodels llf for gaussian/identity is the concentrated "
                "(profile) log-likelihood: scale replaced by "
                "sum(w*(y-mu)^2)/n, i.e. "
                "-n/2*(log(2*pi*sum(w*(y-mu)^2)/n)+1) + sum(log(w))/2",
    "gamma": "statsmodels llf for gamma evaluated at scale = pearson_chi2/df_resid: "
             "sum over i of  (w/phi)*log(w*y/(phi*mu)) - w*y/(phi*mu) - log(y) - lgamma(w/phi)",
    "poisson": "sum of y*log(mu) - mu - lgamma(y+1)",
    "binomial": "0/1 response: sum of y*log(mu) + (1-y)*log(1-mu); "
                "proportion response with var_weights: see two_column_endog",
}


# ---------------------------------------------------------------- cases
def case_copper():
    d = sm.datasets.copper.load_pandas().data
    cols = ["WORLDCONSUMPTION", "COPPERPRICE", "INCOMEINDEX", "ALUMPRICE", "INVENTORYINDEX"]
    return dict(
        name="copper-gaussian", folder="gaussian_identity",
        dataset="statsmodels.datasets.copper (25 rows)",
        family="gaussian", link="identity",
        data={c: d[c].to_numpy(float) for c in cols},
        response="WORLDCONSUMPTION", linear=cols[1:], factors=[])


def case_anes96():
    d = sm.datasets.anes96.load_pandas().data
    return dict(
        name="anes96-poisson", folder="poisson_log",
        dataset="statsmodels.datasets.anes96 (944 rows): TVnews (days a week "
                "watching TV news, 0-7) ~ age + factor(income); income is the "
                "1..24 income-group code, written as text labels '1'..'24' so "
                "the numeric level sort (1,2,...,10,...) differs from a "
                "lexicographic one (1,10,11,...)",
        family="poisson", link="log",
        data={"TVnews": d["TVnews"].to_numpy(float),
              "age": d["age"].to_numpy(float),
              "income": [int_label(v) for v in d["income"]]},
        response="TVnews", linear=["age"], factors=["income"])


def case_cancer():
    d = sm.datasets.cancer.load_pandas().data
    pop = d["population"].to_numpy(float)
    return dict(
        name="cancer-poisson-offset", folder="poisson_log_offset",
        dataset="statsmodels.datasets.cancer (301 rows): cancer counts, "
                "population at risk; log_exposure = math.log(population)",
        family="poisson", link="log",
        data={"cancer": d["cancer"].to_numpy(float), "population": pop,
              "log_exposure": np.array([math.log(p) for p in pop])},
        response="cancer", linear=["population"], factors=[],
        offset="log_exposure")


def case_spector():
    d = sm.datasets.spector.load_pandas().data
    return dict(
        name="spector-binomial", folder="binomial_logit_binary",
        dataset="statsmodels.datasets.spector (32 rows): GRADE (0/1) ~ GPA + "
                "TUCE + factor(PSI); PSI written as labels '0'/'1'",
        family="binomial", link="logit",
        data={"GRADE": d["GRADE"].to_numpy(float), "GPA": d["GPA"].to_numpy(float),
              "TUCE": d["TUCE"].to_numpy(float),
              "PSI": [int_label(v) for v in d["PSI"]]},
        response="GRADE", linear=["GPA", "TUCE"], factors=["PSI"])


STAR98_X = ["LOWINC", "PERASIAN", "PERBLACK", "PERHISP", "PCTCHRT", "PCTYRRND",
            "PERMINTE", "AVYRSEXP", "AVSALK", "PERSPENK", "PTRATIO", "PCTAF"]


def star98_base():
    d = sm.datasets.star98.load_pandas().data
    above = d["NABOVE"].to_numpy(float)
    trials = above + d["NBELOW"].to_numpy(float)
    data = {"prop": above / trials, "trials": trials, "successes": above}
    return d, data


def case_star98_binomial():
    d, data = star98_base()
    for c in STAR98_X:
        data[c] = d[c].to_numpy(float)
    return dict(
        name="star98-binomial", folder="binomial_logit_proportion",
        dataset="statsmodels.datasets.star98 (303 rows): prop = NABOVE/(NABOVE+NBELOW) "
                "(computed in double precision), trials = NABOVE+NBELOW, "
                "successes = NABOVE (not used by the model, kept for checks); "
                "12 main-effect covariates",
        family="binomial", link="logit",
        data=data, response="prop", linear=STAR98_X, factors=[],
        weights="trials", extra_cols=["successes"])


def case_scotland():
    d = sm.datasets.scotland.load_pandas().data
    cols = ["YES", "COUTAX", "UNEMPF", "MOR", "ACT", "GDP", "AGE", "COUTAX_FEMALEUNEMP"]
    return dict(
        name="scotland-gamma-inverse", folder="gamma_inverse",
        dataset="statsmodels.datasets.scotland (32 rows), all 7 covariates",
        family="gamma", link="inverse",
        data={c: d[c].to_numpy(float) for c in cols},
        response="YES", linear=cols[1:], factors=[])


def case_grunfeld():
    d = sm.datasets.grunfeld.load_pandas().data
    return dict(
        name="grunfeld-gamma-log", folder="gamma_log",
        dataset="statsmodels.datasets.grunfeld (220 rows, 11 firms): invest ~ "
                "value + capital + factor(firm); firm names sorted by bytes, so "
                "'US Steel' < 'Union Oil'",
        family="gamma", link="log",
        data={"invest": d["invest"].to_numpy(float), "value": d["value"].to_numpy(float),
              "capital": d["capital"].to_numpy(float), "firm": list(d["firm"])},
        response="invest", linear=["value", "capital"], factors=["firm"])


def case_star98_gaussian_weights():
    d, data = star98_base()
    del data["successes"]
    for c in ["LOWINC", "PERMINTE", "AVYRSEXP"]:
        data[c] = d[c].to_numpy(float)
    return dict(
        name="star98-gaussian-weighted", folder="gaussian_weights",
        dataset="statsmodels.datasets.star98 (303 rows): prop = NABOVE/(NABOVE+NBELOW), "
                "prior weights trials = NABOVE+NBELOW",
        family="gaussian", link="identity",
        data=data, response="prop", linear=["LOWINC", "PERMINTE", "AVYRSEXP"],
        factors=[], weights="trials")


CASES = [case_copper, case_anes96, case_cancer, case_spector, case_star98_binomial,
         case_scotland, case_grunfeld, case_star98_gaussian_weights]


# ---------------------------------------------------------------- fitting
def design(case):
    cols = [np.ones(len(case["data"][case["response"]]))]
    names = [("intercept", None)]
    for c in case["linear"]:
        cols.append(np.asarray(case["data"][c], float))
        names.append(("linear", c))
    levels = {}
    for f in case["factors"]:
        vals = list(case["data"][f])
        lv = sort_levels(vals)
        levels[f] = lv
        for level in lv[1:]:
            cols.append(np.array([1.0 if v == level else 0.0 for v in vals]))
            names.append(("factor", (f, level)))
    return np.column_stack(cols), names, levels


def glm_model(case, exog, endog=None):
    fam = FAMILIES[(case["family"], case["link"])]()
    kw = {}
    if case.get("offset"):
        kw["offset"] = case["data"][case["offset"]]
    if case.get("weights"):
        kw["var_weights"] = case["data"][case["weights"]]
    if endog is None:
        endog = case["data"][case["response"]]
    return sm.GLM(endog, exog, family=fam, **kw)


def fit(model, **kw):
    return model.fit(tol=TOL, maxiter=MAXITER, **kw)


def write_csv(path, case):
    cols = [case["response"]] + case["linear"] + case["factors"]
    for k in ("weights", "offset"):
        if case.get(k):
            cols.append(case[k])
    cols += case.get("extra_cols", [])
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
    return cols


def write_yaml(path, case):
    lines = ["name: %s" % case["name"], "response: %s" % case["response"],
             "family: %s" % case["family"], "link: %s" % case["link"]]
    if case.get("weights"):
        lines.append("weights: %s" % case["weights"])
    if case.get("offset"):
        lines.append("offset: %s" % case["offset"])
    lines.append("terms:")
    for c in case["linear"]:
        lines.append("  - linear: %s" % c)
    for f in case["factors"]:
        lines.append("  - factor: %s" % f)
    with open(path, "w", newline="\n") as fh:
        fh.write("\n".join(lines) + "\n")


def llf_by_hand(case, res):
    """The log-likelihood conventions written in LLF_NOTE, evaluated here."""
    y = np.asarray(case["data"][case["response"]], float)
    mu = res.mu
    w = np.asarray(case["data"][case["weights"]], float) if case.get("weights") else np.ones_like(y)
    fam = case["family"]
    if fam == "gaussian":
        n = len(y)
        s2 = np.sum(w * (y - mu) ** 2) / n
        return -n / 2 * (math.log(2 * math.pi * s2) + 1) + np.sum(np.log(w)) / 2
    if fam == "gamma":
        a = w / res.scale
        return np.sum(a * np.log(a * y / mu) - a * y / mu - np.log(y) - gammaln(a))
    if fam == "poisson":
        return np.sum(y * np.log(mu) - mu - gammaln(y + 1))
    if fam == "binomial" and not case.get("weights"):
        return np.sum(y * np.log(mu) + (1 - y) * np.log(1 - mu))
    return None


def main():
    warnings.simplefilter("ignore", sm.tools.sm_exceptions.DomainWarning)
    summary = []
    for make in CASES:
        case = make()
        X, names, levels = design(case)
        n, p = X.shape
        assert np.linalg.matrix_rank(X) == p
        first = fit(glm_model(case, X))
        # statsmodels takes the covariance (and so the se) from the weighted
        # least squares problem of the LAST IRLS iteration, whose weights are
        # computed from the mean of the PREVIOUS iterate.  With the deviance
        # criterion that iterate is only ~sqrt(tol) close to the solution,
        # so the se are off in the 8th-9th digit.  Restarting IRLS at the
        # solution makes those weights the converged ones: the restart
        # converges in one iteration, leaves the estimates unchanged and gives
        # the se at the converged mean.  All reported values come from it.
        model = glm_model(case, X)
        res = fit(model, start_params=first.params)
        params, bse = res.params, res.bse
        rel_change = float(np.max(np.abs(res.params - first.params) / bse))
        se_change = float(np.max(np.abs(first.bse / bse - 1)))
        score = model.score(params)
        score_se = float(np.max(np.abs(score * bse)))
        assert first.converged and res.converged and rel_change < 1e-8 and score_se < 1e-6, \
            (case["name"], first.converged, rel_change, score_se)

        ll = llf_by_hand(case, res)
        if ll is not None:
            assert abs(ll - res.llf) <= 1e-10 * abs(res.llf), (case["name"], ll, res.llf)

        out = {
            "source": SOURCE,
            "dataset": case["dataset"] + "; statsmodels %s" % VERSION,
            "family": case["family"], "link": case["link"],
            "n": n,
            "intercept": None, "linear": {}, "factor": {},
            "factor_levels": {f: lv for f, lv in levels.items()},
            "deviance": float(res.deviance),
            "null_deviance": float(res.null_deviance),
            "scale": float(res.scale),
            "df_resid": float(res.df_resid),
            "llf": float(res.llf),
            "pearson_chi2": float(res.pearson_chi2),
            "converged": bool(first.converged),
            "iterations": int(first.fit_history["iteration"]),
            "fit_options": "GLM(...).fit(tol=%g, maxiter=%d) (deviance "
                           "criterion), then the same fit restarted with "
                           "start_params = that solution (converged=%s after "
                           "%d iteration(s)); reported values are from the "
                           "restart" % (TOL, MAXITER, bool(res.converged),
                                        int(res.fit_history["iteration"])),
            "notes": [
                "scale: %s" % ("pearson_chi2/df_resid (statsmodels default)"
                               if case["family"] in ("gaussian", "gamma")
                               else "fixed at 1 (statsmodels default)"),
                "se = sqrt(diag(scale * (X' W X)^-1)) with the IRLS weights "
                "at the converged mean (statsmodels nonrobust covariance, "
                "from the restarted fit)",
                "llf: " + LLF_NOTE[case["family"]],
                "factor coding: levels sorted (numerically if all parse as "
                "numbers, else by bytes); first level is the baseline; "
                "dummy columns built by glm.py, not by a formula interface",
            ],
            "check": {
                "max_abs_param_change_on_restart_over_se": rel_change,
                "max_rel_se_change_first_fit_vs_restart": se_change,
                "max_abs_score_times_se": score_se,
            },
        }
        for (kind, key), est, se in zip(names, params, bse):
            entry = {"estimate": float(est), "se": float(se)}
            if kind == "intercept":
                out["intercept"] = entry
            elif kind == "linear":
                out["linear"][key] = entry
            else:
                out["factor"].setdefault(key[0], {})[key[1]] = entry
        if case.get("weights"):
            out["notes"].append("prior weights passed as var_weights=%s" % case["weights"])

        if case.get("offset"):
            # statsmodels refits the null model (constant + offset) with its
            # default tol=1e-8; refit it tightly and record that value too.
            null = fit(glm_model(case, np.ones((n, 1))))
            out["null_deviance_tight"] = float(null.deviance)
            out["notes"].append(
                "null_deviance includes the offset (intercept-only GLM with "
                "the same offset); statsmodels' attribute refits it with "
                "tol=1e-8, null_deviance_tight is the same refit with tol=%g" % TOL)

        if case["family"] == "binomial" and case.get("weights"):
            # same model with a two-column (successes, failures) response
            succ = case["data"]["successes"]
            trials = case["data"]["trials"]
            fam = FAMILIES[(case["family"], case["link"])]()
            res2 = fit(sm.GLM(np.column_stack([succ, trials - succ]), X, family=fam))
            dev_diff = abs(res2.deviance - res.deviance) / res.deviance
            par_diff = float(np.max(np.abs(res2.params - params) / bse))
            se_diff = float(np.max(np.abs(res2.bse / bse - 1)))
            assert dev_diff < 1e-10 and par_diff < 1e-8 and se_diff < 1e-8
            m2 = res2.mu
            ll2 = np.sum(gammaln(trials + 1) - gammaln(succ + 1) - gammaln(trials - succ + 1)
                         + succ * np.log(m2) + (trials - succ) * np.log(1 - m2))
            assert abs(ll2 - res2.llf) <= 1e-10 * abs(ll2)
            out["two_column_endog"] = {
                "note": "same model fitted with endog = [successes, trials - "
                        "successes] and no weights: deviance, pearson_chi2, "
                        "estimates and se agree; llf does NOT: for the "
                        "var_weights fit statsmodels evaluates the binomial "
                        "log-likelihood with n = 1 and y = prop (lgamma of "
                        "non-integers) and multiplies it by the weight; the "
                        "two-column llf is the usual sum of lgamma(n+1) - "
                        "lgamma(s+1) - lgamma(n-s+1) + s*log(mu) + "
                        "(n-s)*log(1-mu)",
                "deviance": float(res2.deviance),
                "null_deviance": float(res2.null_deviance),
                "pearson_chi2": float(res2.pearson_chi2),
                "llf": float(res2.llf),
                "max_abs_param_diff_over_se": par_diff,
            }

        folder = os.path.join(HERE, case["folder"])
        os.makedirs(folder, exist_ok=True)
        write_csv(os.path.join(folder, "data.csv"), case)
        write_yaml(os.path.join(folder, "model.yaml"), case)
        with open(os.path.join(folder, "expected.json"), "w", newline="\n") as fh:
            json.dump(out, fh, indent=1)
            fh.write("\n")
        summary.append("%-28s n=%4d p=%2d dev=%.10g conv=%s it=%d restart=%.1e "
                       "se change=%.1e score=%.1e"
                       % (case["folder"], n, p, res.deviance, first.converged,
                          out["iterations"], rel_change, se_change, score_se))
    print("\n".join(summary))


if __name__ == "__main__":
    main()
