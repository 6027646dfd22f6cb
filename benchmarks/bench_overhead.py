"""Where learners call it: per-call overhead, batches over every core, large vectors, first call.

One side-by-side run (medians of interleaved repeats) reporting the ratios of project issue 12:

1. single points (n = 10, 50, 100, 1000; simplex, budget, box, l2 ball, permutahedron; project
   and lmo): ``K.op(y)`` and ``K.unchecked.op(y)`` against a compiled numba function of one point
   called from Python on the same point (``K.jit_kernels().op``: the same compiled arithmetic with
   nothing around it) -- target 1.5x; the simplex, box and permutahedron LMOs also against the
   obvious NumPy one-liner -- target 1.2x;
2. batches of 10,000 x 100 against ``np.sort(Y, axis=1)``, with cpu/wall of the threaded call --
   targets: cpu/wall >= 1.7 on 2 cores, budget and permutahedron within 3x of the sort;
3. large single vectors (n = 1e6, 1e7) against ``np.copy`` -- target 4x (wall time; the CPU-time
   ratio is printed beside it, it depends less on other processes) -- with the peak of traced
   allocations (tracemalloc: NumPy's, and numba's, whose runtime allocates through Python's
   allocator) against the input's size -- target 2x;
4. the first call in a fresh process (import, compile or load cached kernels, one call) --
   targets < 0.5 s for vector families, < 2 s for flows.

Usage: ``python benchmarks/bench_overhead.py [--quick] [--skip-single] [--skip-batch] [--skip-large]
[--skip-first]``; the last full
run is kept in ``benchmarks/bench_overhead_last_run.txt`` (the run before the issue-12 kernels in
``benchmarks/bench_overhead_before.txt``); the last single-point section alone (``--skip-batch
--skip-large --skip-first``) in ``benchmarks/bench_single_point_last_run.txt``.
Every row says met or missed with its ratio; the load average is printed with the table.
"""
from __future__ import annotations

import argparse
import os
import subprocess
import sys
import time
import tracemalloc

import numpy as np

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), ".."))

import setkit  # noqa: E402


def spec_of(kind, n, rng):
    if kind == "simplex":
        return {"kind": "simplex", "dim": n}
    if kind == "budget":
        w = rng.uniform(0.5, 2.0, n)
        return {"kind": "budget", "dim": n, "weights": w.tolist(), "upper": 1.0, "total": 0.3 * float(w.sum())}
    if kind == "budget-caps":
        return {"kind": "budget", "dim": n, "upper": rng.uniform(0.5, 2.0, n), "total": 0.3 * n}
    if kind == "budget-weights":
        return {"kind": "budget", "dim": n, "weights": rng.uniform(0.5, 2.0, n), "total": 0.3 * n}
    if kind == "box":
        lo = -rng.uniform(0.5, 1.5, n)
        return {"kind": "box", "dim": n, "lower": lo, "upper": lo + rng.uniform(0.5, 3.0, n)}
    if kind == "l2 ball":
        return {"kind": "ball", "dim": n, "norm": 2, "radius": 1.0}
    if kind == "l1 ball":
        return {"kind": "ball", "dim": n, "norm": 1, "radius": 1.0}
    if kind == "linf ball":
        return {"kind": "ball", "dim": n, "norm": "inf", "radius": 0.5}
    if kind == "permutahedron":
        return {"kind": "permutahedron", "weights": np.linspace(0.0, 1.0, n)}
    raise ValueError(kind)


def interleaved(fns, repeats, number, cpu=None):
    """Median seconds per call of each callable, timing blocks of ``number`` calls in turn.

    With a list ``cpu``, the medians of the process CPU time per call are appended to it (less
    sensitive than wall time to other processes on a shared machine; for single-threaded code)."""
    times = [[] for _ in fns]
    cpus = [[] for _ in fns]
    for _ in range(repeats):
        for i, f in enumerate(fns):
            c0 = time.process_time()
            t0 = time.perf_counter()
            for _ in range(number):
                f()
            times[i].append((time.perf_counter() - t0) / number)
            cpus[i].append((time.process_time() - c0) / number)
    if cpu is not None:
        cpu.extend(float(np.median(c)) for c in cpus)
    return [float(np.median(t)) for t in times]


def verdict(ratio, target):
    return "met" if ratio <= target else f"MISSED ({ratio:.2f}x > {target}x)"


def load():
    return "load average " + " ".join(f"{v:.1f}" for v in os.getloadavg()) + f" on {os.cpu_count()} cores"


# -- 1. single points ---------------------------------------------------------------------------
def numpy_lmo(kind, K, spec):
    n = K.dim
    if kind == "simplex":
        def f(c):
            x = np.zeros(n)
            x[np.argmin(c)] = 1.0
            return x
        return f
    if kind == "box":
        lo, hi = np.asarray(spec["lower"], float), np.asarray(spec["upper"], float)
        return lambda c: np.where(c > 0, lo, hi)
    if kind == "permutahedron":
        wd = np.sort(np.asarray(spec["weights"], float))[::-1].copy()

        def f(c):
            x = np.empty(n)
            x[np.argsort(c)] = wd
            return x
        return f
    return None


