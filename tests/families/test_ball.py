"""ball: norms 1, 2, inf against the cvxpy reference, closed forms, bad input."""
import numpy as np
import pytest
from scipy.optimize import brentq

import setkit
from setkit.errors import DescriptionError

from .helpers import check_against_reference, check_batch_shapes, check_inside_fixed, sample_points


@pytest.mark.parametrize("norm", [1, 2, "inf"])
@pytest.mark.parametrize("radius, center_scale", [(1e-3, 0.0), (1.0, 1.0), (1e6, 0.0), (2.0, 1e3), (1e3, 1e3)])
def test_ball_against_reference(rng, norm, radius, center_scale):
    n = 6
    c = (center_scale * rng.standard_normal(n)).tolist()
    K = setkit.compile({"kind": "ball", "dim": n, "norm": norm, "radius": radius, "center": c})
    Y = sample_points(K, rng)
    C = np.concatenate([rng.standard_normal((4, n)), np.round(rng.standard_normal((2, n)))])
    check_against_reference(K, Y, C)
    check_batch_shapes(K, rng)


def test_ball_inside_points_are_fixed(rng):
    for norm in (1, 2, "inf"):
        K = setkit.ball(dim=4, norm=norm, radius=2.0, center=[1.0, -1.0, 0.0, 3.0])
        U = rng.standard_normal((6, 4))
        p = {1: 1, 2: 2, "inf": np.inf}[norm]
        U *= (rng.random((6, 1)) * 2.0) / np.linalg.norm(U, ord=p, axis=1, keepdims=True)
        check_inside_fixed(K, K.node.center + U)


def test_l2_ball_closed_form(rng):
    # closed form (common practice): c + r (y - c) / ||y - c|| outside, distance ||y - c|| - r
    c = np.array([1.0, 2.0, -1.0])
    K = setkit.ball(dim=3, norm=2, radius=0.5, center=c.tolist())
    Y = c + rng.standard_normal((8, 3)) * 3
    d = np.linalg.norm(Y - c, axis=1)
    out = d > 0.5
    np.testing.assert_allclose(K.project(Y[out]), c + 0.5 * (Y[out] - c) / d[out, None], rtol=1e-14)
    np.testing.assert_allclose(K.distance(Y), np.maximum(d - 0.5, 0), rtol=1e-13, atol=1e-15)


def test_l1_ball_soft_threshold_form(rng):
    # l1-ball projection = sign(y) max(|y| - theta, 0) with sum max(|y| - theta, 0) = r
    # (Duchi, Shalev-Shwartz, Singer and Chandra, "Efficient projections onto the l1-ball for
    # learning in high dimensions", 2008, from memory); theta found here by scipy.optimize.brentq
    K = setkit.ball(dim=9, norm=1, radius=1.5)
    for y in rng.standard_normal((10, 9)) * 2:
        a = np.abs(y)
        if a.sum() <= 1.5:
            continue
        theta = brentq(lambda t: np.maximum(a - t, 0).sum() - 1.5, 0.0, a.max(), xtol=1e-15, rtol=1e-15)
        np.testing.assert_allclose(K.project(y), np.sign(y) * np.maximum(a - theta, 0), atol=1e-12)


def test_l1_ball_two_dimensional_hand_solved():
    # y = (a, b), a > b > 0, a + b > r: (r, 0) if a - b >= r else ((r + a - b)/2, (r - a + b)/2)
    # (common practice, from the KKT conditions)
    K = setkit.ball(dim=2, norm=1, radius=1.0)
    np.testing.assert_allclose(K.project([3.0, 0.5]), [1.0, 0.0], atol=1e-15)
    np.testing.assert_allclose(K.project([1.0, 0.8]), [0.6, 0.4], atol=1e-15)
    np.testing.assert_allclose(K.project([-1.0, 0.8]), [-0.6, 0.4], atol=1e-15)


def test_ball_support_is_dual_norm(rng):
    # support of ||x - c||_p <= r is <u, c> + r ||u||_q, 1/p + 1/q = 1 (common practice)
    c = rng.standard_normal(5)
    U = rng.standard_normal((7, 5))
    for norm, q in ((1, np.inf), (2, 2), ("inf", 1)):
        K = setkit.ball(dim=5, norm=norm, radius=0.7, center=c.tolist())
        np.testing.assert_allclose(K.support(U), U @ c + 0.7 * np.linalg.norm(U, ord=q, axis=1), rtol=1e-13)


def test_ball_radius_zero_is_the_center(rng):
    c = [1.0, -2.0, 3.0]
    for norm in (1, 2, "inf"):
        K = setkit.ball(dim=3, norm=norm, radius=0.0, center=c)
        Y = rng.standard_normal((4, 3))
        np.testing.assert_allclose(K.project(Y), np.broadcast_to(c, (4, 3)), atol=1e-15)
        np.testing.assert_allclose(K.lmo(Y), np.broadcast_to(c, (4, 3)), atol=1e-15)
        assert K.contains(c) and not K.contains([1.0, -2.0, 3.1])


def test_ball_dim_from_center_and_norm_spellings():
    K = setkit.compile({"kind": "ball", "center": [0, 0, 0, 0], "radius": 1, "norm": float("inf")})
    assert K.shape == (4,) and K.node.norm == "inf"
    assert setkit.compile({"kind": "ball", "dim": 2, "radius": 1}).node.norm == 2   # default norm 2


@pytest.mark.parametrize("spec, key, words", [
    ({"kind": "ball", "dim": 3, "radius": -1.0}, "radius", "radius must be at least 0.0; got -1.0."),
    ({"kind": "ball", "dim": 3}, "radius", "the parameter 'radius' is required"),
    ({"kind": "ball", "dim": 3, "radius": "wide"}, "radius", "radius must be a number; got 'wide'."),
    ({"kind": "ball", "dim": 3, "radius": 1, "norm": 3}, "norm", "norm must be one of 1, 2, inf; got 3."),
    ({"kind": "ball", "dim": 3, "radius": 1, "center": [0, 0]}, "center", "length 3; got length 2"),
    ({"kind": "ball", "radius": 1}, "dim", "dim is required"),
    ({"kind": "ball", "dim": 2, "radius": float("inf")}, "radius", "finite"),
])
def test_ball_bad_descriptions(spec, key, words):
    with pytest.raises(DescriptionError) as e:
        setkit.compile(spec)
    msg = str(e.value)
    assert msg.startswith(f"ball (<dict>: {key})"), msg
    assert words in msg, msg
