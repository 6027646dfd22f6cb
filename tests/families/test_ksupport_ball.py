"""ksupport_ball: against the cvxpy reference, the definition by brute force over k-subsets, the l1 and
l2 special cases, bad input."""
import itertools

import numpy as np
import pytest
from scipy.optimize import brentq

import setkit
from setkit.errors import DescriptionError

from .helpers import check_against_reference, check_batch_shapes, check_inside_fixed, sample_points
from .norm_edges import check_empty_batches, check_extreme_magnitudes, check_zero_direction_and_origin


def ksup(n, k, r):
    return setkit.compile({"kind": "ksupport_ball", "dim": n, "k": k, "radius": r})


@pytest.mark.parametrize("n, k, r", [(5, 2, 1e-3), (5, 2, 1.0), (6, 3, 1e6), (4, 1, 2.5), (4, 4, 0.7), (7, 5, 3.0)])
def test_ksupport_ball_against_reference(rng, n, k, r):
    K = ksup(n, k, r)
    Y = sample_points(K, rng, k=2)
    C = np.concatenate([rng.standard_normal((3, n)), np.round(rng.standard_normal((2, n)))])
    check_against_reference(K, Y, C)
    check_batch_shapes(K, rng)


def test_ksupport_ball_inside_points_are_fixed(rng):
    K = ksup(6, 2, 1.5)
    X = K.lmo(rng.standard_normal((8, 6)))
    check_inside_fixed(K, 0.6 * X[:4] + 0.35 * X[4:])


def _norm_by_definition(x, k):
    # the k-support norm as the gauge of conv{||v||_0 <= k, ||v||_2 <= 1}: min sum_S ||v_S||_2 over
    # decompositions x = sum_S v_S, v_S supported on the k-subset S (Argyriou, Foygel and Srebro,
    # "Sparse prediction with the k-support norm", 2012, from memory); solved by cvxpy/Clarabel
    import cvxpy as cp
    n = x.size
    subsets = list(itertools.combinations(range(n), k))
    V = [cp.Variable(k) for _ in subsets]
    total = 0
    for S, v in zip(subsets, V):
        E = np.zeros((n, k))
        E[list(S), range(k)] = 1.0
        total = total + E @ v
    prob = cp.Problem(cp.Minimize(sum(cp.norm(v, 2) for v in V)), [total == x])
    prob.solve(solver=cp.CLARABEL)
    return prob.value


def test_norm_matches_the_definition(rng):
    for k in (1, 2, 3):
        K = ksup(5, k, 1.0)
        for x in rng.standard_normal((3, 5)):
            assert abs(float(K.node.norm(x[None, :])[0]) - _norm_by_definition(x, k)) <= 1e-6


def test_support_and_lmo_by_brute_force_over_subsets(rng):
    # the dual norm is max over k-subsets S of ||c_S||_2 (the extreme points are the unit k-sparse vectors)
    n, k, r = 6, 3, 1.7
    K = ksup(n, k, r)
    for c in np.concatenate([rng.standard_normal((5, n)), np.round(rng.standard_normal((3, n)))]):
        best = max(np.linalg.norm(c[list(S)]) for S in itertools.combinations(range(n), k))
        np.testing.assert_allclose(K.support(c), r * best, rtol=1e-12)
        assert abs(c @ K.lmo(c) + r * best) <= 1e-12


def test_k_one_is_the_l1_ball_and_k_n_the_euclidean_ball(rng):
    # l1: sign(y) (|y| - theta)_+ (Duchi et al. 2008, from memory, theta by brentq); l2: radial scaling
    K1 = ksup(6, 1, 1.2)
    K6 = ksup(6, 6, 1.2)
    for y in rng.standard_normal((5, 6)) * 2:
        a = np.abs(y)
        th = brentq(lambda t: np.maximum(a - t, 0).sum() - 1.2, 0.0, a.max(), xtol=1e-15, rtol=1e-15)
        np.testing.assert_allclose(K1.project(y), np.sign(y) * np.maximum(a - th, 0), atol=1e-11)
        want = y if np.linalg.norm(y) <= 1.2 else 1.2 * y / np.linalg.norm(y)
        np.testing.assert_allclose(K6.project(y), want, atol=1e-13)


def test_sparse_points_project_radially(rng):
    # a point with at most k nonzeros has k-support norm = l2 norm; its projection is radial
    K = ksup(6, 3, 1.0)
    y = np.array([0.0, 3.0, 0.0, -4.0, 0.0, 0.0])
    np.testing.assert_allclose(K.project(y), y / 5.0, atol=1e-15)


def test_long_vector_projection_is_certified(rng):
    n = 20_000
    K = ksup(n, 50, 2.0)
    y = rng.standard_normal(n)
    det = K.project(y, details=True)
    # the Frank-Wolfe certificate bounds (1/2)||p - p*||^2 (DEVELOPERS.md); here tiny
    assert np.sqrt(2 * max(float(det.certificate), 0.0)) <= 1e-6 * np.abs(y).max()
    assert float(det.residual) <= 1e-12


def test_ksupport_ball_edges(rng):
    for K in (ksup(5, 2, 1.0), ksup(3, 1, 1e-3), ksup(4, 4, 0.0), ksup(1, 1, 2.0)):
        check_extreme_magnitudes(K, rng)
        check_empty_batches(K)
        check_zero_direction_and_origin(K)
    # ties: equal magnitudes get equal answers
    P = ksup(4, 2, 1.0).project([2.0, -2.0, 2.0, 2.0])
    np.testing.assert_allclose(np.abs(P), np.full(4, np.abs(P[0])), atol=1e-15)


@pytest.mark.parametrize("spec, key, words", [
    ({"dim": 3, "k": 4, "radius": 1.0}, "k", "at most dim"),
    ({"dim": 3, "k": 0, "radius": 1.0}, "k", "at least 1"),
    ({"dim": 3, "radius": 1.0}, "k", "required"),
    ({"dim": 3, "k": 2, "radius": "big"}, "radius", "number"),
])
def test_ksupport_ball_bad_descriptions(spec, key, words):
    with pytest.raises(DescriptionError) as e:
        setkit.compile({"kind": "ksupport_ball", **spec})
    msg = str(e.value)
    assert msg.startswith("ksupport_ball (<dict>: " + key + ")"), msg
    assert words in msg
