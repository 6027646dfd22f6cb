"""Plan-level soundness: membership by the constraints, the fallback chain of generic projections,
the input dtype policy, and the accuracy contract of detailed records."""
import numpy as np
import pytest

import setkit
from setkit.backends.osqp import OsqpBackend
from setkit.errors import InputError, SolveError

# A degenerate vertex of an LP feasible set (the case reported in the issue tracker, issue 11):
# five rows, x = (0, 0, 19, 16/3, 29/3) meets rows 0-3 and x0, x1 >= 0 with equality.
A_DEG = [[4, 5.5, 1.5, 1, -3.5], [1, -2.5, -2, 2.5, 0.5], [3, -0.5, 4, -12.5, -7], [-1, 4.5, 2, -3.5, -2],
         [5.5, 2, -4.5, -1, 9.5]]
B_DEG = [0, 0, 0, 0, 1]
X_DEG = np.array([0.0, 0.0, 19.0, 16 / 3, 29 / 3])


def test_degenerate_vertex_is_a_member_and_its_own_projection():
    K = setkit.compile({"kind": "polyhedron", "A": A_DEG, "b": B_DEG, "lower": 0})
    # exact rational check that x is a vertex of the set (hand computation, common practice)
    from fractions import Fraction as F
    xs = [F(0), F(0), F(19), F(16, 3), F(29, 3)]
    lhs = [sum(F(a).limit_denominator(10) * x for a, x in zip(row, xs)) for row in A_DEG]
    assert all(v <= b for v, b in zip(lhs, B_DEG)) and sum(v == b for v, b in zip(lhs, B_DEG)) >= 3
    assert K.contains(X_DEG)
    r = K.project(X_DEG, details=True)
    assert r.status == "solved" and np.abs(r.point - X_DEG).max() <= 1e-12
    # a point near the vertex is projected (by whichever route of the chain finishes) onto the set
    y = X_DEG + np.array([1e-3, -2e-3, 5e-3, 1e-3, -1e-3])
    d = K.project(y, details=True)
    ref = K.with_backends(project="reference").project(y)
    assert np.abs(d.point - ref).max() <= 2e-5 * 20
    assert d.residual <= 1e-7 * 20


def test_osqp_failure_falls_back_to_the_next_backend_and_says_so(monkeypatch):
    K = setkit.compile({"kind": "polyhedron", "A": [[1.0, 1.0, 1.0]], "b": [1.0], "lower": 0})
    assert "on a failed solve: highs_qp, then reference" in K.explain()

    def broken(self, Y):
        raise SolveError("osqp: pretend the iteration cap was hit", status="maximum iterations reached")
    monkeypatch.setattr(OsqpBackend, "project", broken)
    K = setkit.compile({"kind": "polyhedron", "A": [[1.0, 1.0, 1.0]], "b": [1.0], "lower": 0})
    y = np.array([[1.0, 1.0, 1.0], [2.0, 0.0, -1.0]])
    d = K.project(y, details=True)
    # closed forms: the projection of (1,1,1) onto {x >= 0, sum x <= 1} is (1/3,1/3,1/3); of (2,0,-1) is (1,0,0)
    assert np.allclose(d.point, [[1 / 3, 1 / 3, 1 / 3], [1.0, 0.0, 0.0]], atol=1e-7)
    assert all("answered by highs_qp" in s and "pretend" in s for s in d.backend_status)


def test_every_backend_failing_raises_one_error_naming_them(monkeypatch):
    from setkit.backends.highs_qp import HighsQPBackend
    from setkit.backends.reference import ReferenceBackend

    def broken(self, Y):
        raise SolveError(f"{self.name}: broken on purpose", status="failed")
    for cls in (OsqpBackend, HighsQPBackend, ReferenceBackend):
        monkeypatch.setattr(cls, "project", broken)
    K = setkit.compile({"kind": "polyhedron", "A": [[1.0, 1.0]], "b": [1.0]})
    with pytest.raises(SolveError, match="every backend failed.*osqp.*highs_qp.*reference"):
        K.project([[3.0, 3.0]])


@pytest.mark.parametrize("A, point, tol, expected, why", [
    # the row 1e-6 x0 <= 0 normalized is x0 <= 0: (10, 0) is at distance 10
    ([[1e-6, 0.0]], [10.0, 0.0], None, False, "tiny row"),
    # the row 1000 x0 <= 0 normalized is x0 <= 0: (1e-6, 0) is at distance 1e-6 < tol = 1e-5
    ([[1000.0, 0.0]], [1e-6, 0.0], 1e-5, True, "large row"),
])
def test_intersection_membership_is_by_distance_not_raw_violation(A, point, tol, expected, why):
    K = setkit.compile({"kind": "intersection", "of": [{"kind": "box", "dim": 2, "lower": -1, "upper": 1},
                                                       {"kind": "polyhedron", "A": A, "b": [0.0]}]})
    assert bool(K.contains(point, tol=tol)) is expected, why
    assert bool(K.distance(point) <= (tol if tol is not None else 1e-6)) is expected


