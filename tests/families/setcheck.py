"""Shared checks of the graph/polyhedral family tests: every operator against the cvxpy reference."""
from __future__ import annotations

import numpy as np

REF = dict(project="reference", lmo="reference", support="reference")


def sample_points(K, rng, n=3):
    """Points inside, near and far from K at scales 1e-3 .. 1e6 (batched, shape (b, *K.shape))."""
    d = K.dim
    s = max(1.0, K.node.scale())
    raw = s * rng.standard_normal((n, d))
    inside = K.project(raw.reshape((n,) + K.shape)).reshape(n, d)
    near = inside + 1e-3 * s * rng.standard_normal((n, d))
    tiny = 1e-3 * rng.standard_normal((1, d))
    far = 1e6 * rng.standard_normal((1, d))
    Y = np.concatenate([inside, near, raw, tiny, far])
    return Y.reshape((-1,) + K.shape)


def check_against_reference(K, rng, n=3, rtol=2e-5, bounded=True, osqp=True):
    """Compare project, distance, contains, violation, lmo and support of K with the cvxpy reference."""
    R = K.with_backends(**REF)
    Y = sample_points(K, rng, n)
    b = Y.shape[0]
    P = K.project(Y)
    Pr = R.project(Y)
    scale = np.maximum(1.0, np.abs(Y.reshape(b, -1)).max(axis=1)) * max(1.0, K.node.scale())
    err = np.abs((P - Pr).reshape(b, -1)).max(axis=1) / scale
    # the interior-point reference is accurate to about 1e-6 relative on degenerate faces
    assert err.max() <= rtol, f"project differs from the reference by {err.max():.3g} (relative)"
    if osqp and K.routes()["project"].provider != "osqp":
        # the polished OSQP backend identifies the active set and is exact up to rounding
        Po = K.with_backends(project="osqp").project(Y)
        e2 = np.abs((P - Po).reshape(b, -1)).max(axis=1) / scale
        assert e2.max() <= 1e-8, f"project differs from the osqp backend by {e2.max():.3g} (relative)"
    D = K.distance(Y)
    Dr = np.linalg.norm((Y - Pr).reshape(b, -1), axis=1)
    assert np.all(np.abs(D - Dr) <= rtol * scale)
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
        v = np.einsum("ij,ij->i", Cf, L.reshape(4, -1))
        vr = np.einsum("ij,ij->i", Cf, Lr.reshape(4, -1))
        cs = np.linalg.norm(Cf, axis=1) * max(1.0, K.node.scale())
        assert np.all(np.abs(v - vr) <= 1e-6 * cs), (v, vr)
        if has_violation:
            assert np.all(K.violation(L) <= 1e-7 * max(1.0, K.node.scale()))
        else:
            assert np.all(K.contains(L))
        S = K.support(C)
        Sr = R.support(C)
        assert np.all(np.abs(S - Sr) <= 1e-6 * cs)
    return P, Pr
