"""spectraplex: against the cvxpy reference, numpy.linalg.eigh, closed forms, bad input."""
import numpy as np
import pytest
from scipy.optimize import brentq

import setkit
from setkit.errors import DescriptionError

from .helpers import check_against_reference, check_batch_shapes, check_inside_fixed, sample_points
from .norm_edges import Flat, check_empty_batches, check_extreme_magnitudes


def plex(n, t=1.0, mode="equal"):
    return setkit.compile({"kind": "spectraplex", "n": n, "trace": t, "mode": mode})


@pytest.mark.parametrize("n, t, mode", [(3, 1e-3, "equal"), (3, 1.0, "equal"), (2, 1e6, "at_most"),
                                        (4, 2.5, "at_most")])
def test_spectraplex_against_reference(rng, n, t, mode):
    K = Flat(plex(n, t, mode))
    Y = sample_points(K, rng, k=2)
    C = np.concatenate([rng.standard_normal((3, n * n)), np.round(rng.standard_normal((2, n * n)))])
    check_against_reference(K, Y, C)
    check_batch_shapes(K, rng)


def test_spectraplex_inside_points_are_fixed(rng):
    for mode in ("equal", "at_most"):
        K = plex(4, 2.0, mode)
        G = rng.standard_normal((5, 4, 4))
        X = G @ np.swapaxes(G, 1, 2)
        X *= (2.0 if mode == "equal" else rng.random((5, 1, 1)) * 2.0) / np.trace(X, axis1=1, axis2=2)[:, None, None]
        check_inside_fixed(Flat(K), X.reshape(5, 16))


def test_projection_is_eigenvalue_simplex_projection(rng):
    # the projection of a symmetric Y keeps its eigenvectors and projects its eigenvalues onto the
    # simplex (Lewis 1995 for spectral sets, from memory); the threshold here by scipy.optimize.brentq,
    # the decomposition by numpy.linalg.eigh. A skew part is dropped (orthogonal to every point).
    K = plex(5, 1.5)
    for _ in range(4):
        A = rng.standard_normal((5, 5))
        S = (A + A.T) / 2
        lam, V = np.linalg.eigh(S)
        th = brentq(lambda u: np.maximum(lam - u, 0).sum() - 1.5, lam.min() - 2, lam.max(), xtol=1e-15, rtol=1e-15)
        want = (V * np.maximum(lam - th, 0)) @ V.T
        np.testing.assert_allclose(K.project(A), want, atol=1e-12)
        np.testing.assert_allclose(K.project(S), want, atol=1e-12)


def test_hand_solved_points():
    # diag(2, 0) -> diag(1, 0); a PSD matrix of trace below t is kept by at_most and lifted by equal
    K = plex(2)
    np.testing.assert_allclose(K.project(np.diag([2.0, 0.0])), np.diag([1.0, 0.0]), atol=1e-15)
    X = np.array([[0.3, 0.1], [0.1, 0.2]])
    np.testing.assert_allclose(plex(2, 1.0, "at_most").project(X), X, atol=1e-15)
    np.testing.assert_allclose(K.project(X), X + 0.25 * np.eye(2), atol=1e-15)


def test_lmo_and_support_by_extreme_eigenvalues(rng):
    # min over the spectraplex of <C, X> = t lambda_min(sym C) at t v v^T (Rayleigh quotient, common
    # practice), numpy.linalg.eigvalsh as the routine; at_most: min(0, ...)
    for mode in ("equal", "at_most"):
        K = plex(4, 2.0, mode)
        for _ in range(4):
            C = rng.standard_normal((4, 4)) + (3.0 if mode == "at_most" else 0.0) * rng.integers(0, 2) * np.eye(4)
            lam = np.linalg.eigvalsh((C + C.T) / 2)
            lo = 2.0 * lam[0] if mode == "equal" else 2.0 * min(lam[0], 0.0)
            hi = 2.0 * lam[-1] if mode == "equal" else 2.0 * max(lam[-1], 0.0)
            np.testing.assert_allclose(np.sum(C * K.lmo(C)), lo, rtol=1e-12, atol=1e-14)
            np.testing.assert_allclose(K.support(C), hi, rtol=1e-12, atol=1e-14)


def test_large_lmo_by_lanczos_matches_eigh(rng):
    # above n = 120 the extreme eigenpair comes from Lanczos; numpy.linalg.eigvalsh is the yardstick.
    # Stated accuracy: the value is within VALUE_RTOL (1e-9) times the spectral scale of the optimum
    from setkit.kernels.spectral import VALUE_RTOL
    n = 140
    K = plex(n, 3.0)
    A = rng.standard_normal((n, n))
    lam = np.linalg.eigvalsh((A + A.T) / 2)
    scale = 3.0 * np.abs(lam).max()
    det = K.lmo(A, details=True)
    assert "Lanczos" in str(det.backend_status)
    val = np.sum(A * det.point)
    assert 3.0 * lam[0] - 1e-13 * scale <= val <= 3.0 * lam[0] + VALUE_RTOL * scale
    sup = K.support(A)
    assert 3.0 * lam[-1] - VALUE_RTOL * scale <= sup <= 3.0 * lam[-1] + 1e-13 * scale


def test_exact_centroids():
    # equal mode: (t/n) I by orthogonal invariance; at_most n = 1 is the interval [0, t], centroid t/2
    np.testing.assert_allclose(plex(3, 1.5).centroid(measure="vertices"), 0.5 * np.eye(3))
    np.testing.assert_allclose(plex(1, 2.0, "at_most").centroid(measure="volume"), [[1.0]])
    # n = 2, at_most: the trace of a uniform point has density 3 s^2 / t^3 (D = 3), mean 3t/4
    np.testing.assert_allclose(plex(2, 2.0, "at_most").centroid(measure="volume"), 0.75 * np.eye(2))


def test_spectraplex_edges(rng):
    for K in (plex(3), plex(2, 1e-3, "at_most"), plex(1, 2.0), plex(2, 0.0)):
        check_extreme_magnitudes(K, rng)
        check_empty_batches(K)
    # ties: a multiple of the identity projects to (t/n) I
    np.testing.assert_allclose(plex(3, 1.5).project(7 * np.eye(3)), 0.5 * np.eye(3), atol=1e-14)
    np.testing.assert_allclose(plex(3, 1.5, "at_most").project(-7 * np.eye(3)), np.zeros((3, 3)), atol=0)


@pytest.mark.parametrize("spec, key, words", [
    ({"n": 0}, "n", "at least 1"),
    ({"n": 3, "trace": -1.0}, "trace", "at least 0"),
    ({"n": 3, "mode": "below"}, "mode", "equal, at_most"),
    ({"n": 3, "rows": 3}, "rows", "unknown parameter"),
])
def test_spectraplex_bad_descriptions(spec, key, words):
    with pytest.raises(DescriptionError) as e:
        setkit.compile({"kind": "spectraplex", **spec})
    msg = str(e.value)
    assert msg.startswith("spectraplex (<dict>: " + key + ")"), msg
    assert words in msg
