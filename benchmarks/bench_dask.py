"""Throughput of a batch on a dask LocalCluster (2 worker processes) against the same batch in-process.

    python -m benchmarks.bench_dask            # the stated sizes
    python -m benchmarks.bench_dask --quick    # smaller batches (a smoke run, not a verdict)

Both sides start with the batch in memory (dask: rows drawn on the workers and persisted there,
chunked over the batch axis; in-process: the same rows as one NumPy array) and end with the answer in this process
as a NumPy array; medians of interleaved repeats. The answers are compared before any time
counts: bit for bit for native kernels, within the set's tolerance for the OSQP backend (whose
warm starts depend on the order of solves). Rows:

1. simplex projection, 400,000 x 50 (a native vectorized kernel; in-process it is split over
   threads, so both sides use both cores);
2. permutahedron LMO, 200,000 x 50 (a native sort per row);
3. budget distance, 400,000 x 50 (values only: little to bring back);
4. a polyhedron (10 random halfspaces in a box, dim 20) projected by the OSQP backend, 3,000
   points: one QP per point in a Python loop, which one process runs on one core.

The cluster: ``LocalCluster(n_workers=2, processes=True, threads_per_worker=1)`` with
``SETKIT_THREADS=1`` in the workers (dask runs the blocks in parallel). No target is stated by
the issue for this ratio; the rows report it with the cluster's start-up time beside them. The
machine is shared (2 cores): only ratios of timings taken in the same run mean anything.
"""
from __future__ import annotations

import argparse
import os
import statistics
import sys
import time

import numpy as np

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), ".."))

import setkit  # noqa: E402


def load():
    return "load average " + " ".join(f"{v:.1f}" for v in os.getloadavg()) + f" on {os.cpu_count()} cores"


def workloads(quick):
    rng = np.random.default_rng(7)
    scale = 8 if quick else 1
    n = 50
    A = rng.normal(size=(10, 20))
    poly = setkit.compile({"kind": "polyhedron", "A": A.tolist(), "b": (0.3 + rng.random(10)).tolist(),
                           "lower": -1.0, "upper": 1.0})
    return [
        ("simplex project", setkit.compile({"kind": "simplex", "dim": n}), "project", 400_000 // scale, 25_000 // scale),
        ("permutahedron lmo", setkit.compile({"kind": "permutahedron", "weights": np.linspace(0, 1, n).tolist()}),
         "lmo", 200_000 // scale, 12_500 // scale),
        ("budget distance", setkit.compile({"kind": "budget", "dim": n, "total": 10.0, "upper": 0.5,
                                            "weights": (0.5 + rng.random(n)).tolist()}),
         "distance", 400_000 // scale, 25_000 // scale),
        ("polyhedron project (osqp)", poly, "project", 3_000 // scale, 375 // scale),
    ]


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true")
    ap.add_argument("--repeats", type=int, default=None)
    ap.add_argument("--out", default=None, help="also write the table to this file")
    a = ap.parse_args(argv)
    import dask.array as da
    from dask.distributed import Client, LocalCluster, wait

    repeats = a.repeats or (2 if a.quick else 3)
    lines = []

    def say(s):
        print(s, flush=True)
        lines.append(s)

    say(f"bench_dask: {'quick' if a.quick else 'full'} run, {time.strftime('%Y-%m-%dT%H:%MZ', time.gmtime())}; "
        f"{load()}")
    t0 = time.perf_counter()
    with LocalCluster(n_workers=2, processes=True, threads_per_worker=1, dashboard_address=None,
                      env={"SETKIT_THREADS": "1"}) as cluster, Client(cluster):
        startup = time.perf_counter() - t0
        say(f"cluster: 2 worker processes x 1 thread, started in {startup:.1f} s (not counted below)")
        say(f"{'workload':<28} {'batch':>14} {'blocks':>6} {'in-process':>11} {'dask':>10} {'rows/s here':>12} "
            f"{'rows/s dask':>12} {'dask/here':>9}  equal results")
        for name, K, op, b, chunk in workloads(a.quick):
            # the rows are drawn on the workers and kept there; this process gets the same rows once
            D = (da.random.default_rng(11).standard_normal((b,) + K.shape, chunks=(chunk,) + K.shape) * 2.0).persist()
            wait(D)
            Y = D.compute()

            def here():
                return getattr(K, op)(Y)

            def remote():
                return getattr(K, op)(D).compute()

            ref, got = here(), remote()          # warm both sides (workers compile or load kernels, build plans)
            if K.routes()[op].provider == "osqp":
                equal = bool(np.max(np.abs(ref - got)) <= 1e-7 * max(1.0, float(np.abs(Y).max())))
                how = f"max |difference| {np.max(np.abs(ref - got)):.1e} (OSQP warm starts)"
            else:
                equal = bool(np.array_equal(ref, got))
                how = "bit for bit"
            if not equal:
                say(f"{name:<28} answers differ ({how}): no time counted")
                continue
            th, tr = [], []
            for _ in range(repeats):
                s = time.perf_counter()
                here()
                th.append(time.perf_counter() - s)
                s = time.perf_counter()
                remote()
                tr.append(time.perf_counter() - s)
            h, r = statistics.median(th), statistics.median(tr)
            nblocks = len(D.chunks[0])
            say(f"{name:<28} {str(Y.shape):>14} {nblocks:>6} {h:10.3f}s {r:9.3f}s {b / h:12.0f} {b / r:12.0f} "
                f"{h / r:8.2f}x  yes ({how})")
        say(f"({load()}; medians of {repeats} interleaved repeats; dask/here > 1 means the cluster was faster)")
    if a.out:
        with open(a.out, "w") as fh:
            fh.write("\n".join(lines) + "\n")


if __name__ == "__main__":
    main()
