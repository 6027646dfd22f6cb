"""Intersections: merged linear form, cut dual and splitting routes against the cvxpy reference."""
import numpy as np
import pytest

import setkit
from setkit.combinators.intersection import Intersection
from setkit.errors import EmptySetError

from .fixtures import ball, check_against_reference, halfspaces


def _strategy(K):
    """The strategy routing chose for the projection (osqp: one QP on the merged linear form)."""
    return K.routes()["project"].provider


def test_polyhedral_parts_merge_into_one_linear_form(rng):
    # parts without their own projection: one merged form, OSQP projection and HiGHS LMO
    n = 5
    cube = halfspaces(np.vstack([np.eye(n), -np.eye(n)]), np.ones(2 * n))
    K = setkit.compile({"kind": "intersection", "of": [cube, halfspaces(rng.standard_normal((3, n)), 0.5)]})
    assert _strategy(K) == "osqp"
    assert K.routes()["lmo"].provider == "highs"
    f = K.node.linear_form()
    assert f.n_x == n and f.n_aux == 0 and f.A_ub.shape[0] == 2 * n + 3
    check_against_reference(K, rng, scales=(1e-3, 1.0, 30.0))


def test_capped_simplex_uses_the_cut_dual_and_caps_with_sectors_one_qp(rng):
    for n in (3, 7):
        caps = {"kind": "box", "dim": n, "lower": 0, "upper": rng.uniform(0.3, 0.9, n).tolist()}
        K = setkit.compile({"kind": "intersection", "of": [{"kind": "simplex", "dim": n}, caps]})
        # the box is the base; of the simplex only sum x = 1 remains (x >= 0 is implied by the box)
        assert _strategy(K) == "cut_dual" and K.node.cuts()["matrix"].shape == (1, n)
        assert K.routes()["lmo"].provider == "cut_dual"      # column generation on the box's LMO
        check_against_reference(K, rng)
        c = rng.standard_normal((3, n))
        assert np.allclose(np.einsum("ij,ij->i", c, K.lmo(c)),
                           np.einsum("ij,ij->i", c, K.with_backends(lmo="highs").lmo(c)), atol=1e-9)
        y = rng.standard_normal((3, n))
        assert np.allclose(K.with_backends(project="osqp").project(y), K.project(y), atol=1e-6)
    sectors = halfspaces([[1, 1, 0, 0, 0], [0, 0, 1, 1, 0], [0, 0, 0, 1, 1]], [0.5, 0.6, 0.5])
    K = setkit.compile({"kind": "intersection", "of": [{"kind": "simplex", "dim": 5}, sectors,
                                                       {"kind": "box", "dim": 5, "lower": 0, "upper": 0.4}]})
    assert _strategy(K) == "osqp"
    check_against_reference(K, rng, scales=(1e-3, 1.0, 30.0))


def test_hand_solved_capped_simplex():
    # KKT by hand (common practice): x = clip(y - tau, 0, 1/2) with sum 1 gives tau = 1/4 below
    K = setkit.compile({"kind": "intersection", "of": [{"kind": "simplex", "dim": 3},
                                                       {"kind": "box", "dim": 3, "lower": 0, "upper": 0.5}]})
    assert np.allclose(K.project([1.0, 0.0, 0.0]), [0.5, 0.25, 0.25], atol=1e-7)
    assert np.allclose(K.project([1.0, 1.0, -1.0]), [0.5, 0.5, 0.0], atol=1e-7)
    assert K.support([1.0, 2.0, 3.0]) == pytest.approx(2.5, abs=1e-9)


def test_cut_dual_route_ball_and_halfspaces(rng):
    n = 6
    A = rng.standard_normal((3, n))
    K = setkit.compile({"kind": "intersection", "of": [ball(np.zeros(n), 1.0), halfspaces(A, 0.3 * np.ones(3))]})
    assert _strategy(K) == "cut_dual"
    assert K.routes()["lmo"].provider == "cut_dual"     # column generation on the ball's LMO
    check_against_reference(K, rng, scales=(1e-3, 1.0, 1e3))


