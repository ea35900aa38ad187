#!/usr/bin/env python3
"""Reference values for knotwise's design assembly and classical fit, computed independently with
numpy (type-7 quantiles), scipy.interpolate.BSpline.design_matrix (basis), and statsmodels OLS (fit).

The design is built here from its definition (DESIGN.md §4.1-4.2): intercept, numeric linear columns,
treatment dummies for every non-reference level (levels sorted), then per smooth term the k cubic
B-spline columns with interior knots at the type-7 quantiles l/(K+1), each centred by its sample mean,
the last one dropped.

usage: make_fit_reference.py            rewrite tests/fixtures/fit/data.csv and fit_reference.json
       make_fit_reference.py --check    recompute and compare with the committed JSON (exit 1 on mismatch)
"""
import json, os, sys
import numpy as np, scipy, statsmodels
import statsmodels.api as sm
from scipy.interpolate import BSpline

HERE = os.path.dirname(os.path.abspath(__file__))
ROOT = os.path.normpath(os.path.join(HERE, "..", "..", ".."))
DATA = os.path.join(ROOT, "tests", "fixtures", "fit", "data.csv")
OUT = os.path.join(HERE, "fit_reference.json")


def make_data():
    rng = np.random.default_rng(20261202)
    n = 300
    x1 = np.round(rng.uniform(0, 10, n), 4)
    x2 = np.round(rng.normal(0, 1, n), 4)
    z = np.round(rng.normal(5, 2, n), 4)
    g = np.array(["beta", "alpha", "gamma"])[rng.integers(0, 3, n)]
    eff = {"alpha": 0.0, "beta": 0.7, "gamma": -0.4}
    y = 2.0 + 0.3 * z + np.array([eff[v] for v in g]) + np.sin(x1 / 1.7) + 0.5 * x2**2 + rng.normal(0, 0.3, n)
    y = np.round(y, 6)
    lines = ["y,z,g,x1,x2"] + [f"{float(a)!r},{float(b)!r},{c},{float(d)!r},{float(e)!r}" for a, b, c, d, e in zip(y, z, g, x1, x2)]
    return lines


def read_data():
    rows = [l.split(",") for l in open(DATA).read().strip().split("\n")[1:]]
    y = np.array([float(r[0]) for r in rows]); z = np.array([float(r[1]) for r in rows])
    g = np.array([r[2] for r in rows]); x1 = np.array([float(r[3]) for r in rows]); x2 = np.array([float(r[4]) for r in rows])
    return y, z, g, x1, x2


def smooth_block(x, k, degree=3):
    K = k - degree - 1
    probs = [l / (K + 1) for l in range(1, K + 1)]
    interior = list(np.quantile(x, probs)) if K > 0 else []
    t = np.r_[[x.min()] * (degree + 1), interior, [x.max()] * (degree + 1)]
    B = BSpline.design_matrix(x, t, degree, extrapolate=True).toarray()
    B = B - B.mean(axis=0)
    return B[:, :-1], t


def design(k):
    y, z, g, x1, x2 = read_data()
    levels = sorted(set(g))  # reference = first level
    cols = [np.ones_like(y), z] + [(g == lv).astype(float) for lv in levels[1:]]
    b1, t1 = smooth_block(x1, k)
    b2, t2 = smooth_block(x2, k)
    X = np.column_stack(cols + [b1, b2])
    return y, X, t1, t2


def compute():
    out = {"source": "numpy %s quantile (type 7), scipy %s BSpline.design_matrix, statsmodels %s OLS" % (np.__version__, scipy.__version__, statsmodels.__version__),
           "degree": 3, "penalty": 0.5, "fits": []}
    for k in (4, 5, 7):
        y, X, t1, t2 = design(k)
        res = sm.OLS(y, X).fit()
        n, p = X.shape
        rss = float(np.sum(res.resid ** 2))
        out["fits"].append({
            "k": k, "n": n, "p": p,
            "knots_x1": [float(v) for v in t1], "knots_x2": [float(v) for v in t2],
            "coef": [float(v) for v in res.params], "bse": [float(v) for v in res.bse],
            "fitted_first10": [float(v) for v in res.fittedvalues[:10]],
            "rss": rss, "r2": float(res.rsquared),
            "bic": float(np.log(rss / n) + 0.5 * p * np.log(n) / n),
        })
    # Stackloss (Brownlee 1965) via statsmodels.datasets: OLS on all 21 rows and without 1, 3, 4, 21.
    d = sm.datasets.stackloss.load_pandas().data
    Xs = sm.add_constant(d[["AIRFLOW", "WATERTEMP", "ACIDCONC"]].to_numpy())
    ys = d["STACKLOSS"].to_numpy()
    full = sm.OLS(ys, Xs).fit()
    keep = np.array([i not in (0, 2, 3, 20) for i in range(21)])
    part = sm.OLS(ys[keep], Xs[keep]).fit()
    out["stackloss"] = {
        "data": {c: [float(v) for v in d[c]] for c in ["STACKLOSS", "AIRFLOW", "WATERTEMP", "ACIDCONC"]},
        "ols_coef": [float(v) for v in full.params], "ols_bse": [float(v) for v in full.bse],
        "ols_without_1_3_4_21_coef": [float(v) for v in part.params],
        "ols_without_1_3_4_21_bse": [float(v) for v in part.bse],
        "hat": [float(v) for v in full.get_influence().hat_matrix_diag],
        "dfbetas": [[float(v) for v in row] for row in full.get_influence().dfbetas],
    }
    return out


def main():
    if "--check" in sys.argv:
        got = compute(); want = json.load(open(OUT))
        def close(a, b, path):
            if isinstance(a, dict):
                for k in a:
                    close(a[k], b[k], path + "." + k)
            elif isinstance(a, list):
                assert len(a) == len(b), path
                for i, (u, v) in enumerate(zip(a, b)):
                    close(u, v, f"{path}[{i}]")
            elif isinstance(a, float):
                assert abs(a - b) <= 1e-10 * max(1.0, abs(b)), f"{path}: {a} vs {b}"
        close(got["fits"], want["fits"], "fits"); close(got["stackloss"], want["stackloss"], "stackloss")
        print("fit reference: OK")
        return
    os.makedirs(os.path.dirname(DATA), exist_ok=True)
    open(DATA, "w").write("\n".join(make_data()) + "\n")
    json.dump(compute(), open(OUT, "w"), indent=1)
    print("wrote", DATA, OUT)


if __name__ == "__main__":
    main()
