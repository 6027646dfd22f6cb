"""The spanning-tree polytope: operators against the cvxpy reference and outside facts."""
import itertools

import networkx as nx
import numpy as np
import pytest
from scipy.optimize import linprog

import setkit
from setkit.errors import DescriptionError, EmptySetError, SolveError
from setkit.families.spanning_trees import subset_excess_exhaustive, subset_excess_maxflow
from setkit.kernels.minnorm import project_by_min_norm_point

from .helpers import check_against_reference, check_batch_shapes, check_inside_fixed, sample_points


def random_graph(rng, n, extra):
    """A connected multigraph: a random tree plus ``extra`` random edges (parallel edges allowed)."""
    edges = [[k, int(rng.integers(0, k))] for k in range(1, n)]
    while len(edges) < n - 1 + extra:
        a, b = (int(v) for v in rng.integers(0, n, 2))
        if a != b:
            edges.append([a, b])
    return edges


def all_trees(n, edges):
    """Indicator vectors of every spanning tree, by brute force over (n-1)-subsets of edges."""
    m = len(edges)
    out = []
    for sub in itertools.combinations(range(m), n - 1):
        G = nx.MultiGraph()
        G.add_nodes_from(range(n))
        G.add_edges_from(edges[e] for e in sub)
        if nx.is_connected(G):
            x = np.zeros(m)
            x[list(sub)] = 1.0
            out.append(x)
    return np.array(out)


@pytest.mark.parametrize("seed", [0, 1])
def test_every_operator_matches_the_reference(seed):
    rng = np.random.default_rng(seed)
    K = setkit.compile({"kind": "spanning_trees", "nodes": 6, "edges": random_graph(rng, 6, 5)})
    Y = sample_points(K, rng, k=2)
    C = rng.standard_normal((5, K.dim))
    C[0] = np.round(C[0])           # ties
    C[1] = 0.0                      # a full tie
    C[2] *= 1e6
    check_against_reference(K, Y, C)
    check_inside_fixed(K, K.lmo(rng.standard_normal((3, K.dim))))
    check_batch_shapes(K, rng)


def test_extended_formulation_equals_the_hull_of_all_trees():
    # the reference uses the directed multicommodity-flow formulation; brute force: the convex hull of
    # every spanning tree (enumerated over all (n-1)-subsets of edges), projected onto by cvxpy
    import cvxpy as cp
    rng = np.random.default_rng(2)
    edges = random_graph(rng, 5, 3)
    K = setkit.compile({"kind": "spanning_trees", "nodes": 5, "edges": edges})
    T = all_trees(5, edges)
    ref = K.with_backends(project="reference")
    for y in 1.5 * rng.standard_normal((3, K.dim)):
        lam = cp.Variable(len(T), nonneg=True)
        prob = cp.Problem(cp.Minimize(cp.sum_squares(T.T @ lam - y)), [cp.sum(lam) == 1])
        prob.solve(solver=cp.CLARABEL)
        hull_p = T.T @ lam.value
        assert np.abs(ref.project(y) - hull_p).max() <= 1e-5
        assert np.abs(K.project(y) - hull_p).max() <= 1e-5


def test_lmo_matches_networkx_minimum_spanning_tree():
    # outside reference: networkx.minimum_spanning_tree (Kruskal), on graphs with tied integer weights
    rng = np.random.default_rng(3)
    for trial in range(5):
        n = 9
        G = nx.gnm_random_graph(n, 20, seed=int(rng.integers(1 << 30)))
        if not nx.is_connected(G):
            continue
        edges = [list(e) for e in G.edges()]
        K = setkit.compile({"kind": "spanning_trees", "nodes": n, "edges": edges})
        c = rng.integers(-3, 4, len(edges)).astype(float)
        for (u, v), w in zip(G.edges(), c):
            G[u][v]["weight"] = w
        nx_cost = sum(d["weight"] for _, _, d in nx.minimum_spanning_tree(G, algorithm="kruskal").edges(data=True))
        x = K.lmo(c)
        assert set(np.unique(x)) <= {0.0, 1.0} and x.sum() == n - 1
        assert float(c @ x) == nx_cost


