"""The persistent LP workspace (setkit/backends/_lp.py) behind the highs backend and the network LMOs."""
import pickle
import threading

import networkx as nx
import numpy as np
import pytest
import scipy.sparse as sp
from scipy.optimize import linprog

import setkit
from setkit.backends import _lp
from setkit.backends.highs import HighsBackend
from setkit.errors import EmptySetError, UnboundedDirectionError
from setkit.forms import LinearForm

pytestmark = pytest.mark.skipif(not _lp.highspy_available(), reason="highspy is not installed")


def random_polyhedron(rng, n=4):
    """A bounded polytope around a known interior point, with one equality row."""
    m = 2 * n
    A = rng.standard_normal((m, n))
    x0 = rng.uniform(-0.5, 0.5, n)
    b = A @ x0 + rng.uniform(0.1, 1.0, m)
    C = rng.standard_normal((1, n))
    return {"kind": "polyhedron", "A": A.tolist(), "b": b.tolist(), "C": C.tolist(), "d": (C @ x0).tolist(),
            "lower": -2.0, "upper": 2.0}


def random_flow(rng, n=12, m=30, integral=False):
    tails = list(range(1, n))
    heads = [int(rng.integers(0, k)) for k in range(1, n)]
    while len(tails) < m:
        a, b = rng.integers(0, n, 2)
        if a != b:
            tails.append(int(a))
            heads.append(int(b))
    x0 = rng.uniform(0, 6, m)
    lo = np.maximum(0, x0 - rng.uniform(0, 3, m))
    hi = x0 + rng.uniform(0, 3, m)
    if integral:
        x0 = np.round(x0)
        lo, hi = np.minimum(np.floor(lo), x0), np.maximum(np.ceil(hi), x0)
    s = np.zeros(n)
    np.add.at(s, tails, x0)
    np.add.at(s, heads, -x0)
    edges = [{"from": int(a), "to": int(b), "capacity": float(c), "lower": float(w)}
             for a, b, c, w in zip(tails, heads, hi, lo)]
    return {"kind": "flow", "nodes": n, "edges": edges, "supply": {i: float(v) for i, v in enumerate(s)}}


def linprog_value(f, c):
    # outside reference: scipy.optimize.linprog (HiGHS interior point, explicit bounds) on the same form
    res = linprog(np.concatenate([c, np.zeros(f.n_aux)]),
                  A_ub=f.A_ub if f.A_ub.shape[0] else None, b_ub=f.b_ub if f.A_ub.shape[0] else None,
                  A_eq=f.A_eq if f.A_eq.shape[0] else None, b_eq=f.b_eq if f.A_eq.shape[0] else None,
                  bounds=np.column_stack([f.lo, f.hi]), method="highs-ipm")
    assert res.status == 0
    return res.fun


def sets(rng):
    return [setkit.compile(random_polyhedron(rng)),
            setkit.compile({"kind": "transport", "rows": [3, 1.5, 2.5], "cols": [1, 2, 2, 2]}),
            setkit.compile(random_flow(rng)),
            setkit.load("catalog/kiln-glaze.yaml"),
            setkit.load("catalog/canal-network.yaml")]


@pytest.mark.parametrize("seed", [0, 1])
def test_workspace_equals_linprog_and_the_reference(seed):
    rng = np.random.default_rng(seed)
    for K in sets(rng):
        f = K.node.linear_form()
        C = rng.standard_normal((6, K.dim))
        C[1] = 0.0                                   # every point is a minimizer: any vertex will do
        C[2] = np.round(C[2])                        # ties between vertices are likely
        ref = K.with_backends(lmo="reference").lmo(C.reshape((-1,) + K.shape)).reshape(len(C), -1)
        for Kb in (K, K.with_backends(lmo="highs")):
            X = Kb.lmo(C.reshape((-1,) + K.shape)).reshape(len(C), -1)
            assert np.all(f.violation_x(X) <= 1e-8 * K.node.scale())
            for c, x, r in zip(C, X, ref):
                assert c @ x == pytest.approx(linprog_value(f, c), abs=1e-7 * max(1.0, np.abs(c).sum()))
                assert c @ x <= c @ r + 1e-6 * max(1.0, np.abs(c).sum())
            s = Kb.support(C.reshape((-1,) + K.shape))
            np.testing.assert_allclose(s, np.einsum("ij,ij->i", C, Kb.lmo(-C.reshape((-1,) + K.shape))
                                                    .reshape(len(C), -1)), atol=1e-9)


