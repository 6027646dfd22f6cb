"""setkit.agreement: the one comparison with the cvxpy reference (inputs, measures, verify, compare)."""
from dataclasses import dataclass

import numpy as np
import pytest

import setkit
from setkit import agreement as A
from setkit.backends import _BACKENDS, Backend, all_backends
from setkit.families import kernel
from setkit.families.simplex import Simplex
from setkit.routing import DERIVED_RULES


def test_reference_routes_every_solved_operator_to_the_reference():
    K = setkit.compile({"kind": "box", "dim": 3, "lower": 0, "upper": 1})
    R = A.reference(K)
    routes = R.routes()
    assert {op: routes[op].provider for op in A.REFERENCE_ROUTES} == A.REFERENCE_ROUTES
    assert routes["distance"].provider == K.routes()["distance"].provider    # other routes are kept
    assert A.reference(K, loose=True).loose and not R.loose


def test_scales_and_gaps_by_hand():
    # worked by hand: rows (3, -4) and (0.5, 0) with s = 2
    X = np.array([[3.0, -4.0], [0.5, 0.0]])
    assert A.point_scale(X, 2.0).tolist() == [8.0, 2.0]                # max(1, |x|_inf) * s
    assert A.direction_scale(X, 2.0).tolist() == [10.0, 1.0]           # ||x||_2 * s
    assert A.direction_scale(np.zeros((1, 2)), 1.0)[0] == 1e-300
    assert A.point_gaps(X, np.zeros((2, 2))).tolist() == [5.0, 0.5]
    g = A.value_gaps([1.0, np.inf, -np.inf, np.inf, np.nan], [0.25, np.inf, np.inf, 3.0, 1.0])
    assert g.tolist() == [0.75, 0.0, np.inf, np.inf, np.inf]
    C = np.array([[1.0, 2.0], [1.0, 0.0], [0.0, 1.0]])
    gaps, v, vr = A.objective_gaps(C, [np.array([1.0, 1.0]), None, np.array([0.0, 2.0])],
                                   [np.array([3.0, 0.0]), np.array([5.0, 5.0]), None])
    # <c, x> = 3 vs 3; a point where the reference is unbounded, and the reverse, are infinite gaps
    assert gaps.tolist() == [0.0, np.inf, np.inf] and v == [3.0, None, 2.0] and vr == [3.0, 5.0, None]
    assert A.objective_gaps(C[:1], [None], [None])[0].tolist() == [0.0]


def test_seeded_points_groups_and_draw_order():
    K = setkit.compile({"kind": "simplex", "dim": 4, "total": 3.0})
    n = 3
    X, labels = A.seeded_points(K, n, np.random.default_rng(5))
    assert X.shape == (4 * n + 2, 4) and len(labels) == len(X)
    assert labels[0] == "a point of the set" and labels[-1] == "a huge point (scale 1e6)"
    # inside rows lie in K (simplex: nonnegative, summing to the total, to the reference's accuracy)
    assert np.all(X[:n] >= -1e-6) and np.allclose(X[:n].sum(axis=1), 3.0, atol=1e-6)
    s = A.data_scale(K)
    assert s == 3.0
    assert np.abs(X[-2]).max() < 1e-1 and np.abs(X[-1]).max() > 1e4 * s
    # the first 4n rows do not depend on the two extreme rows, and the seed decides everything
    X2, _ = A.seeded_points(K, n, np.random.default_rng(5))
    np.testing.assert_array_equal(X, X2)
    rng = np.random.default_rng(5)
    raw = rng.standard_normal((n, 4)) * s
    np.testing.assert_array_equal(X[2 * n:3 * n], raw)
    # inside_by chooses whose projection makes the inside rows
    Xk, _ = A.seeded_points(K, n, np.random.default_rng(5), inside_by=K)
    np.testing.assert_allclose(Xk[:n], K.project(raw), atol=0)


def test_seeded_directions_groups():
    K = setkit.compile({"kind": "box", "dim": 5, "lower": -1, "upper": 2})
    C, labels = A.seeded_directions(K, 2, np.random.default_rng(0))
    assert C.shape == (7, 5) and len(labels) == 7
    assert np.all(C[2:4] == np.round(C[2:4])) and np.all(C[4] == 1.0)
    assert np.all(np.any(C != 0, axis=1))                 # no zero direction
    assert np.abs(C[5]).max() < 1e-1 and np.abs(C[6]).max() > 1e4


@dataclass(frozen=True, eq=False, kw_only=True)
class _LmoOffByOnePercent(Simplex):
    @kernel("lmo")
    def lmo(self, C):
        """The right vertex pulled 1% toward the barycenter: in K, but not a minimizer (a bug)."""
        return 0.99 * super().lmo(C) + 0.01 * self.total / self.n


def test_verify_passes_a_correct_set_and_fails_a_wrong_lmo():
    rep = A.verify(setkit.compile({"kind": "simplex", "dim": 4}), n_points=1)
    assert rep.ok and [r.operator for r in rep.rows] == ["project", "distance", "contains", "lmo", "support",
                                                          "certificate"]
    assert all(r.max_error <= r.allowed for r in rep.rows)
    node = _LmoOffByOnePercent(n=4, total=1.0)
    bad = A.verify(setkit.compile(node), n_points=1)
    rows = {r.operator: r for r in bad.rows}
    assert not bad.ok and not rows["lmo"].ok and rows["project"].ok
    assert rows["lmo"].max_error > 1e-3
    assert "DISAGREEMENT" in bad.text()


