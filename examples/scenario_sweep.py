"""An online learner evaluated over many independent scenarios in parallel on a dask LocalCluster.

Scenario (invented): a network of community kitchens splits each week's volunteer hours over
eight tasks (prep, cooking, deliveries, dishes, pantry sorting, garden, front desk, training);
no task may take more than 30% of the hours. A week's linear loss is minus the measured usefulness
of an hour spent on each task: a kitchen's own base profile, a seasonal drift and noise, all drawn
from the kitchen's seed. Each kitchen runs projected online gradient descent on the capped simplex
(a setkit budget set), x_{t+1} = project(x_t - eta c_t), from the centroid, and is compared with
the best fixed split in hindsight (one LMO on its summed losses). The regret bound D G sqrt(T)
(Zinkevich, 2003) uses a diameter bound D from the support function and G = max ||c_t||.

What runs where. The set is shipped to the worker processes once (``client.scatter``: it pickles
its description; the plan and workspaces are rebuilt on each worker); each task runs one kitchen's
whole learner (``client.map``). The best fixed splits of all kitchens are one lazy call,
``K.lmo(dask_array)``, computed block by block on the same cluster. The first kitchens are run
again in this process: the answers are identical.

Outputs are numerical answers within stated tolerances; decisions that affect people (here, how
volunteers spend their hours) should be reviewed by a responsible person under local rules.

Run:  python examples/scenario_sweep.py [--quick] [--scenarios S] [--rounds T] [--threads]
(``--quick``: 24 kitchens, 200 weeks, and a LocalCluster of threads instead of processes so that
the test stays short; without it, 2 worker processes.) Needs ``pip install "setkit[dask]"``.
"""
from __future__ import annotations

import argparse
import math
import time

import numpy as np

import setkit

TASKS = ["prep", "cooking", "deliveries", "dishes", "pantry sorting", "garden", "front desk", "training"]
SPLIT = {"kind": "budget", "name": "weekly hours", "dim": len(TASKS), "total": 1.0, "upper": 0.3}


def kitchen_losses(seed: int, weeks: int) -> np.ndarray:
    """The (weeks, tasks) losses of one invented kitchen: -(base + seasonal drift + noise)."""
    rng = np.random.default_rng(seed)
    n = len(TASKS)
    base = rng.normal(1.0, 0.5, n)
    swing = rng.normal(0.0, 0.4, n)
    phase = rng.uniform(0.0, 2.0 * math.pi, n)
    t = np.arange(weeks)[:, None]
    usefulness = base + swing * np.sin(2.0 * math.pi * t / 52.0 + phase) + rng.normal(0.0, 0.8, (weeks, n))
    return -usefulness


def diameter_bound(K) -> float:
    """sqrt(sum_i width_i^2) with width_i = support(e_i) + support(-e_i): the bounding-box diagonal."""
    E = np.eye(K.dim)
    widths = K.support(E) + K.support(-E)
    return float(np.sqrt(np.sum(widths ** 2)))


def run_learner(seed: int, K, weeks: int, diameter: float) -> dict:
    """Projected online gradient descent for one kitchen: its total loss, its G, its worst violation."""
    C = kitchen_losses(seed, weeks)
    G = float(np.linalg.norm(C, axis=1).max())
    eta = diameter / (G * math.sqrt(weeks))
    x = K.centroid()
    loss, worst = 0.0, 0.0
    for t in range(weeks):
        loss += float(C[t] @ x)
        x = K.project(x - eta * C[t])
        worst = max(worst, float(K.violation(x)))
    return {"seed": seed, "loss": loss, "G": G, "worst_violation": worst, "final": x}


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="24 kitchens, 200 weeks, threads (for tests)")
    ap.add_argument("--scenarios", type=int, default=None)
    ap.add_argument("--rounds", type=int, default=None)
    ap.add_argument("--threads", action="store_true", help="a LocalCluster of threads instead of 2 processes")
    args = ap.parse_args(argv)
    try:
        import dask
        import dask.array as da
        from dask.distributed import Client, LocalCluster
    except ImportError:
        raise SystemExit("this example needs dask: pip install \"setkit[dask]\"") from None
    S = args.scenarios or (24 if args.quick else 200)
    T = args.rounds or (200 if args.quick else 500)
    processes = not (args.threads or args.quick)
    K = setkit.compile(SPLIT)
    D = diameter_bound(K)
    seeds = [1000 + s for s in range(S)]
    totals = np.stack([kitchen_losses(s, T).sum(axis=0) for s in seeds])     # summed losses per kitchen

    # SETKIT_THREADS=1 in the workers: dask already runs one task per worker thread
    extra = {"env": {"SETKIT_THREADS": "1"}} if processes else {}    # worker processes (their nannies) take env
    with LocalCluster(n_workers=2, processes=processes, threads_per_worker=1, dashboard_address=None,
                      **extra) as cluster, Client(cluster) as client:
        t0 = time.perf_counter()
        K_on_workers = client.scatter(K, broadcast=True)          # pickled once per worker
        runs = client.map(run_learner, seeds, K=K_on_workers, weeks=T, diameter=D)
        C_total = da.from_array(totals, chunks=(max(1, S // 4), K.dim))
        best = K.lmo(C_total)                                      # lazy: a dask array
        best_loss = (C_total * best).sum(axis=1)
        results = client.gather(runs)
        best, best_loss = dask.compute(best, best_loss)
        wall = time.perf_counter() - t0
        kind = f"{len(client.scheduler_info()['workers'])} worker {'processes' if processes else 'threads'}"

    loss = np.array([r["loss"] for r in results])
    G = np.array([r["G"] for r in results])
    regret = loss - best_loss
    bound = D * G * math.sqrt(T)
    inside = max(r["worst_violation"] for r in results) <= 1e-9
    t1 = time.perf_counter()
    check = [run_learner(s, K, T, D) for s in seeds[:3]]
    here = (time.perf_counter() - t1) / 3
    same = all(c["loss"] == r["loss"] and np.array_equal(c["final"], r["final"]) for c, r in zip(check, results))
    same_best = np.array_equal(K.lmo(totals[:3]), best[:3])
    print(f"set: {K.node.label}, {K.dim} tasks, at most 30% of the hours each")
    print(f"kitchens: {S}")
    print(f"weeks: {T}")
    print(f"cluster: LocalCluster with {kind}")
    print(f"regret within the bound D*G*sqrt(T) in every kitchen: {'yes' if np.all(regret <= bound) else 'no'}")
    print(f"largest regret / bound: {float(np.max(regret / bound)):.4f}")
    print(f"mean regret per week: {float(np.mean(regret)) / T:.6f}")
    print(f"all decisions inside the set: {'yes' if inside else 'no'}")
    print(f"same answers as in this process (first 3 kitchens, learner and LMO): {'yes' if same and same_best else 'no'}")
    print(f"wall time on the cluster: {wall:.2f} s ({S / wall:.1f} kitchens per second; one kitchen in this "
          f"process: {here:.3f} s)")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
