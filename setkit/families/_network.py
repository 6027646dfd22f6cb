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
    """Raise EmptySetError naming the conflict if {B x = s, lo <= x <= hi} is empty.

    Decided by one maximum flow (Hoffman's circulation theorem: the set is non-empty iff every
    node set S can ship its net supply, i.e. the max flow from the surplus nodes to the deficit
    nodes, after moving the lower bounds into the supplies, saturates them). The max flow runs
    in scipy.sparse.csgraph.maximum_flow (Dinic) on capacities scaled to integers
    (:func:`_scaled_max_flow`); a verdict the integer rounding cannot settle falls back to the
    LP. O(E sqrt(V)) in practice: a 200,000-edge network in about a second.
    """
    tot = float(g.supply.sum())
    if abs(tot) > 1e-9 * max(1.0, float(np.abs(g.supply).sum())):
        where_fail("supply", f"the net supplies must sum to zero (what leaves the sources must reach the "
                             f"sinks); they sum to {tot:.6g}.", EmptySetError)
    verdict, S = feasibility_by_max_flow(g)
    if verdict is None:
        verdict = _feasible_by_lp(label, g)
        S = _blocking_set(g) if not verdict else None
    if verdict:
        return
    if S is not None:
        inS = np.zeros(g.n_nodes, bool)
        inS[S] = True
        need, can = _cut_numbers(g, inS)
        shown = ", ".join(str(names[v]) for v in S[:8]) + (" ..." if len(S) > 8 else "")
        where_fail("supply", f"no flow meets the supplies and bounds: the nodes {{{shown}}} must send out a net "
                             f"{need:.6g}, but their outgoing capacities minus the lower bounds of their incoming "
                             f"edges allow at most {can:.6g}.", EmptySetError)
    where_fail("supply", "no flow meets the supplies and the edge bounds (the LP feasibility check failed).",
               EmptySetError)


def _feasible_by_lp(label, g):
    from scipy.optimize import linprog
    res = linprog(np.zeros(g.n_edges), A_eq=g.incidence(), b_eq=g.supply, bounds=np.column_stack([g.lo, g.hi]),
                  method="highs")
    if res.status == 0:
        return True
    if res.status != 2:
        raise SolveError(f"{label}: the feasibility check did not finish (status {res.status}: {res.message}).")
    return False


def _cut_numbers(g, inS):
    """(net supply of S, what can leave S: capacities out of S minus lower bounds into S)."""
    out_e = inS[g.tail] & ~inS[g.head]
    in_e = ~inS[g.tail] & inS[g.head]
    need = float(g.supply[inS].sum())
    with np.errstate(invalid="ignore"):
        can = float(g.hi[out_e].sum() - g.lo[in_e].sum())
    return need, can


def _arcs(g):
    """Edges as arcs with lower bound 0: (base flow per edge, arc tails, heads, capacities).

    x_e = base_e + (flow on the arc) with base = lo (arc tail -> head, capacity hi - lo) when lo
    is finite; base = hi and an uncapacitated arc head -> tail when only hi is finite; both arcs,
    uncapacitated, for a free edge.
    """
    lo, hi = g.lo, g.hi
    flo, fhi = np.isfinite(lo), np.isfinite(hi)
    base = np.where(flo, lo, np.where(fhi, hi, 0.0))
    fwd = flo | ~fhi                 # an arc tail -> head
    bwd = ~flo                       # an arc head -> tail (unbounded below)
    cap_f = np.where(flo, hi - lo, np.inf)[fwd]
    t = np.concatenate([g.tail[fwd], g.head[bwd]])
    h = np.concatenate([g.head[fwd], g.tail[bwd]])
    c = np.concatenate([cap_f, np.full(int(bwd.sum()), np.inf)])
    return base, t, h, c


