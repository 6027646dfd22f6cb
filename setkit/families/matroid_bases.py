"""The base polytope of a matroid: the convex hull of the indicator vectors of its bases.

Forms (``form``):

* ``uniform`` (``dim`` n, ``k``): the k-subsets of n elements; K = {0 <= x <= 1, sum x = k},
  the capped simplex;
* ``partition`` (``groups``: lists of element indices partitioning 0..n-1, ``quotas``: one
  count per group): exactly q_j elements from group j; K is the product of the capped simplices
  {0 <= x_G <= 1, sum x_G = q_j};
* ``rank`` (from Python only: ``rank=callable`` on frozensets, with ``dim``): any matroid given by
  its rank function; K = B(rank), the base polytope of the (submodular) rank function.

LMO by the greedy algorithm (Edmonds 1971: greedy finds a minimum-weight basis of any matroid).
Projection: uniform and partition by the capped-simplex breakpoint search of the budget family
(exact, expected O(n)); a rank oracle by Wolfe's minimum-norm point on the greedy LMO.

Outputs are numerical answers within the stated tolerances; where quotas select people (rotas,
panels, shortlists) they are to be reviewed by a responsible person and checked against local rules.
"""
from __future__ import annotations

import math
from dataclasses import dataclass
from numbers import Integral

import numpy as np
import scipy.sparse as sp

from ..description import MAX_SIZE, show_count
from ..forms import LinearForm
from ..kernels.base_kl import base_polytope_kl, partition_kl_jvp
from ..kernels.bregman import budget_kl
from ..kernels.face import capped_face_rows
from ..kernels.simplex import project_capped
from ..kernels.structured_faces import ordered_partition_jvp
from . import Family, kernel, memo, register
from ._graph import fail_at
from ._screen import screened_contains
from .submodular_base import MNP_FACE_RTOL, BasePolytopeMixin, PythonFunction, check_submodular


