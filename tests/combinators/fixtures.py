"""Private test fixtures: tiny sets the combinator tests need before (or besides) the real families.

They are Family nodes built directly (not registered), so they never shadow a
registered kind; descriptions can embed them because a node is accepted in
place of a mapping.
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import ClassVar

import numpy as np

from setkit.agreement import (DEFAULT_RTOL, data_scale, direction_scale, objective_gaps, point_gaps, point_scale,
                              reference, value_gaps)
from setkit.families import Family, kernel
from setkit.forms import LinearForm


@dataclass(frozen=True, eq=False, kw_only=True)
class Halfspaces(Family):
    """{x : A x <= b} (no native kernels: served through its linear form)."""

    A: np.ndarray
    b: np.ndarray
    kind: ClassVar[str] = "halfspaces-fixture"
    traits = frozenset({"polyhedral"})

    @property
    def shape(self):
        return (self.A.shape[1],)

    def cvxpy_constraints(self, x):
        return [self.A @ x <= self.b]

    def linear_form(self):
        return LinearForm.build(self.A.shape[1], A_ub=self.A, b_ub=self.b)

    def scale(self):
        return float(max(1.0, np.abs(self.b).max()))


@dataclass(frozen=True, eq=False, kw_only=True)
class Ball(Family):
    """{x : ||x - center|| <= radius}: no linear form, exact native operators."""

    center: np.ndarray
    radius: float
    kind: ClassVar[str] = "ball-fixture"
    traits = frozenset({"bounded"})

    @property
    def shape(self):
        return (self.center.size,)

    def cvxpy_constraints(self, x):
        import cvxpy as cp
        return [cp.norm(x - self.center, 2) <= self.radius]

    def scale(self):
        return float(max(1.0, self.radius, np.abs(self.center).max()))

    @kernel("project")
    def project(self, Y):
        """Radial scaling onto the ball, O(n)."""
        D = Y - self.center
        n = np.linalg.norm(D, axis=1, keepdims=True)
        f = np.where(n > self.radius, self.radius / np.maximum(n, 1e-300), 1.0)
        return self.center + D * f

    @kernel("lmo")
    def lmo(self, C):
        """center - radius c/||c||, O(n)."""
        n = np.linalg.norm(C, axis=1, keepdims=True)
        return self.center - self.radius * C / np.where(n > 0, n, 1.0)

    @kernel("support")
    def support(self, C):
        """<c, center> + radius ||c||, O(n)."""
        return C @ self.center + self.radius * np.linalg.norm(C, axis=1)


def halfspaces(A, b):
    return Halfspaces(A=np.atleast_2d(np.asarray(A, float)), b=np.atleast_1d(np.asarray(b, float)))


def ball(center, radius):
    return Ball(center=np.asarray(center, float), radius=float(radius))


def points_for(K, rng, n=3, scales=(1e-3, 1.0, 1e3)):
    """Seeded points near, inside and far from K at several scales, plus a duplicated row (a tie).

    The combinator tests choose their largest scale (some splitting routes are held to rtol only
    up to a moderate scale), so these are not the fixed groups of setkit.agreement.seeded_points.
    """
    d = K.dim
    s = data_scale(K)
    rows = [s * sc * rng.standard_normal((n, d)) for sc in scales]
    Y = np.concatenate(rows)
    inside = reference(K, loose=True).project(Y[:n])
    near = inside + 1e-4 * s * rng.standard_normal(inside.shape)
    return np.concatenate([Y, inside, near, Y[:1]])


def check_against_reference(K, rng, n=3, scales=(1e-3, 1.0, 1e3), rtol=DEFAULT_RTOL, check_lmo=True):
    """Compare project, distance, lmo, support, contains of K with the cvxpy reference (asserts)."""
    # loose: Clarabel sometimes ends 'optimal_inaccurate' on second-order cones; the answers are still
    # compared at rtol below, so an inaccurate reference shows up as a failure, not a pass
    ref = reference(K, loose=True)
    Y = points_for(K, rng, n, scales)
    s = data_scale(K)
    sc = point_scale(Y, s)
    P, Pr = K.project(Y), ref.project(Y)
    err = point_gaps(P, Pr) / sc
    assert err.max() <= rtol, f"projection differs from the reference by {err.max():.3g} (relative)"
    D = K.distance(Y)
    assert np.all(value_gaps(D, point_gaps(Y, Pr)) / sc <= rtol)
    # projections of the reference lie in K; far points do not
    assert K.contains(Pr, tol=1e-5 * sc).all()
    far = point_gaps(Y, Pr) > 1e-2 * sc
    assert not K.contains(Y[far]).any()
    if check_lmo:
        C = rng.standard_normal((2 * n, K.dim))
        C[-1] = C[0]                              # a repeated direction
        L, Lr = K.lmo(C), ref.lmo(C)
        gaps, _, _ = objective_gaps(C, L, Lr)
        cs = direction_scale(C, s)
        assert np.all(gaps / cs <= rtol), f"lmo values differ by {gaps.max():.3g}"
        assert np.all(ref.distance(L) / s <= rtol), "lmo answer is outside the set"
        S, Sr = K.support(C), ref.support(C)
        assert np.all(value_gaps(S, Sr) / cs <= rtol)
        # the width sigma(c) + sigma(-c) of a nonempty set is >= 0 (common practice)
        assert np.all(S + K.support(-C) >= -1e-9 * cs)
    return P, Pr


def _pav_nonincreasing(z):
    """argmin ||v - z|| over v_1 >= ... >= v_n (pool-adjacent-violators), O(n)."""
    vals, wts = [], []
    for zi in z:
        v, w = float(zi), 1
        while vals and vals[-1] < v:
            pv, pw = vals.pop(), wts.pop()
            v, w = (pv * pw + v * w) / (pw + w), pw + w
        vals.append(v)
        wts.append(w)
    return np.repeat(vals, wts)


@dataclass(frozen=True, eq=False, kw_only=True)
class PermutahedronFixture(Family):
    """conv{permutations of w}: a private stand-in until the permutahedron family lands."""

    weights: np.ndarray
    kind: ClassVar[str] = "permutahedron-fixture"
    traits = frozenset({"polyhedral", "bounded", "permutation_invariant"})

    @property
    def shape(self):
        return (self.weights.size,)

    def scale(self):
        return float(max(1.0, np.abs(self.weights).max()))

    def cvxpy_constraints(self, x):
        import cvxpy as cp
        ws = np.sort(self.weights)[::-1]
        n = ws.size
        return [cp.sum(x) == ws.sum()] + [cp.sum_largest(x, k) <= ws[:k].sum() for k in range(1, n)]

    def extended_form(self):
        from setkit.combinators.extended import permutahedron_form
        return permutahedron_form(self.weights)

    @kernel("project")
    def project(self, Y):
        """Sort, then pool-adjacent-violators on y_sorted - w_sorted, O(n log n) per row."""
        ws = np.sort(self.weights)[::-1]
        out = np.empty_like(Y)
        for i, y in enumerate(Y):
            o = np.argsort(-y, kind="stable")
            out[i, o] = y[o] - _pav_nonincreasing(y[o] - ws)
        return out

    @kernel("lmo")
    def lmo(self, C):
        """The largest weight at the smallest c (rearrangement inequality), O(n log n)."""
        ws = np.sort(self.weights)[::-1]
        out = np.empty_like(C)
        o = np.argsort(C, axis=1, kind="stable")
        np.put_along_axis(out, o, np.broadcast_to(ws, C.shape), axis=1)
        return out

    @kernel("support")
    def support(self, C):
        """Sorted c against sorted w, O(n log n)."""
        return np.sort(C, axis=1) @ np.sort(self.weights)


def permutahedron(weights):
    """The registered permutahedron family when it exists, else the private fixture."""
    from setkit.families import known_kinds
    if "permutahedron" in known_kinds():
        return {"kind": "permutahedron", "weights": list(map(float, weights))}
    return PermutahedronFixture(weights=np.asarray(weights, float))