def test_cut_dual_with_equality_and_box_cuts(rng):
    n = 5
    K = setkit.compile({"kind": "intersection", "of": [
        ball(0.2 * np.ones(n), 1.5), {"kind": "box", "dim": n, "lower": -0.5, "upper": 0.8},
        {"kind": "simplex", "dim": n, "total": 1.0}]})
    assert _strategy(K) == "cut_dual"
    assert K.node.cuts()["n_eq"] == 1
    check_against_reference(K, rng)


def test_hand_solved_ball_and_halfspace():
    # unit disc cut by x1 <= 1/2 (KKT by hand, common practice): (2, 0) -> (1/2, 0);
    # (2, 2) -> the corner (1/2, sqrt(3)/2) where both constraints are active
    K = setkit.compile({"kind": "intersection", "of": [ball([0.0, 0.0], 1.0), halfspaces([[1.0, 0.0]], [0.5])]})
    assert np.allclose(K.project([2.0, 0.0]), [0.5, 0.0], atol=1e-7)
    assert np.allclose(K.project([2.0, 2.0]), [0.5, np.sqrt(3) / 2], atol=1e-7)
    assert np.allclose(K.project([2e6, 2e6]), [0.5, np.sqrt(3) / 2], atol=1e-6)   # a far point
    d = K.project([[2.0, 0.0], [0.1, 0.2]], details=True)
    assert list(d.status) == ["solved", "solved"]
    assert np.allclose(d.point[1], [0.1, 0.2])


def test_splitting_route_two_balls(rng):
    n = 5
    K = setkit.compile({"kind": "intersection", "of": [ball(np.zeros(n), 1.0), ball(0.6 * np.ones(n), 1.2)]})
    assert _strategy(K) == "dual_splitting" and K.node.splitting == "accelerated"
    check_against_reference(K, rng, scales=(1e-3, 1.0, 1e3))
    # Dykstra's method slows down for far points; at moderate scales it agrees too
    D = setkit.compile({"kind": "intersection", "splitting": "dykstra",
                        "of": [ball(np.zeros(n), 1.0), ball(0.6 * np.ones(n), 1.2)]})
    check_against_reference(D, rng, scales=(1e-3, 1.0, 3.0))


def test_hand_solved_lens():
    # two unit discs centred at (+-1/2, 0): the lens corner is (0, sqrt(3)/2) (geometry, common practice)
    K = setkit.compile({"kind": "intersection", "of": [ball([-0.5, 0.0], 1.0), ball([0.5, 0.0], 1.0)]})
    assert np.allclose(K.project([0.0, 3.0]), [0.0, np.sqrt(3) / 2], atol=1e-6)
    assert np.allclose(K.project([0.1, 0.1]), [0.1, 0.1], atol=1e-12)


def test_empty_polyhedral_intersection_is_reported_at_compile_time():
    with pytest.raises(EmptySetError, match=r"no common point.*\(<dict>: of\)|of\).*no common point"):
        setkit.compile({"kind": "intersection", "of": [{"kind": "simplex", "dim": 3},
                                                       {"kind": "box", "dim": 3, "lower": 0, "upper": 0.1}]})


def test_empty_intersection_is_reported_at_run_time():
    n = 4
    K = setkit.compile({"kind": "intersection", "of": [ball(np.zeros(n), 1.0), ball(3 * np.ones(n), 1.0)]})
    with pytest.raises(EmptySetError, match="no common point"):
        K.project(np.ones(n))


def test_ball_missed_by_a_cut_is_reported_at_compile_time_and_at_run_time():
    n = 3
    parts = [ball(np.zeros(n), 1.0), halfspaces(-np.eye(n)[:1], [-5.0])]
    # column generation with c = 0 (phase one) finds the nonzero slack when the description is read
    with pytest.raises(EmptySetError, match="no common point"):
        setkit.compile({"kind": "intersection", "of": parts})
    # the same node compiled without that check: the dual diverges and the LMO's slack stays, both say so
    import pytest as _pt
    with _pt.MonkeyPatch.context() as mp:
        mp.setattr(Intersection, "check_nonempty", lambda self, parts, fail: None)
        K = setkit.compile({"kind": "intersection", "of": parts})
    assert K.routes()["project"].provider == "cut_dual" and K.node.cuts()["base"] == 0
    with pytest.raises(EmptySetError, match="no common point"):
        K.project(np.ones(n))
    with pytest.raises(EmptySetError, match="no point"):
        K.lmo(np.ones(n))


