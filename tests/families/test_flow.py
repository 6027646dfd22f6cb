import pickle

import networkx as nx
import numpy as np
import pytest
import scipy.sparse as sp
from scipy.optimize import linprog

import setkit
from setkit.errors import DescriptionError, EmptySetError, SolveError, UnboundedDirectionError

from .setcheck import check_against_reference


def random_flow(rng, n=6, m=11, integral=False, lower=True):
    """A connected random digraph with a feasible flow x0 inside its bounds."""
    tails = list(range(1, n))
    heads = [int(rng.integers(0, k)) for k in range(1, n)]
    while len(tails) < m:
        a, b = rng.integers(0, n, 2)
        if a != b:
            tails.append(int(a))
            heads.append(int(b))
    x0 = rng.uniform(0, 5, m)
    lo = np.maximum(0, x0 - rng.uniform(0, 3, m)) if lower else np.zeros(m)
    hi = x0 + rng.uniform(0, 3, m)
    if integral:
        x0 = np.round(x0)
        lo = np.minimum(np.floor(lo), x0) if lower else lo
        hi = np.maximum(np.ceil(hi), x0)
    s = np.zeros(n)
    np.add.at(s, tails, x0)
    np.add.at(s, heads, -x0)
    edges = [{"from": int(a), "to": int(b), "capacity": float(c), "lower": float(lw)}
             for a, b, c, lw in zip(tails, heads, hi, lo)]
    return {"kind": "flow", "nodes": n, "edges": edges, "supply": {i: float(v) for i, v in enumerate(s)}}, x0


@pytest.mark.parametrize("seed", [0, 1])
def test_every_operator_matches_reference(seed):
    rng = np.random.default_rng(seed)
    spec, _ = random_flow(rng)
    K = setkit.compile(spec)
    assert K.routes()["project"].provider == "native"
    check_against_reference(K, rng)


def test_integral_data_give_integral_lmo_matching_networkx():
    # outside reference: networkx.network_simplex, a min-cost-flow routine exact on integer data
    # (it accepts parallel edges); networkx's demand is minus our net supply
    rng = np.random.default_rng(3)
    for trial in range(4):
        spec, _ = random_flow(rng, n=7, m=14, integral=True, lower=False)
        K = setkit.compile(spec)
        G = nx.DiGraph()
        for v, s in spec["supply"].items():
            G.add_node(v, demand=-int(round(s)))
        c = rng.integers(-5, 6, len(spec["edges"])).astype(float)
        M = nx.MultiDiGraph(G)
        for e, ce in zip(spec["edges"], c):
            M.add_edge(e["from"], e["to"], capacity=int(e["capacity"]), weight=int(ce))
        nx_cost, _flow = nx.network_simplex(M)
        x = K.lmo(c)
        assert np.array_equal(x, np.round(x)), "LMO answers for integral data are integral flows"
        assert float(c @ x) == pytest.approx(nx_cost, abs=1e-9)


def test_lmo_matches_scipy_linprog_on_float_data():
    # outside reference: scipy.optimize.linprog (interior point, explicit bounds) on the same LP
    rng = np.random.default_rng(4)
    spec, _ = random_flow(rng, n=8, m=16)
    K = setkit.compile(spec)
    n, m = 8, 16
    tail = [e["from"] for e in spec["edges"]]
    head = [e["to"] for e in spec["edges"]]
    B = np.zeros((n, m))
    B[tail, np.arange(m)] += 1
    B[head, np.arange(m)] -= 1
    s = np.array([spec["supply"][i] for i in range(n)])
    bounds = [(e["lower"], e["capacity"]) for e in spec["edges"]]
    for _ in range(3):
        c = rng.standard_normal(m)
        res = linprog(c, A_eq=B, b_eq=s, bounds=bounds, method="highs-ipm")
        assert res.status == 0
        assert float(c @ K.lmo(c)) == pytest.approx(res.fun, abs=1e-7)


