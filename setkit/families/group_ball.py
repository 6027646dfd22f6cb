"""The group-lasso ball {x : sum_g w_g ||x_g||_2 <= radius} (l1 norm of the groups' l2 norms)."""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..kernels.simplex import project_capped
from ..kernels.spectral import pow2_scales
from ..kernels.structured_faces import group_face_rows
from . import Family, kernel, register
from ._centered_ball import CenteredBall


@register("group_ball")
@dataclass(frozen=True, eq=False, kw_only=True)
class GroupBall(CenteredBall, Family):
    """K = {x in R^n : sum_g w_g ||x_g||_2 <= radius}, the groups g partitioning the coordinates.

    Groups are given as ``groups`` (lists of 0-based indices covering 0..n-1 once) or as ``dim``
    with ``group_size`` (consecutive blocks; the last may be shorter). ``weights`` (one per group,
    > 0) default to 1. Projection: the group norms a_g are projected onto the weighted l1 ball,
    t_g = (a_g - lam w_g)_+ (the continuous knapsack threshold), and each group is scaled by
    t_g / a_g; O(n). LMO: the whole radius on the group maximizing ||c_g|| / w_g, along -c_g;
    support: radius max_g ||c_g|| / w_g (the dual norm).

    Derivatives: native and exact (group-wise radial scaling and the multiplier's implicit derivative;
    project_vjp derived). KL geometry: refused, the ball is not inside x >= 0.

    >>> import setkit
    >>> K = setkit.compile({"kind": "group_ball", "groups": [[0, 1], [2]], "radius": 1.0})
    >>> K.project([3.0, 4.0, 0.5]).round(12).tolist()
    [0.6, 0.8, 0.0]
    >>> float(K.support([3.0, 4.0, -6.0]))
    6.0
    """

    groups: tuple
    radius: float
    weights: np.ndarray | None = None
    traits = frozenset({"bounded", "centrally_symmetric"})

    @classmethod
    def from_spec(cls, r):
        if r.has("groups"):
            raw = r.raw("groups")
            if not isinstance(raw, (list, tuple)) or not raw:
                r.fail("groups", "groups must be a nonempty list of index lists, e.g. [[0, 1], [2, 3, 4]].")
            groups = []
            for gi, g in enumerate(raw):
                if not isinstance(g, (list, tuple)) or not g:
                    r.fail("groups", f"group {gi} must be a nonempty list of coordinate indices; got {g!r}.")
                idx = []
                for v in g:
                    if isinstance(v, bool) or not (isinstance(v, (int, np.integer)) or
                                                   (isinstance(v, float) and float(v).is_integer())):
                        r.fail("groups", f"group {gi} must list whole-number indices; got {v!r}.")
                    idx.append(int(v))
                groups.append(tuple(idx))
            n = sum(len(g) for g in groups)
            flat = np.concatenate([np.asarray(g) for g in groups])
            if r.has("dim"):
                n_given = r.integer("dim", min=1)
                if n_given != n:
                    r.fail("dim", f"the groups hold {n} indices in all but dim is {n_given}; the groups must "
                                  f"partition 0..dim-1.")
            if flat.min() < 0 or flat.max() >= n:
                bad = int(flat[(flat < 0) | (flat >= n)][0])
                r.fail("groups", f"the groups must partition 0..{n - 1} (they hold {n} indices); index {bad} "
                                 f"is out of range.")
            counts = np.bincount(flat, minlength=n)
            if (counts != 1).any():
                dup = int(np.flatnonzero(counts > 1)[0])
                miss = int(np.flatnonzero(counts == 0)[0])
                r.fail("groups", f"the groups must partition 0..{n - 1}: index {dup} appears more than once "
                                 f"and index {miss} in no group.")
            if r.has("group_size"):
                r.fail("group_size", "give either groups or dim with group_size, not both.")
        else:
            if not r.has("dim"):
                r.fail("groups", "groups is required (or give dim and group_size for consecutive blocks).")
            n = r.integer("dim", min=1)
            size = r.integer("group_size", min=1)
            if size > n:
                r.fail("group_size", f"group_size must be at most dim = {n}; got {size}.")
            groups = [tuple(range(s, min(s + size, n))) for s in range(0, n, size)]
        radius = r.number("radius", min=0.0)
        w = None
        if r.has("weights"):
            w = r.vector_or_scalar("weights", len(groups))
            if (w <= 0).any():
                j = int(np.flatnonzero(w <= 0)[0])
                r.fail("weights", f"weights must be positive (one per group, {len(groups)} groups); got "
                                  f"{w[j]} for group {j}.")
        return cls(groups=tuple(groups), radius=radius, weights=w, name=r.name)

    @classmethod
    def benchmark_example(cls, n, rng):
        """The group l1/l2 ball with groups of 3, dim n."""
        return {"kind": "group_ball", "about": "group l1/l2 ball, groups of 3", "dim": n, "group_size": 3, "radius": 2.0}

    @classmethod
    def examples(cls):
        """Small instances for the conformance checks (tests/test_conformance.py).

        (Clarabel, the reference, reports "optimal_inaccurate" on some group-ball LMOs, where unused
        groups sit at the apex of their cones; tests/families/test_group_ball.py checks those
        against closed forms and the loose reference.)"""
        return [{"kind": "group_ball", "groups": [[0, 3], [1, 2, 4], [5]], "radius": 1.0},
                {"kind": "group_ball", "dim": 6, "group_size": 3, "radius": 2.5, "weights": [1.0, 0.5]},
                {"kind": "group_ball", "dim": 3, "group_size": 3, "radius": 0.5}]

    @classmethod
    def random_example(cls, rng):
        """Random consecutive groups of 1..3 coordinates over 3..8 coordinates, random weights."""
        n = int(rng.integers(3, 9))
        size = int(rng.integers(1, 4))
        k = -(-n // size)
        return {"kind": "group_ball", "dim": n, "group_size": size, "radius": float(np.round(rng.uniform(0.2, 4), 3)),
                "weights": np.round(rng.uniform(0.5, 2.0, k), 3).tolist()}

    def __post_init__(self):
        k = len(self.groups)
        w = np.ones(k) if self.weights is None else np.ascontiguousarray(self.weights, dtype=float)
        object.__setattr__(self, "_w", w)
        perm = np.concatenate([np.asarray(g, dtype=np.int64) for g in self.groups])
        sizes = np.array([len(g) for g in self.groups])
        object.__setattr__(self, "_perm", perm)
        object.__setattr__(self, "_starts", np.concatenate([[0], np.cumsum(sizes)[:-1]]))
        # group id of each position in the permuted order, and of each coordinate
        gid = np.repeat(np.arange(k), sizes)
        owner = np.empty(perm.size, dtype=np.int64)
        owner[perm] = gid
        object.__setattr__(self, "_owner", owner)

    @property
    def shape(self):
        return (int(self._perm.size),)

    def scale(self):
        return max(1.0, self.radius / float(self._w.min()))

    def cvxpy_constraints(self, x):
        import cvxpy as cp
        terms = [float(w) * cp.norm(x[list(g)], 2) for w, g in zip(self._w, self.groups)]
        return [cp.sum(cp.hstack(terms)) <= self.radius]

    # -- helpers ----------------------------------------------------------------------------------
    def _norms(self, Y):
        """(t, group norms of Y / t) with per-row powers of two t (no overflow in the squares)."""
        t = pow2_scales(Y)
        Z = Y / t[:, None]
        sq = np.add.reduceat((Z * Z)[:, self._perm], self._starts, axis=1)
        return t, np.sqrt(sq)

    # -- native kernels ---------------------------------------------------------------------------
    def axis_reach(self):
        """The largest t with t e_1 in the set."""
        return self.radius / float(self._w[0])

    @kernel("project")
    def project(self, Y):
        """Weighted l1-ball projection of the group norms (knapsack threshold), groups rescaled, O(n)."""
        out = Y.copy()
        if Y.shape[0] == 0:
            return out
        t, a = self._norms(Y)
        rt = self.radius / t
        over = np.flatnonzero(a @ self._w > rt)
        for i in over:
            if rt[i] == 0.0:
                out[i] = 0.0
                continue
            # data_scale = the radius at this row's scale: the kernel then solves rows with group norms far
            # above the radius (|y| ~ 1e16 radius and beyond) exactly instead of leaving the answer a few
            # ulps of |y| off (which at that ratio is outside the ball)
            tg = project_capped(a[i:i + 1], 0.0, np.inf, self._w, float(rt[i]), mode="at_most",
                                data_scale=float(rt[i]))[0]
            f = np.divide(tg, a[i], out=np.zeros_like(tg), where=a[i] > 0)
            out[i] = Y[i] * f[self._owner]
        return out

    @kernel("project_jvp")
    def project_jvp(self, Y, V):
        """Group-wise radial scaling plus the multiplier's implicit derivative on the active groups, O(n).

        On an active group (p_g != 0), x_g = y_g (1 - lam w_g / a_g), a_g = ||y_g||, with
        sum_A w_g (a_g - lam w_g) = radius; so dx_g = (t_g/a_g) v_g + (lam w_g/a_g) e_g <e_g, v_g>
        - w_g e_g dlam, e_g = y_g / a_g, dlam = sum_A w_g <e_g, v_g> / sum_A w_g^2; inactive groups
        have derivative 0, and J = I inside. At kinks the smallest face: a group with p_g = 0 exactly
        is inactive, a point on the boundary keeps the constraint.
        """
        out = np.empty_like(Y)
        if Y.shape[0] == 0:
            return out
        P = self.project(Y)
        t, a = self._norms(Y)
        boundary = np.ascontiguousarray(a @ self._w >= self.radius / t)
        sizes = np.array([len(g) for g in self.groups], dtype=np.int64)
        group_face_rows(np.ascontiguousarray(Y / t[:, None]), np.ascontiguousarray(P / t[:, None]), self._perm,
                        self._starts.astype(np.int64), sizes, self._w, self.radius / t, boundary,
                        np.ascontiguousarray(V, dtype=float), out)
        return out

    @kernel("violation")
    def violation(self, X):
        """max(sum_g w_g ||x_g|| - radius, 0), O(n)."""
        if X.shape[0] == 0:
            return np.zeros(0)
        t, a = self._norms(X)
        return np.maximum(t * (a @ self._w) - self.radius, 0.0)

    @kernel("lmo")
    def lmo(self, C):
        """The radius on the group maximizing ||c_g|| / w_g, along -c_g / ||c_g||, O(n)."""
        out = np.zeros_like(C)
        if C.shape[0] == 0:
            return out
        t, a = self._norms(C)
        ratio = a / self._w
        j = np.argmax(ratio, axis=1)
        for i in range(C.shape[0]):
            g = j[i]
            if a[i, g] == 0.0:
                continue
            idx = np.asarray(self.groups[g])
            out[i, idx] = -(self.radius / self._w[g]) * (C[i, idx] / t[i]) / a[i, g]
        return out

    @kernel("support")
    def support(self, C):
        """radius max_g ||c_g|| / w_g (the dual norm), O(n)."""
        if C.shape[0] == 0:
            return np.zeros(0)
        t, a = self._norms(C)
        return self.radius * t * (a / self._w).max(axis=1)
