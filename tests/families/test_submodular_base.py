"""Base polytopes of submodular functions: reference, Edmonds' greedy, the permutahedron, Fujishige."""

import networkx as nx
import numpy as np
import pytest
from scipy.optimize import linprog

import setkit
import setkit.families.submodular_base as sb
from setkit.errors import DescriptionError, SolveError
from setkit.kernels.minnorm import project_by_min_norm_point

from .helpers import check_against_reference, check_batch_shapes, check_inside_fixed, sample_points

CUT = {"kind": "submodular_base", "function": "cut", "nodes": 5,
       "edges": [[0, 1, 2.0], [1, 2, 1.0], [2, 3, 0.5], [3, 4, 1.5], [4, 0, 1.0], [0, 2, 0.25]]}
COVERAGE = {"kind": "submodular_base", "function": "coverage", "sets": [[0, 1], [1, 2, 3], [3], [0, 4], [2, 4, 5]],
            "item_weights": [1.0, 2.0, 0.5, 1.5, 1.0, 3.0]}
CONCAVE = {"kind": "submodular_base", "function": "concave_cardinality", "values": [0, 5, 9, 12, 14, 15, 15]}


def all_values(K):
    """F on every subset, as (masks, values), straight from the set function's closed form."""
    M = sb.subset_masks(K.dim)
    return M, K.node.fn.values(M)


def lp_min(K, c):
    """min <c, x> over {x(S) <= F(S) for all S, x(V) = F(V)} with every subset listed (scipy linprog, HiGHS)."""
    M, v = all_values(K)
    res = linprog(c, A_ub=M[1:-1].astype(float), b_ub=v[1:-1], A_eq=np.ones((1, K.dim)), b_eq=[v[-1]],
                  bounds=[(None, None)] * K.dim, method="highs")
    assert res.status == 0
    return res.fun


@pytest.mark.parametrize("spec", [CONCAVE, CUT, COVERAGE], ids=["concave", "cut", "coverage"])
def test_every_operator_matches_the_reference(spec):
    rng = np.random.default_rng(0)
    K = setkit.compile(spec)
    Y = sample_points(K, rng, k=2)
    C = rng.standard_normal((5, K.dim))
    C[0] = np.round(C[0])
    C[1] = 1.0
    C[2] *= 1e6
    check_against_reference(K, Y, C)
    check_inside_fixed(K, K.lmo(rng.standard_normal((3, K.dim))))
    check_batch_shapes(K, rng)


def test_python_function_matches_the_reference():
    # a budgeted coverage written as a Python function: F(S) = min(3, number of colors covered)
    colors = [{0, 1}, {1}, {2}, {0, 3}, {3, 4}]
    K = setkit.build("submodular_base", function=lambda S: min(3, len(set().union(*(colors[i] for i in S)))), dim=5)
    rng = np.random.default_rng(1)
    check_against_reference(K, sample_points(K, rng, k=1), rng.standard_normal((3, 5)))


@pytest.mark.parametrize("spec", [CONCAVE, CUT, COVERAGE], ids=["concave", "cut", "coverage"])
def test_greedy_solves_the_lp_edmonds(spec):
    # Edmonds (1970): the greedy vertex maximizes a linear function over the base polytope; checked
    # against the LP with all 2^n subset inequalities (scipy.optimize.linprog)
    K = setkit.compile(spec)
    rng = np.random.default_rng(2)
    for c in np.concatenate([rng.standard_normal((3, K.dim)), np.round(rng.standard_normal((2, K.dim)))]):
        assert float(c @ K.lmo(c)) == pytest.approx(lp_min(K, c), abs=1e-8)


