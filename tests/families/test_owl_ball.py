"""owl_ball: against the cvxpy reference, scipy's isotonic regression, l1/l-inf closed forms, vertex
enumeration, bad input."""
import itertools

import numpy as np
import pytest
from scipy.optimize import brentq, isotonic_regression

import setkit
from setkit.errors import DescriptionError

from .helpers import check_against_reference, check_batch_shapes, check_inside_fixed, sample_points
from .norm_edges import check_empty_batches, check_extreme_magnitudes, check_zero_direction_and_origin


def owl(w, r):
    return setkit.compile({"kind": "owl_ball", "weights": list(map(float, w)), "radius": r})


@pytest.mark.parametrize("w, r", [([3, 2, 2, 1, 0.5], 1e-3), ([3, 2, 2, 1, 0.5], 1.0), ([1, 1, 0, 0, 0, 0], 1e6),
                                  ([2, 1.5, 1, 0.5], 7.5)])
def test_owl_ball_against_reference(rng, w, r):
    K = owl(w, r)
    Y = sample_points(K, rng, k=2)
    C = np.concatenate([rng.standard_normal((3, K.dim)), np.round(rng.standard_normal((2, K.dim)))])
    check_against_reference(K, Y, C)
    check_batch_shapes(K, rng)


def test_owl_ball_inside_points_are_fixed(rng):
    K = owl([2, 1.5, 1, 1, 0.2], 2.0)
    X = K.lmo(rng.standard_normal((8, 5)))
    check_inside_fixed(K, 0.5 * X[:4] + 0.4 * X[4:])


def _owl_projection_by_isotonic(y, w, r):
    # prox of lam * OWL on sorted magnitudes = max(isotonic_regression(z - lam w, decreasing), 0)
    # (Zeng and Figueiredo, "The ordered weighted l1 norm", 2014, from memory), lam by scipy brentq
    order = np.argsort(-np.abs(y))
    z = np.abs(y)[order]
    if z @ w <= r:
        return y.copy()

    def u(lam):
        return np.maximum(isotonic_regression(z - lam * w, increasing=False).x, 0.0)
    hi = (np.cumsum(z) / np.cumsum(w)).max()
    lam = brentq(lambda t: w @ u(t) - r, 0.0, hi, xtol=1e-15, rtol=1e-15, maxiter=500)
    x = np.empty_like(y)
    x[order] = u(lam)
    return np.sign(y) * x


def test_projection_matches_isotonic_regression(rng):
    w = np.sort(rng.uniform(0, 2, 9))[::-1]
    K = owl(w, 1.7)
    for y in rng.standard_normal((6, 9)) * 3:
        np.testing.assert_allclose(K.project(y), _owl_projection_by_isotonic(y, w, 1.7), atol=1e-10)


def test_long_vector_projection_matches_isotonic_regression(rng):
    n = 100_000
    w = np.sort(rng.uniform(0, 1, n))[::-1]
    y = rng.standard_normal(n) * 0.01
    K = owl(w, 3.0)
    P = K.project(y)
    want = _owl_projection_by_isotonic(y, w, 3.0)
    assert np.abs(P - want).max() <= 1e-9
    assert K.violation(P) <= 1e-12


def test_equal_weights_give_the_l1_ball_and_one_weight_the_linf_ball(rng):
    # l1: sign(y) (|y| - theta)_+ with theta by brentq (Duchi et al. 2008, from memory); l-inf: clipping
    K1 = owl([1.0] * 6, 1.3)
    Kinf = owl([1.0] + [0.0] * 5, 0.6)
    for y in rng.standard_normal((5, 6)) * 2:
        a = np.abs(y)
        th = brentq(lambda t: np.maximum(a - t, 0).sum() - 1.3, 0.0, a.max(), xtol=1e-15, rtol=1e-15)
        np.testing.assert_allclose(K1.project(y), np.sign(y) * np.maximum(a - th, 0), atol=1e-12)
        np.testing.assert_allclose(Kinf.project(y), np.clip(y, -0.6, 0.6), atol=1e-15)


def test_support_and_lmo_against_vertex_enumeration(rng):
    # the extreme points are signed permutations of (1, ..., 1, 0, ..., 0) r / W_k (Zeng and
    # Figueiredo 2014, from memory): brute force over all of them for n = 4
    w = np.array([2.0, 1.0, 1.0, 0.25])
    K = owl(w, 1.1)
    verts = []
    for k in range(1, 5):
        for S in itertools.combinations(range(4), k):
            for sg in itertools.product([-1.0, 1.0], repeat=k):
                v = np.zeros(4)
                v[list(S)] = np.array(sg) * 1.1 / w[:k].sum()
                verts.append(v)
    V = np.array(verts)
    for c in np.concatenate([rng.standard_normal((5, 4)), np.round(rng.standard_normal((3, 4)))]):
        np.testing.assert_allclose(K.support(c), (V @ c).max(), rtol=1e-12, atol=1e-15)
        assert abs(c @ K.lmo(c) - (V @ c).min()) <= 1e-12


def test_owl_ball_edges(rng):
    for K in (owl([3, 2, 2, 1, 0.5], 1.0), owl([1, 0, 0], 1e-3), owl([1.0], 0.0), owl([1, 1, 1, 1], 2.0)):
        check_extreme_magnitudes(K, rng)
        check_empty_batches(K)
        check_zero_direction_and_origin(K)
    # ties: equal magnitudes are shrunk alike
    K = owl([3, 2, 1], 1.0)
    np.testing.assert_allclose(K.project([5.0, -5.0, 5.0]), [1 / 6, -1 / 6, 1 / 6], atol=1e-15)


@pytest.mark.parametrize("spec, key, words", [
    ({"weights": [1.0, 2.0], "radius": 1.0}, "weights", "nonincreasing"),
    ({"weights": [1.0, -0.5], "radius": 1.0}, "weights", "nonnegative"),
    ({"weights": [0.0, 0.0], "radius": 1.0}, "weights", "must be positive"),
    ({"weights": [], "radius": 1.0}, "weights", "one weight per coordinate"),
    ({"weights": [1.0], "radius": -2.0}, "radius", "at least 0"),
])
def test_owl_ball_bad_descriptions(spec, key, words):
    with pytest.raises(DescriptionError) as e:
        setkit.compile({"kind": "owl_ball", **spec})
    msg = str(e.value)
    assert msg.startswith("owl_ball (<dict>: " + key + ")"), msg
    assert words in msg
