"""Projected online gradient descent on a ranking set.

Scenario (invented): a museum audio guide orders six exhibit stops every morning. A
fractional ranking is a point of the permutahedron of the position weights (how much
attention a visitor gives to the 1st, 2nd, ... stop); each day brings a linear loss
<c_t, x> where -c_t is that day's (noisy) interest in each stop. The guide plays
projected online gradient descent, x_{t+1} = project(x_t - eta c_t), starting from the
centroid of the set, and is compared with the best fixed ranking in hindsight (one LMO
call on the summed losses). The regret bound D G sqrt(T) (Zinkevich, 2003) uses a
diameter bound D from the support function and G = max ||c_t||.

Outputs are numerical answers within stated tolerances; decisions that affect people
should be reviewed by a responsible person under local rules.

Run:  python examples/online_ranking.py [--quick] [--seed N]
Uses only the public setkit API.
"""
from __future__ import annotations

import argparse
import math

import numpy as np

import setkit

STOPS = ["fossils", "lighthouse model", "tapestry", "clockworks", "glass garden", "map room"]
POSITION_WEIGHTS = [6.0, 4.0, 3.0, 2.0, 1.0, 0.5]


def ranking_set():
    """The permutahedron of the position weights, or (if that family is not installed) a simplex."""
    try:
        return setkit.compile({"kind": "permutahedron", "weights": POSITION_WEIGHTS}), "permutahedron"
    except setkit.DescriptionError:
        return setkit.compile({"kind": "simplex", "dim": len(STOPS), "total": sum(POSITION_WEIGHTS)}), "simplex"


def diameter_bound(K):
    """sqrt(sum_i width_i^2) with width_i = support(e_i) + support(-e_i): the bounding-box diagonal."""
    E = np.eye(K.dim)
    widths = K.support(E) + K.support(-E)
    return float(np.sqrt(np.sum(widths ** 2)))


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="few rounds (for tests)")
    ap.add_argument("--seed", type=int, default=2024)
    args = ap.parse_args(argv)
    rng = np.random.default_rng(args.seed)
    T = 300 if args.quick else 5000
    K, kind = ranking_set()
    n = K.dim
    taste = rng.normal(0.0, 1.0, n)                       # hidden mean interest of each stop
    C = -(taste + rng.normal(0.0, 1.5, (T, n)))           # daily losses
    G = float(np.linalg.norm(C, axis=1).max())
    D = diameter_bound(K)
    eta = D / (G * math.sqrt(T))
    x = K.centroid()
    played = np.empty((T, n))
    for t in range(T):
        played[t] = x
        x = K.project(x - eta * C[t])
    loss = float(np.einsum("ij,ij->", C, played))
    best = K.lmo(C.sum(axis=0))
    best_loss = float(C.sum(axis=0) @ best)
    regret = loss - best_loss
    inside = bool(np.all(K.contains(played, tol=1e-7 * max(1.0, D))))
    order = np.argsort(-x)
    print(f"set: {kind} of dimension {n}")
    print(f"rounds: {T}")
    print(f"regret: {regret:.4f}")
    print(f"regret bound D*G*sqrt(T): {D * G * math.sqrt(T):.4f}")
    print(f"average regret per round: {regret / T:.6f}")
    print(f"all decisions inside the set: {'yes' if inside else 'no'}")
    print("final ranking of stops: " + ", ".join(STOPS[i] for i in order))
    print("stops by hidden interest: " + ", ".join(STOPS[i] for i in np.argsort(-taste)))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
