"""elastic_ball: against the cvxpy reference, KKT forms solved by scipy's brentq, l1/l2 special cases,
bad input."""
import numpy as np
import pytest
from scipy.optimize import brentq

import setkit
from setkit.errors import DescriptionError

from .helpers import check_against_reference, check_batch_shapes, check_inside_fixed, sample_points
from .norm_edges import check_empty_batches, check_extreme_magnitudes, check_zero_direction_and_origin


def elastic(n, r, mix):
    return setkit.compile({"kind": "elastic_ball", "dim": n, "radius": r, "mix": mix})


def value(x, r, a):
    return a * np.abs(x).sum() + 0.5 * (1 - a) * (x @ x)


@pytest.mark.parametrize("n, r, mix", [(5, 1e-3, 0.5), (6, 2.0, 0.5), (4, 1e6, 0.3), (5, 2.5, 1.0), (4, 0.5, 0.0),
                                       (6, 1.5, 0.9)])
def test_elastic_ball_against_reference(rng, n, r, mix):
    K = elastic(n, r, mix)
    Y = sample_points(K, rng, k=2)
    C = np.concatenate([rng.standard_normal((3, n)), np.round(rng.standard_normal((2, n)))])
    # Clarabel stops at "optimal_inaccurate" on some of these points; the loose reference of
    # helpers.py is still compared within RTOL, and the KKT checks below are exact
    check_against_reference(K, Y, C)
    check_batch_shapes(K, rng)


def test_elastic_ball_inside_points_are_fixed(rng):
    K = elastic(5, 1.5, 0.4)
    X = K.lmo(rng.standard_normal((8, 5)))
    check_inside_fixed(K, 0.55 * X[:4] + 0.4 * X[4:])


def test_projection_is_soft_threshold_then_scale(rng):
    # KKT of min ||x - y||^2 / 2 + lam (a ||x||_1 + b/2 ||x||^2): x = sign(y) (|y| - lam a)_+ / (1 + lam b)
    # (common practice); lam from the tight constraint by scipy.optimize.brentq
    for a, r in ((0.5, 1.0), (0.2, 3.0), (0.95, 0.4)):
        K = elastic(7, r, a)
        b = 1 - a
        for y in rng.standard_normal((4, 7)) * 3:
            z = np.abs(y)

            def x_of(lam):
                return np.sign(y) * np.maximum(z - lam * a, 0) / (1 + lam * b)
            if value(y, r, a) <= r:
                np.testing.assert_array_equal(K.project(y), y)
                continue
            lam = brentq(lambda t: value(x_of(t), r, a) - r, 0.0, 1e6, xtol=1e-15, rtol=1e-15, maxiter=500)
            np.testing.assert_allclose(K.project(y), x_of(lam), atol=1e-11)


def test_lmo_by_its_kkt_form(rng):
    # maximizer of <c, x>: x = sign(c) (eta |c| - a)_+ / b with eta from the tight constraint (brentq)
    for a, r in ((0.5, 1.0), (0.2, 3.0), (0.95, 0.4)):
        K = elastic(6, r, a)
        b = 1 - a
        for c in rng.standard_normal((4, 6)):
            z = np.abs(c)

            def x_of(eta):
                return np.sign(c) * np.maximum(eta * z - a, 0) / b
            eta = brentq(lambda e: value(x_of(e), r, a) - r, a / z.max(), 1e6, xtol=1e-15, rtol=1e-15)
            np.testing.assert_allclose(K.lmo(-c), x_of(eta), atol=1e-11)
            np.testing.assert_allclose(K.support(c), c @ x_of(eta), rtol=1e-11)


def test_pure_mixes_are_l1_and_l2_balls(rng):
    # mix 1: the l1 ball of the radius, sign(y)(|y| - theta)_+ (Duchi et al. 2008, from memory);
    # mix 0: the Euclidean ball of radius sqrt(2 r), radial scaling
    K1 = elastic(6, 1.3, 1.0)
    K0 = elastic(6, 0.8, 0.0)
    rho = np.sqrt(1.6)
    for y in rng.standard_normal((5, 6)) * 2:
        a = np.abs(y)
        th = brentq(lambda t: np.maximum(a - t, 0).sum() - 1.3, 0.0, a.max(), xtol=1e-15, rtol=1e-15)
        np.testing.assert_allclose(K1.project(y), np.sign(y) * np.maximum(a - th, 0), atol=1e-12)
        want = y if np.linalg.norm(y) <= rho else rho * y / np.linalg.norm(y)
        np.testing.assert_allclose(K0.project(y), want, atol=1e-13)
        np.testing.assert_allclose(K0.support(y), rho * np.linalg.norm(y), rtol=1e-13)
        np.testing.assert_allclose(K1.support(y), 1.3 * a.max(), rtol=1e-13)


def test_elastic_ball_edges(rng):
    for K in (elastic(5, 1.0, 0.5), elastic(3, 1e-3, 0.9), elastic(4, 2.0, 0.0), elastic(4, 0.0, 0.5),
              elastic(3, 1.0, 1.0), elastic(4, 1e6, 1e-9)):
        check_extreme_magnitudes(K, rng)
        check_empty_batches(K)
        check_zero_direction_and_origin(K)
    # ties: equal magnitudes get equal answers
    P = elastic(4, 1.0, 0.5).project([3.0, -3.0, 3.0, 1.0])
    np.testing.assert_allclose(np.abs(P[:3]), np.full(3, np.abs(P[0])), atol=1e-15)


@pytest.mark.parametrize("spec, key, words", [
    ({"dim": 3, "radius": 1.0, "mix": 1.5}, "mix", "at most 1"),
    ({"dim": 3, "radius": 1.0, "mix": -0.1}, "mix", "at least 0"),
    ({"dim": 3, "radius": 1.0}, "mix", "required"),
    ({"dim": 3, "radius": -1.0, "mix": 0.5}, "radius", "at least 0"),
    ({"dim": 3, "radius": 1.0, "mix": 0.5, "alpha": 0.5}, "alpha", "unknown parameter"),
])
def test_elastic_ball_bad_descriptions(spec, key, words):
    with pytest.raises(DescriptionError) as e:
        setkit.compile({"kind": "elastic_ball", **spec})
    msg = str(e.value)
    assert msg.startswith("elastic_ball (<dict>: " + key + ")"), msg
    assert words in msg