def single_points(sizes, repeats, rows):
    rng = np.random.default_rng(0)
    for kind in ("simplex", "budget", "box", "l2 ball", "permutahedron"):
        for n in sizes:
            spec = spec_of(kind, n, rng)
            K = setkit.compile(spec)
            J = K.jit_kernels()
            U = K.unchecked
            y = rng.normal(size=n)
            number = max(200, 20000 // max(n, 50))
            for op in ("project", "lmo"):
                checked, unchecked, floor = getattr(K, op), getattr(U, op), getattr(J, op)
                fns = [lambda: checked(y), lambda: unchecked(y), lambda: floor(y)]
                npf = numpy_lmo(kind, K, spec) if op == "lmo" else None
                if npf is not None:
                    fns.append(lambda: npf(y))
                for f in fns:
                    f()
                t = interleaved(fns, repeats, number)
                r = t[0] / t[2]
                row = {"part": "single", "set": kind, "n": n, "op": op, "setkit_us": t[0] * 1e6,
                       "unchecked_us": t[1] * 1e6, "numba_us": t[2] * 1e6, "vs_numba": r,
                       "verdict": verdict(r, 1.5)}
                if npf is not None:
                    row["numpy_us"] = t[3] * 1e6
                    row["vs_numpy"] = t[0] / t[3]
                    row["verdict"] += "; numpy " + verdict(t[0] / t[3], 1.2)
                rows.append(row)
                print(f"  single {kind:<13} n={n:<5} {op:<7} setkit {t[0]*1e6:7.2f} us  unchecked {t[1]*1e6:7.2f}"
                      f"  numba {t[2]*1e6:7.2f}  ratio {r:5.2f}"
                      + (f"  numpy {t[3]*1e6:7.2f} ({t[0]/t[3]:.2f}x)" if npf is not None else "")
                      + f"  {row['verdict']}", flush=True)


# -- 2. batches ---------------------------------------------------------------------------------
def batches(b, n, repeats, rows):
    from setkit import parallel
    rng = np.random.default_rng(1)
    Y = rng.normal(size=(b, n))
    for kind in ("simplex", "budget", "box", "l2 ball", "permutahedron"):
        K = setkit.compile(spec_of(kind, n, rng))
        for op in ("project", "lmo"):
            f = getattr(K, op)

            def serial():
                os.environ["SETKIT_THREADS"] = "1"
                try:
                    f(Y)
                finally:
                    os.environ.pop("SETKIT_THREADS", None)
            f(Y)
            serial()
            cpu_wall = []

            def threaded():
                c0, w0 = time.process_time(), time.perf_counter()
                f(Y)
                cpu_wall.append((time.process_time() - c0) / (time.perf_counter() - w0))
            c = []
            t = interleaved([threaded, serial, lambda: np.sort(Y, axis=1)], repeats, 1, cpu=c)
            cw = float(np.median(cpu_wall))
            r = t[0] / t[2]
            rc = c[1] / c[2]          # CPU time of the serial call over that of the sort (load-robust)
            v = ("cpu/wall " + ("met" if cw >= 1.7 else f"MISSED ({cw:.2f} < 1.7)"))
            if kind in ("budget", "permutahedron"):
                v += "; vs sort " + verdict(r, 3.0)
            rows.append({"part": "batch", "set": kind, "op": op, "b": b, "n": n, "threaded_ms": t[0] * 1e3,
                         "serial_ms": t[1] * 1e3, "sort_ms": t[2] * 1e3, "vs_sort": r, "serial_cpu_vs_sort_cpu": rc,
                         "cpu_wall": cw, "verdict": v})
            print(f"  batch {b}x{n} {kind:<13} {op:<7} threaded {t[0]*1e3:7.2f} ms  serial {t[1]*1e3:7.2f} ms  "
                  f"np.sort {t[2]*1e3:6.2f} ms  ratio {r:5.2f} (serial cpu time {rc:5.2f})  cpu/wall {cw:.2f}  "
                  f"({parallel.thread_count()} threads)  {v}", flush=True)


# -- 3. large vectors ---------------------------------------------------------------------------
def large(sizes, repeats, rows):
    rng = np.random.default_rng(2)
    for n in sizes:
        y = rng.normal(size=int(n))
        for kind in ("simplex", "budget-caps", "budget-weights", "l1 ball", "linf ball", "box"):
            K = setkit.compile(spec_of(kind, int(n), rng))
            K.project(y)
            c = []
            t = interleaved([lambda: K.project(y), lambda: np.copy(y)], repeats, 1, cpu=c)
            # tracemalloc sees NumPy's allocations and numba's (its runtime allocates through Python's allocator)
            tracemalloc.start()
            K.project(y)
            peak = tracemalloc.get_traced_memory()[1]
            tracemalloc.stop()
            r, m, rc = t[0] / t[1], peak / y.nbytes, c[0] / c[1]
            v = verdict(r, 4.0) + "; memory " + ("met" if m <= 2.0 else f"MISSED ({m:.2f}x > 2x)")
            rows.append({"part": "large", "set": kind, "n": int(n), "setkit_ms": t[0] * 1e3, "copy_ms": t[1] * 1e3,
                         "vs_copy": r, "vs_copy_cpu": rc, "peak_over_input": m, "verdict": v})
            print(f"  large n={int(n):<9} {kind:<15} project {t[0]*1e3:8.2f} ms  np.copy {t[1]*1e3:6.2f} ms  "
                  f"ratio {r:5.2f} (cpu time {rc:5.2f})  traced peak {m:.2f}x input  {v}", flush=True)


# -- 4. first call ------------------------------------------------------------------------------
FIRST_CALL = r"""
import time, sys
t0 = time.perf_counter()
import numpy as np, setkit
t1 = time.perf_counter()
spec = {spec}
K = setkit.compile(spec)
y = np.random.default_rng(0).normal(size=K.shape)
K.project(y)
t2 = time.perf_counter()
print(t2 - t0, t2 - t1)
"""


def flow_spec():
    from setkit.families import lookup
    spec = lookup("flow").benchmark_example(200, np.random.default_rng(3))
    return {k: (v.tolist() if isinstance(v, np.ndarray) else v) for k, v in spec.items()}


def first_calls(rows, repeats):
    specs = {"simplex": {"kind": "simplex", "dim": 100},
             "budget": {"kind": "budget", "dim": 100, "upper": 1.0, "weights": [1.0 + (i % 3) for i in range(100)],
                        "total": 40.0},
             "box": {"kind": "box", "dim": 100, "lower": 0.0, "upper": 1.0},
             "l2 ball": {"kind": "ball", "dim": 100, "norm": 2, "radius": 1.0},
             "permutahedron": {"kind": "permutahedron", "weights": list(range(100))},
             "flow": flow_spec()}
    root = os.path.join(os.path.dirname(os.path.abspath(__file__)), "..")
    env = dict(os.environ, PYTHONPATH=root + os.pathsep + os.environ.get("PYTHONPATH", ""))
    for kind, spec in specs.items():
        code = FIRST_CALL.replace("{spec}", repr(spec))
        totals, calls = [], []
        for _ in range(repeats):      # the first run of the first repeat may compile (fills the cache)
            out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, env=env, cwd=root)
            if out.returncode != 0:
                print(out.stderr[-2000:])
                raise SystemExit(f"first call of {kind} failed")
            a, b = (float(v) for v in out.stdout.split())
            totals.append(a)
            calls.append(b)
        target = 2.0 if kind == "flow" else 0.5
        t_call = float(np.median(calls))
        v = "met" if t_call < target else f"MISSED ({t_call:.2f} s > {target} s)"
        rows.append({"part": "first", "set": kind, "import_and_call_s": float(np.median(totals)),
                     "call_s": t_call, "cold_s": calls[0], "verdict": v})
        print(f"  first call {kind:<13} compile+call {t_call:6.3f} s (median of {repeats} fresh processes; first "
              f"{calls[0]:.3f} s)  with import {np.median(totals):6.3f} s  {v}", flush=True)


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="fewer repeats, n up to 1e6, batch 2000 x 100")
    ap.add_argument("--skip-single", action="store_true")
    ap.add_argument("--skip-batch", action="store_true")
    ap.add_argument("--skip-large", action="store_true")
    ap.add_argument("--skip-first", action="store_true")
    a = ap.parse_args(argv)
    rows = []
    print(f"bench_overhead: {load()}; numba threads via setkit.parallel", flush=True)
    reps = 5 if a.quick else 9
    if not a.skip_single:
        single_points((10, 50, 100, 1000), reps, rows)
        print(f"  ({load()})", flush=True)
    if not a.skip_batch:
        batches(2_000 if a.quick else 10_000, 100, 3 if a.quick else 7, rows)
        print(f"  ({load()})", flush=True)
    if not a.skip_large:
        large((1e6,) if a.quick else (1e6, 1e7), 3 if a.quick else 5, rows)
        print(f"  ({load()})", flush=True)
    if not a.skip_first:
        first_calls(rows, 2 if a.quick else 3)
        print(f"  ({load()})", flush=True)
    missed = [r for r in rows if "MISSED" in r["verdict"]]
    print(f"{len(rows) - len(missed)} rows met every target, {len(missed)} missed at least one; {load()}")
    return rows


if __name__ == "__main__":
    main()
