"""The simplex {x >= 0, sum x = total} (mode equal) or {x >= 0, sum x <= total} (mode at_most)."""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..forms import LinearForm
from ..kernels.bregman import simplex_kl
from ..kernels.face import simplex_face_rows
from ..kernels.simplex import project_simplex_rows, simplex_distance_rows
from ..kernels.vector_ops import (bounds_sum_screen, bounds_sum_violation, simplex_lmo_into,
                                  simplex_support_rows)
from . import Family, kernel, register
from ._screen import screened_contains


@register("simplex")
@dataclass(frozen=True, eq=False, kw_only=True)
class Simplex(Family):
    """K = {x in R^n : x >= 0, sum x = total} (mode equal) or sum x <= total (mode at_most).

    >>> import setkit
    >>> setkit.compile({"kind": "simplex", "dim": 3}).project([1.0, 0.0, 0.0]).tolist()
    [1.0, 0.0, 0.0]
    """

    n: int
    total: float = 1.0
    mode: str = "equal"
    traits = frozenset({"polyhedral", "bounded", "permutation_invariant"})

    @classmethod
    def from_spec(cls, r):
        n = r.integer("dim", min=1)
        total = r.number("total", 1.0, min=0.0)
        mode = r.choice("mode", ("equal", "at_most"), "equal")
        return cls(n=n, total=total, mode=mode, name=r.name)

    @classmethod
    def examples(cls):
        """Small instances for the conformance checks (tests/test_conformance.py)."""
        return [{"kind": "simplex", "dim": 4},
                {"kind": "simplex", "dim": 5, "total": 3.5, "mode": "at_most"},
                {"kind": "simplex", "dim": 1, "total": 2.0}]

    @classmethod
    def benchmark_example(cls, n, rng):
        """The unit simplex in R^n (benchmarks/run.py)."""
        return {"kind": "simplex", "about": "simplex, dim n", "dim": n, "total": 1.0}

    @classmethod
    def random_example(cls, rng):
        """A random simplex of dimension 2..8, either mode."""
        return {"kind": "simplex", "dim": int(rng.integers(2, 9)), "total": float(np.round(rng.uniform(0.1, 5), 3)),
                "mode": str(rng.choice(["equal", "at_most"]))}

    def __post_init__(self):
        object.__setattr__(self, "_zeros", np.zeros(self.n))
        object.__setattr__(self, "_ones", np.ones(self.n))
        object.__setattr__(self, "_inf", np.full(self.n, np.inf))
        object.__setattr__(self, "_lip", float(np.sqrt(self.n)))

    @property
    def shape(self):
        return (self.n,)

    def scale(self):
        return max(1.0, self.total)

    def cvxpy_constraints(self, x):
        import cvxpy as cp
        s = cp.sum(x)
        return [x >= 0, s == self.total if self.mode == "equal" else s <= self.total]

    def linear_form(self):
        ones = np.ones((1, self.n))
        if self.mode == "equal":
            return LinearForm.build(self.n, A_eq=ones, b_eq=[self.total], lo=0.0)
        return LinearForm.build(self.n, A_ub=ones, b_ub=[self.total], lo=0.0)

    def bound_kernels(self):
        """project and lmo with this set's data bound, as numba functions of one point (K.jit_kernels())."""
        from ..kernels.bound import simplex_kernels
        return simplex_kernels(self.total, self.mode == "at_most")

    def point_kernels(self, check=True):
        """Compiled single-point entries (setkit.kernels.point), bit-identical to the batch kernels."""
        from ..kernels import point
        D = point.pack([], [self.total, float(self.mode == "at_most"), float(check)])
        return {"project": (point.simplex_project_point, (D,)), "lmo": (point.simplex_lmo_point, (D,)),
                "distance": (point.simplex_distance_point, (D,)), "support": (point.simplex_support_point, (D,))}

    @kernel("project", into=True)
    def project(self, Y, out=None):
        """Sorted-threshold projection (pivot search for long single vectors), O(n log n)."""
        if self.mode == "equal":
            return project_simplex_rows(Y, self.total, out)
        X = np.maximum(Y, 0.0, out=out)
        over = X.sum(axis=1) > self.total
        if over.any():
            X[over] = project_simplex_rows(Y[over], self.total)
        return X

    @kernel("project_jvp")
    def project_jvp(self, Y, V):
        """The face of the projection: v_S - mean(v_S) on the support S = {p > 0}, 0 off it, O(n).

        The Jacobian is the projector onto the tangent subspace of the face {x_i = 0, i not in S,
        sum x = total}: (I - 1 1^T/|S|) on S (Martins and Astudillo 2016, "From softmax to
        sparsemax", the sparsemax Jacobian; from memory). In mode at_most the sum is active when
        sum max(y, 0) >= total, and J v = v on S = {y > 0} otherwise. At a kink (p_i = 0 exactly,
        or sum max(y, 0) = total exactly) every constraint tight at p is treated as active: the
        returned element is the projector onto the smallest face containing p.
        """
        P = self.project(Y)
        if self.mode == "equal":
            active = np.ones(Y.shape[0], dtype=np.bool_)
        else:
            active = np.maximum(Y, 0.0).sum(axis=1) >= self.total
        return simplex_face_rows(P, np.ascontiguousarray(V, dtype=float), active, np.empty_like(P))

    @kernel("distance")
    def distance(self, Y):
        """||y - max(y - tau, 0)|| with the threshold of the projection, without forming it, O(n)."""
        return simplex_distance_rows(Y, self.total, self.mode == "at_most")

    @kernel("lmo", into=True)
    def lmo(self, C, out=None):
        """The vertex total * e_i at the smallest c_i (the origin when at_most and min c >= 0), O(n)."""
        if out is None:        # allocated by NumPy: a large output allocated inside numba is often fresh pages
            return simplex_lmo_into(C, float(self.total), self.mode == "at_most", np.zeros(C.shape), False)
        return simplex_lmo_into(C, float(self.total), self.mode == "at_most", out)

    @kernel("contains")
    def contains(self, X, tol):
        """Violation screen (x >= 0 and the sum), the distance only for borderline points, O(n)."""
        return screened_contains(X, tol, self.violation, self.distance, self._lip, self._screen)

    @kernel("support")
    def support(self, C):
        """total * max(c) (and at least 0 when at_most), O(n)."""
        return simplex_support_rows(C, float(self.total), self.mode == "at_most")

    def _screen(self, X, tol, lip):
        return bounds_sum_screen(X, self._zeros, self._inf, self._ones, self.total, self.mode == "equal", tol, lip)

    def orthant_violation(self):
        """None: the simplex lies in the nonnegative orthant."""
        return None

    @kernel("project_kl")
    def project_kl(self, T):
        """Normalization total * softmax(t) (at_most: y itself when sum y <= total), exact, O(n)."""
        return simplex_kl(T, self.total, self.mode == "at_most")

    @kernel("project_kl_jvp")
    def project_kl_jvp(self, T, V):
        """The softmax Jacobian in log coordinates: x v - x <x, v> / total with x = project_kl(t), O(n).

        x = total softmax(t), so dx/dt = diag(x) - x x^T / total (the Jacobian of softmax,
        common practice). In mode at_most with sum exp(t) < total, x = exp(t) and dx/dt = diag(x);
        at the tie sum exp(t) = total the sum is treated as active (the smallest face).
        """
        X = self.project_kl(T)
        V = np.asarray(V, dtype=float)
        XV = X * V
        if self.total <= 0.0:
            return np.zeros_like(V)
        coef = XV.sum(axis=1) / self.total
        if self.mode == "at_most":
            with np.errstate(over="ignore"):
                free = np.exp(T).sum(axis=1) < self.total
            coef = np.where(free, 0.0, coef)
        return XV - X * coef[:, None]

    @kernel("violation")
    def violation(self, X):
        """Largest violation of x >= 0 and of the sum constraint, O(n)."""
        return bounds_sum_violation(X, self._zeros, self._inf, self._ones, self.total, self.mode == "equal")

    # -- exact knowledge for setkit.measures ------------------------------------------------------
    # -- optional stacking hooks (read by the product combinator): blocks of this family with one
    # dimension and mode but different totals are served by ONE batched call, because
    # {x >= 0, sum x (=|<=) t} = t * {x >= 0, sum x (=|<=) 1} for t > 0.
    def stack_key(self):
        """Blocks with equal keys (and shapes) can share one stacked call; None: never stacked."""
        return self.mode if self.total > 0.0 else None

    @classmethod
    def stack_params(cls, nodes):
        """Per-block totals for a stacked call of blocks with one stack_key."""
        totals = np.array([nd.total for nd in nodes], dtype=float)
        return {"unit": cls(n=nodes[0].n, total=1.0, mode=nodes[0].mode), "total": totals,
                "all_one": bool(np.all(totals == 1.0))}

    @classmethod
    def stacked(cls, op, params, X):
        """Operator ``op`` on rows of X where row r belongs to block r mod k (k = number of totals)."""
        unit, tk = params["unit"], params["total"]
        if params.get("all_one"):
            # every total is 1: X / 1 and 1 * x are exact, so the unit operator is the answer
            if op in ("project", "lmo", "support", "violation", "project_kl"):
                return getattr(unit, op)(X)
            return None
        t = np.tile(tk, X.shape[0] // tk.size)
        if op == "project_kl":
            # KL(t z || y) = t KL(z || y / t) + const: project log y - log t onto the unit simplex
            return t[:, None] * unit.project_kl(X - np.log(t)[:, None])
        if op == "project":
            return t[:, None] * unit.project(X / t[:, None])
        if op == "lmo":
            return t[:, None] * unit.lmo(X)
        if op == "support":
            return t * unit.support(X)
        if op == "violation":
            return t * unit.violation(X / t[:, None])
        return None

    def exact_centroid(self, measure):
        """Closed forms by symmetry: total/n (equal); total/(n+1) (at_most, volume and vertices, the
        origin being a vertex); total (1 - 2^-n)/n for directions at_most (lmo(g) is the origin iff g >= 0)."""
        n, t = self.n, self.total
        if self.mode == "equal":
            return np.full(n, t / n)
        if measure == "directions":
            return np.full(n, t * (1.0 - 0.5 ** n) / n)
        return np.full(n, t / (n + 1))

    def exact_sample(self, k, measure, rng):
        """Volume: total * Dirichlet(1, ..., 1) from normalized exponential spacings (the at_most simplex
        drops the slack coordinate); vertices: a uniform vertex; directions: lmo of a Gaussian direction."""
        n, t = self.n, self.total
        if measure == "volume":
            E = rng.standard_exponential((k, n + (self.mode == "at_most")))
            return t * (E / E.sum(axis=1, keepdims=True))[:, :n]
        X = np.zeros((k, n))
        if measure == "vertices":
            J = rng.integers(0, n + (self.mode == "at_most"), size=k)
        else:
            Gd = rng.standard_normal((k, n))
            J = np.argmin(Gd, axis=1)
            if self.mode == "at_most":
                J = np.where(Gd.min(axis=1) < 0, J, n)
        rows = np.flatnonzero(J < n)
        X[rows, J[rows]] = t
        return X
