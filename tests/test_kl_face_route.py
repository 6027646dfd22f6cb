"""The generic KL face route (setkit.derivatives.kl_face_rows): Jacobian products of KL projections
onto sets with a linear form and no native KL Jacobian (flow, paths, polyhedron)."""
import warnings

import numpy as np
import pytest

import setkit
from setkit.derivatives import kl_face_rows
from setkit.families import lookup
from setkit.testing import check_derivatives


@pytest.mark.parametrize("kind", ["flow", "paths"])
def test_network_kl_jacobians_match_finite_differences_and_are_adjoint(kind):
    K = setkit.compile(lookup(kind).examples()[0])
    assert K.routes()["project_kl_jvp"].category == "form"
    assert K.routes()["project_kl_vjp"].category == "derived"
    # central finite differences (1e-6 relative) and <u, J v> = <J^T u, v> to 1e-10, in log coordinates
    check_derivatives(K, geometry="kl")


def test_simplex_written_as_a_polyhedron_gives_the_softmax_jacobian():
    # {x >= 0, sum x = 1} as a general polyhedron (exponential-cone reference for the projection): the
    # KL projection of e^t is softmax(t) and its Jacobian in t is diag(x) - x x^T (common practice)
    K = setkit.polyhedron(C=[[1.0, 1.0, 1.0, 1.0]], d=[1.0], lower=0.0)
    assert K.routes()["project_kl_jvp"].category == "form"
    rng = np.random.default_rng(4)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for _ in range(3):
            t, v = rng.normal(size=4), rng.normal(size=4)
            x = np.exp(t - t.max())
            x /= x.sum()
            expect = x * v - x * (x @ v)
            got = K.project_jvp(t, v, geometry="kl", log_input=True)
            assert np.allclose(got, expect, atol=1e-6)
            assert np.allclose(K.project_vjp(t, v, geometry="kl", log_input=True), expect, atol=1e-6)


def test_kl_face_rows_fixes_coordinates_at_an_upper_bound():
    # a budget written as a polyhedron, with coordinate 0 at its cap: it does not move; the rest move
    # as the softmax Jacobian of the remaining total (the capping rule, common practice)
    form = setkit.polyhedron(C=[[1.0, 1.0, 1.0]], d=[1.0], lower=0.0, upper=0.5).linear_form()
    x = np.array([[0.5, 0.2, 0.3]])
    v = np.array([[3.0, 1.0, -1.0]])
    got = kl_face_rows(form, x, v)[0]
    xf = x[0, 1:]
    expect = xf * v[0, 1:] - xf * (xf @ v[0, 1:]) / xf.sum()
    assert got[0] == 0.0 and np.allclose(got[1:], expect, atol=1e-15)