def test_cayley_formula_counts_the_vertices_of_complete_graphs():
    # Cayley (1889): K_n has n^(n-2) spanning trees. Counted twice: networkx.SpanningTreeIterator, and the
    # distinct LMO answers over many random directions (every tree is the unique MST of some direction)
    rng = np.random.default_rng(4)
    for n, draws in ((4, 3000), (5, 40000)):
        G = nx.complete_graph(n)
        assert sum(1 for _ in nx.SpanningTreeIterator(G)) == n ** (n - 2)
        K = setkit.compile({"kind": "spanning_trees", "nodes": n, "edges": [list(e) for e in G.edges()]})
        V = K.lmo(rng.standard_normal((draws, K.dim)))
        assert len({tuple(v) for v in V}) == n ** (n - 2)


def test_lmo_over_all_trees_brute_force():
    rng = np.random.default_rng(5)
    edges = random_graph(rng, 6, 4)
    K = setkit.compile({"kind": "spanning_trees", "nodes": 6, "edges": edges})
    T = all_trees(6, edges)
    C = rng.standard_normal((20, K.dim))
    np.testing.assert_allclose(np.einsum("ij,ij->i", C, K.lmo(C)), (C @ T.T).min(axis=1), atol=1e-12)
    np.testing.assert_allclose(K.support(C), (C @ T.T).max(axis=1), atol=1e-12)


def test_extended_form_lp_gives_the_minimum_spanning_tree():
    # the extended form as one LP (scipy.optimize.linprog / HiGHS, explicit bounds) against Kruskal
    rng = np.random.default_rng(6)
    K = setkit.compile({"kind": "spanning_trees", "nodes": 6, "edges": random_graph(rng, 6, 5)})
    f = K.node.extended_form()
    for _ in range(3):
        c = rng.standard_normal(K.dim)
        cost = np.concatenate([c, np.zeros(f.n_aux)])
        res = linprog(cost, A_eq=f.A_eq, b_eq=f.b_eq, A_ub=f.A_ub, b_ub=f.b_ub,
                      bounds=np.column_stack([f.lo, f.hi]), method="highs")
        assert res.status == 0
        assert res.fun == pytest.approx(float(c @ K.lmo(c)), abs=1e-9)


def test_max_flow_separation_equals_enumeration():
    rng = np.random.default_rng(7)
    for _ in range(6):
        n = 7
        edges = np.array(random_graph(rng, n, 6))
        tail, head = edges[:, 0], edges[:, 1]
        x = rng.uniform(0, 1.2, len(edges))
        exact = subset_excess_exhaustive(x[None, :], tail, head, n)[0]
        assert subset_excess_maxflow(x, tail, head, n) == pytest.approx(exact, abs=1e-12)


def test_membership_on_a_graph_above_the_enumeration_limit():
    # 14 nodes: the subset inequalities are separated by minimum cuts
    rng = np.random.default_rng(8)
    K = setkit.compile({"kind": "spanning_trees", "nodes": 14, "edges": random_graph(rng, 14, 8)})
    V = K.lmo(rng.standard_normal((6, K.dim)))
    inside = rng.dirichlet(np.ones(6), 3) @ V
    assert K.contains(inside).all()
    assert np.all(K.violation(inside) <= 1e-12)
    # a tree with one edge doubled and another dropped: the sum is still n - 1, but for S the two
    # ends of the doubled edge x(E(S)) = 2 > |S| - 1 = 1 (and no set is worse: the support is a forest)
    x = V[0].copy()
    e, f = np.flatnonzero(x)[:2]
    x[e], x[f] = 2.0, 0.0
    assert x.sum() == 13 and K.violation(x) == pytest.approx(1.0)
    assert not K.contains(x)


def test_vertex_centroid_is_the_effective_resistance():
    # Kirchhoff (1847): for a uniform spanning tree, P(e in T) is the effective resistance of e; checked
    # against the mean of all trees from networkx.SpanningTreeIterator
    rng = np.random.default_rng(9)
    edges = random_graph(rng, 6, 5)
    edges = [e for i, e in enumerate(edges) if [min(e), max(e)] not in [sorted(f) for f in edges[:i]]]
    K = setkit.compile({"kind": "spanning_trees", "nodes": 6, "edges": edges})
    G = nx.Graph()
    G.add_edges_from((a, b, {"i": i}) for i, (a, b) in enumerate(edges))
    trees = []
    for T in nx.SpanningTreeIterator(G):
        x = np.zeros(len(edges))
        x[[G[a][b]["i"] for a, b in T.edges()]] = 1.0
        trees.append(x)
    np.testing.assert_allclose(K.centroid(measure="vertices"), np.mean(trees, axis=0), atol=1e-12)
    Kc = setkit.compile({"kind": "spanning_trees", "nodes": 5, "edges": [list(e) for e in nx.complete_graph(5).edges()]})
    np.testing.assert_allclose(Kc.centroid(measure="volume"), np.full(10, 2 / 5))


