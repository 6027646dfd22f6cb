"""Jacobian products of projections: finite differences, adjointness, closed forms, kinks, edges.

Sources of the closed forms are named beside each check.
"""
from __future__ import annotations

import numpy as np
import pytest
import scipy.linalg

import setkit
import setkit.testing
from setkit import derivatives as D
from setkit.agreement import reference
from setkit.errors import InputError, UnsupportedOperationError
from setkit.families import known_kinds, lookup

# sets whose projection has no Jacobian product in setkit yet (stated in the report and below):
# they must refuse with UnsupportedOperationError, never answer
UNSUPPORTED = {
    # a matrix image M K + s: its linear form carries the part's coordinates as auxiliaries
    ("affine", 1), ("affine", 2),
}
UNSUPPORTED_KINDS: set = set()   # every family serves project_jvp / project_vjp


def _examples():
    out = []
    for kind in known_kinds():
        for i, spec in enumerate(lookup(kind).examples()):
            out.append(pytest.param(kind, i, spec, id=f"{kind}-{i}"))
    return out


def _jacobian(K, y, op="project_jvp"):
    n = K.dim
    E = np.eye(n).reshape((n,) + tuple(K.shape))
    Y = np.broadcast_to(np.asarray(y, float).reshape(tuple(K.shape)), E.shape)
    return np.asarray(getattr(K, op)(Y, E)).reshape(n, n).T      # column j = J e_j


@pytest.mark.parametrize("kind,i,spec", _examples())
def test_every_example_matches_finite_differences_and_is_adjoint(kind, i, spec):
    """check_derivatives: central differences (1e-6 relative) away from kinks, adjointness 1e-10, batches."""
    K = setkit.compile(spec)
    if (kind, i) in UNSUPPORTED or kind in UNSUPPORTED_KINDS:
        with pytest.raises(UnsupportedOperationError, match="project_jvp"):
            K.project_jvp(np.zeros(K.shape), np.ones(K.shape))
        return
    out = setkit.testing.check_derivatives(K, seed=i, points=6)
    assert [o.name for o in out] == ["derivatives/finite-differences", "derivatives/adjoint", "derivatives/batch"]
    assert all(o.worst <= 1.0 and o.cases >= 3 for o in out)


def test_check_derivatives_catches_a_wrong_jacobian(monkeypatch):
    """A simplex kernel returning v (the identity) instead of the face projector is reported."""
    from setkit.families.simplex import Simplex
    monkeypatch.setattr(Simplex, "project_jvp", lambda self, Y, V: np.array(V, dtype=float))
    K = setkit.compile({"kind": "simplex", "dim": 4})
    with pytest.raises(AssertionError, match="finite differences"):
        setkit.testing.check_derivatives(K, seed=0)


# -- closed forms ---------------------------------------------------------------------------------
def test_simplex_jacobian_is_the_sparsemax_jacobian():
    """J = diag(s) - s s^T / |S| with s the support indicator (Martins and Astudillo 2016,
    "From softmax to sparsemax", from memory): the projector onto the face's affine hull."""
    K = setkit.compile({"kind": "simplex", "dim": 5, "total": 2.0})
    y = np.array([1.3, -0.4, 0.9, 2.1, -3.0])
    p = K.project(y)
    s = (p > 0).astype(float)
    want = np.diag(s) - np.outer(s, s) / s.sum()
    np.testing.assert_allclose(_jacobian(K, y), want, atol=1e-15)
    np.testing.assert_allclose(_jacobian(K, y, "project_vjp"), want.T, atol=1e-15)


def test_l2_ball_jacobian_closed_form():
    """Outside: (r/||z||)(I - z z^T/||z||^2), z = y - c (derivative of the radial scaling, common practice)."""
    c = np.array([0.5, -1.0, 2.0])
    K = setkit.compile({"kind": "ball", "dim": 3, "norm": 2, "radius": 1.5, "center": c.tolist()})
    y = np.array([3.0, 1.0, -1.0])
    z = y - c
    nz = np.linalg.norm(z)
    want = 1.5 / nz * (np.eye(3) - np.outer(z, z) / nz ** 2)
    np.testing.assert_allclose(_jacobian(K, y), want, atol=1e-15)
    np.testing.assert_allclose(_jacobian(K, c + 0.1), np.eye(3))          # inside: the identity


