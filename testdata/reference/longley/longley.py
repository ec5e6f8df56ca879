"""NIST StRD Longley linear regression: data and certified values, checked
by an exact rational least-squares solve.

Regenerate from the repository root with:

    /usr/bin/python3 testdata/reference/longley/longley.py

Writes data.csv, model.yaml and expected.json next to this script.

The certified values below were written down from memory; the same digits
appear in the Longley tests of other numerical libraries (for example the
GSL multifit tests and GNU Octave's regress tests).  This script
  1. checks that the data shipped as statsmodels.datasets.longley are the
     NIST data (the table is also embedded here);
  2. solves the least-squares problem EXACTLY with Python's fractions module
     (the data are integers and one-decimal numbers, so X'X b = X'y is a
     rational system), computes the standard errors, residual standard
     deviation and R^2 to 40 significant digits with the decimal module;
  3. asserts that every certified value equals the exact value rounded to
     the 15 significant digits NIST prints.
"""
import csv
import json
import os
from decimal import Decimal, getcontext
from fractions import Fraction

import statsmodels
import statsmodels.api as sm

HERE = os.path.dirname(os.path.abspath(__file__))
getcontext().prec = 40

# NIST StRD Longley.dat: y, x1..x6 (Employed; GNP deflator, GNP,
# Unemployed, Armed Forces, Population, Year), as printed by NIST.
NIST_DATA = """\
60323 83.0 234289 2356 1590 107608 1947
61122 88.5 259426 2325 1456 108632 1948
60171 88.2 258054 3682 1616 109773 1949
61187 89.5 284599 3351 1650 110929 1950
63221 96.2 328975 2099 3099 112075 1951
63639 98.1 346999 1932 3594 113270 1952
64989 99.0 365385 1870 3547 115094 1953
63761 100.0 363112 3578 3350 116219 1954
66019 101.2 397469 2904 3048 117388 1955
67857 104.6 419180 2822 2857 118734 1956
68169 108.4 442769 2936 2798 120445 1957
66513 110.8 444546 4681 2637 121950 1958
68655 112.6 482704 3813 2552 123366 1959
69564 114.2 502601 3931 2514 125368 1960
69331 115.7 518173 4806 2572 127852 1961
70551 116.9 554894 4007 2827 130081 1962
"""

CERTIFIED = {
    "coefficients": [
        ("intercept", "-3482258.63459582", "890420.383607373"),
        ("x1", "15.0618722713733", "84.9149257747669"),
        ("x2", "-0.358191792925910E-01", "0.334910077722432E-01"),
        ("x3", "-2.02022980381683", "0.488399681651699"),
        ("x4", "-1.03322686717359", "0.214274163161675"),
        ("x5", "-0.511041056535807E-01", "0.226073200069370"),
        ("x6", "1829.15146461355", "455.478499142212"),
    ],
    "residual_sd": "304.854073561965",
    "r_squared": "0.995479004577296",
}
# Seen next to the certified coefficients in the other libraries' tests;
# checked the same way and recorded as extra values.
EXTRA = {"rss": "836424.055505915", "f_statistic": "330.285339234588"}

NAMES = ["y", "x1", "x2", "x3", "x4", "x5", "x6"]
DESCR = ["Employed (total derived employment)", "GNP implicit price deflator",
         "GNP", "Unemployed", "Armed Forces", "Population (14 and over)", "Year"]


def round_sig(d, sig=15):
    return Decimal(d).normalize().__round__(sig - 1 - Decimal(d).adjusted())


def solve_exact(A, b):
    """Gauss-Jordan elimination over the rationals."""
    n = len(A)
    M = [row[:] + [bi] for row, bi in zip(A, b)]
    for c in range(n):
        piv = next(r for r in range(c, n) if M[r][c] != 0)
        M[c], M[piv] = M[piv], M[c]
        pv = M[c][c]
        M[c] = [v / pv for v in M[c]]
        for r in range(n):
            if r != c and M[r][c] != 0:
                f = M[r][c]
                M[r] = [a - f * bcol for a, bcol in zip(M[r], M[c])]
    return [M[i][n] for i in range(n)]


def inverse_exact(A):
    n = len(A)
    cols = [solve_exact(A, [Fraction(int(i == j)) for i in range(n)]) for j in range(n)]
    return [[cols[j][i] for j in range(n)] for i in range(n)]


def dec(fr):
    return Decimal(fr.numerator) / Decimal(fr.denominator)


