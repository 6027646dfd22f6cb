"""The generic OSQP (projection) and HiGHS (LMO) backends on the vector families' linear forms."""
import numpy as np
import pytest

import setkit

POLYHEDRAL = [
    {"kind": "simplex", "dim": 6, "total": 2.0},
    {"kind": "simplex", "dim": 6, "mode": "at_most"},
    {"kind": "budget", "dim": 6, "total": 1.0, "lower": 0.05, "upper": [0.4, 0.3, 0.3, 0.5, 0.2, "inf"],
     "weights": [1, 1, 2, 1, 1, 1]},
    {"kind": "budget", "dim": 6, "total": 1.0, "upper": 0.5, "mode": "at_most"},
    {"kind": "ball", "dim": 6, "norm": 1, "radius": 1.5, "center": [1, 0, 0, 0, 0, -1]},
    {"kind": "ball", "dim": 6, "norm": "inf", "radius": 0.5},
    {"kind": "box", "dim": 6, "lower": [-1, 0, 0, 0, 0, 0], "upper": 1},
]


@pytest.mark.parametrize("spec", POLYHEDRAL, ids=lambda s: s["kind"] + "-" + str(s.get("norm", s.get("mode", ""))))
def test_osqp_projection_equals_native(spec, rng):
    K = setkit.compile(spec)
    O = K.with_backends(project="osqp")
    Y = np.concatenate([rng.standard_normal((4, 6)) * 2, K.project(rng.standard_normal((2, 6)))])
    d = O.project(Y, details=True)
    np.testing.assert_allclose(d.point, K.project(Y), atol=1e-6)
    assert all(s == "solved" for s in d.status)
    assert np.all(d.residual <= 1e-7)


@pytest.mark.parametrize("spec", POLYHEDRAL, ids=lambda s: s["kind"] + "-" + str(s.get("norm", s.get("mode", ""))))
def test_highs_lmo_value_equals_native(spec, rng):
    K = setkit.compile(spec)
    H = K.with_backends(lmo="highs", support="highs")
    C = np.concatenate([rng.standard_normal((4, 6)), np.round(rng.standard_normal((2, 6)))])
    v_native = np.einsum("ij,ij->i", C, K.lmo(C))
    v_highs = np.einsum("ij,ij->i", C, H.lmo(C))
    np.testing.assert_allclose(v_highs, v_native, atol=1e-8)
    np.testing.assert_allclose(H.support(C), K.support(C), atol=1e-8)
