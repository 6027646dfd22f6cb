"""Custom sets from cvxpy constraints alone (setkit.from_cvxpy, kind 'custom')."""
import pickle

import cvxpy as cp
import numpy as np
import pytest

import setkit
import setkit.testing as T
from setkit.errors import DescriptionError
from setkit.forms import LinearForm


def capped_simplex(x):
    """Module level, so that the set pickles."""
    return [x >= 0, cp.sum(x) <= 1, x[0] <= 0.25]


def test_routes_are_generic_and_violation_is_native():
    K = setkit.from_cvxpy(capped_simplex, 3, name="lid")
    r = K.routes()
    assert r["project"].provider == "reference" and r["lmo"].provider == "reference"
    assert r["distance"].provider == "derived" and r["support"].provider == "derived"
    assert r["contains"].provider == "derived" and r["violation"].provider == "native"
    assert "custom 'lid'" in K.explain()


def test_hand_solved_answers():
    K = setkit.from_cvxpy(capped_simplex, 3)
    # by hand: the cap x0 <= 0.25 binds, the other coordinates stay at 0
    # (the interior-point reference is accurate to about 1e-5 here)
    np.testing.assert_allclose(K.project([1.0, 0.0, 0.0]), [0.25, 0.0, 0.0], atol=2e-5)
    # by hand: max x1 + x2 subject to the sum cap is 1
    assert abs(K.support([0.0, 1.0, 1.0]) - 1.0) < 1e-7
    assert K.violation([1.0, 0.0, 0.0]) == pytest.approx(0.75)
    assert K.contains([0.2, 0.3, 0.4]) and not K.contains([0.3, 0.3, 0.3])
    # geometry (common practice): the top of the unit disc cut by x1 >= 0.5 is (0, 1)
    D = setkit.from_cvxpy(lambda x: [cp.norm(x, 2) <= 1, x[1] >= 0.5], 2)
    assert abs(D.support([0.0, 1.0]) - 1.0) < 1e-6
    np.testing.assert_allclose(D.project([0.0, 0.0]), [0.0, 0.5], atol=1e-6)


def test_problem_is_built_once_not_per_call():
    calls = []

    def build(x):
        calls.append(1)
        return capped_simplex(x)
    K = setkit.from_cvxpy(build, 3)
    n0 = len(calls)            # the validation call in from_cvxpy
    rng = np.random.default_rng(0)
    for _ in range(20):
        K.project(rng.normal(size=3))
        K.lmo(rng.normal(size=3))
        K.support(rng.normal(size=3))
        K.violation(rng.normal(size=3))
    K.project(rng.normal(size=(10, 3)))
    # one project problem, one lmo problem, one violation evaluator
    assert len(calls) - n0 == 3


def test_conformance_passes():
    out = T.check_set(setkit.from_cvxpy(capped_simplex, 3), seed=4)
    assert all(o.worst <= 1.0 for o in out if not o.note)


def test_matrix_shape_and_auxiliary_variables():
    # doubly-stochastic 3x3 matrices written by hand, with an auxiliary variable copy
    def build(X):
        W = cp.Variable((3, 3))
        return [W == X, W >= 0, cp.sum(W, axis=0) == 1, cp.sum(W, axis=1) == 1]
    K = setkit.from_cvxpy(build, (3, 3), traits=("polyhedral", "bounded"))
    assert K.shape == (3, 3) and K.node.has_trait("bounded")
    P = K.project(np.eye(3) * 2)
    np.testing.assert_allclose(P, np.eye(3), atol=1e-6)
    # the constraints use an auxiliary variable, so no independent violation measure exists
    assert np.isnan(K.violation(np.eye(3)))
    # Birkhoff-von Neumann (common practice): the LMO is a permutation matrix; here the
    # permutation matrix P itself, with <-P, P> = -3
    Pm = np.eye(3)[[1, 2, 0]]
    L = K.lmo(-Pm)
    assert abs(np.sum(-Pm * L) + 3.0) < 1e-7
    np.testing.assert_allclose(L, Pm, atol=1e-6)


def test_linear_form_lets_generic_backends_serve():
    form = LinearForm.build(3, A_ub=np.ones((1, 3)), b_ub=[1.0], lo=0.0, hi=[0.25, np.inf, np.inf])
    K = setkit.from_cvxpy(capped_simplex, 3, linear_form=form)
    assert K.routes()["project"].provider == "osqp" and K.routes()["lmo"].provider == "highs"
    T.check_set(K, seed=1, only=["project", "lmo", "support"])


def test_pickles_with_a_module_level_builder():
    K = setkit.from_cvxpy(capped_simplex, 3)
    K2 = pickle.loads(pickle.dumps(K))
    np.testing.assert_allclose(K2.project([1.0, 1.0, 1.0]), K.project([1.0, 1.0, 1.0]), atol=1e-8)


@pytest.mark.parametrize("build, shape, words", [
    (lambda x: [cp.square(x[0]) >= 1], 2, "not convex"),
    (lambda x: [True], 2, "item 0 is bool"),
    (lambda x: 5, 2, "must return a list"),
    (lambda x: [x[7] >= 0], 2, "failed"),
    (capped_simplex, 0, "positive sizes"),
    ("x >= 0", 2, "callable"),
])
def test_bad_constraints_are_rejected_clearly(build, shape, words):
    with pytest.raises(DescriptionError, match=words):
        setkit.from_cvxpy(build, shape)


def test_description_file_cannot_use_kind_custom(tmp_path):
    # custom sets carry Python code, so they are not a registered kind of description files
    f = tmp_path / "c.yaml"
    f.write_text("set:\n  kind: custom\n  dim: 3\n")
    with pytest.raises(DescriptionError, match="unknown kind 'custom'") as info:
        setkit.load(f)
    assert "c.yaml: set.kind" in str(info.value)
    assert "custom" not in setkit.families.known_kinds()


def test_penalty_and_centroid_are_derived():
    K = setkit.from_cvxpy(capped_simplex, 3)
    y = np.array([1.0, 1.0, 1.0])
    assert K.penalty(2.0).value(y) == pytest.approx(2.0 * K.distance(y))
    # the 'directions' centroid: mean LMO answer of Gaussian directions, each an LP solve here
    r = K.centroid(measure="directions", details=True, samples=60, rng=0)
    assert not r.exact and K.contains(r.point, tol=1e-6)
    # lmo answers are vertices (0,0,0), (0.25,0,0), (0,1,0), (0,0,1): by symmetry x1 and x2 agree in law
    assert abs(r.point[1] - r.point[2]) <= 6 * max(r.std_error[1], r.std_error[2]) + 1e-9
