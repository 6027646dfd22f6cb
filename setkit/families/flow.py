"""Network-flow polytopes {x : B x = supply, lower <= x <= capacity}, one coordinate per edge.

The graph is given inline (a list of edges), as a path to an edge-list CSV file
(columns ``from,to`` and optionally ``capacity,lower``; relative to the
description file), or, from Python, as a networkx DiGraph (edge attributes
``capacity`` and ``lower``, node attribute ``supply``).
"""
from __future__ import annotations

import csv
import io
import os
from dataclasses import dataclass
from numbers import Integral, Real
from typing import Mapping

import numpy as np

from ..description import MAX_SIZE, decode_text, show_count
from ..errors import DescriptionError, EmptySetError
from . import memo, register
from ._network import Network, NetworkFamily, check_feasible

EDGE_KEYS = ("from", "to", "capacity", "lower")


def _num(r, path, v, what, allow_inf=True):
    tv = type(v)
    if tv is float or (tv is int and -2 ** 1023 < v < 2 ** 1023):     # the common case, without ABC checks
        v = float(v)
        if v - v == 0.0 or (allow_inf and v == v):
            return v
    if isinstance(v, bool):
        _fail_at(r, path, f"{what} must be a number; got {v!r}.")
    if isinstance(v, str):
        try:
            v = float(v)
        except ValueError:
            _fail_at(r, path, f"{what} must be a number; got {v!r}.")
    if not isinstance(v, Real):
        _fail_at(r, path, f"{what} must be a number; got {v!r}.")
    try:
        v = float(v)
    except OverflowError:
        _fail_at(r, path, f"{what} must be within the float range (|x| < 1.8e308); got an integer with "
                          f"{len(str(abs(int(v))))} digits.")
    if np.isnan(v) or (np.isinf(v) and not allow_inf):
        _fail_at(r, path, f"{what} must be a {'number' if allow_inf else 'finite number'}; got {v}.")
    return v


def _fail_at(r, path, message, cls=DescriptionError):
    """Like Reader.fail, at a nested location such as edges[3].capacity."""
    loc = r.location
    for k in path:
        loc = loc.child(k)
    who = r.kind + (f" '{r.name}'" if r.name else "")
    raise cls(f"{who} ({loc}): {message}", loc)


def _read_csv(r, path):
    base = r.location.base_dir or os.getcwd()
    full = path if os.path.isabs(path) else os.path.join(base, path)
    if not os.path.exists(full):
        r.fail("edges", f"the edge-list file {path!r} does not exist (looked for {full}).")
    try:
        with open(full, "rb") as fh:
            text = decode_text(fh.read(), full)
    except OSError as exc:
        r.fail("edges", f"the edge-list file {path!r} cannot be read: {exc.strerror or exc}.")
    except DescriptionError as exc:
        r.fail("edges", f"the edge-list file {path!r} cannot be read: {str(exc).split('): ', 1)[-1]}")
    rows = [row for row in csv.reader(io.StringIO(text, newline="")) if row and not row[0].lstrip().startswith("#")]
    if not rows:
        r.fail("edges", f"the edge-list file {path!r} is empty; expected a header row from,to[,capacity][,lower].")
    header = [h.strip().lower() for h in rows[0]]
    if "from" not in header or "to" not in header:
        r.fail("edges", f"the edge-list file {path!r} must start with a header naming the columns from and to "
                        f"(and optionally capacity, lower); got {rows[0]}.")
    unknown = [h for h in header if h not in EDGE_KEYS]
    if unknown:
        r.fail("edges", f"the edge-list file {path!r} has an unknown column {unknown[0]!r}; the columns are "
                        f"{', '.join(EDGE_KEYS)}.")
    out = []
    for k, row in enumerate(rows[1:], start=2):
        if len(row) != len(header):
            r.fail("edges", f"line {k} of {path!r} has {len(row)} fields; the header has {len(header)}.")
        e = {}
        for h, val in zip(header, row):
            val = val.strip()
            if val == "":
                continue
            e[h] = val
        out.append((e, f"line {k} of {path}"))
    return out


