"""Backward against forward through the PyTorch and JAX layers, side by side in one run.

    python3 -m benchmarks.bench_autodiff                 # 10,000 x 100 batches, 11 interleaved repeats
    python3 -m benchmarks.bench_autodiff --quick         # 2,000 x 100, 3 repeats (reports only)
    python3 -m benchmarks.bench_autodiff --save benchmarks/bench_autodiff_last_run.txt

Each workload is a batch of projections of 100 coordinates. The forward time is the layer's
call with a tensor that requires a gradient (``torch_project(K, y)``, which also records the
graph; ``jax.vjp(lambda y: jax_project(K, y), y)`` for JAX, eager); the backward time is the
pass that follows (``p.backward(G)``; the JAX pullback applied to G, blocked until ready).
The two are timed alternately (forward, backward, forward, ...) and summarized by their
medians, so that load from other processes affects both alike. All arrays are float64.

Target (issue 14): backward at most 3x forward for the 10,000 x 100 simplex batch through the
torch layer; the permutahedron and the JAX layer are measured against the same bar. The
targets are stated at 10,000 x 100; --quick reports ratios without verdicts.
"""
from __future__ import annotations

import argparse
import os
import platform
import sys
import time

import numpy as np

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), ".."))

import setkit  # noqa: E402

TARGET = 3.0
FULL_BATCH = 10_000
DIM = 100


def interleaved(forward, backward, repeats):
    """Median seconds of forward() and of backward(state) (state = what forward returned), alternated."""
    backward(forward())                       # warm-up: compiled kernels, caches, JAX's callback compile
    tf, tb = [], []
    for _ in range(repeats):
        t0 = time.perf_counter()
        state = forward()
        tf.append(time.perf_counter() - t0)
        t0 = time.perf_counter()
        backward(state)
        tb.append(time.perf_counter() - t0)
    return float(np.median(tf)), float(np.median(tb))


def sets():
    """(label, compiled set, scale of the points): a simplex and a permutahedron of 100 coordinates."""
    w = np.linspace(10.0, 0.0, DIM)                      # position weights of a ranking of 100 items
    return [("simplex", setkit.compile({"kind": "simplex", "dim": DIM}), 1.0),
            ("permutahedron", setkit.compile({"kind": "permutahedron", "weights": w}), 5.0)]


def torch_rows(batch, repeats, rng):
    try:
        import torch

        from setkit.autodiff import torch_project
    except ImportError as exc:
        return [(f"torch layer: {label}", None, None, f"not available ({exc})") for label, _, _ in sets()]
    out = []
    for label, K, scale in sets():
        Y = torch.tensor(scale * rng.standard_normal((batch, DIM)), dtype=torch.float64)
        G = torch.tensor(rng.standard_normal((batch, DIM)), dtype=torch.float64)
        y = Y.clone().requires_grad_(True)

        def forward():
            y.grad = None
            return torch_project(K, y)

        def backward(p):
            p.backward(G)
        out.append((f"torch layer: {label}",) + interleaved(forward, backward, repeats) + ("",))
    return out


def jax_rows(batch, repeats, rng):
    try:
        import jax

        from setkit.autodiff import jax_project
    except ImportError as exc:
        return [(f"jax layer: {label}", None, None, f"not available ({exc})") for label, _, _ in sets()]
    jax.config.update("jax_enable_x64", True)
    out = []
    for label, K, scale in sets():
        Y = jax.numpy.asarray(scale * rng.standard_normal((batch, DIM)))
        G = jax.numpy.asarray(rng.standard_normal((batch, DIM)))

        def forward():
            p, pullback = jax.vjp(lambda t: jax_project(K, t), Y)
            p.block_until_ready()
            return pullback

        def backward(pullback):
            pullback(G)[0].block_until_ready()
        out.append((f"jax layer: {label}",) + interleaved(forward, backward, repeats) + ("",))
    return out


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="2,000 x 100 batches, 3 repeats, no verdicts")
    ap.add_argument("--repeats", type=int, default=None)
    ap.add_argument("--save", default=None, help="also write the printed report to this file")
    args = ap.parse_args(argv)
    batch = 2_000 if args.quick else FULL_BATCH
    repeats = args.repeats or (3 if args.quick else 11)
    rng = np.random.default_rng(0)
    lines = [f"bench_autodiff: batches of {batch:,} x {DIM} projections, float64, medians of {repeats} "
             f"interleaved repeats; python {platform.python_version()}, {os.cpu_count()} cpus",
             f"{'workload':<30} {'forward (ms)':>13} {'backward (ms)':>14} {'ratio':>7}  target"]
    print("\n".join(lines), flush=True)
    ok = True
    for name, t_fwd, t_bwd, note in torch_rows(batch, repeats, rng) + jax_rows(batch, repeats, rng):
        if t_fwd is None:
            line = f"{name:<30} {note}"
        else:
            ratio = t_bwd / t_fwd
            if batch == FULL_BATCH:
                met = ratio <= TARGET
                ok = ok and met
                verdict = f"<= {TARGET:g}x {'met' if met else 'missed'}"
            else:
                verdict = f"<= {TARGET:g}x (not binding at this size)"
            line = f"{name:<30} {1e3 * t_fwd:>13.2f} {1e3 * t_bwd:>14.2f} {ratio:>7.2f}  {verdict}"
        lines.append(line)
        print(line, flush=True)
    if args.save:
        with open(args.save, "w") as fh:
            fh.write("\n".join(lines) + "\n")
    return 0 if ok else 1


if __name__ == "__main__":
    sys.exit(main())
