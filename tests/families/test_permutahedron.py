"""permutahedron: against the cvxpy reference, the rearrangement inequality, scipy's isotonic regression."""
import itertools

import numpy as np
import pytest
from scipy.optimize import isotonic_regression

import setkit
from setkit.errors import DescriptionError
from setkit.kernels.isotonic import decreasing_order, pav_decreasing, project_permutahedron

from .helpers import check_against_reference, check_batch_shapes, check_inside_fixed, sample_points


@pytest.mark.parametrize("scale", [1e-3, 1.0, 1e6])
@pytest.mark.parametrize("weights", [[5, 3, 3, 1, 0, 0, -2], [1, 1, 1, 1, 1], [4, 3, 2, 1, 0.5, 0.25]])
def test_permutahedron_against_reference(rng, scale, weights):
    K = setkit.permutahedron(weights=(scale * np.array(weights, float)).tolist())
    Y = sample_points(K, rng)
    n = K.dim
    C = np.concatenate([rng.standard_normal((4, n)), np.round(rng.standard_normal((2, n)))])
    check_against_reference(K, Y, C)
    check_batch_shapes(K, rng)


def test_permutahedron_inside_points_are_fixed(rng):
    w = np.array([3.0, 2.0, 2.0, 0.0, -1.0])
    K = setkit.permutahedron(weights=w.tolist())
    perms = np.array([rng.permutation(w) for _ in range(12)])
    lam = rng.dirichlet(np.ones(3), size=4)
    X = np.einsum("kj,kjn->kn", lam, perms.reshape(4, 3, 5))
    check_inside_fixed(K, X)
    check_inside_fixed(K, perms)          # the vertices themselves


def test_lmo_by_rearrangement_inequality(rng):
    # rearrangement inequality (Hardy, Littlewood and Polya, Inequalities, 1934, Theorem 368):
    # min over permutations of <c, w_pi> pairs the largest w with the smallest c. Brute force.
    w = np.array([4.0, 2.5, 2.5, 1.0, -1.0, 0.0])
    K = setkit.permutahedron(weights=w.tolist())
    perms = np.array(list(itertools.permutations(w)))
    for c in np.concatenate([rng.standard_normal((6, 6)), np.round(rng.standard_normal((3, 6)))]):
        best = (perms @ c).min()
        x = K.lmo(c)
        assert abs(c @ x - best) <= 1e-12 * np.abs(c).sum() * 4
        assert sorted(x) == sorted(w)                   # a vertex: a permutation of w
        assert abs(K.support(c) - (perms @ c).max()) <= 1e-12 * np.abs(c).sum() * 4


def test_projection_matches_scipy_isotonic_regression(rng):
    # scipy.optimize.isotonic_regression (decreasing) on y_sorted - w_sorted gives the projection
    for n in (1, 2, 7, 200, 5000):
        w = np.sort(rng.standard_normal(n))[::-1]
        if n > 3:
            w[1:3] = w[1]                                   # tied weights
        for y in (rng.standard_normal(n) * 3, np.round(rng.standard_normal(n)), w[::-1] + 0.01):
            order = np.argsort(-y, kind="stable")
            v = isotonic_regression(y[order] - w, increasing=False).x
            expected = np.empty(n)
            expected[order] = y[order] - v
            got = setkit.permutahedron(weights=w.tolist()).project(y)
            np.testing.assert_allclose(got, expected, atol=1e-10 * max(1, np.abs(y).max()))


def test_pav_matches_scipy(rng):
    # our pool-adjacent-violators vs scipy.optimize.isotonic_regression
    for n in (1, 3, 50, 10_000):
        s = rng.standard_normal(n)
        s[rng.random(n) < 0.3] = 0.25                       # ties
        out = np.empty(n)
        pav_decreasing(s, out)
        np.testing.assert_allclose(out, isotonic_regression(s, increasing=False).x, atol=1e-12)


def test_decreasing_order_exact_on_hard_inputs(rng):
    # the packed-key order is exact, including values that agree in their leading bits
    n = 60_000
    for y in (rng.standard_normal(n), np.round(rng.standard_normal(n), 2), 1 + 1e-13 * rng.standard_normal(n),
              np.concatenate([np.zeros(n // 2), -np.zeros(n // 2)]), rng.standard_normal(n) * 1e300,
              np.where(rng.random(n) < 0.5, 5e-324, -5e-324)):
        o = decreasing_order(y)
        assert np.array_equal(np.sort(o), np.arange(n))
        assert np.all(np.diff(y[o]) <= 0)


def test_long_projection_agrees_with_batch_path(rng):
    n = 70_000                                              # long single vectors use the packed order
    w = np.sort(rng.standard_normal(n))[::-1].copy()
    y = rng.standard_normal(n)
    a = project_permutahedron(y[None], w)[0]
    order = np.argsort(-y, kind="stable")
    v = isotonic_regression(y[order] - w, increasing=False).x
    b = np.empty(n)
    b[order] = y[order] - v
    np.testing.assert_allclose(a, b, atol=1e-10)


def test_membership_by_majorization():
    K = setkit.permutahedron(weights=[3.0, 1.0, 0.0])
    assert K.contains([1.0, 1.0, 2.0])                      # 2 <= 3, 3 <= 4, 4 = 4
    assert not K.contains([3.5, 0.5, 0.0])                  # largest entry above 3
    assert not K.contains([1.0, 1.0, 1.0])                  # wrong sum
    assert K.contains([3.0 + 1e-9, 1.0 - 1e-9, 0.0])        # within the default tolerance
    assert K.violation([3.5, 0.5, 0.0]) == pytest.approx(0.5)


def test_permutahedron_projection_hand_solved():
    # y = (10, 0, 0) onto P(3, 2, 1): pool the two last coordinates (common practice, KKT)
    K = setkit.permutahedron(weights=[1, 3, 2])
    np.testing.assert_allclose(K.project([0.0, 10.0, 0.0]), [1.5, 3.0, 1.5], atol=1e-15)
    # a point with equal coordinates goes to the centroid (the mean of w)
    np.testing.assert_allclose(K.project([7.0, 7.0, 7.0]), [2.0, 2.0, 2.0], atol=1e-15)


@pytest.mark.parametrize("spec, key, words", [
    ({"kind": "permutahedron"}, "weights", "the parameter 'weights' is required"),
    ({"kind": "permutahedron", "weights": []}, "weights", "at least one number"),
    ({"kind": "permutahedron", "weights": [[1, 2], [3, 4]]}, "weights", "must be a list"),
    ({"kind": "permutahedron", "weights": [1, "two"]}, "weights", "numeric"),
    ({"kind": "permutahedron", "weights": [1, float("inf")]}, "weights", "finite"),
    ({"kind": "permutahedron", "weights": [1, 2], "dim": 3}, "dim", "dim must equal the number of weights, 2; got 3."),
])
def test_permutahedron_bad_descriptions(spec, key, words):
    with pytest.raises(DescriptionError) as e:
        setkit.compile(spec)
    msg = str(e.value)
    assert msg.startswith(f"permutahedron (<dict>: {key})"), msg
    assert words in msg, msg
