"""spectral_ball: against the cvxpy reference, von Neumann's trace inequality, numpy.linalg.svd, bad input."""
import numpy as np
import pytest

import setkit
from setkit.errors import DescriptionError

from .helpers import check_against_reference, check_batch_shapes, check_inside_fixed, sample_points
from .norm_edges import Flat, check_empty_batches, check_extreme_magnitudes, check_zero_direction_and_origin


def spectral(m, n, r):
    return setkit.compile({"kind": "spectral_ball", "rows": m, "cols": n, "radius": r})


@pytest.mark.parametrize("m, n, r", [(3, 4, 1e-3), (3, 3, 1.0), (4, 2, 1e6), (2, 5, 7.5)])
def test_spectral_ball_against_reference(rng, m, n, r):
    K = Flat(spectral(m, n, r))
    Y = sample_points(K, rng, k=2)
    C = np.concatenate([rng.standard_normal((3, m * n)), np.round(rng.standard_normal((2, m * n)))])
    check_against_reference(K, Y, C)
    check_batch_shapes(K, rng)


def test_spectral_ball_inside_points_are_fixed(rng):
    K = spectral(4, 3, 2.0)
    Y = rng.standard_normal((6, 4, 3))
    X = Y * (rng.random((6, 1, 1)) * 2.0 / np.linalg.norm(Y, 2, axis=(1, 2))[:, None, None])
    check_inside_fixed(Flat(K), X.reshape(6, 12))


def test_projection_clips_singular_values(rng):
    # projection onto a unitarily invariant norm ball acts on the singular values only (Lewis 1995,
    # from memory): here min(s, r), with numpy.linalg.svd as the decomposition routine; the distance
    # is ||(s - r)_+||_2 (Mirsky's inequality makes it the nearest point, 1960, from memory)
    K = spectral(5, 3, 1.2)
    for _ in range(5):
        Y = rng.standard_normal((5, 3)) * 2
        U, s, Vt = np.linalg.svd(Y, full_matrices=False)
        np.testing.assert_allclose(K.project(Y), (U * np.minimum(s, 1.2)) @ Vt, atol=1e-12)
        np.testing.assert_allclose(K.distance(Y), np.linalg.norm(np.maximum(s - 1.2, 0)), atol=1e-12)


def test_support_is_radius_times_nuclear_norm(rng):
    # von Neumann's trace inequality: max over ||X||_2 <= r of <C, X> = r sum_i sigma_i(C), attained at
    # r U V^T (the polar factor); numpy.linalg.svd gives the singular values
    K = spectral(4, 6, 0.7)
    for _ in range(4):
        C = rng.standard_normal((4, 6))
        s = np.linalg.svd(C, compute_uv=False)
        np.testing.assert_allclose(K.support(C), 0.7 * s.sum(), rtol=1e-12)
        L = K.lmo(C)
        np.testing.assert_allclose(np.sum(C * L), -0.7 * s.sum(), rtol=1e-12)
        # the answer is an extreme point: all its singular values equal the radius
        np.testing.assert_allclose(np.linalg.svd(L, compute_uv=False), 0.7, rtol=1e-12)


def test_rank_deficient_direction(rng):
    # rank-1 C: any completion of the zero singular subspace minimizes; ours has all singular values r
    K = spectral(4, 4, 2.0)
    C = np.outer(rng.standard_normal(4), rng.standard_normal(4))
    L = K.lmo(C)
    np.testing.assert_allclose(np.sum(C * L), -2.0 * np.linalg.norm(C, 2), rtol=1e-12)
    np.testing.assert_allclose(np.linalg.svd(L, compute_uv=False), 2.0, rtol=1e-12)
    assert K.violation(L) <= 1e-12


def test_spectral_ball_edges(rng):
    for K in (spectral(3, 4, 1.0), spectral(3, 1, 1e-3), spectral(2, 2, 0.0)):
        check_extreme_magnitudes(K, rng)
        check_empty_batches(K)
        check_zero_direction_and_origin(K)
    np.testing.assert_array_equal(spectral(2, 2, 0.0).project(np.ones((2, 2))), np.zeros((2, 2)))
    # ties: a multiple of an orthogonal matrix is clipped to radius times it
    Q, _ = np.linalg.qr(rng.standard_normal((3, 3)))
    np.testing.assert_allclose(spectral(3, 3, 1.5).project(4 * Q), 1.5 * Q, atol=1e-14)


def test_centroid_is_the_origin():
    K = spectral(2, 3, 2.0)
    np.testing.assert_array_equal(K.centroid(measure="directions"), np.zeros((2, 3)))


@pytest.mark.parametrize("spec, key, words", [
    ({"rows": 2, "cols": 0, "radius": 1.0}, "cols", "at least 1"),
    ({"rows": "two", "cols": 2, "radius": 1.0}, "rows", "whole number"),
    ({"rows": 2, "cols": 2, "radius": float("nan")}, "radius", "finite"),
])
def test_spectral_ball_bad_descriptions(spec, key, words):
    with pytest.raises(DescriptionError) as e:
        setkit.compile({"kind": "spectral_ball", **spec})
    msg = str(e.value)
    assert msg.startswith("spectral_ball (<dict>: " + key + ")"), msg
    assert words in msg
