"""First call in a fresh process: warm compile cache, empty compile cache, and numba's own floor.

Every measurement is a new Python process (``subprocess``) that imports NumPy and setkit, compiles
one set and makes one call (``K.project`` of one point); the child reports

* ``cpu``: the CPU seconds of the same span (``time.process_time``): on a shared, oversubscribed
  machine the wall time stretches with the load while this stays near what an idle core would take
  (the verdicts are on wall time);
* ``first call``: from after ``import setkit`` to the answer (compile the description, import the
  family's module and numba, load or compile its kernels, call) -- the number the targets are on:
  < 0.5 s for the vector families (simplex, box, budget, l2 ball, permutahedron), < 2 s for a flow
  polytope (200 nodes), with a warm cache;
* ``with import``: the same plus ``import numpy, setkit``;
* ``misses``: numba's count of kernels of setkit compiled rather than loaded from the cache in that
  process (``Dispatcher.stats.cache_misses``), which must be 0 once the cache is warm;
* whether the compile notice was printed on stderr.

Rows:

1. ``numba floor``: a process that imports NumPy and numba and calls one trivial cached ``@njit``
   function -- what any numba-backed library pays before its own work (numba's typing and lowering
   registries, its BLAS check importing scipy.linalg); measured the same way for comparison.
2. ``warm``: the default cache (filled by one priming run per family), median of interleaved fresh
   processes.
3. ``empty``: ``NUMBA_CACHE_DIR`` pointed at a new temporary folder (nothing cached: the first use
   after an installation), one process per family; then a second process on the same folder, which
   must find everything (0 misses, no notice).

Usage: ``python benchmarks/bench_first_call.py [--quick] [--repeats R] [--out FILE]``. Each row
says met or missed with the numbers; the load average is printed (the machine is shared).
"""
from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
import textwrap

import numpy as np

ROOT = os.path.join(os.path.dirname(os.path.abspath(__file__)), "..")
NOTICE = "setkit: compiling native kernels"

CHILD = textwrap.dedent(r"""
    import json, sys, time
    t0 = time.perf_counter()
    import numpy as np, setkit
    t1 = time.perf_counter()
    c1 = time.process_time()
    K = setkit.compile(json.loads(sys.argv[1]))
    y = np.random.default_rng(0).normal(size=K.shape)
    x = K.project(y)
    t2 = time.perf_counter()
    cpu = time.process_time() - c1
    misses = hits = 0
    from numba.core.dispatcher import Dispatcher
    for name, mod in list(sys.modules.items()):
        if name.startswith("setkit") and mod is not None:
            for obj in list(vars(mod).values()):
                if isinstance(obj, Dispatcher) and obj.py_func.__module__ == name:
                    misses += sum(obj.stats.cache_misses.values())
                    hits += sum(obj.stats.cache_hits.values())
    print(json.dumps({"with_import": t2 - t0, "first_call": t2 - t1, "cpu": cpu, "misses": misses, "hits": hits,
                      "finite": bool(np.isfinite(x).all())}))
""")

FLOOR_MODULE = textwrap.dedent("""
    from numba import njit


    @njit(cache=True)
    def total(a):
        s = 0.0
        for v in a:
            s += v
        return s
""")

FLOOR = textwrap.dedent(r"""
    import json, sys, time
    t0 = time.perf_counter()
    import numpy as np
    t1 = time.perf_counter()
    c1 = time.process_time()
    import numba
    sys.path.insert(0, sys.argv[1])
    import floor_kernel
    floor_kernel.total(np.ones(3))
    t2 = time.perf_counter()
    print(json.dumps({"with_import": t2 - t0, "first_call": t2 - t1, "cpu": time.process_time() - c1, "misses":
                      sum(floor_kernel.total.stats.cache_misses.values()), "hits": 0, "finite": True}))
""")


def flow_spec(n=200):
    """The flow polytope of the overhead benchmark (about 200 edges, seeded)."""
    sys.path.insert(0, ROOT)
    from setkit.families import lookup
    spec = lookup("flow").benchmark_example(n, np.random.default_rng(3))
    return {k: (v.tolist() if isinstance(v, np.ndarray) else v) for k, v in spec.items()}


def specs():
    return {"simplex": {"kind": "simplex", "dim": 100},
            "box": {"kind": "box", "dim": 100, "lower": 0.0, "upper": 1.0},
            "budget": {"kind": "budget", "dim": 100, "upper": 1.0, "weights": [1.0 + (i % 3) for i in range(100)],
                       "total": 40.0},
            "l2 ball": {"kind": "ball", "dim": 100, "norm": 2, "radius": 1.0},
            "permutahedron": {"kind": "permutahedron", "weights": list(range(100))},
            "flow": flow_spec()}


def run_child(code, arg, cache_dir=None):
    env = dict(os.environ, PYTHONPATH=ROOT + os.pathsep + os.environ.get("PYTHONPATH", ""))
    env.pop("SETKIT_QUIET_COMPILE", None)
    if cache_dir is not None:
        env["NUMBA_CACHE_DIR"] = cache_dir
    out = subprocess.run([sys.executable, "-c", code, arg], capture_output=True, text=True, env=env, cwd=ROOT,
                         timeout=900)
    if out.returncode != 0:
        raise SystemExit(f"child failed:\n{out.stderr[-3000:]}")
    rec = json.loads(out.stdout.strip().splitlines()[-1])
    rec["notice"] = NOTICE in out.stderr
    return rec