def test_projection_matches_osqp_backend_on_a_larger_graph():
    rng = np.random.default_rng(5)
    spec, x0 = random_flow(rng, n=40, m=160)
    K = setkit.compile(spec)
    Y = x0 + 3 * rng.standard_normal((5, 160))
    P = K.project(Y)
    Po = K.with_backends(project="osqp").project(Y)
    assert np.abs(P - Po).max() <= 1e-7
    # certificate: Frank-Wolfe gap bounds (1/2)||p - p*||^2
    det = K.project(Y[0], details=True)
    assert det.status == "solved"
    assert det.residual <= 1e-9
    assert abs(det.certificate) <= 1e-9


def test_warm_started_trajectory_agrees_with_cold_solves():
    rng = np.random.default_rng(6)
    spec, x0 = random_flow(rng, n=30, m=90)
    K = setkit.compile(spec)
    Y = x0 + 2 * rng.standard_normal(90) + np.cumsum(0.01 * rng.standard_normal((20, 90)), axis=0)
    warm = np.array([K.project(y) for y in Y])
    pj = K.workspace("native")
    cold, info = pj.project(Y, warm=False)
    assert np.all(info["status"] == 0)
    assert np.abs(warm - cold).max() <= 1e-9


def test_projection_onto_a_point_inside_is_the_point():
    rng = np.random.default_rng(7)
    spec, x0 = random_flow(rng)
    K = setkit.compile(spec)
    assert np.allclose(K.project(x0), x0, atol=1e-10)
    assert K.distance(x0) <= 1e-10


def test_edges_from_csv_relative_to_the_description(tmp_path):
    (tmp_path / "data").mkdir()
    (tmp_path / "data" / "roads.csv").write_text("from,to,capacity,lower\nmill,depot,4,\nmill,shop,,1\ndepot,shop,3,\n")
    (tmp_path / "plan.yaml").write_text(
        "set:\n  kind: flow\n  name: grain\n  edges: data/roads.csv\n  supply: {mill: 5, shop: -5}\n")
    K = setkit.load(tmp_path / "plan.yaml")
    assert K.shape == (3,)
    assert K.node.node_names == ("mill", "depot", "shop")
    np.testing.assert_array_equal(K.node.capacity, [4, np.inf, 3])
    np.testing.assert_array_equal(K.node.lower, [0, 1, 0])
    x = K.lmo([1.0, 5.0, 1.0])
    np.testing.assert_allclose(x, [3.0, 2.0, 3.0])


def test_networkx_digraph_in_python():
    G = nx.DiGraph()
    G.add_node("a", supply=2)
    G.add_node("b")
    G.add_node("c", supply=-2)
    G.add_edge("a", "b", capacity=1.5)
    G.add_edge("b", "c")
    G.add_edge("a", "c", lower=0.25)
    K = setkit.compile({"kind": "flow", "edges": G})
    x = K.project([0.0, 0.0, 0.0])
    assert K.violation(x) <= 1e-9
    np.testing.assert_allclose(x, K.with_backends(project="reference").project([0.0, 0.0, 0.0]), atol=1e-6)


def test_list_edges_and_supply_list():
    K = setkit.compile({"kind": "flow", "nodes": ["s", "t"], "edges": [["s", "t", 3], ["s", "t"]],
                        "supply": [2, -2]})
    # projecting (5, 0) onto {x1 + x2 = 2, 0 <= x1 <= 3, x2 >= 0} (lower bounds default to 0):
    # the segment from (2, 0) to (0, 2); the nearest point is its end (2, 0)
    np.testing.assert_allclose(K.project([5.0, 0.0]), [2.0, 0.0], atol=1e-12)
    np.testing.assert_allclose(K.project([5.0, 0.0]), K.with_backends(project="reference").project([5.0, 0.0]),
                               atol=1e-7)
    np.testing.assert_allclose(K.project([1.0, 1.0]), [1.0, 1.0], atol=1e-12)


def test_unbalanced_supplies_are_empty():
    with pytest.raises(EmptySetError, match="sum to zero"):
        setkit.compile({"kind": "flow", "nodes": 2, "edges": [[0, 1]], "supply": {0: 2, 1: -1}})


def test_capacity_conflict_names_the_blocking_nodes():
    spec = {"kind": "flow", "nodes": ["a", "b", "c"],
            "edges": [{"from": "a", "to": "b", "capacity": 1}, {"from": "a", "to": "c", "capacity": 2},
                      {"from": "b", "to": "c"}],
            "supply": {"a": 5, "c": -5}}
    with pytest.raises(EmptySetError, match=r"the nodes \{a\} must send out a net 5.*at most 3") as exc:
        setkit.compile(spec)
    assert exc.value.location.key_path() == "supply"


