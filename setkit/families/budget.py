"""The budget {lower <= x <= upper, <w, x> = total} (mode equal) or <= total (mode at_most).

A weighted, capped simplex: the feasible set of the continuous knapsack.

Outputs are numerical answers within the stated tolerances; where they steer the
allocation of scarce resources they are to be reviewed by a responsible person and
checked against local rules.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..forms import LinearForm
from ..kernels.bregman import budget_kl, budget_structure, outside_orthant_error
from ..kernels.face import capped_face_rows
from ..kernels.simplex import knapsack_lmo_rows, project_capped, uniform_or_array
from ..kernels.vector_ops import bounds_sum_screen, bounds_sum_violation
from . import Family, kernel, register
from ._screen import screened_contains


def _fmt(v: float) -> str:
    return repr(float(v)) if abs(v) < 1e16 else f"{v:.6g}"


@register("budget")
@dataclass(frozen=True, eq=False, kw_only=True)
class Budget(Family):
    """K = {x in R^n : lower <= x <= upper, sum_i w_i x_i = total} (mode equal; <= total for at_most).

    ``lower`` is finite (default 0), ``upper`` may be omitted (+inf), weights
    ``w`` are positive (default 1). The set is always bounded: x_i <= lower_i +
    (total - <w, lower>) / w_i. Projection by breakpoint search on the multiplier
    of the weighted sum (expected O(n)); LMO by the greedy of the continuous
    knapsack (fill the smallest ratios c_i / w_i first), O(n log n).

    >>> import setkit
    >>> K = setkit.compile({"kind": "budget", "dim": 3, "total": 1.0, "upper": 0.5})
    >>> K.project([1.0, 1.0, -1.0]).round(6).tolist()
    [0.5, 0.5, 0.0]
    >>> K.lmo([3.0, 1.0, 2.0]).round(6).tolist()
    [0.0, 0.5, 0.5]
    """

    lower: np.ndarray
    upper: np.ndarray
    weights: np.ndarray
    total: float
    mode: str = "equal"
    traits = frozenset({"polyhedral", "bounded"})

    @classmethod
    def from_spec(cls, r):
        n = r.integer("dim", min=1)
        total = r.number("total")
        lo = r.vector_or_scalar("lower", n, default=0.0)
        hi = r.vector_or_scalar("upper", n, default=np.inf, allow_inf=True)
        if np.any(hi == -np.inf):
            i = int(np.flatnonzero(hi == -np.inf)[0])
            r.fail("upper", f"upper bounds must be finite or +inf; got -inf at index {i}.")
        bad = np.flatnonzero(lo > hi)
        if bad.size:
            i = int(bad[0])
            r.fail("upper", f"upper must be at least lower at every index; at index {i} lower is "
                            f"{_fmt(lo[i])} and upper {_fmt(hi[i])}.")
        weighted = r.has("weights")
        w = r.vector_or_scalar("weights", n, default=1.0)
        if np.any(w <= 0):
            i = int(np.flatnonzero(w <= 0)[0])
            r.fail("weights", f"weights must be positive; got {_fmt(w[i])} at index {i}.")
        mode = r.choice("mode", ("equal", "at_most"), "equal")
        ws = "the weighted sum" if weighted else "the sum"
        with np.errstate(over="ignore", invalid="ignore"):
            smin = float(w @ lo)
            fin = np.isfinite(hi)
            shi = float(w[fin] @ hi[fin])
            room = (total - smin) / w
        if not (np.isfinite(smin) and np.isfinite(shi) and np.all(np.isfinite(room))):
            r.fail("weights" if weighted else "total",
                   f"{ws} of the bounds, or the room total - {ws} of lower bounds divided by a weight, exceeds "
                   f"the float range (|x| < 1.8e308); rescale the data (every kernel works on these sums).")
        if total < smin:
            r.fail("total", f"total must be at least {ws} of lower bounds, {_fmt(smin)}; got {_fmt(total)}.")
        if mode == "equal":
            smax = float(w @ hi) if np.all(np.isfinite(hi)) else np.inf
            if total > smax:
                r.fail("total", f"total must be at most {ws} of upper bounds, {_fmt(smax)}; got {_fmt(total)}.")
        return cls(lower=lo, upper=hi, weights=w, total=float(total), mode=mode, name=r.name)

    @classmethod
    def examples(cls):
        """Small instances for the conformance checks (tests/test_conformance.py)."""
        return [{"kind": "budget", "dim": 4, "total": 1.0, "upper": 0.5},
                {"kind": "budget", "dim": 5, "total": 2.0, "lower": [0.1, 0, 0, 0.2, 0], "upper": [1, 0.6, 0.9, 1, 0.5],
                 "weights": [1, 2, 1, 0.5, 1]},
                {"kind": "budget", "dim": 3, "total": 1.5, "upper": 1.0, "mode": "at_most"}]

    @classmethod
    def random_example(cls, rng):
        """Random caps and weights in dimension 2..6, the total at 60% of the weighted caps."""
        n = int(rng.integers(2, 7))
        hi = rng.uniform(0.3, 1.0, n).round(3)
        return {"kind": "budget", "dim": n, "total": float(np.round(0.6 * hi.sum(), 3)), "upper": hi.tolist(),
                "weights": rng.uniform(0.5, 2.0, n).round(2).tolist()}

    @classmethod
    def benchmark_example(cls, n, rng):
        """Random caps and weights in R^n, the total at 30% of the weighted caps (benchmarks/run.py)."""
        upper = rng.uniform(0.5, 2.0, n)
        w = rng.uniform(0.5, 2.0, n)
        return {"kind": "budget", "about": "capped weighted budget, dim n", "dim": n, "total": 0.3 * float(w @ upper),
                "lower": 0.0, "upper": upper, "weights": w, "mode": "equal"}

    # -- description -----------------------------------------------------------------------
    @property
    def shape(self):
        return (self.lower.size,)

    def scale(self):
        v = np.concatenate([self.lower, self.upper[np.isfinite(self.upper)], [self.total]])
        return float(max(1.0, np.abs(v).max()))

    def __post_init__(self):
        # effective upper bounds (the upper bound, or what the budget alone allows) and the room
        # above the lower bounds, used by every LMO; a Lipschitz constant for the membership screen
        room = self.total - float(self.weights @ self.lower)
        object.__setattr__(self, "_room", room)
        object.__setattr__(self, "_caps", np.minimum(self.upper, self.lower + room / self.weights))
        object.__setattr__(self, "_lip", float(max(1.0, np.linalg.norm(self.weights))))
        # the magnitude that marks far points: the data's own size, not floored at 1, so that a set of
        # tiny totals treats an input of ordinary size as far (else its answer is off by ulps of the input)
        v = np.abs(np.concatenate([self.lower, self.upper[np.isfinite(self.upper)], [self.total]]))
        object.__setattr__(self, "_data_scale", float(max(v.max(), 1e-300)))
        with np.errstate(divide="ignore", invalid="ignore"):   # the KL projection's breakpoints use the logs of the bounds
            object.__setattr__(self, "_log_bounds", (np.log(self.lower), np.log(self.upper)))
        object.__setattr__(self, "_kl_structure", budget_structure(self.lower, self.upper, self.weights))
        # for long vectors: bounds and weights equal at every coordinate are passed as numbers
        object.__setattr__(self, "_long_data", tuple(uniform_or_array(v) for v in (self.lower, self.upper, self.weights)))

    def cvxpy_constraints(self, x):
        cons = [x >= self.lower]
        fin = np.isfinite(self.upper)
        if fin.all():
            cons.append(x <= self.upper)
        elif fin.any():
            cons.append(x[np.flatnonzero(fin)] <= self.upper[fin])
        s = self.weights @ x
        cons.append(s == self.total if self.mode == "equal" else s <= self.total)
        return cons

    def linear_form(self):
        row = self.weights[None, :]
        if self.mode == "equal":
            return LinearForm.build(self.dim, A_eq=row, b_eq=[self.total], lo=self.lower, hi=self.upper)
        return LinearForm.build(self.dim, A_ub=row, b_ub=[self.total], lo=self.lower, hi=self.upper)

    # -- native kernels ----------------------------------------------------------------------
    def bound_kernels(self):
        """project and lmo with this set's data bound, as numba functions of one point (K.jit_kernels())."""
        from ..kernels.bound import budget_kernels
        return budget_kernels(self.lower, self.upper, self.weights, self.total, self.mode == "at_most",
                              self._caps, self._room, self._data_scale, self._long_data)

    def point_kernels(self, check=True):
        """Compiled single-point project / lmo (setkit.kernels.point), bit-identical to the batch kernels.

        Points of LONG_ROW coordinates and more are not served (the long-vector route runs on the
        general path)."""
        from ..kernels import point
        from ..kernels.simplex import LONG_ROW
        if self.dim >= LONG_ROW:
            return {}
        D = point.pack([self.lower, self.upper, self.weights, self._caps],
                       [self.total, float(self.mode == "at_most"), float(check), 1e4 * self._data_scale, self._room])
        return {"project": (point.budget_project_point, (D,)), "lmo": (point.budget_lmo_point, (D,))}

    @kernel("project", into=True)
    def project(self, Y, out=None):
        """Clip to the bounds and shift by the multiplier of the weighted sum, found by randomized breakpoint search, expected O(n)."""
        return project_capped(Y, self.lower, self.upper, self.weights, self.total, self.mode, self._data_scale,
                              self._long_data, out)

    @kernel("project_jvp")
    def project_jvp(self, Y, V):
        """The face of the projection: on the free set F = {lower < p < upper}, v_F - w_F <w_F, v_F>/<w_F, w_F>, O(n).

        The Jacobian is the projector onto the tangent subspace {d_i = 0 off F, <w_F, d_F> = 0}
        of the face of p (the weighted sum is active in mode equal, and in mode at_most when
        <w, clip(y)> >= total; otherwise J v = v on F). At a kink every constraint tight at p
        is treated as active (a coordinate exactly at a bound is fixed; the tie of the at_most
        sum keeps the sum): the projector onto the smallest face containing p.
        """
        P = self.project(Y)
        if self.mode == "equal":
            active = np.ones(Y.shape[0], dtype=np.bool_)
        else:
            active = np.clip(Y, self.lower, self.upper) @ self.weights >= self.total
        return capped_face_rows(P, np.ascontiguousarray(V, dtype=float), self.lower, self.upper, self.weights,
                                active, np.empty_like(P))

    @kernel("lmo", into=True)
    def lmo(self, C, out=None):
        """Continuous-knapsack greedy by increasing c_i / w_i, with randomized selection instead of a sort, expected O(n)."""
        X = np.empty_like(C) if out is None else out
        knapsack_lmo_rows(C, self.lower, self._caps, self.weights, self._room, self.mode == "at_most", X)
        return X

    def lmo_sorted(self, C):
        """The same greedy by sorting the ratios, O(n log n) (kept as an independent check)."""
        b, n = C.shape
        w = self.weights
        caps = w * (self._caps - self.lower)           # weighted room of each coordinate, finite
        ratio = C / w
        order = np.argsort(ratio, axis=1, kind="stable")
        cap_sorted = caps[order]
        before = np.cumsum(cap_sorted, axis=1) - cap_sorted
        fill = np.clip(self._room - before, 0.0, cap_sorted)
        if self.mode == "at_most":
            fill = np.where(np.take_along_axis(ratio, order, axis=1) < 0, fill, 0.0)
        X = np.broadcast_to(self.lower, (b, n)).copy()
        np.put_along_axis(X, order, self.lower[order] + fill / w[order], axis=1)
        return X

    @kernel("contains")
    def contains(self, X, tol):
        """Violation screen (bounds and weighted sum), the distance only for borderline points, O(n)."""
        return screened_contains(X, tol, self.violation,
                                 lambda Z: np.linalg.norm(Z - self.project(Z), axis=1), self._lip,
                                 self._screen)

    @kernel("support")
    def support(self, C):
        """<c, lmo(-c)> by the same greedy, expected O(n)."""
        return np.einsum("ij,ij->i", C, self.lmo(-C))

    def _screen(self, X, tol, lip):
        return bounds_sum_screen(X, self.lower, self.upper, self.weights, self.total, self.mode == "equal", tol, lip)

    def orthant_violation(self):
        """None when every lower bound is >= 0, else the first negative one."""
        bad = np.flatnonzero(self.lower < 0.0)
        if bad.size:
            i = int(bad[0])
            return f"lower[{i}] = {_fmt(self.lower[i])} < 0 (every lower bound must be >= 0)"
        return None

    @kernel("project_kl")
    def project_kl(self, T):
        """Capping: clip(y exp(-lam w), lower, upper) with lam by breakpoint selection, exact, expected O(n)."""
        why = self.orthant_violation()
        if why:
            raise outside_orthant_error(self.label, why)
        return budget_kl(T, self.lower, self.upper, self.weights, self.total, self.mode == "at_most", self.label,
                         self._log_bounds, self._kl_structure)

    @kernel("project_kl_jvp")
    def project_kl_jvp(self, T, V):
        """In log coordinates, on the free set F = {lower < x < upper}: x_F (v_F - w_F <w x, v>_F / <w^2 x>_F), O(n).

        x_i = clip(exp(t_i - lam w_i)) with <w, x> = total; differentiating on F gives
        dx_i = x_i (dt_i - w_i dlam) and dlam = <w x, dt>_F / <w^2 x>_F. In mode at_most with
        <w, clip(exp(t))> < total the sum is inactive (J = diag(x) on F). At a kink every
        constraint tight at x is active: a coordinate exactly at a bound is fixed, the tie of
        the at_most sum keeps the sum.
        """
        X = self.project_kl(T)
        V = np.asarray(V, dtype=float)
        F = (X > self.lower) & (X < self.upper)
        XF = np.where(F, X, 0.0)
        wx = XF * self.weights
        den = wx @ self.weights
        coef = np.divide(np.einsum("ij,ij->i", wx, V), den, out=np.zeros_like(den), where=den > 0)
        if self.mode == "at_most":
            with np.errstate(over="ignore"):
                free = np.clip(np.exp(T), self.lower, self.upper) @ self.weights < self.total
            coef = np.where(free, 0.0, coef)
        return XF * (V - self.weights * coef[:, None])

    @kernel("violation")
    def violation(self, X):
        """Largest violation of the bounds and of the weighted sum, O(n)."""
        return bounds_sum_violation(X, self.lower, self.upper, self.weights, self.total, self.mode == "equal")

    # -- exact knowledge for setkit.measures ------------------------------------------------------
    def _symmetric(self):
        """(l, c, room) in x units when lower, effective caps and weights are the same for every
        coordinate (c = cap - l, room = total / w - n l), else None."""
        caps = self._caps
        if not (np.all(self.lower == self.lower[0]) and np.all(caps == caps[0])
                and np.all(self.weights == self.weights[0])):
            return None
        n = self.lower.size
        l, w = float(self.lower[0]), float(self.weights[0])
        c = float(caps[0]) - l
        room = max(0.0, min(self.total / w - n * l, n * c))
        return l, c, room

    def _vertex_types(self, l, c, room):
        """Vertex classes of a symmetric budget: (count, number of coordinates at the cap, fractional part)."""
        import math
        n = self.lower.size
        if c <= 0 or room <= 0:
            return [(1, 0, 0.0)]
        j0 = min(n, int(np.floor(room / c + 1e-12)))
        f = room - j0 * c
        if abs(f) <= 1e-12 * max(1.0, room):
            f = 0.0
        types = []
        if self.mode == "at_most":
            types += [(math.comb(n, j), j, 0.0) for j in range(j0 + 1)]
            if f > 0 and j0 < n:
                types.append((n * math.comb(n - 1, j0), j0, f))
        else:
            types.append(((n - j0) * math.comb(n, j0) if f > 0 else math.comb(n, j0), j0, f))
        return types

    def exact_centroid(self, measure):
        """Closed forms for a symmetric budget (equal lower bounds, effective caps and weights):
        mode equal, every measure: l + room/n by symmetry; mode at_most: vertices, the count-weighted
        mean over the vertex classes; directions, l + E[min(room, N c)]/n with N ~ Binomial(n, 1/2)
        the number of negative direction coordinates (the greedy fills those up to the budget).
        Otherwise None (triangulation or an estimate)."""
        import math
        sym = self._symmetric()
        if sym is None:
            return None
        l, c, room = sym
        n = self.lower.size
        if self.mode == "equal":
            return np.full(n, l + room / n)
        if measure == "volume":
            return None
        if measure == "directions":
            e = sum(math.comb(n, j) * min(room, j * c) for j in range(n + 1)) / 2.0 ** n
            return np.full(n, l + e / n)
        types = self._vertex_types(l, c, room)
        total = sum(cnt for cnt, _, _ in types)
        extra = sum(cnt * (j * c + f) for cnt, j, f in types) / total
        return np.full(n, l + extra / n)

    def exact_sample(self, k, measure, rng):
        """Symmetric budgets: vertices (and directions in mode equal, where lmo(g) is the base vertex in
        the order of g) are a vertex class drawn by its count, then a uniformly random placement."""
        sym = self._symmetric()
        if sym is None or measure == "volume" or (measure == "directions" and self.mode == "at_most"):
            return None
        l, c, room = sym
        n = self.lower.size
        types = self._vertex_types(l, c, room)
        cnt = np.array([float(t[0]) for t in types])
        pick = rng.choice(len(types), size=k, p=cnt / cnt.sum())
        base = np.full((len(types), n), l)
        for i, (_, j, f) in enumerate(types):
            base[i, :j] = l + c
            if f > 0:
                base[i, j] = l + f
        return rng.permuted(base[pick], axis=1)