def test_shapes_must_agree():
    with pytest.raises(setkit.DescriptionError, match=r"of\): every part must have the point shape"):
        setkit.compile({"kind": "intersection", "of": [{"kind": "simplex", "dim": 3}, {"kind": "simplex", "dim": 4}]})


def test_contains_and_violation_are_over_all_parts():
    K = setkit.compile({"kind": "intersection", "of": [{"kind": "simplex", "dim": 3},
                                                       {"kind": "box", "dim": 3, "lower": 0, "upper": 0.5}]})
    X = np.array([[0.4, 0.3, 0.3], [0.6, 0.4, 0.0], [0.5, 0.5, 0.1]])
    assert K.contains(X).tolist() == [True, False, False]
    assert np.allclose(K.violation(X), [0.0, 0.1, 0.1])


def test_pickles_and_runs_after_unpickling(rng):
    import pickle
    n = 4
    K = setkit.compile({"kind": "intersection", "of": [ball(np.zeros(n), 1.0), halfspaces(np.ones((1, n)), [0.5])]})
    y = rng.standard_normal(n) * 2
    K2 = pickle.loads(pickle.dumps(K))
    assert np.allclose(K.project(y), K2.project(y))


def test_empty_permutahedron_cut_is_reported_at_compile_time():
    # the floors ask items 0 and 1 for more exposure than the two largest weights can give (3 + 2 < 5.5):
    # infeasible on the Birkhoff extended form, found by one LP when the description is read
    with pytest.raises(EmptySetError, match="no common point"):
        setkit.compile({"kind": "intersection", "of": [
            {"kind": "permutahedron", "weights": [3.0, 2.0, 1.0, 0.0]},
            {"kind": "polyhedron", "A": [[-1, -1, 0, 0]], "b": [-5.5]}]})


def test_explain_names_the_route():
    K = setkit.compile({"kind": "intersection", "of": [
        {"kind": "permutahedron", "weights": [3.0, 2.0, 1.0, 0.0]},
        {"kind": "polyhedron", "A": [[-1, -1, 0, 0]], "b": [-4.0]}]})
    text = K.explain()
    assert "Dual over the few cut multipliers" in text and "highs" in text
    assert _strategy(K) == "cut_dual" and K.node.cuts()["base"] == 0
    # the answer meets the floor and keeps the total (a permutahedron point sums to sum(w) = 6)
    x = K.project([0.0, 0.0, 5.0, 5.0])
    assert x[0] + x[1] >= 4.0 - 1e-8 and abs(x.sum() - 6.0) <= 1e-8


def test_cut_lmo_by_column_generation_matches_a_birkhoff_lp(rng):
    # min <c, x> over conv{permutations of w} ∩ {A x <= b}: by Birkhoff-von Neumann x = W w with W doubly
    # stochastic, an LP in W solved here directly with scipy.optimize.linprog (independent formulation)
    from scipy.optimize import linprog
    n = 6
    w = np.array([5.0, 3.0, 2.0, 1.0, 0.5, 0.0])
    A = rng.uniform(0.0, 1.0, (3, n))
    b = A @ np.full(n, w.mean()) + 0.1
    K = setkit.compile({"kind": "intersection", "of": [{"kind": "permutahedron", "weights": w.tolist()},
                                                       {"kind": "polyhedron", "A": A.tolist(), "b": b.tolist()}]})
    assert K.routes()["lmo"].provider == "cut_dual"
    E_rows = np.kron(np.eye(n), np.ones((1, n)))          # sum_j W_ij = 1
    E_cols = np.kron(np.ones((1, n)), np.eye(n))          # sum_i W_ij = 1
    Wx = np.kron(np.eye(n), w[None, :])                   # x_i = sum_j W_ij w_j
    for _ in range(4):
        c = rng.standard_normal(n)
        lp = linprog(c @ Wx, A_ub=A @ Wx, b_ub=b, A_eq=np.vstack([E_rows, E_cols]), b_eq=np.ones(2 * n),
                     bounds=[(0, None)] * (n * n), method="highs")
        x = K.lmo(c)
        assert c @ x == pytest.approx(lp.fun, abs=1e-8)
        assert np.all(A @ x <= b + 1e-9) and abs(x.sum() - w.sum()) <= 1e-9
        assert K.support(-c) == pytest.approx(-lp.fun, abs=1e-8)
