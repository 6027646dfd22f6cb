"""The base polytope of a submodular set function.

B(F) = {x in R^n : x(S) <= F(S) for every S subset of V, x(V) = F(V)}, for F submodular with
F(empty) = 0 on the ground set V = {0, ..., n-1}. Edmonds' greedy algorithm (Edmonds 1970) gives
its LMO: order the elements by increasing cost c and give each its marginal gain
F(S_k) - F(S_{k-1}) along that chain. The functions offered (``function``):

* ``concave_cardinality``: F(S) = g(|S|) with ``values`` [g(0), ..., g(n)], g concave, g(0) = 0.
  B(F) is the permutahedron of the marginals g(k) - g(k-1), so projection and membership are exact
  (sort and pool-adjacent-violators, sorted partial sums).
* ``cut``: F(S) = total weight of the edges with exactly one end in S, on an undirected graph
  (``nodes``, ``edges`` [from, to, weight], weights >= 0). B(F) = {B t : |t_e| <= w_e}.
* ``coverage``: F(S) = total weight of the items covered by the sets of S (``sets``: one list of
  item indices per element, ``item_weights`` >= 0). B(F) = sum over items of w_u * simplex(N_u).
* from Python only: any function, ``function=callable`` with ``dim``, called as F(frozenset).

Projection (except concave of cardinality): Wolfe's minimum-norm-point algorithm on the greedy LMO
(the Fujishige-Wolfe method), stopped on the Frank-Wolfe gap, SolveError when it does not reach it.
Membership and violation: exact by enumerating the 2^n subsets for n <= 16 elements; for larger
ground sets from the projection p of x (Fujishige's theorem: max_S x(S) - F(S) = sum_i (x_i - p_i)^+),
so as accurate as the projection's certificate.
"""
from __future__ import annotations

import itertools
import math
from dataclasses import dataclass
from numbers import Integral

import numpy as np
import scipy.sparse as sp
from numba import njit

from ..errors import DescriptionError, UnsupportedOperationError
from ..forms import LinearForm
from ..kernels.base_kl import base_polytope_kl, partition_kl_jvp
from ..kernels.bregman import outside_orthant_error, permutahedron_kl
from ..kernels.face import permutahedron_face
from ..kernels.isotonic import project_permutahedron
from ..kernels.minnorm import coverage_greedy, project_rows, uncertified_rows
from ..kernels.structured_faces import ordered_partition_jvp
from . import Family, kernel, memo, register
from ._graph import fail_at, read_edges
from ._screen import screened_contains

EXHAUSTIVE_MAX = 16          # membership by enumerating subsets up to this many elements
CHECK_EXHAUSTIVE_MAX = 12    # submodularity of a Python function checked on every pair up to this size
CHECK_RANDOM = 300           # otherwise on this many random (S, i, j)
# level sets of y - p closer than this (relative) count as one block of the face, for projections by
# the minimum-norm-point method (its answers are certified to about this accuracy)
MNP_FACE_RTOL = 1e-7


def subset_masks(n):
    """All 2^n subsets as a boolean (2^n, n) array (row s holds the bits of s)."""
    s = np.arange(1 << n, dtype=np.int64)
    return ((s[:, None] >> np.arange(n)) & 1).astype(bool)


# -- set functions: greedy vertices (batched) and values on many subsets ---------------------------
class ConcaveCardinality:
    """F(S) = g(|S|)."""

    def __init__(self, g):
        self.g = np.asarray(g, float)
        self.n = self.g.size - 1
        self.marginals = np.diff(self.g)          # nonincreasing

    def greedy(self, C):
        order = np.argsort(C, axis=1, kind="stable")
        X = np.empty_like(C)
        np.put_along_axis(X, order, np.broadcast_to(self.marginals, C.shape), axis=1)
        return X

    def values(self, M):
        return self.g[M.sum(axis=1)]