def test_closed_forms_evaluate_the_named_functions():
    # cut: networkx.cut_size; coverage: a set union by hand
    K = setkit.compile(CUT)
    G = nx.Graph()
    G.add_nodes_from(range(5))
    G.add_weighted_edges_from(CUT["edges"])
    M, v = all_values(K)
    for row, val in zip(M, v):
        S = set(np.flatnonzero(row).tolist())
        assert val == pytest.approx(nx.cut_size(G, S, weight="weight"))
    Kc = setkit.compile(COVERAGE)
    M, v = all_values(Kc)
    w = COVERAGE["item_weights"]
    for row, val in zip(M, v):
        covered = set().union(*(set(COVERAGE["sets"][i]) for i in np.flatnonzero(row)))
        assert val == pytest.approx(sum(w[u] for u in covered))


def test_concave_of_cardinality_is_the_permutahedron():
    # F(S) = sum of the |S| largest weights (a concave function of |S|): B(F) is the permutahedron of
    # the weights; compared with setkit's own permutahedron family on every operator
    rng = np.random.default_rng(3)
    w = np.array([5.0, 4.0, 3.0, 2.0, 2.0, 0.5, -1.0])
    g = np.concatenate([[0.0], np.cumsum(np.sort(w)[::-1])])
    K = setkit.compile({"kind": "submodular_base", "function": "concave_cardinality", "values": g.tolist()})
    P = setkit.compile({"kind": "permutahedron", "weights": w.tolist()})
    Y = 3 * rng.standard_normal((6, 7))
    np.testing.assert_allclose(K.project(Y), P.project(Y), atol=1e-12)
    np.testing.assert_allclose(K.lmo(Y), P.lmo(Y), atol=0)
    np.testing.assert_allclose(K.support(Y), P.support(Y), atol=1e-12)
    np.testing.assert_allclose(K.violation(Y), P.violation(Y), atol=1e-12)
    np.testing.assert_array_equal(K.contains(Y), P.contains(Y))
    # the minimum-norm-point route (Wolfe on the greedy LMO) agrees with sort + pool-adjacent-violators
    np.testing.assert_allclose(K.node.project_min_norm_point(Y), P.project(Y), atol=1e-9)
    np.testing.assert_allclose(K.centroid(measure="volume"), np.full(7, w.mean()))


def test_fujishige_violation_from_the_projection_equals_enumeration(monkeypatch):
    # Fujishige (1980): with p the projection of x onto B(F), max_S x(S) - F(S) = sum_i (x_i - p_i)^+;
    # the route used above 16 elements, forced here and compared with the enumeration of all subsets
    rng = np.random.default_rng(4)
    for spec in (CUT, COVERAGE):
        K = setkit.compile(spec)
        X = 2 * rng.standard_normal((5, K.dim))
        exact = K.violation(X)
        monkeypatch.setattr(sb, "EXHAUSTIVE_MAX", 0)
        Kbig = setkit.compile(spec)
        np.testing.assert_allclose(Kbig.violation(X), exact, atol=1e-9)
        assert np.all(Kbig.contains(Kbig.project(X)))
        monkeypatch.setattr(sb, "EXHAUSTIVE_MAX", 16)


def test_linear_forms_serve_the_generic_backends():
    # the compact extended formulations of cut and coverage, solved by the osqp backend
    rng = np.random.default_rng(5)
    for spec in (CUT, COVERAGE):
        K = setkit.compile(spec)
        Y = 2 * rng.standard_normal((3, K.dim))
        np.testing.assert_allclose(K.with_backends(project="osqp").project(Y), K.project(Y), atol=1e-6)


def test_projection_refuses_an_unfinished_answer():
    K = setkit.compile(COVERAGE)
    y = np.array([3.0, -1.0, 2.0, 0.5, 4.0])
    with pytest.raises(SolveError, match="minimum-norm-point.*not returned"):
        project_by_min_norm_point(y, lambda c: K.node.lmo(c[None, :])[0], max_iter=1, label="test")


