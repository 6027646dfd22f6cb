"""Jacobian products and KL projections of the structured balls and combinatorial polytopes.

For each family's benchmark instance (``Family.benchmark_example(n, rng)``) at the requested sizes,
one run with the calls interleaved (so machine load hits every method alike), medians over repeats:

* ``jvp``: the native ``project_jvp`` against the projection itself (ratio jvp / project), and
  against the generic routes where one exists: the dense active-set route on the linear form
  (``setkit.derivatives.face_projector_rows``, matroid partitions and paths) and, as the yardstick of
  a generic solver, one reference projection (cvxpy + Clarabel): any derivative through a generic
  conic solver costs at least that solve.
* ``kl``: the native KL projection against the exponential-cone reference (cvxpy + Clarabel,
  ``with_backends(project_kl="reference", loose=True)``), and the difference of their answers.

Every answer is checked: the native KL answers agree with the reference within 2e-5 and the
jvp agrees with the dense form route to 1e-9 where one exists.

Usage::

    python -m benchmarks.bench_structured [--sizes 100 1000] [--repeats 5] [--seed 0]
"""
from __future__ import annotations

import argparse
import os
import sys
import time
import warnings

import numpy as np

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), ".."))

import setkit  # noqa: E402
from setkit.derivatives import face_projector_rows  # noqa: E402
from setkit.families import lookup  # noqa: E402

JVP_KINDS = ["owl_ball", "group_ball", "elastic_ball", "ksupport_ball", "matroid_bases", "paths", "spanning_trees",
             "submodular_base"]
KL_KINDS = ["matroid_bases", "spanning_trees", "submodular_base"]


def instance(kind, n, rng):
    spec = lookup(kind).benchmark_example(n, rng)
    if isinstance(spec, list):
        spec = spec[0]
    if spec is None and kind == "submodular_base" and n <= 300:   # coverage stops at 100: a concave one
        g = np.cumsum(np.sort(rng.uniform(0.1, 1.0, n))[::-1])
        spec = {"kind": "submodular_base", "function": "concave_cardinality", "values": [0.0] + g.tolist()}
    if spec is None:
        return None
    spec = {k: v for k, v in spec.items() if k != "about"}
    return setkit.compile(spec)


def median_times(fns, repeats):
    times = {k: [] for k in fns}
    for _ in range(repeats):
        for k, f in fns.items():
            t0 = time.perf_counter()
            f()
            times[k].append(time.perf_counter() - t0)
    return {k: float(np.median(v)) for k, v in times.items()}