class CutFunction:
    """F(S) = sum of w_e over edges e = {u, v} with exactly one end in S."""

    def __init__(self, n, tail, head, w):
        self.n, self.tail, self.head, self.w = n, tail, head, w
        m = tail.size
        self.Et = sp.csr_matrix((np.ones(m), (np.arange(m), tail)), shape=(m, n))
        self.Eh = sp.csr_matrix((np.ones(m), (np.arange(m), head)), shape=(m, n))

    def greedy(self, C):
        # the earlier end of each edge (in increasing c) gains w_e, the later one loses it
        pos = np.argsort(np.argsort(C, axis=1, kind="stable"), axis=1)
        sign = np.where(pos[:, self.tail] < pos[:, self.head], 1.0, -1.0) * self.w
        return np.asarray(sign @ self.Et - sign @ self.Eh)

    def values(self, M):
        return (M[:, self.tail] != M[:, self.head]).astype(float) @ self.w


@njit(cache=True)
def coverage_greedy_rows(C, indptr, items, iw, out):
    """Edmonds' greedy for a coverage function on each row of C, compiled
    (:func:`setkit.kernels.minnorm.coverage_greedy`). O(n log n + nnz) per row."""
    covered = np.zeros(iw.size, np.bool_)
    for r in range(C.shape[0]):
        coverage_greedy(C[r], indptr, items, iw, covered, out[r])


class CoverageFunction:
    """F(S) = sum of item weights w_u over items u covered by some set of S."""

    def __init__(self, n, pairs_elem, pairs_item, item_weights):
        self.n = n
        self.elem = pairs_elem               # incidence pairs (element, item)
        self.item = pairs_item
        self.iw = item_weights
        n_items = item_weights.size
        self.A = sp.csr_matrix((np.ones(self.elem.size), (self.elem, self.item)), shape=(n, n_items))
        # pairs sorted by item for the first-cover search
        o = np.lexsort((self.elem, self.item))
        self.se, self.si = self.elem[o], self.item[o]
        self.starts = np.flatnonzero(np.r_[True, self.si[1:] != self.si[:-1]]) if self.si.size else np.zeros(0, int)
        # element -> items (CSR) for the compiled greedy
        oe = np.lexsort((self.item, self.elem))
        self.items_by_elem = np.ascontiguousarray(self.item[oe], dtype=np.int64)
        self.indptr = np.zeros(n + 1, np.int64)
        np.cumsum(np.bincount(self.elem, minlength=n), out=self.indptr[1:])
        self.iw_c = np.ascontiguousarray(item_weights, dtype=float)

    def greedy(self, C):
        """Compiled greedy (:func:`coverage_greedy_rows`), O(n log n + nnz) per row."""
        C = np.ascontiguousarray(C, dtype=float)
        X = np.zeros_like(C)
        if self.se.size:
            coverage_greedy_rows(C, self.indptr, self.items_by_elem, self.iw_c, X)
        return X

    def greedy_vectorized(self, C):
        """The same greedy in array operations (first covering element per item by rank; the
        comparison for :meth:`greedy` in tests)."""
        b = C.shape[0]
        X = np.zeros_like(C)
        if self.se.size == 0:
            return X
        pos = np.argsort(np.argsort(C, axis=1, kind="stable"), axis=1)
        pp = pos[:, self.se]                                   # (b, pairs)
        first = np.minimum.reduceat(pp, self.starts, axis=1)   # earliest covering element per item
        items = self.si[self.starts]
        order = np.argsort(C, axis=1, kind="stable")
        owner = np.take_along_axis(order, first, axis=1)       # that element's index
        rows = np.repeat(np.arange(b), items.size)
        np.add.at(X, (rows, owner.reshape(-1)), np.tile(self.iw[items], b))
        return X

    def values(self, M):
        covered = (M.astype(float) @ self.A.toarray()) > 0
        return covered.astype(float) @ self.iw


