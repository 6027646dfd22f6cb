"""Flow polytopes (issue 11): far points answer at every magnitude, the LMO with data near 1e6 never
claims emptiness, and one far row of a batch never changes the other rows.

Independent checks: scipy.optimize.linprog (HiGHS) on the same constraints {B x = s, lo <= x <= hi};
for a point y far from a bounded polytope in a generic direction, the projection is the vertex
maximizing <y, x> (the normal cone of that vertex contains y - p; common practice)."""
import numpy as np
import pytest
from scipy.optimize import linprog

import setkit


def _nine_node_flow(seed, scale=1e6):
    """A feasible 9-node flow with capacities and supplies near ``scale`` (a random flow inside)."""
    rng = np.random.default_rng(seed)
    n, m = 9, 16
    tails, heads = [], []
    for k in range(1, n):
        a, b = k, int(rng.integers(0, k))
        if rng.random() < 0.5:
            a, b = b, a
        tails.append(a)
        heads.append(b)
    while len(tails) < m:
        a, b = (int(v) for v in rng.integers(0, n, 2))
        if a != b:
            tails.append(a)
            heads.append(b)
    x0 = rng.uniform(0, 1, m) * scale
    lo = np.maximum(0, x0 - rng.uniform(0, 1, m) * scale)
    hi = x0 + rng.uniform(0, 1, m) * scale
    sup = np.zeros(n)
    np.add.at(sup, tails, x0)
    np.add.at(sup, heads, -x0)
    spec = {"kind": "flow", "nodes": n,
            "edges": [{"from": a, "to": b, "capacity": float(c), "lower": float(lw)}
                      for a, b, c, lw in zip(tails, heads, hi, lo)],
            "supply": {i: float(s) for i, s in enumerate(sup) if s != 0}}
    B = np.zeros((n, m))
    B[tails, range(m)] = 1.0
    B[heads, range(m)] -= 1.0
    return spec, B, sup, np.column_stack([lo, hi])


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_lmo_with_data_near_1e6_is_never_infeasible(seed):
    spec, B, sup, bounds = _nine_node_flow(seed)
    K = setkit.compile(spec)
    C = np.random.default_rng(seed + 10).standard_normal((6, B.shape[1]))
    for c, x in zip(C, K.lmo(C)):
        res = linprog(c, A_eq=B, b_eq=sup, bounds=bounds, method="highs")
        assert res.status == 0
        assert abs(c @ x - res.fun) <= 1e-9 * 1e6 * np.abs(c).sum()
        assert K.contains(x)


@pytest.mark.parametrize("k", [16, 17, 18, 20, 50, 100, 200, 300])
def test_far_points_answer_with_the_exposed_vertex(k):
    spec, B, sup, bounds = _nine_node_flow(k)
    K = setkit.compile(spec)
    rng = np.random.default_rng(k)
    Y = rng.standard_normal((4, B.shape[1])) * 10.0 ** k
    X = K.project(Y)
    for y, x in zip(Y, X):
        res = linprog(-y / np.abs(y).max(), A_eq=B, b_eq=sup, bounds=bounds, method="highs-ds")
        assert res.status == 0
        np.testing.assert_allclose(x, res.x, rtol=0, atol=1e-7 * 1e6)
        assert np.abs(B @ x - sup).max() <= 1e-9 * 1e6
        assert np.all(x >= bounds[:, 0] - 1e-9) and np.all(x <= bounds[:, 1] + 1e-9)
    assert K.contains(X).all()


def test_one_far_row_does_not_change_the_other_rows_of_a_flow_batch():
    spec, B, sup, bounds = _nine_node_flow(5, scale=10.0)
    K = setkit.compile(spec)
    rng = np.random.default_rng(3)
    y0 = 10.0 * rng.standard_normal(B.shape[1])
    alone = K.project(y0)
    for far in (1e12, 1e17, 1e100):
        X = K.project(np.array([y0, far * rng.standard_normal(B.shape[1]), y0 + 1.0]))
        assert np.abs(X[0] - alone).max() <= 1e-12 * 10
        assert np.abs(X[2] - K.project(y0 + 1.0)).max() <= 1e-12 * 10
        assert K.contains(X).all()
