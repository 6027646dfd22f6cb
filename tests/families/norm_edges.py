"""Shared edge checks for the matrix and structured norm-ball families: extreme magnitudes, empty batches."""
from __future__ import annotations

import numpy as np


def check_extreme_magnitudes(K, rng, scales=(1e-300, 1e-150, 1e-3, 1e6, 1e150, 1e300)):
    """At every finite magnitude the operators answer finite values, projections land in K, and the
    LMO/support agree; no exception escapes."""
    n = K.dim
    s = K.node.scale()
    for a in scales:
        Y = a * rng.standard_normal((3, n))
        P = K.project(Y.reshape((3,) + K.shape)).reshape(3, n)
        assert np.all(np.isfinite(P)), a
        assert np.all(K.violation(P.reshape((3,) + K.shape)) <= 1e-9 * s), a
        assert np.all(K.contains(P.reshape((3,) + K.shape), tol=1e-9 * s)), a
        d = K.distance(Y.reshape((3,) + K.shape))
        assert np.all(np.isfinite(d)) and np.all(d >= 0), a
        # the distance is that of the projection, also at extreme magnitudes
        R = Y - P
        m = np.maximum(np.abs(R).max(axis=1), 1e-300)
        np.testing.assert_allclose(d / m, np.linalg.norm(R / m[:, None], axis=1), rtol=1e-9, atol=1e-12)
        L = K.lmo(Y.reshape((3,) + K.shape)).reshape(3, n)
        assert np.all(np.isfinite(L)), a
        assert np.all(K.violation(L.reshape((3,) + K.shape)) <= 1e-9 * s), a
        S = K.support(Y.reshape((3,) + K.shape))
        assert np.all(np.isfinite(S)), a
        # support(c) = <c, lmo(-c)>, computed on c / a to stay finite
        L2 = K.lmo((-Y).reshape((3,) + K.shape)).reshape(3, n)
        np.testing.assert_allclose(S / a, np.einsum("ij,ij->i", Y / a, L2), rtol=1e-9, atol=1e-12 * s)


def check_empty_batches(K):
    E = np.zeros((0,) + K.shape)
    assert K.project(E).shape == E.shape
    assert K.lmo(E).shape == E.shape
    assert K.distance(E).shape == (0,)
    assert K.support(E).shape == (0,)
    assert K.contains(E).shape == (0,)
    assert K.violation(E).shape == (0,)


def check_zero_direction_and_origin(K):
    Z = np.zeros(K.shape)
    assert float(K.support(Z)) == 0.0
    assert np.all(K.violation(K.lmo(Z)) <= 1e-12 * K.node.scale())
    assert bool(K.contains(Z))      # every one of these sets contains the origin
    np.testing.assert_array_equal(K.project(Z), Z)


class Flat:
    """A matrix-shaped DecisionSet seen through flat (b, dim) rows, so the vector helpers of
    tests/families/helpers.py apply unchanged (inputs reshaped to K.shape, outputs flattened)."""

    def __init__(self, K):
        self.K = K
        self.node = K.node
        self.dim = K.dim
        self.shape = (K.dim,)

    def _in(self, a):
        a = np.asarray(a, float)
        return a.reshape(a.shape[:-1] + self.K.shape)

    def _pts(self, P):
        return np.asarray(P).reshape(P.shape[: P.ndim - len(self.K.shape)] + (self.dim,))

    def with_backends(self, **kw):
        return Flat(self.K.with_backends(**kw))

    def project(self, y, details=False):
        if details:
            return self.K.project(self._in(y), details=True)
        return self._pts(self.K.project(self._in(y)))

    def lmo(self, c):
        return self._pts(self.K.lmo(self._in(c)))

    def distance(self, y):
        return self.K.distance(self._in(y))

    def support(self, c):
        return self.K.support(self._in(c))

    def violation(self, x):
        return self.K.violation(self._in(x))

    def contains(self, x, tol=None):
        return self.K.contains(self._in(x), tol=tol)
