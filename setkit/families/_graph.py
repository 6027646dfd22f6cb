"""Graph input shared by the combinatorial families (spanning trees, paths, cut functions).

A graph is given as

* an inline list of edges, each ``[from, to]`` (plus optional extra columns such as a weight,
  in the order the family names them) or a mapping ``{from: ..., to: ..., ...}``;
* a path to an edge-list CSV file (header ``from,to[,...]``; relative to the description file);
* from Python, a networkx graph (edge attributes with the same names).

Nodes are optional: a count (names 0..n-1) or a list of names; when omitted they are the
endpoints in order of first appearance (or the networkx graph's nodes).
"""
from __future__ import annotations

import csv
import os
from dataclasses import dataclass
from numbers import Integral, Real
from typing import Mapping

import numpy as np

from ..description import MAX_SIZE, show_count
from ..errors import DescriptionError


@dataclass(frozen=True)
class EdgeList:
    """Nodes (names in index order) and edges (tail, head and extra numeric columns)."""

    names: tuple          # or a range when the nodes were given as a count
    tail: np.ndarray
    head: np.ndarray
    extra: dict          # column name -> float array (NaN where not given)

    @property
    def n_nodes(self) -> int:
        return len(self.names)

    @property
    def n_edges(self) -> int:
        return int(self.tail.size)


def fail_at(r, path, message, cls=DescriptionError):
    """Like Reader.fail, at a nested location such as edges[3].to."""
    loc = r.location
    for k in path:
        loc = loc.child(k)
    who = r.kind + (f" '{r.name}'" if r.name else "")
    raise cls(f"{who} ({loc}): {message}", loc)


def _number(r, path, v, what):
    if isinstance(v, bool) or not isinstance(v, (Real, str)):
        fail_at(r, path, f"{what} must be a number; got {v!r}.")
    try:
        v = float(v)
    except (ValueError, OverflowError):
        fail_at(r, path, f"{what} must be a number within the float range (|v| < 1.8e308); got "
                         f"{show_count(v) if isinstance(v, int) else repr(v)}.")
    if not np.isfinite(v):
        fail_at(r, path, f"{what} must be a finite number; got {v}.")
    return v


def _read_csv(r, key, path, keys):
    base = r.location.base_dir or os.getcwd()
    full = path if os.path.isabs(path) else os.path.join(base, path)
    if not os.path.exists(full):
        r.fail(key, f"the edge-list file {path!r} does not exist (looked for {full}).")
    with open(full, newline="", encoding="utf-8") as fh:
        rows = [row for row in csv.reader(fh) if row and not row[0].lstrip().startswith("#")]
    if not rows:
        r.fail(key, f"the edge-list file {path!r} is empty; expected a header row {','.join(keys)}.")
    header = [h.strip().lower() for h in rows[0]]
    if "from" not in header or "to" not in header:
        r.fail(key, f"the edge-list file {path!r} must start with a header naming the columns from and to; "
                    f"got {rows[0]}.")
    unknown = [h for h in header if h not in keys]
    if unknown:
        r.fail(key, f"the edge-list file {path!r} has an unknown column {unknown[0]!r}; the columns are "
                    f"{', '.join(keys)}.")
    out = []
    for k, row in enumerate(rows[1:], start=2):
        if len(row) != len(header):
            r.fail(key, f"line {k} of {path!r} has {len(row)} fields; the header has {len(header)}.")
        out.append(({h: v.strip() for h, v in zip(header, row) if v.strip() != ""}, f"line {k} of {path}", (key,)))
    return out


