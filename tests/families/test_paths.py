"""The s-t path polytope: operators against the cvxpy reference and outside facts."""
import networkx as nx
import numpy as np
import pytest
from scipy.optimize import linprog

import setkit
from setkit.errors import DescriptionError, EmptySetError

from .helpers import check_against_reference, check_batch_shapes, check_inside_fixed, sample_points


def random_dag(rng, n, extra):
    """Edges i -> j with i < j: a chain 0 -> 1 -> ... -> n-1 plus random forward edges."""
    edges = [[k, k + 1] for k in range(n - 1)]
    while len(edges) < n - 1 + extra:
        a, b = sorted(int(v) for v in rng.integers(0, n, 2))
        if a != b:
            edges.append([a, b])
    return edges


def path_indicators(n, edges, s, t):
    """Every s-t path as an edge indicator (networkx.all_simple_edge_paths on a multigraph)."""
    G = nx.MultiDiGraph()
    G.add_nodes_from(range(n))
    for i, (a, b) in enumerate(edges):
        G.add_edge(a, b, key=i)
    out = []
    for p in nx.all_simple_edge_paths(G, s, t):
        x = np.zeros(len(edges))
        x[[k for _, _, k in p]] = 1.0
        out.append(x)
    return np.array(out)


@pytest.mark.parametrize("seed", [0, 1])
def test_every_operator_matches_the_reference(seed):
    rng = np.random.default_rng(seed)
    K = setkit.compile({"kind": "paths", "nodes": 7, "edges": random_dag(rng, 7, 8), "source": 0, "target": 6})
    Y = sample_points(K, rng, k=2)
    C = rng.standard_normal((5, K.dim))
    C[0] = np.round(C[0])
    C[1] = 1.0
    C[2] *= 1e6
    check_against_reference(K, Y, C)
    check_inside_fixed(K, K.lmo(rng.standard_normal((3, K.dim))))
    check_batch_shapes(K, rng)


def test_graph_with_cycles_allowed_matches_the_reference():
    rng = np.random.default_rng(2)
    edges = random_dag(rng, 6, 5) + [[4, 1], [5, 2]]
    K = setkit.compile({"kind": "paths", "nodes": 6, "edges": edges, "source": 0, "target": 5, "cycles": "allow"})
    Y = sample_points(K, rng, k=2)
    C = rng.standard_normal((4, K.dim))
    check_against_reference(K, Y, C)


def test_polytope_is_the_hull_of_all_paths_on_a_dag():
    # brute force: every s-t path (networkx.all_simple_edge_paths); the projection onto their convex
    # hull (cvxpy, simplex weights) equals setkit's, and the LMO value is the best path
    import cvxpy as cp
    rng = np.random.default_rng(3)
    edges = random_dag(rng, 6, 6)
    K = setkit.compile({"kind": "paths", "nodes": 6, "edges": edges, "source": 0, "target": 5})
    T = path_indicators(6, edges, 0, 5)
    C = rng.standard_normal((20, K.dim))
    np.testing.assert_allclose(np.einsum("ij,ij->i", C, K.lmo(C)), (C @ T.T).min(axis=1), atol=1e-12)
    for y in rng.standard_normal((3, K.dim)):
        lam = cp.Variable(len(T), nonneg=True)
        cp.Problem(cp.Minimize(cp.sum_squares(T.T @ lam - y)), [cp.sum(lam) == 1]).solve(solver=cp.CLARABEL)
        assert np.abs(K.project(y) - T.T @ lam.value).max() <= 1e-5
    # the vertex centroid is the mean of all path indicators (path counting)
    np.testing.assert_allclose(K.centroid(measure="vertices"), T.mean(axis=0), atol=1e-12)


def test_lmo_matches_networkx_shortest_path_with_negative_costs():
    # outside reference: networkx.shortest_path (Bellman-Ford, negative weights allowed on a DAG)
    rng = np.random.default_rng(4)
    for _ in range(5):
        n = 12
        G = nx.gnp_random_graph(n, 0.35, seed=int(rng.integers(1 << 30)), directed=True)
        G = nx.DiGraph([(a, b) for a, b in G.edges() if a < b] + [(k, k + 1) for k in range(n - 1)])
        edges = [list(e) for e in G.edges()]
        K = setkit.compile({"kind": "paths", "nodes": n, "edges": edges, "source": 0, "target": n - 1})
        c = rng.normal(size=len(edges))
        for (a, b), w in zip(G.edges(), c):
            G[a][b]["weight"] = w
        p = nx.shortest_path(G, 0, n - 1, weight="weight", method="bellman-ford")
        best = sum(G[a][b]["weight"] for a, b in zip(p[:-1], p[1:]))
        x = K.lmo(c)
        assert set(np.unique(x)) <= {0.0, 1.0}
        assert float(c @ x) == pytest.approx(best, abs=1e-12)