def test_budget_jacobian_is_the_weighted_face_projector():
    """On the free set F: I - w_F w_F^T / ||w_F||^2 (projector onto {<w_F, d> = 0}, linear algebra)."""
    w = np.array([1.0, 2.0, 0.5, 1.5])
    K = setkit.compile({"kind": "budget", "dim": 4, "weights": w.tolist(), "total": 3.0, "upper": 1.2})
    y = np.array([0.8, 0.6, 5.0, -2.0])
    p = K.project(y)
    F = (p > 0) & (p < 1.2)
    assert F.sum() >= 2 and not F.all()
    wf = np.where(F, w, 0.0)
    want = np.diag(F.astype(float)) - np.outer(wf, wf) / (wf @ wf)
    np.testing.assert_allclose(_jacobian(K, y), want, atol=1e-14)


def test_permutahedron_jacobian_worked_examples():
    """Hand-worked: w = (3, 2, 1). At y = 0 the pool-adjacent-violators fit pools all three
    coordinates (p = (2, 2, 2)), so J = I - 1 1^T/3; far out in a vertex's normal cone
    (y = (30, 20, 10)) every block is a single coordinate, J = 0."""
    K = setkit.compile({"kind": "permutahedron", "weights": [3.0, 2.0, 1.0]})
    np.testing.assert_allclose(K.project([0.1, 0.0, -0.1]), [2.1, 2.0, 1.9])
    np.testing.assert_allclose(_jacobian(K, [0.1, 0.0, -0.1]), np.eye(3) - 1.0 / 3.0, atol=1e-15)
    np.testing.assert_allclose(_jacobian(K, [30.0, 20.0, 10.0]), 0.0, atol=0)
    # y = (4, 1.05, 0.95): sorted y - w = (1, -0.95, -0.05); the last two violate and pool (mean -0.5),
    # so the blocks are {0} and {1, 2}: J = 0 on coordinate 0 and I - 1 1^T/2 on {1, 2}
    J = _jacobian(K, [4.0, 1.05, 0.95])
    np.testing.assert_allclose(J, [[0, 0, 0], [0, 0.5, -0.5], [0, -0.5, 0.5]], atol=1e-15)


def test_transport_interior_jacobian_is_the_null_space_projector():
    """At a point with every entry positive only the margin equalities are active: J = N N^T with
    N an orthonormal basis of the null space of the margin matrix (scipy.linalg.null_space)."""
    K = setkit.compile({"kind": "transport", "rows": [1.0, 2.0], "cols": [1.5, 1.5]})
    y = np.array([[0.5, 0.5], [1.0, 1.0]]) + np.array([[0.05, -0.02], [0.01, 0.03]])
    p = K.project(y)
    assert (p > 1e-3).all()
    A = np.array([[1, 1, 0, 0], [0, 0, 1, 1], [1, 0, 1, 0], [0, 1, 0, 1]], float)
    N = scipy.linalg.null_space(A)
    np.testing.assert_allclose(_jacobian(K, y), N @ N.T, atol=1e-12)
    assert K.routes()["project_jvp"].provider == "form"