def load():
    return "load average " + " ".join(f"{v:.1f}" for v in os.getloadavg()) + f" on {os.cpu_count()} cores"


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="3 warm repeats, the empty-cache runs for simplex and box only")
    ap.add_argument("--repeats", type=int, default=None, help="warm fresh processes per family (default 5)")
    ap.add_argument("--out", default=None, help="also write the table to this file")
    a = ap.parse_args(argv)
    repeats = a.repeats or (3 if a.quick else 5)
    lines = []

    def say(s):
        print(s, flush=True)
        lines.append(s)

    say(f"bench_first_call: fresh processes, first K.project of one point; {load()}")
    all_specs = specs()
    tmp = tempfile.mkdtemp(prefix="setkit-first-call-")
    with open(os.path.join(tmp, "floor_kernel.py"), "w") as fh:
        fh.write(FLOOR_MODULE)

    # prime: the floor kernel and every family in the default cache
    run_child(FLOOR, tmp, cache_dir=os.path.join(tmp, "floor-cache"))
    for kind, spec in all_specs.items():
        run_child(CHILD, json.dumps(spec))

    # warm: interleaved fresh processes
    warm = {kind: [] for kind in ["numba floor"] + list(all_specs)}
    for _ in range(repeats):
        warm["numba floor"].append(run_child(FLOOR, tmp, cache_dir=os.path.join(tmp, "floor-cache")))
        for kind, spec in all_specs.items():
            warm[kind].append(run_child(CHILD, json.dumps(spec)))
    floor = float(np.median([r["first_call"] for r in warm["numba floor"]]))
    floor_cpu = float(np.median([r["cpu"] for r in warm["numba floor"]]))
    rows = []
    say(f"warm cache (median of {repeats} interleaved fresh processes; first call = after `import setkit`, "
        f"through the answer):")
    for kind, recs in warm.items():
        call = float(np.median([r["first_call"] for r in recs]))
        cpu = float(np.median([r["cpu"] for r in recs]))
        full = float(np.median([r["with_import"] for r in recs]))
        misses = max(r["misses"] for r in recs)
        notice = any(r["notice"] for r in recs)
        if kind == "numba floor":
            say(f"  {kind:<14} first call {call:6.3f} s  cpu {cpu:6.3f} s  with import {full:6.3f} s  (numba import + "
                f"first call of a trivial cached @njit function: not setkit's)")
            continue
        target = 2.0 if kind == "flow" else 0.5
        ok = call < target and misses == 0 and not notice
        verdict = "met" if ok else "MISSED"
        why = []
        if call >= target:
            why.append(f"{call:.3f} s >= {target} s")
        if misses:
            why.append(f"{misses} cache misses")
        if notice:
            why.append("notice printed although warm")
        verdict += f" ({'; '.join(why)})" if why else ""
        say(f"  {kind:<14} first call {call:6.3f} s  cpu {cpu:6.3f} s  with import {full:6.3f} s  above the numba "
            f"floor {call - floor:+6.3f} s (cpu {cpu - floor_cpu:+6.3f} s)  misses {misses}  target < {target} s  {verdict}")
        rows.append({"cache": "warm", "set": kind, "first_call_s": call, "cpu_s": cpu, "with_import_s": full,
                     "over_floor_s": call - floor, "misses": misses, "verdict": verdict})
    say(f"  ({load()})")

    # empty cache: one process per family on a new folder, then a second process on the same folder
    say("empty cache (NUMBA_CACHE_DIR = a new temporary folder; one process, then a second on the same folder):")
    kinds = ["simplex", "box"] if a.quick else list(all_specs)
    for kind in kinds:
        folder = tempfile.mkdtemp(prefix=f"cache-{kind.replace(' ', '-')}-", dir=tmp)
        first = run_child(CHILD, json.dumps(all_specs[kind]), cache_dir=folder)
        second = run_child(CHILD, json.dumps(all_specs[kind]), cache_dir=folder)
        ok = second["misses"] == 0 and not second["notice"] and first["notice"]
        verdict = "met" if ok else "MISSED"
        say(f"  {kind:<14} first process {first['first_call']:7.3f} s ({first['misses']} kernels compiled, notice "
            f"{'printed' if first['notice'] else 'NOT printed'})  second process {second['first_call']:6.3f} s "
            f"({second['misses']} compiled, notice {'printed' if second['notice'] else 'not printed'})  "
            f"notice once and no miss in the second process: {verdict}")
        rows.append({"cache": "empty", "set": kind, "first_call_s": first["first_call"],
                     "second_call_s": second["first_call"], "compiled": first["misses"],
                     "second_misses": second["misses"], "verdict": verdict})
    say(f"  ({load()})")
    missed = [r for r in rows if not r["verdict"].startswith("met")]
    say(f"{len(rows) - len(missed)} rows met, {len(missed)} missed; numba floor {floor:.3f} s (cpu {floor_cpu:.3f} s); "
        f"{load()}")
    if a.out:
        with open(a.out, "w") as fh:
            fh.write("\n".join(lines) + "\n")
    return rows


if __name__ == "__main__":
    main()
