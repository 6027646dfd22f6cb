"""The nuclear-norm ball {X in R^{m x n} : ||X||_* <= radius} (sum of singular values).

The set Frank-Wolfe methods use for low-rank matrix estimation: its LMO is one
top singular pair, its projection one SVD.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..kernels.spectral import (DENSE_MAX_SIDE, pow2_scales, simplex_sorted, singular_map_jvp, support_block_jvp,
                                svd_stack, top_singular_triplet)
from . import Family, kernel, register


def read_matrix_ball(cls, r):
    """rows, cols (whole numbers >= 1) and radius (>= 0) of a matrix-norm ball."""
    m = r.integer("rows", min=1)
    n = r.integer("cols", min=1)
    radius = r.number("radius", min=0.0)
    return cls(rows=m, cols=n, radius=radius, name=r.name)


@register("nuclear_ball")
@dataclass(frozen=True, eq=False, kw_only=True)
class NuclearBall(Family):
    """K = {X in R^{m x n} : ||X||_* = sum_i sigma_i(X) <= radius}; points are m x n matrices.

    Projection: one SVD Y = U diag(s) V^T, then the l1-ball projection of s
    (the simplex threshold), X = U diag(s') V^T; O(m n min(m, n)). LMO:
    -radius u1 v1^T for the top singular pair of C (for large C by Lanczos, with a
    measured residual and a value within 1e-9 relative of the optimum, see
    setkit.kernels.spectral); support: radius ||C||_2. Membership and distance from the
    singular values alone (the distance is that of s to the l1 ball: the norm
    is unitarily invariant).

    >>> import setkit
    >>> K = setkit.compile({"kind": "nuclear_ball", "rows": 2, "cols": 2, "radius": 1.0})
    >>> K.project([[3.0, 0.0], [0.0, 1.0]]).round(12).tolist()
    [[1.0, 0.0], [0.0, 0.0]]
    >>> round(float(K.support([[3.0, 0.0], [0.0, 1.0]])), 12)
    3.0
    """

    rows: int
    cols: int
    radius: float
    traits = frozenset({"bounded", "centrally_symmetric"})

    @classmethod
    def from_spec(cls, r):
        return read_matrix_ball(cls, r)

    @classmethod
    def benchmark_example(cls, n, rng):
        """The nuclear-norm ball of m x m matrices, n = m^2 (up to m = 320: one SVD per point)."""
        if n > 102_400:
            return None
        m = max(2, int(round(n ** 0.5)))
        return {"kind": "nuclear_ball", "about": "nuclear-norm ball, m x m", "rows": m, "cols": m, "radius": float(m)}

    @classmethod
    def examples(cls):
        """Small instances for the conformance checks (tests/test_conformance.py)."""
        return [{"kind": "nuclear_ball", "rows": 3, "cols": 4, "radius": 1.0},
                {"kind": "nuclear_ball", "rows": 2, "cols": 2, "radius": 2.5},
                {"kind": "nuclear_ball", "rows": 1, "cols": 3, "radius": 0.5}]

    @classmethod
    def random_example(cls, rng):
        """A random nuclear ball of 2..4 x 2..4 matrices."""
        return {"kind": "nuclear_ball", "rows": int(rng.integers(2, 5)), "cols": int(rng.integers(2, 5)),
                "radius": float(np.round(rng.uniform(0.2, 4.0), 3))}

    @property
    def shape(self):
        return (self.rows, self.cols)

    def scale(self):
        return max(1.0, self.radius)

    def cvxpy_constraints(self, x):
        import cvxpy as cp
        if self.radius == 0.0:
            return [x == 0]
        # in units of the radius: Clarabel's semidefinite cones are far better conditioned at scale 1
        return [cp.normNuc(x / self.radius) <= 1.0]

    # -- helpers ----------------------------------------------------------------------------------
    def _scaled(self, Y):
        t = pow2_scales(Y)
        return t, (Y / t[:, None]).reshape(Y.shape[0], self.rows, self.cols)

    def _sv_distance(self, s, rt):
        """||s - P(s)|| for singular values s (rows) and per-row radii rt."""
        out = np.zeros(s.shape[0])
        for i in np.flatnonzero(s.sum(axis=1) > rt):
            out[i] = np.linalg.norm(s[i] - simplex_sorted(s[i], float(rt[i])))
        return out

    # -- native kernels ---------------------------------------------------------------------------
    @kernel("project")
    def project(self, Y):
        """One SVD, l1-ball projection of the singular values, rebuild from the kept ones, O(m n min(m, n))."""
        out = Y.copy()
        if Y.shape[0] == 0:
            return out
        t, M = self._scaled(Y)
        rt = self.radius / t
        U, s, Vt = svd_stack(M)
        for i in np.flatnonzero(s.sum(axis=1) > rt):
            sp = simplex_sorted(s[i], float(rt[i]))      # s >= 0 and sum s > rt: the l1 ball's face
            q = int(np.count_nonzero(sp > 0.0))
            out[i] = t[i] * ((U[i, :, :q] * sp[:q]) @ Vt[i, :q]).reshape(-1)
        return out

    @kernel("distance")
    def distance(self, Y):
        """||s - P_l1(s)||_2 from the singular values alone (no singular vectors), O(m n min(m, n))."""
        if Y.shape[0] == 0:
            return np.zeros(0)
        t, M = self._scaled(Y)
        s = svd_stack(M, compute_uv=False)
        return t * self._sv_distance(s, self.radius / t)

    @kernel("contains")
    def contains(self, X, tol):
        """distance(X) <= tol from the singular values, O(m n min(m, n))."""
        return self.distance(X) <= tol

    @kernel("violation")
    def violation(self, X):
        """max(||X||_* - radius, 0) from the singular values, O(m n min(m, n))."""
        if X.shape[0] == 0:
            return np.zeros(0)
        t, M = self._scaled(X)
        s = svd_stack(M, compute_uv=False)
        return np.maximum(t * s.sum(axis=1) - self.radius, 0.0)

    def _top_pairs(self, C):
        """(u (b, m), v (b, n), nonzero (b,), methods, residuals): the top singular pair of every row."""
        b = C.shape[0]
        us, vs = np.zeros((b, self.rows)), np.zeros((b, self.cols))
        us[:, 0], vs[:, 0] = 1.0, 1.0
        nonzero = np.zeros(b, dtype=bool)
        methods, resid = ["zero direction"] * b, [0.0] * b
        if b == 0:
            return us, vs, nonzero, methods, resid
        t, M = self._scaled(C)
        if min(self.rows, self.cols) <= DENSE_MAX_SIDE:
            U, s, Vt = svd_stack(M)
            for i in range(b):
                if s[i, 0] > 0.0:
                    us[i], vs[i], nonzero[i], methods[i] = U[i, :, 0], Vt[i, 0], True, "lapack svd"
        else:
            for i in range(b):
                u, sv, v, res, how = top_singular_triplet(M[i])
                if sv > 0.0:
                    us[i], vs[i], nonzero[i] = u, v, True
                    methods[i] = f"{how}; top singular pair residual {res / sv:.1e} relative"
                    resid[i] = res * t[i]
        return us, vs, nonzero, methods, resid

    @kernel("lmo")
    def lmo(self, C):
        """-radius u1 v1^T for the top singular pair of C: dense SVD up to 120 per side, else block Lanczos (value within 1e-9 relative)."""
        b = C.shape[0]
        us, vs, nonzero, methods, _ = self._top_pairs(C)
        out = -self.radius * np.einsum("bi,bj->bij", us, vs).reshape(b, self.rows * self.cols)
        out[~nonzero] = 0.0
        return out, {"status": ["solved"] * b, "backend_status": methods, "iterations": [0] * b}

    @kernel("support")
    def support(self, C):
        """radius ||C||_2 (the dual norm): dense singular values up to 120 per side, else block Lanczos (within 1e-9 relative)."""
        b = C.shape[0]
        if b == 0:
            return np.zeros(0)
        t, M = self._scaled(C)
        if min(self.rows, self.cols) <= DENSE_MAX_SIDE:
            s1 = svd_stack(M, compute_uv=False)[:, 0]
        else:
            s1 = np.array([top_singular_triplet(A)[1] for A in M])
        return self.radius * (t * s1)

    # -- derivatives ------------------------------------------------------------------------------
    def _jacobian_product(self, Y, D):
        b = Y.shape[0]
        out = np.zeros_like(Y)
        if b == 0:
            return out
        t, M = self._scaled(Y)
        rt = self.radius / t
        U, s, Vt = svd_stack(M)
        td = pow2_scales(D)           # J is linear: scale the direction apart (no overflow in J D)
        Dm = (D / td[:, None]).reshape(b, self.rows, self.cols)
        for i in range(b):
            if s[i].sum() < rt[i]:
                out[i] = D[i]         # strictly inside: the projection is the identity near y
                continue
            f = simplex_sorted(s[i], float(rt[i]))
            free = f > 0.0
            J = singular_map_jvp(U[i], s[i], Vt[i], f, free, support_block_jvp(free, True), Dm[i])
            out[i] = td[i] * J.reshape(-1)
        return out

    @kernel("project_jvp")
    def project_jvp(self, Y, D):
        """SVD of y, the l1-ball projection's Jacobian on the singular values and divided differences off them, O(m n min(m, n)).

        Outside the ball P(Y) = U diag(f(s)) V^T with f(s) = (s - tau)_+ summing to the radius;
        :func:`setkit.kernels.spectral.singular_map_jvp` gives J D with J_f(s) a = a - mean(a)
        on the kept singular values (0 elsewhere). Strictly inside, J = I. At kinks the
        returned element treats every tight constraint as active: the norm constraint when
        ||y||_* equals the radius, and a singular value equal to the threshold as dropped.
        """
        return self._jacobian_product(Y, D)

    @kernel("project_vjp")
    def project_vjp(self, Y, U):
        """The JVP formula applied to u (the Jacobian of a Euclidean projection is symmetric), O(m n min(m, n))."""
        return self._jacobian_product(Y, U)

    # -- factored answers -------------------------------------------------------------------------
    def factored(self, op, X):
        """project: (U, s, Vt) with the kept singular values only (rank = support of the
        thresholded values, padded with zero values to the batch's largest rank); lmo: the rank-one
        (-u1, [radius], v1^T) (a zero value for c = 0). O(m n min(m, n)) like the dense operator."""
        b, m, n = X.shape[0], self.rows, self.cols
        if op == "lmo":
            us, vs, nonzero, _, _ = self._top_pairs(X)
            return -us[:, :, None], np.where(nonzero, self.radius, 0.0)[:, None], vs[:, None, :]
        if op != "project":
            return None
        k = min(m, n)
        if b == 0:
            return np.zeros((0, m, 0)), np.zeros((0, 0)), np.zeros((0, 0, n))
        t, M = self._scaled(X)
        rt = self.radius / t
        U, s, Vt = svd_stack(M)
        sp = np.array(s)
        for i in np.flatnonzero(s.sum(axis=1) > rt):
            sp[i] = simplex_sorted(s[i], float(rt[i]))
        q = max(1, int(np.count_nonzero(sp > 0.0, axis=1).max(initial=0)))
        q = min(q, k)
        return U[:, :, :q], t[:, None] * sp[:, :q], Vt[:, :q, :]

    # -- the KL geometry --------------------------------------------------------------------------
    def orthant_violation(self):
        """Why the set is not inside the nonnegative orthant (radius > 0), None for the set {0}."""
        if self.radius == 0.0:
            return None
        return (f"matrix entries of its points can be negative: -radius e1 e1^T (entry [0, 0] = {-self.radius:.6g}) "
                f"is in the nuclear-norm ball")

    # -- exact knowledge for setkit.measures ------------------------------------------------------
    def exact_centroid(self, measure):
        """The zero matrix for every measure: the set, its extreme points and the law of lmo(g) are
        symmetric under X -> -X."""
        return np.zeros(self.shape)

    def exact_sample(self, k, measure, rng):
        """vertices and directions: radius u v^T with u, v independent and uniform on their unit
        spheres. The extreme points are the matrices radius u v^T; the law of lmo(g) = -radius u1 v1^T
        for a Gaussian g is invariant under X -> P X Q^T (P, Q orthogonal), and so is the product of the
        uniform laws; an invariant law on that orbit is unique, so both measures are this one.
        volume: exact only for a single row or column (an l2 ball: a uniform direction times
        radius U^(1/dim)); None for larger matrices (no exact sampler is known to us: hit-and-run)."""
        m, n, r = self.rows, self.cols, self.radius
        if measure in ("vertices", "directions"):
            u = rng.standard_normal((k, m))
            v = rng.standard_normal((k, n))
            u /= np.linalg.norm(u, axis=1, keepdims=True)
            v /= np.linalg.norm(v, axis=1, keepdims=True)
            return r * np.einsum("bi,bj->bij", u, v).reshape(k, m * n)
        if measure == "volume" and min(m, n) == 1:
            return sphere_ball_draws(k, m * n, r, rng)
        return None


def sphere_ball_draws(k, d, r, rng):
    """k uniform points of the Euclidean ball of radius r in R^d: a uniform direction times r U^(1/d), O(k d)."""
    Z = rng.standard_normal((k, d))
    Z /= np.linalg.norm(Z, axis=1, keepdims=True)
    return r * Z * rng.random((k, 1)) ** (1.0 / d)
