"""Speed targets of the vector families, measured side by side in one run.

    python benchmarks/bench_vector.py            # full run (about two minutes)
    python benchmarks/bench_vector.py --quick    # fewer repeats, smaller reference instances
    python benchmarks/bench_vector.py --json out.json

Every target is a ratio of two timings taken in the same process, interleaved
(ours, baseline, ours, baseline, ...) and summarized by their medians, so that
load from other processes on a shared machine affects both sides alike.

Targets (issue 2):
  * permutahedron projection, n = 1e6, within 2x of np.sort + scipy.optimize.isotonic_regression
  * simplex and budget projection, n = 1e6, within 2x of np.sort
  * 10,000 simplex projections of dimension 100, within 3x of np.sort along that axis
  * every native operator at n = 1,000 at least 1,000x faster than the cvxpy reference
"""
from __future__ import annotations

import argparse
import json
import os
import sys
import time
import warnings

import numpy as np

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), ".."))

import setkit  # noqa: E402
from setkit.agreement import reference  # noqa: E402
from setkit.errors import AccuracyWarning  # noqa: E402


def paired(f, g, repeats):
    """Median seconds of f and of g, timed alternately after one warm-up call each."""
    f()
    g()
    tf, tg = [], []
    for _ in range(repeats):
        t0 = time.perf_counter()
        f()
        tf.append(time.perf_counter() - t0)
        t0 = time.perf_counter()
        g()
        tg.append(time.perf_counter() - t0)
    return float(np.median(tf)), float(np.median(tg))


def per_call(fn, args, repeats, inner=1):
    """Median seconds per call of fn over `args` (cycled), `inner` calls per sample."""
    fn(args[0])
    ts = []
    k = 0
    for _ in range(repeats):
        t0 = time.perf_counter()
        for _ in range(inner):
            fn(args[k % len(args)])
            k += 1
        ts.append((time.perf_counter() - t0) / inner)
    return float(np.median(ts))


def large_vector_rows(rng, repeats):
    from scipy.optimize import isotonic_regression
    n = 10 ** 6
    rows = []
    y = rng.standard_normal(n)
    w = np.sort(rng.standard_normal(n))[::-1].copy()
    P = setkit.permutahedron(weights=w)

    def baseline_perm():
        s = np.sort(y)[::-1]
        isotonic_regression(s - w, increasing=False)

    ours, base = paired(lambda: P.project(y), baseline_perm, repeats)
    rows.append(("permutahedron project, n=1e6", ours, base, "np.sort + scipy isotonic_regression", 2.0, "<="))

    S = setkit.simplex(dim=n)
    ours, base = paired(lambda: S.project(y), lambda: np.sort(y), repeats)
    rows.append(("simplex project, n=1e6", ours, base, "np.sort", 2.0, "<="))

    B = setkit.budget(dim=n, total=1.0, upper=0.01)
    ours, base = paired(lambda: B.project(y), lambda: np.sort(y), repeats)
    rows.append(("budget project (caps), n=1e6", ours, base, "np.sort", 2.0, "<="))

    Bw = setkit.budget(dim=n, total=1.0, upper=np.where(rng.random(n) < 0.5, 0.01, np.inf),
                       weights=rng.uniform(0.5, 2.0, n))
    ours, base = paired(lambda: Bw.project(y), lambda: np.sort(y), repeats)
    rows.append(("budget project (weights, some caps inf), n=1e6", ours, base, "np.sort", 2.0, "<="))

    Y = rng.standard_normal((10_000, 100))
    S100 = setkit.simplex(dim=100)
    ours, base = paired(lambda: S100.project(Y), lambda: np.sort(Y, axis=1), repeats)
    rows.append(("simplex project, batch 10,000 x 100", ours, base, "np.sort(axis=1)", 3.0, "<="))
    return rows