def test_lower_above_capacity_is_located():
    with pytest.raises(EmptySetError, match="exceeds the capacity") as exc:
        setkit.compile({"kind": "flow", "nodes": 2, "edges": [[0, 1], {"from": 1, "to": 0, "capacity": 1, "lower": 2}]})
    assert exc.value.location.key_path() == "edges[1]"


@pytest.mark.parametrize("edges, where, match", [
    ([{"from": "a", "to": "z"}], "edges[0].to", "not among the nodes"),
    ([{"from": "a", "to": "b", "cap": 1}], "edges", "unknown key 'cap'"),
    ([{"from": "a", "to": "b", "capacity": "lots"}], "edges[0].capacity", "must be a number"),
    ([{"to": "b"}], "edges[0]", "no 'from' node"),
    ("roads.txt", "edges", "path to a .csv"),
    ([], "edges", "at least one edge"),
])
def test_bad_edges_are_reported_with_their_location(edges, where, match):
    with pytest.raises(DescriptionError, match=match) as exc:
        setkit.compile({"kind": "flow", "nodes": ["a", "b"], "edges": edges})
    assert exc.value.location.key_path() == where


def test_unbounded_lmo_reports_a_negative_cycle_but_projection_works():
    K = setkit.compile({"kind": "flow", "nodes": 3, "edges": [[0, 1], [1, 2], [2, 0], [0, 2, 1]],
                        "supply": {0: 1, 2: -1}})
    c = np.array([1.0, -3.0, 1.0, 0.0])
    with pytest.raises(UnboundedDirectionError, match="unbounded along the direction") as exc:
        K.lmo(c)
    d = exc.value.ray
    B = K.node.network().incidence().toarray()
    assert np.allclose(B @ d, 0) and c @ d < 0 and np.all(d >= 0)
    y = np.array([4.0, -1.0, 2.0, 3.0])
    np.testing.assert_allclose(K.project(y), K.with_backends(project="reference").project(y), atol=1e-6)
    # a bounded direction still has a minimizer
    x = K.lmo([1.0, 1.0, 1.0, 0.0])
    np.testing.assert_allclose(x, [0, 0, 0, 1], atol=1e-12)


def test_failed_convergence_raises_with_measurements():
    rng = np.random.default_rng(8)
    spec, x0 = random_flow(rng, n=30, m=90)
    K = setkit.compile(spec)
    pj = K.workspace("native")
    pj.max_newton = 1
    try:
        with pytest.raises(SolveError, match="did not converge.*balance residual") as exc:
            K.project(x0 + 10 * rng.standard_normal(90))
        assert exc.value.status == "not_converged"
    finally:
        pj.max_newton = 500


def test_pickles_and_rebuilds_its_workspace():
    rng = np.random.default_rng(9)
    spec, x0 = random_flow(rng)
    K = setkit.compile(spec)
    y = x0 + rng.standard_normal(x0.size)
    p = K.project(y)
    K2 = pickle.loads(pickle.dumps(K))
    np.testing.assert_allclose(K2.project(y), p, atol=1e-12)


def test_linear_form_is_the_incidence_system():
    rng = np.random.default_rng(10)
    spec, x0 = random_flow(rng)
    f = setkit.compile(spec).node.linear_form()
    assert sp.issparse(f.A_eq) and f.n_aux == 0
    assert np.abs(f.A_eq @ x0 - f.b_eq).max() <= 1e-12


def test_threads_get_their_own_workspaces():
    import threading
    rng = np.random.default_rng(11)
    spec, x0 = random_flow(rng, n=20, m=60)
    K = setkit.compile(spec)
    Y = x0 + 3 * rng.standard_normal((2, 30, 60))
    expect = [np.array([K.project(y) for y in Yk]) for Yk in Y]
    got = [None, None]

    def work(k):
        got[k] = np.array([K.project(y) for y in Y[k]])

    threads = [threading.Thread(target=work, args=(k,)) for k in range(2)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    for k in range(2):
        np.testing.assert_allclose(got[k], expect[k], atol=1e-9)