def main():
    rows = [line.split() for line in NIST_DATA.strip().splitlines()]
    assert len(rows) == 16 and all(len(r) == 7 for r in rows)
    assert rows[0] == ["60323", "83.0", "234289", "2356", "1590", "107608", "1947"]

    # 1. statsmodels ships the same numbers
    sd = sm.datasets.longley.load_pandas().data
    cols = ["TOTEMP", "GNPDEFL", "GNP", "UNEMP", "ARMED", "POP", "YEAR"]
    for i, r in enumerate(rows):
        for j, c in enumerate(cols):
            assert Fraction(r[j]) == Fraction(float(sd[c].iloc[i])).limit_denominator(10), (i, c)

    # 2. exact least squares
    y = [Fraction(r[0]) for r in rows]
    X = [[Fraction(1)] + [Fraction(v) for v in r[1:]] for r in rows]
    n, p = len(X), len(X[0])
    XtX = [[sum(X[k][i] * X[k][j] for k in range(n)) for j in range(p)] for i in range(p)]
    Xty = [sum(X[k][i] * y[k] for k in range(n)) for i in range(p)]
    b = solve_exact(XtX, Xty)
    resid = [y[k] - sum(X[k][j] * b[j] for j in range(p)) for k in range(n)]
    rss = sum(r * r for r in resid)
    ybar = sum(y) / n
    tss = sum((v - ybar) ** 2 for v in y)
    df = n - p
    s2 = rss / df
    inv = inverse_exact(XtX)
    se = [(dec(s2 * inv[j][j])).sqrt() for j in range(p)]
    resid_sd = dec(s2).sqrt()
    r2 = dec(1 - rss / tss)
    fstat = dec(((tss - rss) / (p - 1)) / s2)

    # 3. certified == exact rounded to 15 significant digits
    exact = {}
    for j, (name, cb, cse) in enumerate(CERTIFIED["coefficients"]):
        eb, ese = dec(b[j]), se[j]
        assert round_sig(eb) == Decimal(cb), (name, eb, cb)
        assert round_sig(ese) == Decimal(cse), (name, ese, cse)
        exact[name] = (eb, ese)
    assert round_sig(resid_sd) == Decimal(CERTIFIED["residual_sd"])
    assert round_sig(r2) == Decimal(CERTIFIED["r_squared"])
    assert round_sig(dec(rss)) == Decimal(EXTRA["rss"])
    assert round_sig(fstat) == Decimal(EXTRA["f_statistic"])

    with open(os.path.join(HERE, "data.csv"), "w", newline="") as fh:
        w = csv.writer(fh, lineterminator="\n")
        w.writerow(NAMES)
        w.writerows(rows)
    with open(os.path.join(HERE, "model.yaml"), "w", newline="\n") as fh:
        fh.write("name: longley\nresponse: y\nfamily: gaussian\nlink: identity\nterms:\n"
                 + "".join("  - linear: x%d\n" % j for j in range(1, 7)))

    cert = CERTIFIED["coefficients"]
    out = {
        "source": "NIST StRD Longley certified values (from memory), confirmed "
                  "by exact rational least squares in Python fractions (longley.py)",
        "dataset": "NIST StRD Longley (Longley 1967), 16 observations: y = %s; "
                   "x1..x6 = %s; identical to statsmodels.datasets.longley "
                   "(statsmodels %s)" % (DESCR[0], ", ".join(DESCR[1:]),
                                         statsmodels.__version__),
        "family": "gaussian", "link": "identity", "n": n,
        "certified": {
            "intercept": {"estimate": float(cert[0][1]), "se": float(cert[0][2])},
            "linear": {name: {"estimate": float(cb), "se": float(cse)}
                       for name, cb, cse in cert[1:]},
            "residual_sd": float(CERTIFIED["residual_sd"]),
            "r_squared": float(CERTIFIED["r_squared"]),
            "df_resid": df,
            "note": "NIST prints 15 significant digits; every value equals "
                    "the exact rational solution rounded to 15 digits",
        },
        "extra_checked": {
            "rss": float(EXTRA["rss"]),
            "f_statistic": float(EXTRA["f_statistic"]),
            "scale": float(dec(s2)),
            "note": "residual sum of squares and F statistic as quoted next "
                    "to the certified values elsewhere, confirmed the same "
                    "way; scale = rss/df_resid is exact, rounded to double",
        },
        "exact": {
            "note": "exact least-squares solution (fractions), rounded to "
                    "double; use these for the tightest comparisons",
            "intercept": {"estimate": float(exact["intercept"][0]),
                          "se": float(exact["intercept"][1])},
            "linear": {name: {"estimate": float(exact[name][0]),
                              "se": float(exact[name][1])}
                       for name, _, _ in cert[1:]},
            "residual_sd": float(resid_sd),
            "r_squared": float(r2),
            "rss": float(dec(rss)),
            "fitted": [float(dec(y[k] - resid[k])) for k in range(n)],
        },
    }
    with open(os.path.join(HERE, "expected.json"), "w", newline="\n") as fh:
        json.dump(out, fh, indent=1)
        fh.write("\n")
    print("longley: all certified values match the exact solution to 15 digits")


if __name__ == "__main__":
    main()