class PythonFunction:
    """F given as a Python callable on frozensets of element indices."""

    def __init__(self, n, fn, label="function"):
        self.n, self.fn, self.label = n, fn, label

    def value(self, S):
        v = self.fn(frozenset(int(i) for i in S))
        try:
            v = float(v)
        except (TypeError, ValueError):
            raise DescriptionError(f"{self.label}: the function must return a number; got {v!r} for "
                                   f"the set {sorted(S)}.") from None
        if not math.isfinite(v):
            raise DescriptionError(f"{self.label}: the function must return finite numbers; got {v} for "
                                   f"the set {sorted(S)}.")
        return v

    def greedy(self, C):
        order = np.argsort(C, axis=1, kind="stable")
        X = np.empty_like(C)
        for r, o in enumerate(order):
            prev, S = self.value(()), []
            for i in o:
                S.append(int(i))
                cur = self.value(S)
                X[r, i] = cur - prev
                prev = cur
        return X

    def values(self, M):
        return np.array([self.value(np.flatnonzero(row)) for row in M])


def vertex_bound(fn) -> float:
    """max_i max(|F({i})|, |F(V) - F(V - i)|): by submodularity every greedy coordinate lies between."""
    n = fn.n
    M = np.zeros((2 * n + 1, n), bool)
    M[np.arange(n), np.arange(n)] = True
    M[n:2 * n] = True
    M[n + np.arange(n), np.arange(n)] = False
    M[2 * n] = True
    v = fn.values(M)
    top = np.abs(v[:n]).max(initial=0.0)
    bot = np.abs(v[2 * n] - v[n:2 * n]).max(initial=0.0)
    return float(max(top, bot))


def check_submodular(fn, rng=None):
    """A violating (S, i, j) of F(S+i) + F(S+j) >= F(S+i+j) + F(S), or None.

    Every pair for n <= CHECK_EXHAUSTIVE_MAX, else CHECK_RANDOM random triples (a spot check).
    """
    n = fn.n
    if n <= CHECK_EXHAUSTIVE_MAX:
        M = subset_masks(n)
        vals = fn.values(M)
        idx = np.arange(1 << n)
        scale = max(1.0, np.abs(vals).max())
        for i, j in itertools.combinations(range(n), 2):
            free = idx[(((idx >> i) & 1) == 0) & (((idx >> j) & 1) == 0)]
            lhs = vals[free | (1 << i)] + vals[free | (1 << j)]
            rhs = vals[free | (1 << i) | (1 << j)] + vals[free]
            bad = np.flatnonzero(lhs < rhs - 1e-9 * scale)
            if bad.size:
                s = int(free[bad[0]])
                return [k for k in range(n) if (s >> k) & 1], i, j, float(rhs[bad[0]] - lhs[bad[0]])
        return None
    rng = np.random.default_rng(0) if rng is None else rng
    for _ in range(CHECK_RANDOM):
        i, j = (int(v) for v in rng.choice(n, 2, replace=False))
        S = [k for k in np.flatnonzero(rng.random(n) < 0.5) if k not in (i, j)]
        M = np.zeros((4, n), bool)
        M[:, S] = True
        M[1, i] = M[2, j] = M[3, i] = M[3, j] = True
        v = fn.values(M)
        if v[1] + v[2] < v[3] + v[0] - 1e-9 * max(1.0, np.abs(v).max()):
            return S, i, j, float(v[3] + v[0] - v[1] - v[2])
    return None