def test_intersection_membership_decides_borderline_points_by_the_distance():
    # two unit discs centred at (+-1/2, 0) meet in a lens; (0, 0.8660254 + 5e-8) is within 1e-7 of each disc
    # and of the lens (the corner is (0, sqrt(3)/2)), while (0.2, 0.95) is outside both the lens and one disc
    lens = setkit.compile({"kind": "intersection", "of": [
        {"kind": "ball", "dim": 2, "radius": 1.0, "center": [-0.5, 0.0]},
        {"kind": "ball", "dim": 2, "radius": 1.0, "center": [0.5, 0.0]}]})
    top = np.array([0.0, np.sqrt(3) / 2 + 5e-8])
    assert lens.contains(top, tol=1e-7)
    assert not lens.contains([0.2, 0.95], tol=1e-3)


@pytest.mark.parametrize("bad", [np.array([1 + 1j, 0.0, 0.0]), ["a", "b", "c"], np.array([object(), 1, 2]),
                                 [[1.0, 2.0], [3.0]]])
def test_non_real_inputs_are_refused(bad):
    K = setkit.simplex(dim=3)
    for op in (K.project, K.distance, K.lmo, K.support, K.contains):
        with pytest.raises(InputError):
            op(bad)


@pytest.mark.parametrize("ok", [[1, 0, 0], np.array([True, False, False]), np.float32([1, 0, 0]),
                                np.int8([1, 0, 0]), np.float16([1, 0, 0])])
def test_real_dtypes_are_accepted(ok):
    K = setkit.simplex(dim=3)
    assert np.array_equal(K.project(ok), [1.0, 0.0, 0.0])


def test_a_record_never_says_solved_above_tolerance(monkeypatch):
    from setkit.families.simplex import Simplex

    def off_by_a_lot(self, Y):
        return np.full_like(Y, 0.5)          # sums to 1.5 on dim 3: not in the simplex
    monkeypatch.setattr(Simplex, "project", off_by_a_lot)
    K = setkit.simplex(dim=3)
    with pytest.raises(SolveError, match="violates the set's constraints by 0.5"):
        K.project([1.0, 0.0, 0.0], details=True)
    loose = setkit.compile({"kind": "simplex", "dim": 3}, loose=True)
    with pytest.warns(setkit.AccuracyWarning):
        d = loose.project([1.0, 0.0, 0.0], details=True)
    assert d.status == "inaccurate"


@pytest.mark.parametrize("total", [1e-300, 1e-16, 1e-6])
def test_budget_of_a_tiny_total_is_exact_on_ordinary_inputs(total):
    # found by benchmarks/fuzz_operators.py: with the far-point scale floored at 1, an input of size 1
    # against a total of 1e-16 came back 11% over the total (ulps of the input); the answers below are
    # hand-derived: at_most with weights (1, 2, 1) puts everything on the largest y/w, and with caps
    # 0.6 t the two largest inputs share (0.6 t, 0.4 t)
    K = setkit.compile({"kind": "budget", "dim": 3, "total": total, "weights": [1, 2, 1], "mode": "at_most"})
    x = K.project([1.0, 0.5, 0.3])
    assert x.tolist() == pytest.approx([total, 0.0, 0.0], rel=1e-12, abs=0.0) and K.contains(x)
    K = setkit.compile({"kind": "budget", "dim": 3, "total": total, "upper": 0.6 * total})
    x = K.project([1.0, 0.5, 0.3])
    assert (x / total).tolist() == pytest.approx([0.6, 0.4, 0.0], rel=1e-12, abs=1e-12) and K.contains(x)


# found by benchmarks/fuzz_operators.py (seed 3, band "mixed"): a point mixing 1e167 with 1e-275 made
# the HiGHS active-set QP cycle inside the solver for minutes; it now stops at its iteration bound
SECTOR_Y = np.array([-2.36512987e-058, 4.13240394e-087, -8.33110642e-184, 1.73117166e-275, -1.16761012e+000,
                     -7.35530377e-119, -1.09957158e+167, 6.47607500e+017, -1.01919244e-019, 1.66779966e-219])
SECTOR = {"kind": "intersection", "of": [
    {"kind": "simplex", "dim": 10}, {"kind": "box", "dim": 10, "lower": 0, "upper": 0.2},
    {"kind": "polyhedron", "A": [[1, 1, 1, 1, 0, 0, 0, 0, 0, 0], [0, 0, 0, 0, 1, 1, 1, 0, 0, 0],
                                 [0, 0, 0, 0, 0, 0, 0, 1, 1, 1]], "b": [0.4, 0.3, 0.35]}]}


