"""The convex hull of given points, conv{v_1, ..., v_k}."""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..errors import SolveError
from ..forms import LinearForm
from ..kernels.hull import nearest_in_hull
from . import Family, kernel, memo, register


@register("hull")
@dataclass(frozen=True, eq=False, kw_only=True)
class Hull(Family):
    """K = conv{v_1, ..., v_k} = {V^T w : w >= 0, sum w = 1}, the points v_i given as the rows of ``points``.

    >>> import setkit
    >>> K = setkit.compile({"kind": "hull", "points": [[0, 0], [2, 0], [0, 2]]})
    >>> K.project([2.0, 2.0]).round(8).tolist()
    [1.0, 1.0]
    """

    points: np.ndarray
    traits = frozenset({"polyhedral", "bounded", "iterative_projection"})

    @classmethod
    def from_spec(cls, r):
        V = r.array("points")
        if V.ndim == 1:
            V = V.reshape(-1, 1) if r.has("dim") and r.spec.get("dim") == 1 else V.reshape(1, -1)
        if V.ndim != 2:
            r.fail("points", f"points must be a matrix with one point per row; got an array of shape {V.shape}.")
        if V.shape[0] == 0 or V.shape[1] == 0:
            r.fail("points", f"points must hold at least one point with at least one coordinate; got shape {V.shape}.")
        if r.has("dim"):
            n = r.integer("dim", min=1)
            if n != V.shape[1]:
                r.fail("dim", f"dim is {n} but the points have {V.shape[1]} coordinates.")
        return cls(points=np.ascontiguousarray(V, dtype=float), name=r.name)

    @classmethod
    def examples(cls):
        """Small instances for the conformance checks (tests/test_conformance.py)."""
        return [{"kind": "hull", "points": [[0, 0], [2, 0], [0, 2], [1, 0.5]]},
                {"kind": "hull", "points": [[1, 0, 0], [0, 1, 0], [0, 0, 1], [1, 1, 1], [0.5, 0.5, 0]]}]

    @classmethod
    def benchmark_example(cls, n, rng):
        """n/d Gaussian points in R^d, d = min(10, n/4): n numbers of data; none above n = 1e5 (benchmarks/run.py)."""
        if n > 100_000:
            return None
        d = min(10, max(2, n // 4))
        return {"kind": "hull", "about": "hull of n/10 points in R^10 (n/d in R^d below n = 40)",
                "points": rng.standard_normal((max(2, n // d), d))}

    @classmethod
    def random_example(cls, rng):
        """3..10 random points in 2..5 dimensions."""
        k, d = int(rng.integers(3, 11)), int(rng.integers(2, 6))
        return {"kind": "hull", "points": rng.standard_normal((k, d)).round(3).tolist()}

    @property
    def shape(self):
        return (int(self.points.shape[1]),)

    def scale(self):
        return float(max(1.0, np.abs(self.points).max()))

    def linear_form(self):
        # z = (x, w): x - V^T w = 0, sum w = 1, w >= 0
        k, d = self.points.shape
        import scipy.sparse as sp
        A = sp.vstack([sp.hstack([sp.eye(d), -sp.csr_matrix(self.points.T)]),
                       sp.hstack([sp.csr_matrix((1, d)), sp.csr_matrix(np.ones((1, k)))])])
        lo = np.concatenate([np.full(d, -np.inf), np.zeros(k)])
        return LinearForm.build(d, k, A_eq=A, b_eq=np.concatenate([np.zeros(d), [1.0]]), lo=lo)

    def cvxpy_constraints(self, x):
        import cvxpy as cp
        w = cp.Variable(self.points.shape[0], nonneg=True)
        return [x == self.points.T @ w, cp.sum(w) == 1]

    @kernel("project")
    def project(self, Y):
        """Wolfe's nearest-point algorithm on the convex weights, stopped on the Frank-Wolfe gap; O(k d) per cycle.

        The answer is returned as the convex combination weights @ points (in the set up to the
        rounding of that product, at the data's scale, whatever |y| is); its distance to the exact
        projection is at most sqrt(gap) <= 1e-7 max_i ||v_i - y|| (the gap bounds the squared
        error), i.e. the accuracy is relative to |y - v|: a point at 1e12 from a unit hull may land
        up to ~1e5 along the face it projects to (measured: on the face, in the set, within that
        bound). Rows are solved one by one (no row influences another). Range: finite |y| and
        points <= 1e300 (the work is rescaled by a power of two)."""
        out = np.empty_like(Y)
        for i, y in enumerate(Y):
            x, w, gap, cycles, ok = nearest_in_hull(self.points, y)
            if not ok:
                raise SolveError(f"{self.label}: projection of batch row {i} did not converge in {cycles} cycles "
                                 f"(Frank-Wolfe gap {gap:.3g}).", status="not_converged")
            ws = w.sum()
            out[i] = (w / ws) @ self.points if ws > 0 else x
        return out

    @kernel("project_jvp")
    def project_jvp(self, Y, V):
        """The projector onto the span of the differences of the points of the face exposed by y - p, O(k d + d^3) per row.

        With n = y - P(y), the face of p is conv{v_i : <n, v_i> = max_j <n, v_j>} (all points when
        y is in the hull, n = 0), and J v is the projection of v onto the span of v_i - v_0 over
        that face. At a kink this is the face exposed by y - p (the largest face with that normal;
        for a point of the hull, the hull itself: J = the projector onto its affine hull),
        unlike the smallest-face rule of the constraint-described families.
        """
        P = self.project(Y)
        V = np.asarray(V, dtype=float)
        Nrm = Y - P
        S = Nrm @ self.points.T
        scale = self.scale()
        out = np.empty_like(V)
        for r in range(Y.shape[0]):
            nn = float(np.linalg.norm(Nrm[r]))
            if nn <= 1e-10 * max(scale, float(np.abs(Y[r]).max(initial=0.0))):
                F = self.points
            else:
                F = self.points[S[r] >= S[r].max() - 1e-8 * nn * scale]
            D = F[1:] - F[0]
            if D.shape[0] == 0:
                out[r] = 0.0
                continue
            U, sv, Wt = np.linalg.svd(D, full_matrices=False)
            Q = Wt[sv > 1e-10 * max(1.0, sv.max())].T
            out[r] = Q @ (Q.T @ V[r])
        return out

    @kernel("lmo")
    def lmo(self, C):
        """A point with the smallest <c, v_i> (the first such point on ties), by a scan; O(k d)."""
        return self.points[np.argmin(C @ self.points.T, axis=1)].copy()

    @kernel("support")
    def support(self, C):
        """max_i <c, v_i> by a scan; O(k d)."""
        return (C @ self.points.T).max(axis=1)

    # -- exact knowledge for setkit.measures ------------------------------------------------------
    def _extreme(self):
        """(x0, N, T_ext, V_ext): the affine hull x0 + N t of the points, their extreme points in t
        coordinates and as given.

        Extreme points: scipy.spatial.ConvexHull in the affine hull when its dimension is 2..8 (interval
        ends in dimension 1); beyond, one LP per distinct point (is it a convex combination of the
        others?). Memoized beside the node.
        """
        def build():
            from scipy.optimize import linprog
            V = np.unique(self.points, axis=0)
            x0 = V.mean(axis=0)
            U, s, _ = np.linalg.svd((V - x0).T, full_matrices=False)
            r = int(np.sum(s > 1e-10 * s[0])) if s.size and s[0] > 0 else 0
            N = U[:, :r]
            T = (V - x0) @ N
            if r == 0:
                keep = [0]
            elif r == 1:
                keep = [int(np.argmin(T[:, 0])), int(np.argmax(T[:, 0]))]
            elif r <= 8:
                from scipy.spatial import ConvexHull
                keep = list(ConvexHull(T).vertices)
            else:
                keep = []
                for i in range(T.shape[0]):
                    others = np.delete(T, i, axis=0)
                    A_eq = np.vstack([others.T, np.ones((1, others.shape[0]))])
                    res = linprog(np.zeros(others.shape[0]), A_eq=A_eq, b_eq=np.concatenate([T[i], [1.0]]),
                                  bounds=[(0, None)] * others.shape[0], method="highs")
                    if res.status != 0:          # infeasible: not a convex combination of the others
                        keep.append(i)
            out = (x0, N, T[keep], V[keep])
            return out
        return memo(self, "extreme_points", build)

    def exact_centroid(self, measure):
        """vertices: the mean of the extreme points; volume: exact triangulation in the affine hull
        when its dimension is at most 8; directions: None (Monte Carlo over the LMO)."""
        if measure == "directions":
            return None
        x0, N, ext, vext = self._extreme()
        if measure == "vertices":
            return vext.mean(axis=0)
        if N.shape[1] > 8:
            return None
        from ..measures import simplex_volume_centroid
        return x0 + simplex_volume_centroid(ext) @ N.T

    def exact_sample(self, k, measure, rng):
        """vertices: a uniformly chosen extreme point; otherwise None."""
        if measure != "vertices":
            return None
        vext = self._extreme()[3]
        return vext[rng.integers(0, vext.shape[0], size=k)].copy()