@pytest.mark.parametrize("spec", [
    {"kind": "simplex", "dim": 5, "total": 1.5},
    {"kind": "budget", "dim": 4, "weights": [1.0, 2.0, 0.5, 1.5], "total": 3.0, "upper": 1.2},
    {"kind": "permutahedron", "weights": [3.0, 1.0, 0.5, 0.0]},
    {"kind": "transport", "rows": [1.0, 2.0], "cols": [1.5, 1.0, 0.5]},
    {"kind": "ball", "dim": 3, "norm": 1, "radius": 0.7},
], ids=lambda s: s["kind"])
def test_jacobian_matches_differences_of_the_cvxpy_reference(spec):
    """J v against central differences of the cvxpy (Clarabel) reference projection, h = 1e-3
    (piecewise linear: exact when no kink is crossed; the reference is accurate to ~1e-8)."""
    K = setkit.compile(spec)
    R = reference(K)
    rng = np.random.default_rng(3)
    for _ in range(2):
        y = rng.standard_normal(K.shape) * 1.5
        v = rng.standard_normal(K.shape)
        h = 1e-3
        fd = (R.project(y + h * v) - R.project(y - h * v)) / (2 * h)
        fd_own = (K.project(y + h * v) - K.project(y - h * v)) / (2 * h)
        if np.abs(fd_own - (K.project(y + h * v / 2) - K.project(y - h * v / 2)) / h).max() > 1e-9:
            continue          # a kink inside the step
        np.testing.assert_allclose(K.project_jvp(y, v), fd, atol=1e-4 * np.linalg.norm(v))


# -- kinks: the documented element -------------------------------------------------------------------
def test_simplex_kink_coordinate_at_zero_is_off_the_support():
    """y = (2, 1, 0): tau = 1, so p = (1, 0, 0) with y_1 = tau exactly: coordinate 1 is treated as
    inactive (derivative 0), the limit from y_1 < tau; from y_1 > tau it would enter the support."""
    K = setkit.compile({"kind": "simplex", "dim": 3})
    y = np.array([2.0, 1.0, 0.0])
    assert K.project(y).tolist() == [1.0, 0.0, 0.0]
    np.testing.assert_array_equal(_jacobian(K, y), np.zeros((3, 3)))
    np.testing.assert_allclose(_jacobian(K, y - [0, 1e-9, 0]), np.zeros((3, 3)))
    assert np.abs(_jacobian(K, y + [0, 1e-9, 0])).max() == pytest.approx(0.5)


def test_at_most_simplex_tie_keeps_the_sum_active():
    """Mode at_most at sum max(y, 0) = total exactly: the sum constraint is active (smallest face)."""
    K = setkit.compile({"kind": "simplex", "dim": 2, "mode": "at_most", "total": 1.0})
    J = _jacobian(K, [0.5, 0.5])
    np.testing.assert_allclose(J, np.eye(2) - 0.5)
    np.testing.assert_allclose(_jacobian(K, [0.5 + 1e-9, 0.5]), J)
    np.testing.assert_allclose(_jacobian(K, [0.4, 0.5]), np.eye(2))


def test_box_and_linf_ball_at_a_bound_fix_the_coordinate():
    """A coordinate exactly at a bound is fixed (derivative 0), the limit from outside the box."""
    K = setkit.compile({"kind": "box", "dim": 2, "lower": 0, "upper": 1})
    np.testing.assert_array_equal(K.project_jvp([1.0, 0.5], [3.0, 4.0]), [0.0, 4.0])
    B = setkit.compile({"kind": "ball", "dim": 2, "norm": "inf", "radius": 1.0})
    np.testing.assert_array_equal(B.project_jvp([-1.0, 0.5], [3.0, 4.0]), [0.0, 4.0])


def test_l2_ball_on_the_sphere_returns_the_tangent_projector():
    """On the sphere the constraint is active: I - g g^T (the limit from outside)."""
    K = setkit.compile({"kind": "ball", "dim": 2, "radius": 2.0})
    np.testing.assert_allclose(_jacobian(K, [2.0, 0.0]), [[0.0, 0.0], [0.0, 1.0]], atol=1e-15)


def test_permutahedron_tie_keeps_blocks_apart():
    """w = (2, 0), y = (2, 0): y_sorted - w = (0, 0), a tie: the blocks are not pooled (the majorization
    constraint stays active), so J = 0 (the vertex), the limit from y = (2 + e, -e)."""
    K = setkit.compile({"kind": "permutahedron", "weights": [2.0, 0.0]})
    np.testing.assert_array_equal(_jacobian(K, [2.0, 0.0]), np.zeros((2, 2)))
    np.testing.assert_allclose(_jacobian(K, [1.9, 0.1]), np.eye(2) - 0.5)


