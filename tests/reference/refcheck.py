"""Shared by the reference generators: write the JSON, or (--check) recompute and compare it."""
import json
import math
import sys


def compare(path, a, b, problems, rtol):
    if isinstance(a, dict) and isinstance(b, dict):
        if set(a) != set(b):
            problems.append(f"{path}: keys differ: {sorted(set(a) ^ set(b))}")
            return
        for key in a:
            compare(f"{path}.{key}", a[key], b[key], problems, rtol)
    elif isinstance(a, list) and isinstance(b, list):
        if len(a) != len(b):
            problems.append(f"{path}: length {len(a)} != {len(b)}")
            return
        for i, (x, y) in enumerate(zip(a, b)):
            compare(f"{path}[{i}]", x, y, problems, rtol)
    elif isinstance(a, float) or isinstance(b, float):
        if not math.isclose(a, b, rel_tol=rtol, abs_tol=1e-300):
            problems.append(f"{path}: committed {a!r}, recomputed {b!r}")
    elif a != b:
        problems.append(f"{path}: committed {a!r}, recomputed {b!r}")


def main(argv, out, build, rtol):
    """Write `build()` to `out` (a pathlib.Path), or with --check compare it with the committed file."""
    data = build()
    if "--check" in argv:
        committed = json.loads(out.read_text())
        problems = []
        compare("$", committed, data, problems, rtol)
        if problems:
            print(f"{out.name}: {len(problems)} mismatches", file=sys.stderr)
            for p in problems[:20]:
                print("  " + p, file=sys.stderr)
            return 1
        print(f"{out.name}: matches a fresh computation")
        return 0
    out.write_text(json.dumps(data, indent=1) + "\n")
    print(f"wrote {out}")
    return 0
