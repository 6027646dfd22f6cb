"""Shared machinery of the network families (flow, transport, birkhoff).

A network family is {x : B x = s, lo <= x <= hi} with B the node-arc incidence
matrix of a directed graph ((B x)_v = flow out of v - flow into v) and s the
net supplies. This module holds what the three families share: the per-thread
projection workspace (dual Newton kernel with warm-started potentials), the LMO
by HiGHS simplex on a persistent per-thread model of the incidence-matrix LP
(vertex answers, integral for integral data), the unbounded-direction search
(a negative-cost cycle of uncapacitated edges), and the compile-time feasibility check that names the
node set whose supply cannot be shipped (Hoffman's circulation condition).
"""
from __future__ import annotations

import threading
import weakref
from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

from ..errors import EmptySetError, SolveError, UnboundedDirectionError
from ..forms import LinearForm
from . import Family, kernel

_WORKSPACES: "weakref.WeakKeyDictionary" = weakref.WeakKeyDictionary()
_WS_LOCK = threading.Lock()


@dataclass(frozen=True)
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

    def is_integral(self) -> bool:
        got = self.__dict__.get("_is_integral")      # memoized: the arrays never change
        if got is None:
            vals = np.concatenate([self.lo[np.isfinite(self.lo)], self.hi[np.isfinite(self.hi)], self.supply])
            got = bool(np.all(vals == np.round(vals)))
            object.__setattr__(self, "_is_integral", got)
        return got

    def scale(self) -> float:
        got = self.__dict__.get("_scale")
        if got is None:
            vals = np.concatenate([self.lo[np.isfinite(self.lo)], self.hi[np.isfinite(self.hi)], self.supply])
            got = float(max(1.0, np.abs(vals).max(initial=0.0)))
            object.__setattr__(self, "_scale", got)
        return got


def _thread_state(node):
    with _WS_LOCK:
        st = _WORKSPACES.get(node)
        if st is None:
            st = _WORKSPACES[node] = threading.local()
    return st


def projector(node):
    """This thread's projection workspace of ``node`` (built on first use)."""
    st = _thread_state(node)
    pj = getattr(st, "projector", None)
    if pj is None:
        from ..kernels.network import NetworkProjector
        g = node.network()
        pj = st.projector = NetworkProjector(g.tail, g.head, g.lo, g.hi, g.supply)
    return pj


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


def lmo_workspace(label: str, g: Network, B=None):
    """A persistent LP workspace for min <c, x> over {B x = s, lo <= x <= hi} (one per thread)."""
    from ..backends._lp import lp_workspace
    B = g.incidence() if B is None else B
    return lp_workspace(B, g.supply, sp.csr_matrix((0, g.n_edges)), np.zeros(0), g.lo, g.hi, label)


def lmo_network(label: str, g: Network, C: np.ndarray, B=None, ws=None):
    """Rows of C -> vertex minimizers of <c, x> by HiGHS simplex on the incidence matrix.

    ``ws`` is this thread's :func:`lmo_workspace` (built here when not given): the
    model is kept and only the costs change, re-solved warm or cold.
    Returns ``(points, info)``.
    """
    B = g.incidence() if B is None else B
    ws = lmo_workspace(label, g, B) if ws is None else ws
    integral = g.is_integral()
    out = np.empty_like(C)
    iters, texts = [], []
    for i, c in enumerate(C):
        ans = ws.minimize(c)
        if ans.status == "unbounded":
            d = negative_cycle(g, c)
            if d is not None:
                used = np.flatnonzero(d)
                raise UnboundedDirectionError(
                    f"{label}: lmo(c) has no minimizer: the set is unbounded along the cycle of "
                    f"uncapacitated edges {used.tolist()} (direction d with <c, d> = {float(c @ d):.6g} < 0); "
                    f"give those edges a capacity (or a lower bound).", ray=d)
            raise SolveError(f"{label}: the LP of lmo reported an unbounded direction ({ans.text}) but no "
                             f"unbounded cycle exists.", status="unbounded")
        if ans.status == "infeasible":
            raise EmptySetError(f"{label}: no flow meets the supplies and the edge bounds ({ans.text}).")
        x = np.clip(ans.z, g.lo, g.hi)
        if integral:
            # a vertex of a network polytope with integral data is integral (total unimodularity)
            xr = np.round(x)
            if np.abs(xr - x).max(initial=0.0) <= 1e-6 and np.abs(B @ xr - g.supply).max(initial=0.0) == 0.0:
                x = xr
        resid = float(np.abs(B @ x - g.supply).max(initial=0.0))
        if resid > 1e-7 * g.scale():
            raise SolveError(f"{label}: the LP answer of lmo misses the node balances by {resid:.3g}.",
                             status="infeasible_answer")
        out[i] = x
        iters.append(ans.iterations)
        texts.append(ans.text)
    return out, {"status": ["solved"] * len(texts), "iterations": iters, "backend_status": texts}


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

    def _project_flat(self, Y):
        pj = projector(self)
        X, info = pj.project(Y)
        bad = np.flatnonzero(info["status"] != 0)
        if bad.size:
            from ..kernels.network import STATUS_TEXT
            i = int(bad[0])
            raise SolveError(
                f"{self.label}: projection did not converge for batch row {i}: "
                f"{STATUS_TEXT.get(int(info['status'][i]), 'unknown')} (after {int(info['iterations'][i])} "
                f"Newton steps: balance residual {info['residual'][i]:.3g}, allowed {info['tol_r'][i]:.3g}; "
                f"duality gap {info['gap'][i]:.3g}, allowed {info['tol_gap'][i]:.3g}).",
                status="not_converged")
        return X

    @kernel("project")
    def project(self, Y):
        """Dual Newton on node potentials with exact component shifts (numba, matrix-free CG); O(E) per CG step."""
        return self._project_flat(Y)

    @kernel("lmo")
    def lmo(self, C):
        """HiGHS simplex on a persistent incidence-matrix LP (costs changed per call, warm or cold); vertex answers."""
        return lmo_network(self.label, self.network(), C, self._incidence(), self._lmo_workspace())

    def _lmo_workspace(self):
        """This thread's LP workspace (thread-local state outside the node, so the node pickles)."""
        st = _thread_state(self)
        ws = getattr(st, "lp", None)
        if ws is None:
            ws = st.lp = lmo_workspace(self.label, self.network(), self._incidence())
        return ws

    def _incidence(self):
        st = _thread_state(self)
        B = getattr(st, "incidence", None)
        if B is None:
            B = st.incidence = self.network().incidence()
        return B
