import numpy as np
import pytest

import setkit
from setkit.kernels.network import NetworkProjector


@pytest.mark.parametrize("spec", [
    {"kind": "transport", "rows": [1, 2, 4], "cols": [2, 1, 3, 1]},
    {"kind": "transport", "rows": [0, 2, 4, 0], "cols": [0, 6]},      # zero margins: degenerate duals
    {"kind": "birkhoff", "n": 5},
    {"kind": "flow", "nodes": 4, "edges": [[0, 1, 2], [1, 2, 2], [0, 2], [2, 3, 5, 1], [3, 0, 1]],
     "supply": {0: 2, 3: -2}},
])
def test_converges_on_hard_points_and_matches_polished_osqp(spec):
    # points at scales 1e-3 .. 1e6, half of them rounded to integers (ties at breakpoints),
    # projected warm (trajectory order) and cold; all must converge and agree with polished OSQP
    rng = np.random.default_rng(0)
    K = setkit.compile(spec)
    g = K.node.network()
    pj = NetworkProjector(g.tail, g.head, g.lo, g.hi, g.supply)
    sc = 10.0 ** rng.uniform(-3, 6, 40)
    Y = sc[:, None] * rng.standard_normal((40, K.dim))
    Y[::2] = np.round(Y[::2])
    Xw, info_w = pj.project(Y, warm=True)
    Xc, info_c = pj.project(Y, warm=False)
    assert np.all(info_w["status"] == 0) and np.all(info_c["status"] == 0)
    Xo = K.with_backends(project="osqp").project(Y.reshape((-1,) + K.shape)).reshape(40, -1)
    s = np.maximum(1.0, np.abs(Y).max(axis=1))[:, None]
    assert np.abs((Xw - Xo) / s).max() <= 1e-8
    assert np.abs((Xc - Xo) / s).max() <= 1e-8
    # every answer is within the bounds exactly and balanced to the measured residual
    assert np.all(Xw >= g.lo - 0) and np.all(Xw <= g.hi)
    assert np.all(info_w["residual"] <= np.maximum(info_w["tol_r"], 1e-9 * s[:, 0]))


def test_reports_an_empty_component():
    # node 1 must receive 1 but its only edge points away from it with capacity 0: no balance possible
    pj = NetworkProjector(np.array([1]), np.array([0]), np.array([0.0]), np.array([0.0]), np.array([1.0, -1.0]))
    _, info = pj.project(np.zeros((1, 1)))
    assert info["status"][0] == 1      # not converged: the kernel never claims emptiness (decided at compile time)