def test_highspy_and_linprog_workspaces_agree():
    rng = np.random.default_rng(3)
    K = setkit.compile(random_flow(rng, 20, 60))
    f = K.node.linear_form()
    hw = _lp.form_workspace(f, "flow")
    lw = _lp.LinprogWorkspace(f.A_eq, f.b_eq, f.A_ub, f.b_ub, f.lo, f.hi, "flow")
    assert hw.engine == "highspy" and lw.engine == "linprog"
    for _ in range(8):
        c = rng.standard_normal(f.n)
        a, b = hw.minimize(c), lw.minimize(c)
        assert a.status == b.status == "optimal"
        assert c @ a.z == pytest.approx(c @ b.z, abs=1e-8)
        assert a.residual <= 1e-9


def test_warm_resolves_along_a_trajectory_and_cold_ones_for_scattered_directions():
    rng = np.random.default_rng(4)
    K = setkit.compile(random_flow(rng, 60, 240))
    f = K.node.linear_form()
    ws = _lp.form_workspace(f, "flow")
    c = rng.standard_normal(f.n)
    for _ in range(15):
        c = c + 0.02 * rng.standard_normal(f.n)      # a learner's slowly turning gradient
        a = ws.minimize(c)
        assert c @ a.z == pytest.approx(linprog_value(f, c), abs=1e-7 * np.abs(c).sum())
    assert ws.stats["cold"] == 1 and ws.stats["warm"] == 14      # only the first solve starts cold
    assert "warm primal simplex" in a.text
    # unrelated directions: warm attempts stop at their pivot limit, then back off
    ws2 = _lp.form_workspace(f, "flow")
    for _ in range(30):
        c = rng.standard_normal(f.n)
        a = ws2.minimize(c)
        assert c @ a.z == pytest.approx(linprog_value(f, c), abs=1e-7 * np.abs(c).sum())
    st = ws2.stats
    assert st["warm"] + st["cold"] == 30
    # after a miss the next calls go cold without trying: far fewer attempts than calls
    assert st["warm_missed"] + st["warm"] < 15


def test_batch_details_report_the_solver_words():
    K = setkit.load("catalog/kiln-glaze.yaml").with_backends(lmo="highs")
    det = K.lmo(np.random.default_rng(0).standard_normal((3, 4)), details=True)
    assert all(s == "solved" for s in det.status)
    assert all("simplex" in t for t in det.backend_status)


def test_integral_flow_data_give_integral_answers_matching_networkx():
    rng = np.random.default_rng(5)
    for _ in range(3):
        spec = random_flow(rng, 10, 25, integral=True)
        K = setkit.compile(spec)
        g = K.node.network()
        for _ in range(4):
            c = rng.integers(-5, 6, g.n_edges).astype(float)
            for Kb in (K, K.with_backends(lmo="highs")):
                x = Kb.lmo(c)
                assert np.array_equal(x, np.round(x))     # vertices of a TU system with integral data
            # outside reference: networkx.min_cost_flow (network simplex, exact on integers), with the
            # lower bounds shifted out (x = lo + y, 0 <= y <= hi - lo)
            G = nx.DiGraph()
            supply = g.supply - np.bincount(g.tail, g.lo, g.n_nodes) + np.bincount(g.head, g.lo, g.n_nodes)
            for v in range(g.n_nodes):
                G.add_node(v, demand=-int(supply[v]))
            base = float(c @ g.lo)
            for e in range(g.n_edges):
                u, v = int(g.tail[e]), int(g.head[e])
                mid = ("mid", e)    # split edges so parallel ones stay distinct
                G.add_edge(u, mid, weight=int(c[e]), capacity=int(g.hi[e] - g.lo[e]))
                G.add_edge(mid, v, weight=0, capacity=int(g.hi[e] - g.lo[e]))
            assert c @ K.lmo(c) == pytest.approx(base + nx.min_cost_flow_cost(G), abs=1e-9)


def test_unbounded_polyhedron_reports_a_recession_ray():
    K = setkit.compile({"kind": "polyhedron", "A": [[1, -1], [-1, -1]], "b": [1, 1]})
    for Kb in (K, K.with_backends(lmo="highs")):
        ws_dirs = [np.array([0.2, -1.0]), np.array([-1.0, -3.0])]
        for c in ws_dirs:
            with pytest.raises(UnboundedDirectionError) as exc:
                Kb.lmo(c)
            d = exc.value.ray
            # worked by hand: the recession cone is {x1 - x2 <= 0, -x1 - x2 <= 0} (x2 >= |x1|)
            assert d[1] >= abs(d[0]) - 1e-12 and c @ d < 0
        # the same workspace solves a bounded direction after the unbounded ones
        np.testing.assert_allclose(Kb.lmo([0.0, 1.0]), [0.0, -1.0], atol=1e-9)