def test_extreme_magnitudes_give_points_of_the_set():
    rng = np.random.default_rng(6)
    for spec in (CONCAVE, CUT, COVERAGE):
        K = setkit.compile(spec)
        for s in (1e-300, 1e-3, 1e6, 1e150, 1e300):
            Y = s * rng.standard_normal((2, K.dim))
            P = K.project(Y)
            assert np.all(K.violation(P) <= 1e-9 * K.node.scale()), (spec["function"], s)
            if s >= 1e150:     # far along a generic direction the projection is the vertex lmo(-y)
                np.testing.assert_allclose(P, K.lmo(-Y), atol=1e-9 * K.node.scale())


def test_located_errors():
    with pytest.raises(DescriptionError, match=r"values\).*concave.*k = 2"):
        setkit.compile({"kind": "submodular_base", "function": "concave_cardinality", "values": [0, 3, 5, 8]})
    with pytest.raises(DescriptionError, match=r"values\).*g\(0\) must be 0"):
        setkit.compile({"kind": "submodular_base", "function": "concave_cardinality", "values": [1, 3, 4]})
    with pytest.raises(DescriptionError, match=r"edges\[1\]\).*weight -2.*>= 0"):
        setkit.compile({"kind": "submodular_base", "function": "cut", "edges": [[0, 1, 1], [1, 2, -2]]})
    with pytest.raises(DescriptionError, match=r"item_weights\).*>= 0.*item 1"):
        setkit.compile({"kind": "submodular_base", "function": "coverage", "sets": [[0], [1]],
                        "item_weights": [1, -1]})
    with pytest.raises(DescriptionError, match=r"sets\[1\]\).*item indices"):
        setkit.compile({"kind": "submodular_base", "function": "coverage", "sets": [[0], ["x"]]})
    with pytest.raises(DescriptionError, match=r"function\).*one of concave_cardinality, cut, coverage"):
        setkit.compile({"kind": "submodular_base", "function": "entropy"})
    with pytest.raises(DescriptionError, match=r"function\).*not submodular.*S = \[\], i = 0, j = 1"):
        setkit.build("submodular_base", function=lambda S: len(S) ** 2, dim=3)
    with pytest.raises(DescriptionError, match=r"function\).*0 on the empty set"):
        setkit.build("submodular_base", function=lambda S: 1.0 + len(S), dim=3)
    with pytest.raises(DescriptionError, match=r"dim\).*len\(values\) - 1 = 2"):
        setkit.compile({"kind": "submodular_base", "function": "concave_cardinality", "values": [0, 2, 3], "dim": 3})


def test_python_function_above_the_enumeration_limit():
    # n = 20 > 16: membership through the projection (Fujishige), no cvxpy formulation; the same
    # function g(|S|) = sqrt(|S|) as a closed form is a permutahedron (exact sort + PAV projection)
    from setkit.errors import UnsupportedOperationError
    n = 20
    g = np.sqrt(np.arange(n + 1))
    K = setkit.build("submodular_base", function=lambda S: float(np.sqrt(len(S))), dim=n)
    Kc = setkit.compile({"kind": "submodular_base", "function": "concave_cardinality", "values": g.tolist()})
    rng = np.random.default_rng(7)
    Y = rng.standard_normal((3, n))
    np.testing.assert_allclose(K.project(Y), Kc.project(Y), atol=1e-8)
    np.testing.assert_allclose(K.lmo(Y), Kc.lmo(Y), atol=1e-12)
    np.testing.assert_allclose(K.violation(Y), Kc.violation(Y), atol=1e-8)
    np.testing.assert_array_equal(K.contains(Y), Kc.contains(Y))
    assert K.contains(Kc.project(Y)).all()
    with pytest.raises(UnsupportedOperationError, match="no cvxpy formulation"):
        K.with_backends(project="reference").project(Y[0])