def read_edges(r, *, directed: bool, key: str = "edges", extra_keys=(), what="graph") -> EdgeList:
    """Read ``nodes`` and ``edges`` (inline, CSV or networkx) through the Reader ``r``.

    ``directed`` says which kind of networkx graph is accepted; ``extra_keys`` are the optional
    numeric edge columns after from, to (e.g. ``("weight",)``).
    """
    keys = ("from", "to") + tuple(extra_keys)
    raw = r.raw(key)
    graph = raw if hasattr(raw, "is_directed") and hasattr(raw, "edges") else None
    names = None
    if r.has("nodes"):
        v = r.raw("nodes")
        if isinstance(v, Integral) and not isinstance(v, bool):
            if v < 1:
                r.fail("nodes", f"nodes must be at least 1 when given as a count; got {v}.")
            if v > MAX_SIZE:        # found by benchmarks/fuzz_descriptions.py (seed 21): 2^31 nodes ran out of memory
                r.fail("nodes", f"nodes must be at most {MAX_SIZE:,} (the size limit of setkit); got "
                                f"{show_count(v)}.")
            names = range(int(v))   # nodes 0 .. v-1, never listed one by one
        elif isinstance(v, (list, tuple)):
            names = list(v)
            if not names:
                r.fail("nodes", "nodes must list at least one node; got an empty list.")
        else:
            r.fail("nodes", f"nodes must be a list of node names or a node count; got {v!r}.")
    elif graph is not None:
        names = list(graph.nodes)
    else:
        r.raw("nodes", None)
    index = {}
    counted = isinstance(names, range)
    if names is not None and not counted:
        for i, nm in enumerate(names):
            if isinstance(nm, (list, dict)):
                r.fail("nodes", f"node {i} must be a name (text or number); got {nm!r}.")
            k = str(nm)
            if k in index:
                r.fail("nodes", f"the node name {nm!r} appears twice (positions {index[k]} and {i}).")
            index[k] = i
    infer = names is None
    if infer:
        names = []

    def node_id(path, nm, where):
        k = str(nm)
        if counted:
            i = _counted_node(k, len(names))
            if i is None:
                fail_at(r, path, f"{where} names the node {nm!r}, which is not among the nodes (0, 1, ..., "
                                 f"{len(names) - 1}).")
            return i
        if k not in index:
            if not infer:
                shown = ", ".join(map(str, names[:10])) + (" ..." if len(names) > 10 else "")
                fail_at(r, path, f"{where} names the node {nm!r}, which is not among the nodes ({shown}).")
            index[k] = len(names)
            names.append(nm)
        return index[k]

    items = []
    if graph is not None:
        if bool(graph.is_directed()) != directed:
            want = "a directed graph (networkx DiGraph)" if directed else "an undirected graph (networkx Graph)"
            got = "a directed" if graph.is_directed() else "an undirected"
            hint = "G.to_undirected()" if not directed else "nx.DiGraph(G) (both directions) or an oriented copy"
            r.fail(key, f"{key} must be {want}; got {got} graph. Convert it first, e.g. {hint}.")
        it = graph.edges(keys=True, data=True) if graph.is_multigraph() else graph.edges(data=True)
        for ed in it:
            data = ed[-1]
            e = {"from": ed[0], "to": ed[1]}
            for a in extra_keys:
                if data.get(a) is not None:
                    e[a] = data[a]
            items.append((e, f"graph edge {ed[0]!r} - {ed[1]!r}", (key,)))
    elif isinstance(raw, str):
        if not raw.lower().endswith(".csv"):
            r.fail(key, f"{key} must be a list of edges or a path to a .csv edge list; got {raw!r}.")
        items = _read_csv(r, key, raw, keys)
    elif isinstance(raw, (list, tuple)):
        for k, e in enumerate(raw):
            if isinstance(e, (list, tuple)):
                if not 2 <= len(e) <= len(keys):
                    shape = " or ".join("[" + ", ".join(keys[:j]) + "]" for j in range(2, len(keys) + 1))
                    r.fail(key, f"edge {k} given as a list must be {shape}; got {len(e)} entries.")
                e = dict(zip(keys, e))
            elif not isinstance(e, Mapping):
                r.fail(key, f"edge {k} must be [from, to] or a mapping with keys {', '.join(keys)}; got {e!r}.")
            bad = [a for a in e if a not in keys]
            if bad:
                r.fail(key, f"edge {k} has the unknown key {bad[0]!r}; an edge has the keys {', '.join(keys)}.")
            items.append((dict(e), f"edge {k}", (key, k)))
    else:
        r.fail(key, f"{key} must be a list of edges, a path to a .csv edge list or a networkx "
                    f"{'DiGraph' if directed else 'Graph'}; got {type(raw).__name__}.")
    if not items:
        r.fail(key, f"{key} must list at least one edge; got none.")
    m = len(items)
    tail = np.empty(m, np.int64)
    head = np.empty(m, np.int64)
    extra = {a: np.full(m, np.nan) for a in extra_keys}
    for k, (e, where, path) in enumerate(items):
        for need in ("from", "to"):
            if need not in e or e[need] is None:
                fail_at(r, path, f"{where} has no '{need}' node.")
        tail[k] = node_id(path + ("from",) if len(path) > 1 else path, e["from"], f"{where} ('from')")
        head[k] = node_id(path + ("to",) if len(path) > 1 else path, e["to"], f"{where} ('to')")
        for a in extra_keys:
            if e.get(a) is not None:
                extra[a][k] = _number(r, path + ((a,) if len(path) > 1 else ()), e[a], f"the {a} of {where}")
    return EdgeList(names if counted else tuple(names), tail, head, extra)


def _counted_node(k, count):
    """The node named by the text k among nodes given as a count (the names "0" .. "count-1"), or None."""
    if k.isascii() and k.isdigit() and (k == "0" or k[0] != "0"):
        i = int(k)
        if i < count:
            return i
    return None


def resolve_node(r, key, names, required=True):
    """The index of the node named by parameter ``key`` (matched as text)."""
    v = r.raw(key) if required else r.raw(key, None)
    if v is None:
        return None
    if isinstance(names, range):
        i = _counted_node(str(v), len(names))
        if i is not None:
            return i
    else:
        for i, nm in enumerate(names):
            if str(nm) == str(v):
                return i
    shown = ", ".join(map(str, names[:10])) + (" ..." if len(names) > 10 else "")
    r.fail(key, f"{key} names the node {v!r}, which is not among the nodes ({shown}).")


def components(n, tail, head):
    """Connected components of the undirected graph (labels per node), by union-find."""
    parent = np.arange(n)

    def find(a):
        while parent[a] != a:
            parent[a] = parent[parent[a]]
            a = parent[a]
        return a
    for a, b in zip(tail.tolist(), head.tolist()):
        ra, rb = find(a), find(b)
        if ra != rb:
            parent[ra] = rb
    return np.array([find(v) for v in range(n)])
