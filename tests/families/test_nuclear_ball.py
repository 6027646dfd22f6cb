"""nuclear_ball: against the cvxpy reference, Eckart-Young-Mirsky, von Neumann, numpy.linalg.svd, bad input."""
import numpy as np
import pytest
from scipy.optimize import brentq

import setkit
from setkit.errors import DescriptionError
from setkit.kernels import spectral

from .helpers import check_against_reference, check_batch_shapes, check_inside_fixed, sample_points
from .norm_edges import Flat, check_empty_batches, check_extreme_magnitudes, check_zero_direction_and_origin


def nuclear(m, n, r):
    return setkit.compile({"kind": "nuclear_ball", "rows": m, "cols": n, "radius": r})


@pytest.mark.parametrize("m, n, r", [(3, 4, 1e-3), (3, 3, 1.0), (4, 2, 1e6), (2, 5, 7.5)])
def test_nuclear_ball_against_reference(rng, m, n, r):
    K = Flat(nuclear(m, n, r))
    Y = sample_points(K, rng, k=2)
    C = np.concatenate([rng.standard_normal((3, m * n)), np.round(rng.standard_normal((2, m * n)))])
    check_against_reference(K, Y, C)
    check_batch_shapes(K, rng)


def test_nuclear_ball_inside_points_are_fixed(rng):
    K = nuclear(3, 4, 2.0)
    # convex combinations of rank-one extreme points r u v^T are inside
    X = sum(w * 2.0 * np.einsum("bi,bj->bij", *(v / np.linalg.norm(v, axis=1, keepdims=True)
                                                   for v in (rng.standard_normal((5, 3)), rng.standard_normal((5, 4)))))
            for w in (0.3, 0.5))
    check_inside_fixed(Flat(K), X.reshape(5, 12))


def _l1_projection_of_singular_values(s, r):
    # the l1-ball projection of a nonnegative vector: (s - theta)_+ with sum = r, theta by
    # scipy.optimize.brentq (Duchi, Shalev-Shwartz, Singer and Chandra 2008, from memory)
    if s.sum() <= r:
        return s
    th = brentq(lambda t: np.maximum(s - t, 0).sum() - r, 0.0, s.max(), xtol=1e-15, rtol=1e-15)
    return np.maximum(s - th, 0.0)


def test_projection_is_singular_value_thresholding(rng):
    # projection onto a unitarily invariant norm ball acts on the singular values only, with the
    # same singular vectors (Lewis, "The convex analysis of unitarily invariant matrix functions",
    # 1995, from memory); checked with numpy.linalg.svd as the decomposition routine
    K = nuclear(5, 3, 1.7)
    for _ in range(5):
        Y = rng.standard_normal((5, 3)) * 2
        U, s, Vt = np.linalg.svd(Y, full_matrices=False)
        want = (U * _l1_projection_of_singular_values(s, 1.7)) @ Vt
        np.testing.assert_allclose(K.project(Y), want, atol=1e-12)


def test_lmo_is_scaled_best_rank_one_approximation(rng):
    # Eckart-Young-Mirsky (1936): the best rank-1 approximation of C in Frobenius norm is
    # sigma_1 u1 v1^T, with error^2 = sum_{i>=2} sigma_i^2; the LMO is -r u1 v1^T
    K = nuclear(6, 4, 3.0)
    for _ in range(4):
        C = rng.standard_normal((6, 4))
        s = np.linalg.svd(C, compute_uv=False)
        A1 = -(s[0] / 3.0) * K.lmo(C)
        assert np.linalg.matrix_rank(A1) == 1
        np.testing.assert_allclose(np.linalg.norm(C - A1) ** 2, (s[1:] ** 2).sum(), rtol=1e-10)
        # support = r ||C||_2 (the dual of the nuclear norm), numpy.linalg.norm(C, 2) as the routine
        np.testing.assert_allclose(K.support(C), 3.0 * np.linalg.norm(C, 2), rtol=1e-12)


def test_von_neumann_bound_on_points_of_the_ball(rng):
    # von Neumann's trace inequality: <C, X> <= sum_i sigma_i(C) sigma_i(X) <= sigma_1(C) ||X||_*
    K = nuclear(4, 4, 1.3)
    P = K.project(rng.standard_normal((20, 4, 4)) * 3)
    C = rng.standard_normal((4, 4))
    vals = np.einsum("ij,bij->b", C, P)
    assert np.all(vals <= K.support(C) * (1 + 1e-12))


