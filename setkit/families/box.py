"""The box {x : lower <= x <= upper} (bounds may be infinite)."""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..errors import NonFiniteRows, UnboundedDirectionError
from ..kernels.bregman import box_kl, outside_orthant_error
from ..forms import LinearForm
from ..kernels.vector_ops import (bounds_sum_screen, bounds_sum_violation, box_lmo_bounded_into, box_ops, box_ops_into,
                                  box_values, clip_rows_into)
from . import Family, kernel, register
from ._screen import screened_contains


@register("box")
@dataclass(frozen=True, eq=False, kw_only=True)
class Box(Family):
    """K = {x in R^n : lower_i <= x_i <= upper_i}.

    >>> import setkit
    >>> setkit.compile({"kind": "box", "dim": 2, "lower": 0, "upper": 1}).project([2.0, -1.0]).tolist()
    [1.0, 0.0]
    """

    lower: np.ndarray
    upper: np.ndarray
    traits = frozenset({"polyhedral", "separable", "permutation_invariant_if_uniform"})

    @classmethod
    def from_spec(cls, r):
        n = None
        if r.has("dim"):
            n = r.integer("dim", min=1)
        else:
            for key in ("lower", "upper"):
                v = r.spec.get(key)
                if isinstance(v, (list, tuple)) or (isinstance(v, str) and "." in v and not v.startswith(("inf", "-inf"))):
                    n = len(r.array(key, ndim=1, allow_inf=True))
                    break
            if n is None:
                r.fail("dim", "dim is required when both bounds are scalars.")
        lo = r.vector_or_scalar("lower", n, default=-np.inf, allow_inf=True)
        hi = r.vector_or_scalar("upper", n, default=np.inf, allow_inf=True)
        if lo is None:
            lo = np.full(n, -np.inf)
        if hi is None:
            hi = np.full(n, np.inf)
        bad = np.flatnonzero(lo > hi)
        if bad.size:
            i = int(bad[0])
            r.fail("lower", f"lower must not exceed upper; at index {i} lower is {lo[i]} and upper {hi[i]}.")
        if np.any(lo == np.inf) or np.any(hi == -np.inf):
            r.fail("lower", "lower cannot be +inf and upper cannot be -inf.")
        return cls(lower=lo, upper=hi, name=r.name)

    @classmethod
    def examples(cls):
        """Small instances for the conformance checks (tests/test_conformance.py)."""
        return [{"kind": "box", "dim": 3, "lower": 0, "upper": 1},
                {"kind": "box", "lower": [-2.0, 0.0, 1.0, -0.5], "upper": [1.0, 0.0, 3.0, 250.0]},
                {"kind": "box", "lower": [0.0, "-inf"], "upper": ["inf", 2.0]}]

    @classmethod
    def benchmark_example(cls, n, rng):
        """A box with random bounds in R^n (benchmarks/run.py)."""
        lo = -rng.uniform(0.5, 1.5, n)
        return {"kind": "box", "about": "box with random bounds, dim n", "dim": n, "lower": lo,
                "upper": lo + rng.uniform(0.5, 3.0, n)}

    @classmethod
    def random_example(cls, rng):
        """A random bounded box of dimension 2..6."""
        n = int(rng.integers(2, 7))
        lo = np.round(rng.normal(size=n), 3)
        return {"kind": "box", "lower": lo.tolist(), "upper": (lo + rng.uniform(0, 3, n).round(3)).tolist()}

    @property
    def shape(self):
        return (self.lower.size,)

    def scale(self):
        v = np.concatenate([self.lower, self.upper])
        v = v[np.isfinite(v)]
        return float(np.abs(v).max(initial=1.0))

    def cvxpy_constraints(self, x):
        cons = []
        flo, fhi = np.isfinite(self.lower), np.isfinite(self.upper)
        if flo.all():
            cons.append(x >= self.lower)
        elif flo.any():
            cons.append(x[np.flatnonzero(flo)] >= self.lower[flo])
        if fhi.all():
            cons.append(x <= self.upper)
        elif fhi.any():
            cons.append(x[np.flatnonzero(fhi)] <= self.upper[fhi])
        return cons

    def linear_form(self):
        return LinearForm.build(self.dim, lo=self.lower, hi=self.upper)

    def __post_init__(self):
        # used by every call: contiguous bounds, the LMO answer at c_i = 0, whether all bounds are finite
        object.__setattr__(self, "lower", np.ascontiguousarray(self.lower, dtype=float))
        object.__setattr__(self, "upper", np.ascontiguousarray(self.upper, dtype=float))
        tie = np.where(np.isfinite(self.lower), self.lower, np.where(np.isfinite(self.upper), self.upper, 0.0))
        object.__setattr__(self, "_tie", tie)
        object.__setattr__(self, "_zeros", np.zeros(self.lower.size))
        object.__setattr__(self, "_all_finite", bool(np.isfinite(self.lower).all() and np.isfinite(self.upper).all()))

    def bound_kernels(self):
        """project (and lmo when bounded) with this set's data bound, as numba functions of one point."""
        from ..kernels.bound import box_kernels
        return box_kernels(self.lower, self.upper, self._tie, self._all_finite)

    def point_kernels(self, check=True):
        """Compiled single-point entries (setkit.kernels.point), bit-identical to the batch kernels."""
        from ..kernels import point
        D = point.pack([self.lower, self.upper, self._tie], [float(check), float(self._all_finite)])
        out = {"project": (point.box_project_point, (D,)), "lmo": (point.box_lmo_point, (D,)),
               "distance": (point.box_distance_point, (D,))}
        if self._all_finite:
            out["support"] = (point.box_support_point, (D,))
        return out

    @kernel("project", into=True, checks=True)
    def project(self, Y, out=None, check=False):
        """Clipping to the bounds, O(n).

        Exact for every finite input (clipping does no arithmetic); the distance rescales its
        norm when squares would overflow or underflow (exact up to rounding for |y| <= 1e300)."""
        out = np.empty_like(Y) if out is None else out
        if not clip_rows_into(Y, self.lower, self.upper, out) and check:
            raise NonFiniteRows(f"project on {self.label}: y must be finite")
        return out

    @kernel("project_jvp")
    def project_jvp(self, Y, V):
        """v where lower < y < upper, 0 elsewhere (the derivative of clipping), O(n).

        At a kink (y_i exactly at a bound) the bound is treated as active: the derivative is 0
        there, the projector onto the smallest face containing p.
        """
        return np.where((Y > self.lower) & (Y < self.upper), V, 0.0)

    @kernel("distance")
    def distance(self, Y):
        """Norm of the clipped-off part, O(n)."""
        return box_values(Y, self.lower, self.upper, 0)

    @kernel("lmo", into=True)
    def lmo(self, C, out=None):
        """Lower bound where c > 0, upper bound where c < 0 (lower, else upper, where c = 0), O(n)."""
        X = np.empty_like(C) if out is None else out
        if self._all_finite:
            return box_lmo_bounded_into(C, self.lower, self.upper, self._tie, X)
        bad = box_ops_into(C, self.lower, self.upper, self._tie, X)
        if bad >= 0:
            i, j = divmod(int(bad), C.shape[1])
            raise UnboundedDirectionError(
                f"{self.label}: lmo(c) has no minimizer: coordinate {j} is unbounded and c[{j}] = {C[i, j]} "
                f"(batch row {i}).")
        return X

    @kernel("support")
    def support(self, C):
        """sum_i max(c_i lower_i, c_i upper_i), O(n); raises when unbounded along c."""
        if self._all_finite:
            return box_values(C, self.lower, self.upper, 1)
        X, bad = box_ops(-C, self.lower, self.upper, self._tie)
        if bad >= 0:
            i, j = divmod(int(bad), C.shape[1])
            side = "upper" if C[i, j] > 0 else "lower"
            raise UnboundedDirectionError(
                f"{self.label}: support(c) is +infinity: coordinate {j} has an infinite {side} bound and "
                f"c[{j}] = {C[i, j]} (batch row {i}); support is finite only where c_j = 0 on unbounded sides.")
        return np.einsum("ij,ij->i", C, X)

    @kernel("contains")
    def contains(self, X, tol):
        """Bound-violation screen, the distance only for borderline points, O(n)."""
        return screened_contains(X, tol, self.violation, self.distance, 1.0, self._screen)

    def _screen(self, X, tol, lip):
        return bounds_sum_screen(X, self.lower, self.upper, self._zeros, 0.0, True, tol, lip)

    def orthant_violation(self):
        """None when every lower bound is >= 0, else the first negative one."""
        bad = np.flatnonzero(~(self.lower >= 0.0))
        if bad.size:
            i = int(bad[0])
            return f"lower[{i}] = {self.lower[i]:.6g} < 0 (every lower bound must be >= 0)"
        return None

    @kernel("project_kl")
    def project_kl(self, T):
        """Clipping y = exp(t) to the bounds (lower >= 0), exact, O(n)."""
        why = self.orthant_violation()
        if why:
            raise outside_orthant_error(self.label, why)
        return box_kl(T, self.lower, self.upper, self.label)

    @kernel("project_kl_jvp")
    def project_kl_jvp(self, T, V):
        """diag(x) v where lower < exp(t) < upper, 0 elsewhere (x = clip(exp(t))), in log coordinates, O(n).

        At a kink (exp(t_i) exactly at a bound) the bound is treated as active: derivative 0.
        """
        X = self.project_kl(T)
        with np.errstate(over="ignore"):
            E = np.exp(T)
        return np.where((E > self.lower) & (E < self.upper), X * np.asarray(V, dtype=float), 0.0)

    @kernel("violation")
    def violation(self, X):
        """Largest bound violation, O(n)."""
        return bounds_sum_violation(X, self.lower, self.upper, self._zeros, 0.0, True)

    # -- exact knowledge for setkit.measures ------------------------------------------------------
    def _bounded(self):
        return bool(np.all(np.isfinite(self.lower)) and np.all(np.isfinite(self.upper)))

    def exact_centroid(self, measure):
        """The midpoint (lower + upper) / 2 for every measure of a bounded box (symmetry); None if unbounded.

        Volume: product of uniform laws; vertices: each corner coordinate is lower or upper with
        probability 1/2; directions: lmo(g)_i is lower_i if g_i > 0 else upper_i, each with probability 1/2.
        """
        if not self._bounded():
            return None
        return (self.lower + self.upper) / 2.0

    def exact_sample(self, k, measure, rng):
        """Independent coordinates: uniform on [lower, upper] (volume) or a fair choice of a bound
        (vertices, directions)."""
        if not self._bounded():
            return None
        U = rng.random((k, self.lower.size))
        if measure == "volume":
            return self.lower + (self.upper - self.lower) * U
        return np.where(U < 0.5, self.lower, self.upper)
