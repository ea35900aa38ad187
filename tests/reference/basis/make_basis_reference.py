#!/usr/bin/env python3
"""Golden values for src/basis.rs, computed with scipy and numpy.

Writes basis_reference.json beside this script:
- B-spline design matrices from scipy.interpolate.BSpline.design_matrix for four knot vectors
  (cubic on [0, 1]; quadratic with uneven knots on [-2, 3]; cubic with type-7 quantile knots of the
  committed sample; linear on [-1, 2]), each at about 50 points including both ends and every knot;
- numpy.quantile (default method "linear", Hyndman & Fan 1996 type 7) of the committed sample.

At the right end x == t[n] scipy's design_matrix (extrapolate=False, and True alike; checked with
scipy 1.17.1) gives the last basis function the value 1, the closed right end knotwise uses.

Usage:
    python3 tests/reference/basis/make_basis_reference.py           # rewrite the JSON
    python3 tests/reference/basis/make_basis_reference.py --check   # recompute, compare, exit 1 on mismatch
"""

import json
import math
import sys
from pathlib import Path

sys.path.insert(0, str(__import__("pathlib").Path(__file__).resolve().parent.parent))
import refcheck  # noqa: E402  (shared writer and --check comparison)

import numpy as np
import scipy
from scipy.interpolate import BSpline

OUT = Path(__file__).with_name("basis_reference.json")
SEED = 20261202
# Relative tolerance of --check: the pinned libraries should reproduce every number exactly; this
# only forgives a last-bit difference between platforms.
CHECK_RTOL = 1e-14


def make_sample():
    """200 positive, right-skewed values, rounded to 6 decimals so the JSON stays readable."""
    rng = np.random.default_rng(SEED)
    return [float(v) for v in np.round(rng.gamma(2.0, 1.5, size=200), 6)]


def full_knots(lo, hi, interior, degree):
    return [lo] * (degree + 1) + list(interior) + [hi] * (degree + 1)


def points_for(lo, hi, interior, count=50):
    """About `count` points: an even grid plus both ends and every interior knot, sorted, unique."""
    grid = np.linspace(lo, hi, count - len(interior))
    pts = sorted(set(float(v) for v in grid) | {lo, hi} | set(float(v) for v in interior))
    return pts


def design(points, knots, degree):
    m = BSpline.design_matrix(np.asarray(points), np.asarray(knots), degree, extrapolate=False)
    return [[float(v) for v in row] for row in m.toarray()]


def build():
    sample = make_sample()
    sample_sorted = np.sort(np.asarray(sample))
    cases = []

    def add(name, degree, lo, hi, interior, placement):
        knots = full_knots(lo, hi, interior, degree)
        pts = points_for(lo, hi, interior)
        cases.append(
            {
                "name": name,
                "degree": degree,
                "size": len(knots) - degree - 1,
                "placement": placement,
                "knots": [float(v) for v in knots],
                "points": pts,
                "values": design(pts, knots, degree),
            }
        )

    add("cubic on [0, 1], interior 0.25, 0.5, 0.75", 3, 0.0, 1.0, [0.25, 0.5, 0.75], "uniform")
    add("quadratic on [-2, 3], uneven interior knots", 2, -2.0, 3.0, [-1.3, 0.1, 0.4, 2.2], None)
    k_interior = 5
    q_knots = [float(v) for v in np.quantile(sample_sorted, [l / (k_interior + 1) for l in range(1, k_interior + 1)])]
    add(
        "cubic with type-7 quantile knots of the sample (size 9)",
        3,
        float(sample_sorted[0]),
        float(sample_sorted[-1]),
        q_knots,
        "quantile",
    )
    add("linear on [-1, 2], interior -0.5, 0.2, 1.5", 1, -1.0, 2.0, [-0.5, 0.2, 1.5], None)

    probs = sorted(
        {0.0, 0.001, 0.01, 0.1, 0.25, 0.5, 0.75, 0.9, 0.99, 0.999, 1.0}
        | {l / (k + 1) for k in range(1, 11) for l in range(1, k + 1)}
    )
    quantiles = [{"prob": p, "value": float(np.quantile(sample_sorted, p))} for p in probs]

    return {
        "source": "scipy.interpolate.BSpline.design_matrix and numpy.quantile (method 'linear')",
        "generator": "tests/reference/basis/make_basis_reference.py",
        "numpy_version": np.__version__,
        "scipy_version": scipy.__version__,
        "seed": SEED,
        "sample": sample,
        "quantiles": quantiles,
        "bases": cases,
    }


def main(argv):
    return refcheck.main(argv, OUT, build, CHECK_RTOL)


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
