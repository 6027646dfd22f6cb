"""The convex hull of given points, conv{v_1, ..., v_k}."""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..errors import SolveError
from ..forms import LinearForm
from ..kernels.hull import nearest_in_hull
from . import Family, kernel, register


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
    traits = frozenset({"polyhedral", "bounded"})

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
        """Wolfe's nearest-point algorithm on the convex weights, stopped on the Frank-Wolfe gap; O(k d) per cycle."""
        out = np.empty_like(Y)
        for i, y in enumerate(Y):
            x, _w, gap, cycles, ok = nearest_in_hull(self.points, y)
            if not ok:
                raise SolveError(f"{self.label}: projection of batch row {i} did not converge in {cycles} cycles "
                                 f"(Frank-Wolfe gap {gap:.3g}).", status="not_converged")
            out[i] = x
        return out

    @kernel("lmo")
    def lmo(self, C):
        """A point with the smallest <c, v_i> (the first such point on ties), by a scan; O(k d)."""
        return self.points[np.argmin(C @ self.points.T, axis=1)].copy()

    @kernel("support")
    def support(self, C):
        """max_i <c, v_i> by a scan; O(k d)."""
        return (C @ self.points.T).max(axis=1)
