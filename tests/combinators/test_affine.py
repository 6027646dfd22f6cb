"""Affine images: scalar change of variables and general linear images M K + s."""
import numpy as np
import pytest

import setkit

from .fixtures import ball, check_against_reference


@pytest.mark.parametrize("scale", [2.5, -0.7, 1e-3, 1e3])
def test_scaled_simplex_against_reference(rng, scale):
    K = setkit.compile({"kind": "affine", "set": {"kind": "simplex", "dim": 5, "total": 2.0},
                        "scale": scale, "shift": rng.standard_normal(5).tolist()})
    assert K.node.is_scaled and K.routes()["project"].provider == "change_of_variables"
    check_against_reference(K, rng)


def test_scaled_box_linear_form_and_osqp(rng):
    K = setkit.compile({"kind": "affine", "set": {"kind": "box", "dim": 4, "lower": [-1, 0, 0, 2], "upper": 3},
                        "scale": -2.0, "shift": 1.0})
    f = K.node.linear_form()
    # {-2 x + 1 : lo <= x <= hi} is the box [-2 hi + 1, -2 lo + 1]
    assert np.allclose(f.lo, -2 * 3 + 1) and np.allclose(f.hi, [3, 1, 1, -3])
    y = rng.standard_normal((5, 4)) * 4
    assert np.allclose(K.with_backends(project="osqp").project(y), K.project(y), atol=1e-6)
    assert np.allclose(K.project(y), np.clip(y, f.lo, f.hi))
    check_against_reference(K, rng)


def test_scalar_transforms_are_exact(rng):
    # P_{aK+s}(y) = a P_K((y - s)/a) + s and sigma_{aK+s}(c) = sigma_K(a c) + <c, s>
    # (Bauschke and Combettes 2011, Prop. 29.1, and Rockafellar, Convex Analysis, 1970, Sec. 13; from memory)
    a, s = -3.0, rng.standard_normal(4)
    S = setkit.compile({"kind": "simplex", "dim": 4})
    K = setkit.compile({"kind": "affine", "set": {"kind": "simplex", "dim": 4}, "scale": a, "shift": s.tolist()})
    y, c = rng.standard_normal(4) * 5, rng.standard_normal(4)
    assert np.allclose(K.project(y), a * S.project((y - s) / a) + s, atol=1e-13)
    assert K.support(c) == pytest.approx(S.support(a * c) + c @ s)
    assert K.distance(y) == pytest.approx(abs(a) * S.distance((y - s) / a))
    assert np.allclose(K.lmo(c), a * S.lmo(a * c) + s)
    x_in = a * np.array([0.1, 0.2, 0.3, 0.4]) + s
    assert K.contains(x_in) and not K.contains(x_in + 0.1)


def test_linear_image_of_a_box_matches_scipy_lsq_linear(rng):
    # projection onto M·box + s is a bounded least-squares problem: scipy.optimize.lsq_linear
    from scipy.optimize import linprog, lsq_linear
    d, m = 6, 4
    M = rng.standard_normal((m, d))
    lo, hi = -np.ones(d), 2 * np.ones(d)
    s = rng.standard_normal(m)
    K = setkit.compile({"kind": "affine", "set": {"kind": "box", "dim": d, "lower": -1, "upper": 2},
                        "matrix": M.tolist(), "shift": s.tolist()})
    assert K.routes()["project"].provider == "projected_gradient"
    for _ in range(3):
        y = rng.standard_normal(m) * 10
        res = lsq_linear(M, y - s, bounds=(lo, hi), tol=1e-14, method="bvls")
        assert np.allclose(K.project(y), M @ res.x + s, atol=1e-6)
        c = rng.standard_normal(m)
        lp = linprog(-(M.T @ c), bounds=list(zip(lo, hi)), method="highs")   # scipy.optimize.linprog
        assert K.support(c) == pytest.approx(-lp.fun + c @ s, abs=1e-9)
    check_against_reference(K, rng)


def test_linear_image_of_a_simplex_and_of_a_ball(rng):
    M = rng.standard_normal((3, 5))
    K = setkit.compile({"kind": "affine", "set": {"kind": "simplex", "dim": 5}, "matrix": M.tolist()})
    check_against_reference(K, rng)
    B = setkit.compile({"kind": "affine", "set": ball(np.zeros(4), 1.0), "matrix": rng.standard_normal((6, 4)).tolist(),
                        "shift": 0.5})
    assert B.shape == (6,)
    check_against_reference(B, rng, scales=(1e-3, 1.0, 10.0))


def test_linear_image_without_native_projection_uses_osqp(rng):
    from .fixtures import halfspaces
    cube = halfspaces(np.vstack([np.eye(3), -np.eye(3)]), np.ones(6))
    K = setkit.compile({"kind": "affine", "set": cube, "matrix": [[1.0, 2.0, 0.0], [0.0, 1.0, -1.0]]})
    assert not K.node.is_scaled and K.routes()["lmo"].provider == "pullback"
    assert K.routes()["project"].provider == "osqp"
    # the image of the cube [-1,1]^3 under this M: support in direction e_1 is |1| + |2| = 3
    assert K.support([1.0, 0.0]) == pytest.approx(3.0)


def test_linear_image_certificate_and_details(rng):
    K = setkit.compile({"kind": "affine", "set": {"kind": "simplex", "dim": 6},
                        "matrix": rng.standard_normal((4, 6)).tolist()})
    d = K.project(rng.standard_normal((3, 4)), details=True)
    assert list(d.status) == ["solved"] * 3
    assert np.all(d.certificate <= 1e-12) and all("Frank-Wolfe gap" in s for s in d.backend_status)


def test_bad_descriptions():
    with pytest.raises(setkit.DescriptionError, match="scale must be nonzero"):
        setkit.compile({"kind": "affine", "set": {"kind": "simplex", "dim": 2}, "scale": 0})
    with pytest.raises(setkit.DescriptionError, match=r"matrix must have 2 columns .*got shape \(3, 3\)"):
        setkit.compile({"kind": "affine", "set": {"kind": "simplex", "dim": 2}, "matrix": np.eye(3).tolist()})
    with pytest.raises(setkit.DescriptionError, match=r"shift must be a number or an array of shape \(2,\)"):
        setkit.compile({"kind": "affine", "set": {"kind": "simplex", "dim": 2}, "shift": [1, 2, 3]})
