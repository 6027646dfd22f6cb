"""The operator-norm (spectral-norm) ball {X in R^{m x n} : ||X||_2 = sigma_max(X) <= radius}."""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..kernels.spectral import pow2_scales, singular_map_jvp, svd_stack
from . import Family, kernel, register
from .nuclear_ball import read_matrix_ball, sphere_ball_draws


@register("spectral_ball")
@dataclass(frozen=True, eq=False, kw_only=True)
class SpectralBall(Family):
    """K = {X in R^{m x n} : sigma_max(X) <= radius}; points are m x n matrices.

    Projection: one SVD, singular values clipped at the radius,
    X = U diag(min(s, r)) V^T; O(m n min(m, n)). LMO: the polar factor,
    -radius U V^T from the thin SVD of C (all min(m, n) singular pairs; for a
    rank-deficient C the singular vectors LAPACK returns for the zero singular
    values complete it, and any completion minimizes, since <C, X> only sees
    the nonzero part). Support: radius ||C||_* (the dual norm, by von Neumann's
    trace inequality).

    >>> import setkit
    >>> K = setkit.compile({"kind": "spectral_ball", "rows": 2, "cols": 2, "radius": 1.0})
    >>> K.project([[3.0, 0.0], [0.0, 0.5]]).round(12).tolist()
    [[1.0, 0.0], [0.0, 0.5]]
    >>> round(float(K.support([[3.0, 0.0], [0.0, -0.5]])), 12)
    3.5
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
        """The operator-norm ball of m x m matrices, n = m^2 (up to m = 320: one SVD per point)."""
        if n > 102_400:
            return None
        m = max(2, int(round(n ** 0.5)))
        return {"kind": "spectral_ball", "about": "operator-norm ball, m x m", "rows": m, "cols": m, "radius": 1.0}

    @classmethod
    def examples(cls):
        """Small instances for the conformance checks (tests/test_conformance.py)."""
        return [{"kind": "spectral_ball", "rows": 3, "cols": 4, "radius": 1.0},
                {"kind": "spectral_ball", "rows": 2, "cols": 2, "radius": 2.5},
                {"kind": "spectral_ball", "rows": 3, "cols": 1, "radius": 0.5}]

    @classmethod
    def random_example(cls, rng):
        """A random spectral ball of 2..4 x 2..4 matrices."""
        return {"kind": "spectral_ball", "rows": int(rng.integers(2, 5)), "cols": int(rng.integers(2, 5)),
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
        return [cp.sigma_max(x / self.radius) <= 1.0]

    def _scaled(self, Y):
        t = pow2_scales(Y)
        return t, (Y / t[:, None]).reshape(Y.shape[0], self.rows, self.cols)

    # -- native kernels ---------------------------------------------------------------------------
    @kernel("project")
    def project(self, Y):
        """One SVD, singular values clipped at the radius, rebuilt, O(m n min(m, n))."""
        out = Y.copy()
        if Y.shape[0] == 0:
            return out
        t, M = self._scaled(Y)
        rt = self.radius / t
        U, s, Vt = svd_stack(M)
        for i in np.flatnonzero(s[:, 0] > rt):
            # rebuilt from the clipped values (not Y minus the excess, which would leave the top
            # singular values off by rounding of |Y|, far outside the ball for huge Y)
            out[i] = t[i] * ((U[i] * np.minimum(s[i], rt[i])) @ Vt[i]).reshape(-1)
        return out

    @kernel("distance")
    def distance(self, Y):
        """||(s - radius)_+||_2 from the singular values alone, O(m n min(m, n))."""
        if Y.shape[0] == 0:
            return np.zeros(0)
        t, M = self._scaled(Y)
        s = svd_stack(M, compute_uv=False)
        return t * np.linalg.norm(np.maximum(s - (self.radius / t)[:, None], 0.0), axis=1)

    @kernel("contains")
    def contains(self, X, tol):
        """distance(X) <= tol from the singular values, O(m n min(m, n))."""
        return self.distance(X) <= tol

    @kernel("violation")
    def violation(self, X):
        """max(sigma_max(X) - radius, 0), O(m n min(m, n))."""
        if X.shape[0] == 0:
            return np.zeros(0)
        t, M = self._scaled(X)
        s = svd_stack(M, compute_uv=False)
        return np.maximum(t * s[:, 0] - self.radius, 0.0)

    @kernel("lmo")
    def lmo(self, C):
        """-radius U V^T, the polar factor of C from one thin SVD (LAPACK's completion when C is rank-deficient), O(m n min(m, n))."""
        out = np.zeros_like(C)
        if C.shape[0] == 0:
            return out
        _, M = self._scaled(C)
        U, s, Vt = svd_stack(M)
        for i in range(C.shape[0]):
            out[i] = -self.radius * (U[i] @ Vt[i]).reshape(-1)
        return out

    @kernel("support")
    def support(self, C):
        """radius ||C||_* (sum of singular values, the dual norm), O(m n min(m, n))."""
        if C.shape[0] == 0:
            return np.zeros(0)
        t, M = self._scaled(C)
        return self.radius * (t * svd_stack(M, compute_uv=False).sum(axis=1))

    # -- derivatives ------------------------------------------------------------------------------
    def _jacobian_product(self, Y, D):
        b = Y.shape[0]
        out = np.zeros_like(Y)
        if b == 0:
            return out
        t, M = self._scaled(Y)
        rt = self.radius / t
        U, s, Vt = svd_stack(M)
        td = pow2_scales(D)
        Dm = (D / td[:, None]).reshape(b, self.rows, self.cols)
        for i in range(b):
            if s[i, 0] < rt[i]:
                out[i] = D[i]         # strictly inside: the identity
                continue
            free = s[i] < rt[i]
            f = np.minimum(s[i], rt[i])
            J = singular_map_jvp(U[i], s[i], Vt[i], f, free, lambda a, fr=free: np.where(fr, a, 0.0), Dm[i])
            out[i] = td[i] * J.reshape(-1)
        return out

    @kernel("project_jvp")
    def project_jvp(self, Y, D):
        """SVD of y, clipped singular values frozen, divided differences off the diagonal, O(m n min(m, n)).

        P(Y) = U diag(min(s, r)) V^T; :func:`setkit.kernels.spectral.singular_map_jvp` with
        J_f = diag(s_i < r). Strictly inside, J = I. At kinks a singular value equal to the
        radius counts as clipped (its constraint is tight, hence active).
        """
        return self._jacobian_product(Y, D)

    @kernel("project_vjp")
    def project_vjp(self, Y, U):
        """The JVP formula applied to u (the Jacobian of a Euclidean projection is symmetric), O(m n min(m, n))."""
        return self._jacobian_product(Y, U)

    # -- factored answers -------------------------------------------------------------------------
    def factored(self, op, X):
        """project: (U, min(s, radius), Vt) from the thin SVD (full rank k = min(m, n): the answer is
        not low-rank in general); lmo: (-U, radius 1, Vt), the polar factor. O(m n min(m, n))."""
        b, m, n = X.shape[0], self.rows, self.cols
        if op not in ("project", "lmo"):
            return None
        k = min(m, n)
        if b == 0:
            return np.zeros((0, m, k)), np.zeros((0, k)), np.zeros((0, k, n))
        t, M = self._scaled(X)
        U, s, Vt = svd_stack(M)
        if op == "lmo":
            return -U, np.full((b, k), self.radius), Vt
        return U, np.minimum(t[:, None] * s, self.radius), Vt

    def orthant_violation(self):
        """Why the set is not inside the nonnegative orthant (radius > 0), None for the set {0}."""
        if self.radius == 0.0:
            return None
        return (f"matrix entries of its points can be negative: -radius e1 e1^T (entry [0, 0] = {-self.radius:.6g}) "
                f"is in the operator-norm ball")

    def exact_centroid(self, measure):
        """The zero matrix for every measure (the set and its extreme points are symmetric under X -> -X)."""
        return np.zeros(self.shape)

    def exact_sample(self, k, measure, rng):
        """vertices and directions: radius Q with Q uniform (Haar) among the m x n matrices whose
        singular values are all 1, drawn as the Q factor of a Gaussian matrix with the signs of R's
        diagonal moved into Q (Mezzadri, "How to generate random matrices from the classical compact
        groups", 2007; from memory). Those matrices times the radius are the extreme points, and the
        law of lmo(g) = -radius polar(g) is invariant under X -> P X Q^T, hence the same Haar law.
        volume: exact only for a single row or column (an l2 ball); None otherwise (hit-and-run)."""
        m, n, r = self.rows, self.cols, self.radius
        if measure in ("vertices", "directions"):
            tall = m >= n
            G = rng.standard_normal((k, m, n) if tall else (k, n, m))
            Q, R = np.linalg.qr(G)
            d = np.sign(np.diagonal(R, axis1=1, axis2=2))
            d[d == 0.0] = 1.0
            Q = Q * d[:, None, :]
            if not tall:
                Q = np.swapaxes(Q, 1, 2)
            return r * Q.reshape(k, m * n)
        if measure == "volume" and min(m, n) == 1:
            return sphere_ball_draws(k, m * n, r, rng)
        return None
