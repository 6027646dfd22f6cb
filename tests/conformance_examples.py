"""Small example instances for families that do not (yet) offer ``examples()`` themselves.

tests/test_conformance.py uses a family's own ``examples()`` / ``random_example(rng)``
when present and these otherwise, so that every registered family meets the bar.
"""

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