def test_compiled_coverage_greedy_is_edmonds_greedy_on_prefixes():
    # the compiled greedy against the array version and against Edmonds' definition evaluated
    # directly: x_{o_j} = F(first j elements) - F(first j - 1), F by a set union of Python sets
    rng = np.random.default_rng(11)
    for trial in range(40):
        n, n_items = int(rng.integers(1, 14)), int(rng.integers(1, 9))
        sets = [sorted(set(int(u) for u in rng.integers(0, n_items, int(rng.integers(0, 4))))) for _ in range(n)]
        w = rng.uniform(0.0, 2.0, n_items)
        if not any(sets):
            sets[0] = [0]
        K = setkit.compile({"kind": "submodular_base", "function": "coverage", "sets": sets,
                            "item_weights": w.tolist()})
        fn = K.node.fn
        C = rng.integers(0, 3, (4, n)).astype(float)           # many ties: the stable order decides
        X = fn.greedy(C)
        np.testing.assert_allclose(X, fn.greedy_vectorized(C), atol=1e-12)
        for c, x in zip(C, X):
            order = np.argsort(c, kind="stable")
            covered, prev = set(), 0.0
            for i in order:
                covered |= set(sets[i])
                val = float(sum(w[u] for u in covered))
                assert x[i] == pytest.approx(val - prev, abs=1e-12)
                prev = val


def test_coverage_projection_of_the_benchmark_size_against_the_reference():
    # n = 100 (the benchmark instance): the min-norm point answer against the compact extended
    # formulation solved by cvxpy (the reference backend), and its Frank-Wolfe gap is measured here
    from setkit.families import lookup
    rng = np.random.default_rng(0)
    spec = lookup("submodular_base").benchmark_example(100, rng)
    spec.pop("about")
    K = setkit.compile(spec)
    y = 0.5 + 0.5 * rng.standard_normal(K.dim)
    p = K.project(y)
    r = K.with_backends(project="reference").project(y)
    np.testing.assert_allclose(p, r, atol=1e-5)
    q = K.lmo(p - y)
    assert float((p - y) @ (p - q)) <= 1e-10 * K.dim * max(1.0, float(np.abs(y).max())) ** 2


def test_compiled_coverage_loop_gives_the_python_loops_answer():
    # the compiled min-norm-point loop for coverage functions against the same method run cycle by
    # cycle from Python (same LMO, same stopping rules), on random instances with ties and empty sets,
    # and both against brute force where the 2^n table is small (Fujishige: the projection is in
    # B(F), and no vertex is farther along y - p than p: max_v <y - p, v - p> ~ 0, the variational
    # inequality of the projection)
    from setkit.kernels import minnorm
    rng = np.random.default_rng(21)
    for trial in range(25):
        n, n_items = int(rng.integers(2, 40)), int(rng.integers(1, 30))
        sets = [sorted(set(int(u) for u in rng.integers(0, n_items, int(rng.integers(0, 5))))) for _ in range(n)]
        if not any(sets):
            sets[0] = [0]
        K = setkit.compile({"kind": "submodular_base", "function": "coverage", "sets": sets,
                            "item_weights": np.round(rng.uniform(0.0, 2.0, n_items), 2).tolist()})
        fn = K.node.fn
        cov = (fn.indptr, fn.items_by_elem, fn.iw_c)
        y = rng.standard_normal(n) * float(rng.choice([0.1, 1.0, 10.0]))
        lmo = lambda c: fn.greedy(c[None, :])[0]          # noqa: E731
        p1, i1 = minnorm.project_by_min_norm_point(y, lmo, scale=K.node.scale(), coverage=cov)
        p2, i2 = minnorm.project_by_min_norm_point(y, lmo, scale=K.node.scale())
        np.testing.assert_allclose(p1, p2, atol=1e-9 * max(1.0, np.abs(y).max()))
        np.testing.assert_allclose(K.project(y), p1, atol=1e-12)
        q = fn.greedy((p1 - y)[None, :])[0]               # maximizes <y - p, v> over B(F)
        assert float((y - p1) @ (q - p1)) <= 1e-9 * n * max(1.0, np.abs(y).max()) ** 2
        if n <= 12:
            M, vals = all_values(K)
            assert (M.astype(float) @ p1 <= vals + 1e-9).all() and abs(p1.sum() - vals[-1]) <= 1e-9
