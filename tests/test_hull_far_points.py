"""Projection onto a convex hull at every magnitude of y (1e-300..1e300) and of the data (issue 11).

The checks use closed forms: the hull of the corners of a box is the box, whose projection is the
coordinate-wise clip (common practice); on an edge exposed by a normal n, the projection of
y = t n + a (1, 1) is the clip of a onto the edge (hand-derived, orthogonal decomposition).
"""
import math

import numpy as np
import pytest

import setkit
from setkit.kernels.hull import nearest_in_hull

CORNERS = np.array([[0.0, 0.0, 0.0], [1.0, 0, 0], [0, 1.0, 0], [0, 0, 1.0], [1.0, 1, 0], [1.0, 0, 1],
                    [0, 1.0, 1], [1.0, 1, 1], [0.5, 0.5, 0.5]])
MAGS = [-300, -200, -100, -20, -8, 0, 3, 8, 12, 14, 16, 17, 20, 50, 100, 200, 300]


@pytest.mark.parametrize("k", MAGS)
def test_cube_hull_is_the_clip_at_every_magnitude_of_y(k):
    K = setkit.compile({"kind": "hull", "points": CORNERS.tolist()})
    rng = np.random.default_rng(k + 400)
    Y = rng.standard_normal((6, 3)) * 10.0 ** k
    # coordinates inside (0, 1) mixed with far ones: the answer sits on a face, not at a vertex
    Y[:3, 0] = rng.uniform(0.05, 0.95, 3)
    Y[3:, 1] = rng.uniform(0.05, 0.95, 3)
    X = K.project(Y)
    np.testing.assert_allclose(X, np.clip(Y, 0.0, 1.0), rtol=0, atol=1e-9)
    assert K.contains(X).all()


@pytest.mark.parametrize("data_exp", [-300, -150, -20, 0, 20, 150, 290])
def test_cube_hull_at_every_data_scale(data_exp):
    s = 10.0 ** data_exp
    K = setkit.compile({"kind": "hull", "points": (CORNERS * s).tolist()})
    rng = np.random.default_rng(7)
    for k in (-5, 0, 1, 5, 12):
        Y = rng.standard_normal((4, 3)) * 10.0 ** k
        Y[:, 2] = rng.uniform(0.1, 0.9, 4)
        Y = Y * s
        if not np.all(np.isfinite(Y)):
            continue
        X = K.project(Y)
        np.testing.assert_allclose(X / s, np.clip(Y / s, 0.0, 1.0), rtol=0, atol=1e-9)


@pytest.mark.parametrize("e", [0, 10, 20, 30, 40, 46])
def test_rotated_edge_exposed_by_a_far_point(e):
    # edge {(0,0), (1,1)} is exposed by n = (1, -1); y = t n + a (1, 1) projects to clip(a, 0, 1) (1, 1)
    V = [[0.0, 0.0], [1.0, 1.0], [-1.0, 1.0], [0.0, 2.0]]
    K = setkit.compile({"kind": "hull", "points": V})
    t = math.ldexp(1.0, e)
    for a in (0.25, 0.5, 0.875, -0.5, 1.5):
        y = np.array([t + a, -t + a])
        assert y[0] - t == a and -t - y[1] == -a                      # represented exactly
        x = K.project(y)
        want = min(max(a, 0.0), 1.0)
        np.testing.assert_allclose(x, [want, want], atol=1e-12)


def test_far_points_pick_the_exposed_vertex_and_match_the_lmo():
    rng = np.random.default_rng(11)
    V = rng.standard_normal((12, 4))
    K = setkit.compile({"kind": "hull", "points": V.tolist()})
    for k in (12, 16, 20, 50, 100, 200, 300):
        for _ in range(5):
            y = rng.standard_normal(4) * 10.0 ** k
            x = K.project(y)
            # generic direction: the answer is the unique maximizer of <v, y> (= lmo(-y))
            np.testing.assert_array_equal(x, K.lmo(-y))


def test_kernel_gap_certifies_against_the_reference_at_moderate_points():
    rng = np.random.default_rng(12)
    V = rng.standard_normal((15, 5))
    K = setkit.compile({"kind": "hull", "points": V.tolist()})
    R = K.with_backends(project="reference")
    for k in (-3, 0, 2, 4, 6):
        Y = rng.standard_normal((3, 5)) * 10.0 ** k
        for y in Y:
            x, w, gap, cycles, ok = nearest_in_hull(V, y)
            assert ok and w.min() >= 0 and abs(w.sum() - 1) <= 1e-14
            # variational inequality (projection onto a convex set): <y - x, v - x> <= gap for every v
            assert np.max((V - x) @ (y - x)) <= gap + 1e-9 * max(1.0, np.abs(y).max())
            np.testing.assert_allclose(x, R.project(y), atol=2e-5 * max(1.0, np.abs(y).max()) * 3)
