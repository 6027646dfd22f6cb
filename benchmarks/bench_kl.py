"""KL (relative entropy) projection speed rows, measured side by side (medians of interleaved repeats).

    python -m benchmarks.bench_kl            # the stated sizes (writes benchmarks/bench_kl_last_run.txt)
    python -m benchmarks.bench_kl --quick    # reduced sizes (a smoke run, not a verdict; writes nothing)

Rows (inputs are log-domain, t = log y):
1. capped simplex {0 <= x <= cap, sum x = 1}, n = 1e6, against np.sort of the same
   vector (the kernel takes cap-set passes, no sort and no selection). Target: within 3x.
2. permutahedron, n = 1e6, against np.sort + scipy.optimize.isotonic_regression (the
   sort-and-pool floor of the Euclidean projection). Target: within 3x.
3. birkhoff, n = 1000 (a 1000 x 1000 matrix) to largest marginal residual 1e-9, against
   a hand-written numpy log-domain Sinkhorn run to the same residual, on iid uniform log
   inputs (a few iterations) and on a rank-one-plus-noise score matrix (tens of
   iterations). Target: within 2x.
4. every native KL projection at dimension about 1000 against the exponential-cone
   reference (cvxpy + Clarabel) on the same point. Target: at least 1000x faster.

The run without --quick and --only writes its table to benchmarks/bench_kl_last_run.txt, one
line per row with the ratio and met/NO, then the rows that missed.

The machine may be shared: only ratios of timings taken in the same run mean anything.
Every answer is checked (feasibility, agreement with the comparator) before its time counts.
"""
from __future__ import annotations

import argparse
import statistics
import time

import numpy as np
from scipy.optimize import isotonic_regression

import setkit
from setkit.kernels.bregman import kl_certificate, kl_divergence, sinkhorn_kl


def interleaved(f, g, repeats=7):
    """Median seconds of f and g, alternating calls so that both see the same machine load."""
    f(), g()
    tf, tg = [], []
    for _ in range(repeats):
        t0 = time.perf_counter()
        f()
        t1 = time.perf_counter()
        g()
        t2 = time.perf_counter()
        tf.append(t1 - t0)
        tg.append(t2 - t1)
    return statistics.median(tf), statistics.median(tg)


def row(name, ours, other, target, kind, note=""):
    """kind 'within': ours / other <= target; 'faster': other / ours >= target."""
    if kind == "within":
        ratio = ours / other
        met = ratio <= target
        goal = f"<= {target:g}x"
    else:
        ratio = other / ours
        met = ratio >= target
        goal = f">= {target:g}x faster"
    return dict(name=name, ours=ours, other=other, ratio=ratio, goal=goal, met=met, note=note)


def capped_row(n, rng):
    cap = 20.0 / n
    K = setkit.compile({"kind": "budget", "dim": n, "total": 1.0, "upper": cap})
    t = 2.0 * rng.standard_normal(n)
    T = t[None, :]
    X = K.run("project_kl", T)[0]
    assert abs(X.sum() - 1.0) <= 1e-10 and X.max() <= cap * (1 + 1e-15) and X.min() >= 0
    gap = float(kl_certificate(T, X, lambda G: K.run("lmo", G)[0])[0])
    ncap = int((X >= cap * (1 - 1e-12)).sum())
    a, b = interleaved(lambda: K.run("project_kl", T), lambda: np.sort(t))
    return row(f"capped simplex n={n:.0e} vs np.sort", a, b, 3.0, "within",
               f"{ncap} capped, Bregman gap {gap:.1e}")


def permutahedron_row(n, rng):
    w = np.sort(rng.uniform(0.0, 1.0, n))[::-1].copy()
    K = setkit.compile({"kind": "permutahedron", "weights": w.tolist()})
    t = 3.0 * rng.standard_normal(n)
    T = t[None, :]
    X = K.run("project_kl", T)[0]
    assert abs(X.sum() - w.sum()) <= 1e-9 * w.sum() and K.violation(X) <= 1e-8 * w.sum()
    gap = float(kl_certificate(T, X, lambda G: K.run("lmo", G)[0])[0])

    def sort_iso():
        s = np.sort(t)[::-1]
        return isotonic_regression(s - w, increasing=False).x

    a, b = interleaved(lambda: K.run("project_kl", T), sort_iso)
    return row(f"permutahedron n={n:.0e} vs sort+isotonic", a, b, 3.0, "within", f"Bregman gap {gap:.1e}")


