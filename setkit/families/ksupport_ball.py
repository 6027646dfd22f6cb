"""The k-support norm ball: radius * conv{x : ||x||_0 <= k, ||x||_2 <= 1}.

k = 1 gives the l1 ball, k >= dim the Euclidean ball; in between, the tightest
convex relaxation of "k-sparse with bounded l2 norm" used in sparse prediction.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..errors import SolveError
from ..kernels.isotonic import decreasing_order
from ..kernels.norm_balls import ksupport_norm_rows, ksupport_rows
from ..kernels.spectral import pow2_scales
from ..kernels.structured_faces import ksupport_face_rows
from . import Family, kernel, register
from ._centered_ball import CenteredBall


@register("ksupport_ball")
@dataclass(frozen=True, eq=False, kw_only=True)
class KSupportBall(CenteredBall, Family):
    """K = {x in R^n : ||x||_sp(k) <= radius}, the gauge of conv{x : ||x||_0 <= k, ||x||_2 <= 1}.

    The norm: ||x||_sp^2 = min over 0 < theta <= 1, sum theta <= k of sum x_i^2 / theta_i, which
    on |x| sorted is sum_{i<q} z_i^2 + (sum_{i>=q} z_i)^2 / (k - q) for one q < k; the dual norm
    is the l2 norm of the k largest |c_i|. LMO: -radius top_k(c) / ||top_k(c)||_2; support:
    radius ||top_k(c)||_2; O(n) (a partition). Projection: x = prox of ||.||_sp^2 / (2 nu), i.e.
    x_i = y_i nu theta_i / (1 + nu theta_i) with theta_i = min(1, (|y_i| - tau)_+ / (nu tau)),
    sum theta = k (the level tau from one O(n) walk), and the multiplier nu found by bisection
    to full precision (about 60 steps of O(n) each) after one sort: O(n log n + 60 n). The
    bisection is the one iterative part; the answer is placed inside the ball (scaled if
    rounding left it a few ulps out) and its distance to the exact projection is at the level
    of the rounding of nu. The Frank-Wolfe certificate of ``project(y, details=True)`` bounds it.

    Derivatives: native (implicit differentiation of the KKT system on the answer's smooth piece, exact
    at the computed answer; project_vjp derived). KL geometry: refused, the ball is not inside x >= 0.

    >>> import setkit
    >>> K = setkit.compile({"kind": "ksupport_ball", "dim": 3, "k": 2, "radius": 1.0})
    >>> float(K.support([3.0, -4.0, 1.0]))
    5.0
    >>> K.lmo([3.0, -4.0, 1.0]).round(12).tolist()
    [-0.6, 0.8, 0.0]
    """

    n: int
    k: int
    radius: float
    traits = frozenset({"bounded", "centrally_symmetric", "permutation_invariant"})

    @classmethod
    def from_spec(cls, r):
        n = r.integer("dim", min=1)
        k = r.integer("k", min=1)
        if k > n:
            r.fail("k", f"k must be at most dim = {n} (k = dim already gives the Euclidean ball); got {k}.")
        radius = r.number("radius", min=0.0)
        return cls(n=n, k=k, radius=radius, name=r.name)

    @classmethod
    def benchmark_example(cls, n, rng):
        """The k-support ball with k = n/8, dim n."""
        return {"kind": "ksupport_ball", "about": "k-support ball, k = n/8", "dim": n, "k": max(1, n // 8), "radius": 1.0}

    @classmethod
    def examples(cls):
        """Small instances for the conformance checks (tests/test_conformance.py)."""
        return [{"kind": "ksupport_ball", "dim": 5, "k": 2, "radius": 1.0},
                {"kind": "ksupport_ball", "dim": 4, "k": 1, "radius": 2.5},
                {"kind": "ksupport_ball", "dim": 3, "k": 3, "radius": 0.5}]

    @classmethod
    def random_example(cls, rng):
        """A random k-support ball on 3..8 coordinates."""
        n = int(rng.integers(3, 9))
        return {"kind": "ksupport_ball", "dim": n, "k": int(rng.integers(1, n + 1)),
                "radius": float(np.round(rng.uniform(0.2, 4), 3))}

    @property
    def shape(self):
        return (self.n,)

    def scale(self):
        return max(1.0, self.radius)

    def cvxpy_constraints(self, x):
        # extended formulation of the variational form in xi = x / radius (theta_i in (0, 1]):
        # xi_i^2 / theta_i <= s_i (rotated cones), sum s <= 1, theta <= 1, sum theta <= k
        import cvxpy as cp
        n, r = self.n, self.radius
        if r == 0.0:
            return [x == 0]
        xi = x / r
        theta = cp.Variable(n, nonneg=True)
        s = cp.Variable(n)
        return [cp.SOC(s + theta, cp.vstack([2 * xi, s - theta]), axis=0),
                cp.sum(s) <= 1.0, theta <= 1.0, cp.sum(theta) <= self.k]

    def _orders(self, A):
        if A.shape[0] == 1:
            return decreasing_order(A[0])[None, :]
        return np.argsort(-A, axis=1, kind="stable")

    def norm(self, X):
        """||x||_sp for each row (one sort), O(n log n)."""
        t = pow2_scales(X)
        A = np.abs(X) / t[:, None]
        return t * ksupport_norm_rows(A, np.ascontiguousarray(self._orders(A)), self.k)

    # -- native kernels ---------------------------------------------------------------------------
    def axis_reach(self):
        """The largest t with t e_1 in the set."""
        return self.radius

    @kernel("project")
    def project(self, Y):
        """Sort |y|, bisection on the multiplier of the squared norm's prox (O(n) per step), O(n log n)."""
        if Y.shape[0] == 0:
            return Y.copy()
        t = pow2_scales(Y)
        A = np.abs(Y) / t[:, None]
        out = np.empty_like(A)
        ksupport_rows(A, np.ascontiguousarray(self._orders(A)), self.k, self.radius / t, out)
        if not np.isfinite(out).all():
            raise SolveError(f"{self.label}: the projection's level search failed on "
                             f"{int((~np.isfinite(out).all(axis=1)).sum())} point(s).", status="no_convergence")
        return np.copysign(out * t[:, None], Y)

    @kernel("project_jvp")
    def project_jvp(self, Y, V):
        """Implicit differentiation of the KKT system on the answer's smooth piece (closed-form inverse), O(n log n).

        Near the answer p the ball is {h(x) <= radius^2}, h = sum_S x_i^2 + (sum_M |x_i|)^2/(k - q)
        (S: the q largest |p_i| kept squared by the norm's formula at p, M: the other nonzeros;
        zeros fixed, unless p has fewer than k nonzeros: then h = ||x||^2 on every coordinate).
        From x - y + mu grad h = 0 and h = radius^2: J v = H^-1 v - H^-1 g <g, H^-1 v>/<g, H^-1 g>,
        g = grad h, H = I + mu grad^2 h. J = I inside; a point on the boundary keeps the constraint.
        """
        out = np.empty_like(Y)
        if Y.shape[0] == 0:
            return out
        P = self.project(Y)
        boundary = np.ascontiguousarray(~(self.norm(Y) < self.radius))
        t = pow2_scales(Y)
        order = np.ascontiguousarray(self._orders(np.abs(Y) / t[:, None]))
        ksupport_face_rows(np.ascontiguousarray(Y / t[:, None]), np.ascontiguousarray(P / t[:, None]), order,
                           self.k, boundary, np.ascontiguousarray(V, dtype=float), out)
        return out

    @kernel("violation")
    def violation(self, X):
        """max(||x||_sp - radius, 0), O(n log n)."""
        if X.shape[0] == 0:
            return np.zeros(0)
        return np.maximum(self.norm(X) - self.radius, 0.0)

    def _top(self, C):
        t = pow2_scales(C)
        A = np.abs(C) / t[:, None]
        k = self.k
        if k >= self.n:
            idx = np.broadcast_to(np.arange(self.n), A.shape)
        else:
            idx = np.argpartition(-A, k - 1, axis=1)[:, :k]
        top = np.take_along_axis(A, idx, axis=1)
        return t, idx, top, np.linalg.norm(top, axis=1)

    @kernel("lmo")
    def lmo(self, C):
        """-radius top_k(c) / ||top_k(c)||_2 (a partition for the k largest |c_i|), O(n)."""
        out = np.zeros_like(C)
        if C.shape[0] == 0:
            return out
        t, idx, top, nrm = self._top(C)
        for i in range(C.shape[0]):
            if nrm[i] == 0.0:
                continue
            j = idx[i]
            out[i, j] = -self.radius * np.sign(C[i, j]) * top[i] / nrm[i]
        return out

    @kernel("support")
    def support(self, C):
        """radius ||top_k(c)||_2 (the dual norm), O(n)."""
        if C.shape[0] == 0:
            return np.zeros(0)
        t, _, _, nrm = self._top(C)
        return self.radius * t * nrm
