"""Graph LMOs side by side: setkit's spanning-tree and path LMOs against networkx.

Workloads (one run, the same cost vectors for every method, calls interleaved so that machine load
hits every method alike; medians over the calls):

* ``spanning tree``: a random connected graph with ``--edges`` edges on ``--edges / 10`` nodes
  (a random tree plus random extra edges); each call gets a fresh Gaussian cost vector.
  setkit: ``K.lmo(c)`` (Kruskal: one sort plus numba union-find). networkx:
  ``networkx.minimum_spanning_tree(G, algorithm="kruskal")`` on a graph built once, whose edge
  weights are set before each call outside the timed region (generous to networkx). Also shown:
  ``scipy.sparse.csgraph.minimum_spanning_tree`` on costs shifted to be positive (scipy drops
  zero entries of a sparse matrix), which needs a simple graph, so parallel edges are merged by
  their cheapest copy first (untimed).
* ``shortest path``: a random DAG with ``--path-edges`` edges (default 5,000; at most 5 calls); setkit ``K.lmo(c)`` (recursion over a
  topological order) against ``networkx.shortest_path(..., method="bellman-ford")``.

Every answer is checked: equal optimal values (to 1e-9 relative) across methods.

Usage::

    python -m benchmarks.bench_graphs [--edges 100000] [--calls 15] [--path-edges 5000] [--seed 0]
"""
from __future__ import annotations

import argparse
import os
import sys
import time

import numpy as np

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), ".."))

import setkit  # noqa: E402


def random_connected_graph(n_nodes, n_edges, rng):
    """(tail, head) of a random tree on n_nodes plus random extra edges (no self-loops)."""
    order = rng.permutation(n_nodes)
    tail = list(order[1:])
    head = [order[int(rng.integers(0, k))] for k in range(1, n_nodes)]
    extra = n_edges - len(tail)
    a = rng.integers(0, n_nodes, 2 * extra + 10)
    b = rng.integers(0, n_nodes, 2 * extra + 10)
    keep = a != b
    tail = np.concatenate([np.array(tail), a[keep][:extra]]).astype(np.int64)
    head = np.concatenate([np.array(head), b[keep][:extra]]).astype(np.int64)
    return tail, head


def random_dag(n_nodes, n_edges, rng):
    """Edges i -> j with i < j in a random node order: a chain plus random forward edges."""
    tail = list(range(n_nodes - 1))
    head = list(range(1, n_nodes))
    extra = n_edges - len(tail)
    a = rng.integers(0, n_nodes, 2 * extra + 10)
    b = rng.integers(0, n_nodes, 2 * extra + 10)
    keep = a != b
    lo, hi = np.minimum(a, b)[keep][:extra], np.maximum(a, b)[keep][:extra]
    return np.r_[tail, lo].astype(np.int64), np.r_[head, hi].astype(np.int64)


