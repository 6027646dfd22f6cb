"""The s-t path polytope of a directed graph: one coordinate per edge.

K = {x : (flow out of v) - (flow into v) = [v = source] - [v = target], 0 <= x <= 1}, the flow
polytope with one unit sent from the source to the target. Its constraint matrix is totally
unimodular, so its vertices are 0/1 flows: an s-t path plus edge-disjoint directed cycles. On a
directed acyclic graph there are no cycles and K is exactly the convex hull of the s-t path
indicators. A graph with a directed cycle is therefore rejected unless ``cycles: allow`` says that
the unit-flow polytope (paths plus circulations) is what is wanted.

Projection by the flow family's dual Newton kernel; LMO on acyclic graphs by the shortest-path
recursion in topological order (any signs of costs), otherwise by the flow LMO (HiGHS simplex).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numba import njit

from ..errors import EmptySetError, SolveError, TimeLimitError
from ..kernels.minnorm import project_rows, uncertified_rows
from . import kernel, memo, register
from ._graph import read_edges, resolve_node
from ._network import Network, NetworkFamily


# graphs with at most this many nodes solve the face system densely (least squares on the Laplacian)
DENSE_LAPLACIAN_NODES = 64


@njit(cache=True)
def dag_shortest_path_rows(C, order, tail, head, n, s, t, out):
    """Shortest s-t path per row of C on a DAG: relax edges by topological order of their tail.

    ``order`` lists the edges sorted by the topological position of their tail. O(n + m) per row.
    out[r] receives the 0/1 indicator of the path. Returns False if t is unreachable.
    """
    b = C.shape[0]
    dist = np.empty(n)
    pred = np.empty(n, np.int64)
    for r in range(b):
        for v in range(n):
            dist[v] = np.inf
            pred[v] = -1
        dist[s] = 0.0
        for j in range(order.size):
            e = order[j]
            u = tail[e]
            if dist[u] == np.inf:
                continue
            d = dist[u] + C[r, e]
            if d < dist[head[e]]:
                dist[head[e]] = d
                pred[head[e]] = e
        if dist[t] == np.inf:
            return False
        v = t
        while v != s:
            e = pred[v]
            out[r, e] = 1.0
            v = tail[e]
    return True


def topological_order(n, tail, head):
    """Kahn's algorithm: the nodes in a topological order, or None if there is a directed cycle."""
    indeg = np.bincount(head, minlength=n)
    outs = [[] for _ in range(n)]
    for e in range(tail.size):
        outs[int(tail[e])].append(int(head[e]))
    ready = [v for v in range(n) if indeg[v] == 0]
    order = []
    indeg = indeg.copy()
    while ready:
        u = ready.pop()
        order.append(u)
        for w in outs[u]:
            indeg[w] -= 1
            if indeg[w] == 0:
                ready.append(w)
    return np.array(order, np.int64) if len(order) == n else None


def _reachable(n, tail, head, s):
    seen = np.zeros(n, bool)
    seen[s] = True
    outs = [[] for _ in range(n)]
    for e in range(tail.size):
        outs[int(tail[e])].append(int(head[e]))
    stack = [s]
    while stack:
        u = stack.pop()
        for w in outs[u]:
            if not seen[w]:
                seen[w] = True
                stack.append(w)
    return seen


