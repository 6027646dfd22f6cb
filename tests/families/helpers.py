"""Shared checks for the family tests: every operator against the cvxpy reference.

The reference routes, the seeded points and the gap measures come from setkit.agreement. The
family tests hold native kernels to more than the bar of DEVELOPERS.md ("Validating a user's
set"): gaps are relative to the tighter scales max(1, |y|_inf, data scale) for points and
||c|| * data scale for directions (no max(1, .)), and native answers must lie exactly in K, be at
least as close as the reference's and carry certificates near zero.
"""
from __future__ import annotations

import numpy as np

import setkit
from setkit.agreement import (DEFAULT_RTOL, direction_scale, objective_gaps, point_gaps,
                              reference as reference_set, seeded_points, value_gaps)

RTOL = DEFAULT_RTOL


def reference(K):
    # loose: an answer Clarabel flags as inaccurate is still compared (within RTOL) instead of raising
    return reference_set(K, loose=True)


def point_scale(K, Y):
    """The scale of the exactness checks of native kernels: max(1, |y|_inf, data scale)."""
    Y = np.asarray(Y, float).reshape(-1, K.dim)
    return np.maximum(np.abs(Y).max(axis=1), K.node.scale()).clip(min=1.0)


def sample_points(K, rng, k=3, ties=True):
    """The seeded points of setkit.agreement (inside, near, at scale, far, tiny, huge), plus points
    strictly inside (convex combinations of LMO answers) and rows with tied coordinates."""
    s = K.node.scale()
    n = K.dim
    seeded, _ = seeded_points(K, k, rng, inside_by=reference(K))
    V = K.lmo(rng.standard_normal((4 * k, n)))
    lam = rng.dirichlet(np.ones(4), size=k)
    rows = [seeded, np.einsum("kj,kjn->kn", lam, V.reshape(k, 4, n))]
    if ties and n >= 3:
        t = np.round(2 * rng.standard_normal((k, n))) * (s / 2)   # many equal coordinates
        t[:, 1] = t[:, 0]
        rows.append(t)
    return np.concatenate(rows)


def check_against_reference(K, Y, C, rtol=RTOL):
    """Compare project, distance, contains, violation, lmo, support and the certificate with the reference."""
    ref = reference(K)
    Y = np.asarray(Y, float)
    C = np.asarray(C, float)
    sc = point_scale(K, Y)
    P = K.project(Y)
    Pr = ref.project(Y)
    err = point_gaps(P, Pr) / sc
    off = err > rtol
    if off.any():
        # Clarabel's accuracy floor (about 1e-6..1e-5 relative, worse at ties on low-dimensional faces):
        # a disagreement is the reference's when the native answer is certified, i.e. its Frank-Wolfe
        # gap g bounds ||p - p*|| <= sqrt(2 g) within the tolerance, and it is at least as close to y
        cert = np.atleast_1d(K.certificate(Y[off], P[off]))
        ok = (np.sqrt(2 * np.maximum(cert, 0)) <= rtol * sc[off]) & \
             (point_gaps(Y[off], P[off]) <= point_gaps(Y[off], Pr[off]) + 1e-12 * sc[off])
        assert ok.all(), f"projection differs from the reference by {err.max():.3g} (relative) and is not certified"
    # the native projection lies in K (to rounding) and is at least as close as the reference's
    assert (K.violation(P) <= 1e-10 * sc * K.dim).all()
    dist = point_gaps(Y, P)
    assert (dist <= point_gaps(Y, Pr) + 1e-9 * sc).all()
    np.testing.assert_allclose(K.distance(Y), dist, rtol=1e-12, atol=1e-12 * sc.max())
    # membership: projections are in, far points out
    assert K.contains(P, tol=1e-9 * sc).all()
    far = dist > 1e-3 * sc
    assert not K.contains(Y[far]).any()
    # certificate: sqrt(2 gap) bounds ||p - p*||; tiny for the native answer
    det = K.project(Y, details=True)
    assert np.all(np.sqrt(2 * np.maximum(det.certificate, 0)) <= 1e-6 * sc)
    assert np.all(det.residual <= 1e-10 * sc * K.dim)
    # linear minimization and support: same optimal values, answers in K
    cs = direction_scale(C, K.node.scale())
    L = K.lmo(C)
    Lr = ref.lmo(C)
    gaps, v, vr = objective_gaps(C, L, Lr)
    assert (gaps <= rtol * cs).all(), f"lmo values differ by {gaps.max():.3g}"
    assert (np.array(v) <= np.array(vr) + 1e-9 * cs).all()           # native is at least as good as the reference
    assert (K.violation(L) <= 1e-10 * K.node.scale() * K.dim).all()
    S = K.support(C)
    gaps = value_gaps(S, ref.support(C))
    assert (gaps <= rtol * cs).all(), f"support differs by {gaps.max():.3g}"
    np.testing.assert_allclose(S, -np.einsum("ij,ij->i", -C, K.lmo(-C)), rtol=1e-9, atol=1e-9 * cs.max())
    return P, Pr


def check_inside_fixed(K, X):
    """Points of K are their own projections, at distance 0, contained."""
    X = np.asarray(X, float)
    sc = point_scale(K, X)
    P = K.project(X)
    assert (np.linalg.norm(P - X, axis=1) <= 1e-9 * sc).all()
    assert K.contains(X, tol=1e-9 * sc).all()


def check_batch_shapes(K, rng):
    n = K.dim
    Y = rng.standard_normal((2, 3, n)) * K.node.scale()
    P = K.project(Y)
    assert P.shape == (2, 3, n)
    np.testing.assert_allclose(P[1, 2], K.project(Y[1, 2]), rtol=0, atol=1e-12 * np.abs(Y).max())
    assert K.distance(Y).shape == (2, 3)
    assert np.ndim(K.distance(Y[0, 0])) == 0
    assert K.lmo(Y).shape == (2, 3, n)
    assert K.support(Y).shape == (2, 3)
    assert K.contains(P).shape == (2, 3)
    assert isinstance(K.support(Y[0, 0]), float)


def compile_kind(kind, **params):
    return setkit.compile({"kind": kind, **params})
