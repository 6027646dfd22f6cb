"""Operators on dask arrays: lazy results, equal to the in-process answers, and a run on dask.distributed workers.

The in-process operator on the whole batch is the reference here (each block is one in-process call
on its rows); the in-process operators themselves are checked against the cvxpy reference and
outside sources in tests/families. Vector families are compared bit for bit; families whose kernels
use matrix products (transport, birkhoff, flow, cut-dual intersections, LP backends) within 1e-12
relative, because BLAS blocking depends on the batch size.
"""
from __future__ import annotations

import pickle
import threading

import numpy as np
import pytest

import setkit
from setkit.errors import InputError, UnsupportedOperationError
from setkit.families import lookup

da = pytest.importorskip("dask.array")
dask = pytest.importorskip("dask")

BIT_EXACT = ("simplex", "box", "budget", "ball", "permutahedron", "product", "hull", "affine")
ROUNDING = ("transport", "birkhoff", "flow", "polyhedron", "intersection")
OPERATORS = ("project", "distance", "lmo", "support", "contains", "violation")


def example_set(kind, i=0):
    return setkit.compile(lookup(kind).examples()[i])


def batch(K, b, seed, scale=3.0):
    return np.random.default_rng(seed).normal(size=(b,) + K.shape) * scale


def assert_same(a, b, exact):
    a, b = np.asarray(a), np.asarray(b)
    assert a.shape == b.shape and a.dtype == b.dtype
    if exact or a.dtype == bool:
        assert np.array_equal(a, b, equal_nan=True)
    else:
        np.testing.assert_allclose(a, b, rtol=1e-12, atol=1e-12 * max(1.0, float(np.nanmax(np.abs(b), initial=0.0))))


def test_results_are_lazy_dask_arrays():
    K = setkit.compile({"kind": "simplex", "dim": 6})
    Y = batch(K, 40, 0)
    calls = []

    def source(block):
        if block.size:                            # (dask probes with an empty block to infer the type)
            calls.append(block.shape)
        return block

    D = da.from_array(Y, chunks=(10, 6)).map_blocks(source, dtype=float, meta=np.empty((0, 0)))
    outs = {op: getattr(K, op)(D) for op in OPERATORS}
    outs["kl"] = K.project(abs(D) + 0.1, geometry="kl")
    outs["penalty"] = K.penalty(2.0).value(D)
    assert calls == []                            # nothing computed while building
    for op, out in outs.items():
        assert isinstance(out, da.Array), op
    assert outs["project"].shape == (40, 6) and outs["project"].chunks == ((10, 10, 10, 10), (6,))
    assert outs["distance"].shape == (40,) and outs["distance"].chunks == ((10, 10, 10, 10),)
    assert outs["contains"].dtype == bool and outs["project"].dtype == np.float64
    outs["distance"].compute()
    assert len(calls) == 4                        # one call per block once computed


@pytest.mark.parametrize("kind", BIT_EXACT + ROUNDING)
def test_every_operator_equals_the_in_process_answer(kind):
    K = example_set(kind)
    Y = batch(K, 23, 1)
    D = da.from_array(Y, chunks=(5,) + K.shape)
    for op in OPERATORS:
        lazy = getattr(K, op)(D)
        assert isinstance(lazy, da.Array)
        assert_same(lazy.compute(), getattr(K, op)(Y), kind in BIT_EXACT)


def test_trailing_axes_are_rechunked_whole_and_batch_axes_kept():
    K = setkit.compile({"kind": "transport", "rows": [1.0, 2.0, 3.0], "cols": [2.0, 2.0, 1.0, 1.0]})
    Y = np.random.default_rng(2).normal(size=(4, 5, 3, 4))
    D = da.from_array(Y, chunks=(2, 3, 2, 3))      # the point's axes cut: rechunked to whole points
    P = K.project(D)
    assert P.chunks == ((2, 2), (3, 2), (3,), (4,))
    assert_same(P.compute(), K.project(Y), False)
    d = K.distance(D)
    assert d.chunks == ((2, 2), (3, 2))
    assert_same(d.compute(), K.distance(Y), False)


def test_one_point_and_empty_batches():
    K = setkit.compile({"kind": "budget", "dim": 5, "total": 2.0, "upper": 0.7})
    y = np.array([3.0, -1.0, 0.5, 0.25, 2.0])
    assert_same(K.project(da.from_array(y)).compute(), K.project(y), True)
    d = K.distance(da.from_array(y))
    assert d.shape == () and float(d.compute()) == float(K.distance(y))
    E = da.from_array(np.zeros((0, 5)), chunks=(1, 5))
    assert K.project(E).compute().shape == (0, 5)
    assert K.support(E).compute().shape == (0,)


