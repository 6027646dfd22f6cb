"""General polyhedra {x : A x <= b, C x = d, lower <= x <= upper}, dense or sparse.

No native kernels: routing serves projection by the compiled OSQP backend and
the LMO by HiGHS (both on the linear form). At compile time an empty polyhedron
is reported with the constraints that conflict (found by an elastic LP: the rows
whose multipliers are nonzero form a Farkas certificate of infeasibility).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

from ..errors import DescriptionError, EmptySetError
from ..forms import LinearForm
from . import Family, register


def _matrix(r, key, n_cols):
    """A 2-D constraint matrix (dense or scipy.sparse) with n_cols columns (None: any)."""
    if not r.has(key):
        r.raw(key, None)
        return None
    v = r.raw(key)
    if isinstance(v, str) and v.lower().endswith(".npz"):
        v = r._to_array(key, v, float)     # a .npz file may hold a scipy.sparse matrix
    if sp.issparse(v):
        M = sp.csr_matrix(v, dtype=float)
        if M.nnz and not np.all(np.isfinite(M.data)):
            r.fail(key, f"{key} must contain only finite numbers.")
    else:
        M = r.array(key)
        if M.ndim == 1 and n_cols is not None and M.size == n_cols:
            M = M.reshape(1, -1)     # one constraint written as a flat list
        if M.ndim != 2:
            r.fail(key, f"{key} must be a matrix (a list of rows); got an array of shape {M.shape}.")
        M = sp.csr_matrix(M)
    if M.shape[1] == 0:
        r.fail(key, f"{key} must have at least one column (one per coordinate); got a matrix of shape {M.shape}.")
    if n_cols is not None and M.shape[1] != n_cols:
        r.fail(key, f"{key} must have {n_cols} columns (one per coordinate); got {M.shape[1]}.")
    return M


@register("polyhedron")
@dataclass(frozen=True, eq=False, kw_only=True)
class Polyhedron(Family):
    """K = {x in R^n : A x <= b, C x = d, lower <= x <= upper} (every part optional).

    >>> import setkit
    >>> K = setkit.compile({"kind": "polyhedron", "A": [[1, 1]], "b": [1], "lower": 0})
    >>> K.project([1.0, 1.0]).round(8).tolist()
    [0.5, 0.5]
    """

    n: int
    A: sp.csr_matrix
    b: np.ndarray
    C: sp.csr_matrix
    d: np.ndarray
    lower: np.ndarray
    upper: np.ndarray
    traits = frozenset({"polyhedral"})

    @classmethod
    def from_spec(cls, r):
        n = r.integer("dim", None, min=1)
        for mat, rhs, rel in (("A", "b", "A x <= b"), ("C", "d", "C x = d")):
            if r.has(rhs) and not r.has(mat):
                r.fail(rhs, f"{rhs} is given but {mat} is missing; {rel} needs both.")
        A = _matrix(r, "A", n)
        if n is None and A is not None:
            n = A.shape[1]
        C = _matrix(r, "C", n)
        if n is None and C is not None:
            n = C.shape[1]
        if n is None:
            for key in ("lower", "upper"):
                v = r.spec.get(key)
                if v is not None and not isinstance(v, (int, float)) and not (
                        isinstance(v, str) and not v.lower().endswith((".npy", ".npz", ".csv"))):
                    n = r.array(key, ndim=1, allow_inf=True).size
                    break
        if n is None:
            r.fail("dim", "the dimension is unknown: give dim, or a matrix A or C, or lower/upper as lists.")
        if A is None:
            A = sp.csr_matrix((0, n))
            if r.has("b"):
                r.fail("b", "b is given but A is missing; A x <= b needs both.")
            b = np.zeros(0)
        else:
            if not r.has("b"):
                r.fail("b", f"A has {A.shape[0]} rows, so b (the right-hand sides of A x <= b) is required.")
            b = r.vector_or_scalar("b", A.shape[0], allow_inf=True)
            if np.any(b == -np.inf):
                i = int(np.flatnonzero(b == -np.inf)[0])
                r.fail("b", f"b[{i}] is -inf, so A x <= b has no solution.", EmptySetError)
        if C is None:
            C = sp.csr_matrix((0, n))
            if r.has("d"):
                r.fail("d", "d is given but C is missing; C x = d needs both.")
            d = np.zeros(0)
        else:
            if not r.has("d"):
                r.fail("d", f"C has {C.shape[0]} rows, so d (the right-hand sides of C x = d) is required.")
            d = r.vector_or_scalar("d", C.shape[0])
        lo = r.vector_or_scalar("lower", n, default=-np.inf, allow_inf=True)
        hi = r.vector_or_scalar("upper", n, default=np.inf, allow_inf=True)
        lo = np.full(n, -np.inf) if lo is None else lo
        hi = np.full(n, np.inf) if hi is None else hi
        bad = np.flatnonzero(lo > hi)
        if bad.size:
            i = int(bad[0])
            r.fail("lower", f"lower[{i}] = {lo[i]:g} exceeds upper[{i}] = {hi[i]:g}, so the set is empty.",
                   EmptySetError)
        if np.any(lo == np.inf) or np.any(hi == -np.inf):
            r.fail("lower", "lower cannot be +inf and upper cannot be -inf.")
        keep = np.isfinite(b)       # rows with b = +inf constrain nothing
        if not keep.all():
            A, b = A[np.flatnonzero(keep)], b[keep]
        return cls(n=n, A=A, b=b, C=C, d=d, lower=lo, upper=hi, name=r.name)

    @classmethod
    def examples(cls):
        """Small instances for the conformance checks (tests/test_conformance.py)."""
        return [{"kind": "polyhedron", "A": [[1, 1], [-1, 2]], "b": [1, 2], "lower": [-1, -1], "upper": [3, 3]},
                {"kind": "polyhedron", "A": [[1, 1, 1]], "b": [2], "C": [[1, -1, 0]], "d": [0.5], "lower": 0}]

    @classmethod
    def benchmark_example(cls, n, rng):
        """n/10 sparse random halfspaces around a known point, inside [-1, 1]^n; none above n = 1e5 (benchmarks/run.py)."""
        if n > 100_000:
            return None
        import scipy.sparse as sp
        m = max(3, n // 10)
        A = sp.random(m, n, density=min(1.0, 10.0 / n), format="csr",
                      random_state=np.random.RandomState(int(rng.integers(1 << 30))))
        A = A + sp.csr_matrix((np.ones(m), (np.arange(m), rng.integers(0, n, m))), shape=(m, n))
        x0 = rng.uniform(-0.5, 0.5, n)
        b = A @ x0 + rng.uniform(0.1, 1.0, m)
        return {"kind": "polyhedron", "about": "polyhedron in R^n, n/10 random halfspaces and a box",
                "A": A.toarray() if n <= 2_000 else A, "b": b, "lower": -1.0, "upper": 1.0}

    @classmethod
    def random_example(cls, rng):
        """A random bounded polytope in 2..4 dimensions around a known interior point."""
        n = int(rng.integers(2, 5))
        m = int(rng.integers(n + 1, 2 * n + 2))
        A = rng.standard_normal((m, n)).round(3)
        x0 = rng.uniform(-0.5, 0.5, n)
        b = (A @ x0 + rng.uniform(0.1, 1.0, m)).round(3)
        return {"kind": "polyhedron", "A": A.tolist(), "b": b.tolist(), "lower": -2.0, "upper": 2.0}

    def check_nonempty(self, parts, fail):
        """Elastic LP: minimize the total violation; a positive optimum means the set is empty."""
        from scipy.optimize import linprog
        n, mA, mC = self.n, self.A.shape[0], self.C.shape[0]
        if mA + mC == 0:
            return
        # variables (x, u, v, w): A x - u <= b, C x + v - w = d, u, v, w >= 0
        I_A, I_C = sp.eye(mA), sp.eye(mC)
        A_ub = sp.hstack([self.A, -I_A, sp.csr_matrix((mA, 2 * mC))]).tocsr() if mA else None
        A_eq = sp.hstack([self.C, sp.csr_matrix((mC, mA)), I_C, -I_C]).tocsr() if mC else None
        c = np.concatenate([np.zeros(n), np.ones(mA + 2 * mC)])
        bounds = np.vstack([np.column_stack([self.lower, self.upper]),
                            np.column_stack([np.zeros(mA + 2 * mC), np.full(mA + 2 * mC, np.inf)])])
        res = linprog(c, A_ub=A_ub, b_ub=self.b if mA else None, A_eq=A_eq, b_eq=self.d if mC else None,
                      bounds=bounds, method="highs")
        tol = 1e-9 * max(1.0, self.scale())
        if res.status not in (0, 2):
            # HiGHS reads |values| >= 1e20 as infinite and refuses some such models: retry with every
            # row divided by a power of two near its largest entry (exact; the same set), violations then
            # measured in those row units
            def unit(M, rhs):
                mags = np.maximum(abs(M).max(axis=1).toarray().ravel() if M.shape[0] else np.zeros(0),
                                  np.where(np.isfinite(rhs), np.abs(rhs), 0.0))
                return np.ldexp(1.0, np.frexp(np.where(mags > 0, mags, 1.0))[1])
            uA = unit(self.A, self.b) if mA else np.ones(0)
            uC = unit(self.C, self.d) if mC else np.ones(0)
            A_ub = sp.hstack([sp.diags(1 / uA) @ self.A, -I_A, sp.csr_matrix((mA, 2 * mC))]).tocsr() if mA else None
            A_eq = sp.hstack([sp.diags(1 / uC) @ self.C, sp.csr_matrix((mC, mA)), I_C, -I_C]).tocsr() if mC else None
            res = linprog(c, A_ub=A_ub, b_ub=self.b / uA if mA else None, A_eq=A_eq,
                          b_eq=self.d / uC if mC else None, bounds=bounds, method="highs")
            tol = 1e-9
        if res.status not in (0, 2):
            fail("A" if mA else "C", f"the emptiness check could not decide whether the set is empty (HiGHS "
                                       f"status {res.status}: {res.message}); the data span "
                                       f"{self.scale():.3g} in magnitude, beyond what the LP solver handles "
                                       f"(it reads 1e20 and above as infinite). Rescale the constraints.",
                   DescriptionError)
        if res.status == 2:        # the elastic LP is always feasible unless the bounds contradict
            fail("A" if mA else "C", "the set is empty: the constraints and bounds admit no point (the elastic "
                                     "emptiness LP reports no solution at all).",
                   EmptySetError)
        if res.fun <= tol:
            return
        parts = []
        if mA:
            yA = np.abs(res.ineqlin.marginals)
            rows = np.flatnonzero(yA > 1e-9 * max(1.0, yA.max()))
            if rows.size:
                parts.append(f"{_rows(rows)} of A x <= b")
        if mC:
            yC = np.abs(res.eqlin.marginals)
            rows = np.flatnonzero(yC > 1e-9 * max(1.0, yC.max()))
            if rows.size:
                parts.append(f"{_rows(rows)} of C x = d")
        yb = np.abs(res.lower.marginals[:n]) + np.abs(res.upper.marginals[:n])
        cols = np.flatnonzero(yb > 1e-9 * max(1.0, yb.max(initial=0.0)))
        if cols.size:
            parts.append(f"the bounds of coordinate{'s' if cols.size > 1 else ''} {_list(cols)}")
        what = " together with ".join(parts) if parts else "the constraints"
        fail("A" if mA else "C", f"the set is empty: {what} cannot hold at once (the least total violation "
                                   f"of the constraints is {res.fun:.6g}).", EmptySetError)

    @property
    def shape(self):
        return (self.n,)

    def scale(self):
        v = np.concatenate([self.b, self.d, self.lower, self.upper])
        v = v[np.isfinite(v)]
        return float(max(1.0, np.abs(v).max(initial=0.0)))

    def linear_form(self):
        return LinearForm.build(self.n, A_eq=self.C, b_eq=self.d, A_ub=self.A, b_ub=self.b,
                                lo=self.lower, hi=self.upper)

    def cvxpy_constraints(self, x):
        cons = []
        if self.A.shape[0]:
            cons.append(self.A @ x <= self.b)
        if self.C.shape[0]:
            cons.append(self.C @ x == self.d)
        flo, fhi = np.isfinite(self.lower), np.isfinite(self.upper)
        if flo.any():
            cons.append(x[np.flatnonzero(flo)] >= self.lower[flo])
        if fhi.any():
            cons.append(x[np.flatnonzero(fhi)] <= self.upper[fhi])
        return cons


def _list(idx, k=8):
    idx = [int(i) for i in idx]
    return ", ".join(map(str, idx[:k])) + (" ..." if len(idx) > k else "")


def _rows(idx):
    return ("rows " if len(idx) > 1 else "row ") + _list(idx)