@register("flow")
@dataclass(frozen=True, eq=False, kw_only=True)
class Flow(NetworkFamily):
    """K = {x in R^E : (flow out of v) - (flow into v) = supply_v for every node v,
    lower_e <= x_e <= capacity_e for every edge e}.

    >>> import setkit
    >>> K = setkit.compile({"kind": "flow", "nodes": ["a", "b", "c"],
    ...                     "edges": [{"from": "a", "to": "b", "capacity": 1}, {"from": "a", "to": "c"},
    ...                               {"from": "b", "to": "c"}], "supply": {"a": 2, "c": -2}})
    >>> K.lmo([1.0, 3.0, 1.0]).tolist()
    [1.0, 1.0, 1.0]
    """

    node_names: tuple
    tail: np.ndarray
    head: np.ndarray
    lower: np.ndarray
    capacity: np.ndarray
    supply: np.ndarray
    traits = frozenset({"polyhedral", "iterative_projection"})


    @classmethod
    def from_spec(cls, r):
        raw_edges = r.raw("edges")
        graph = raw_edges if hasattr(raw_edges, "is_directed") and hasattr(raw_edges, "edges") else None
        # -- nodes ----------------------------------------------------------------------------------
        names = None
        if r.has("nodes"):
            v = r.raw("nodes")
            if isinstance(v, Integral) and not isinstance(v, bool):
                if v < 1:
                    r.fail("nodes", f"nodes must be at least 1 when given as a count; got {v}.")
                if v > MAX_SIZE:
                    r.fail("nodes", f"nodes must be at most {MAX_SIZE:,} (the size limit of setkit); got "
                                    f"{show_count(v)}.")
                names = list(range(int(v)))
            elif isinstance(v, (list, tuple)):
                names = list(v)
                if not names:
                    r.fail("nodes", "nodes must list at least one node; got an empty list.")
            else:
                r.fail("nodes", f"nodes must be a list of node names or a node count; got {v!r}.")
        elif graph is not None:
            names = list(graph.nodes)
        index = {}
        if names is not None:
            for i, nm in enumerate(names):
                if isinstance(nm, (list, dict)):
                    r.fail("nodes", f"node {i} must be a name (text or number); got {nm!r}.")
                key = str(nm)
                if key in index:
                    r.fail("nodes", f"the node name {nm!r} appears twice (positions {index[key]} and {i}).")
                index[key] = i
        infer = names is None
        if infer:
            names = []

        def node_id(path, nm, what):
            k = str(nm)
            if k not in index:
                if not infer:
                    shown = ", ".join(map(str, names[:10])) + (" ..." if len(names) > 10 else "")
                    _fail_at(r, path, f"{what} names the node {nm!r}, which is not among the nodes ({shown}).")
                index[k] = len(names)
                names.append(nm)
            return index[k]

        # -- edges ----------------------------------------------------------------------------------
        items = []   # (mapping, where-text, key for errors)
        if graph is not None:
            if not graph.is_directed():
                r.fail("edges", "edges must be a directed graph (networkx DiGraph); got an undirected graph.")
            it = graph.edges(keys=True, data=True) if graph.is_multigraph() else graph.edges(data=True)
            for k, ed in enumerate(it):
                data = ed[-1]
                e = {"from": ed[0], "to": ed[1]}
                for a in ("capacity", "lower"):
                    if a in data and data[a] is not None:
                        e[a] = data[a]
                items.append((e, f"graph edge {ed[0]!r} -> {ed[1]!r}", ("edges",)))
        elif isinstance(raw_edges, str):
            if not raw_edges.lower().endswith(".csv"):
                r.fail("edges", f"edges must be a list of edges or a path to a .csv edge list; got {raw_edges!r}.")
            items = [(e, w, ("edges",)) for e, w in _read_csv(r, raw_edges)]
        elif isinstance(raw_edges, (list, tuple)):
            for k, e in enumerate(raw_edges):
                if isinstance(e, (list, tuple)):
                    if not 2 <= len(e) <= 4:
                        r.fail("edges", f"edge {k} given as a list must be [from, to], [from, to, capacity] or "
                                        f"[from, to, capacity, lower]; got {len(e)} entries.")
                    e = dict(zip(EDGE_KEYS, e))
                elif type(e) is not dict and not isinstance(e, Mapping):
                    r.fail("edges", f"edge {k} must be a mapping with keys from, to (and optionally capacity, "
                                    f"lower); got {e!r}.")
                bad = [a for a in e if a not in EDGE_KEYS]
                if bad:
                    r.fail("edges", f"edge {k} has the unknown key {bad[0]!r}; an edge has the keys "
                                    f"{', '.join(EDGE_KEYS)}.")
                items.append((dict(e), f"edge {k}", ("edges", k)))
        else:
            r.fail("edges", f"edges must be a list of edges, a path to a .csv edge list or a networkx DiGraph; "
                            f"got {type(raw_edges).__name__}.")
        if not items:
            r.fail("edges", "edges must list at least one edge; got none.")
        m = len(items)
        tail = np.empty(m, np.int64)
        head = np.empty(m, np.int64)
        lo = np.zeros(m)
        hi = np.full(m, np.inf)
        for k, (e, where, path) in enumerate(items):
            for need in ("from", "to"):
                if need not in e or e[need] is None:
                    _fail_at(r, path, f"{where} has no '{need}' node.")
            tail[k] = node_id(path + ("from",), e["from"], f"{where} ('from')")
            head[k] = node_id(path + ("to",), e["to"], f"{where} ('to')")
            if e.get("capacity") is not None:
                hi[k] = _num(r, path + ("capacity",), e["capacity"], f"the capacity of {where}")
            if e.get("lower") is not None:
                lo[k] = _num(r, path + ("lower",), e["lower"], f"the lower bound of {where}")
            if hi[k] == -np.inf or lo[k] == np.inf:
                _fail_at(r, path, f"{where}: the capacity cannot be -inf and the lower bound cannot be +inf.")
            if lo[k] > hi[k]:
                _fail_at(r, path, f"{where}: the lower bound {lo[k]:g} exceeds the capacity {hi[k]:g}, "
                                  f"so the set is empty.", EmptySetError)
        # -- supplies -------------------------------------------------------------------------------
        supply_raw = r.raw("supply", None)
        s_map = {}
        if supply_raw is None:
            if graph is not None:
                for nm, dat in graph.nodes(data=True):
                    if dat.get("supply") is not None:
                        s_map[str(nm)] = (nm, dat["supply"])
        elif isinstance(supply_raw, Mapping):
            for nm, val in supply_raw.items():
                s_map[str(nm)] = (nm, val)
        elif isinstance(supply_raw, (list, tuple)):
            if infer:
                r.fail("supply", "supply given as a list needs the nodes listed (nodes: [...]); use a mapping "
                                 "node -> net supply instead.")
            if len(supply_raw) != len(names):
                r.fail("supply", f"supply given as a list must have one entry per node, {len(names)}; "
                                 f"got {len(supply_raw)}.")
            for nm, val in zip(names, supply_raw):
                s_map[str(nm)] = (nm, val)
        else:
            r.fail("supply", f"supply must be a mapping node -> net supply; got {supply_raw!r}.")
        ids = {}
        for k, (nm, val) in s_map.items():
            if k not in index:
                if infer:
                    r.fail("supply", f"supply names the node {nm!r}, which no edge touches.")
                r.fail("supply", f"supply names the node {nm!r}, which is not among the nodes.")
            ids[index[k]] = _num(r, ("supply", str(nm)), val, f"the supply of node {nm!r}", allow_inf=False)
        s = np.zeros(len(names))
        for i, val in ids.items():
            s[i] = val
        return cls(node_names=tuple(names), tail=tail, head=head, lower=lo, capacity=hi, supply=s, name=r.name)

    def check_nonempty(self, parts, fail):
        """Balanced supplies and a feasible flow (an LP, with the blocking node set named when it fails)."""
        check_feasible(self.label, self.network(), self.node_names, fail)

    @classmethod
    def examples(cls):
        """Small instances for the conformance checks (tests/test_conformance.py)."""
        return [{"kind": "flow", "nodes": ["farm", "hub", "store"],
                 "edges": [{"from": "farm", "to": "hub", "capacity": 3}, {"from": "hub", "to": "store", "capacity": 4},
                           {"from": "farm", "to": "store", "capacity": 1.5, "lower": 0.5}],
                 "supply": {"farm": 3, "store": -3}},
                {"kind": "flow", "nodes": 4, "edges": [[0, 1, 2], [1, 2, 2], [0, 2, 3], [2, 3, 5, 1], [3, 0, 1]],
                 "supply": {0: 2, 3: -2}}]

    @classmethod
    def benchmark_example(cls, n, rng, nodes=None, any_size=False):
        """A random connected network with n edges on n/4 nodes (or ``nodes``), lower bounds, capacities
        and the supplies of a random flow inside them; none above n = 1e5 (benchmarks/run.py) unless
        ``any_size`` (benchmarks/flow_scaling.py)."""
        if n > 100_000 and not any_size:
            return None
        n_nodes = max(3, n // 4) if nodes is None else int(nodes)
        # a random spanning tree keeps the graph connected; the rest are random edges
        order = rng.permutation(n_nodes)
        tails, heads = [], []
        for k in range(1, n_nodes):
            a, b = order[k], order[rng.integers(0, k)]
            if rng.random() < 0.5:
                a, b = b, a
            tails.append(a)
            heads.append(b)
        while len(tails) < n:
            a, b = rng.integers(0, n_nodes, 2)
            if a != b:
                tails.append(a)
                heads.append(b)
        tail, head = np.array(tails), np.array(heads)
        x0 = rng.uniform(0.0, 10.0, n)                    # a feasible flow
        lower = np.maximum(0.0, x0 - rng.uniform(0.0, 10.0, n))
        capacity = x0 + rng.uniform(0.0, 10.0, n)
        supply = np.zeros(n_nodes)
        np.add.at(supply, tail, x0)
        np.add.at(supply, head, -x0)
        return {"kind": "flow", "about": "flow polytope, n edges on n/4 nodes", "nodes": int(n_nodes),
                "edges": [{"from": int(a), "to": int(b), "capacity": float(c), "lower": float(lo)}
                          for a, b, c, lo in zip(tail, head, capacity, lower)],
                "supply": {int(v): float(s) for v, s in enumerate(supply) if s != 0.0}}

    @classmethod
    def random_example(cls, rng):
        """A random connected graph on 4..7 nodes with the supplies of a flow inside its bounds."""
        n = int(rng.integers(4, 8))
        tails = list(range(1, n))
        heads = [int(rng.integers(0, k)) for k in range(1, n)]
        for _ in range(n):
            a, b = (int(v) for v in rng.integers(0, n, 2))
            if a != b:
                tails.append(a)
                heads.append(b)
        x0 = rng.uniform(0, 4, len(tails)).round(3)
        lo = np.maximum(0, x0 - rng.uniform(0, 2, x0.size)).round(3)
        hi = (x0 + rng.uniform(0, 2, x0.size)).round(3)
        s = np.zeros(n)
        np.add.at(s, tails, x0)
        np.add.at(s, heads, -x0)
        return {"kind": "flow", "nodes": n,
                "edges": [{"from": a, "to": b, "capacity": float(c), "lower": float(w)}
                          for a, b, c, w in zip(tails, heads, hi, lo)],
                "supply": {i: float(v) for i, v in enumerate(s.round(9))}}

    @property
    def shape(self):
        return (int(self.tail.size),)

    def network(self):
        return memo(self, "network", lambda: Network(self.tail, self.head, self.lower, self.capacity, self.supply))

    def cvxpy_constraints(self, x):
        g = self.network()
        B = g.incidence()
        cons = [B @ x == g.supply]
        flo, fhi = np.isfinite(g.lo), np.isfinite(g.hi)
        if flo.any():
            cons.append(x[np.flatnonzero(flo)] >= g.lo[flo])
        if fhi.any():
            cons.append(x[np.flatnonzero(fhi)] <= g.hi[fhi])
        return cons
