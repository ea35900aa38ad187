#!/usr/bin/env python3
"""Benchmark data for knotwise: a partially linear additive model with planted gross outliers.

Columns: y (response), z1 (linear), grp (categorical, levels a..d), x1, x2, x3 (smooth), about 8% of
rows shifted upwards by a large error. Deterministic for a given N and SEED.

usage: bench/gen_data.py N OUT.csv [SEED]
"""
import sys

import numpy as np


def main():
    n = int(sys.argv[1])
    out = sys.argv[2]
    seed = int(sys.argv[3]) if len(sys.argv) > 3 else 20261130
    gen = np.random.Generator(np.random.PCG64(seed))
    z1 = gen.standard_normal(n)
    grp = gen.integers(0, 4, n)
    x1 = gen.random(n)
    x2 = 4.0 * gen.random(n) - 2.0
    x3 = gen.exponential(2.0, n)
    level = np.array([0.0, 0.6, -0.4, 1.0])
    f1 = np.cos(3.0 * np.pi * x1)
    f2 = np.tanh(1.5 * x2)
    f3 = np.sqrt(x3) - np.sqrt(x3).mean()
    y = 2.0 + 1.2 * z1 + level[grp] + f1 + f2 + f3 + 0.4 * gen.standard_normal(n)
    gross = gen.random(n) < 0.08
    y[gross] += 6.0 + 2.5 * np.abs(gen.standard_normal(int(gross.sum())))
    names = np.array(["a", "b", "c", "d"])[grp]
    cols = np.column_stack([
        np.char.mod("%.6f", y), np.char.mod("%.6f", z1), names,
        np.char.mod("%.6f", x1), np.char.mod("%.6f", x2), np.char.mod("%.6f", x3),
    ])
    with open(out, "w") as f:
        f.write("y,z1,grp,x1,x2,x3\n")
        for start in range(0, n, 100_000):
            block = cols[start:start + 100_000]
            f.write("\n".join(",".join(r) for r in block))
            f.write("\n")


if __name__ == "__main__":
    main()