def _scaled_max_flow(nn, t, h, cap_units, src_units, dst_units):
    """Max flow of the integer network with a super source (to surplus nodes) and sink; returns
    (flow value, boolean mask of the nodes on the source side of a minimum cut)."""
    import scipy.sparse as sp
    from scipy.sparse.csgraph import maximum_flow
    S, T = nn, nn + 1
    pos = np.flatnonzero(src_units > 0)
    neg = np.flatnonzero(dst_units > 0)
    keep = (cap_units > 0) & (t != h)
    rows = np.concatenate([t[keep], np.full(pos.size, S), neg])
    cols = np.concatenate([h[keep], pos, np.full(neg.size, T)])
    vals = np.concatenate([cap_units[keep], src_units[pos], dst_units[neg]]).astype(np.int64)
    G = sp.coo_matrix((vals, (rows, cols)), shape=(nn + 2, nn + 2)).tocsr()   # parallel arcs add up
    G.sum_duplicates()
    if G.data.size and G.data.max() > 2 ** 31 - 1:
        G.data = np.minimum(G.data, 2 ** 31 - 1)
    G = G.astype(np.int32)
    res = maximum_flow(G, S, T)
    F = res.flow.tocsr() if hasattr(res, "flow") else res.residual.tocsr()
    # residual graph: arcs with capacity left, and reverse arcs of positive flow
    R = (G - F)
    R.data = np.where(R.data > 0, 1, 0)
    Fp = F.copy()
    Fp.data = np.where(Fp.data > 0, 1, 0)
    A = (R + Fp.T).tocsr()
    A.eliminate_zeros()
    from scipy.sparse.csgraph import breadth_first_order
    reach = breadth_first_order(A, S, directed=True, return_predecessors=False)
    side = np.zeros(nn + 2, bool)
    side[reach] = True
    return int(res.flow_value), side[:nn]


def feasibility_by_max_flow(g: Network):
    """(verdict, blocking node list or None); verdict None when integer rounding cannot settle it.

    Capacities are scaled by q = 2^k so that the total surplus D is about 2^30 units (flows
    never exceed D, so larger and infinite capacities are capped at D). Rounding every capacity
    up gives a network at least as feasible as the true one: if even it cannot ship D (beyond
    1e-9 D) the set is empty, and its minimum cut names the blocking node set. Rounding down gives
    one at most as feasible: if it ships D (up to 1e-9 D) the set is feasible. Integral data
    (common) fit exactly and settle it at once.
    """
    nn = g.n_nodes
    base, t, h, cap = _arcs(g)
    with np.errstate(invalid="ignore", over="ignore"):
        s2 = g.supply - np.bincount(g.tail, base, nn) + np.bincount(g.head, base, nn)
    if not np.all(np.isfinite(s2)) or not np.all(np.isfinite(cap[np.isfinite(cap)])):
        return None, None
    if np.any(np.isfinite(cap) & (cap < 0)):
        return False, None
    D = float(s2[s2 > 0].sum())
    Dm = float(-s2[s2 < 0].sum())
    if max(D, Dm) == 0.0:
        return True, None
    top = max(D, Dm)
    q = float(np.ldexp(1.0, 30 - int(np.frexp(top)[1])))      # q * top in [2^29, 2^30)
    capped = np.minimum(cap, top)
    exact = bool(np.all(capped * q == np.round(capped * q)) and np.all(s2 * q == np.round(s2 * q)))
    up = np.ceil(capped * q)
    src_up, dst_up = np.ceil(np.maximum(s2, 0) * q), np.ceil(np.maximum(-s2, 0) * q)
    Dq = float(np.maximum(s2, 0).sum() * q)
    flow_up, side = _scaled_max_flow(nn, t, h, up, src_up, dst_up)
    slack = 0.0 if exact else 1e-9 * Dq + 1.0
    if flow_up < min(src_up.sum(), dst_up.sum()) - slack and flow_up < Dq - slack:
        S = [int(v) for v in np.flatnonzero(side)]
        return False, S or None
    if exact:
        return True, None
    down = np.floor(capped * q)
    src_dn, dst_dn = np.floor(np.maximum(s2, 0) * q), np.floor(np.maximum(-s2, 0) * q)
    flow_dn, _ = _scaled_max_flow(nn, t, h, down, src_dn, dst_dn)
    if flow_dn >= Dq * (1.0 - 1e-9) - 2.0 * nn:
        return True, None
    return None, None