def test_wilson_samples_are_uniform_trees():
    # 16 trees of K4 (Cayley), 8000 draws: every frequency within 5 standard deviations of 1/16
    K = setkit.compile({"kind": "spanning_trees", "nodes": 4, "edges": [list(e) for e in nx.complete_graph(4).edges()]})
    S = K.sample(8000, measure="vertices", rng=np.random.default_rng(10))
    assert np.all(S.sum(axis=1) == 3) and np.all(K.violation(S) == 0)
    _, counts = np.unique(S, axis=0, return_counts=True)
    assert counts.size == 16
    sd = np.sqrt(8000 * (1 / 16) * (15 / 16))
    assert np.all(np.abs(counts - 500) <= 5 * sd)


def test_projection_certificate_and_failure_path():
    rng = np.random.default_rng(11)
    K = setkit.compile({"kind": "spanning_trees", "nodes": 7, "edges": random_graph(rng, 7, 7)})
    y = 2 * rng.standard_normal(K.dim)
    det = K.project(y, details=True)
    assert det.status == "solved" and det.certificate <= 1e-12 and det.residual <= 1e-12
    # the kernel refuses to return an unfinished answer
    with pytest.raises(SolveError, match="minimum-norm-point"):
        project_by_min_norm_point(y, lambda c: K.node.lmo(c[None, :])[0], max_iter=2, label="test")


def test_extreme_magnitudes_give_points_of_the_set():
    rng = np.random.default_rng(12)
    K = setkit.compile({"kind": "spanning_trees", "nodes": 5, "edges": random_graph(rng, 5, 4)})
    for s in (1e-300, 1e-8, 1e8, 1e150, 1e300):
        Y = s * rng.standard_normal((2, K.dim))
        P = K.project(Y)
        assert np.all(K.violation(P) <= 1e-12)
        if s >= 1e150:          # far away along a generic direction: the projection is lmo(-y)
            np.testing.assert_array_equal(P, K.lmo(-Y))
    assert K.project(np.zeros((0, K.dim))).shape == (0, K.dim)


def test_inputs_networkx_and_csv(tmp_path):
    G = nx.Graph()
    G.add_edges_from([("pond", "oak"), ("oak", "gate"), ("gate", "pond"), ("gate", "shed")])
    K = setkit.compile({"kind": "spanning_trees", "edges": G})
    assert K.shape == (4,) and K.node.node_names == ("pond", "oak", "gate", "shed")
    (tmp_path / "paths.csv").write_text("from,to\npond,oak\noak,gate\ngate,pond\ngate,shed\n")
    (tmp_path / "park.yaml").write_text("set:\n  kind: spanning_trees\n  edges: paths.csv\n")
    K2 = setkit.load(tmp_path / "park.yaml")
    c = np.array([1.0, 2.0, 3.0, 0.5])
    np.testing.assert_array_equal(K.lmo(c), K2.lmo(c))
    np.testing.assert_array_equal(K.lmo(c), [1, 1, 0, 1])


def test_located_errors():
    with pytest.raises(EmptySetError, match=r"edges\).*connected.*2 components"):
        setkit.compile({"kind": "spanning_trees", "nodes": 4, "edges": [[0, 1], [2, 3]]})
    with pytest.raises(DescriptionError, match=r"edges\[1\].*self-loop"):
        setkit.compile({"kind": "spanning_trees", "edges": [[0, 1], [1, 1]]})
    with pytest.raises(DescriptionError, match=r"edges\[0\]\.to.*'z'.*not among the nodes"):
        setkit.compile({"kind": "spanning_trees", "nodes": ["a", "b"], "edges": [["a", "z"]]})
    with pytest.raises(DescriptionError, match="undirected graph.*to_undirected"):
        setkit.compile({"kind": "spanning_trees", "edges": nx.DiGraph([(0, 1)])})
    with pytest.raises(DescriptionError, match="unknown parameter 'weights'"):
        setkit.compile({"kind": "spanning_trees", "edges": [[0, 1]], "weights": [1]})


