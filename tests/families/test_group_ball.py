"""group_ball: against the cvxpy reference, closed forms (l2 and l1 balls), brute force, bad input."""
import numpy as np
import pytest
from scipy.optimize import brentq

import setkit
from setkit.errors import DescriptionError

from .helpers import check_against_reference, check_batch_shapes, check_inside_fixed, sample_points
from .norm_edges import check_empty_batches, check_extreme_magnitudes, check_zero_direction_and_origin


def group(**kw):
    return setkit.compile({"kind": "group_ball", **kw})


CASES = [dict(groups=[[0, 3], [1, 2, 4], [5]], radius=1e-3),
         dict(groups=[[0, 3], [1, 2, 4], [5]], radius=1.0, weights=[1.0, 0.5, 2.0]),
         dict(dim=7, group_size=3, radius=1e6),
         dict(dim=6, group_size=2, radius=2.5, weights=[0.5, 1.0, 3.0])]


@pytest.mark.parametrize("spec", CASES)
def test_group_ball_against_reference(rng, spec):
    K = group(**spec)
    Y = sample_points(K, rng, k=2)
    C = np.concatenate([rng.standard_normal((3, K.dim)), np.round(rng.standard_normal((2, K.dim)))])
    # some rounded directions vanish on a whole group; Clarabel then stops at "optimal_inaccurate"
    # (the loose reference of helpers.py still compares its answer within RTOL)
    check_against_reference(K, Y, C)
    check_batch_shapes(K, rng)


def test_group_ball_inside_points_are_fixed(rng):
    K = group(groups=[[0, 2], [1], [3, 4]], radius=2.0, weights=[1.0, 2.0, 0.5])
    X = K.lmo(rng.standard_normal((8, 5)))
    X = 0.5 * X[:4] + 0.3 * X[4:]
    check_inside_fixed(K, X)


def test_one_group_is_the_euclidean_ball(rng):
    # closed form (common practice): r y / ||y|| outside the ball
    K = group(dim=5, group_size=5, radius=1.5)
    for y in rng.standard_normal((6, 5)) * 3:
        want = y if np.linalg.norm(y) <= 1.5 else 1.5 * y / np.linalg.norm(y)
        np.testing.assert_allclose(K.project(y), want, atol=1e-14)


def test_singleton_groups_are_the_l1_ball(rng):
    # sign(y) max(|y| - theta, 0) with sum = r (Duchi et al. 2008, from memory); theta by scipy brentq
    K = group(dim=7, group_size=1, radius=1.2)
    for y in rng.standard_normal((6, 7)) * 2:
        a = np.abs(y)
        th = brentq(lambda t: np.maximum(a - t, 0).sum() - 1.2, 0.0, a.max(), xtol=1e-15, rtol=1e-15)
        np.testing.assert_allclose(K.project(y), np.sign(y) * np.maximum(a - th, 0), atol=1e-12)


def test_weighted_projection_is_a_weighted_soft_threshold_of_group_norms(rng):
    # KKT (common practice): x_g = y_g (1 - lam w_g / ||y_g||)_+ with sum_g w_g ||x_g|| = r
    groups = [[0, 1], [2, 3, 4], [5]]
    w = np.array([1.0, 0.4, 2.5])
    K = group(groups=groups, radius=0.8, weights=w.tolist())
    for y in rng.standard_normal((5, 6)) * 3:
        a = np.array([np.linalg.norm(y[g]) for g in groups])
        lam = brentq(lambda t: (w * np.maximum(a - t * w, 0)).sum() - 0.8, 0.0, (a / w).max(), xtol=1e-15)
        want = np.concatenate([y[g] * max(1 - lam * wg / ag, 0) for g, wg, ag in zip(groups, w, a)])
        order = np.concatenate(groups)
        got = K.project(y)[order]
        np.testing.assert_allclose(got, want, atol=1e-12)


def test_support_and_lmo_against_brute_force(rng):
    # the dual norm of sum_g w_g ||x_g|| is max_g ||c_g|| / w_g (common practice); brute force: the best
    # of the per-group extreme points -r/w_g c_g/||c_g||
    groups = [[0, 4], [1, 2], [3, 5, 6]]
    w = [2.0, 1.0, 0.7]
    K = group(groups=groups, radius=1.3, weights=w)
    for c in rng.standard_normal((6, 7)):
        cands = []
        for g, wg in zip(groups, w):
            x = np.zeros(7)
            x[g] = -(1.3 / wg) * c[g] / np.linalg.norm(c[g])
            cands.append(c @ x)
        assert abs(c @ K.lmo(c) - min(cands)) <= 1e-12
        np.testing.assert_allclose(K.support(c), -min(cands), rtol=1e-12)


def test_group_ball_edges(rng):
    for K in (group(groups=[[0, 3], [1, 2]], radius=1.0), group(dim=5, group_size=2, radius=1e-3, weights=[1, 2, 3]),
              group(dim=3, group_size=1, radius=0.0)):
        check_extreme_magnitudes(K, rng)
        check_empty_batches(K)
        check_zero_direction_and_origin(K)


def test_centroid_is_the_origin():
    np.testing.assert_array_equal(group(dim=4, group_size=2, radius=1.0).centroid(), np.zeros(4))


@pytest.mark.parametrize("spec, key, words", [
    ({"groups": [[0, 1], [1, 2]], "radius": 1.0}, "groups", "index 1 appears more than once"),
    ({"groups": [[0, 5]], "radius": 1.0}, "groups", "out of range"),
    ({"groups": [[0], []], "radius": 1.0}, "groups", "nonempty list"),
    ({"groups": [[0, 1.5]], "radius": 1.0}, "groups", "whole-number"),
    ({"groups": [[0, 1], [2]], "dim": 4, "radius": 1.0}, "dim", "partition"),
    ({"dim": 3, "group_size": 4, "radius": 1.0}, "group_size", "at most dim"),
    ({"dim": 4, "radius": 1.0}, "group_size", "required"),
    ({"dim": 4, "group_size": 2, "radius": 1.0, "weights": [1.0, 0.0]}, "weights", "positive"),
    ({"dim": 4, "group_size": 2, "radius": 1.0, "weights": [1.0, 2.0, 3.0]}, "weights", "length 2"),
    ({"radius": 1.0}, "groups", "required"),
])
def test_group_ball_bad_descriptions(spec, key, words):
    with pytest.raises(DescriptionError) as e:
        setkit.compile({"kind": "group_ball", **spec})
    msg = str(e.value)
    assert msg.startswith("group_ball (<dict>: " + key + ")"), msg
    assert words in msg