def test_kl_geometry_jacobian_products_certificate_and_penalties():
    K = setkit.compile({"kind": "simplex", "dim": 5})
    rng = np.random.default_rng(3)
    Y = np.exp(rng.normal(size=(3, 7, 5)))        # two batch axes
    D = da.from_array(Y, chunks=(2, 3, 5))
    assert_same(K.project(D, geometry="kl").compute(), K.project(Y, geometry="kl"), True)
    assert_same(K.project(da.log(D), geometry="kl", log_input=True).compute(),
                K.project(np.log(Y), geometry="kl", log_input=True), True)
    assert_same(K.distance(D, geometry="kl").compute(), K.distance(Y, geometry="kl"), True)
    V = rng.normal(size=Y.shape)
    assert_same(K.project_jvp(D, V).compute(), K.project_jvp(Y, V), True)     # V as NumPy: chunked like D
    assert_same(K.project_vjp(D, da.from_array(V, chunks=(1, 7, 5))).compute(), K.project_vjp(Y, V), True)
    P = K.project(Y)
    assert_same(K.certificate(D, P).compute(), K.certificate(Y, P), True)
    for pen in (K.penalty(2.0), K.penalty(2.0, "moreau", width=0.3), K.penalty(1.5, "ball", width=0.2, samples=8)):
        assert_same(pen.value(D).compute(), pen.value(Y), True)
        assert_same(pen.grad(D).compute(), pen.grad(Y), True)
        v, g = pen.value_and_grad(D)
        assert_same(v.compute(), pen.value(Y), True)
        assert_same(g.compute(), pen.grad(Y), True)


def test_membership_tolerances_scalar_per_point_and_lazy():
    K = setkit.compile({"kind": "box", "dim": 3, "lower": 0.0, "upper": 1.0})
    X = np.array([[1.05, 0.5, 0.5], [1.2, 0.5, 0.5], [0.5, 0.5, 0.5], [-0.01, 0.0, 1.0]])
    D = da.from_array(X, chunks=(3, 3))
    assert K.contains(D, tol=0.1).compute().tolist() == [True, False, True, True]
    tol = np.array([0.0, 0.3, 0.0, 0.001])
    assert K.contains(D, tol=tol).compute().tolist() == [False, True, True, False]
    assert K.contains(D, tol=da.from_array(tol, chunks=2)).compute().tolist() == [False, True, True, False]
    assert K.contains(D).compute().tolist() == K.contains(X).tolist()
    with pytest.raises(InputError, match="tol must be a number or one per point"):
        K.contains(D, tol=np.ones(3))
    with pytest.raises(InputError, match="finite number >= 0"):
        K.contains(D, tol=-1.0 * np.ones(4))


def test_input_errors():
    K = setkit.compile({"kind": "simplex", "dim": 4})
    with pytest.raises(InputError, match=r"trailing shape \(4,\).*dask array of shape \(10, 3\)"):
        K.project(da.zeros((10, 3), chunks=5))
    with pytest.raises(InputError, match="must be numeric"):
        K.project(da.zeros((10, 4), chunks=5, dtype=complex))
    with pytest.raises(InputError, match="unknown chunk sizes"):
        Z = da.from_array(np.arange(40.0).reshape(10, 4), chunks=(5, 4))
        K.distance(Z[Z[:, 0] > 3])
    with pytest.raises(UnsupportedOperationError, match="details=True"):
        K.project(da.zeros((10, 4), chunks=5), details=True)
    with pytest.raises(UnsupportedOperationError, match="details=True"):
        K.penalty(1.0).value(da.zeros((10, 4), chunks=5), details=True)
    Y = np.ones((12, 4))
    Y[9, 2] = np.nan
    lazy = K.project(da.from_array(Y, chunks=(4, 4)))        # values are checked when computed
    with pytest.raises(InputError, match=r"must be finite; got nan at index \(1, 2\).*first batch index is \(8,\)"):
        lazy.compute()
    with pytest.raises(InputError, match="KL geometry needs y > 0"):
        K.project(da.from_array(-np.ones((4, 4)), chunks=2), geometry="kl").compute()