def test_lmo_with_cycles_is_the_unit_flow_lp():
    # with cycles allowed the set is the unit-flow polytope: compare with scipy.optimize.linprog (HiGHS)
    # on {B x = e_s - e_t, 0 <= x <= 1}; a negative cycle makes the answer a path plus that cycle
    edges = [[0, 1], [1, 2], [2, 3], [2, 1], [0, 3]]
    K = setkit.compile({"kind": "paths", "nodes": 4, "edges": edges, "source": 0, "target": 3, "cycles": "allow"})
    B = np.zeros((4, 5))
    for e, (a, b) in enumerate(edges):
        B[a, e] += 1
        B[b, e] -= 1
    for c in ([1.0, -1.0, 1.0, -1.0, 0.5], [1.0, 1.0, 1.0, 1.0, 0.5]):
        res = linprog(c, A_eq=B, b_eq=[1, 0, 0, -1], bounds=[(0, 1)] * 5, method="highs")
        assert float(np.dot(c, K.lmo(c))) == pytest.approx(res.fun, abs=1e-9)
    np.testing.assert_allclose(K.lmo([1.0, -1.0, 1.0, -1.0, 0.5]), [0, 1, 0, 1, 1])


def test_uniform_path_samples():
    edges = [[0, 1], [0, 2], [1, 3], [2, 3], [1, 2]]    # paths 0-1-3, 0-2-3, 0-1-2-3
    K = setkit.compile({"kind": "paths", "nodes": 4, "edges": edges, "source": 0, "target": 3})
    S = K.sample(6000, measure="vertices", rng=np.random.default_rng(5))
    _, counts = np.unique(S, axis=0, return_counts=True)
    assert counts.size == 3
    sd = np.sqrt(6000 * (1 / 3) * (2 / 3))
    assert np.all(np.abs(counts - 2000) <= 5 * sd)


def test_extreme_magnitudes_are_certified():
    rng = np.random.default_rng(6)
    for cyc in ("forbid", "allow"):
        edges = random_dag(rng, 5, 4) + ([[3, 1]] if cyc == "allow" else [])
        K = setkit.compile({"kind": "paths", "nodes": 5, "edges": edges, "source": 0, "target": 4, "cycles": cyc})
        for s in (1e-300, 1e-3, 1e6, 1e150, 1e300):
            Y = s * rng.standard_normal((3, K.dim))
            P = K.project(Y)
            assert np.all(K.violation(P) <= 1e-9), (cyc, s)
            L = K.lmo(Y)
            assert np.all(K.violation(L) == 0)


def test_located_errors():
    base = {"kind": "paths", "edges": [["a", "b"], ["b", "c"]]}
    with pytest.raises(DescriptionError, match=r"target\).*must differ from source"):
        setkit.compile({**base, "source": "a", "target": "a"})
    with pytest.raises(EmptySetError, match=r"target\).*no directed path.*'c'.*'a'"):
        setkit.compile({**base, "source": "c", "target": "a"})
    with pytest.raises(DescriptionError, match=r"source\).*'q'.*not among the nodes"):
        setkit.compile({**base, "source": "q", "target": "c"})
    with pytest.raises(DescriptionError, match=r"edges\).*directed cycle a -> b -> c -> a.*cycles: allow"):
        setkit.compile({"kind": "paths", "edges": [["a", "b"], ["b", "c"], ["c", "a"], ["c", "d"]],
                        "source": "a", "target": "d"})
    with pytest.raises(DescriptionError, match="cycles must be one of forbid, allow"):
        setkit.compile({**base, "source": "a", "target": "c", "cycles": "sometimes"})
    with pytest.raises(DescriptionError, match="directed graph"):
        setkit.compile({"kind": "paths", "edges": nx.Graph([(0, 1)]), "source": 0, "target": 1})


def test_rows_the_flow_kernel_cannot_finish_are_solved_and_certified():
    # on this graph with a cycle the dual Newton kernel gives up on a tiny point ("a component's balance
    # cannot be met"); the path family then answers by the minimum-norm point, checked against the reference
    spec = {"kind": "paths", "nodes": 4, "edges": [[0, 1], [1, 2], [2, 0], [1, 3], [2, 3]], "source": 0,
            "target": 3, "cycles": "allow"}
    K = setkit.compile(spec)
    y = np.array([-0.00074359, 0.00138332, -0.00098847, -0.0015857, 0.00138314])
    det = K.project(y, details=True)
    assert det.status == "solved" and det.certificate <= 1e-12 and det.residual <= 1e-12
    ref = K.with_backends(project="reference").project(y)
    np.testing.assert_allclose(det.point, ref, atol=2e-5)


def test_direction_samples_are_lmo_answers_with_and_without_cycles():
    for extra, cyc in (([], "forbid"), ([[2, 1]], "allow")):
        K = setkit.compile({"kind": "paths", "nodes": 4, "edges": [[0, 1], [1, 2], [2, 3], [0, 2], [1, 3]] + extra,
                            "source": 0, "target": 3, "cycles": cyc})
        S = K.sample(50, measure="directions", rng=np.random.default_rng(7))
        assert S.shape == (50, K.dim) and np.all(K.violation(S) <= 1e-12)
        assert set(np.unique(S)) <= {0.0, 1.0}
