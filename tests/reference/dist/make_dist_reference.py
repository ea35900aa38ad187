#!/usr/bin/env python3
"""Golden values for src/dist.rs, computed with scipy.stats.

Writes dist_reference.json beside this script: scipy.stats.t.ppf and t.cdf over a grid of degrees of
freedom (fractional ones included), and scipy.stats.norm.ppf and norm.cdf.

Usage:
    python3 tests/reference/dist/make_dist_reference.py           # rewrite the JSON
    python3 tests/reference/dist/make_dist_reference.py --check   # recompute, compare, exit 1 on mismatch
"""

import json
import math
import sys
from pathlib import Path

sys.path.insert(0, str(__import__("pathlib").Path(__file__).resolve().parent.parent))
import refcheck  # noqa: E402  (shared writer and --check comparison)

import numpy as np
import scipy
from scipy import stats

OUT = Path(__file__).with_name("dist_reference.json")
# Relative tolerance of --check: the pinned library should reproduce every number exactly; this only
# forgives a last-bit difference between platforms.
CHECK_RTOL = 1e-14

DFS = [0.5, 1.0, 1.5, 2.0, 3.0, 4.0, 5.0, 7.5, 10.0, 20.0, 30.0, 50.0, 120.0, 500.0, 1000.0, 9999.0,
       1e4, 1e5, 1e6, 1e8]
T_PROBS = [1e-12, 1e-8, 1e-4, 0.001, 0.01, 0.025, 0.05, 0.1, 0.25, 0.4, 0.5, 0.6, 0.75, 0.9, 0.95,
           0.975, 0.99, 0.999, 0.9999]
# Lower-tail arguments only: the upper tail follows by symmetry and keeps its relative accuracy there.
T_ARGS = [-1e4, -50.0, -10.0, -4.0, -2.0, -1.96, -1.0, -0.5, -0.1, 0.0]
NORM_PROBS = [1e-300, 1e-100, 1e-20, 1e-10, 1e-6, 0.001, 0.01, 0.025, 0.05, 0.075, 0.1, 0.25, 0.5, 0.6,
              0.75, 0.9, 0.925, 0.95, 0.975, 0.99, 0.999, 1 - 1e-6, 1 - 1e-10]
NORM_ARGS = [-37.0, -30.0, -20.0, -10.0, -8.0, -5.0, -3.0, -2.5, -1.96, -1.0, -0.5, 0.0, 0.5, 1.0, 1.96,
             2.5, 3.0, 5.0, 8.0]


def build():
    t_quantiles = [
        {"df": df, "p": p, "value": float(stats.t.ppf(p, df))} for df in DFS for p in T_PROBS
    ]
    t_cdfs = [{"df": df, "t": t, "value": float(stats.t.cdf(t, df))} for df in DFS for t in T_ARGS]
    norm_quantiles = [{"p": p, "value": float(stats.norm.ppf(p))} for p in NORM_PROBS]
    norm_cdfs = [{"x": x, "value": float(stats.norm.cdf(x))} for x in NORM_ARGS]
    return {
        "source": "scipy.stats.t.ppf, scipy.stats.t.cdf, scipy.stats.norm.ppf, scipy.stats.norm.cdf",
        "generator": "tests/reference/dist/make_dist_reference.py",
        "numpy_version": np.__version__,
        "scipy_version": scipy.__version__,
        "t_quantiles": t_quantiles,
        "t_cdfs": t_cdfs,
        "normal_quantiles": norm_quantiles,
        "normal_cdfs": norm_cdfs,
    }


def main(argv):
    return refcheck.main(argv, OUT, build, CHECK_RTOL)


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