def _blocking_set(g: Network):
    """A node set that cannot ship its supply, from a max flow on rounded-up capacities, or None."""
    verdict, S = feasibility_by_max_flow(g)
    return S


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

    def orthant_violation(self):
        """None when every lower bound is >= 0 (flows are then nonnegative), else the first edge below 0."""
        lo = self.network().lo
        neg = np.flatnonzero(~(lo >= 0.0))
        if neg.size:
            e = int(neg[0])
            return f"edge {e} has lower bound {lo[e]:.6g} < 0 (every lower bound must be >= 0)"
        return None

    @kernel("project_kl")
    def project_kl(self, T):
        """Dual Newton on node potentials (damped, backtracking), to conservation residual 1e-10 x scale; a sparse solve per step."""
        from ..kernels.bregman import flow_kl, outside_orthant_error
        why = self.orthant_violation()
        if why:
            raise outside_orthant_error(self.label, why)
        g = self.network()
        return flow_kl(T, g.tail, g.head, g.lo, g.hi, g.supply, self.label)

    @kernel("project", workspace=True)
    def project(self, Y, pj):
        """Dual Newton on node potentials, exact component shifts (numba, CG); far points: HiGHS LP-dual start, exact re-solves on y - B^T p.

        The LP-dual start applies to networks of 5,000 edges or more (NetworkProjector.lp_edges).
        """
        X, info = pj.project(Y)
        bad = np.flatnonzero(info["status"] != 0)
        if bad.size:
            bad = self._far_rows(Y, X, bad)
        if bad.size:
            from ..kernels.network import STATUS_TEXT
            i = int(bad[0])
            far = ""
            mag = float(np.abs(Y[i]).max(initial=0.0))
            data = max(1.0, float(self.scale()))
            if mag > 1e12 * data:
                # the node potentials of this point are as large as the point; the exact re-solves on
                # y - B^T p that refine them below one ulp did not reach the tolerance
                far = (f" The point has magnitude {mag:.3g}, {mag / data:.3g} times the data's scale {data:.3g}: "
                       f"the method's node potentials are of that size, and its exact re-solves on y - B^T p did "
                       f"not bring the balances from one ulp of them ({float(np.spacing(mag)):.3g}) down to the "
                       f"{info['tol_r'][i]:.3g} the set allows. Measured: points up to about 1e100 times the "
                       f"data's scale are solved; beyond, points whose entries mix many exponents may fail.")
            raise SolveError(
                f"{self.label}: projection did not converge for batch row {i}: "
                f"{STATUS_TEXT.get(int(info['status'][i]), 'unknown')} (after {int(info['iterations'][i])} "
                f"Newton steps: balance residual {info['residual'][i]:.3g}, allowed {info['tol_r'][i]:.3g}; "
                f"duality gap {info['gap'][i]:.3g}, allowed {info['tol_gap'][i]:.3g}).{far}",
                status="not_converged")
        return X

    def _far_rows(self, Y, X, rows):
        """Solve the rows far from a bounded network polytope (|y| > 1e12 times the data) that the dual
        method left unfinished, by the far-point minimum-norm-point method on an LP vertex oracle
        (scipy's HiGHS dual simplex; vertices snapped by ``vertex_cleanup``), writing them into X.
        Returns the rows still unsolved."""
        g = self.network()
        data = max(1.0, float(self.scale()))
        if not (np.all(np.isfinite(g.lo)) and np.all(np.isfinite(g.hi))):
            return rows
        far = [i for i in rows if float(np.abs(Y[i]).max(initial=0.0)) > 1e12 * data]
        if not far:
            return rows
        from scipy.optimize import linprog

        from ..kernels.minnorm import project_far_point
        A, b, bounds = g.incidence(), g.supply, np.column_stack([g.lo, g.hi])

        def vertex(c):
            top = float(np.abs(c).max(initial=0.0))
            res = linprog(c / top if top > 0 else c, A_eq=A, b_eq=b, bounds=bounds, method="highs-ds")
            if res.status != 0:
                raise SolveError(f"{self.label}: the vertex LP of the far-point projection failed "
                                 f"({res.message})", status="failed")
            return self.vertex_cleanup(np.asarray(res.x, float))
        left = []
        for i in rows:
            if i not in far:
                left.append(i)
                continue
            try:
                X[i] = project_far_point(Y[i], vertex, scale=data, label=self.label)[0]
            except SolveError:
                left.append(i)
        return np.asarray(left, dtype=int)

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