def test_highs_qp_stops_at_its_iteration_bound_on_badly_scaled_costs():
    K = setkit.compile(SECTOR).with_backends(project="highs_qp")
    try:
        rec = K.project(SECTOR_Y, details=True)
    except SolveError as e:                       # the honest outcome: the bound was hit, and said so
        assert "Iteration limit" in str(e) or "not solved" in str(e)
    else:                                         # (far coordinates pulled in first: setkit.backends._far)
        assert rec.status == "solved" and K.contains(rec.point)


def test_far_mixed_scale_point_of_the_sector_portfolio_gets_its_distance():
    """The answer's reference: cvxpy on the same point with the two huge coordinates replaced by +-1e3,
    which pins them at the same bounds (x6 = 0, x7 = 0.2: their pull dominates every multiplier), so the
    projection is the same point; the distance is then dominated by |y6| = 1.0995...e167."""
    import cvxpy as cp
    K = setkit.compile(SECTOR)
    y = SECTOR_Y.copy()
    y[6], y[7] = -1e3, 1e3
    x = cp.Variable(10)
    A = np.array(SECTOR["of"][2]["A"], dtype=float)
    cp.Problem(cp.Minimize(cp.sum_squares(x - y)), [cp.sum(x) == 1, x >= 0, x <= 0.2, A @ x <= [0.4, 0.3, 0.35]]
               ).solve(solver=cp.CLARABEL)
    p_ref = np.array(x.value)
    assert abs(p_ref[6]) < 1e-7 and abs(p_ref[7] - 0.2) < 1e-7
    r = p_ref - SECTOR_Y
    expected = float(np.abs(r).max() * np.linalg.norm(r / np.abs(r).max()))      # no overflow of the squares
    try:
        d = K.distance(SECTOR_Y)
    except SolveError:
        return                                    # allowed: an error saying why (never a wrong number)
    assert d == pytest.approx(expected, rel=1e-12)


def _example_sets():
    from setkit.families import known_kinds, lookup
    for kind in known_kinds():
        if not lookup(kind).__module__.startswith("setkit."):
            continue
        for i, spec in enumerate(lookup(kind).examples()):
            yield pytest.param(spec, id=f"{kind}[{i}]")


@pytest.mark.parametrize("spec", list(_example_sets()))
def test_every_operator_takes_an_empty_batch(spec):
    """Found by the operator fuzzer (seed 3): an empty batch reached a reduction inside the linear-image
    projection (ValueError). Every served operator of every built-in example answers an empty batch with
    an empty answer of the right shape, or refuses with setkit's own error."""
    K = setkit.compile(spec)
    Z = np.zeros((0,) + K.shape)
    routes = K.routes()
    calls = {"project": (Z,), "distance": (Z,), "lmo": (Z,), "support": (Z,), "contains": (Z,), "violation": (Z,),
             "project_jvp": (Z, Z), "project_vjp": (Z, Z)}
    for op, args in calls.items():
        if routes[op].provider == "none":
            continue
        out = getattr(K, op)(*args)
        want = (0,) + K.shape if op in ("project", "lmo", "project_jvp", "project_vjp") else (0,)
        assert np.shape(out) == want, (op, np.shape(out))
    if routes["project_kl"].provider != "none":
        try:
            out = K.project(np.ones((0,) + K.shape), geometry="kl")
        except setkit.errors.UnsupportedOperationError as e:      # the orthant check by LPs (sets that leave it)
            assert "nonnegative orthant" in str(e)
        else:
            assert out.shape == (0,) + K.shape


@pytest.mark.parametrize("spec, y, expect", [
    # a ray {x0 = x1 >= 0}: the projection of (-a, 3a) is (a, a) (orthogonal projection onto the line
    # x0 = x1, by hand); the reference stopped "optimal" at (1.006, 1.006) for a = 1e10
    ({"kind": "polyhedron", "C": [[1, -1]], "d": [0], "lower": [0, -np.inf]}, [-1e10, 3e10], [1e10, 1e10]),
    # a point inside a halfspace is its own projection; the reference moved it by 2e5 at magnitude 1e8
    ({"kind": "polyhedron", "A": [[1, 2, -1]], "b": [5]}, [1e8, -3e8, 2e8], [1e8, -3e8, 2e8]),
])
def test_reference_projection_of_far_points_is_right_or_refused(spec, y, expect):
    R = setkit.compile(spec).with_backends(project="reference")
    try:
        p = R.project(np.array(y, dtype=float))
    except SolveError:
        return
    np.testing.assert_allclose(p, expect, rtol=1e-7)