def test_pickled_sets_rebuild_their_workspaces_per_copy_and_thread():
    K = setkit.compile({"kind": "polyhedron", "A": [[1.0, 2.0, 0.5], [0.0, 1.0, -1.0]], "b": [1.0, 0.5],
                        "lower": -1, "upper": 1})
    assert K.routes()["project"].provider == "osqp"
    Y = batch(K, 12, 4)
    P = K.project(Y)
    ws = K.workspace("osqp")
    K2 = pickle.loads(pickle.dumps(K))
    assert K2.workspace("osqp") is not ws and K.workspace("osqp") is ws
    other = []
    t = threading.Thread(target=lambda: other.append(K.workspace("osqp")))
    t.start()
    t.join()
    assert other[0] is not ws
    np.testing.assert_allclose(K2.project(Y), P, atol=1e-7)
    # lazily on the threaded scheduler: one workspace per dask thread, answers within the set's tolerance
    lazy = K.project(da.from_array(Y, chunks=(3, 3))).compute(scheduler="threads")
    np.testing.assert_allclose(lazy, P, atol=1e-7)


def test_a_set_enters_the_graph_once():
    K = setkit.compile({"kind": "simplex", "dim": 4})
    D = da.from_array(batch(K, 40, 5), chunks=(5, 4))
    graph = dict(K.project(D).__dask_graph__())
    holders = [k for k in graph if str(k).startswith("setkit-DecisionSet-")]
    assert len(holders) == 1
    # the same set keeps its key across calls, so two operators on it share the one task
    both = K.project(D) + K.distance(D)[:, None]
    assert len([k for k in dict(both.__dask_graph__()) if str(k).startswith("setkit-DecisionSet-")]) == 1


def test_local_cluster_with_two_worker_processes():
    distributed = pytest.importorskip("dask.distributed")
    sets = {"simplex": setkit.compile({"kind": "simplex", "dim": 50}),
            "permutahedron": example_set("permutahedron"),
            "polyhedron (osqp workspaces)": setkit.compile(
                {"kind": "polyhedron", "A": [[1.0, 2.0, 0.5], [0.0, 1.0, -1.0]], "b": [1.0, 0.5],
                 "lower": -1, "upper": 1})}
    inputs = {name: batch(K, 4000 if K.dim > 10 else 400, 6) for name, K in sets.items()}
    with distributed.LocalCluster(n_workers=2, processes=True, threads_per_worker=1, dashboard_address=None,
                                  env={"SETKIT_THREADS": "1"}) as cluster, distributed.Client(cluster) as client:
        pids = set(client.run(lambda: __import__("os").getpid()).values())
        assert len(pids) == 2 and __import__("os").getpid() not in pids
        lazy = {name: (K.project(da.from_array(inputs[name], chunks=(inputs[name].shape[0] // 8,) + K.shape)),
                       K.distance(da.from_array(inputs[name], chunks=(inputs[name].shape[0] // 8,) + K.shape)))
                for name, K in sets.items()}
        with distributed.get_task_stream(client) as stream:
            answers = dask.compute(lazy)[0]
        workers = {t["worker"] for t in stream.data if str(t["key"]).find("setkit-project") >= 0}
        assert len(workers) == 2                  # both worker processes computed blocks
    for name, K in sets.items():
        P, d = answers[name]
        if name.startswith("polyhedron"):         # OSQP warm starts depend on the order of solves
            np.testing.assert_allclose(P, K.project(inputs[name]), atol=1e-7)
            np.testing.assert_allclose(d, K.distance(inputs[name]), atol=1e-7)
            assert np.all(K.violation(P) <= 1e-7)
        else:
            assert_same(P, K.project(inputs[name]), True)
            assert_same(d, K.distance(inputs[name]), True)


def test_scenario_sweep_example_runs_quick():
    pytest.importorskip("dask.distributed")
    import os
    import re
    import subprocess
    import sys
    root = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
    env = dict(os.environ, PYTHONPATH=root + (os.pathsep + os.environ["PYTHONPATH"] if os.environ.get("PYTHONPATH") else ""))
    out = subprocess.run([sys.executable, os.path.join(root, "examples", "scenario_sweep.py"), "--quick"],
                         capture_output=True, text=True, env=env, timeout=300, cwd=root)
    assert out.returncode == 0, out.stderr[-3000:]
    text = out.stdout
    assert "kitchens: 24" in text and "weeks: 200" in text
    # online gradient descent meets its regret bound D*G*sqrt(T) (Zinkevich, 2003) in every scenario
    assert "regret within the bound D*G*sqrt(T) in every kitchen: yes" in text
    ratio = float(re.search(r"largest regret / bound: ([-0-9.eE+]+)", text).group(1))
    assert ratio <= 1.0
    assert "all decisions inside the set: yes" in text
    assert "same answers as in this process (first 3 kitchens, learner and LMO): yes" in text
