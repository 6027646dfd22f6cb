"""Spanning-tree KL projection: seconds per call at m = 100, 300, 1000 edges, this tree against another.

    python -m benchmarks.bench_kl_trees                      # this checkout only
    python -m benchmarks.bench_kl_trees --before /path/tree  # also time the code at /path/tree (a
                                                             # subprocess with that tree first on sys.path)

The graphs are those of ``SpanningTrees.benchmark_example`` (m edges on m/4 nodes, a random tree
plus random edges; extended here past its 300-edge limit), the log inputs t uniform on [-3, 3]
(the inputs of benchmarks/bench_structured.py); each run prints the median of ``--repeats`` calls,
the route and the KL certificate it reported, and the load average.
"""
from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import time

import numpy as np

# the setkit to time: the tree named by SETKIT_BENCH_TREE (the --before run), else this checkout
sys.path.insert(0, os.environ.get("SETKIT_BENCH_TREE") or os.path.join(os.path.dirname(os.path.abspath(__file__)), ".."))


def graph(m, rng):
    nodes = max(3, m // 4)
    order = rng.permutation(nodes)
    edges = [[int(order[k]), int(order[int(rng.integers(0, k))])] for k in range(1, nodes)]
    while len(edges) < m:
        a, b = (int(v) for v in rng.integers(0, nodes, 2))
        if a != b:
            edges.append([a, b])
    return nodes, edges


def run(sizes, repeats, budget):
    import setkit
    out = []
    for m in sizes:
        rng = np.random.default_rng(0)
        nodes, edges = graph(m, rng)
        K = setkit.compile({"kind": "spanning_trees", "nodes": nodes, "edges": edges})
        t = rng.uniform(-3, 3, K.dim)
        times, d = [], None
        for _ in range(repeats):
            t0 = time.perf_counter()
            d = K.project(t, geometry="kl", log_input=True, details=True)
            times.append(time.perf_counter() - t0)
            if sum(times) > budget:
                break
        out.append({"m": m, "seconds": float(np.median(times)), "calls": len(times), "setkit": setkit.__file__,
                    "route": str(d.backend_status), "certificate": float(d.certificate),
                    "x_sum": float(d.point.sum()), "nodes": nodes, "load": os.getloadavg()[0]})
    return out


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--sizes", type=int, nargs="+", default=[100, 300, 1000])
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--budget", type=float, default=120.0, help="stop repeating a size after this many seconds")
    ap.add_argument("--before", default=None, help="another source tree to time the same way")
    ap.add_argument("--timeout", type=float, default=900.0, help="seconds allowed for the --before run")
    ap.add_argument("--json", action="store_true", help=argparse.SUPPRESS)
    ap.add_argument("--log", default=None)
    a = ap.parse_args(argv)
    if a.json:
        print(json.dumps(run(a.sizes, a.repeats, a.budget)))
        return
    lines = [f"# python -m benchmarks.bench_kl_trees {' '.join(argv if argv is not None else sys.argv[1:])}, "
             f"{time.strftime('%Y-%m-%d %H:%M UTC', time.gmtime())}; load average at the start "
             f"{os.getloadavg()[0]:.1f} (2 cores shared with other jobs)"]
    before = {}
    if a.before:
        for m in a.sizes:
            env = dict(os.environ, PYTHONPATH=os.path.abspath(a.before), SETKIT_BENCH_TREE=os.path.abspath(a.before))
            cmd = [sys.executable, "-c", "import sys; sys.argv[1:] = " + repr(["--json", "--sizes", str(m), "--repeats",
                   str(a.repeats), "--budget", str(a.budget)]) + "; sys.path.insert(0, " + repr(os.path.dirname(
                   os.path.abspath(__file__))) + "); import bench_kl_trees; bench_kl_trees.main()"]
            try:
                r = subprocess.run(cmd, env=env, capture_output=True, text=True, timeout=a.timeout)
                before[m] = json.loads(r.stdout.strip().splitlines()[-1])[0]
            except subprocess.TimeoutExpired:
                before[m] = {"seconds": float("inf"), "route": f"did not finish within {a.timeout:.0f} s",
                             "certificate": float("nan"), "load": os.getloadavg()[0]}
    now = run(a.sizes, a.repeats, a.budget)
    lines.append(f"# after: setkit from {now[0]['setkit']}; before: the tree given by --before ({a.before})")
    lines.append(f"{'m':>6} {'before s':>10} {'after s':>10} {'speedup':>8} {'load':>5}  after: route; certificate")
    for r in now:
        b = before.get(r["m"])
        bs = b["seconds"] if b else float("nan")
        lines.append(f"{r['m']:>6} {bs:>10.3f} {r['seconds']:>10.3f} {bs / r['seconds']:>7.1f}x {r['load']:>5.1f}  "
                     f"{r['route']}; certificate {r['certificate']:.2g}")
        if b:
            lines.append(f"{'':>6} before ({b.get('setkit', '?')}): {b['route']}; certificate {b['certificate']:.2g}; "
                         f"load {b['load']:.1f}")
    text = "\n".join(lines)
    print(text)
    if a.log:
        with open(a.log, "w") as f:
            f.write(text + "\n")


if __name__ == "__main__":
    main()