def numpy_log_sinkhorn(t, r, c, tol, max_iter=100_000):
    """Hand-written log-domain Sinkhorn: f = log r - lse(t + g), g = log c - lse(t + f) until rows meet tol."""
    logr, logc = np.log(r), np.log(c)
    g = np.zeros(c.size)
    for it in range(1, max_iter + 1):
        A = t + g[None, :]
        m = A.max(axis=1, keepdims=True)
        f = logr - (m[:, 0] + np.log(np.exp(A - m).sum(axis=1)))
        A = t + f[:, None]
        m = A.max(axis=0, keepdims=True)
        g = logc - (m[0] + np.log(np.exp(A - m).sum(axis=0)))
        X = np.exp(t + f[:, None] + g[None, :])
        if np.abs(X.sum(axis=1) - r).max() <= tol:
            return X, it
    raise RuntimeError("numpy log-domain Sinkhorn did not converge")


def birkhoff_row(n, rng, tol=1e-9, structured=False):
    if structured:
        # scores of a rank-one preference model plus noise (a slower instance for scaling)
        t = 3.0 * np.outer(rng.standard_normal(n), rng.standard_normal(n)) + rng.uniform(-1.0, 1.0, (n, n))
    else:
        t = rng.uniform(-3.0, 3.0, (n, n))
    ones = np.ones(n)
    T = t.reshape(1, -1)
    X, info = sinkhorn_kl(T, ones, ones, accuracy=tol)
    Xr, its = numpy_log_sinkhorn(t, ones, ones, tol)
    M = X.reshape(n, n)
    res = max(np.abs(M.sum(0) - 1).max(), np.abs(M.sum(1) - 1).max())
    assert res <= tol and np.abs(M - Xr).max() <= 1e-7
    a, b = interleaved(lambda: sinkhorn_kl(T, ones, ones, accuracy=tol), lambda: numpy_log_sinkhorn(t, ones, ones, tol),
                       repeats=3)
    kind = "rank-one+noise" if structured else "iid uniform"
    return row(f"birkhoff n={n} ({kind}) to residual {tol:g} vs numpy log-Sinkhorn", a, b, 2.0, "within",
               f"ours {info['iterations'][0]} iterations (residual {res:.1e}), numpy {its} iterations")