def test_corral_factor_updates_match_dense_algebra():
    # the incremental Cholesky pieces of the min-norm point against numpy.linalg.cholesky / solve:
    # appends, Givens deletions of inner rows, and a rebuild from a Gram matrix
    from setkit.kernels import minnorm
    rng = np.random.default_rng(5)
    A = rng.standard_normal((9, 12))
    M = A @ A.T
    L = np.zeros((10, 10))
    for k in range(9):
        assert minnorm._chol_append(L, k, np.ascontiguousarray(M[k, :k]), M[k, k])
    np.testing.assert_allclose(L[:9, :9], np.linalg.cholesky(M), atol=1e-12)
    live = list(range(9))
    for i in (3, 0, 5):
        minnorm._chol_delete(L, len(live), i)
        del live[i]
        Ms = M[np.ix_(live, live)]
        k = len(live)
        np.testing.assert_allclose(L[:k, :k] @ L[:k, :k].T, Ms, atol=1e-10)
        assert np.allclose(np.triu(L[:k, :k], 1), 0.0) and (np.diag(L[:k, :k]) > 0).all()
        r = rng.standard_normal(k)
        np.testing.assert_allclose(minnorm._chol_solve(L, k, r), np.linalg.solve(Ms, r), rtol=1e-9, atol=1e-10)
    # a dependent row is refused (its pivot vanishes) and leaves the factor as it was
    L2 = np.zeros((4, 4))
    B = np.vstack([A[:2], A[0] + A[1]])
    Mb = B @ B.T
    assert minnorm._chol_append(L2, 0, np.zeros(0), Mb[0, 0]) and minnorm._chol_append(L2, 1, Mb[1, :1].copy(), Mb[1, 1])
    assert not minnorm._chol_append(L2, 2, Mb[2, :2].copy(), Mb[2, 2])
    # rebuild from a corral's Gram matrix: M = D D^T with D the differences from vertex 0
    G = A[:6] @ A[:6].T
    L3 = np.zeros((6, 6))
    assert minnorm._chol_build(L3, G) == 5
    D = A[1:6] - A[0]
    np.testing.assert_allclose(L3[:5, :5] @ L3[:5, :5].T, D @ D.T, atol=1e-10)


@pytest.mark.parametrize("m", [60, 200])
def test_kl_projection_larger_graph_against_its_certificate_and_networkx(m):
    # a larger random graph: the KL answer is a point of the polytope (sum n - 1, subset constraints
    # by minimum cuts), its certificate is the stated one, and every networkx minimum spanning tree
    # (networkx.minimum_spanning_tree) of the Kruskal direction is an LMO answer of the same value
    rng = np.random.default_rng(m)
    nodes = m // 4
    order = rng.permutation(nodes)
    edges = [[int(order[k]), int(order[int(rng.integers(0, k))])] for k in range(1, nodes)]
    while len(edges) < m:
        a, b = (int(v) for v in rng.integers(0, nodes, 2))
        if a != b:
            edges.append([a, b])
    K = setkit.compile({"kind": "spanning_trees", "nodes": nodes, "edges": edges})
    t = rng.uniform(-3, 3, m)
    d = K.project(t, geometry="kl", log_input=True, details=True)
    x = d.point
    assert abs(x.sum() - (nodes - 1)) <= 1e-9 * nodes and x.min() >= 0.0
    assert float(K.violation(x)) <= 1e-9
    assert float(d.certificate) <= 1e-9 * (nodes - 1) + 1e-12
    c = np.log(np.maximum(x, 1e-300)) - t
    G = nx.MultiGraph()
    for e, (a, b) in enumerate(edges):
        G.add_edge(a, b, key=e, weight=float(c[e]))
    T = nx.minimum_spanning_tree(G, algorithm="kruskal")
    val_nx = sum(w for _, _, w in T.edges(data="weight"))
    np.testing.assert_allclose(float(c @ K.lmo(c)), val_nx, rtol=1e-12, atol=1e-12)
