"""The norm ball {x : ||x - center||_p <= radius} for p = 1, 2, inf.

A radius of 0 is allowed: the set is then the single point {center}.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..errors import NonFiniteRows
from ..forms import LinearForm
from ..kernels.checks import _all_finite
from ..kernels.vector_ops import (ball_lmo_into, ball_screen, ball_violation, l1_ball_rows_into, l2_ball_project_into,
                                  l2_dist_rows, norm_rows, rows_dot)
from . import Family, kernel, register
from ._screen import screened_contains

NORMS = (1, 2, "inf")


@register("ball")
@dataclass(frozen=True, eq=False, kw_only=True)
class Ball(Family):
    """K = {x in R^n : ||x - center||_p <= radius}, p in {1, 2, inf}, radius >= 0.

    Projection: radial scaling (p = 2), clipping (p = inf), or the simplex
    projection of |y - center| with the signs put back when the point is
    outside (p = 1), O(n). LMO: center - radius * u with u the unit-norm
    maximizer of <c, u>; support: <c, center> + radius * ||c||_q with q the
    dual exponent.

    >>> import setkit
    >>> K = setkit.compile({"kind": "ball", "dim": 2, "norm": 1, "radius": 1.0})
    >>> K.project([2.0, 0.5]).tolist()
    [1.0, 0.0]
    >>> K.support([3.0, -4.0]).item()
    4.0
    """

    center: np.ndarray
    radius: float
    norm: object = 2
    traits = frozenset({"bounded", "centrally_symmetric"})

    @classmethod
    def from_spec(cls, r):
        if r.has("dim"):
            n = r.integer("dim", min=1)
            c = r.vector_or_scalar("center", n, default=0.0)
        elif r.has("center"):
            c = r.array("center", ndim=1)
            n = c.size
            if n == 0:
                r.fail("center", "center must have at least one coordinate; got an empty list.")
        else:
            r.fail("dim", "dim is required (or give the center as a list).")
        norm = r.choice("norm", NORMS, 2)
        radius = r.number("radius", min=0.0)
        return cls(center=np.asarray(c, float), radius=radius, norm=norm, name=r.name)

    @classmethod
    def examples(cls):
        """Small instances for the conformance checks (tests/test_conformance.py)."""
        return [{"kind": "ball", "dim": 3, "norm": 2, "radius": 1.5, "center": [0.5, -1.0, 2.0]},
                {"kind": "ball", "dim": 4, "norm": 1, "radius": 0.7},
                {"kind": "ball", "dim": 3, "norm": "inf", "radius": 2.0, "center": [1.0, 0.0, -1.0]}]

    @classmethod
    def random_example(cls, rng):
        """A random ball of dimension 2..5, any of the three norms."""
        n = int(rng.integers(2, 6))
        return {"kind": "ball", "dim": n, "norm": [1, 2, "inf"][int(rng.integers(3))],
                "radius": round(float(rng.uniform(0.2, 3)), 3), "center": rng.normal(size=n).round(3).tolist()}

    @classmethod
    def benchmark_example(cls, n, rng):
        """An l2 ball with a random center and an l1 ball at the origin, in R^n (benchmarks/run.py)."""
        return [{"kind": "ball", "about": "l2 ball, dim n", "dim": n, "norm": 2, "radius": 1.5,
                 "center": rng.standard_normal(n) * 0.1},
                {"kind": "ball", "about": "l1 ball, dim n", "dim": n, "norm": 1, "radius": 2.0}]

    def __post_init__(self):
        object.__setattr__(self, "center", np.ascontiguousarray(self.center, dtype=float))
        object.__setattr__(self, "_p", 0 if self.norm == "inf" else int(self.norm))   # 0 means inf
        object.__setattr__(self, "_lo", self.center - self.radius)
        object.__setattr__(self, "_hi", self.center + self.radius)
        # the l1 projection kernel takes an empty center for the origin (no TwoSum needed)
        object.__setattr__(self, "_l1_center", self.center if self.center.any() else np.empty(0))
        # ||u||_p <= lip ||u||_2 (the membership screen's constant for p = 1, inf)
        object.__setattr__(self, "_lip", float(np.sqrt(self.center.size)) if self.norm == 1 else 1.0)

    # -- description -----------------------------------------------------------------------
    @property
    def shape(self):
        return (self.center.size,)

    def has_trait(self, trait):
        if trait == "polyhedral":
            return self.norm != 2
        if trait == "permutation_invariant":
            return bool(np.all(self.center == self.center[0]))
        return trait in self.traits

    def scale(self):
        return float(max(1.0, self.radius, np.abs(self.center).max()))

    def orthant_violation(self):
        """Why the ball leaves x >= 0 (min of x_i over it is c_i - r in every p-norm), else None."""
        i = int(np.argmin(self._lo))
        if self._lo[i] >= 0.0:
            return None
        return f"the set holds points with x[{i}] = {self._lo[i]:.6g} < 0 (center[{i}] - radius)"

    def cvxpy_constraints(self, x):
        import cvxpy as cp
        p = np.inf if self.norm == "inf" else self.norm
        return [cp.norm(x - self.center, p) <= self.radius]

    def linear_form(self):
        n, c, r = self.dim, self.center, self.radius
        if self.norm == "inf":
            return LinearForm.build(n, lo=c - r, hi=c + r)
        if self.norm == 1:
            # extended formulation z = (x, t): -t <= x - c <= t, sum t <= r, t >= 0
            import scipy.sparse as sp
            eye = sp.eye(n, format="csr")
            A = sp.vstack([sp.hstack([eye, -eye]), sp.hstack([-eye, -eye]),
                           sp.hstack([sp.csr_matrix((1, n)), sp.csr_matrix(np.ones((1, n)))])], format="csr")
            b = np.concatenate([c, -c, [r]])
            lo = np.concatenate([np.full(n, -np.inf), np.zeros(n)])
            return LinearForm.build(n, n_aux=n, A_ub=A, b_ub=b, lo=lo)
        return None

    def _norm(self, V):
        if self.norm == 2:
            return norm_rows(np.ascontiguousarray(V, dtype=float))
        if self.norm == 1:
            return np.abs(V).sum(axis=1)
        return np.abs(V).max(axis=1)

    def _dual_norm(self, C):
        if self.norm == 2:
            return norm_rows(np.ascontiguousarray(C, dtype=float))
        if self.norm == 1:
            return np.abs(C).max(axis=1)
        return np.abs(C).sum(axis=1)

    # -- native kernels ----------------------------------------------------------------------
    def bound_kernels(self):
        """project and lmo with this set's data bound, as numba functions of one point (K.jit_kernels())."""
        from ..kernels.bound import ball_kernels
        return ball_kernels(self.center, self.radius, self._p, self._lo, self._hi)

    def point_kernels(self, check=True):
        """Compiled single-point entries (setkit.kernels.point), bit-identical to the batch kernels."""
        from ..kernels import point
        D = point.pack([self.center, self._lo, self._hi],
                       [float(self.radius), float(self._p), float(check), float(self._l1_center.size == 0)])
        return {"project": (point.ball_project_point, (D,)), "lmo": (point.ball_lmo_point, (D,)),
                "distance": (point.ball_distance_point, (D,))}

    @kernel("project", into=True, checks=True)
    def project(self, Y, out=None, check=False):
        """Radial scaling (p=2), clipping (p=inf), or the simplex projection of |y - c| with signs restored (p=1), O(n).

        Range: p=inf is exact for every finite input; p=2 and p=1 are exact up to rounding for
        finite |y - c| <= 1e300 and radius in [1e-300, 1e300] (rescaled norms; for p=1, y - c is
        kept as an unevaluated sum and the threshold is found on |y - c| - max|y - c|)."""
        c, r = self.center, self.radius
        out = np.empty_like(Y) if out is None else out
        if self.norm == 2:
            if not l2_ball_project_into(Y, c, r, out) and check:
                raise NonFiniteRows(f"project on {self.label}: y must be finite")
            return out
        if check and not _all_finite(Y.reshape(-1)):
            raise NonFiniteRows(f"project on {self.label}: y must be finite")
        if self.norm == 1:
            l1_ball_rows_into(Y, self._l1_center, r, out)
            return out
        # p = inf: clip to the box [c - r, c + r] (points inside come back unchanged)
        return np.clip(Y, self._lo, self._hi, out=out)

    @kernel("project_jvp")
    def project_jvp(self, Y, V):
        """Closed forms: l2, I inside and (r/||z||)(I - z z^T/||z||^2) v outside (z = y - c); l-inf, the box rule; l1, the signed simplex face, O(n).

        l1 outside the ball: with S = {p_i != c_i} and s = sign(y - c), J v = v_S - s_S <s_S, v_S>/|S|
        on S and 0 off it (inside: J v = v). At a kink every constraint tight at p is treated as
        active: a point exactly on the boundary gets the outside formula (for l2 the tangent
        projector I - z z^T/r^2), an l1 coordinate with p_i = c_i exactly is fixed, an l-inf
        coordinate exactly at c_i +- r is fixed.
        """
        V = np.asarray(V, dtype=float)
        c, r = self.center, self.radius
        Z = Y - c
        if self.norm == "inf":
            return np.where((Y > self._lo) & (Y < self._hi), V, 0.0)
        if self.norm == 2:
            big = np.abs(Z).max(axis=1, initial=0.0)
            Zs = np.divide(Z, big[:, None], out=np.zeros_like(Z), where=big[:, None] > 0)
            ns = np.linalg.norm(Zs, axis=1)
            nz = big * ns                  # ||z|| without overflow in the squares
            out = V.copy()
            rows = nz >= r
            if rows.any():
                no = nz[rows]
                U = np.divide(Zs[rows], ns[rows, None], out=np.zeros_like(Zs[rows]), where=ns[rows, None] > 0)
                Vo = V[rows]
                f = np.divide(r, no, out=np.zeros_like(no), where=no > 0)
                out[rows] = f[:, None] * (Vo - U * np.einsum("ij,ij->i", U, Vo)[:, None])
            return out
        P = self.project(Y)
        out = V.copy()
        rows = np.abs(Z).sum(axis=1) >= r
        if rows.any():
            S = (P[rows] != c)
            sgn = np.sign(Z[rows]) * S
            Vo = V[rows]
            k = S.sum(axis=1)
            m = np.divide(np.einsum("ij,ij->i", sgn, Vo), k, out=np.zeros(k.shape), where=k > 0)
            out[rows] = np.where(S, Vo - sgn * m[:, None], 0.0)
        return out

    @kernel("distance")
    def distance(self, Y):
        """max(||y - c||_2 - r, 0) for p=2; the norm of y - project(y) otherwise, O(n)."""
        if self.norm == 2:
            return np.maximum(l2_dist_rows(Y, self.center) - self.radius, 0.0)
        if self.norm == "inf":
            # y - clip(y): maximum/minimum instead of np.clip (less overhead); they can differ from
            # clip only in the sign of a zero, which the squares in the norm do not see
            return norm_rows(Y - np.minimum(np.maximum(Y, self._lo), self._hi))
        return norm_rows(Y - self.project(Y))

    @kernel("lmo", into=True)
    def lmo(self, C, out=None):
        """c0 - r c/||c||_2 (p=2), c0 - r sign(c) (p=inf), c0 - r sign(c_j) e_j at the largest |c_j| (p=1), O(n)."""
        return ball_lmo_into(C, self.center, self.radius, self._p, np.empty_like(C) if out is None else out)

    @kernel("support")
    def support(self, C):
        """<c, center> + r ||c||_q with q the dual exponent, O(n)."""
        return rows_dot(C, self.center) + self.radius * self._dual_norm(C)

    @kernel("contains")
    def contains(self, X, tol):
        """||x - c||_p <= r screen, the distance only for borderline points (p = 1, inf), O(n)."""
        if self.norm == 2:
            return self._contains_l2(X, tol)
        return screened_contains(X, tol, self.violation, self.distance, self._lip, self._screen)

    def _contains_l2(self, X, tol):
        """distance(X) <= tol, deciding from a compiled norm where it is clear by a rounding margin.

        The compiled and the NumPy norm of x - c differ by far less than 4 (n + 8) eps (||x - c|| + r)
        (both sums of n squares), so a screened value that far from tol gives the same answer as the
        exact distance; the exact distance decides the rest."""
        s = l2_dist_rows(X, self.center)
        r = self.radius
        f = 4.0 * (X.shape[1] + 8) * 2.220446049250313e-16
        if s.shape[0] == 1:                  # one point: scalar logic
            s0, t0 = float(s[0]), float(tol[0])
            m = f * (s0 + r)
            if s0 - r <= t0 - m:
                return np.array([True])
            if s0 - r > t0 + m:
                return np.array([False])
            return self.distance(X) <= tol
        v = s - r
        m = f * (s + r)
        res = v <= tol - m
        unsure = ~res & (v <= tol + m)
        if unsure.any():
            res[unsure] = self.distance(X[unsure]) <= tol[unsure]
        return res

    def _screen(self, X, tol, lip):
        return ball_screen(X, self.center, self.radius, self._p, tol, lip)

    @kernel("violation")
    def violation(self, X):
        """max(||x - c||_p - r, 0), O(n)."""
        return ball_violation(X, self.center, self.radius, self._p)

    # -- exact knowledge for setkit.measures ------------------------------------------------------
    def exact_centroid(self, measure):
        """The center, for every measure: the ball, its extreme points and the law of lmo(g) (g and -g
        have the same law) are all symmetric about the center."""
        return self.center.copy()

    def exact_sample(self, k, measure, rng):
        """Exact draws for every norm.

        volume: p = 2, a uniform direction times radius * U^(1/n); p = inf, independent uniform
        coordinates; p = 1, a uniform point of {y >= 0, sum y <= 1} (normalized exponential spacings
        with a slack coordinate) with independent random signs. vertices and directions (the same
        law: lmo(g) = center - radius * (unit maximizer of <g, u>) and g is symmetric): p = 2, a
        uniform point of the sphere; p = inf, a random corner; p = 1, a random signed axis point.
        """
        n, r, c = self.center.size, self.radius, self.center
        if measure == "volume":
            if self.norm == 2:
                Z = rng.standard_normal((k, n))
                Z /= np.linalg.norm(Z, axis=1, keepdims=True)
                return c + r * Z * rng.random((k, 1)) ** (1.0 / n)
            if self.norm == "inf":
                return c + r * (2.0 * rng.random((k, n)) - 1.0)
            E = rng.standard_exponential((k, n + 1))
            Y = (E / E.sum(axis=1, keepdims=True))[:, :n]
            return c + r * Y * rng.choice([-1.0, 1.0], size=(k, n))
        if self.norm == 2:
            Z = rng.standard_normal((k, n))
            return c + r * Z / np.linalg.norm(Z, axis=1, keepdims=True)
        if self.norm == "inf":
            return c + r * rng.choice([-1.0, 1.0], size=(k, n))
        X = np.broadcast_to(c, (k, n)).copy()
        X[np.arange(k), rng.integers(0, n, size=k)] += r * rng.choice([-1.0, 1.0], size=k)
        return X
