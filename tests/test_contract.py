"""The always-on accuracy contract of checked projection routes (setkit.contract, issue 11)."""
import numpy as np
import pytest

import setkit
from setkit.contract import CHECKED_TRAIT, needs_check
from setkit.errors import SolveError
from setkit.families.birkhoff import Birkhoff
from setkit.families.hull import Hull
from setkit.families.simplex import Simplex


def test_which_routes_are_checked():
    assert Hull.traits >= {CHECKED_TRAIT} and Birkhoff.traits >= {CHECKED_TRAIT}
    assert CHECKED_TRAIT not in Simplex.traits
    K = setkit.compile({"kind": "hull", "points": [[0, 0], [1, 0], [0, 1]]})
    assert needs_check(K.node, "project", "native") and not needs_check(K.node, "lmo", "native")
    I = setkit.compile({"kind": "intersection", "of": [{"kind": "simplex", "dim": 3},
                                                      {"kind": "box", "dim": 3, "lower": 0, "upper": 0.5}]})
    # strategies certify their own rows (residual as a distance, gap) and are not wrapped
    assert not needs_check(I.node, "project", I.routes()["project"].category)


def _off_the_set(self, Y, *rest):
    return np.full_like(Y, 0.9)                 # rows sum to 1.8 on n = 2: outside the Birkhoff polytope


def test_a_wrong_native_answer_is_retried_on_the_next_route_and_says_so(monkeypatch):
    monkeypatch.setattr(Birkhoff, "project", _off_the_set)
    K = setkit.compile({"kind": "birkhoff", "n": 2})
    y = np.array([[2.0, 0.0], [0.0, 1.0]])
    d = K.project(y, details=True)
    # closed form on the 2 x 2 Birkhoff polytope: X = [[a, 1-a], [1-a, a]], a = clip((y00 + y11 - y01 - y10 + 2)/4)
    a = min(max((2.0 + 1.0 - 0.0 - 0.0 + 2.0) / 4.0, 0.0), 1.0)
    np.testing.assert_allclose(d.point, [[a, 1 - a], [1 - a, a]], atol=1e-7)
    assert d.status == "solved" and d.residual <= 1e-7
    assert "violates the constraints by" in str(d.backend_status) and "answered by osqp" in str(d.backend_status)
    # the single-point fast path takes the checked route as well
    np.testing.assert_allclose(K.project(y), d.point, atol=1e-7)


def test_status_solved_above_tolerance_is_impossible(monkeypatch):
    monkeypatch.setattr(Birkhoff, "project", _off_the_set)
    from setkit.backends.osqp import OsqpBackend
    from setkit.backends.highs_qp import HighsQPBackend
    from setkit.backends.reference import ReferenceBackend
    for cls in (OsqpBackend, HighsQPBackend, ReferenceBackend):
        monkeypatch.setattr(cls, "project", _off_the_set)          # every retry also answers off the set
    K = setkit.compile({"kind": "birkhoff", "n": 2})
    for call in (lambda: K.project(np.eye(2)), lambda: K.project(np.eye(2), details=True),
                 lambda: K.project(np.stack([np.eye(2)] * 3))):
        with pytest.raises(SolveError, match=r"violates the constraints by 0\.8.*input magnitude 1.*Retried on osqp"):
            call()


def test_correct_answers_pass_unchanged():
    K = setkit.compile({"kind": "transport", "rows": [1, 1, 1, 1, 1, 1], "cols": [2, 2, 2]})
    Y = np.random.default_rng(0).standard_normal((5, 6, 3))
    d = K.project(Y, details=True)
    assert all(s == "solved" for s in np.ravel(d.status)) and np.max(d.residual) <= 1e-7 * 2
    assert not any("answered by" in str(s) for s in np.ravel(d.backend_status))


def test_unchecked_stays_the_opt_out(monkeypatch):
    monkeypatch.setattr(Birkhoff, "project", _off_the_set)
    K = setkit.compile({"kind": "birkhoff", "n": 2})
    y = np.array([[2.0, 0.0], [0.0, 1.0]])
    # the documented opt-out runs the raw kernel: no residual check, no retry
    np.testing.assert_array_equal(K.unchecked.project(y), np.full((2, 2), 0.9))
    assert K.contains(K.project(y))