class BasePolytopeMixin:
    """Kernels shared by base polytopes of set functions (``self.fn``, ``self.dim``)."""

    def _table(self):
        def build():
            M = subset_masks(self.dim)
            return (M.astype(float), self.fn.values(M))
        return memo(self, "subset_table", build)

    def _total(self):
        return memo(self, "total", lambda: float(self.fn.values(np.ones((1, self.dim), bool))[0]))

    def _greedy_one(self, c):
        return self.fn.greedy(c[None, :])[0]

    def _mnp_project(self, Y):
        fn = self.fn
        cov = (fn.indptr, fn.items_by_elem, fn.iw_c) if isinstance(fn, CoverageFunction) and fn.se.size else None
        return project_rows(Y, self._greedy_one, scale=self.scale(), label=self.label, coverage=cov)

    def _base_violation(self, X):
        eq = np.abs(X.sum(axis=1) - self._total())
        if self.dim <= EXHAUSTIVE_MAX:
            M, vals = self._table()
            over = (X @ M.T - vals).max(axis=1)
        else:
            P = self.project(X)
            P = P[0] if isinstance(P, tuple) else P
            over = np.maximum(X - P, 0.0).sum(axis=1)
        return np.maximum(eq, np.maximum(over, 0.0))

    def _base_contains(self, X, tol):
        def dist(Z):
            P = self.project(Z)
            P = P[0] if isinstance(P, tuple) else P
            return np.linalg.norm(Z - P, axis=1)
        def screen(X, tol, lip):
            # |x(V) - F(V)| first: rows it rejects skip the subset inequalities (and a projection)
            v = np.abs(X.sum(axis=1) - self._total())
            near = v <= tol * lip
            if near.any():
                v[near] = np.maximum(v[near], self.violation(X[near]))
            return v
        # every constraint row is a 0/1 vector: its norm is at most sqrt(n)
        return screened_contains(X, tol, self.violation, dist, math.sqrt(self.dim), screen)

    def _all_subsets_constraints(self, x, what):
        import cvxpy as cp
        n = self.dim
        if n > EXHAUSTIVE_MAX:
            raise UnsupportedOperationError(
                f"{self.label}: no cvxpy formulation for {what} on {n} > {EXHAUSTIVE_MAX} elements (the "
                f"reference lists the 2^n subset inequalities); use a smaller ground set to compare.")
        M, vals = self._table()
        return [M[1:] @ x <= vals[1:], cp.sum(x) == vals[-1]]