@pytest.mark.parametrize("m, n", [(150, 130), (130, 200)])
def test_large_lmo_by_lanczos_matches_full_svd(rng, m, n):
    # above 120 per side the LMO runs Lanczos; numpy.linalg.svd is the yardstick
    K = nuclear(m, n, 2.0)
    C = rng.standard_normal((m, n))
    C[:5] += 3 * rng.standard_normal((5, n))
    s1 = np.linalg.svd(C, compute_uv=False)[0]
    det = K.lmo(C, details=True)
    val = float(np.sum(C * det.point))
    # the stated accuracy: the value is within VALUE_RTOL (1e-9) relative of -radius sigma_1
    assert -2.0 * s1 <= val <= -2.0 * s1 * (1 - spectral.VALUE_RTOL)
    assert "Lanczos" in str(det.backend_status)
    assert s1 * (1 - spectral.VALUE_RTOL) <= K.support(C) / 2.0 <= s1 * (1 + 1e-14)
    u, sv, v, res, how = spectral.top_singular_triplet(C / 8.0)
    # the reported residual is the measured one: one of ||C v - s u||, ||C^T u - s v|| holds by
    # construction (to rounding), the other is the residual
    r1, r2 = np.linalg.norm((C / 8.0) @ v - sv * u), np.linalg.norm((C / 8.0).T @ u - sv * v)
    np.testing.assert_allclose(res, max(r1, r2), rtol=1e-6)
    assert min(r1, r2) <= 1e-13


def test_large_lmo_falls_back_to_lapack_when_lanczos_is_not_accurate(rng, monkeypatch):
    # a value bound Lanczos cannot meet (with a basis too small to settle) forces the dense SVD
    monkeypatch.setattr(spectral, "VALUE_RTOL", 0.0)
    monkeypatch.setattr(spectral, "KRYLOV_MAX_DIM", 4)
    C = rng.standard_normal((130, 125))
    u, sv, v, res, how = spectral.top_singular_triplet(C)
    assert how == "lapack"
    np.testing.assert_allclose(sv, np.linalg.svd(C, compute_uv=False)[0], rtol=1e-13)


def test_nuclear_ball_edges(rng):
    for K in (nuclear(3, 4, 1.0), nuclear(1, 3, 1e-3), nuclear(2, 2, 0.0)):
        check_extreme_magnitudes(K, rng)
        check_empty_batches(K)
        check_zero_direction_and_origin(K)
    # radius 0: the set is {0}
    np.testing.assert_array_equal(nuclear(2, 2, 0.0).project(np.ones((2, 2))), np.zeros((2, 2)))
    # ties: equal singular values (a multiple of an orthogonal matrix) project to an equal share
    K = nuclear(3, 3, 1.5)
    Q, _ = np.linalg.qr(rng.standard_normal((3, 3)))
    np.testing.assert_allclose(K.project(4 * Q), 0.5 * Q, atol=1e-14)
    # lmo of a tied direction: any top pair; the value is what counts
    assert abs(np.sum(Q * K.lmo(Q)) + 1.5) <= 1e-13


def test_centroid_is_the_origin():
    K = nuclear(2, 3, 2.0)
    for m in ("volume", "vertices", "directions"):
        np.testing.assert_array_equal(K.centroid(measure=m), np.zeros((2, 3)))


@pytest.mark.parametrize("spec, key, words", [
    ({"rows": 0, "cols": 2, "radius": 1.0}, "rows", "at least 1"),
    ({"rows": 2, "cols": 2.5, "radius": 1.0}, "cols", "whole number"),
    ({"rows": 2, "cols": 2, "radius": -1.0}, "radius", "at least 0"),
    ({"rows": 2, "cols": 2}, "radius", "required"),
    ({"rows": 2, "cols": 2, "radius": 1.0, "norm": 2}, "norm", "unknown parameter"),
])
def test_nuclear_ball_bad_descriptions(spec, key, words):
    with pytest.raises(DescriptionError) as e:
        setkit.compile({"kind": "nuclear_ball", **spec})
    msg = str(e.value)
    assert msg.startswith("nuclear_ball (<dict>: " + key + ")"), msg
    assert words in msg