def spanning_tree_lmo_row(n_edges, calls, rng):
    """Median seconds per LMO call of setkit, networkx and scipy on one graph; values checked equal."""
    import networkx as nx
    import scipy.sparse as sp
    from scipy.sparse.csgraph import minimum_spanning_tree
    n_nodes = max(3, n_edges // 10)
    tail, head = random_connected_graph(n_nodes, n_edges, rng)
    K = setkit.compile({"kind": "spanning_trees", "nodes": n_nodes, "edges": np.column_stack([tail, head]).tolist()})
    G = nx.MultiGraph()
    G.add_nodes_from(range(n_nodes))
    keys = [G.add_edge(int(u), int(v), idx=e) for e, (u, v) in enumerate(zip(tail, head))]
    C = rng.standard_normal((calls + 1, n_edges))
    times = {"setkit": [], "networkx": [], "scipy": []}
    worst = 0.0
    for i, c in enumerate(C):
        for (u, v), k, w in zip(zip(tail.tolist(), head.tolist()), keys, c.tolist()):
            G[u][v][k]["weight"] = w
        # scipy: cheapest copy of each parallel edge, costs shifted above 0 (untimed preparation)
        a, b = np.minimum(tail, head), np.maximum(tail, head)
        shift = 1.0 - c.min()
        order = np.lexsort((c, b, a))
        first = np.r_[True, (a[order][1:] != a[order][:-1]) | (b[order][1:] != b[order][:-1])]
        sel = order[first]
        M = sp.csr_matrix((c[sel] + shift, (a[sel], b[sel])), shape=(n_nodes, n_nodes))
        t0 = time.perf_counter()
        x = K.lmo(c)
        t1 = time.perf_counter()
        T = nx.minimum_spanning_tree(G, algorithm="kruskal")
        t2 = time.perf_counter()
        S = minimum_spanning_tree(M)
        t3 = time.perf_counter()
        v_set = float(c @ x)
        v_nx = sum(d["weight"] for _, _, d in T.edges(data=True))
        v_sp = float(S.sum()) - shift * (n_nodes - 1)
        worst = max(worst, abs(v_set - v_nx), abs(v_set - v_sp))
        if i == 0:
            continue                     # warm-up: JIT, first allocations
        times["setkit"].append(t1 - t0)
        times["networkx"].append(t2 - t1)
        times["scipy"].append(t3 - t2)
    med = {k: float(np.median(v)) for k, v in times.items()}
    scale = max(1.0, float(np.abs(C).sum(axis=1).max()))
    return {"edges": n_edges, "nodes": n_nodes, "calls": calls, "ms": {k: 1e3 * v for k, v in med.items()},
            "ratio": med["setkit"] / med["networkx"], "speedup": med["networkx"] / med["setkit"],
            "agree": worst <= 1e-9 * scale, "worst": worst}


def shortest_path_lmo_row(n_edges, calls, rng):
    """Median seconds per LMO call of setkit (DAG recursion) and networkx Bellman-Ford; values checked equal."""
    import networkx as nx
    n_nodes = max(3, n_edges // 10)
    tail, head = random_dag(n_nodes, n_edges, rng)
    K = setkit.compile({"kind": "paths", "nodes": n_nodes, "edges": np.column_stack([tail, head]).tolist(),
                        "source": 0, "target": n_nodes - 1})
    G = nx.MultiDiGraph()
    G.add_nodes_from(range(n_nodes))
    keys = [G.add_edge(int(u), int(v)) for u, v in zip(tail, head)]
    C = rng.standard_normal((calls + 1, n_edges))
    times = {"setkit": [], "networkx": []}
    worst = 0.0
    for i, c in enumerate(C):
        for (u, v), k, w in zip(zip(tail.tolist(), head.tolist()), keys, c.tolist()):
            G[u][v][k]["weight"] = w
        t0 = time.perf_counter()
        x = K.lmo(c)
        t1 = time.perf_counter()
        length = nx.shortest_path_length(G, 0, n_nodes - 1, weight=lambda a, b, d: min(e["weight"] for e in d.values()),
                                         method="bellman-ford")
        t2 = time.perf_counter()
        worst = max(worst, abs(float(c @ x) - length))
        if i:
            times["setkit"].append(t1 - t0)
            times["networkx"].append(t2 - t1)
    med = {k: float(np.median(v)) for k, v in times.items()}
    return {"edges": n_edges, "nodes": n_nodes, "calls": calls, "ms": {k: 1e3 * v for k, v in med.items()},
            "speedup": med["networkx"] / med["setkit"], "agree": worst <= 1e-9 * n_edges, "worst": worst}


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--edges", type=int, default=100_000)
    ap.add_argument("--calls", type=int, default=15)
    ap.add_argument("--path-edges", type=int, default=5_000,
                    help="edges of the DAG for the shortest-path row (networkx Bellman-Ford is slow)")
    ap.add_argument("--seed", type=int, default=0)
    a = ap.parse_args(argv)
    rng = np.random.default_rng(a.seed)
    r = spanning_tree_lmo_row(a.edges, a.calls, rng)
    print(f"spanning-tree LMO, {r['edges']:,} edges on {r['nodes']:,} nodes, median of {r['calls']} interleaved calls:")
    for k, v in r["ms"].items():
        print(f"  {k:<9} {v:9.2f} ms")
    print(f"  setkit / networkx = {r['ratio']:.3f} (target <= 3); speedup {r['speedup']:.1f}x; "
          f"values agree: {r['agree']} (worst gap {r['worst']:.2e})")
    p = shortest_path_lmo_row(a.path_edges, min(a.calls, 5), rng)
    print(f"shortest-path LMO on a DAG, {p['edges']:,} edges on {p['nodes']:,} nodes:")
    for k, v in p["ms"].items():
        print(f"  {k:<9} {v:9.2f} ms")
    print(f"  speedup over networkx {p['speedup']:.1f}x; values agree: {p['agree']} (worst gap {p['worst']:.2e})")


if __name__ == "__main__":
    main()
