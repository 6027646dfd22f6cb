"""Shared checks of the graph/polyhedral family tests: every operator against the cvxpy reference.

The reference routes, the seeded points, the scales and the gap measures are setkit.agreement's.
"""
from __future__ import annotations

import numpy as np

from setkit.agreement import (DEFAULT_RTOL, data_scale, direction_scale, objective_gaps, point_gaps, point_scale,
                              reference, seeded_points, value_gaps)


def sample_points(K, rng, n=3):
    """The seeded points of setkit.agreement (inside by K's own projection, near, at scale, far,
    tiny, huge; the huge point last), batched as (b, *K.shape)."""
    Y, _ = seeded_points(K, n, rng, inside_by=K)
    return Y.reshape((-1,) + K.shape)


def check_against_reference(K, rng, n=3, rtol=DEFAULT_RTOL, bounded=True, osqp=True):
    """Compare project, distance, contains, violation, lmo and support of K with the cvxpy reference."""
    R = reference(K)
    Y = sample_points(K, rng, n)
    b = Y.shape[0]
    Yf = Y.reshape(b, -1)
    s = data_scale(K)
    P = K.project(Y)
    Pr = R.project(Y)
    scale = point_scale(Yf, s)
    err = point_gaps(P.reshape(b, -1), Pr.reshape(b, -1)) / scale
    # the interior-point reference is accurate to about 1e-6 relative on degenerate faces
    assert err.max() <= rtol, f"project differs from the reference by {err.max():.3g} (relative)"
    if osqp and K.routes()["project"].provider != "osqp":
        # the polished OSQP backend identifies the active set and is exact up to rounding
        Po = K.with_backends(project="osqp").project(Y)
        e2 = np.abs((P - Po).reshape(b, -1)).max(axis=1) / scale
        assert e2.max() <= 1e-8, f"project differs from the osqp backend by {e2.max():.3g} (relative)"
    D = K.distance(Y)
    Dr = point_gaps(Yf, Pr.reshape(b, -1))
    assert np.all(value_gaps(D, Dr) <= rtol * scale)
    # answers lie in K: measured violation tiny, membership true; far points are outside
    has_violation = K.routes()["violation"].provider != "none"
    if has_violation:
        assert np.all(K.violation(P) <= 1e-7 * scale)
    assert np.all(K.contains(P))
    far = Y[-1:]
    assert not K.contains(far)[0]
    # the Frank-Wolfe certificate of the projection is tiny when the set is bounded
    if bounded:
        cert = K.certificate(Y, P)
        assert np.all(np.sqrt(2 * np.maximum(cert, 0)) <= 1e-5 * scale)
        C = rng.standard_normal((4,) + K.shape)
        C[0] = np.round(C[0])          # ties
        C[1] *= 1e-3
        C[2] *= 1e4
        L = K.lmo(C)
        Lr = R.lmo(C)
        Cf = C.reshape(4, -1)
        gaps, v, vr = objective_gaps(Cf, L.reshape(4, -1), Lr.reshape(4, -1))
        cs = direction_scale(Cf, s)
        assert np.all(gaps <= 1e-6 * cs), (v, vr)
        if has_violation:
            assert np.all(K.violation(L) <= 1e-7 * s)
        else:
            assert np.all(K.contains(L))
        S = K.support(C)
        Sr = R.support(C)
        assert np.all(value_gaps(S, Sr) <= 1e-6 * cs)
    return P, Pr
