"""The spanning-tree polytope of a connected undirected graph: one coordinate per edge.

K = conv{1_T : T a spanning tree} = {x >= 0 : x(E) = n - 1, x(E(S)) <= |S| - 1 for every
nonempty node set S} (Edmonds 1971), the base polytope of the graphic matroid, whose rank
function is r(A) = n - (number of connected components of (V, A)).

Graphs are given as an inline edge list ``[from, to]``, a CSV edge list or a networkx Graph
(parallel edges are distinct coordinates; self-loops are rejected: no spanning tree uses them).
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp
from numba import njit

from ..errors import EmptySetError
from ..forms import LinearForm
from ..kernels.base_kl import base_polytope_kl, partition_kl_jvp
from ..kernels.minnorm import project_rows
from ..kernels.structured_faces import ordered_partition_jvp
from . import Family, kernel, register
from ._graph import components, fail_at, read_edges
from ._screen import screened_contains
from .submodular_base import MNP_FACE_RTOL

EXHAUSTIVE_MAX_NODES = 12      # membership by enumerating node subsets up to this many nodes


@njit(cache=True)
def _find(parent, a):
    while parent[a] != a:
        parent[a] = parent[parent[a]]
        a = parent[a]
    return a


@njit(cache=True)
def kruskal_rows(order, tail, head, n, out):
    """Kruskal on each row of ``order`` (edges by increasing cost): out[r, e] = 1 for tree edges.

    Union by rank with path halving: O(m alpha(n)) per row after the sort.
    """
    b, m = order.shape
    parent = np.empty(n, np.int64)
    rank = np.empty(n, np.int64)
    for r in range(b):
        for v in range(n):
            parent[v] = v
            rank[v] = 0
        used = 0
        for j in range(m):
            e = order[r, j]
            ra = _find(parent, tail[e])
            rb = _find(parent, head[e])
            if ra == rb:
                continue
            if rank[ra] < rank[rb]:
                parent[ra] = rb
            elif rank[ra] > rank[rb]:
                parent[rb] = ra
            else:
                parent[rb] = ra
                rank[ra] += 1
            out[r, e] = 1.0
            used += 1
            if used == n - 1:
                break


def subset_excess_exhaustive(X, tail, head, n):
    """max over nonempty node sets S of x(E(S)) - |S| + 1 for each row of X, by enumeration (2^n sets)."""
    masks = np.arange(1, 1 << n, dtype=np.int64)
    bits = ((masks[:, None] >> np.arange(n)) & 1).astype(bool)          # (2^n - 1, n)
    inside = bits[:, tail] & bits[:, head]                              # edge e within S
    size = bits.sum(axis=1)
    vals = X @ inside.T.astype(float) - (size - 1)
    return vals.max(axis=1)


def subset_excess_maxflow(x, tail, head, n):
    """max over nonempty S of x(E(S)) - |S| + 1 by n minimum cuts (Padberg-Wolsey node forcing).

    x(E(S)) - |S| + 1 = 1 - [x(delta(S))/2 + sum_{v in S} (1 - d_v/2)] with d_v the x-degree of v,
    so the maximum over sets containing node k and none of 0..k-1 is one s-t minimum cut.
    The cuts are computed by scipy.sparse.csgraph.maximum_flow on capacities scaled to integers
    (scipy's max-flow is exact on int32 data: total capacity 2^29, so each capacity is rounded by at
    most 2^-30 of the total); the set found is then scored exactly with x itself. The answer is
    therefore always the excess of a real constraint, at most (m + n) * total / 2^29 below the
    largest one. Negative entries of x are clipped to 0 for the cuts (capacities must be >= 0).
    """
    from scipy.sparse.csgraph import breadth_first_order, maximum_flow
    xp = np.maximum(np.asarray(x, dtype=float), 0.0)
    deg = np.bincount(tail, xp, n) + np.bincount(head, xp, n)
    a = 1.0 - deg / 2.0
    src, snk = n, n + 1
    # finite arcs: both directions of every edge (x_e / 2), s -> v (-a_v) and v -> t (a_v)
    pos, neg = np.flatnonzero(a > 0), np.flatnonzero(a < 0)
    rows = np.concatenate([tail, head, np.full(neg.size, src), pos])
    cols = np.concatenate([head, tail, neg, np.full(pos.size, snk)])
    caps = np.concatenate([xp / 2.0, xp / 2.0, -a[neg], a[pos]])
    total = float(caps.sum())         # >= n > 0: a node of x-degree < 2 has a_v > 0
    q = (1 << 29) / total
    icaps = np.round(caps * q).astype(np.int64)
    big = int(icaps.sum()) + 1        # "infinite": more than every finite cut
    best = -np.inf
    N = n + 2
    for k in range(n):
        r = np.concatenate([rows, np.arange(k), [src]])
        c = np.concatenate([cols, np.full(k, snk), [k]])
        w = np.concatenate([icaps, np.full(k + 1, big)])
        C = sp.csr_matrix((w.astype(np.int32), (r, c)), shape=(N, N))
        C.sum_duplicates()
        res = maximum_flow(C, src, snk)
        # residual arcs: capacity minus flow (the flow matrix is antisymmetric), both directions
        R = (sp.csr_matrix(C, dtype=np.int64) - sp.csr_matrix(res.flow, dtype=np.int64)).tocsr()
        R.data[R.data < 0] = 0
        R.eliminate_zeros()
        reach = breadth_first_order(R, src, directed=True, return_predecessors=False)
        inS = np.zeros(N, bool)
        inS[reach] = True
        inS = inS[:n]
        val = float(x[inS[tail] & inS[head]].sum()) - int(inS.sum()) + 1
        best = max(best, val)
    return best


@register("spanning_trees")
@dataclass(frozen=True, eq=False, kw_only=True)
class SpanningTrees(Family):
    """K = conv{indicator vectors of the spanning trees of a connected graph} (one coordinate per edge).

    Facets: x >= 0, x(E) = n - 1, x(E(S)) <= |S| - 1 for nonempty node sets S (Edmonds 1971).
    LMO: Kruskal's minimum spanning tree (one sort plus union-find, O(m log m)); vertex answers.
    Projection: Wolfe's minimum-norm-point algorithm on the Kruskal LMO (the Fujishige-Wolfe
    method on the graphic matroid's base polytope), stopped on the Frank-Wolfe gap; SolveError
    when it does not reach it. Membership and violation: the subset constraints are checked by
    enumerating node subsets for graphs of at most 12 nodes, by n minimum cuts otherwise.

    Derivatives: native (the ordered-partition face: level sets of y - p). KL geometry: native
    (weighted minimum-norm point on Kruskal or the decomposition algorithm, KL-certified), with
    native KL Jacobians.

    >>> import setkit
    >>> K = setkit.compile({"kind": "spanning_trees", "nodes": 3, "edges": [[0, 1], [1, 2], [0, 2]]})
    >>> K.lmo([1.0, 3.0, 2.0]).tolist()
    [1.0, 0.0, 1.0]
    >>> K.project([1.0, 1.0, 1.0]).round(6).tolist()
    [0.666667, 0.666667, 0.666667]
    """

    node_names: tuple
    tail: np.ndarray
    head: np.ndarray
    traits = frozenset({"polyhedral", "bounded"})

    @classmethod
    def from_spec(cls, r):
        g = read_edges(r, directed=False)
        loops = np.flatnonzero(g.tail == g.head)
        if loops.size:
            e = int(loops[0])
            path = ("edges", e) if isinstance(r.raw("edges"), (list, tuple)) else ("edges",)
            fail_at(r, path, f"edge {e} is a self-loop at node {g.names[g.tail[e]]!r}; no spanning tree uses "
                             f"a self-loop, so drop it.")
        n = g.n_nodes
        if n < 2:
            r.fail("nodes", f"a spanning tree needs at least 2 nodes; got {n}.")
        comp = components(n, g.tail, g.head)
        labels = np.unique(comp)
        if labels.size > 1:
            first = [g.names[v] for v in np.flatnonzero(comp == comp[0])][:6]
            other = [g.names[v] for v in np.flatnonzero(comp != comp[0])][:6]
            r.fail("edges", f"the graph must be connected to have spanning trees; it has {labels.size} components "
                            f"(e.g. {{{', '.join(map(str, first))}}} and {{{', '.join(map(str, other))}}} are not "
                            f"joined by any edge). Add an edge between them.", EmptySetError)
        return cls(node_names=g.names, tail=g.tail, head=g.head, name=r.name)

    @classmethod
    def benchmark_example(cls, n, rng):
        """Spanning trees of a random connected graph with n edges on n/4 nodes (projection by the minimum-norm
        point costs O(n k^2) per cycle, so only up to n = 300; the LMO at 1e5 edges is benchmarks/bench_graphs.py)."""
        if n > 300:
            return None
        nodes = max(3, n // 4)
        order = rng.permutation(nodes)
        edges = [[int(order[k]), int(order[int(rng.integers(0, k))])] for k in range(1, nodes)]
        while len(edges) < n:
            a, b = (int(v) for v in rng.integers(0, nodes, 2))
            if a != b:
                edges.append([a, b])
        return {"kind": "spanning_trees", "about": "spanning trees, n edges on n/4 nodes", "nodes": nodes,
                "edges": edges}

    @classmethod
    def examples(cls):
        """Small instances for the conformance checks (tests/test_conformance.py)."""
        return [{"kind": "spanning_trees", "nodes": ["well", "barn", "mill", "gate"],
                 "edges": [["well", "barn"], ["barn", "mill"], ["mill", "gate"], ["gate", "well"], ["well", "mill"]]},
                {"kind": "spanning_trees", "nodes": 4,
                 "edges": [[0, 1], [0, 1], [1, 2], [2, 3], [3, 0], [1, 3]]}]

    @classmethod
    def random_example(cls, rng):
        """A random connected graph on 4..6 nodes (a random tree plus a few extra edges)."""
        n = int(rng.integers(4, 7))
        edges = [[k, int(rng.integers(0, k))] for k in range(1, n)]
        for _ in range(int(rng.integers(1, n))):
            a, b = (int(v) for v in rng.integers(0, n, 2))
            if a != b:
                edges.append([a, b])
        return {"kind": "spanning_trees", "nodes": n, "edges": edges}

    # -- description -----------------------------------------------------------------------
    @property
    def shape(self):
        return (int(self.tail.size),)

    @property
    def n_nodes(self) -> int:
        return len(self.node_names)

    def scale(self):
        return 1.0

    def cvxpy_constraints(self, x):
        """Directed multicommodity-flow extended formulation (tight: Magnanti and Wolsey 1995).

        Each edge becomes two arcs with capacities y; from root node 0 one unit of commodity k
        reaches every other node k within the capacities; sum y = n - 1 and x_e = y_uv + y_vu.
        The projection onto x is the spanning-tree polytope. O(n m) auxiliary variables.
        """
        import cvxpy as cp
        n, m = self.n_nodes, self.dim
        Bd, D = self._arc_data()
        y = cp.Variable(2 * m, nonneg=True)
        F = cp.Variable((2 * m, n - 1), nonneg=True)
        return [x == y[:m] + y[m:], cp.sum(x) == n - 1, Bd @ F == D,
                F <= cp.reshape(y, (2 * m, 1), order="C") @ np.ones((1, n - 1))]

    def _arc_data(self):
        n, m = self.n_nodes, self.dim
        tails = np.concatenate([self.tail, self.head])
        heads = np.concatenate([self.head, self.tail])
        cols = np.arange(2 * m)
        Bd = sp.csr_matrix((np.r_[np.ones(2 * m), -np.ones(2 * m)], (np.r_[tails, heads], np.r_[cols, cols])),
                           shape=(n, 2 * m))
        D = np.zeros((n, n - 1))
        D[0, :] = 1.0
        D[np.arange(1, n), np.arange(n - 1)] = -1.0
        return Bd, D

    def extended_form(self):
        """The multicommodity-flow formulation as a linear form: z = (x, y, F by commodity), O(n m) auxiliaries."""
        n, m = self.n_nodes, self.dim
        Bd, D = self._arc_data()
        k = n - 1
        nF = 2 * m * k
        I_m = sp.eye(m, format="csr")
        # x - y_fwd - y_back = 0
        link = sp.hstack([I_m, -I_m, -I_m, sp.csr_matrix((m, nF))])
        total = sp.hstack([sp.csr_matrix(np.ones((1, m))), sp.csr_matrix((1, 2 * m + nF))])
        # commodity j occupies F[:, j] stored as the block j (C order of (k, 2m))
        flow = sp.hstack([sp.csr_matrix((n * k, 3 * m)), sp.kron(sp.eye(k), Bd)])
        A_eq = sp.vstack([link, total, flow], format="csr")
        b_eq = np.concatenate([np.zeros(m), [n - 1.0], D.T.reshape(-1)])
        # F_j <= y for every commodity j
        A_ub = sp.hstack([sp.csr_matrix((nF, m)), -sp.kron(np.ones((k, 1)), sp.eye(2 * m)), sp.eye(nF)], format="csr")
        lo = np.zeros(3 * m + nF)
        hi = np.ones(3 * m + nF)
        return LinearForm(m, 2 * m + nF, A_eq, b_eq, A_ub, np.zeros(nF), lo, hi)

    # -- native kernels ----------------------------------------------------------------------
    @kernel("lmo")
    def lmo(self, C):
        """Kruskal's minimum spanning tree (stable sort of the costs, union-find; numba), O(m log m)."""
        order = np.argsort(C, axis=1, kind="stable")
        X = np.zeros(C.shape)
        kruskal_rows(order, self.tail, self.head, self.n_nodes, X)
        return X

    def _lmo_one(self, c):
        return self.lmo(c[None, :])[0]

    @kernel("project")
    def project(self, Y):
        """Wolfe's minimum-norm point on the Kruskal LMO, stopped on the Frank-Wolfe gap; O(m k^2 + m log m) per cycle."""
        return project_rows(Y, self._lmo_one, scale=1.0, label=self.label)

    @kernel("project_jvp")
    def project_jvp(self, Y, V):
        """The ordered-partition face of the answer: v minus its mean on each level set of y - p, O(m log m) after the projection.

        The spanning-tree polytope is the base polytope of the graphic matroid; the face exposed
        by u = y - p is {x : x(S) = r(S) for S = {u >= c}}, and where p is in its relative interior
        (almost every y) J is the projector onto {d : d(A) = 0 on each level set A of u}. Values
        of u within 1e-7 relative count as equal (the minimum-norm-point answer's accuracy; a near
        tie is treated as a tie: the smaller face).
        """
        P = self.project(Y)[0]
        return ordered_partition_jvp(Y, P, np.ascontiguousarray(V, dtype=float), MNP_FACE_RTOL)

    def orthant_violation(self):
        """None: every point of the spanning-tree polytope is >= 0."""
        return None

    @kernel("project_kl")
    def project_kl(self, T):
        """Weighted minimum-norm point on the Kruskal LMO (lexicographically optimal base), polished on its ordered partition; KL-certified.

        The KL projection onto a base polytope equals the minimizer of sum x_e^2 / y_e over it
        (see setkit.kernels.base_kl), found by Wolfe's method on Kruskal with costs c / sqrt(y);
        then x = (n - 1 split by the tight blocks) * softmax(t) per block. SolveError when the
        KL certificate is above 1e-9 (n - 1).
        """
        if T.shape[0] == 0:
            return T.copy()
        return base_polytope_kl(T, self.lmo, total=float(self.n_nodes - 1), bound=1.0, label=self.label)

    @kernel("project_kl_jvp")
    def project_kl_jvp(self, T, V):
        """Softmax Jacobian on each block of the KL answer's ordered partition (log coordinates), O(m log m) after the projection."""
        X = self.project_kl(T)
        X = X[0] if isinstance(X, tuple) else X
        return partition_kl_jvp(T, X, V)

    def _excess(self, X):
        n = self.n_nodes
        if n <= EXHAUSTIVE_MAX_NODES:
            return subset_excess_exhaustive(X, self.tail, self.head, n)
        return np.array([subset_excess_maxflow(x, self.tail, self.head, n) for x in X])

    def _cheap_violation(self, X):
        return np.maximum((-X).max(axis=1, initial=0.0), np.abs(X.sum(axis=1) - (self.n_nodes - 1)))

    @kernel("violation")
    def violation(self, X):
        """Largest violated facet: x >= 0, x(E) = n - 1 and the subset inequalities (enumerated up to 12 nodes, else n minimum cuts)."""
        if X.shape[0] == 0:
            return np.zeros(0)
        return np.maximum(self._cheap_violation(X), np.maximum(self._excess(X), 0.0))

    def _screen(self, X, tol, lip):
        """The violation where it is at most tol * lip; elsewhere a value above that (the subset
        inequalities are skipped for rows that the sum or the signs already put outside)."""
        v = self._cheap_violation(X)
        near = v <= tol * lip
        if near.any():
            v[near] = np.maximum(v[near], np.maximum(self._excess(X[near]), 0.0))
        return v

    @kernel("contains")
    def contains(self, X, tol):
        """Violation screen (every facet normal has norm <= sqrt(m)), the projection only for borderline points."""
        return screened_contains(X, tol, self.violation,
                                 lambda Z: np.linalg.norm(Z - self.project(Z)[0], axis=1), math.sqrt(self.dim),
                                 self._screen)

    # -- exact knowledge for setkit.measures ------------------------------------------------------
    def _is_complete_simple(self):
        n, m = self.n_nodes, self.dim
        if m != n * (n - 1) // 2:
            return False
        a, b = np.minimum(self.tail, self.head), np.maximum(self.tail, self.head)
        return np.unique(a * n + b).size == m

    def exact_centroid(self, measure):
        """vertices: P(e in T) for a uniform spanning tree T, the effective resistance of e with unit
        conductances (Kirchhoff 1847), from the pseudo-inverse of the Laplacian (graphs up to 2000 nodes).
        Every measure on a simple complete graph: 2/n per edge (all edges are alike). Else None."""
        n = self.n_nodes
        if self._is_complete_simple():
            return np.full(self.dim, 2.0 / n)
        if measure != "vertices" or n > 2000:
            return None
        L = np.zeros((n, n))
        np.add.at(L, (self.tail, self.tail), 1.0)
        np.add.at(L, (self.head, self.head), 1.0)
        np.add.at(L, (self.tail, self.head), -1.0)
        np.add.at(L, (self.head, self.tail), -1.0)
        Lp = np.linalg.pinv(L, hermitian=True)
        r = Lp[self.tail, self.tail] + Lp[self.head, self.head] - 2 * Lp[self.tail, self.head]
        return r * ((n - 1) / r.sum())     # exact up to rounding: the resistances sum to n - 1 (Foster 1949)

    def exact_sample(self, k, measure, rng):
        """vertices: uniform spanning trees by Wilson's loop-erased random walks (Wilson 1996);
        directions: lmo(g) for Gaussian g (the law itself). volume: None (hit-and-run)."""
        if measure == "directions":
            return self.lmo(rng.standard_normal((k, self.dim)))
        if measure != "vertices":
            return None
        n, m = self.n_nodes, self.dim
        inc = [[] for _ in range(n)]
        for e in range(m):
            inc[int(self.tail[e])].append((e, int(self.head[e])))
            inc[int(self.head[e])].append((e, int(self.tail[e])))
        out = np.zeros((k, m))
        for s in range(k):
            in_tree = np.zeros(n, bool)
            in_tree[int(rng.integers(n))] = True
            nxt_edge = np.full(n, -1)
            nxt = np.full(n, -1)
            for start in range(n):
                u = start
                while not in_tree[u]:           # random walk, remembering the last exit (loop erasure)
                    e, w = inc[u][int(rng.integers(len(inc[u])))]
                    nxt_edge[u], nxt[u] = e, w
                    u = w
                u = start
                while not in_tree[u]:
                    in_tree[u] = True
                    out[s, nxt_edge[u]] = 1.0
                    u = nxt[u]
        return out
