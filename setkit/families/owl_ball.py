"""The ordered weighted l1 (OWL) ball {x : sum_i w_i |x|_(i) <= radius}, |x|_(1) >= |x|_(2) >= ...

With w = (1, 0, ..., 0) it is the l-infinity ball, with w = 1 the l1 ball, with
w_i = 1 for i <= k the ball of the sum of the k largest magnitudes; decreasing
linear weights give the OSCAR / SLOPE penalties' balls.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..errors import SolveError
from ..kernels.isotonic import decreasing_order
from ..kernels.norm_balls import owl_project_sorted, owl_rows
from ..kernels.spectral import pow2_scales
from ..kernels.structured_faces import owl_face_rows
from . import Family, kernel, register
from ._centered_ball import CenteredBall

# single vectors at least this long take the sort-then-place route
LONG = 20_000


@register("owl_ball")
@dataclass(frozen=True, eq=False, kw_only=True)
class OwlBall(CenteredBall, Family):
    """K = {x in R^n : Omega(x) = sum_i w_i |x|_(i) <= radius}, w nonincreasing, w >= 0, w_1 > 0.

    Projection (exact): the answer keeps the signs of y and the order of |y|; on z = |y| sorted
    nonincreasingly it is max(PAV(z - lam w), 0), the proximal map of lam Omega (pool-adjacent-
    violators for a nonincreasing fit), with the multiplier lam found by Newton's method on the
    convex piecewise-linear g(lam) = <w, u(lam)> from lam = 0 (finitely many O(n) steps); one
    sort, O(n log n). LMO: a vertex -radius sign(c) 1_S / W_k on the k largest |c_i| (S), k
    maximizing (sum of the k largest |c_i|) / W_k, W_k = w_1 + ... + w_k; support: radius times
    that maximum (the dual norm).

    Derivatives: native and exact (project_jvp from the isotonic blocks of the answer; project_vjp
    derived, the Jacobian being symmetric). KL geometry: refused, the ball is not inside x >= 0.

    >>> import setkit
    >>> K = setkit.compile({"kind": "owl_ball", "weights": [2.0, 1.0], "radius": 1.0})
    >>> K.project([3.0, -1.0]).round(12).tolist()
    [0.5, -0.0]
    >>> float(K.support([1.0, 1.0]))
    0.6666666666666666
    """

    weights: np.ndarray
    radius: float
    traits = frozenset({"bounded", "centrally_symmetric", "permutation_invariant"})

    @classmethod
    def from_spec(cls, r):
        w = r.array("weights", ndim=1)
        if w.size == 0:
            r.fail("weights", "weights must list one weight per coordinate; got an empty list.")
        if (w < 0).any():
            j = int(np.flatnonzero(w < 0)[0])
            r.fail("weights", f"weights must be nonnegative; got {w[j]} at position {j}.")
        if (np.diff(w) > 0).any():
            j = int(np.flatnonzero(np.diff(w) > 0)[0])
            r.fail("weights", f"weights must be nonincreasing (w_1 >= w_2 >= ...); got {w[j]} then {w[j + 1]} "
                              f"at positions {j}, {j + 1}; sort them decreasingly.")
        if w[0] <= 0:
            r.fail("weights", "the first (largest) weight must be positive, else the set is all of R^n; got "
                              f"{w[0]}.")
        radius = r.number("radius", min=0.0)
        return cls(weights=w, radius=radius, name=r.name)

    @classmethod
    def benchmark_example(cls, n, rng):
        """An ordered weighted l1 ball with four weight levels (the reference then has 4 sum_largest terms)."""
        import numpy as np
        return {"kind": "owl_ball", "about": "ordered weighted l1 ball, 4 levels",
                "weights": np.repeat([2.0, 1.5, 1.0, 0.5], -(-n // 4))[:n], "radius": 1.0}

    @classmethod
    def examples(cls):
        """Small instances for the conformance checks (tests/test_conformance.py)."""
        return [{"kind": "owl_ball", "weights": [3.0, 2.0, 2.0, 1.0, 0.5], "radius": 1.0},
                {"kind": "owl_ball", "weights": [1.0, 1.0, 0.0, 0.0], "radius": 2.5},
                {"kind": "owl_ball", "weights": [1.0], "radius": 0.5}]

    @classmethod
    def random_example(cls, rng):
        """Random nonincreasing weights (with ties) on 3..8 coordinates."""
        n = int(rng.integers(3, 9))
        w = np.sort(np.round(rng.uniform(0.0, 3.0, n), 1))[::-1]
        w[0] = max(w[0], 0.5)
        return {"kind": "owl_ball", "weights": w.tolist(), "radius": float(np.round(rng.uniform(0.2, 4), 3))}

    def __post_init__(self):
        w = np.ascontiguousarray(self.weights, dtype=float)
        object.__setattr__(self, "weights", w)
        object.__setattr__(self, "_cumw", np.cumsum(w))

    @property
    def shape(self):
        return (self.weights.size,)

    def scale(self):
        return max(1.0, self.radius / float(self.weights[0]))

    def cvxpy_constraints(self, x):
        # Omega(x) = sum_k (w_k - w_{k+1}) * (sum of the k largest |x_i|), w_{n+1} = 0
        import cvxpy as cp
        w = self.weights
        dw = w - np.append(w[1:], 0.0)
        ax = cp.abs(x)
        terms = [float(d) * cp.sum_largest(ax, k + 1) for k, d in enumerate(dw) if d > 0]
        return [cp.sum(cp.hstack(terms)) <= self.radius]

    # -- helpers ----------------------------------------------------------------------------------
    def _orders(self, A):
        if A.shape[0] == 1:
            return decreasing_order(A[0])[None, :]
        return np.argsort(-A, axis=1, kind="stable")

    def _omega(self, X):
        t = pow2_scales(X)
        z = -np.sort(-np.abs(X / t[:, None]), axis=1)
        return t * (z @ self.weights)

    # -- native kernels ---------------------------------------------------------------------------
    def axis_reach(self):
        """The largest t with t e_1 in the set."""
        return self.radius / float(self.weights[0])

    @kernel("project")
    def project(self, Y):
        """Sort |y|, Newton on the multiplier with one PAV per step (exact, finite), O(n log n)."""
        b = Y.shape[0]
        if b == 0:
            return Y.copy()
        t = pow2_scales(Y)
        A = np.abs(Y) / t[:, None]
        if b == 1 and A.shape[1] >= LONG:
            return self._project_long(Y[0], A[0], float(t[0]))[None, :]
        order = np.ascontiguousarray(self._orders(A))
        U = np.empty_like(A)
        bad = owl_rows(A, order, self.weights, self.radius / t, U)
        if bad:
            raise SolveError(f"{self.label}: the projection's Newton iteration did not settle on {bad} point(s).",
                             status="no_convergence")
        return np.copysign(U * t[:, None], Y)

    def _project_long(self, y, a, t):
        """One long vector: values sorted by np.sort (no argsort), the support placed afterwards.

        The answer is nonzero exactly on the k largest magnitudes (k from the Newton solve on the
        sorted values); equal magnitudes always get equal answers (they pool, or see equal weights),
        so the indices with |y_i| >= the k-th largest value are exactly the support, and only those
        k indices are ordered by an argsort. O(n log n) for the value sort, O(n + k log k) after."""
        z = np.ascontiguousarray(np.sort(a)[::-1])
        rt = self.radius / t
        u = np.empty_like(z)
        lam, steps, ok = owl_project_sorted(z, self.weights, rt, u)
        if steps < 0:                       # inside
            return y.copy()
        if not ok:
            raise SolveError(f"{self.label}: the projection's Newton iteration did not settle.", status="no_convergence")
        k = int(np.count_nonzero(u))
        out = np.zeros_like(y)
        if k == 0:
            return out
        idx = np.flatnonzero(a >= z[k - 1])
        if idx.size != k:       # cannot happen by the tie argument; the general route if rounding disagrees
            order = np.ascontiguousarray(self._orders(a[None, :]))
            U = np.empty((1, a.size))
            owl_rows(a[None, :], order, self.weights, np.array([rt]), U)
            return np.copysign(U[0] * t, y)
        idx = idx[np.argsort(-a[idx], kind="stable")]
        out[idx] = u[:k] * t
        return np.copysign(out, y)

    @kernel("project_jvp")
    def project_jvp(self, Y, V):
        """Isotonic blocks of the answer: block means of sign(p) v less the multiplier's share W_B/|B| dlam, O(n log n).

        On the sorted magnitudes u = max(PAV(z - lam w), 0) with <w, u> = radius; on a positive
        block B (W_B the weights at its sorted positions) du_B = mean_B(dz) - (W_B/|B|) dlam, and
        dlam = sum_B W_B mean_B(dz) / sum_B W_B^2/|B| keeps the constraint; zero blocks stay 0.
        J = I inside. At kinks the smallest face: equal magnitudes of the answer form one block,
        exact zeros are fixed, a point on the boundary keeps the constraint.
        """
        P = self.project(Y)
        out = np.empty_like(P)
        if Y.shape[0] == 0:
            return out
        boundary = np.ascontiguousarray(self._omega(Y) >= self.radius)
        A = np.abs(P)
        order = np.ascontiguousarray(np.argsort(-A, axis=1, kind="stable"))
        owl_face_rows(P, order, self.weights, np.ascontiguousarray(V, dtype=float), boundary, out)
        return out

    @kernel("violation")
    def violation(self, X):
        """max(Omega(x) - radius, 0) (one sort), O(n log n)."""
        if X.shape[0] == 0:
            return np.zeros(0)
        return np.maximum(self._omega(X) - self.radius, 0.0)

    def _dual(self, C):
        """(t, best k per row, order) with the dual norm's maximizing prefix of |c| sorted."""
        t = pow2_scales(C)
        A = np.abs(C) / t[:, None]
        order = self._orders(A)
        z = np.take_along_axis(A, order, axis=1)
        ratio = np.cumsum(z, axis=1) / self._cumw
        k = np.argmax(ratio, axis=1)
        return t, k, order, ratio[np.arange(C.shape[0]), k]

    @kernel("lmo")
    def lmo(self, C):
        """Vertex -radius sign(c) 1_S / W_k on the best prefix S of |c| sorted, O(n log n)."""
        out = np.zeros_like(C)
        if C.shape[0] == 0:
            return out
        t, k, order, best = self._dual(C)
        for i in range(C.shape[0]):
            if best[i] == 0.0:
                continue
            S = order[i, :k[i] + 1]
            out[i, S] = -np.sign(C[i, S]) * (self.radius / self._cumw[k[i]])
        return out

    @kernel("support")
    def support(self, C):
        """radius max_k (sum of the k largest |c_i|) / W_k (the dual norm), O(n log n)."""
        if C.shape[0] == 0:
            return np.zeros(0)
        t, _, _, best = self._dual(C)
        return self.radius * t * best
