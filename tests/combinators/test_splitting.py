"""Splitting methods: the reported certificates bound the true error, and unfinished runs say so."""
import warnings

import numpy as np
import pytest

import setkit
from setkit.agreement import reference
from setkit.errors import AccuracyWarning, SolveError
from setkit.kernels.splitting import dykstra, fast_dual_projections, project_linear_image, project_with_cuts

from .fixtures import ball, halfspaces


def _two_balls(n=5):
    return ball(np.zeros(n), 1.0), ball(0.6 * np.ones(n), 1.2)


def test_dykstra_gap_bounds_the_error_at_every_stage(rng):
    # (1/2)||p - p*||^2 <= gap + dist(p, K) ||y - p*||; dist(p, K) is bounded by a small multiple of the
    # residual for these well-intersecting balls, so a generous factor 4 on the residual term is used
    n = 5
    b1, b2 = _two_balls(n)
    K = setkit.compile({"kind": "intersection", "of": [b1, b2]})
    P1, P2 = (setkit.compile(b).project for b in (b1, b2))
    Y = rng.standard_normal((6, n)) * 2.0
    Pstar = reference(K, loose=True).project(Y)
    for cap in (2, 5, 20, 200):
        X, info = dykstra([P1, P2], Y, np.maximum(1.0, np.abs(Y).max(axis=1)), max_iterations=cap)
        half_err = 0.5 * np.sum((X - Pstar) ** 2, axis=1)
        bound = np.abs(info["gap"]) + 4 * info["residual"] * np.linalg.norm(Y - Pstar, axis=1) + 1e-10
        assert np.all(half_err <= bound), (cap, half_err, bound)
    assert set(info["status"]) == {"solved"}


def test_accelerated_splitting_gap_bounds_the_error_at_every_stage(rng):
    n = 5
    b1, b2 = _two_balls(n)
    b3 = ball(np.array([0.3, -0.2, 0.0, 0.1, 0.4]), 1.1)
    K = setkit.compile({"kind": "intersection", "of": [b1, b2, b3]})
    projs = [setkit.compile(b).project for b in (b1, b2, b3)]
    Y = rng.standard_normal((6, n)) * 5.0
    Pstar = reference(K, loose=True).project(Y)
    for cap in (5, 10, 40, 400):
        X, info = fast_dual_projections(projs, Y, np.maximum(1.0, np.abs(Y).max(axis=1)), max_iterations=cap)
        half_err = 0.5 * np.sum((X - Pstar) ** 2, axis=1)
        bound = np.abs(info["gap"]) + 4 * info["residual"] * np.linalg.norm(Y - Pstar, axis=1) + 1e-10
        assert np.all(half_err <= bound), (cap, half_err, bound)
        assert np.all(setkit.compile(b1).contains(X))   # the point always lies in the first part
    assert set(info["status"]) == {"solved"}


def test_cut_dual_gap_bounds_the_error_when_feasible(rng):
    n = 6
    A = rng.standard_normal((3, n))
    A /= np.linalg.norm(A, axis=1, keepdims=True)
    rhs = 0.2 * np.ones(3)
    B = setkit.compile(ball(np.zeros(n), 1.0))
    K = setkit.compile({"kind": "intersection", "of": [ball(np.zeros(n), 1.0), halfspaces(A, rhs)]})
    Y = rng.standard_normal((6, n)) * 3
    Pstar = reference(K, loose=True).project(Y)
    for cap in (1, 3, 10, 100):
        X, info = project_with_cuts(B.project, Y, A, rhs, 0, np.maximum(1.0, np.abs(Y).max(axis=1)),
                                    max_iterations=cap)
        half_err = 0.5 * np.sum((X - Pstar) ** 2, axis=1)
        bound = np.abs(info["gap"]) + 4 * info["residual"] * np.linalg.norm(Y - Pstar, axis=1) + 1e-10
        assert np.all(half_err <= bound), (cap, half_err, bound)
        assert np.all(B.contains(X))     # the returned point always lies in the base set