def test_l1_ball_kink_coordinate_at_center_is_fixed():
    """||y||_1 > r and y_i - c_i = +-tau exactly: p_i = c_i, the coordinate is fixed."""
    K = setkit.compile({"kind": "ball", "dim": 3, "norm": 1, "radius": 1.0})
    y = np.array([2.0, -1.0, 0.2])          # tau = 1: p = (1, 0, 0)
    np.testing.assert_allclose(K.project(y), [1.0, 0.0, 0.0])
    np.testing.assert_array_equal(_jacobian(K, y), np.zeros((3, 3)))


def test_intersection_with_an_l2_ball_by_implicit_differentiation():
    """Ball ∩ halfspace with both constraints active: the implicit KKT Jacobian matches differences."""
    K = setkit.compile({"kind": "intersection", "of": [
        {"kind": "ball", "dim": 3, "radius": 1.0},
        {"kind": "polyhedron", "A": [[1.0, 1.0, 0.0]], "b": [0.5]}]})
    y = np.array([2.0, 1.5, 3.0])
    p = K.project(y)
    assert abs(np.linalg.norm(p) - 1.0) < 1e-7 and abs(p[0] + p[1] - 0.5) < 1e-7
    v = np.array([0.3, -0.2, 0.9])
    h = 1e-4
    fd = (K.project(y + h * v) - K.project(y - h * v)) / (2 * h)
    np.testing.assert_allclose(K.project_jvp(y, v), fd, atol=1e-5)


# -- edges and bad input --------------------------------------------------------------------------
@pytest.mark.parametrize("spec", [
    {"kind": "simplex", "dim": 4}, {"kind": "box", "dim": 4, "lower": -1, "upper": 1},
    {"kind": "ball", "dim": 4, "radius": 1.0}, {"kind": "ball", "dim": 4, "norm": 1, "radius": 1.0},
    {"kind": "budget", "dim": 4, "total": 2.0, "upper": 1.0}, {"kind": "permutahedron", "weights": [3, 2, 1, 0]},
], ids=lambda s: s["kind"] + str(s.get("norm", "")))
def test_extreme_magnitudes_and_empty_batches(spec):
    """Finite answers with ||J v|| <= ||v|| (J is a contraction) at 1e-300 .. 1e300; empty batches keep shapes."""
    K = setkit.compile(spec)
    rng = np.random.default_rng(0)
    for mag in (1e-300, 1e-8, 1.0, 1e8, 1e150, 1e300):
        y = rng.standard_normal((3, 4)) * mag
        v = rng.standard_normal((3, 4))
        out = K.project_jvp(y, v)
        assert np.isfinite(out).all()
        assert (np.linalg.norm(out, axis=1) <= np.linalg.norm(v, axis=1) * (1 + 1e-12)).all()
    assert K.project_jvp(np.zeros((0, 4)), np.zeros((0, 4))).shape == (0, 4)
    assert K.project_vjp(np.zeros((0, 4)), np.zeros((0, 4))).shape == (0, 4)


def test_bad_inputs_raise_setkit_errors():
    K = setkit.compile({"kind": "simplex", "dim": 3})
    with pytest.raises(InputError, match="must have the shape of y"):
        K.project_jvp(np.zeros((2, 3)), np.zeros((3, 3)))
    with pytest.raises(InputError):
        K.project_jvp([0.0, np.nan, 1.0], [1.0, 0.0, 0.0])
    with pytest.raises(InputError, match="y > 0"):
        K.project_jvp([0.2, 0.0, 0.5], [1.0, 0.0, 0.0], geometry="kl")
    with pytest.raises(UnsupportedOperationError):   # no KL Jacobian for a hull (reference route): a clear error
        setkit.compile({"kind": "hull", "points": [[1.0, 0.0, 0.0], [0.0, 1.0, 0.0]]}).project_jvp(
            [0.2, 0.3, 0.5], [1.0, 0.0, 0.0], geometry="kl")


