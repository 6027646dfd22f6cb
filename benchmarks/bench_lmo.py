"""Per-call LMO time on polyhedral sets: the persistent HiGHS workspace against linprog and cvxpy.

Methods (one run, same directions for every method, calls interleaved so that machine load hits
all alike):

* ``setkit``: the set's default LMO route (native network LMO or the highs backend), both on the
  persistent HiGHS model of setkit/backends/_lp.py (costs changed per call, warm or cold re-solve);
* ``linprog``: scipy.optimize.linprog (HiGHS dual simplex) called per direction on the same linear
  form (what the highs backend and the network LMOs did before the workspace);
* ``reference``: setkit's cvxpy reference LMO (Clarabel).

Workloads: ``scattered`` (independent Gaussian directions) and ``trajectory`` (each direction a 5%
perturbation of the previous one, as a Frank-Wolfe learner produces them). Times are medians over
the calls, repeated ``--repeat`` times (median of the medians); ratios are what matters on a shared
machine. Every answer's objective is checked against linprog's.

Usage::

    python benchmarks/bench_lmo.py [--calls 30] [--repeat 3] [--seed 0] [--no-reference-large]
"""
from __future__ import annotations

import argparse
import os
import pickle
import sys
import time

import numpy as np

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), ".."))

import setkit  # noqa: E402
from setkit.backends._lp import LinprogWorkspace  # noqa: E402

HERE = os.path.dirname(os.path.abspath(__file__))
CATALOG = os.path.join(HERE, "..", "catalog")


def transport_spec(m, n, rng):
    rows = rng.integers(1, 10, m).astype(float)
    cols = np.full(n, np.floor(rows.sum() / n))
    cols[: int(rows.sum() - cols.sum())] += 1
    return {"kind": "transport", "rows": rows.tolist(), "cols": cols.tolist()}


def cases(rng):
    from bench_flow import make_instance
    big, _, _ = make_instance(500, 2000, np.random.default_rng(1))
    return [("transport 3x4", setkit.compile(transport_spec(3, 4, rng))),
            ("transport 20x30", setkit.compile(transport_spec(20, 30, rng))),
            ("flow canal-network", setkit.load(os.path.join(CATALOG, "canal-network.yaml"))),
            ("flow harbor-bakery-routes", setkit.load(os.path.join(CATALOG, "harbor-bakery-routes.yaml"))),
            ("flow 500 nodes / 2000 edges", setkit.compile(big)),
            ("polyhedron kiln-glaze", setkit.load(os.path.join(CATALOG, "kiln-glaze.yaml")))]


def directions(dim, calls, kind, rng):
    if kind == "scattered":
        return rng.standard_normal((calls, dim))
    C = np.empty((calls, dim))
    c = rng.standard_normal(dim)
    for k in range(calls):
        c = c + 0.05 * rng.standard_normal(dim)
        C[k] = c
    return C


def run(K, C, with_reference):
    f = K.node.linear_form()
    lw = LinprogWorkspace(f.A_eq, f.b_eq, f.A_ub, f.b_ub, f.lo, f.hi)
    methods = {"setkit": lambda c: K.lmo(c.reshape(K.shape)).reshape(-1),
               "linprog": lambda c: lw.minimize(np.concatenate([c, np.zeros(f.n_aux)])).z[:f.n_x]}
    if with_reference:
        ref = K.with_backends(lmo="reference")
        methods["reference"] = lambda c: ref.lmo(c.reshape(K.shape)).reshape(-1)
    for fn in methods.values():     # warm-up: workspaces, cvxpy canonicalization
        fn(C[0])
    times = {name: [] for name in methods}
    worst = 0.0
    for c in C:
        vals = {}
        for name, fn in methods.items():
            t0 = time.perf_counter()
            x = fn(c)
            times[name].append(time.perf_counter() - t0)
            vals[name] = float(c @ x)
        worst = max(worst, abs(vals["setkit"] - vals["linprog"]) / max(1.0, np.abs(c).sum()))
    return {name: float(np.median(t)) for name, t in times.items()}, worst


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--calls", type=int, default=30)
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--seed", type=int, default=0)
    ap.add_argument("--no-reference-large", action="store_true", help="skip cvxpy on sets above 1000 coordinates")
    args = ap.parse_args(argv)
    sys.path.insert(0, HERE)
    rng = np.random.default_rng(args.seed)
    print(f"{'set':<28} {'dim':>5} {'workload':<11} {'setkit ms':>10} {'linprog ms':>11} {'cvxpy ms':>9} "
          f"{'linprog/setkit':>15} {'cvxpy/setkit':>13} {'max obj. gap':>13}")
    for name, K in cases(rng):
        for wl in ("scattered", "trajectory"):
            with_ref = not (args.no_reference_large and K.dim > 1000)
            meds, worst = [], 0.0
            for _ in range(args.repeat):
                # a fresh copy per repeat (new node, so new family workspaces too): every method
                # starts from an empty workspace
                K2 = pickle.loads(pickle.dumps(K))
                C = directions(K.dim, args.calls, wl, rng)
                m, w = run(K2, C, with_ref)
                meds.append(m)
                worst = max(worst, w)
            med = {k: float(np.median([m[k] for m in meds])) for k in meds[0]}
            ref = med.get("reference", float("nan"))
            print(f"{name:<28} {K.dim:>5} {wl:<11} {1e3 * med['setkit']:>10.3f} {1e3 * med['linprog']:>11.3f} "
                  f"{1e3 * ref:>9.3f} {med['linprog'] / med['setkit']:>14.1f}x {ref / med['setkit']:>12.1f}x "
                  f"{worst:>13.1e}", flush=True)


if __name__ == "__main__":
    main()
