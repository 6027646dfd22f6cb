"""Speed targets of the spectral sets and the ordered weighted l1 ball, measured side by side.

    python -m benchmarks.bench_matrix            # full run (a few minutes: full SVDs of 2000 x 2000)
    python -m benchmarks.bench_matrix --quick    # 400 x 400 matrices and n = 1e5, fewer repeats
    python -m benchmarks.bench_matrix --json out.json
    python -m benchmarks.bench_matrix --log benchmarks/bench_matrix_log.txt   # also write the table there

Every target is a ratio of two timings taken in the same process, interleaved
(ours, yardstick, ours, yardstick, ...) and summarized by their medians, so that
load from other processes on a shared machine affects both sides alike.

Targets (issue 15):
  * nuclear-norm LMO on a 2,000 x 2,000 dense matrix at least 20x faster than one full SVD
    (numpy.linalg.svd, LAPACK gesdd, with singular vectors);
  * projection onto the nuclear-norm ball within 1.5x of one full SVD;
  * ordered weighted l1 projection of n = 1e6 within 2x of np.sort + scipy.optimize.isotonic_regression.
The dense matrix is C = L + G: a rank-5 part plus Gaussian noise, the gradient of a matrix-completion
loss; the noise-only matrix (the hardest case for Lanczos, its top singular values nearly tied) is
timed as well and reported. The LMO runs Lanczos in single precision and measures its answer in
double precision (setkit/kernels/spectral.py): each LMO row reports the measured residual
||C^T u - s v|| / s, the stated bound on the value error (sigma_1 - s) / s, and the value error
actually measured against the full SVD's sigma_1.
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


def matrix_rows(rng, repeats=3, quick=False):
    """[(name, ours seconds, yardstick seconds, yardstick, need, direction, check)] for the three targets.

    ``check`` says how the answers were verified in the same run."""
    from scipy.optimize import isotonic_regression
    m = 400 if quick else 2000
    n_owl = 100_000 if quick else 1_000_000
    rows = []
    U = rng.standard_normal((m, 5))
    V = rng.standard_normal((5, m))
    noise = rng.standard_normal((m, m))
    C_lowrank = 3.0 * U @ V + noise
    full_svd = lambda A: np.linalg.svd(A)  # noqa: E731 - the yardstick: one full SVD with vectors
    K = setkit.compile({"kind": "nuclear_ball", "rows": m, "cols": m, "radius": 10.0})
    for label, C in (("low rank + noise", C_lowrank), ("noise only", noise)):
        ours, base = paired(lambda: K.lmo(C), lambda: full_svd(C), repeats)
        s1 = np.linalg.svd(C, compute_uv=False)[0]
        det = K.lmo(C, details=True)
        err = abs(float(np.sum(C * det.point)) + 10.0 * s1) / (10.0 * s1)
        how = str(det.backend_status[0] if isinstance(det.backend_status, (list, tuple)) else det.backend_status)
        rows.append((f"nuclear-ball LMO, {m}x{m} ({label})", ours, base, "one full SVD (numpy.linalg.svd)", 20.0,
                     ">=", f"objective relative error {err:.1e} vs the full SVD's sigma_1; {how}"))
    Y = C_lowrank / 4.0
    ours, base = paired(lambda: K.project(Y), lambda: full_svd(Y), repeats)
    P = K.project(Y)
    nuc = float(np.linalg.svd(P, compute_uv=False).sum())
    rows.append((f"nuclear-ball projection, {m}x{m}", ours, base, "one full SVD (numpy.linalg.svd)", 1.5, "<=",
                 f"||P||_* = {nuc:.12g} (radius 10)"))
    w = np.linspace(2.0, 0.5, n_owl)
    y = rng.standard_normal(n_owl)
    O = setkit.compile({"kind": "owl_ball", "weights": w, "radius": 3.0})

    def yardstick():
        s = np.sort(y)[::-1]
        isotonic_regression(s - w, increasing=False)

    ours, base = paired(lambda: O.project(y), yardstick, max(repeats, 7))
    p = O.project(y)
    omega = float(np.sort(np.abs(p))[::-1] @ w)
    rows.append((f"OWL projection, n={n_owl:.0e}", ours, base, "np.sort + scipy isotonic_regression", 2.0, "<=",
                 f"Omega(P) = {omega:.12g} (radius 3)"))
    return rows


def table(rows):
    lines = [f"{'target':<44} {'ours':>10} {'yardstick':>10} {'ratio':>8} {'need':>8}  verdict  check",
             "-" * 120]
    for name, ours, base, what, need, direction, check in rows:
        ratio = base / ours if direction == ">=" else ours / base
        ok = ratio >= need if direction == ">=" else ratio <= need
        kind = "faster" if direction == ">=" else "x yardstick"
        lines.append(f"{name:<44} {1e3 * ours:>8.1f}ms {1e3 * base:>8.1f}ms {ratio:>7.2f}x {direction}{need:<5g}  "
                     f"{'met' if ok else 'MISSED':<7}  {check}  ({kind}; yardstick: {what})")
    return "\n".join(lines)


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--quick", action="store_true")
    ap.add_argument("--repeats", type=int, default=None)
    ap.add_argument("--json", default=None)
    ap.add_argument("--log", default=None, help="also write the table (with a header line) to this file")
    a = ap.parse_args(argv)
    rng = np.random.default_rng(2026)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        rows = matrix_rows(rng, a.repeats or (2 if a.quick else 5), quick=a.quick)
    out = table(rows)
    print(out)
    if a.log:
        import platform
        head = (f"# python -m benchmarks.bench_matrix {' '.join(argv if argv is not None else sys.argv[1:])}, "
                f"{time.strftime('%Y-%m-%d %H:%M UTC', time.gmtime())}, {platform.node() or 'this machine'}; "
                f"load average at the end of the run {os.getloadavg()[0]:.1f} (2 cores shared with other jobs: absolute "
                f"times are inflated, each ratio is timed interleaved)\n")
        with open(a.log, "w") as f:
            f.write(head + out + "\n")
    if a.json:
        with open(a.json, "w") as f:
            json.dump([dict(name=r[0], ours_s=r[1], yardstick_s=r[2], yardstick=r[3], need=r[4], direction=r[5],
                            check=r[6]) for r in rows], f, indent=1)


if __name__ == "__main__":
    main()