# -- KL geometry ----------------------------------------------------------------------------------------
def test_kl_simplex_jacobian_is_the_softmax_jacobian():
    """In log coordinates x = total softmax(t): dx/dt = diag(x) - x x^T / total (softmax Jacobian,
    common practice); with respect to y = exp(t), that times diag(1/y)."""
    K = setkit.compile({"kind": "simplex", "dim": 4, "total": 2.0})
    t = np.array([0.3, -1.0, 2.0, 0.0])
    x = 2.0 * np.exp(t) / np.exp(t).sum()
    want = np.diag(x) - np.outer(x, x) / 2.0
    E = np.eye(4)
    got = np.array([K.project_jvp(t, e, geometry="kl", log_input=True) for e in E]).T
    np.testing.assert_allclose(got, want, atol=1e-15)
    y = np.exp(t)
    got_y = np.array([K.project_jvp(y, e, geometry="kl") for e in E]).T
    np.testing.assert_allclose(got_y, want / y[None, :], rtol=1e-12)
    got_vjp = np.array([K.project_vjp(y, e, geometry="kl") for e in E])
    np.testing.assert_allclose(got_vjp, got_y, rtol=1e-12)        # rows of J^T u = columns of J


@pytest.mark.parametrize("spec", [{"kind": "simplex", "dim": 4, "total": 2.0},
                                  {"kind": "simplex", "dim": 5, "total": 3.5, "mode": "at_most"},
                                  {"kind": "box", "dim": 3, "lower": 0.5, "upper": 2.0},
                                  {"kind": "box", "lower": [0.0, 0.1], "upper": ["inf", 0.9]},
                                  {"kind": "budget", "dim": 4, "weights": [1.0, 2.0, 0.5, 1.5], "total": 3.0,
                                   "upper": 1.2},
                                  {"kind": "budget", "dim": 5, "total": 2.0, "upper": 0.8, "lower": 0.1,
                                   "mode": "at_most"}],
                         ids=["simplex", "simplex-at-most", "box", "box-half-open", "budget", "budget-at-most"])
def test_kl_jacobians_match_differences_and_are_adjoint(spec):
    K = setkit.compile(spec)
    assert all(o.worst <= 1 for o in setkit.testing.check_derivatives(K, geometry="kl", points=6))


def test_kl_at_most_tie_keeps_the_sum_active():
    """sum y = total exactly: the sum is active, the softmax Jacobian (the limit from above)."""
    K = setkit.compile({"kind": "simplex", "dim": 2, "total": 1.0, "mode": "at_most"})
    t = np.log([0.25, 0.75])
    x = np.array([0.25, 0.75])
    got = np.array([K.project_jvp(t, e, geometry="kl", log_input=True) for e in np.eye(2)]).T
    np.testing.assert_allclose(got, np.diag(x) - np.outer(x, x), atol=1e-15)


# -- permutahedron: derivative with respect to the weights --------------------------------------------
def test_permutahedron_weight_derivative_matches_differences_and_is_adjoint():
    """d P_w(y) / d w against central differences over recompiled sets, and <u, J_w dw> = <J_w^T u, dw>."""
    rng = np.random.default_rng(1)
    w = np.array([0.5, 3.0, 1.0, 2.2, 0.0])
    K = setkit.compile({"kind": "permutahedron", "weights": w.tolist()})
    for _ in range(4):
        y = rng.standard_normal(5) * 2
        dw = rng.standard_normal(5)
        u = rng.standard_normal(5)
        h = 1e-6
        Kp = setkit.compile({"kind": "permutahedron", "weights": (w + h * dw).tolist()})
        Km = setkit.compile({"kind": "permutahedron", "weights": (w - h * dw).tolist()})
        fd = (Kp.project(y) - Km.project(y)) / (2 * h)
        jw = D.permutahedron_weights_jvp(K, y, dw)
        np.testing.assert_allclose(jw, fd, atol=1e-6 * np.linalg.norm(dw))
        g = D.permutahedron_weights_vjp(K, y, u)
        assert abs(u @ jw - g @ dw) <= 1e-10 * np.linalg.norm(u) * np.linalg.norm(dw)
    Y = rng.standard_normal((3, 5))
    np.testing.assert_allclose(D.permutahedron_weights_vjp(K, Y, np.ones((3, 5))).sum(axis=1), 5.0)
    with pytest.raises(UnsupportedOperationError):
        D.permutahedron_weights_jvp(setkit.compile({"kind": "simplex", "dim": 2}), [0.0, 0.0], [1.0, 0.0])
    with pytest.raises(InputError):
        D.permutahedron_weights_jvp(K, y, [1.0, 2.0])


