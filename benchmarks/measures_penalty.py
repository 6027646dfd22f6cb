"""Cost ratios of the penalty variants and the quality per second of centroid estimates.

Ratios are measured side by side in one run (median of repeats), never absolute times:
  * penalty value+grad / projection, for smoothing None, "moreau" and "ball" (64 points);
  * hit-and-run centroid: effective sample size per second and the reported standard
    error against the exact centroid, for simplices of growing dimension;
  * exact sampler vs hit-and-run for the same number of points.

Run:  PYTHONPATH=. python benchmarks/measures_penalty.py [--quick]
"""
from __future__ import annotations

import argparse
import statistics
import time

import numpy as np

import setkit


def median_time(fn, repeats):
    ts = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        ts.append(time.perf_counter() - t0)
    return statistics.median(ts)


def main(argv=None):
    ap = argparse.ArgumentParser()
    ap.add_argument("--quick", action="store_true")
    args = ap.parse_args(argv)
    reps = 3 if args.quick else 7
    rng = np.random.default_rng(0)

    print("penalty cost relative to one batched projection (batch 256, simplex dim 50)")
    K = setkit.compile({"kind": "simplex", "dim": 50})
    X = rng.standard_normal((256, 50))
    base = median_time(lambda: K.project(X), reps)
    big = np.repeat(X, 64, axis=0)
    base64 = median_time(lambda: K.project(big), reps)
    for sm, w in [(None, None), ("moreau", 0.1), ("ball", 0.1)]:
        P = K.penalty(1.0, sm, w)
        t = median_time(lambda: P.value_and_grad(X), reps)
        extra = f"  ({t / base64:.1f} x one projection of the 64 times larger batch)" if sm == "ball" else ""
        print(f"  {str(sm):<7} {t / base:8.1f} x projection{extra}")

    print("hit-and-run centroid of the at_most simplex (4000 draws, 8 chains)")
    print(f"  {'dim':>4} {'ess':>7} {'ess/s':>9} {'max |err|/se':>13}")
    for n in ([5, 20] if args.quick else [5, 20, 50]):
        Ks = setkit.compile({"kind": "simplex", "dim": n, "mode": "at_most"})
        r = Ks.centroid(exact=False, details=True, rng=1)
        z = float(np.max(np.abs(r.point - 1.0 / (n + 1)) / r.std_error))
        print(f"  {n:>4} {r.ess:>7.0f} {r.ess / r.seconds:>9.0f} {z:>13.2f}")

    print("exact sampler vs hit-and-run, 2000 points of the 10-dim at_most simplex")
    Ks = setkit.compile({"kind": "simplex", "dim": 10, "mode": "at_most"})
    from setkit import measures
    t_exact = median_time(lambda: Ks.sample(2000, rng=2), reps)
    t_har = median_time(lambda: measures.hit_and_run(Ks, 2000, np.random.default_rng(2)), max(1, reps // 2))
    print(f"  hit-and-run / exact: {t_har / t_exact:.0f} x")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
