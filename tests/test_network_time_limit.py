"""Network projections under setkit.time_limit: chunked Newton steps (large networks) and far-point rounds.

Networks of ``NetworkProjector.chunk_edges`` edges or more run their Newton steps in chunks while a
time limit is active, checking the deadline in between. The tests lower that threshold so a small
network takes the chunked path: its answers must equal the one-call path's, and a deadline must stop
it with setkit's TimeLimitError. A far point on a 50,000-edge network took 892 s before (measured,
80,000 edges, benchmarks/flow_scaling-style instance) with nothing to stop it.
"""
import time

import numpy as np
import pytest

import setkit
from setkit.errors import TimeLimitError
from setkit.kernels.network import NetworkProjector


def _grid_flow(k, rng):
    """A k x k grid with edges both ways, capacities 1..5, one source corner and one sink corner."""
    nodes = k * k
    edges = []
    for r in range(k):
        for c in range(k):
            v = r * k + c
            for w in ((v + 1) if c + 1 < k else None, (v + k) if r + 1 < k else None):
                if w is not None:
                    edges.append([v, w, float(rng.integers(1, 6))])
                    edges.append([w, v, float(rng.integers(1, 6))])
    return {"kind": "flow", "nodes": nodes, "edges": edges, "supply": {0: 3.0, nodes - 1: -3.0}}


@pytest.fixture()
def chunked(monkeypatch):
    monkeypatch.setattr(NetworkProjector, "chunk_edges", 0)
    monkeypatch.setattr(NetworkProjector, "chunk_steps", 5)


def test_chunked_path_gives_the_same_answers(chunked):
    rng = np.random.default_rng(0)
    spec = _grid_flow(8, rng)
    g = setkit.compile(spec).node.network()
    Y = np.concatenate([rng.standard_normal((3, g.n_edges)) * s for s in (1.0, 1e3, 1e12)])
    plain = NetworkProjector(g.tail, g.head, g.lo, g.hi, g.supply)
    X0, info0 = plain.project(Y, warm=False)
    with setkit.time_limit(600):
        pj = NetworkProjector(g.tail, g.head, g.lo, g.hi, g.supply)
        X1, info1 = pj.project(Y, warm=False)
    assert np.all(info0["status"] == 0) and np.all(info1["status"] == 0)
    # both answers are the projection; compared with the OSQP backend (polished) as well
    assert np.abs(X0 - X1).max() <= 1e-9 * max(1.0, np.abs(Y).max()) + 1e-9
    K = setkit.compile(spec)
    Xo = K.with_backends(project="osqp").project(Y[:6])
    assert np.abs(X1[:6] - Xo).max() <= 1e-6 * 1e3
    assert np.all(X1 >= g.lo) and np.all(X1 <= g.hi)
    assert np.all(info1["iterations"] >= 1)


def test_a_deadline_stops_a_chunked_projection(chunked):
    rng = np.random.default_rng(1)
    K = setkit.compile(_grid_flow(12, rng))
    y = rng.standard_normal(K.dim) * 1e16
    t0 = time.perf_counter()
    with pytest.raises(TimeLimitError, match="flow polytope"):
        with setkit.time_limit(1e-6):
            K.project(y)
    assert time.perf_counter() - t0 < 5.0
