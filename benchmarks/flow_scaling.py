"""Flow polytopes at 10^4..2*10^5 edges: compile time (the max-flow feasibility check) and projections.

For each size: build the random feasible flow of ``bench_flow.make_instance`` (E edges on E/4
nodes), time ``setkit.compile`` (parsing, the max-flow feasibility check, the operator plan) and
the max-flow check alone, then project ``--points`` random points (Gaussian around a feasible
flow, at scales 1, 10 and 1e3 of the data, plus a few far points) one by one, and check each
answer independently: bounds exactly, node balances within 1e-9 of the data scale, and the
set's own ``contains``. Prints one table row per size.

    python3 -m benchmarks.flow_scaling                 # 1e4, 1e5, 2e5 edges, 24 points each
    python3 -m benchmarks.flow_scaling --edges 10000 --points 5
"""
from __future__ import annotations

import argparse
import time

import numpy as np

import setkit
from setkit.errors import SetkitError
from setkit.families._network import Network, feasibility_by_max_flow

from .bench_flow import make_instance


def run(n_edges, n_points, rng):
    spec, (tail, head, lower, capacity, supply), x0 = make_instance(max(3, n_edges // 4), n_edges, rng)
    t0 = time.perf_counter()
    verdict, _ = feasibility_by_max_flow(Network(tail, head, lower, capacity, supply))
    t_check = time.perf_counter() - t0
    t0 = time.perf_counter()
    K = setkit.compile(spec)
    t_compile = time.perf_counter() - t0
    scale = float(max(1.0, np.abs(capacity).max(), np.abs(supply).max()))
    ok, fails, times, worst = 0, [], [], 0.0
    for k in range(n_points):
        s = (1.0, 10.0, 1e3, 1e6)[k % 4]
        y = x0 + s * rng.standard_normal(n_edges)
        t0 = time.perf_counter()
        try:
            x = K.project(y)
        except SetkitError as exc:
            fails.append(f"{type(exc).__name__}: {str(exc)[:120]}")
            continue
        times.append(time.perf_counter() - t0)
        in_bounds = bool(np.all(x >= lower) and np.all(x <= capacity))
        bal = np.zeros(supply.size)
        np.add.at(bal, tail, x)
        np.add.at(bal, head, -x)
        res = float(np.abs(bal - supply).max())
        worst = max(worst, res)
        if in_bounds and res <= 1e-9 * scale and bool(K.contains(x)):
            ok += 1
        else:
            fails.append(f"point {k}: bounds {in_bounds}, balance residual {res:.3g}")
    return dict(edges=n_edges, nodes=max(3, n_edges // 4), verdict=verdict, check_s=t_check, compile_s=t_compile,
                points=n_points, ok=ok, fails=fails, median_project_s=float(np.median(times)) if times else np.nan,
                worst_residual=worst)


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--edges", type=int, nargs="*", default=[10_000, 100_000, 200_000])
    ap.add_argument("--points", type=int, default=24)
    ap.add_argument("--seed", type=int, default=0)
    a = ap.parse_args(argv)
    rng = np.random.default_rng(a.seed)
    # one-time costs first (imports of the backends' packages, numba caches), so each row times its own set
    t0 = time.perf_counter()
    warm, _, x0w = make_instance(8, 20, np.random.default_rng(1))
    setkit.compile(warm).project(x0w)
    print(f"(one-time warm-up: imports and compiled kernels, {time.perf_counter() - t0:.1f} s)")
    print(f"{'edges':>8} {'nodes':>7} {'max-flow check s':>17} {'compile s':>10} {'projected ok':>13} "
          f"{'median project s':>17} {'worst balance residual':>23}")
    for E in a.edges:
        r = run(E, a.points, rng)
        print(f"{r['edges']:>8} {r['nodes']:>7} {r['check_s']:>17.2f} {r['compile_s']:>10.2f} "
              f"{r['ok']:>6}/{r['points']:<6} {r['median_project_s']:>17.3f} {r['worst_residual']:>23.3g}")
        for f in r["fails"]:
            print("    fail:", f)


if __name__ == "__main__":
    main()
