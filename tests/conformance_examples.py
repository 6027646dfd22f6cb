"""Small example instances for families that do not (yet) offer ``examples()`` themselves.

tests/test_conformance.py uses a family's own ``examples()`` / ``random_example(rng)``
when present and these otherwise, so that every registered family meets the bar.
"""
import numpy as np

FALLBACK_EXAMPLES = {
    "budget": [
        {"dim": 4, "total": 1.0, "upper": 0.5},
        {"dim": 5, "total": 2.0, "lower": [0.1, 0, 0, 0.2, 0], "upper": [1, 0.6, 0.9, 1, 0.5],
         "weights": [1, 2, 1, 0.5, 1]},
        {"dim": 3, "total": 1.5, "upper": 1.0, "mode": "at_most"},
    ],
    "ball": [
        {"dim": 3, "norm": 2, "radius": 1.5, "center": [0.5, -1.0, 2.0]},
        {"dim": 4, "norm": 1, "radius": 0.7},
        {"dim": 3, "norm": "inf", "radius": 2.0, "center": [1.0, 0.0, -1.0]},
    ],
    "permutahedron": [
        {"weights": [3.0, 1.0, 0.5, 0.0]},
        {"weights": [1.0, 1.0, 0.25, 0.25, 0.1]},
    ],
    "transport": [
        {"rows": [3.0, 2.0], "cols": [1.0, 2.5, 1.5]},
        {"rows": [1.0, 1.0, 2.0], "cols": [2.0, 2.0]},
    ],
    "birkhoff": [{"n": 3}, {"n": 4}],
    "flow": [
        {"nodes": ["a", "b", "c", "d"],
         "edges": [{"from": "a", "to": "b", "capacity": 2}, {"from": "a", "to": "c", "capacity": 2},
                   {"from": "b", "to": "d", "capacity": 2}, {"from": "c", "to": "d", "capacity": 1.5, "lower": 0.5},
                   {"from": "b", "to": "c", "capacity": 1}],
         "supply": {"a": 3, "d": -3}},
    ],
    "polyhedron": [
        {"A": [[1.0, 1.0, 0.0], [0.0, -1.0, 1.0]], "b": [1.0, 0.2], "lower": [0, 0, 0], "upper": [1, 1, 1]},
        {"A": [[1.0, 2.0]], "b": [2.0], "C": [[1.0, -1.0]], "d": [0.0], "lower": [-1, -1], "upper": [3, 3]},
    ],
    "hull": [
        {"points": [[0.0, 0.0], [1.0, 0.0], [0.0, 2.0], [1.0, 1.0], [0.4, 0.4]]},
        {"points": [[1.0, 0.0, 0.0], [0.0, 1.0, 0.0], [0.0, 0.0, 1.0], [1.0, 1.0, 1.0]]},
    ],
}


# -- one seeded random instance per family (for families without random_example(rng)) ------------
def _budget(rng):
    n = int(rng.integers(2, 7))
    hi = rng.uniform(0.3, 1.0, n).round(3)
    return {"dim": n, "total": float(np.round(0.6 * hi.sum(), 3)), "upper": hi.tolist(),
            "weights": rng.uniform(0.5, 2.0, n).round(2).tolist()}


def _ball(rng):
    n = int(rng.integers(2, 6))
    return {"dim": n, "norm": [1, 2, "inf"][int(rng.integers(3))], "radius": round(float(rng.uniform(0.2, 3)), 3),
            "center": rng.normal(size=n).round(3).tolist()}


def _permutahedron(rng):
    return {"weights": np.sort(rng.uniform(0, 2, int(rng.integers(2, 7))).round(3))[::-1].tolist()}


def _transport(rng):
    m, n = int(rng.integers(2, 4)), int(rng.integers(2, 5))
    rows = rng.uniform(0.5, 3, m).round(3)
    cols = rng.dirichlet(np.ones(n)) * rows.sum()
    cols[-1] = rows.sum() - cols[:-1].sum()
    return {"rows": rows.tolist(), "cols": cols.tolist()}


def _hull(rng):
    n = int(rng.integers(2, 4))
    return {"points": rng.normal(size=(int(rng.integers(n + 1, n + 6)), n)).round(3).tolist()}


def _polyhedron(rng):
    n = int(rng.integers(2, 5))
    A = rng.normal(size=(int(rng.integers(1, 4)), n)).round(3)
    return {"A": A.tolist(), "b": (np.abs(A).sum(axis=1) * 0.5).round(3).tolist(),
            "lower": [-1.0] * n, "upper": [1.0] * n}


FALLBACK_RANDOM = {"budget": _budget, "ball": _ball, "permutahedron": _permutahedron,
                   "transport": _transport, "birkhoff": lambda rng: {"n": int(rng.integers(2, 5))},
                   "hull": _hull, "polyhedron": _polyhedron}
