"""Jacobian products of KL projections: permutahedron, transport/Birkhoff (implicit Sinkhorn), products."""
import math

import numpy as np
import pytest

import setkit
import setkit.testing as T

SETS = [
    {"kind": "permutahedron", "weights": [3.0, 2.0, 1.0, 0.5, 0.25]},
    {"kind": "permutahedron", "weights": [4.0, 1.0, 0.0, 0.0]},          # zero weights: zero block
    {"kind": "birkhoff", "n": 4},
    {"kind": "transport", "rows": [1.0, 2.0, 0.5], "cols": [1.5, 0.5, 1.0, 0.5]},
    {"kind": "transport", "rows": [2.0, 1.0], "cols": [0.5, 0.5, 1.0, 0.25, 0.75]},   # more columns than rows
    {"kind": "product", "of": [{"kind": "simplex", "dim": 2}, {"kind": "permutahedron", "weights": [1.0, 2.0]},
                               {"kind": "birkhoff", "n": 2}, {"kind": "box", "dim": 2, "lower": 0.1, "upper": 1.0}]},
]
IDS = ["permutahedron", "permutahedron-zero-weights", "birkhoff", "transport-3x4", "transport-2x5", "product"]


@pytest.mark.parametrize("spec", SETS, ids=IDS)
def test_kl_jacobians_are_native_and_pass_the_derivative_check(spec):
    K = setkit.compile(spec)
    assert K.routes()["project_kl_jvp"].category == "native"
    out = T.check_derivatives(K, seed=2, geometry="kl", rtol=1e-6, adjoint_tol=1e-10)
    assert all(o.worst <= 1.0 for o in out)


def _jacobian_by_differences(K, t, h=1e-6):
    n = K.dim
    J = np.empty((n, n))
    for j in range(n):
        e = np.zeros(n)
        e[j] = h
        P = K.project(np.stack([t + e, t - e]).reshape((2,) + K.shape), geometry="kl", log_input=True)
        J[:, j] = (P[0] - P[1]).reshape(-1) / (2 * h)
    return J


@pytest.mark.parametrize("spec", SETS, ids=IDS)
def test_log_coordinate_jacobian_matches_differences_and_is_symmetric(spec):
    """The vjp is served as the jvp because the log-coordinate Jacobian is symmetric (the KL projection in
    log coordinates is the gradient of a convex function): check that symmetry on the finite-difference
    Jacobian itself, independently of the kernels, and the jvp columns against it (1e-6 relative)."""
    K = setkit.compile(spec)
    n = K.dim
    rng = np.random.default_rng(5)
    t = rng.standard_normal(n)
    Jfd = _jacobian_by_differences(K, t)
    scale = max(1.0, float(np.abs(Jfd).max()))
    assert np.abs(Jfd - Jfd.T).max() <= 1e-6 * scale
    E = np.eye(n).reshape((n,) + K.shape)
    tt = np.broadcast_to(t.reshape(K.shape), E.shape)
    Jv = K.project_jvp(tt, E, geometry="kl", log_input=True).reshape(n, n).T       # column j = J e_j
    assert np.abs(Jv - Jfd).max() <= 1e-6 * scale
    U = rng.standard_normal((3, n))
    Vs = rng.standard_normal((3, n))
    shp = (3,) + K.shape
    JV = K.project_jvp(np.broadcast_to(t.reshape(K.shape), shp), Vs.reshape(shp), geometry="kl", log_input=True)
    JU = K.project_vjp(np.broadcast_to(t.reshape(K.shape), shp), U.reshape(shp), geometry="kl", log_input=True)
    for r in range(3):
        a = float(U[r] @ JV[r].reshape(-1))
        b = float(JU[r].reshape(-1) @ Vs[r])
        assert abs(a - b) <= 1e-10 * np.linalg.norm(U[r]) * np.linalg.norm(Vs[r])


@pytest.mark.parametrize("spec", SETS, ids=IDS)
def test_kl_jacobian_is_invariant_to_a_common_scale_of_y(spec):
    # the KL projection of c*y equals that of y on these sets (every point has the same coordinate sum on the
    # blocks with an equality; the box block is left out of the shift), so J(t + log c) = J(t) from 1e-6 to 1e6
    K = setkit.compile(spec)
    if spec["kind"] == "product":
        pytest.skip("the box block is not scale invariant")
    rng = np.random.default_rng(7)
    t = rng.standard_normal(K.shape)
    v = rng.standard_normal(K.shape)
    base = K.project_jvp(t, v, geometry="kl", log_input=True)
    for c in (1e-6, 1e6):
        got = K.project_jvp(t + math.log(c), v, geometry="kl", log_input=True)
        np.testing.assert_allclose(got, base, rtol=1e-7, atol=1e-9 * float(np.abs(base).max()))


def test_birkhoff_two_by_two_closed_form():
    # A diagonal scaling keeps the cross ratio y11 y22 / (y12 y21) (Sinkhorn 1964; derived by hand): the 2 x 2
    # doubly-stochastic projection is [[a, 1 - a], [1 - a, a]] with a = logistic(L / 2),
    # L = t11 + t22 - t12 - t21, so d a / d t11 = a (1 - a) / 2.
    K = setkit.compile({"kind": "birkhoff", "n": 2})
    t = np.array([[0.3, -1.2], [0.7, 2.0]])
    L = t[0, 0] + t[1, 1] - t[0, 1] - t[1, 0]
    a = 1.0 / (1.0 + math.exp(-L / 2))
    X = K.project(t, geometry="kl", log_input=True)
    np.testing.assert_allclose(X, [[a, 1 - a], [1 - a, a]], atol=1e-10)
    J = K.project_jvp(t, np.array([[1.0, 0.0], [0.0, 0.0]]), geometry="kl", log_input=True)
    d = a * (1 - a) / 2
    np.testing.assert_allclose(J, [[d, -d], [-d, d]], atol=1e-9)


def test_permutahedron_jacobian_by_brute_force_blocks():
    # the permutahedron of (3, 2, 1) at y = (100, 1, 1): x = (3, 1.5, 1.5), blocks {0} and {1, 2}
    # (worked by hand from the majorization constraints): the top coordinate is frozen, the last two share 3
    K = setkit.compile({"kind": "permutahedron", "weights": [3.0, 2.0, 1.0]})
    y = np.array([100.0, 1.0, 1.0])
    np.testing.assert_allclose(K.project(y, geometry="kl"), [3.0, 1.5, 1.5], atol=1e-12)
    J = K.project_jvp(y, np.array([5.0, 1.0, 0.0]), geometry="kl")      # with respect to y: J_t diag(1/y)
    np.testing.assert_allclose(J, [0.0, 0.75, -0.75], atol=1e-12)


def test_empty_batch_and_bad_tangent_shape():
    K = setkit.compile({"kind": "birkhoff", "n": 3})
    out = K.project_jvp(np.ones((0, 3, 3)), np.ones((0, 3, 3)), geometry="kl")
    assert out.shape == (0, 3, 3)
    with pytest.raises(setkit.InputError):
        K.project_jvp(np.ones((3, 3)), np.ones((2, 3, 3)), geometry="kl")