def reference_rows(rng, repeats, quick):
    """Native operators at n = 1000 against the cvxpy reference (per call, single points)."""
    n = 1000
    sets = {
        "box": setkit.box(dim=n, lower=-1.0, upper=np.linspace(0.0, 2.0, n)),
        "simplex": setkit.simplex(dim=n),
        "budget": setkit.budget(dim=n, total=1.0, upper=0.01, weights=rng.uniform(0.5, 2.0, n)),
        "ball l1": setkit.ball(dim=n, norm=1, radius=1.0),
        "ball l2": setkit.ball(dim=n, norm=2, radius=1.0),
        "ball inf": setkit.ball(dim=n, norm="inf", radius=1.0),
        "permutahedron": setkit.permutahedron(weights=np.linspace(1.0, 0.0, n)),
    }
    ref_points = 2 if quick else 3
    rows = []
    for name, K in sets.items():
        m = n
        Kref = K
        note = ""
        if name == "permutahedron":
            # the majorization constraints (sum_largest for every k) make the cvxpy model O(n^2):
            # measure the reference at a smaller n; its time only grows with n, so the ratio
            # against n = 1000 is a lower bound of the true one
            m = 150 if quick else 250
            Kref = setkit.permutahedron(weights=np.linspace(1.0, 0.0, m))
            note = f" (reference at n={m}, a lower bound)"
        R = reference(Kref, loose=True)
        Y = [rng.standard_normal(n) * 2 for _ in range(8)]
        Yr = [rng.standard_normal(m) * 2 for _ in range(ref_points)]
        ops = {
            "project": (K.project, R.project),
            "distance": (K.distance, R.distance),
            "lmo": (K.lmo, R.lmo),
            "support": (K.support, R.support),
            "contains": (K.contains, R.contains),
        }
        # warm the reference problems once (cvxpy compiles them on first use)
        R.project(Yr[0])
        R.lmo(Yr[0])
        ref_times = {}
        for op, (mine, theirs) in ops.items():
            if op in ("distance", "contains"):
                ref_times[op] = ref_times["project"]       # derived from the reference projection
            elif op == "support":
                ref_times[op] = ref_times["lmo"]           # derived from the reference LMO
            else:
                ref_times[op] = per_call(theirs, Yr, ref_points)
            t = per_call(mine, Y, repeats, inner=20)
            route = K.routes()[op].provider
            rows.append((f"{name}: {op} [{route}], n=1000{note}", t, ref_times[op], "cvxpy reference",
                         1e-3, "<="))
    return rows


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="fewer repeats and smaller reference instances")
    ap.add_argument("--json", metavar="OUT", help="also write the table as JSON")
    ap.add_argument("--seed", type=int, default=0)
    args = ap.parse_args(argv)
    rng = np.random.default_rng(args.seed)
    warnings.simplefilter("ignore", AccuracyWarning)
    repeats = 5 if args.quick else 15
    rows = large_vector_rows(rng, repeats) + reference_rows(rng, 5 if args.quick else 9, args.quick)
    head = f"{'measurement':<60} {'ours ms':>10} {'base ms':>10} {'ratio':>9} {'target':>9}  verdict  baseline"
    print(head)
    print("-" * len(head))
    out = []
    missed = 0
    for name, ours, base, what, target, _ in rows:
        ratio = ours / base
        ok = ratio <= target
        missed += not ok
        tgt = f"<= {target:g}x" if target >= 1 else f">= {1 / target:g}x faster"
        shown = f"{ratio:.2f}x" if target >= 1 else f"{1 / ratio:,.0f}x"
        print(f"{name:<60} {1e3 * ours:>10.3f} {1e3 * base:>10.3f} {shown:>9} {tgt:>9}  "
              f"{'met' if ok else 'MISSED':<7}  {what}")
        out.append(dict(measurement=name, ours_s=ours, baseline_s=base, ratio=ratio, target_ratio=target,
                        met=bool(ok), baseline=what))
    print(f"\n{len(rows) - missed} of {len(rows)} targets met "
          f"(medians of interleaved repeats; ratios are ours / baseline, or baseline / ours for 'faster').")
    if args.json:
        with open(args.json, "w", encoding="utf-8") as fh:
            json.dump(out, fh, indent=2)
    return 0 if missed == 0 else 1


if __name__ == "__main__":
    sys.exit(main())