REFERENCE_SETS = {
    "simplex": lambda n, rng: {"kind": "simplex", "dim": n, "total": 2.0},
    "simplex at_most": lambda n, rng: {"kind": "simplex", "dim": n, "total": 2.0, "mode": "at_most"},
    "box": lambda n, rng: {"kind": "box", "dim": n, "lower": 0.01, "upper": 2.0},
    "capped simplex": lambda n, rng: {"kind": "budget", "dim": n, "total": 1.0, "upper": 5.0 / n},
    "weighted budget": lambda n, rng: {"kind": "budget", "dim": n, "total": 10.0, "upper": 0.5,
                                       "weights": rng.uniform(0.5, 2.0, n).round(3).tolist()},
    # the reference states the permutahedron by n - 1 sum_largest constraints (O(n^2) cone variables):
    # at n = 1000 that model alone exhausts memory, so this row is measured at n = 200
    "permutahedron": lambda n, rng: {"kind": "permutahedron", "weights": np.linspace(0, 2, min(n, 200)).tolist()},
    "birkhoff": lambda n, rng: {"kind": "birkhoff", "n": int(round(n ** 0.5))},
    "transport": lambda n, rng: {"kind": "transport", "rows": [2.0] * 25, "cols": [1.25] * 40},
    "product": lambda n, rng: {"kind": "product", "of": [{"kind": "simplex", "dim": 100}], "copies": n // 100},
    # the flow family's own benchmark instance (n edges on n/4 nodes); its KL route is dual Newton in Python
    "flow": lambda n, rng: _flow_instance(n, rng),
}


def _flow_instance(n, rng):
    from setkit.families import lookup
    spec = lookup("flow").benchmark_example(n, rng)
    return spec[0] if isinstance(spec, list) else spec


def reference_rows(n, rng, names=None):
    out = []
    for name, make in REFERENCE_SETS.items():
        if names and name not in names:
            continue
        K = setkit.compile(make(n, rng))
        R = K.with_backends(project_kl="reference", loose=True)
        T = rng.uniform(-5.0, 5.0, (1, K.dim))
        X = K.run("project_kl", T)[0]
        t0 = time.perf_counter()
        Xr = R.run("project_kl", T)[0]          # first call: problem build + domain check + solve
        first = time.perf_counter() - t0
        err = float(np.abs(X - Xr).max() / max(1.0, np.abs(Xr).max()))
        dkl = float(kl_divergence(T, X[None] if X.ndim == 1 else X)[0] - kl_divergence(T, Xr[None] if Xr.ndim == 1
                                                                                      else Xr)[0])
        a, b = interleaved(lambda: K.run("project_kl", T), lambda: R.run("project_kl", T), repeats=3)
        out.append(row(f"{name} dim={K.dim} vs exp-cone reference", a, b, 1000.0, "faster",
                       f"max difference {err:.1e} (relative), KL(ours) - KL(ref) = {dkl:.1e}, "
                       f"reference first call {first:.2f}s"))
        print_row(out[-1])
    return out


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="reduced sizes (smoke run)")
    ap.add_argument("--only", help="comma-separated row groups: capped,permutahedron,birkhoff,reference")
    a = ap.parse_args(argv)
    rng = np.random.default_rng(2026)
    big, nb, nr = (10_000, 100, 100) if a.quick else (1_000_000, 1000, 1000)
    groups = set(a.only.split(",")) if a.only else {"capped", "permutahedron", "birkhoff", "reference"}
    rows = []
    print(HEADER, flush=True)
    if "capped" in groups:
        rows.append(capped_row(big, rng))
        print_row(rows[-1])
    if "permutahedron" in groups:
        rows.append(permutahedron_row(big, rng))
        print_row(rows[-1])
    if "birkhoff" in groups:
        for structured in (False, True):
            rows.append(birkhoff_row(nb, rng, structured=structured))
            print_row(rows[-1])
    if "reference" in groups:
        rows.extend(reference_rows(nr, rng))
    summary = f"{sum(r['met'] for r in rows)} of {len(rows)} rows met their target."
    print(summary)
    missed = [r["name"] for r in rows if not r["met"]]
    if missed:
        print("missed: " + "; ".join(missed))
    if not a.quick and not a.only:
        import datetime
        import os
        load = os.getloadavg()[0] if hasattr(os, "getloadavg") else float("nan")
        stamp = datetime.datetime.now(datetime.timezone.utc).strftime("%Y-%m-%dT%H:%MZ")
        lines = [f"# python -m benchmarks.bench_kl, run {stamp} on the shared 2-core machine "
                 f"(load average {load:.2f}); ratios only", HEADER] + [format_row(r) for r in rows] + [summary]
        if missed:
            lines.append("missed: " + "; ".join(missed))
        path = os.path.join(os.path.dirname(os.path.abspath(__file__)), "bench_kl_last_run.txt")
        with open(path, "w") as fh:
            fh.write("\n".join(lines) + "\n")
    return rows


HEADER = f"{'row':<62} {'ours':>10} {'other':>10} {'ratio':>9}  {'target':<16} met  note"


def format_row(r):
    return (f"{r['name']:<62} {r['ours'] * 1e3:>8.3f}ms {r['other'] * 1e3:>8.1f}ms {r['ratio']:>8.2f}x  "
            f"{r['goal']:<16} {'yes' if r['met'] else 'NO ':<4} {r['note']}")


def print_row(r):
    print(format_row(r), flush=True)


if __name__ == "__main__":
    main()
