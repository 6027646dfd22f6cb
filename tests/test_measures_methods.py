"""The table of methods (setkit.measures.methods): walked once, and the method it reports is the one
that produced the answer."""
from __future__ import annotations

import dataclasses
from dataclasses import dataclass
import gc
import itertools
import warnings
import weakref

import numpy as np
import pytest

import setkit
from setkit import measures
from setkit.decision_set import DecisionSet
from setkit.errors import AccuracyWarning, InputError, SetkitError, UnsupportedOperationError
from setkit.families import Family, kernel
from setkit.measures import methods

# a triangle in R^3: {x >= 0, sum x = 2, x <= 0.9}, vertices the permutations of (0.9, 0.9, 0.2); as an
# intersection it has no family knowledge, so the generic rows of the table answer
TRIANGLE = {"kind": "intersection", "of": [{"kind": "simplex", "dim": 3, "total": 2.0},
                                           {"kind": "box", "dim": 3, "lower": 0, "upper": 0.9}]}
TRIANGLE_VERTICES = np.array([[0.9, 0.9, 0.2], [0.9, 0.2, 0.9], [0.2, 0.9, 0.9]])



@dataclass(frozen=True, eq=False, kw_only=True)
class Disc(Family):
    """The unit disc with only a projection and an LMO: no linear form and no exact knowledge, so the
    membership-chord rows of the table answer (an unregistered test family)."""
    kind = "test-disc"
    traits = frozenset({"bounded"})

    @property
    def shape(self):
        return (2,)

    def cvxpy_constraints(self, x):
        import cvxpy as cp
        return [cp.norm(x, 2) <= 1.0]

    @kernel("project")
    def project(self, Y):
        """Radial scaling, O(n)."""
        return Y / np.maximum(1.0, np.linalg.norm(Y, axis=1, keepdims=True))

    @kernel("lmo")
    def lmo(self, C):
        """-c/||c||, O(n)."""
        return -C / np.linalg.norm(C, axis=1, keepdims=True)


SETS = {
    "simplex": lambda: setkit.compile({"kind": "simplex", "dim": 3, "mode": "at_most"}),
    "triangle": lambda: setkit.compile(TRIANGLE),
    "unbounded box": lambda: setkit.compile({"kind": "box", "dim": 2, "lower": 0}),
    "disc": lambda: DecisionSet(Disc()),
}
QUICK = dict(chains=2, burn_in=5, thin=1)


def instrumented(calls):
    """LADDER with every answer function wrapped: each call appends (row name, outcome or the error)."""
    def wrap(method, fn):
        def recorded(req):
            try:
                out = fn(req)
            except SetkitError as exc:
                calls.append((method.name, exc))
                raise
            calls.append((method.name, out))
            return out
        return recorded
    return tuple(dataclasses.replace(m, centroid=m.centroid and wrap(m, m.centroid),
                                     sample=m.sample and wrap(m, m.sample)) for m in methods.LADDER)


@pytest.mark.parametrize("name", list(SETS))
def test_one_walk_and_the_reported_row_produced_the_answer(name, monkeypatch):
    calls = []
    monkeypatch.setattr(methods, "LADDER", instrumented(calls))
    K = SETS[name]()
    for measure, purpose, exact in itertools.product(measures.MEASURES, ("centroid", "sample"), (None, False)):
        if purpose == "sample" and exact is False:
            continue
        calls.clear()
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", AccuracyWarning)
                if purpose == "centroid":
                    r = K.centroid(measure, details=True, exact=exact, samples=40, rng=0, **QUICK)
                    got, reported = r.point, r.method
                else:
                    r = K.sample(6, measure, rng=0, details=True, **QUICK)
                    got, reported = r.points, r.method
        except UnsupportedOperationError as exc:
            # a refusal: the last row tried raised it, and every earlier row declined
            assert calls and calls[-1][1] is exc, (name, measure, purpose, calls)
            assert all(out is None for _, out in calls[:-1]), (name, measure, purpose, calls)
            continue
        names = [n for n, _ in calls]
        assert len(names) == len(set(names)), f"{name} {purpose}({measure}): a row ran twice: {names}"
        assert names[-1] == reported, (name, measure, purpose, names, reported)
        assert all(out is None for _, out in calls[:-1]), (name, measure, purpose, calls)
        np.testing.assert_array_equal(calls[-1][1].value.reshape(got.shape), got)
        if exact is False:
            kinds = {m.name: m.kind for m in methods.LADDER}
            assert all(kinds[n] != "exact" for n in names), (name, measure, names)


def test_sample_details_name_the_method_that_drew():
    K = setkit.compile(TRIANGLE)
    vol = K.sample(30, rng=1, details=True)
    assert vol.method == "hit-and-run" and not vol.exact and vol.points.shape == (30, 3)
    assert K.contains(vol.points).all()
    ver = K.sample(30, "vertices", rng=1, details=True)
    assert ver.method == "vertex enumeration" and ver.exact
    # every draw is one of the three vertices, and the plain call draws the same points
    dist = np.abs(ver.points[:, None, :] - TRIANGLE_VERTICES[None]).max(axis=2).min(axis=1)
    assert dist.max() <= 1e-12
    np.testing.assert_array_equal(K.sample(30, "vertices", rng=1), ver.points)
    dirs = K.sample(30, "directions", rng=1, details=True)
    assert dirs.method == "Monte Carlo over enumerated vertices" and dirs.exact
    assert setkit.compile({"kind": "box", "dim": 2, "lower": 0, "upper": 1}).sample(
        4, rng=0, details=True).method == "closed form"
    empty = K.sample(0, details=True)
    assert empty.points.shape == (0, 3) and empty.method == "none"


def test_exact_true_refuses_instead_of_estimating():
    with pytest.raises(UnsupportedOperationError, match="no exact method"):
        DecisionSet(Disc()).centroid(exact=True)
    # an exact answer is still given when one exists
    r = setkit.compile(TRIANGLE).centroid(exact=True, details=True)
    assert r.exact and r.method == "triangulation"


def test_bad_arguments_say_where_and_the_closest_choice():
    K = SETS["simplex"]()
    with pytest.raises(InputError, match="closest: 'vertices'"):
        K.centroid("vertex")
    with pytest.raises(InputError, match="closest: 'directions'"):
        K.sample(3, "direction")
    # the seed is checked even when no method draws (an exact centroid, or k = 0)
    with pytest.raises(InputError, match=r"centroid\(measure='volume'\) on simplex: rng must be"):
        K.centroid(rng=2.5)
    with pytest.raises(InputError, match="sample.*got str"):
        K.sample(0, rng="seed")


def test_geometry_is_kept_beside_the_node_not_in_it():
    K = setkit.compile(TRIANGLE)
    K.linear_form()                    # the combinator's own formulation cache is not the measures' business
    before = dict(vars(K.node))
    P = measures.reduced(K)
    assert measures.reduced(K) is P                       # computed once per node
    K.centroid("vertices")
    assert vars(K.node).keys() == before.keys()          # the measures write nothing into the node
    # the cache does not keep the node alive
    ref = weakref.ref(K.node)
    del K, P
    gc.collect()
    assert ref() is None