def test_linear_image_gap_bounds_the_error_exactly(rng):
    # the iterate stays in K, so (1/2)||u - u*||^2 <= Frank-Wolfe gap with no extra term
    S = setkit.compile({"kind": "simplex", "dim": 6})
    M = rng.standard_normal((4, 6))
    K = setkit.compile({"kind": "affine", "set": {"kind": "simplex", "dim": 6}, "matrix": M.tolist()})
    Y = rng.standard_normal((5, 4)) * 3
    Ustar = reference(K, loose=True).project(Y)
    for cap in (1, 3, 10, 1000):
        U, info = project_linear_image(S.project, S.support, M, np.zeros(4), Y, np.ones(5),
                                       max_iterations=cap, check_every=1)
        half_err = 0.5 * np.sum((U - Ustar) ** 2, axis=1)
        assert np.all(half_err <= info["gap"] + 1e-9), (cap, half_err, info["gap"])


def test_certificate_in_details_bounds_the_error(rng):
    # the Frank-Wolfe gap support(y - p) - <y - p, p> reported by details=True, for the cut route
    n = 5
    K = setkit.compile({"kind": "intersection", "of": [{"kind": "simplex", "dim": n},
                                                       halfspaces(rng.standard_normal((2, n)), 0.1)]})
    Y = rng.standard_normal((4, n))
    d = K.project(Y, details=True)
    Pstar = reference(K).project(Y)
    half_err = 0.5 * np.sum((d.point - Pstar) ** 2, axis=1)
    assert np.all(half_err <= np.maximum(d.certificate, 0) + 1e-10)
    assert np.all(np.abs(d.certificate) <= 1e-8)


def test_non_converged_dykstra_raises():
    K = setkit.compile({"kind": "intersection", "of": list(_two_balls()), "max_iterations": 3, "splitting": "dykstra"})
    y = np.array([40.0, -30.0, 5.0, 0.0, 1.0])
    with pytest.raises(SolveError, match=r"Dykstra did not reach the accuracy 1e-07 on 1 of 1 points within 3 steps"):
        K.project(y)


def test_far_points_that_dykstra_cannot_finish_raise():
    # Dykstra slows down badly for points far from two round sets: it must say so, not return a point;
    # the accelerated default finishes the same point
    y = np.array([1e4, -3e3, 2e3, 0.0, 5.0])
    K = setkit.compile({"kind": "intersection", "of": list(_two_balls()), "max_iterations": 2000,
                        "splitting": "dykstra"})
    with pytest.raises(SolveError, match="Dykstra did not reach"):
        K.project(y)
    A = setkit.compile({"kind": "intersection", "of": list(_two_balls())})
    d = A.project(y, details=True)
    assert d.status == "solved" and "dual splitting" in d.backend_status
    assert np.allclose(d.point, reference(A, loose=True).project(y), atol=1e-6 * 1e4)


def test_non_converged_accelerated_splitting_raises():
    K = setkit.compile({"kind": "intersection", "of": list(_two_balls()), "max_iterations": 4})
    with pytest.raises(SolveError, match="dual splitting did not reach the accuracy 1e-07"):
        K.project(np.array([40.0, -30.0, 5.0, 0.0, 1.0]))


def test_loose_run_warns_when_close(rng):
    K = setkit.compile({"kind": "intersection", "of": list(_two_balls()), "max_iterations": 40,
                        "accuracy": 1e-6, "splitting": "dykstra"})
    y = np.array([3.0, -2.0, 1.0, 0.5, 0.0])
    with pytest.raises(SolveError):
        K.project(y)
    with warnings.catch_warnings(record=True) as w:
        warnings.simplefilter("always")
        p = K.with_backends(loose=True).project(y)
    assert any(issubclass(x.category, AccuracyWarning) for x in w)
    # 40 sweeps leave a duality gap of about 1.6e-6, so the error is at most about sqrt(2 * 1.6e-6)
    assert np.linalg.norm(p - reference(K, loose=True).project(y)) <= 2e-3


def test_non_converged_cut_dual_raises(rng):
    n = 6
    K = setkit.compile({"kind": "intersection", "max_iterations": 1, "accuracy": 1e-12,
                        "of": [ball(np.zeros(n), 1.0), halfspaces(rng.standard_normal((3, n)), 0.1)]})
    with pytest.raises(SolveError, match="cut dual did not reach"):
        K.project(rng.standard_normal(n) * 3)


def test_non_converged_linear_image_raises(rng):
    K = setkit.compile({"kind": "affine", "set": {"kind": "simplex", "dim": 6}, "max_iterations": 2,
                        "matrix": rng.standard_normal((4, 6)).tolist()})
    with pytest.raises(SolveError, match="projected gradient did not reach"):
        K.project(rng.standard_normal(4) * 5)
