"""Regression: OSQP projection of points far from a small set (an affine image of a simplex).

OSQP fixes its cost scaling at setup; set up with q = 0 it stalled (maximum iterations,
constraint residual 2.5e-4) on the point below, which `setkit compare` of the catalog entry
centered-forecast-weights.yaml produces. The backend now keeps one solver per decade of |y|.
"""
import numpy as np
import pytest

import setkit
from setkit.backends.osqp import OsqpBackend

CENTRED = {"kind": "affine", "scale": 2.0, "shift": -0.5, "set": {"kind": "simplex", "dim": 4}}


def _sort_projection(y, total):
    # projection onto {x >= 0, sum x = total} by sorting: Held, Wolfe and Crowder, "Validation of
    # subgradient optimization", 1974 (the sort-and-threshold rule, from memory)
    u = np.sort(y)[::-1]
    css = np.cumsum(u) - total
    k = np.nonzero(u - css / np.arange(1, y.size + 1) > 0)[0][-1]
    return np.maximum(y - css[k] / (k + 1), 0.0)


def _expected(y):
    # {2 (w - 1/4) : w in the simplex} = {x >= -1/2, sum x = 0}: shift by 1/2, project onto the
    # simplex of total 2, shift back
    return _sort_projection(y + 0.5, 2.0) - 0.5


def test_far_point_on_a_fresh_workspace():
    K = setkit.compile(CENTRED).with_backends(project="osqp")
    y = np.array([-755.21001425, 4085.54321498, 1293.4059924, 1326.12674475])
    det = K.project(y, details=True)
    assert det.status == "solved"
    # worked by hand as well: the far largest coordinate takes all the mass, the vertex (-.5, 1.5, -.5, -.5)
    np.testing.assert_allclose(det.point, [-0.5, 1.5, -0.5, -0.5], atol=1e-9)


@pytest.mark.parametrize("seed", range(4))
def test_points_of_every_scale_in_one_workspace(seed):
    rng = np.random.default_rng(seed)
    K = setkit.compile(CENTRED).with_backends(project="osqp")
    scales = 10.0 ** rng.uniform(-3, 6, 40)
    Y = rng.standard_normal((40, 4)) * scales[:, None]
    P = K.project(Y)
    for y, p in zip(Y, P):
        np.testing.assert_allclose(p, _expected(y), atol=1e-7 * max(1.0, np.abs(y).max()) ** 0.5)
    # and against the cvxpy reference on a few of them
    R = K.with_backends(project="reference").project(Y[:6])
    np.testing.assert_allclose(P[:6], R, atol=1e-6)


def test_decades_pick_solvers():
    assert OsqpBackend.decade(np.array([0.5, -3.0])) == 0
    assert OsqpBackend.decade(np.array([12.0])) == 1
    assert OsqpBackend.decade(np.array([-4085.5])) == 3
    assert OsqpBackend.decade(np.array([1e9])) == 5


def test_points_inside_are_their_own_projection_and_print_nothing(capsys):
    # OSQP 1.x prints "Polishing not needed" on stdout when no constraint is active; the backend
    # returns a point of the set as its own projection (exact) without a solve
    K = setkit.compile({"kind": "polyhedron", "A": [[1, 1], [-1, 2]], "b": [1, 2], "lower": [-1, -1],
                        "upper": [3, 3]}).with_backends(project="osqp")
    Y = np.array([[0.1, 0.2], [-0.5, 0.3], [0.5, 0.5]])      # the last one on the facet x1 + x2 = 1
    det = K.project(Y, details=True)
    np.testing.assert_array_equal(det.point, Y)
    assert list(det.iterations) == [0, 0, 0]
    # a point outside still goes to OSQP: worked by hand, (2, 2) projects onto x1 + x2 = 1 at (0.5, 0.5)
    np.testing.assert_allclose(K.project([2.0, 2.0]), [0.5, 0.5], atol=1e-9)
    assert capsys.readouterr().out == ""


def test_extended_formulation_with_degenerate_auxiliaries():
    # the fair-exposure catalog set: a permutahedron (64 auxiliary doubly-stochastic variables with no
    # quadratic term in the projection QP) cut by two floors. Adaptive rho cycled there for 10^5
    # iterations on 3 of these points (setkit compare, seed 0); the fixed-rho restart solver solves them
    from setkit.agreement import seeded_points
    K = setkit.load("catalog/fair-exposure-ranking.yaml")
    # the first 16 rows: 4 points each inside (by K's projection), near, at scale and far
    Y = seeded_points(K, 4, np.random.default_rng(0), inside_by=K)[0][:16].reshape((-1,) + K.shape)
    det = K.with_backends(project="osqp").project(Y, details=True)
    assert all(s == "solved" for s in det.status)
    assert any("rho fixed" in b for b in det.backend_status)
    R = K.with_backends(project="reference").project(Y[[0, 11, 13, 15]])
    np.testing.assert_allclose(det.point[[0, 11, 13, 15]], R, atol=1e-6 * np.abs(Y[[0, 11, 13, 15]]).max())
    assert np.all(det.residual <= 1e-7)
