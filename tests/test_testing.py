"""setkit.testing: the conformance check passes correct sets and catches broken ones."""
from dataclasses import dataclass

import numpy as np
import pytest
from hypothesis import given, settings

import setkit
import setkit.testing as T
from setkit.decision_set import DecisionSet
from setkit.families import kernel
from setkit.families.box import Box
from setkit.families.simplex import Simplex


# -- deliberately broken families ---------------------------------------------------------------
@dataclass(frozen=True, eq=False, kw_only=True)
class ShiftedProjection(Simplex):
    @kernel("project")
    def project(self, Y):
        """The right projection moved by 1e-3 along the first axis (a bug)."""
        P = super().project(Y)
        P[:, 0] += 1e-3
        return P


@dataclass(frozen=True, eq=False, kw_only=True)
class InsideButWrongProjection(Simplex):
    @kernel("project")
    def project(self, Y):
        """A point of the set that is not the nearest one: 1% of the way to the barycenter (a bug)."""
        P = super().project(Y)
        return 0.99 * P + 0.01 * self.total / self.n


@dataclass(frozen=True, eq=False, kw_only=True)
class SecondBestLmo(Simplex):
    @kernel("lmo")
    def lmo(self, C):
        """The vertex at the second-smallest c_i: a point of the set, not a minimizer (a bug)."""
        X = np.zeros_like(C)
        j = np.argsort(C, axis=1)[:, 1]
        X[np.arange(len(C)), j] = self.total
        return X


@dataclass(frozen=True, eq=False, kw_only=True)
class FlippedSupport(Simplex):
    @kernel("support")
    def support(self, C):
        """total * min(c): the support of -c with the sign flipped back (a bug)."""
        return self.total * C.min(axis=1)


@dataclass(frozen=True, eq=False, kw_only=True)
class GreedyContains(Box):
    @kernel("contains")
    def contains(self, X, tol):
        """Accepts every point (a bug)."""
        return np.ones(X.shape[0], bool)


@dataclass(frozen=True, eq=False, kw_only=True)
class FlatBatchProjection(Simplex):
    @kernel("project")
    def project(self, Y):
        """Right values, but every row gets the first row's answer (a batching bug)."""
        P = super().project(Y[:1])
        return np.repeat(P, len(Y), axis=0)


def _simplex(cls, n=4, total=1.0):
    return DecisionSet(cls(n=n, total=total))


def _fails(K, *words, **kw):
    with pytest.raises(AssertionError) as info:
        T.check_set(K, seed=3, **kw)
    msg = str(info.value)
    for w in words:
        assert w in msg, msg
    # the message shows the input, both answers and the gap
    for w in ("input:", "setkit:", "reference:", "gap:"):
        assert w in msg or "batch/shapes" in msg, msg
    return msg


def test_projection_off_by_a_small_shift_is_caught():
    # (the simplex has its own distance kernel, so a broken projection no longer breaks distance)
    msg = _fails(_simplex(ShiftedProjection), "project/reference", "project/feasible")
    assert "allowed" in msg


def test_projection_inside_the_set_but_not_nearest_is_caught():
    # the answer is feasible, so only the comparison and the certificate can see it
    msg = _fails(_simplex(InsideButWrongProjection), "project/reference", "project/certificate")
    assert "project/feasible" not in msg


def test_lmo_returning_a_non_minimizer_is_caught():
    msg = _fails(_simplex(SecondBestLmo), "lmo/reference")
    assert "project/" not in msg


def test_support_with_the_wrong_sign_is_caught():
    _fails(_simplex(FlippedSupport), "support/reference")


def test_membership_accepting_everything_is_caught():
    _fails(DecisionSet(GreedyContains(lower=np.zeros(3), upper=np.ones(3))), "contains/points-outside")
    # the correct box passes the same check
    assert T.check_set(DecisionSet(Box(lower=np.zeros(3), upper=np.ones(3))), seed=3, only=["contains"])


def test_batching_bug_is_caught():
    _fails(_simplex(FlatBatchProjection, n=3), "batch/shapes", "project/reference")


