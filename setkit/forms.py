"""The standard linear form shared by every generic backend.

    { z = (x, w) :  A_eq z = b_eq,  A_ub z <= b_ub,  lo <= z <= hi }

``x`` holds the ``n_x`` coordinates of the set's points (C order of the point
shape); ``w`` holds ``n_aux`` auxiliary variables of an extended formulation.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp


@dataclass(frozen=True, eq=False)
class LinearForm:
    n_x: int
    n_aux: int
    A_eq: sp.csr_matrix
    b_eq: np.ndarray
    A_ub: sp.csr_matrix
    b_ub: np.ndarray
    lo: np.ndarray
    hi: np.ndarray

    @property
    def n(self) -> int:
        return self.n_x + self.n_aux

    @staticmethod
    def build(n_x, n_aux=0, A_eq=None, b_eq=None, A_ub=None, b_ub=None, lo=None, hi=None):
        n = n_x + n_aux

        def mat(A):
            if A is None:
                return sp.csr_matrix((0, n))
            A = sp.csr_matrix(A, dtype=float)
            if A.shape[1] != n:
                raise ValueError(f"LinearForm.build: a constraint matrix has {A.shape[1]} columns; expected {n}.")
            return A

        def vec(v, m, fill):
            if v is None:
                return np.full(m, fill)
            return np.broadcast_to(np.asarray(v, dtype=float), (m,)).copy()

        A_eq, A_ub = mat(A_eq), mat(A_ub)
        return LinearForm(n_x, n_aux, A_eq, vec(b_eq, A_eq.shape[0], 0.0), A_ub,
                          vec(b_ub, A_ub.shape[0], 0.0), vec(lo, n, -np.inf), vec(hi, n, np.inf))

    def violation_x(self, X: np.ndarray) -> np.ndarray:
        """Largest constraint violation of each row of X (only valid when n_aux == 0)."""
        if self.n_aux:
            raise ValueError("violation_x needs a form without auxiliary variables.")
        X = np.atleast_2d(X)
        v = np.zeros(X.shape[0])
        if self.A_eq.shape[0]:
            v = np.maximum(v, np.abs(X @ self.A_eq.T - self.b_eq).max(axis=1))
        if self.A_ub.shape[0]:
            v = np.maximum(v, (X @ self.A_ub.T - self.b_ub).max(axis=1, initial=0.0))
        v = np.maximum(v, (self.lo - X).max(axis=1, initial=0.0))
        v = np.maximum(v, (X - self.hi).max(axis=1, initial=0.0))
        return v

    def residual(self, z: np.ndarray) -> float:
        """Largest violation of the form's constraints at z = (x, aux) (equalities in absolute value)."""
        r = 0.0
        if self.A_eq.shape[0]:
            r = max(r, float(np.abs(self.A_eq @ z - self.b_eq).max()))
        if self.A_ub.shape[0]:
            r = max(r, float((self.A_ub @ z - self.b_ub).max(initial=0.0)))
        return max(r, float((self.lo - z).max(initial=0.0)), float((z - self.hi).max(initial=0.0)))

    def _normalized_rows(self):
        """(A^T as CSC, b, 1/row norms, is_equality) per block of rows, computed once per form."""
        from .families import memo

        def build():
            out = []
            for A, b, eq in ((self.A_eq, self.b_eq, True), (self.A_ub, self.b_ub, False)):
                if A.shape[0] == 0:
                    continue
                nrm = np.sqrt(np.asarray(A.multiply(A).sum(axis=1)).ravel()) if hasattr(A, "multiply") else \
                    np.linalg.norm(A, axis=1)
                out.append((A.T.tocsc() if hasattr(A, "tocsc") else A.T, b, 1.0 / np.where(nrm > 0, nrm, 1.0), eq))
            return out
        return memo(self, "normalized_rows", build)

    def membership_screen(self, X: np.ndarray, tol: np.ndarray) -> np.ndarray:
        """+1 (in K), -1 (farther than tol from K) or 0 (undecided) per row, from the constraints alone.

        Rows are normalized, so a row's violation is the distance to its halfspace or
        hyperplane, a lower bound on dist(x, K): above ``tol`` the point is out. A point that
        meets every constraint up to rounding (1e-13 relative) is in. Only valid when n_aux == 0.
        """
        if self.n_aux:
            raise ValueError("membership_screen needs a form without auxiliary variables.")
        X = np.atleast_2d(X)
        v = np.zeros(X.shape[0])
        for AT, b, inv, eq in self._normalized_rows():
            r = (X @ AT - b) * inv
            v = np.maximum(v, np.abs(r).max(axis=1) if eq else r.max(axis=1, initial=0.0))
        v = np.maximum(v, (self.lo - X).max(axis=1, initial=0.0))
        v = np.maximum(v, (X - self.hi).max(axis=1, initial=0.0))
        size = np.maximum(1.0, np.abs(X).max(axis=1, initial=0.0))
        data = max(1.0, float(np.abs(self.b_eq).max(initial=0.0)), float(np.abs(self.b_ub).max(initial=0.0)))
        out = np.zeros(X.shape[0], dtype=np.int8)
        out[v > tol] = -1
        out[(v <= 1e-13 * np.maximum(size, data)) & (v <= tol)] = 1
        return out

    def is_bounded_box(self) -> bool:
        return bool(np.isfinite(self.lo).all() and np.isfinite(self.hi).all())


def stack_blocks(forms, n_x_total=None):
    """Block-diagonal combination of forms (a Cartesian product): x's first, then aux's."""
    nx = [f.n_x for f in forms]
    na = [f.n_aux for f in forms]
    N_x, N_a = sum(nx), sum(na)
    x_off = np.cumsum([0] + nx)
    a_off = N_x + np.cumsum([0] + na)

    def place(f, A, i):
        A = sp.csc_matrix(A)
        cols = np.concatenate([np.arange(x_off[i], x_off[i] + nx[i]), np.arange(a_off[i], a_off[i] + na[i])])
        P = sp.csr_matrix((np.ones(f.n), (np.arange(f.n), cols)), shape=(f.n, N_x + N_a))
        return A @ P

    A_eq = sp.vstack([place(f, f.A_eq, i) for i, f in enumerate(forms)]).tocsr()
    A_ub = sp.vstack([place(f, f.A_ub, i) for i, f in enumerate(forms)]).tocsr()
    lo = np.concatenate([f.lo[:f.n_x] for f in forms] + [f.lo[f.n_x:] for f in forms])
    hi = np.concatenate([f.hi[:f.n_x] for f in forms] + [f.hi[f.n_x:] for f in forms])
    return LinearForm(N_x, N_a, A_eq, np.concatenate([f.b_eq for f in forms]), A_ub,
                      np.concatenate([f.b_ub for f in forms]), lo, hi)