# -- distance and penalty through the same machinery --------------------------------------------------
@pytest.mark.parametrize("spec", [{"kind": "ball", "dim": 3, "radius": 1.0, "center": [0.2, 0.0, -0.1]},
                                  {"kind": "simplex", "dim": 3},
                                  {"kind": "permutahedron", "weights": [2.0, 1.0, 0.0]}],
                         ids=lambda s: s["kind"])
def test_distance_gradient_and_hessian_products_match_differences(spec):
    K = setkit.compile(spec)
    rng = np.random.default_rng(2)
    for _ in range(3):
        y = rng.standard_normal(3) * 3 + 3
        v = rng.standard_normal(3)
        h = 1e-6
        g = D.distance_grad(K, y)
        fdg = (K.distance(y + h * v) - K.distance(y - h * v)) / (2 * h)
        assert abs(g @ v - fdg) <= 1e-6 * np.linalg.norm(v)
        fdh = (D.distance_grad(K, y + h * v) - D.distance_grad(K, y - h * v)) / (2 * h)
        np.testing.assert_allclose(D.distance_hvp(K, y, v), fdh, atol=1e-6 * np.linalg.norm(v))
        # the exact penalty G d: the gradient the penalty module reports and G times our Hessian product
        def pg(x):
            return np.asarray(K.penalty(2.5).grad(x), dtype=float)
        fdp = (pg(y + h * v) - pg(y - h * v)) / (2 * h)
        np.testing.assert_allclose(D.penalty_hvp(K, 2.5, y, v), fdp, atol=3e-6 * np.linalg.norm(v))
    if spec["kind"] == "ball":          # inside: gradient and Hessian product 0
        assert D.distance_grad(K, [0.2, 0.0, -0.1]).tolist() == [0.0, 0.0, 0.0]
        assert D.distance_hvp(K, [0.2, 0.0, -0.1], [1.0, 2.0, 3.0]).tolist() == [0.0, 0.0, 0.0]


@pytest.mark.parametrize("spec", [
    {"kind": "intersection", "of": [{"kind": "ball", "dim": 4, "norm": 1, "radius": 1.0},
                                    {"kind": "box", "dim": 4, "lower": -0.2, "upper": 0.6}]},
    {"kind": "intersection", "of": [{"kind": "ball", "dim": 4, "norm": 1, "radius": 1.0},
                                    {"kind": "polyhedron", "A": [[1, 1, 0, 0]], "b": [0.3]}]},
], ids=["l1-box", "l1-halfspace"])
def test_intersections_with_auxiliary_parts_use_the_parts_faces(spec):
    """An l1 ball's form has auxiliaries: the faces of the parts are intersected (face route)."""
    K = setkit.compile(spec)
    assert K.routes()["project_jvp"].provider == "form"
    assert all(o.worst <= 1 for o in setkit.testing.check_derivatives(K, seed=1, points=6))


def test_intersection_with_a_hull_part_is_refused_clearly():
    """A hull's face at an approximate point is not read with a tolerance: no silent answer."""
    K = setkit.compile({"kind": "intersection", "of": [{"kind": "hull", "points": [[0, 0], [2, 0], [0, 2]]},
                                                       {"kind": "box", "dim": 2, "lower": 0.2, "upper": 5}]})
    assert K.routes()["project_jvp"].provider == "none"
    with pytest.raises(UnsupportedOperationError, match="project_vjp on intersection: derived from project_jvp"):
        K.project_vjp([1.0, 1.5], [1.0, 0.0])