@pytest.mark.parametrize("spec", [
    {"kind": "simplex", "dim": 4},
    {"kind": "simplex", "dim": 6, "total": 2.0, "mode": "at_most"},
    {"kind": "box", "lower": [0, -1, 2], "upper": [1, 1, 2.5]},
])
def test_correct_sets_pass(spec):
    out = T.check_set(spec, seed=11)
    names = [o.name for o in out]
    assert names[:3] == ["project/reference", "project/certificate", "project/fixed-points"]
    ran = [o for o in out if not o.note]
    assert len(ran) >= 12
    assert all(o.worst <= 1.0 for o in ran)
    assert sum(o.cases for o in ran) > 100


def test_unbounded_box_passes_and_lmo_raises_where_the_reference_does():
    K = setkit.compile({"kind": "box", "lower": [0.0, "-inf"], "upper": ["inf", 2.0]})
    out = {o.name: o for o in T.check_set(K, seed=2)}
    assert out["lmo/reference"].cases > 0


def test_only_restricts_the_checks():
    out = T.check_set({"kind": "simplex", "dim": 3}, only=["lmo"])
    assert {o.name for o in out} == {"lmo/reference", "lmo/zero-direction"}


def test_check_family_uses_examples_and_random_instances():
    out = T.check_family("simplex", seed=0, count=1, points=2)
    n_instances = len(Simplex.examples()) + 1
    assert len(out) == n_instances * len(T.CHECKS)


def test_check_family_reports_the_instance():
    class Broken(ShiftedProjection):
        @classmethod
        def examples(cls):
            return [{"kind": "simplex", "dim": 3}]

        @classmethod
        def from_spec(cls, r):
            return cls(n=r.integer("dim"))
    # examples are compiled by kind, so check a family whose kind points at the broken class
    from setkit.families import _FAMILIES, register
    register("broken_simplex_for_tests")(Broken)
    try:
        Broken.examples = classmethod(lambda cls: [{"kind": "broken_simplex_for_tests", "dim": 3}])
        with pytest.raises(AssertionError) as info:
            T.check_family(Broken, seed=0, count=0)
        assert "instance {'kind': 'broken_simplex_for_tests', 'dim': 3}" in str(info.value)
    finally:
        _FAMILIES.pop("broken_simplex_for_tests", None)


def test_family_without_examples_is_told_what_to_add():
    from setkit.families import Family

    class Bare(Family):
        pass
    with pytest.raises(AssertionError, match="examples"):
        T.check_family(Bare)


# -- the pytest helper --------------------------------------------------------------------------
_K = setkit.compile({"kind": "simplex", "dim": 3, "total": 2.0})


@T.parametrize(_K, seed=5)
def test_parametrize_gives_one_case_per_check(check):
    outcome = check()
    assert outcome.worst <= 1.0


def test_parametrize_ids_are_the_check_names():
    mark = T.parametrize(_K)
    ids = [p.id for p in mark.args[1]]
    assert ids == [name for name, _ in T.CHECKS]
    fmark = T.parametrize("simplex", family=True)
    assert any(p.id.startswith("simplex[0]:") for p in fmark.args[1])


# -- hypothesis strategies ----------------------------------------------------------------------
@settings(max_examples=25, deadline=None)
@given(T.points(_K, where="inside"), T.directions(_K))
def test_strategies_give_points_of_the_set_and_directions(x, c):
    assert x.shape == _K.shape and c.shape == _K.shape
    assert _K.contains(x)
    # for every point of the set, <c, x> <= support(c) (definition of the support function)
    assert c @ x <= _K.support(c) + 1e-9 * (1 + np.abs(c).sum())


@settings(max_examples=25, deadline=None)
@given(T.points(_K, where="near"))
def test_near_points_are_close(y):
    assert _K.distance(y) <= 2e-3 * np.sqrt(_K.dim) * 2.0


@settings(max_examples=25, deadline=None)
@given(T.points(_K, scale=1e3))
def test_anywhere_points_project_inside(y):
    assert _K.contains(_K.project(y))
