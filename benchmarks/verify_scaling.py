"""`setkit verify` on large sets: wall time, peak memory as a multiple of one point, reference work done.

Each case writes a description to a temporary folder and runs ``setkit verify FILE --json --quiet
--points P`` (the command-line code path, ``setkit.cli.main``) in a fresh subprocess, which also
reports its own peak resident memory (``resource.getrusage(RUSAGE_SELF).ru_maxrss``, without the
pilot subprocess that times the reference) and its resident memory after the imports. The table
gives the peak, the growth over the imports as a multiple of one point of the set (8 bytes per
coordinate), and what the report says about the reference (how many inputs were compared, or why
it was skipped).

    python3 -m benchmarks.verify_scaling                        # permutahedron n = 1e5, simplex dim = 1e7
    python3 -m benchmarks.verify_scaling --cases simplex:100000 --points 1
"""
from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parent.parent

_CHILD = r"""
import json, resource, sys
def rss():
    with open("/proc/self/status") as f:
        for line in f:
            if line.startswith("VmRSS:"):
                return 1024 * int(line.split()[1])
    return 0
import numpy, setkit, setkit.cli
base = rss()
code = setkit.cli.main(sys.argv[1:])
peak = 1024 * resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
print(json.dumps({"exit": code, "base_bytes": base, "peak_bytes": peak}), file=sys.stderr)
"""


def write_case(kind, n, folder):
    path = Path(folder) / f"{kind}-{n}.yaml"
    if kind == "simplex":
        path.write_text(f"kind: simplex\ndim: {n}\n")
    elif kind == "permutahedron":
        np.save(Path(folder) / f"weights-{n}.npy", np.linspace(1.0, 0.0, n))
        path.write_text(f"kind: permutahedron\nweights: weights-{n}.npy\n")
    else:
        raise SystemExit(f"unknown case kind {kind!r}: simplex or permutahedron")
    return path


def run_case(kind, n, points, folder, timeout):
    path = write_case(kind, n, folder)
    env = dict(os.environ, PYTHONPATH=str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", ""),
               SETKIT_QUIET_COMPILE="1")
    t0 = time.perf_counter()
    run = subprocess.run([sys.executable, "-c", _CHILD, "verify", str(path), "--json", "--quiet",
                          "--points", str(points)], capture_output=True, timeout=timeout, env=env)
    wall = time.perf_counter() - t0
    meta = json.loads(run.stderr.decode().strip().splitlines()[-1])
    report = json.loads(run.stdout.decode())[0]
    point_bytes = 8 * n
    return {"case": f"{kind} n={n}", "exit": meta["exit"], "wall_s": wall, "peak_mb": meta["peak_bytes"] / 2 ** 20,
            "base_mb": meta["base_bytes"] / 2 ** 20, "point_mb": point_bytes / 2 ** 20,
            "growth_in_points": (meta["peak_bytes"] - meta["base_bytes"]) / point_bytes,
            "peak_in_points": meta["peak_bytes"] / point_bytes, "ok": report.get("ok"),
            "reference": report.get("reference", {}), "rows": report.get("rows", [])}


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--cases", nargs="*", default=["permutahedron:100000", "simplex:10000000"])
    ap.add_argument("--points", type=int, default=2)
    ap.add_argument("--timeout", type=float, default=1800.0)
    a = ap.parse_args(argv)
    with tempfile.TemporaryDirectory() as folder:
        for case in a.cases:
            kind, n = case.split(":")
            r = run_case(kind, int(float(n)), a.points, folder, a.timeout)
            ref = r["reference"]
            print(f"{r['case']}: exit {r['exit']}, verdict {'ok' if r['ok'] else 'FAIL'}, {r['wall_s']:.1f} s; "
                  f"peak RSS {r['peak_mb']:.0f} MB ({r['peak_in_points']:.1f} points), after imports "
                  f"{r['base_mb']:.0f} MB, growth {r['growth_in_points']:.1f} points of {r['point_mb']:.2f} MB; "
                  f"reference {ref.get('mode')}: {ref.get('compared')} of {ref.get('inputs')} inputs; "
                  f"{ref.get('reason')}", flush=True)
            for row in r["rows"]:
                print(f"    {row['operator']:<12} {row['route']:<10} cases {row['cases']:>3}  max error "
                      f"{row['max_error']:.2e}  {'ok' if row['ok'] else 'FAIL'}  {row['note']}")


if __name__ == "__main__":
    main()