def read_function(r, n_key="dim"):
    """Read ``function`` and its data through the Reader; returns (name, set function)."""
    raw = r.raw("function")
    if callable(raw):
        n = r.integer(n_key, min=1)
        fn = PythonFunction(n, raw, f"{r.kind}" + (f" '{r.name}'" if r.name else ""))
        try:
            f0 = fn.value(())
        except DescriptionError as exc:
            r.fail("function", str(exc).split(": ", 1)[-1])
        except Exception as exc:
            r.fail("function", f"calling the function on the empty set raised {type(exc).__name__}: {exc}.")
        if abs(f0) > 1e-12:
            r.fail("function", f"the function must be 0 on the empty set (F(empty) = 0); got {f0}. Subtract "
                               f"F(empty) from every value (the base polytope is then the same up to that shift).")
        return "callable", fn
    name = r.choice("function", ("concave_cardinality", "cut", "coverage"))
    if name == "concave_cardinality":
        g = r.array("values", ndim=1)
        if g.size < 2:
            r.fail("values", f"values must list g(0), ..., g(n) for n >= 1; got {g.size} number(s).")
        if r.has(n_key):
            n = r.integer(n_key, min=1)
            if n != g.size - 1:
                r.fail(n_key, f"{n_key} must be len(values) - 1 = {g.size - 1}; got {n}.")
        if g[0] != 0:
            r.fail("values", f"values[0] = g(0) must be 0 (F(empty) = 0); got {g[0]}. Subtract it from every "
                             f"value.")
        d = np.diff(g)
        tol = 1e-12 * max(1.0, np.abs(g).max())
        bad = np.flatnonzero(d[1:] > d[:-1] + tol)
        if bad.size:
            k = int(bad[0]) + 1
            r.fail("values", f"g must be concave: g(k+1) - g(k) must not exceed g(k) - g(k-1); at k = {k} the "
                             f"increments are {d[k - 1]:g} then {d[k]:g}. (A concave g makes F(S) = g(|S|) "
                             f"submodular.)")
        return name, ConcaveCardinality(g)
    if name == "cut":
        g = read_edges(r, directed=False, extra_keys=("weight",))
        w = g.extra["weight"]
        w = np.where(np.isnan(w), 1.0, w)
        neg = np.flatnonzero(w < 0)
        if neg.size:
            e = int(neg[0])
            path = ("edges", e) if isinstance(r.raw("edges"), (list, tuple)) else ("edges",)
            fail_at(r, path, f"edge {e} has the weight {w[e]:g}; cut weights must be >= 0 (a negative weight "
                             f"makes the cut function not submodular).")
        loops = np.flatnonzero(g.tail == g.head)
        if loops.size:
            e = int(loops[0])
            path = ("edges", e) if isinstance(r.raw("edges"), (list, tuple)) else ("edges",)
            fail_at(r, path, f"edge {e} is a self-loop; it is cut by no set, so drop it.")
        if r.has(n_key):
            n = r.integer(n_key, min=1)
            if n != g.n_nodes:
                r.fail(n_key, f"{n_key} must equal the number of nodes, {g.n_nodes}; got {n}.")
        fn = CutFunction(g.n_nodes, g.tail, g.head, w)
        fn.node_names = g.names
        return name, fn
    # coverage
    sets = r.raw("sets")
    if not isinstance(sets, (list, tuple)) or not sets:
        r.fail("sets", f"sets must list, for each element, the items it covers (lists of item indices); got {sets!r}.")
    elem, item = [], []
    for j, s in enumerate(sets):
        if not isinstance(s, (list, tuple)):
            fail_at(r, ("sets", j), f"sets[{j}] must be a list of item indices; got {s!r}.")
        for u in s:
            if isinstance(u, bool) or not isinstance(u, Integral) or u < 0:
                fail_at(r, ("sets", j), f"sets[{j}] must hold item indices (whole numbers >= 0); got {u!r}.")
            elem.append(j)
            item.append(int(u))
    n_items = max(item, default=-1) + 1
    if r.has("item_weights"):
        iw = r.array("item_weights", ndim=1)
        if iw.size < n_items:
            r.fail("item_weights", f"item_weights must have one weight per item, at least {n_items} (the "
                                   f"largest item index in sets is {n_items - 1}); got {iw.size}.")
        if np.any(iw < 0):
            i = int(np.flatnonzero(iw < 0)[0])
            r.fail("item_weights", f"item weights must be >= 0 (coverage is then submodular); got {iw[i]:g} "
                                   f"for item {i}.")
    else:
        iw = np.ones(n_items)
    if r.has(n_key):
        n = r.integer(n_key, min=1)
        if n != len(sets):
            r.fail(n_key, f"{n_key} must equal the number of sets, {len(sets)}; got {n}.")
    pairs = np.unique(np.column_stack([np.array(elem, np.int64), np.array(item, np.int64)]).reshape(-1, 2), axis=0)
    return name, CoverageFunction(len(sets), pairs[:, 0].copy(), pairs[:, 1].copy(), iw)