@register("matroid_bases")
@dataclass(frozen=True, eq=False, kw_only=True)
class MatroidBases(BasePolytopeMixin, Family):
    """K = conv{1_B : B a basis of the matroid} (uniform, partition, or a rank oracle from Python).

    uniform / partition: {0 <= x <= 1, sum over each group = its quota}; LMO: the q_j smallest costs
    of each group, O(n log n); projection: breakpoint search per group, expected O(n); membership
    exact from the bounds and sums. rank oracle: greedy LMO (n rank calls), Wolfe's minimum-norm
    point projection with a gap certificate, membership by subset enumeration (n <= 16).

    Derivatives: native (uniform, partition: exact capped faces per group; rank oracle: level sets of
    y - p). KL geometry: native (uniform, partition: capping per group, exact; rank oracle: weighted
    minimum-norm point or the decomposition algorithm, KL-certified), with native KL Jacobians.

    >>> import setkit
    >>> K = setkit.compile({"kind": "matroid_bases", "form": "uniform", "dim": 4, "k": 2})
    >>> K.lmo([3.0, 1.0, 2.0, 4.0]).tolist()
    [0.0, 1.0, 1.0, 0.0]
    >>> K2 = setkit.compile({"kind": "matroid_bases", "form": "partition", "groups": [[0, 1], [2, 3, 4]],
    ...                      "quotas": [1, 2]})
    >>> K2.project([1.0, 0.0, 0.0, 0.0, 0.0]).round(6).tolist()
    [1.0, 0.0, 0.666667, 0.666667, 0.666667]
    """

    form: str
    groups: tuple = ()          # tuple of int arrays (uniform: one group of every element)
    quotas: np.ndarray | None = None
    n: int = 0
    fn: object = None           # the rank oracle (form rank)
    traits = frozenset({"polyhedral", "bounded"})

    @classmethod
    def from_spec(cls, r):
        default = "rank" if r.has("rank") else "partition" if r.has("groups") else "uniform"
        form = r.choice("form", ("uniform", "partition", "rank"), default)
        if form == "uniform":
            n = r.integer("dim", min=1)
            k = r.integer("k", min=0)
            if k > n:
                r.fail("k", f"k must be at most dim = {n} (a basis has k of the n elements); got {k}.")
            return cls(form=form, groups=(np.arange(n),), quotas=np.array([float(k)]), n=n, name=r.name)
        if form == "partition":
            raw = r.raw("groups")
            if not isinstance(raw, (list, tuple)) or not raw:
                r.fail("groups", f"groups must be a list of lists of element indices; got {raw!r}.")
            groups, seen = [], {}
            for j, gr in enumerate(raw):
                if not isinstance(gr, (list, tuple)) or not gr:
                    fail_at(r, ("groups", j), f"groups[{j}] must be a nonempty list of element indices; got {gr!r}.")
                for i in gr:
                    if isinstance(i, bool) or not isinstance(i, Integral) or i < 0:
                        fail_at(r, ("groups", j), f"groups[{j}] must hold element indices (whole numbers >= 0); "
                                                  f"got {i!r}.")
                    if i >= MAX_SIZE:         # found by fuzz_descriptions (seed 21): 2^63 overflowed int64
                        fail_at(r, ("groups", j), f"groups[{j}] holds the element index {show_count(int(i))}; "
                                                  f"indices must be below {MAX_SIZE:,} (the size limit of setkit).")
                    if int(i) in seen:
                        fail_at(r, ("groups", j), f"element {i} is in groups[{seen[int(i)]}] and groups[{j}]; the "
                                                  f"groups must be disjoint.")
                    seen[int(i)] = j
                groups.append(np.array(sorted(int(i) for i in gr), np.int64))
            n = max(seen) + 1
            if len(seen) != n:
                # the elements are distinct (disjoint groups): the first gap in their sorted list is the
                # first missing one (never a set of range(n): an index like 2**31 would take gigabytes)
                have = np.sort(np.fromiter(seen, np.int64, len(seen)))
                gaps = np.flatnonzero(have != np.arange(have.size))
                first = int(gaps[0]) if gaps.size else have.size
                r.fail("groups", f"the groups must cover the elements 0..{n - 1}; element {first} is in no "
                                 f"group (put it in a group of its own with quota 0 or 1).")
            if r.has("dim"):
                d = r.integer("dim", min=1)
                if d != n:
                    r.fail("dim", f"dim must equal the number of grouped elements, {n}; got {d}.")
            q = r.array("quotas", ndim=1)
            if q.size != len(groups):
                r.fail("quotas", f"quotas must have one entry per group, {len(groups)}; got {q.size}.")
            for j, (gr, qj) in enumerate(zip(groups, q)):
                if qj != np.round(qj) or qj < 0 or qj > gr.size:
                    r.fail("quotas", f"quotas[{j}] must be a whole number between 0 and the size of groups[{j}], "
                                     f"{gr.size}; got {qj:g}.")
            return cls(form=form, groups=tuple(groups), quotas=q.astype(float), n=n, name=r.name)
        # a rank oracle from Python
        raw = r.raw("rank")
        if not callable(raw):
            r.fail("rank", f"rank must be a Python function on frozensets of element indices (builder only: "
                           f"setkit.build('matroid_bases', form='rank', rank=f, dim=n)); got {raw!r}.")
        n = r.integer("dim", min=1)
        fn = PythonFunction(n, raw, "matroid_bases" + (f" '{r.name}'" if r.name else ""))
        try:
            M = np.zeros((n + 2, n), bool)
            M[np.arange(n) + 1, np.arange(n)] = True
            M[n + 1] = True
            v = fn.values(M)
        except Exception as exc:
            r.fail("rank", f"calling the rank function raised {type(exc).__name__}: {exc}.")
        if v[0] != 0:
            r.fail("rank", f"the rank of the empty set must be 0; got {v[0]:g}.")
        bad = np.flatnonzero((v[1:n + 1] != 0) & (v[1:n + 1] != 1))
        if bad.size:
            r.fail("rank", f"the rank of a single element must be 0 or 1; got {v[1 + bad[0]]:g} for element {bad[0]}.")
        if v[-1] != np.round(v[-1]) or not 0 <= v[-1] <= n:
            r.fail("rank", f"the rank of the ground set must be a whole number in 0..{n}; got {v[-1]:g}.")
        sub = check_submodular(fn)
        if sub is not None:
            S, i, j, by = sub
            r.fail("rank", f"the rank function is not submodular: r(S+i) + r(S+j) < r(S+i+j) + r(S) by {by:g} for "
                           f"S = {S}, i = {i}, j = {j}.")
        return cls(form=form, n=n, fn=fn, name=r.name)

    @classmethod
    def benchmark_example(cls, n, rng):
        """A partition matroid: n elements in groups of 10 with random quotas."""
        groups = [list(range(i, min(n, i + 10))) for i in range(0, n, 10)]
        return {"kind": "matroid_bases", "about": "partition matroid, groups of 10", "form": "partition",
                "groups": groups, "quotas": [int(rng.integers(0, len(g) + 1)) for g in groups]}

    @classmethod
    def examples(cls):
        """Small instances for the conformance checks (tests/test_conformance.py)."""
        return [{"kind": "matroid_bases", "form": "uniform", "dim": 5, "k": 2},
                {"kind": "matroid_bases", "form": "partition", "groups": [[0, 2, 4], [1, 3], [5]],
                 "quotas": [2, 1, 0]}]

    @classmethod
    def random_example(cls, rng):
        """A random partition matroid: 2..3 groups of 1..4 elements, random quotas."""
        sizes = rng.integers(1, 5, int(rng.integers(2, 4)))
        perm = rng.permutation(int(sizes.sum()))
        groups = np.split(perm, np.cumsum(sizes)[:-1])
        return {"kind": "matroid_bases", "form": "partition", "groups": [sorted(g.tolist()) for g in groups],
                "quotas": [int(rng.integers(0, s + 1)) for s in sizes]}

    # -- description -----------------------------------------------------------------------
    @property
    def shape(self):
        return (int(self.n),)

    def scale(self):
        return 1.0

    def _rows(self):
        def build():
            rows = np.concatenate([np.full(g.size, j) for j, g in enumerate(self.groups)])
            cols = np.concatenate(self.groups)
            return sp.csr_matrix((np.ones(cols.size), (rows, cols)), shape=(len(self.groups), self.n))
        return memo(self, "group_rows", build)

    def cvxpy_constraints(self, x):
        if self.form == "rank":
            return self._all_subsets_constraints(x, "a rank oracle")
        return [x >= 0, x <= 1, self._rows() @ x == self.quotas]

    def linear_form(self):
        if self.form == "rank":
            return None
        return LinearForm.build(self.n, A_eq=self._rows(), b_eq=self.quotas, lo=np.zeros(self.n), hi=np.ones(self.n))

    # -- native kernels ----------------------------------------------------------------------
    @kernel("lmo")
    def lmo(self, C):
        """Greedy: the q_j smallest costs of each group (uniform, partition), or n rank calls along the sorted costs."""
        if self.form == "rank":
            return self.fn.greedy(C)
        X = np.zeros_like(C)
        b = C.shape[0]
        for g, q in zip(self.groups, self.quotas):
            q = int(q)
            if q == 0:
                continue
            pick = np.argsort(C[:, g], axis=1, kind="stable")[:, :q]
            X[np.repeat(np.arange(b), q), g[pick.reshape(-1)]] = 1.0
        return X

    @kernel("project")
    def project(self, Y):
        """Capped-simplex breakpoint search per group (the budget kernel), expected O(n); a rank oracle: Wolfe's minimum-norm point."""
        if self.form == "rank":
            return self._mnp_project(Y)
        X = np.empty_like(Y)
        for g, q in zip(self.groups, self.quotas):
            if q == 0 or q == g.size:          # a single point: exact
                X[:, g] = 0.0 if q == 0 else 1.0
            else:
                X[:, g] = project_capped(np.ascontiguousarray(Y[:, g]), 0.0, 1.0, 1.0, float(q), "equal")
        return X

    @kernel("project_jvp")
    def project_jvp(self, Y, V):
        """Face of the answer: per group v minus its mean on the free coordinates, 0 at the bounds, O(n); rank oracle: level-set means.

        uniform / partition: the Jacobian is the projector onto {d_i = 0 where p_i is 0 or 1,
        sum of d over the free part of each group = 0} (a coordinate exactly at a bound is fixed:
        the smallest face). A rank oracle: the base polytope's face exposed by y - p, i.e. v minus
        its mean on each level set of y - p (values within 1e-7 relative count as equal, the
        accuracy of the minimum-norm-point answer).
        """
        V = np.ascontiguousarray(V, dtype=float)
        if self.form == "rank":
            P = self._mnp_project(Y)[0]
            return ordered_partition_jvp(Y, P, V, MNP_FACE_RTOL)
        P = self.project(Y)
        out = np.zeros_like(V)
        active = np.ones(Y.shape[0], dtype=np.bool_)
        for g, q in zip(self.groups, self.quotas):
            if 0 < q < g.size:
                m = g.size
                out[:, g] = capped_face_rows(np.ascontiguousarray(P[:, g]), np.ascontiguousarray(V[:, g]), np.zeros(m),
                                             np.ones(m), np.ones(m), active, np.empty((Y.shape[0], m)))
        return out

    def orthant_violation(self):
        """None: every point of a matroid base polytope is in [0, 1]^n."""
        return None

    @kernel("project_kl")
    def project_kl(self, T):
        """Capping per group: clip(y exp(-lam_j), 0, 1) summing to q_j, exact, expected O(n); rank oracle: weighted min-norm point, KL-certified."""
        if T.shape[0] == 0:
            return T.copy()
        if self.form == "rank":
            total = float(self.fn.values(np.ones((1, self.n), bool))[0])
            return base_polytope_kl(T, self.fn.greedy, total=total, bound=1.0, label=self.label)
        X = np.empty_like(T)
        if len(self.groups) > 1 and T.shape[0] == 1:
            return self._kl_groups_at_once(T[0])[None, :]
        for g, q in zip(self.groups, self.quotas):
            if q == 0 or q == g.size:          # a single point: exact
                X[:, g] = 0.0 if q == 0 else 1.0
            else:
                m = g.size
                X[:, g] = budget_kl(np.ascontiguousarray(T[:, g]), np.zeros(m), np.ones(m), np.ones(m), float(q),
                                    label=self.label)
        return X

    def _kl_groups_at_once(self, t):
        """The capping rule on every group at once (groups padded to one array), exact, O(n log n).

        In each group (sorted decreasingly, s) the c largest entries are capped at 1 and the rest
        scaled to the remaining mass q - c: x = (q - c) softmax(s_tail); c is the smallest count with
        s_c + log(q - c) <= logsumexp(s_c, s_{c+1}, ...) (then the capped ones are >= 1), found in the
        log domain by reversed cumulative logsumexp (no underflow for any spread of t)."""
        def build():
            G = len(self.groups)
            sizes = np.array([g.size for g in self.groups])
            idx = np.full((G, int(sizes.max())), -1, np.int64)
            for j, g in enumerate(self.groups):
                idx[j, :g.size] = g
            return idx, sizes
        idx, sizes = memo(self, "kl_padding", build)
        q = self.quotas
        S = np.where(idx >= 0, t[np.maximum(idx, 0)], -np.inf)
        order = np.argsort(-S, axis=1, kind="stable")
        s = np.take_along_axis(S, order, axis=1)
        lse = np.logaddexp.accumulate(s[:, ::-1], axis=1)[:, ::-1]          # logsumexp of each tail
        c = np.arange(s.shape[1])[None, :]
        R = q[:, None] - c
        with np.errstate(divide="ignore", invalid="ignore"):
            ok = (R > 0) & (c < sizes[:, None]) & (s + np.log(np.where(R > 0, R, 1.0)) <= lse)
        first = np.where(ok.any(axis=1), ok.argmax(axis=1), 0)
        rows = np.arange(s.shape[0])
        tail_lse = lse[rows, first]
        Rf = q - first
        with np.errstate(invalid="ignore", over="ignore"):
            vals = np.where(c < first[:, None], 1.0, Rf[:, None] * np.exp(s - tail_lse[:, None]))
        vals = np.where(c < sizes[:, None], vals, 0.0)
        vals[q == 0] = 0.0
        full = q == sizes
        vals[full] = np.where(c[0] < sizes[full, None], 1.0, 0.0)
        x = np.empty_like(t)
        sorted_idx = np.take_along_axis(idx, order, axis=1)
        keep = sorted_idx >= 0
        x[sorted_idx[keep]] = vals[keep]
        return x

    @kernel("project_kl_jvp")
    def project_kl_jvp(self, T, V):
        """In log coordinates, per group on F = {0 < x < 1}: x_F (v_F - <x, v>_F / <x>_F), O(n); a rank oracle: softmax per block of the partition.

        x_i = min(y_i exp(-lam_j), 1) with sum over group j equal to q_j: dx_i = x_i (dt_i - dlam_j)
        on the free coordinates and dlam_j = <x, dt>_F / <x>_F; coordinates at 1 are fixed (one
        exactly at 1 is treated as fixed: the smallest face).
        """
        X = self.project_kl(T)
        X = X[0] if isinstance(X, tuple) else X
        V = np.asarray(V, dtype=float)
        if self.form == "rank":
            return partition_kl_jvp(T, X, V)
        out = np.zeros_like(V)
        for g, q in zip(self.groups, self.quotas):
            if 0 < q < g.size:
                Xg = X[:, g]
                XF = np.where((Xg > 0.0) & (Xg < 1.0), Xg, 0.0)
                den = XF.sum(axis=1)
                coef = np.divide(np.einsum("ij,ij->i", XF, V[:, g]), den, out=np.zeros_like(den), where=den > 0)
                out[:, g] = XF * (V[:, g] - coef[:, None])
        return out

    @kernel("violation")
    def violation(self, X):
        """Largest violated bound or group sum (exact, O(n)); a rank oracle: subset enumeration (n <= 16) or the projection."""
        if self.form == "rank":
            return self._base_violation(X)
        v = np.maximum((-X).max(axis=1, initial=0.0), (X - 1.0).max(axis=1, initial=0.0))
        sums = np.asarray(X @ self._rows().T.toarray())
        return np.maximum(v, np.abs(sums - self.quotas).max(axis=1, initial=0.0))

    @kernel("contains")
    def contains(self, X, tol):
        """Violation screen (bounds and group sums; rows of norm <= sqrt(n)), the projection only for borderline points."""
        if self.form == "rank":
            return self._base_contains(X, tol)
        return screened_contains(X, tol, self.violation, lambda Z: np.linalg.norm(Z - self.project(Z), axis=1),
                                 math.sqrt(self.n))

    # -- exact knowledge for setkit.measures ------------------------------------------------------
    def exact_centroid(self, measure):
        """uniform / partition: q_j / |G_j| on group j for every measure (each measure is invariant
        under permuting the elements within a group). A rank oracle: None."""
        if self.form == "rank":
            return None
        c = np.empty(self.n)
        for g, q in zip(self.groups, self.quotas):
            c[g] = q / g.size
        return c

    def exact_sample(self, k, measure, rng):
        """vertices and directions (uniform, partition): a uniformly random q_j-subset of each group
        (lmo(g) of a Gaussian g picks one too, by symmetry within groups). volume, rank oracle: None."""
        if self.form == "rank" or measure == "volume":
            return None
        X = np.zeros((k, self.n))
        for g, q in zip(self.groups, self.quotas):
            q = int(q)
            if q:
                pick = np.argsort(rng.random((k, g.size)), axis=1)[:, :q]
                X[np.repeat(np.arange(k), q), g[pick.reshape(-1)]] = 1.0
        return X
