"""The elastic-net set {x : mix ||x||_1 + (1 - mix)/2 ||x||_2^2 <= radius}."""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..errors import SolveError
from ..kernels.norm_balls import elastic_level, elastic_lmo_rows, elastic_rows
from ..kernels.spectral import pow2_scales
from ..kernels.structured_faces import elastic_face_rows
from . import Family, kernel, register
from ._centered_ball import CenteredBall


@register("elastic_ball")
@dataclass(frozen=True, eq=False, kw_only=True)
class ElasticBall(CenteredBall, Family):
    """K = {x in R^n : a ||x||_1 + (1 - a)/2 ||x||_2^2 <= radius}, a = mix in [0, 1].

    The definition used here: a sublevel set of the elastic-net penalty (a = 1: the l1 ball of
    the radius; a = 0: the Euclidean ball of radius sqrt(2 radius)); it is convex, compact and
    symmetric, but not a norm ball for 0 < a < 1 (it is not a scaled copy across radii).
    Projection: x = sign(y) (|y| - lam a)_+ / (1 + lam (1 - a)) (soft threshold then scale, the
    KKT form) with lam >= 0 making the constraint tight, by Newton's method on the convex
    decreasing constraint value (a few O(n) steps, stopped when a step no longer moves lam).
    LMO: x_i = -sign(c_i) (eta |c_i| - a)_+ / (1 - a) with eta from one sort (closed form on
    the active set); the vertex -(radius / a) sign(c_j) e_j when a = 1. Support: <c, -lmo(-c)>.

    Derivatives: native and exact (implicit differentiation of the active constraint on the support;
    project_vjp derived). KL geometry: refused, the set is not inside x >= 0.

    >>> import setkit
    >>> K = setkit.compile({"kind": "elastic_ball", "dim": 2, "mix": 1.0, "radius": 1.0})
    >>> K.project([2.0, 0.5]).round(12).tolist()
    [1.0, 0.0]
    >>> K2 = setkit.compile({"kind": "elastic_ball", "dim": 2, "mix": 0.0, "radius": 0.5})
    >>> K2.project([3.0, 4.0]).round(12).tolist()
    [0.6, 0.8]
    """

    n: int
    radius: float
    mix: float
    traits = frozenset({"bounded", "centrally_symmetric", "permutation_invariant"})

    @classmethod
    def from_spec(cls, r):
        n = r.integer("dim", min=1)
        radius = r.number("radius", min=0.0)
        mix = r.number("mix", min=0.0, max=1.0)
        return cls(n=n, radius=radius, mix=mix, name=r.name)

    @classmethod
    def benchmark_example(cls, n, rng):
        """The elastic-net ball with mix 0.5, dim n."""
        return {"kind": "elastic_ball", "about": "elastic-net ball, mix 0.5", "dim": n, "radius": 1.0, "mix": 0.5}

    @classmethod
    def examples(cls):
        """Small instances for the conformance checks (tests/test_conformance.py)."""
        # (the cvxpy reference, Clarabel, stops at "optimal_inaccurate" on some nearly degenerate points
        # of these sets; tests/families/test_elastic_ball.py compares with the loose reference instead)
        return [{"kind": "elastic_ball", "dim": 6, "radius": 2.0, "mix": 0.5},
                {"kind": "elastic_ball", "dim": 4, "radius": 2.5, "mix": 1.0},
                {"kind": "elastic_ball", "dim": 3, "radius": 0.5, "mix": 0.0}]

    @classmethod
    def random_example(cls, rng):
        """A random elastic-net set on 2..8 coordinates."""
        return {"kind": "elastic_ball", "dim": int(rng.integers(2, 9)), "radius": float(np.round(rng.uniform(0.2, 4), 3)),
                "mix": float(np.round(rng.uniform(0.0, 1.0), 2))}

    @property
    def shape(self):
        return (self.n,)

    def scale(self):
        return max(1.0, float(elastic_level(self.mix, 1.0 - self.mix, self.radius)))

    def cvxpy_constraints(self, x):
        # A homogeneous second-order-cone form (no rotated cone, whose cancellation stops Clarabel at
        # "optimal_inaccurate"): in xi = x / t, t the largest |x_i| on the set, the constraint reads
        # a' ||xi||_1 + b'/2 ||xi||^2 <= 1 with a' = a t / r, b' = b t^2 / r (a' + b'/2 = 1), and for
        # tau >= ||xi||_1 that is || (a' tau, sqrt(2 b') xi) ||_2 <= 2 - a' tau (square both sides).
        # |xi| is split as p + m with xi = p - m, p, m >= 0 (the complementary split is optimal), and
        # s >= ||xi||_2 is its own cone (both choices measured: fewer inaccurate Clarabel stops).
        import cvxpy as cp
        a, b, r, n = self.mix, 1.0 - self.mix, self.radius, self.n
        if r == 0.0:
            return [x == 0]
        if b == 0.0:
            return [cp.norm(x, 1) <= r / a]
        if a == 0.0:
            return [cp.norm(x, 2) <= float(np.sqrt(2.0 * r / b))]
        t = float(elastic_level(a, b, r))
        a2, b2 = a * t / r, b * t * t / r
        p = cp.Variable(n, nonneg=True)
        m = cp.Variable(n, nonneg=True)
        s = cp.Variable(nonneg=True)
        tau = cp.sum(p + m)
        return [x / t == p - m, cp.SOC(s, x / t),
                cp.SOC(2.0 - a2 * tau, cp.hstack([a2 * tau, float(np.sqrt(2.0 * b2)) * s]))]

    def value(self, X):
        """mix ||x||_1 + (1 - mix)/2 ||x||_2^2 per row (inf where the square overflows)."""
        with np.errstate(over="ignore"):
            v = self.mix * np.abs(X).sum(axis=1) if self.mix > 0.0 else np.zeros(X.shape[0])
            if self.mix < 1.0:      # a zero weight times an overflowed square would be 0 * inf = NaN
                v = v + 0.5 * (1.0 - self.mix) * np.einsum("ij,ij->i", X, X)
            return v

    # -- native kernels ---------------------------------------------------------------------------
    def axis_reach(self):
        """The largest t with t e_1 in the set."""
        return elastic_level(self.mix, 1.0 - self.mix, self.radius)

    @kernel("project")
    def project(self, Y):
        """Soft threshold then scale, Newton on the multiplier from a lower bound (few O(n) steps), O(n) per step."""
        if Y.shape[0] == 0:
            return Y.copy()
        U = np.empty_like(Y)
        bad = elastic_rows(np.abs(Y), self.mix, 1.0 - self.mix, self.radius, U)
        if bad:
            raise SolveError(f"{self.label}: the projection's Newton iteration did not settle on {bad} point(s).",
                             status="no_convergence")
        return np.copysign(U, Y)

    @kernel("project_jvp")
    def project_jvp(self, Y, V):
        """Implicit differentiation of the active constraint on the support: (v_A - g <g, v>_A/<g, g>_A) / (1 + lam (1 - mix)), O(n).

        x = sign(y) (|y| - lam a)_+ / (1 + lam b) with phi(x) = radius (a = mix, b = 1 - mix);
        on the support A, d|x| = (d|y| - g dlam) / (1 + lam b) with g = a + b |x| the gradient of
        phi, and d phi = 0 gives dlam = <g, d|y|>_A / <g, g>_A. J = I inside. At kinks the
        smallest face: an exact zero of the answer is fixed (when mix > 0), a point on the
        boundary keeps the constraint.
        """
        out = np.empty_like(Y)
        if Y.shape[0] == 0:
            return out
        P = self.project(Y)
        boundary = np.ascontiguousarray(~(self.value(Y) < self.radius))
        elastic_face_rows(Y, P, self.mix, 1.0 - self.mix, boundary, np.ascontiguousarray(V, dtype=float), out)
        return out

    @kernel("violation")
    def violation(self, X):
        """max(mix ||x||_1 + (1 - mix)/2 ||x||^2 - radius, 0), O(n)."""
        return np.maximum(self.value(X) - self.radius, 0.0)

    @kernel("lmo")
    def lmo(self, C):
        """Closed form on the active set after one sort of |c| (eta from the tight constraint), O(n log n)."""
        out = np.zeros_like(C)
        if C.shape[0] == 0:
            return out
        t = pow2_scales(C)
        elastic_lmo_rows(np.abs(C) / t[:, None], self.mix, 1.0 - self.mix, self.radius, out)
        return -np.copysign(out, C)

    @kernel("support")
    def support(self, C):
        """<c, x> at the maximizer (the LMO of -c), O(n log n)."""
        return np.einsum("ij,ij->i", C, self.lmo(-C))