@register("paths")
@dataclass(frozen=True, eq=False, kw_only=True)
class Paths(NetworkFamily):
    """K = conv{indicators of the directed source-target paths} on a DAG (the unit-flow polytope
    {B x = e_s - e_t, 0 <= x <= 1}; with ``cycles: allow`` on graphs with directed cycles, whose
    vertices are then a path plus edge-disjoint cycles).

    Projection: dual Newton on node potentials (the flow kernel). LMO: shortest path by the
    recursion over a topological order, O(n + m) per direction (numba); with cycles, HiGHS simplex.

    Derivatives: native and exact (the flow face: free edges, grounded Laplacian). KL geometry:
    native, the flow family's dual Newton on node potentials (no KL Jacobian yet).

    >>> import setkit
    >>> K = setkit.compile({"kind": "paths", "edges": [["s", "a"], ["a", "t"], ["s", "t"]],
    ...                     "source": "s", "target": "t"})
    >>> K.lmo([1.0, 1.0, 3.0]).tolist()
    [1.0, 1.0, 0.0]
    >>> K.project([1.0, 1.0, 1.0]).round(6).tolist()
    [0.666667, 0.666667, 0.333333]
    """

    node_names: tuple
    tail: np.ndarray
    head: np.ndarray
    source: int
    target: int
    allow_cycles: bool = False
    topo: np.ndarray | None = None
    traits = frozenset({"polyhedral", "bounded"})

    def __post_init__(self):
        n = len(self.node_names)
        if self.topo is not None:
            pos = np.empty(n, np.int64)
            pos[self.topo] = np.arange(n)
            object.__setattr__(self, "_edge_order", np.argsort(pos[self.tail], kind="stable").astype(np.int64))

    @classmethod
    def from_spec(cls, r):
        g = read_edges(r, directed=True)
        s = resolve_node(r, "source", g.names)
        t = resolve_node(r, "target", g.names)
        if s == t:
            r.fail("target", f"target must differ from source; both are {g.names[s]!r} (a path from a node to "
                             f"itself is empty; for circulations use the flow family with zero supplies).")
        allow = r.choice("cycles", ("forbid", "allow"), "forbid") == "allow"
        n = g.n_nodes
        topo = topological_order(n, g.tail, g.head)
        if topo is None and not allow:
            import networkx as nx
            G = nx.MultiDiGraph()
            G.add_edges_from(zip(g.tail.tolist(), g.head.tolist()))
            cyc = nx.find_cycle(G)
            shown = " -> ".join(str(g.names[u]) for u, *_ in cyc) + f" -> {g.names[cyc[0][0]]}"
            r.fail("edges", f"the graph has the directed cycle {shown}. With cycles the unit-flow polytope also "
                            f"contains circulations, so it is larger than the convex hull of the {g.names[s]!r}-"
                            f"{g.names[t]!r} paths. Remove an edge of every cycle, or set cycles: allow to accept "
                            f"the unit-flow polytope (vertices: a path plus edge-disjoint cycles).")
        if not _reachable(n, g.tail, g.head, s)[t]:
            r.fail("target", f"no directed path leads from the source {g.names[s]!r} to the target {g.names[t]!r}, "
                             f"so the set is empty; check the edge directions.", EmptySetError)
        return cls(node_names=g.names, tail=g.tail, head=g.head, source=int(s), target=int(t),
                   allow_cycles=allow, topo=topo, name=r.name)

    @classmethod
    def benchmark_example(cls, n, rng):
        """s-t paths of a random DAG: a chain plus random forward edges, n edges on n/4 nodes (n <= 1e5)."""
        if n > 100_000:
            return None
        nodes = max(3, n // 4)
        extra = max(0, n - (nodes - 1))
        a = rng.integers(0, nodes, 2 * extra + 10)
        b = rng.integers(0, nodes, 2 * extra + 10)
        keep = a != b
        lo, hi = np.minimum(a, b)[keep][:extra], np.maximum(a, b)[keep][:extra]
        tail = np.r_[np.arange(nodes - 1), lo].astype(int)
        head = np.r_[np.arange(1, nodes), hi].astype(int)
        return {"kind": "paths", "about": "s-t paths of a random DAG, n edges", "nodes": nodes,
                "edges": np.column_stack([tail, head]).tolist(), "source": 0, "target": nodes - 1}

    @classmethod
    def examples(cls):
        """Small instances for the conformance checks (tests/test_conformance.py)."""
        return [{"kind": "paths", "edges": [["dock", "yard"], ["dock", "lane"], ["yard", "lane"], ["yard", "shed"],
                                            ["lane", "shed"]], "source": "dock", "target": "shed"},
                {"kind": "paths", "nodes": 4, "edges": [[0, 1], [1, 2], [2, 0], [1, 3], [2, 3]],
                 "source": 0, "target": 3, "cycles": "allow"}]

    @classmethod
    def random_example(cls, rng):
        """A random DAG on 4..7 nodes (edges from lower to higher index) with a path 0 -> n-1."""
        n = int(rng.integers(4, 8))
        edges = [[k, k + 1] for k in range(n - 1)]
        for _ in range(n + 2):
            a, b = sorted(int(v) for v in rng.integers(0, n, 2))
            if a != b:
                edges.append([a, b])
        return {"kind": "paths", "nodes": n, "edges": edges, "source": 0, "target": n - 1}

    @property
    def shape(self):
        return (int(self.tail.size),)

    def network(self):
        def build():
            n, m = len(self.node_names), self.tail.size
            s = np.zeros(n)
            s[self.source] = 1.0
            s[self.target] = -1.0
            return Network(self.tail, self.head, np.zeros(m), np.ones(m), s)
        return memo(self, "network", build)

    def new_workspace(self):
        """This thread's state: the flow projector, and (graphs with cycles) the highs backend for the LMO."""
        from types import SimpleNamespace

        from ..backends import get_backend
        lp = get_backend("highs")(self) if self.topo is None else None
        return SimpleNamespace(projector=NetworkFamily.new_workspace(self), lp=lp)

    def scale(self):
        return 1.0

    def cvxpy_constraints(self, x):
        g = self.network()
        return [g.incidence() @ x == g.supply, x >= 0, x <= 1]

    @kernel("project", workspace=True)
    def project(self, Y, ws):
        """Dual Newton on node potentials (the flow kernel), certified by the gap; rows it cannot finish by Wolfe's minimum-norm point."""
        flow_kernel = NetworkFamily.project
        try:
            P = flow_kernel(self, Y, ws.projector)
        except TimeLimitError:
            raise
        except SolveError:
            P = np.full_like(Y, np.nan)
            for i, y in enumerate(Y):       # row by row: only the rows the kernel cannot finish go on
                try:
                    P[i] = flow_kernel(self, y[None, :], ws.projector)[0]
                except TimeLimitError:
                    raise
                except SolveError:
                    pass
        # every answer is checked (finite, in K, Frank-Wolfe gap); the dual Newton kernel fails on some
        # inputs (graphs with cycles and tiny points; |y| near 1e150), and those rows are solved by
        # the certified minimum-norm-point method on the shortest-path LMO instead
        def vertices(C):
            out = self.lmo(C, ws)
            return out[0] if isinstance(out, tuple) else out
        bad = uncertified_rows(Y, P, vertices, self._form_violation)
        if bad.any():
            P[bad] = project_rows(Y[bad], lambda c: vertices(c[None, :])[0], scale=1.0, label=self.label)[0]
        return P

    @kernel("project_jvp", workspace=True)
    def project_jvp(self, Y, V, ws):
        """Flow face of the answer: v_F - B_F^T z, z by a sparse solve with the free edges' Laplacian (grounded per component), per point.

        The path polytope is the unit-flow polytope {B x = e_s - e_t, 0 <= x <= 1}, so its Jacobian
        is the flow family's active-constraint rule: the projector onto {d_i = 0 on edges at a
        bound, B_F d_F = 0 on the free edges F}, i.e. v_F - B_F^T z with (B_F B_F^T) z = B_F v_F.
        The Laplacian B_F B_F^T is singular once per connected component of the free edges; one
        node of each is grounded (z = 0 there) and the rest solved by a sparse LU. Edges within
        1e-9 of a bound count as at the bound (the smallest face). Graphs of at most 64 nodes
        use a dense least-squares solve of the same system instead (faster there).
        """
        from scipy.sparse.csgraph import connected_components
        from scipy.sparse.linalg import splu
        P = self.project(Y, ws)
        V = np.asarray(V, dtype=float)
        out = np.zeros_like(V)
        B = self.network().incidence_matrix().tocsc()
        n = B.shape[0]
        dense = B.toarray() if n <= DENSE_LAPLACIAN_NODES else None
        for r in range(Y.shape[0]):
            free = np.flatnonzero((P[r] > 1e-9) & (P[r] < 1.0 - 1e-9))
            if free.size == 0:
                continue
            if dense is not None:          # small graphs: a dense least-squares solve (z up to a constant per component)
                BF = dense[:, free]
                z = np.linalg.lstsq(BF @ BF.T, BF @ V[r, free], rcond=None)[0]
                out[r, free] = V[r, free] - BF.T @ z
                continue
            BF = B[:, free]
            L = (BF @ BF.T).tocsr()
            rhs = BF @ V[r, free]
            ncomp, lab = connected_components(L, directed=False)
            ground = np.zeros(n, bool)
            ground[np.unique(lab, return_index=True)[1]] = True
            keep = np.flatnonzero(~ground)
            z = np.zeros(n)
            if keep.size:
                Lk = L[keep][:, keep].tocsc()
                z[keep] = splu(Lk).solve(rhs[keep])
            out[r, free] = V[r, free] - BF.T @ z
        return out

    def _form_violation(self, X):
        return memo(self, "linear_form", self.linear_form).violation_x(X)

    @kernel("lmo", workspace=True)
    def lmo(self, C, ws):
        """Shortest path by the recursion over a topological order (numba), O(n + m); the highs backend's LP if there are cycles."""
        # each row scaled to max |c| = 1 (same minimizers): path lengths stay finite for costs near
        # 1e308 and the LP sees costs of order 1
        top = np.abs(C).max(axis=1, keepdims=True, initial=0.0)
        Cn = np.ascontiguousarray(C / np.where(top > 0, top, 1.0))
        if self.topo is None:
            return ws.lp.lmo(Cn)
        X = np.zeros(C.shape)
        if not dag_shortest_path_rows(Cn, self._edge_order, self.tail, self.head,
                                      len(self.node_names), self.source, self.target, X):
            raise SolveError(f"{self.label}: the shortest-path recursion did not reach the target.",
                             status="unreachable")
        return X

    # -- exact knowledge for setkit.measures ------------------------------------------------------
    def _path_counts(self):
        """(paths from the source to each node, paths from each node to the target) on a DAG, floats."""
        n = len(self.node_names)
        fwd = np.zeros(n)
        bwd = np.zeros(n)
        fwd[self.source] = 1.0
        bwd[self.target] = 1.0
        order = self._edge_order
        for e in order:
            fwd[self.head[e]] += fwd[self.tail[e]]
        for e in order[::-1]:
            bwd[self.tail[e]] += bwd[self.head[e]]
        return fwd, bwd

    def exact_centroid(self, measure):
        """vertices, on a DAG: the share of source-target paths through each edge, by counting paths
        (forward and backward recursions in topological order); None with cycles or other measures."""
        if self.topo is None or measure != "vertices":
            return None
        fwd, bwd = self._path_counts()
        total = fwd[self.target]
        if not np.isfinite(total) or not np.all(np.isfinite(fwd)) or not np.all(np.isfinite(bwd)):
            return None
        return fwd[self.tail] * bwd[self.head] / total

    def exact_sample(self, k, measure, rng):
        """vertices, on a DAG: uniform paths by walking from the source, choosing each edge with
        probability proportional to the number of paths it leads to; directions: lmo(g) for Gaussian g."""
        if measure == "directions":
            out = self.lmo(rng.standard_normal((k, self.dim)), self.new_workspace())
            return out[0] if isinstance(out, tuple) else out
        if self.topo is None or measure != "vertices":
            return None
        _, bwd = self._path_counts()
        if not np.all(np.isfinite(bwd)):
            return None
        outs = [[] for _ in self.node_names]
        for e in range(self.tail.size):
            outs[int(self.tail[e])].append(e)
        out = np.zeros((k, self.dim))
        for i in range(k):
            u = self.source
            while u != self.target:
                es = outs[u]
                w = bwd[self.head[es]]
                e = es[int(rng.choice(len(es), p=w / w.sum()))]
                out[i, e] = 1.0
                u = int(self.head[e])
        return out