def test_unbounded_flow_reports_the_cycle_then_solves_again():
    K = setkit.compile({"kind": "flow", "nodes": 3, "edges": [[0, 1], [1, 2], [2, 0], [0, 2, 1]],
                        "supply": {0: 1, 2: -1}})
    np.testing.assert_allclose(K.lmo([1.0, 1.0, 1.0, 0.0]), [0, 0, 0, 1], atol=1e-12)
    with pytest.raises(UnboundedDirectionError, match="cycle") as exc:
        K.lmo([1.0, -3.0, 1.0, 0.0])
    np.testing.assert_allclose(exc.value.ray, [1, 1, 1, 0])
    # worked by hand: with positive costs the cheapest plan ships the unit on the capacitated edge
    np.testing.assert_allclose(K.lmo([1.0, 1.0, 1.0, 0.5]), [0, 0, 0, 1], atol=1e-12)


class _FormNode:
    """A stand-in node: only what the backend reads (the compile-time checks would refuse it)."""

    label = "polyhedron 'stub'"

    def __init__(self, form):
        self._form = form

    def linear_form(self):
        return self._form


def test_empty_form_is_reported_as_empty():
    # x1 + x2 <= -1 with x >= 0: empty; x1 free upward, so HiGHS may first say 'infeasible or unbounded'
    f = LinearForm.build(2, A_ub=sp.csr_matrix([[1.0, 1.0]]), b_ub=[-1.0], lo=[0.0, 0.0])
    for ws in (_lp.form_workspace(f), _lp.LinprogWorkspace(f.A_eq, f.b_eq, f.A_ub, f.b_ub, f.lo, f.hi)):
        assert ws.minimize(np.array([-1.0, 0.0])).status == "infeasible"
        assert ws.minimize(np.array([1.0, 1.0])).status == "infeasible"
    with pytest.raises(EmptySetError, match="empty"):
        HighsBackend(_FormNode(f)).lmo(np.array([[-1.0, 0.0]]))


def test_unbounded_or_infeasible_is_decided():
    # feasible and unbounded below along x1: a definite 'unbounded', never 'empty'
    f = LinearForm.build(2, A_eq=sp.csr_matrix([[0.0, 1.0]]), b_eq=[1.0])
    ws = _lp.form_workspace(f)
    assert ws.minimize(np.array([1.0, 0.0])).status == "unbounded"
    a = ws.minimize(np.array([0.0, 1.0]))
    assert a.status == "optimal" and a.z[1] == pytest.approx(1.0)


def test_threads_use_their_own_workspaces():
    rng = np.random.default_rng(6)
    K = setkit.compile(random_flow(rng, 30, 90))
    Kh = K.with_backends(lmo="highs")
    C = rng.standard_normal((24, K.dim))
    want = np.array([c @ K.with_backends(lmo="highs").lmo(c) for c in C])   # one fresh workspace, serial
    errors = []

    def work(KK, order):
        try:
            for k in order:
                v = C[k] @ KK.lmo(C[k])
                if abs(v - want[k]) > 1e-8 * max(1.0, abs(want[k])):
                    errors.append((k, v, want[k]))
        except Exception as exc:   # noqa: BLE001 - reported below
            errors.append(repr(exc))

    threads = [threading.Thread(target=work, args=(KK, rng.permutation(len(C)))) for KK in (K, K, Kh, Kh)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    assert errors == []


def test_sets_pickle_after_their_workspaces_were_used():
    for K in (setkit.load("catalog/canal-network.yaml"), setkit.load("catalog/kiln-glaze.yaml").with_backends(
            lmo="highs")):
        c = np.linspace(-1, 1, K.dim).reshape(K.shape)
        x = K.lmo(c)
        K2 = pickle.loads(pickle.dumps(K))
        np.testing.assert_allclose(K2.lmo(c), x, atol=1e-12)


def test_fallback_without_highspy(monkeypatch):
    monkeypatch.setattr(_lp, "highspy_available", lambda: False)
    K = setkit.load("catalog/kiln-glaze.yaml")
    Kh = K.with_backends(lmo="highs")
    assert isinstance(HighsBackend(K.node).ws, _lp.LinprogWorkspace)
    c = np.array([1.0, -2.0, 0.5, 3.0])
    assert c @ Kh.lmo(c) == pytest.approx(linprog_value(K.node.linear_form(), c), abs=1e-9)
    Kf = setkit.load("catalog/harbor-bakery-routes.yaml")
    cf = np.arange(Kf.dim, dtype=float) - 4
    assert cf @ Kf.lmo(cf) == pytest.approx(linprog_value(Kf.node.linear_form(), cf), abs=1e-7)
