"""A Frank-Wolfe (conditional gradient) loop on a network-flow polytope.

Scenario (invented): a bike-courier cooperative sends 12 parcels per hour from its depot
to two drop points (7 to the bakery, 5 to the library) through a small street grid.
Every street has a capacity and a travel time that grows with its load,
t_e(x) = a_e + b_e x_e, so the total time spent, f(x) = sum_e a_e x_e + b_e x_e^2 / 2,
is convex. Frank-Wolfe only needs the LMO of the flow polytope (a cheapest routing for
fixed street costs). This is the away-step variant (Lacoste-Julien and Jaggi, 2015): the
iterate is kept as a convex combination of LMO answers, and a step may also move away
from the worst of them, which gives linear convergence on polytopes; steps use an exact
line search on the quadratic.
The Frank-Wolfe gap <grad f(x), x - lmo(grad f(x))> bounds f(x) - f* at every step;
the loop stops when it falls below the target, and the result is compared with a cvxpy
solve of the same problem (through K.to_cvxpy).

Outputs are numerical answers within stated tolerances; decisions that affect people
should be reviewed by a responsible person under local rules.

Run:  python examples/frank_wolfe_flow.py [--quick]
Uses only the public setkit API (and cvxpy for the comparison).
"""
from __future__ import annotations

import argparse

import numpy as np

import setkit

STREETS = [  # from, to, capacity, free-flow minutes a, congestion b
    ("depot", "mill", 8, 4.0, 0.50), ("depot", "square", 7, 3.0, 0.80), ("depot", "canal", 6, 5.0, 0.30),
    ("mill", "square", 4, 1.0, 0.40), ("mill", "bakery", 6, 6.0, 0.30), ("square", "bakery", 6, 3.0, 0.60),
    ("square", "library", 5, 4.0, 0.50), ("canal", "square", 4, 1.5, 0.40), ("canal", "library", 6, 5.0, 0.20),
    ("bakery", "library", 3, 2.0, 0.70), ("library", "bakery", 3, 2.0, 0.70),
]
SUPPLY = {"depot": 12, "bakery": -7, "library": -5}


def courier_network():
    return setkit.compile({
        "kind": "flow",
        "nodes": ["depot", "mill", "square", "canal", "bakery", "library"],
        "edges": [{"from": u, "to": v, "capacity": c} for u, v, c, _, _ in STREETS],
        "supply": SUPPLY,
    })


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="stop at a looser gap (for tests)")
    args = ap.parse_args(argv)
    target = 1e-6 if args.quick else 1e-10
    max_iter = 5000
    K = courier_network()
    a = np.array([s[3] for s in STREETS])
    b = np.array([s[4] for s in STREETS])

    def f(x):
        return float(a @ x + 0.5 * b @ (x * x))

    atoms = [K.lmo(a)]                 # start: the cheapest routing at free-flow times
    weights = [1.0]
    x = atoms[0].copy()
    gap = np.inf
    it = away = 0
    for it in range(1, max_iter + 1):
        g = a + b * x
        s = K.lmo(g)
        gap = float(g @ (x - s))
        if gap <= target:
            break
        scores = [float(g @ v) for v in atoms]
        j = int(np.argmax(scores))
        if gap >= scores[j] - float(g @ x) or len(atoms) == 1:
            d, gmax, kind = s - x, 1.0, "toward"
        else:
            wj = weights[j]
            d, gmax, kind = x - atoms[j], wj / (1.0 - wj), "away"
        slope = float(-(g @ d))
        curv = float(b @ (d * d))
        step = gmax if curv <= 0 else min(gmax, slope / curv)   # exact line search on the quadratic
        x = x + step * d
        if kind == "toward":
            weights = [(1.0 - step) * w for w in weights]
            for i, v in enumerate(atoms):
                if np.allclose(v, s, atol=1e-12):
                    weights[i] += step
                    break
            else:
                atoms.append(s)
                weights.append(step)
        else:
            away += 1
            weights = [(1.0 + step) * w for w in weights]
            weights[j] -= step
        keep = [i for i, w in enumerate(weights) if w > 1e-14]
        atoms = [atoms[i] for i in keep]
        weights = [weights[i] for i in keep]
    fx = f(x)
    print(f"streets: {K.dim}, parcels per hour: {SUPPLY['depot']}")
    print(f"iterations: {it} ({away} away steps, {len(atoms)} routings in the final mix)")
    print(f"Frank-Wolfe gap: {gap:.3e} (target {target:.0e})")
    print(f"total courier minutes: {fx:.6f}")
    print(f"routing inside the flow polytope: {'yes' if bool(K.contains(x, tol=1e-8)) else 'no'}")
    try:
        import cvxpy as cp
        z = cp.Variable(K.dim)
        prob = cp.Problem(cp.Minimize(a @ z + 0.5 * cp.sum(cp.multiply(b, cp.square(z)))), K.to_cvxpy(z))
        prob.solve(solver=cp.CLARABEL, tol_gap_abs=1e-11, tol_gap_rel=1e-11, tol_feas=1e-11)
        print(f"cvxpy optimum: {prob.value:.6f}")
        print(f"excess over the optimum: {fx - prob.value:.3e} (at most the gap)")
    except ImportError:
        print("cvxpy optimum: unavailable")
    busiest = np.argsort(-x)[:3]
    print("busiest streets: " + ", ".join(f"{STREETS[e][0]}->{STREETS[e][1]} {x[e]:.2f}" for e in busiest))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
