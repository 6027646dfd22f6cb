"""KL projection onto flow polytopes: dual Newton on node potentials."""
import math

import numpy as np
import pytest

import setkit
import setkit.testing as T
from setkit.families import lookup
from setkit.kernels.bregman import flow_kl, kl_certificate

SERIES_PARALLEL = {"kind": "flow", "nodes": ["a", "b", "c"],
                   "edges": [{"from": "a", "to": "b"}, {"from": "b", "to": "c"}, {"from": "a", "to": "c"}],
                   "supply": {"a": 2.0, "c": -2.0}}


def test_route_is_native_and_explained():
    K = setkit.compile(SERIES_PARALLEL)
    route = K.routes()["project_kl"]
    assert route.category == "native" and "Dual Newton" in route.reason
    assert "Dual Newton" in K.explain()


def test_series_parallel_closed_form():
    # a -> b -> c carries u on both edges, a -> c carries S - u; the first-order condition
    # 2 log u - log y1 - log y2 = log(S - u) - log y3 gives y3 u^2 / (y1 y2) + u - S = 0 (derived by hand)
    K = setkit.compile(SERIES_PARALLEL)
    for y in ([1.0, 2.0, 3.0], [1e-3, 5.0, 0.2], [40.0, 40.0, 1e-2]):
        y1, y2, y3 = y
        S = 2.0
        a = y3 / (y1 * y2)
        u = (-1.0 + math.sqrt(1.0 + 4.0 * a * S)) / (2.0 * a)
        # the kernel stops at conservation residual 1e-10 x scale: compare absolutely at that level
        np.testing.assert_allclose(K.project(y, geometry="kl"), [u, u, S - u], rtol=0, atol=1e-9 * S)


def test_parallel_edges_are_a_scaled_simplex():
    # two parallel edges carry supply S in proportion to y (the simplex closed form, common practice)
    X, info = flow_kl(np.log([[1.0, 3.0], [1e-5, 1e-5]]), np.array([0, 0]), np.array([1, 1]), np.zeros(2),
                      np.full(2, np.inf), np.array([2.0, -2.0]))
    np.testing.assert_allclose(X, [[0.5, 1.5], [1.0, 1.0]], rtol=0, atol=2e-10)
    assert info["status"] == ["solved", "solved"]


@pytest.mark.parametrize("k", range(4))
def test_examples_pass_the_kl_check(k):
    specs = list(lookup("flow").examples()) + [lookup("flow").random_example(np.random.default_rng(k))]
    spec = specs[k % len(specs)] if k < len(specs) else specs[-1]
    out = T.check_kl_projection(spec, seed=k, reference_points=2)
    assert all(o.worst <= 1.0 for o in out)


def test_far_inputs_stay_feasible_and_certified():
    rng = np.random.default_rng(11)
    for _ in range(3):
        K = setkit.compile(lookup("flow").random_example(rng))
        for shift in (-300.0, 300.0):
            t = rng.standard_normal(K.dim) + shift
            r = K.project(t, geometry="kl", log_input=True, details=True)
            x = r.point
            assert r.status == "solved"
            assert float(K.violation(x)) <= 1e-9 * max(1.0, float(K.node.scale()), float(np.abs(x).max()))
            gap = float(kl_certificate(t[None], x[None], lambda G: K.lmo(G))[0])
            g = np.log(np.maximum(x, 1e-300)) - t
            assert gap <= 1e-9 * (1.0 + float(np.abs(g) @ (x + np.abs(K.lmo(g)))))


def test_negative_lower_bound_leaves_the_orthant():
    spec = {"kind": "flow", "nodes": ["a", "b"], "edges": [{"from": "a", "to": "b", "lower": -1.0, "capacity": 2.0},
                                                           {"from": "b", "to": "a", "capacity": 2.0}],
            "supply": {"a": 0.0, "b": 0.0}}
    K = setkit.compile(spec)
    with pytest.raises(setkit.UnsupportedOperationError, match=r"edge 0 has lower bound -1 < 0"):
        K.project([1.0, 1.0], geometry="kl")


def test_not_converging_raises_solve_error():
    tail, head = np.array([0, 1, 0]), np.array([1, 2, 2])
    with pytest.raises(setkit.SolveError, match="dual Newton on the node potentials stopped after 1 steps"):
        flow_kl(np.array([[5.0, -5.0, 0.0]]), tail, head, np.zeros(3), np.full(3, np.inf),
                np.array([2.0, 0.0, -2.0]), max_iterations=1)


def test_overflow_without_capacity_is_an_input_error():
    tail, head = np.array([0, 0]), np.array([1, 1])
    with pytest.raises(setkit.InputError, match="overflows"):
        flow_kl(np.array([[800.0, 0.0]]), tail, head, np.zeros(2), np.full(2, np.inf), np.array([1.0, -1.0]))