@register("submodular_base")
@dataclass(frozen=True, eq=False, kw_only=True)
class SubmodularBase(BasePolytopeMixin, Family):
    """K = B(F) = {x : x(S) <= F(S) for all S, x(V) = F(V)} for a submodular F with F(empty) = 0.

    LMO: Edmonds' greedy (sort c, marginal gains), O(n log n) plus n evaluations of F (vectorized
    for the closed forms). Projection: concave of cardinality by sort and pool-adjacent-violators
    (exact); otherwise Wolfe's minimum-norm point on the greedy LMO with a gap certificate.
    Membership: exact by subset enumeration for n <= 16, else through the projection.

    Derivatives: native (concave of cardinality: isotonic blocks, exact; otherwise the level sets of
    y - p). KL geometry: native when B(F) lies in x >= 0 (else refused, e.g. a cut function): the
    permutahedron's pooling for concave of cardinality, otherwise weighted minimum-norm point or the
    decomposition algorithm, KL-certified; native KL Jacobians.

    >>> import setkit
    >>> K = setkit.compile({"kind": "submodular_base", "function": "concave_cardinality",
    ...                     "values": [0, 3, 5, 6]})
    >>> K.lmo([0.5, -1.0, 2.0]).tolist()
    [2.0, 3.0, 1.0]
    >>> K2 = setkit.compile({"kind": "submodular_base", "function": "cut", "edges": [[0, 1, 2.0], [1, 2, 1.0]]})
    >>> K2.lmo([0.0, 1.0, 2.0]).tolist()
    [2.0, -1.0, -1.0]
    """

    function: str
    fn: object
    traits = frozenset({"polyhedral", "bounded"})

    @classmethod
    def from_spec(cls, r):
        name, fn = read_function(r)
        if name == "callable":
            bad = check_submodular(fn)
            if bad is not None:
                S, i, j, by = bad
                r.fail("function", f"the function is not submodular: F(S+i) + F(S+j) < F(S+i+j) + F(S) by {by:.3g} "
                                   f"for S = {S}, i = {i}, j = {j}.")
        return cls(function=name, fn=fn, name=r.name)

    @classmethod
    def benchmark_example(cls, n, rng):
        """A coverage function: n sets of 3 items among n weighted items (minimum-norm point: n <= 100)."""
        if n > 100:
            return None
        sets = [sorted(set(int(u) for u in rng.integers(0, n, 3))) for _ in range(n)]
        return {"kind": "submodular_base", "about": "coverage function, n sets of 3 items", "function": "coverage",
                "sets": sets, "item_weights": np.round(rng.uniform(0.5, 2.0, n), 3).tolist()}

    @classmethod
    def examples(cls):
        """Small instances for the conformance checks (tests/test_conformance.py)."""
        return [{"kind": "submodular_base", "function": "concave_cardinality", "values": [0, 4, 7, 9, 10, 10]},
                {"kind": "submodular_base", "function": "cut", "nodes": ["loft", "cellar", "porch", "attic"],
                 "edges": [["loft", "cellar", 2.0], ["cellar", "porch", 1.0], ["porch", "loft", 0.5],
                           ["attic", "loft", 1.5]]},
                {"kind": "submodular_base", "function": "coverage", "sets": [[0, 1], [1, 2, 3], [3], [0, 4]],
                 "item_weights": [1.0, 2.0, 0.5, 1.5, 1.0]}]

    @classmethod
    def random_example(cls, rng):
        """A random coverage function: 4..6 sets over 6 weighted items."""
        n = int(rng.integers(4, 7))
        sets = [sorted(set(int(u) for u in rng.integers(0, 6, int(rng.integers(1, 4))))) for _ in range(n)]
        return {"kind": "submodular_base", "function": "coverage", "sets": sets,
                "item_weights": rng.uniform(0.5, 2.0, 6).round(3).tolist()}

    @property
    def shape(self):
        return (int(self.fn.n),)

    def scale(self):
        return memo(self, "scale", lambda: max(1.0, vertex_bound(self.fn)))

    def __post_init__(self):
        if isinstance(self.fn, ConcaveCardinality):
            m = self.fn.marginals
            object.__setattr__(self, "_wd", np.ascontiguousarray(np.sort(m)[::-1]))
            object.__setattr__(self, "_ps", np.cumsum(self._wd))

    # -- formulations ---------------------------------------------------------------------
    def cvxpy_constraints(self, x):
        """concave_cardinality: sum_largest(x, k) <= g(k) (the permutahedron's inequalities); cut: x = B t,
        |t| <= w; coverage: x = sum_u y_u, y_u >= 0 on N_u summing to w_u; a Python function: all 2^n
        subset inequalities (n <= 16)."""
        import cvxpy as cp
        fn = self.fn
        if isinstance(fn, ConcaveCardinality):
            ps = self._ps
            return [cp.sum(x) == ps[-1]] + [cp.sum_largest(x, k) <= ps[k - 1] for k in range(1, fn.n)]
        if isinstance(fn, CutFunction):
            B = (fn.Et - fn.Eh).T.tocsr()
            t = cp.Variable(fn.tail.size)
            return [x == B @ t, t <= fn.w, t >= -fn.w]
        if isinstance(fn, CoverageFunction):
            y = cp.Variable(fn.elem.size, nonneg=True)
            n_items = fn.iw.size
            S_x = sp.csr_matrix((np.ones(fn.elem.size), (fn.elem, np.arange(fn.elem.size))), shape=(fn.n, fn.elem.size))
            S_u = sp.csr_matrix((np.ones(fn.elem.size), (fn.item, np.arange(fn.elem.size))), shape=(n_items, fn.elem.size))
            touched = np.flatnonzero(np.bincount(fn.item, minlength=n_items) > 0)
            cons = [x == S_x @ y]
            if touched.size:
                cons.append((S_u @ y)[touched] == fn.iw[touched])
            return cons
        return self._all_subsets_constraints(x, "a Python function")

    def linear_form(self):
        """cut and coverage: their compact extended formulations (m or nnz auxiliaries); else None."""
        fn = self.fn
        n = self.dim
        if isinstance(fn, CutFunction):
            m = fn.tail.size
            B = (fn.Et - fn.Eh).T.tocsr()
            A = sp.hstack([sp.eye(n), -B], format="csr")
            return LinearForm.build(n, m, A_eq=A, b_eq=np.zeros(n), lo=np.r_[np.full(n, -np.inf), -fn.w],
                                    hi=np.r_[np.full(n, np.inf), fn.w])
        if isinstance(fn, CoverageFunction):
            p = fn.elem.size
            n_items = fn.iw.size
            S_x = sp.csr_matrix((np.ones(p), (fn.elem, np.arange(p))), shape=(n, p))
            S_u = sp.csr_matrix((np.ones(p), (fn.item, np.arange(p))), shape=(n_items, p))
            touched = np.flatnonzero(np.bincount(fn.item, minlength=n_items) > 0)
            A = sp.vstack([sp.hstack([sp.eye(n), -S_x]), sp.hstack([sp.csr_matrix((touched.size, n)), S_u[touched]])],
                          format="csr")
            return LinearForm.build(n, p, A_eq=A, b_eq=np.r_[np.zeros(n), fn.iw[touched]],
                                    lo=np.r_[np.full(n, -np.inf), np.zeros(p)], hi=np.full(n + p, np.inf))
        return None

    def extended_form(self):
        """concave_cardinality: the Birkhoff extended formulation of its permutahedron (n^2 auxiliaries)."""
        if isinstance(self.fn, ConcaveCardinality):
            from ..combinators.extended import permutahedron_form
            return permutahedron_form(self.fn.marginals)
        return self.linear_form()

    # -- native kernels ----------------------------------------------------------------------
    @kernel("lmo")
    def lmo(self, C):
        """Edmonds' greedy: sort c increasing, give each element its marginal gain along the chain, O(n log n) + n evaluations of F."""
        return self.fn.greedy(C)

    @kernel("project")
    def project(self, Y):
        """Concave of cardinality: sort and pool-adjacent-violators (exact); else Wolfe's minimum-norm point on the greedy LMO."""
        if isinstance(self.fn, ConcaveCardinality):
            P = project_permutahedron(Y, self._wd)
            # certified (finite, in K, Frank-Wolfe gap); rows that fail (seen for |y| near 1e150) are
            # solved by the minimum-norm-point method instead
            bad = uncertified_rows(Y, P, self.fn.greedy, self.violation, scale=self.scale())
            if bad.any():
                P[bad] = self._mnp_project(Y[bad])[0]
            return P
        return self._mnp_project(Y)

    @kernel("project_jvp")
    def project_jvp(self, Y, V):
        """Ordered-partition face: v minus its mean on each level set of y - p (concave: isotonic blocks), O(n log n) after the projection.

        The face of B(F) exposed by u = y - p is {x : x(S) = F(S) for S = {u >= c}}; where p is in
        its relative interior (almost every y) the projection is locally the projection onto its
        affine hull, with tangent space {d : d(A) = 0 on each level set A of u}. Concave of
        cardinality: the blocks of pool-adjacent-violators (exact; at a tie of adjacent blocks the
        finer partition: the smallest face). Otherwise the minimum-norm-point answer's level sets,
        values within 1e-7 relative counting as equal (a near tie is treated as a tie).
        """
        V = np.ascontiguousarray(V, dtype=float)
        if isinstance(self.fn, ConcaveCardinality):
            return permutahedron_face(Y, self._wd, V, mode=0)
        P = self._mnp_project(Y)[0]
        return ordered_partition_jvp(Y, P, V, MNP_FACE_RTOL)

    def orthant_violation(self):
        """None when B(F) lies in x >= 0, else why not: min of x_i over B(F) is F(V) - F(V - i) (greedy with i last)."""
        def build():
            n = self.dim
            M = np.ones((n + 1, n), bool)
            M[np.arange(n), np.arange(n)] = False
            v = self.fn.values(M)
            low = v[n] - v[:n]
            i = int(np.argmin(low))
            if low[i] < -1e-12 * max(1.0, float(np.abs(v).max())):
                return (f"x[{i}] can be F(V) - F(V - {{{i}}}) = {low[i]:.6g} < 0 (the base polytope has points with "
                        f"negative coordinates)")
            return None
        return memo(self, "orthant", build)

    @kernel("project_kl")
    def project_kl(self, T):
        """Concave of cardinality: the permutahedron's KL pooling (exact); else weighted min-norm point on the greedy LMO, polished, KL-certified.

        Raises the orthant error when B(F) has points with negative coordinates (e.g. a cut
        function, whose base polytope is symmetric about 0). Otherwise the KL projection equals
        the minimizer of sum x_i^2 / y_i over B(F) (Fujishige's lexicographically optimal base;
        setkit.kernels.base_kl), found by Wolfe's method and polished on its ordered partition.
        """
        why = self.orthant_violation()
        if why:
            raise outside_orthant_error(self.label, why)
        if T.shape[0] == 0:
            return T.copy()
        if isinstance(self.fn, ConcaveCardinality):
            return permutahedron_kl(T, self._wd)
        return base_polytope_kl(T, self.fn.greedy, total=self._total(), bound=self.scale(), label=self.label)

    @kernel("project_kl_jvp")
    def project_kl_jvp(self, T, V):
        """Softmax Jacobian on each block of the KL answer's ordered partition (log coordinates), O(n log n) after the projection."""
        X = self.project_kl(T)
        X = X[0] if isinstance(X, tuple) else X
        return partition_kl_jvp(T, X, V)

    def project_min_norm_point(self, Y):
        """Wolfe's minimum-norm point on the greedy LMO for every form (an independent route for tests)."""
        return self._mnp_project(Y)[0]

    @kernel("violation")
    def violation(self, X):
        """Largest violated x(S) <= F(S) or |x(V) - F(V)|: sorted partial sums (concave), 2^n subsets (n <= 16), else by the projection.

        Above 16 elements: max_S x(S) - F(S) = sum_i (x_i - p_i)^+ with p the projection of x
        (Fujishige 1980), as accurate as the projection's certificate.
        """
        if isinstance(self.fn, ConcaveCardinality):
            ps_x = np.cumsum(-np.sort(-X, axis=1), axis=1)
            over = (ps_x[:, :-1] - self._ps[:-1]).max(axis=1, initial=0.0)
            return np.maximum(over.clip(min=0.0), np.abs(ps_x[:, -1] - self._ps[-1]))
        return self._base_violation(X)

    @kernel("contains")
    def contains(self, X, tol):
        """Violation screen (0/1 constraint rows, norm <= sqrt(n)), the projection only for borderline points."""
        return self._base_contains(X, tol)

    # -- exact knowledge for setkit.measures ------------------------------------------------------
    def exact_centroid(self, measure):
        """Concave of cardinality: g(n)/n per coordinate for every measure (the set is invariant under
        permuting coordinates). Other functions: None."""
        if isinstance(self.fn, ConcaveCardinality):
            return np.full(self.dim, self.fn.g[-1] / self.dim)
        return None
