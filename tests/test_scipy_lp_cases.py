"""Published LP test cases of a general-purpose library as a regression corpus (issue 11).

Source: scipy 1.17.1, scipy/optimize/tests/test_linprog.py, LinprogCommonTests.test_bug_8561
(scipy issue 8561, "pivot row chosen correctly with Bland's rule"): minimize c.x subject to
A_ub x <= b_ub with linprog's default bounds x >= 0; its asserted optimum is
x = (0, 0, 19, 16/3, 29/3), a degenerate vertex (rows 0-3 and x0, x1 >= 0 are tight).
"""
from fractions import Fraction

import numpy as np

import setkit

A_8561 = [[4, 5.5, 1.5, 1.0, -3.5], [1, -2.5, -2, 2.5, 0.5], [3, -0.5, 4, -12.5, -7], [-1, 4.5, 2, -3.5, -2],
          [5.5, 2, -4.5, -1, 9.5]]
B_8561 = [0, 0, 0, 0, 1]
C_8561 = [7, 0, -4, 1.5, 1.5]
X_8561 = np.array([0.0, 0.0, 19.0, 16 / 3, 29 / 3])


def _set():
    return setkit.compile({"kind": "polyhedron", "A": A_8561, "b": B_8561, "lower": 0})


def test_bug_8561_vertex_is_a_member_by_its_constraints():
    K = _set()
    # exact rational arithmetic: the vertex meets every row, five of the seven constraints with equality
    xs = [Fraction(0), Fraction(0), Fraction(19), Fraction(16, 3), Fraction(29, 3)]
    lhs = [sum(Fraction(a) * x for a, x in zip(row, xs)) for row in A_8561]
    assert all(v <= b for v, b in zip(lhs, B_8561)) and sum(v == b for v, b in zip(lhs, B_8561)) == 3
    assert bool(K.contains(X_8561))
    assert float(K.violation(X_8561)) <= 1e-13 * 20
    assert not bool(K.contains(X_8561 + np.array([0.0, 0.0, 1.0, 0.0, 0.0])))   # row 4 then exceeds 1 by 4.5


def test_bug_8561_vertex_projects_to_itself_and_near_points_onto_the_set():
    K = _set()
    d = K.project(X_8561, details=True)
    assert d.status == "solved" and np.abs(d.point - X_8561).max() <= 1e-9 * 20
    R = K.with_backends(project="reference")
    rng = np.random.default_rng(8561)
    for scale in (1e-6, 1e-3, 1.0):
        y = X_8561 + scale * rng.standard_normal(5)
        p = K.project(y, details=True)
        assert p.residual <= 1e-7 * 20
        np.testing.assert_allclose(p.point, R.project(y), atol=2e-5 * 20)
        assert K.certificate(y, p.point) <= (2e-5 * 20) ** 2


def test_bug_8561_lmo_reaches_the_published_optimum():
    K = _set()
    x = K.lmo(np.array(C_8561))
    # scipy's asserted solution, objective 7*0 + 0*0 - 4*19 + 1.5*16/3 + 1.5*29/3 = -53.5
    assert abs(float(np.dot(C_8561, x)) + 53.5) <= 1e-9
    np.testing.assert_allclose(x, X_8561, atol=1e-9)