def test_verify_on_a_set_unbounded_in_some_directions():
    # {x : x1 + x2 <= 1, x1 >= 0}: the LMO is unbounded along some directions, finite along others;
    # each direction is compared on its own, and both sides must agree on which are unbounded
    K = setkit.compile({"kind": "polyhedron", "A": [[1.0, 1.0], [-1.0, 0.0]], "b": [1.0, 0.0]})
    rep = A.verify(K, n_points=2)
    rows = {r.operator: r for r in rep.rows}
    assert rep.ok, rep.text()
    assert rows["lmo"].cases == 7 and rows["support"].cases == 7
    # by hand: max x2 over the set is 1 (at x = (0, 1)); max -x2 is unbounded
    assert np.isinf(A.support_rows(K, np.array([[0.0, -1.0]]))[0])
    assert abs(A.support_rows(K, np.array([[0.0, 1.0]]))[0] - 1.0) <= 1e-9
    assert A.lmo_rows(K, np.array([[0.0, 1.0], [-1.0, -1.0]]))[0] is None


def test_providers_come_from_the_registry(monkeypatch):
    K = setkit.compile({"kind": "simplex", "dim": 3})
    for op in ("project", "distance", "lmo", "support"):
        got = A.providers(K, op)
        assert ("native" in got) == (op in K.node.kernels)
        assert ("derived" in got) == (op in DERIVED_RULES)
        for name in got:
            if name not in ("native", "derived"):
                cls = all_backends()[name]
                assert op in cls.operators and cls.accepts(K.node)[0]

    class Extra(Backend):
        operators = ("lmo",)
        requires = "linear_form"
        priority = 10_000
        about = "a backend registered by this test"
    monkeypatch.setitem(_BACKENDS, "extra_for_agreement_tests", Extra)
    assert A.providers(K, "lmo")[-1] == "extra_for_agreement_tests"
    assert "extra_for_agreement_tests" not in A.providers(K, "project")


def test_compare_backends_measures_every_provider_against_the_same_reference():
    K = setkit.compile({"kind": "simplex", "dim": 4})
    rows = A.compare_backends(K, n_points=1, repeat=1)
    assert {(r["operator"], r["provider"]) for r in rows} == {
        (op, p) for op in A.COMPARED_OPERATORS for p in A.providers(K, op)}
    for r in rows:
        assert r["agrees"] is True and r["max_gap"] <= A.DEFAULT_RTOL and r["ms_per_call"] > 0, r
        if r["provider"] == "reference":
            assert r["max_gap"] <= 1e-12      # the reference against its own cached answers
    bad = A.compare_backends(setkit.compile(_LmoOffByOnePercent(n=4, total=1.0)), n_points=1, repeat=1)
    verdict = {(r["operator"], r["provider"]): r["agrees"] for r in bad}
    assert verdict[("lmo", "native")] is False and verdict[("lmo", "highs")] is True


@pytest.mark.parametrize("rtol", [1e-30])
def test_an_impossible_tolerance_fails(rtol):
    # the check can fail: at rtol = 1e-30 the interior-point reference never matches exactly
    rep = A.verify(setkit.compile({"kind": "ball", "dim": 3, "radius": 1.0}), n_points=1, rtol=rtol)
    assert not rep.ok


def test_the_first_provider_is_the_default_route_on_every_catalog_entry():
    # providers() lists what the registries declare in routing's order of preference, so its first
    # entry is the route the plan chose; every listed name is accepted by with_backends
    from pathlib import Path
    folder = Path(__file__).resolve().parent.parent / "catalog"
    for path in sorted(folder.glob("*.yaml")):
        K = setkit.load(path)
        for op in A.COMPARED_OPERATORS:
            got = A.providers(K, op)
            assert got and got[0] == K.routes()[op].provider, (path.stem, op, got)
            for name in got:
                assert K.with_backends(**{op: name}).routes()[op].provider == name


def test_compare_judges_a_backend_by_its_own_answers_not_its_fallback(monkeypatch):
    # a backend chosen by the caller does not fall back: the comparison reports it as failed

    from setkit.errors import SolveError

    class Failing(Backend):
        operators = ("project",)
        requires = "cvxpy"
        priority = 10_000
        about = "fails on purpose (tests)"

        def project(self, Y):
            raise SolveError("always fails (on purpose)", status="max_iter")
    all_backends()
    monkeypatch.setitem(_BACKENDS, "fails_for_agreement_tests", Failing)
    rows = A.compare_backends(setkit.compile({"kind": "simplex", "dim": 3}), n_points=1, repeat=1)
    row = next(r for r in rows if r["provider"] == "fails_for_agreement_tests")
    assert row["failed"] and row["agrees"] is None and "always fails" in row["note"], row
    assert not any(r["failed"] for r in rows if r is not row)