def coverage_head_to_head(emit, repeats, sizes=(50, 100)):
    """The coverage base polytope (issue 15: slower than the reference at n = 100): native and the
    cvxpy reference timed alternately in one loop (medians), Euclidean and KL projections."""
    emit(f"# coverage submodular base, native vs reference interleaved ({max(repeats, 5)} rounds), "
         f"load average {os.getloadavg()[0]:.1f}")
    for n in sizes:
        rng = np.random.default_rng(0)
        spec = {k: v for k, v in lookup("submodular_base").benchmark_example(n, rng).items() if k != "about"}
        K = setkit.compile(spec)
        y = 0.5 + 0.5 * rng.standard_normal(K.dim)
        t = rng.uniform(-3, 3, K.dim)
        R = K.with_backends(project="reference", project_kl="reference", loose=True)
        pairs = {"project": (lambda: K.project(y), lambda: R.project(y)),
                 "kl": (lambda: K.project(t, geometry="kl", log_input=True),
                        lambda: R.project(t, geometry="kl", log_input=True))}
        for op, (f, g) in pairs.items():
            err = float(np.abs(f() - g()).max())
            tm = median_times({"native": f, "reference": g}, max(repeats, 5))
            emit(f"submodular_base  {n:6d} {op:7s} native {1e3 * tm['native']:9.3f} ms  reference "
                 f"{1e3 * tm['reference']:9.3f} ms  reference/native {tm['reference'] / tm['native']:6.2f}x  "
                 f"|native - reference| = {err:.1e}  (load {os.getloadavg()[0]:.1f})")


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--sizes", type=int, nargs="+", default=[100, 1000])
    ap.add_argument("--repeats", type=int, default=5)
    ap.add_argument("--seed", type=int, default=0)
    ap.add_argument("--kinds", nargs="+", default=None, help="only these families")
    ap.add_argument("--log", default=None, help="also write the table (header with the load average) to this file")
    a = ap.parse_args(argv)
    warnings.simplefilter("ignore")
    lines = [f"# python -m benchmarks.bench_structured {' '.join(argv if argv is not None else sys.argv[1:])}, "
             f"{time.strftime('%Y-%m-%d %H:%M UTC', time.gmtime())}; load average at the start "
             f"{os.getloadavg()[0]:.1f} (2 cores shared with other jobs; medians: the native ops interleaved with each other, the reference "
             f"timed apart in 1-3 calls; the coverage head-to-head at the end interleaves native and reference)"]

    def emit(*args):
        """Print a line and keep it for --log."""
        print(*args)
        lines.append(" ".join(str(x) for x in args))
    emit(f"{'family':16s} {'n':>6s} {'op':4s} {'native ms':>10s} {'project ms':>10s} {'form ms':>9s} "
          f"{'reference ms':>12s} {'ref/native':>10s} note")
    for n in a.sizes:
        for kind in [k for k in JVP_KINDS if a.kinds is None or k in a.kinds]:
            rng = np.random.default_rng(a.seed)
            K = instance(kind, n, rng)
            if K is None:
                emit(f"{kind:16s} {n:6d} jvp  (no benchmark instance at this size)")
                continue
            y = rng.standard_normal(K.dim)
            if kind in ("matroid_bases", "paths", "spanning_trees", "submodular_base"):
                y = 0.5 + 0.5 * rng.standard_normal(K.dim)
            v = rng.standard_normal(K.dim)
            K.project_jvp(y, v)
            fns = {"jvp": lambda: K.project_jvp(y, v), "project": lambda: K.project(y)}
            form = K.linear_form()
            note = ""
            if form is not None and form.n_aux == 0:
                P = K.project(y)[None]
                fns["form"] = lambda: face_projector_rows(form, K.project(y)[None], v[None])
                err = np.abs(face_projector_rows(form, P, v[None])[0] - K.project_jvp(y, v)).max()
                note = f"|native - form| = {err:.1e}"
                assert err <= 1e-9, (kind, n, err)
            R = K.with_backends(project="reference")
            ref_reps = 1 if K.dim > 300 else 3
            try:
                R.project(y)
                tr = median_times({"reference": lambda: R.project(y)}, ref_reps)["reference"]
            except setkit.errors.SetkitError as exc:
                tr = float("nan")
                note += f" reference: {type(exc).__name__}"
            t = median_times(fns, a.repeats)
            emit(f"{kind:16s} {K.dim:6d} jvp  {1e3 * t['jvp']:10.3f} {1e3 * t['project']:10.3f} "
                  f"{1e3 * t.get('form', float('nan')):9.3f} {1e3 * tr:12.1f} {tr / t['jvp']:10.0f} "
                  f"jvp/project {t['jvp'] / t['project']:.2f}; {note}")
        for kind in [k for k in KL_KINDS if a.kinds is None or k in a.kinds]:
            rng = np.random.default_rng(a.seed)
            K = instance(kind, n, rng)
            if K is None:
                continue
            t = rng.uniform(-3, 3, K.dim)
            R = K.with_backends(project_kl="reference", loose=True)
            x = K.project(t, geometry="kl", log_input=True)
            ref_reps = 1 if K.dim > 300 else 3
            try:
                xr = R.project(t, geometry="kl", log_input=True)
                err = float(np.abs(x - xr).max())
                tr = median_times({"r": lambda: R.project(t, geometry="kl", log_input=True)}, ref_reps)["r"]
            except setkit.errors.SetkitError as exc:
                err, tr = float("nan"), float("nan")
                emit(f"  reference failed: {exc}")
            tn = median_times({"n": lambda: K.project(t, geometry="kl", log_input=True)}, a.repeats)["n"]
            d = K.project(t, geometry="kl", log_input=True, details=True)
            emit(f"{kind:16s} {K.dim:6d} kl   {1e3 * tn:10.3f} {'':>10s} {'':>9s} {1e3 * tr:12.1f} {tr / tn:10.0f} "
                  f"|native - reference| = {err:.1e}; certificate {float(d.certificate):.1e}; {d.backend_status}")
    if a.kinds is None or "submodular_base" in a.kinds:
        coverage_head_to_head(emit, a.repeats)
    if a.log:
        lines.append(f"# load average at the end {os.getloadavg()[0]:.1f}")
        with open(a.log, "w") as f:
            f.write("\n".join(lines) + "\n")


if __name__ == "__main__":
    main()
