"""Shared machinery of the network families (flow, transport, birkhoff).

A network family is {x : B x = s, lo <= x <= hi} with B the node-arc incidence
matrix of a directed graph ((B x)_v = flow out of v - flow into v) and s the
net supplies. This module holds what the three families share: the projection
workspace (dual Newton kernel with warm-started potentials; one per thread, owned
by the DecisionSet), the hooks the generic LP backend uses for the LMO (integral
vertices for integral data; the unbounded direction as a negative-cost cycle of
uncapacitated edges), and the compile-time feasibility check that names the node
set whose supply cannot be shipped (Hoffman's circulation condition). The LMO
itself is served by the ``highs`` backend on the incidence-matrix linear form, so
``explain()`` names that solver and ``with_backends(lmo=...)`` can swap it.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

from ..errors import EmptySetError, SolveError
from ..forms import LinearForm
from . import Family, kernel, memo


@dataclass(frozen=True, eq=False)
class Network:
    """The arrays of a network family (edges in point order)."""

    tail: np.ndarray
    head: np.ndarray
    lo: np.ndarray
    hi: np.ndarray
    supply: np.ndarray

    @property
    def n_nodes(self) -> int:
        return int(self.supply.size)

    @property
    def n_edges(self) -> int:
        return int(self.tail.size)

    def incidence(self) -> sp.csr_matrix:
        m = self.n_edges
        cols = np.arange(m)
        return sp.csr_matrix((np.concatenate([np.ones(m), -np.ones(m)]),
                              (np.concatenate([self.tail, self.head]), np.concatenate([cols, cols]))),
                             shape=(self.n_nodes, m))

    def _finite_data(self):
        return np.concatenate([self.lo[np.isfinite(self.lo)], self.hi[np.isfinite(self.hi)], self.supply])

    def is_integral(self) -> bool:
        """Whether every bound and supply is an integer (then LP vertices are integral)."""
        return memo(self, "is_integral", lambda: bool(np.all(self._finite_data() == np.round(self._finite_data()))))

    def scale(self) -> float:
        return memo(self, "scale", lambda: float(max(1.0, np.abs(self._finite_data()).max(initial=0.0))))

    def incidence_matrix(self) -> sp.csr_matrix:
        """The incidence matrix, built once."""
        return memo(self, "incidence", self.incidence)


def negative_cycle(g: Network, c: np.ndarray):
    """A direction d with B d = 0, d feasible for the infinite bounds and <c, d> < 0, or None.

    Arcs of the search graph: tail -> head with weight c_e for every edge without an
    upper bound (its flow may grow without limit), head -> tail with weight -c_e for
    every edge without a lower bound. A negative cycle there is an unbounded direction.
    """
    import networkx as nx
    G = nx.DiGraph()
    for e in range(g.n_edges):
        u, v = int(g.tail[e]), int(g.head[e])
        for (a, b, w, sgn, ok) in ((u, v, c[e], 1.0, g.hi[e] == np.inf), (v, u, -c[e], -1.0, g.lo[e] == -np.inf)):
            if not ok:
                continue
            if a == b:
                if w < 0:
                    d = np.zeros(g.n_edges)
                    d[e] = sgn
                    return d
                continue
            if not G.has_edge(a, b) or G[a][b]["weight"] > w:
                G.add_edge(a, b, weight=float(w), edge=e, sign=sgn)
    if G.number_of_edges() == 0:
        return None
    src = "__origin__"
    for v in list(G.nodes):
        G.add_edge(src, v, weight=0.0, edge=-1, sign=0.0)
    try:
        cyc = nx.find_negative_cycle(G, src)
    except nx.NetworkXError:
        return None
    d = np.zeros(g.n_edges)
    for a, b in zip(cyc[:-1], cyc[1:]):
        dat = G[a][b]
        if dat["edge"] >= 0:
            d[dat["edge"]] += dat["sign"]
    return d if float(c @ d) < 0 else None


def check_feasible(label: str, g: Network, names, where_fail):
    """Raise EmptySetError naming the conflict if {B x = s, lo <= x <= hi} is empty."""
    tot = float(g.supply.sum())
    if abs(tot) > 1e-9 * max(1.0, float(np.abs(g.supply).sum())):
        where_fail("supply", f"the net supplies must sum to zero (what leaves the sources must reach the "
                             f"sinks); they sum to {tot:.6g}.", EmptySetError)
    from scipy.optimize import linprog
    res = linprog(np.zeros(g.n_edges), A_eq=g.incidence(), b_eq=g.supply, bounds=np.column_stack([g.lo, g.hi]),
                  method="highs")
    if res.status == 0:
        return
    if res.status != 2:
        raise SolveError(f"{label}: the feasibility check did not finish (status {res.status}: {res.message}).")
    S, need, can = _blocking_cut(g)
    if S is not None:
        shown = ", ".join(str(names[v]) for v in S[:8]) + (" ..." if len(S) > 8 else "")
        where_fail("supply", f"no flow meets the supplies and bounds: the nodes {{{shown}}} must send out a net "
                             f"{need:.6g}, but their outgoing capacities minus the lower bounds of their incoming "
                             f"edges allow at most {can:.6g}.", EmptySetError)
    where_fail("supply", "no flow meets the supplies and the edge bounds (the LP feasibility check failed).",
               EmptySetError)


def _blocking_cut(g: Network):
    """A node set S with supply(S) > cap(out of S) - lower(into S), by a max-flow min-cut (float data)."""
    import networkx as nx
    lo = np.where(np.isfinite(g.lo), g.lo, 0.0)
    if not np.all(np.isfinite(g.lo)):
        return None, 0.0, 0.0   # edges without lower bounds: the reduction below does not apply
    s2 = g.supply - np.bincount(g.tail, lo, g.n_nodes) + np.bincount(g.head, lo, g.n_nodes)
    G = nx.DiGraph()
    G.add_nodes_from(range(g.n_nodes))
    for e in range(g.n_edges):
        u, v = int(g.tail[e]), int(g.head[e])
        if u == v:
            continue
        cap = g.hi[e] - lo[e]
        if G.has_edge(u, v):
            G[u][v]["capacity"] = G[u][v]["capacity"] + cap
        elif np.isfinite(cap):
            G.add_edge(u, v, capacity=float(cap))
        else:
            G.add_edge(u, v)     # no capacity attribute: infinite
    for v in range(g.n_nodes):
        if s2[v] > 0:
            G.add_edge("__src__", v, capacity=float(s2[v]))
        elif s2[v] < 0:
            G.add_edge(v, "__dst__", capacity=float(-s2[v]))
    if "__src__" not in G or "__dst__" not in G:
        return None, 0.0, 0.0
    try:
        _, (side, _) = nx.minimum_cut(G, "__src__", "__dst__")
    except nx.NetworkXUnbounded:
        return None, 0.0, 0.0
    S = sorted(v for v in side if v != "__src__")
    if not S:
        return None, 0.0, 0.0
    inS = np.zeros(g.n_nodes, bool)
    inS[S] = True
    out_e = inS[g.tail] & ~inS[g.head]
    in_e = ~inS[g.tail] & inS[g.head]
    need = float(g.supply[inS].sum())
    can = float(g.hi[out_e].sum() - g.lo[in_e].sum())
    if not need > can:
        return None, 0.0, 0.0
    return S, need, can


class NetworkFamily(Family):
    """Base of flow, transport and birkhoff: subclasses define ``network()`` (cached arrays)."""

    def network(self) -> Network:  # pragma: no cover - abstract
        raise NotImplementedError

    def scale(self):
        return self.network().scale()

    def linear_form(self):
        g = self.network()
        return LinearForm.build(g.n_edges, A_eq=g.incidence(), b_eq=g.supply, lo=g.lo, hi=g.hi)

    def new_workspace(self):
        """This thread's projection workspace: the dual Newton state with warm-started potentials."""
        from ..kernels.network import NetworkProjector
        g = self.network()
        return NetworkProjector(g.tail, g.head, g.lo, g.hi, g.supply)

    @kernel("project", workspace=True)
    def project(self, Y, pj):
        """Dual Newton on node potentials with exact component shifts (numba, matrix-free CG); O(E) per CG step."""
        X, info = pj.project(Y)
        bad = np.flatnonzero(info["status"] != 0)
        if bad.size:
            from ..kernels.network import STATUS_TEXT
            i = int(bad[0])
            raise SolveError(
                f"{self.label}: projection did not converge for batch row {i}: "
                f"{STATUS_TEXT.get(int(info['status'][i]), 'unknown')} (after {int(info['iterations'][i])} "
                f"Newton steps: balance residual {info['residual'][i]:.3g}, allowed {info['tol_r']:.3g}; "
                f"duality gap {info['gap'][i]:.3g}, allowed {info['tol_gap']:.3g}).",
                status="not_converged")
        return X

    def vertex_cleanup(self, x):
        """A vertex of a network polytope with integral data is integral (total unimodularity): round it."""
        g = self.network()
        x = np.clip(x, g.lo, g.hi)
        if g.is_integral():
            xr = np.round(x)
            if (np.abs(xr - x).max(initial=0.0) <= 1e-6
                    and np.abs(g.incidence_matrix() @ xr - g.supply).max(initial=0.0) == 0.0):
                return xr
        return x

    def unbounded_ray(self, c):
        """A cycle of uncapacitated edges along which <c, x> decreases without bound, or None."""
        return negative_cycle(self.network(), np.asarray(c, dtype=float))
