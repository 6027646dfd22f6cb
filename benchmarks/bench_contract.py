"""Cost of the always-on accuracy check (setkit.contract) beside the projection it checks.

For each set, interleaved repeats time the projection alone and the residual check the contract
runs on its answer (the set's ``violation`` on the projected points, what the check adds), and
report medians and the ratio (projection + check) / projection. Simplex and permutahedron are
not checked on every call (their kernels are exact); the rows show what checking them would cost.
The checked families (birkhoff, transport, hull) show what it does cost.

    python3 -m benchmarks.bench_contract [--repeat 7]
"""
from __future__ import annotations

import argparse
import time

import numpy as np

import setkit
from setkit.contract import needs_check


def _median_pair(f, g, repeat, number):
    a, b = [], []
    for _ in range(repeat):
        t0 = time.perf_counter()
        for _ in range(number):
            f()
        a.append((time.perf_counter() - t0) / number)
        t0 = time.perf_counter()
        for _ in range(number):
            g()
        b.append((time.perf_counter() - t0) / number)
    return float(np.median(a)), float(np.median(b))


def cases(rng):
    w50, w100 = np.linspace(1, 0, 50), np.linspace(1, 0, 100)
    return [
        ("simplex n=50, one point", {"kind": "simplex", "dim": 50}, rng.standard_normal(50), 2000),
        ("simplex 10,000 x 100 batch", {"kind": "simplex", "dim": 100}, rng.standard_normal((10000, 100)), 5),
        ("permutahedron n=50, one point", {"kind": "permutahedron", "weights": w50.tolist()},
         rng.standard_normal(50), 2000),
        ("permutahedron 10,000 x 100 batch", {"kind": "permutahedron", "weights": w100.tolist()},
         rng.standard_normal((10000, 100)), 3),
        ("birkhoff n=8, one point", {"kind": "birkhoff", "n": 8}, rng.standard_normal((8, 8)), 200),
        ("birkhoff n=10, 1,000 batch", {"kind": "birkhoff", "n": 10}, rng.standard_normal((1000, 10, 10)), 2),
        ("transport 6x3, one point", {"kind": "transport", "rows": [1] * 6, "cols": [2, 2, 2]},
         rng.standard_normal((6, 3)), 200),
        ("hull 30 points in R^10, one point", {"kind": "hull", "points": rng.standard_normal((30, 10)).tolist()},
         rng.standard_normal(10), 100),
    ]


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeat", type=int, default=7)
    a = ap.parse_args(argv)
    rng = np.random.default_rng(0)
    print(f"{'case':<36} {'checked':>8} {'project':>12} {'check':>12} {'ratio':>7}")
    for label, spec, y, number in cases(rng):
        K = setkit.compile(spec)
        p = K.project(y)
        K.violation(p)
        tp, tc = _median_pair(lambda: K.project(y), lambda: K.violation(p), a.repeat, number)
        checked = needs_check(K.node, "project", K.routes()["project"].category)
        unit = "us" if tp < 1e-3 else "ms"
        f = 1e6 if unit == "us" else 1e3
        print(f"{label:<36} {'yes' if checked else 'no':>8} {tp * f:>9.2f} {unit} {tc * f:>9.2f} {unit} "
              f"{(tp + tc) / tp:>7.2f}", flush=True)


if __name__ == "__main__":
    main()
