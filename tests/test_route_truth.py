"""explain() tells the truth: for every catalog entry, each operator's reported route is the code
path that actually ran.

Every candidate implementation of the top node is instrumented (the family's native kernels and
their compiled single-point entries, the combinator strategies of its kind, every backend's operator
methods, the linear form's violation);
a call records (provider, operator) when it serves the top node itself. Then each public operator is
called once and the record must show the route's provider serving that operator (for a derived
route: the provider of its source operator serving the source operator) and no other provider
serving it.
"""
import glob
import os

import numpy as np
import pytest

import setkit
from setkit.backends import all_backends
from setkit.forms import LinearForm
from setkit.strategies import strategies_for

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
CATALOG = sorted(glob.glob(os.path.join(ROOT, "catalog", "*.yaml")))


class Recorder:
    def __init__(self, monkeypatch, node):
        self.calls = []
        self.node = node
        self.form = None
        cls = type(node)
        for op, attr in cls.kernels.items():
            self._wrap(monkeypatch, cls, attr, "native", op, lambda obj: obj)
        if "point_kernels" in vars(cls):      # the single-point fast path of the native project / lmo
            self._wrap_points(monkeypatch, cls)
        for strat in strategies_for(node.kind):
            for op in strat.operators:
                self._wrap(monkeypatch, strat, op, strat.name, op, lambda obj: obj.node)
        for name, bcls in all_backends().items():
            for op in bcls.operators:
                if op in vars(bcls):
                    self._wrap(monkeypatch, bcls, op, name, op, lambda obj: obj.node)
        rec = self

        orig_violation = LinearForm.violation_x

        def violation_x(form, X):
            if form is rec.form:      # the top set's own form (the plan uses the DecisionSet's cached one)
                rec.calls.append(("form", "violation"))
            return orig_violation(form, X)
        monkeypatch.setattr(LinearForm, "violation_x", violation_x)

        orig_screen = LinearForm.membership_screen

        def form_screen(form, X, tol):
            if form is rec.form:
                rec.calls.append(("screen", "contains"))
            return orig_screen(form, X, tol)
        monkeypatch.setattr(LinearForm, "membership_screen", form_screen)
        own_screen = cls.membership_screen

        def node_screen(obj, X, tol, parts):
            v = own_screen(obj, X, tol, parts)
            if obj is rec.node and v is not None:
                rec.calls.append(("screen", "contains"))
            return v
        monkeypatch.setattr(cls, "membership_screen", node_screen)

    def _wrap_points(self, monkeypatch, cls):
        orig = cls.point_kernels
        rec = self

        def point_kernels(obj, check=True):
            entries = orig(obj, check)
            out = {}
            for op, (fn, args) in entries.items():
                def recorded(*a, _fn=fn, _op=op):
                    if obj is rec.node:      # bound at compile time, before the test names its node
                        rec.calls.append(("native", _op))
                    return _fn(*a)
                out[op] = (recorded, args)
            return out
        monkeypatch.setattr(cls, "point_kernels", point_kernels)

    def _wrap(self, monkeypatch, owner, attr, provider, op, node_of):
        orig = getattr(owner, attr)
        rec = self

        def wrapped(obj, *a, **k):
            if node_of(obj) is rec.node:
                rec.calls.append((provider, op))
            return orig(obj, *a, **k)
        wrapped.__doc__ = orig.__doc__
        wrapped.__name__ = getattr(orig, "__name__", attr)
        for flag in ("_setkit_operator", "_setkit_workspace"):
            if hasattr(orig, flag):
                setattr(wrapped, flag, getattr(orig, flag))
        monkeypatch.setattr(owner, attr, wrapped)


def _expected(routes, op):
    """(provider, operator) that must serve ``op``: follow derived routes to their source."""
    r = routes[op]
    while r.provider == "derived":
        r = routes[r.source]
    return r.provider, r.operator


@pytest.mark.parametrize("path", CATALOG, ids=[os.path.basename(p) for p in CATALOG])
def test_reported_route_is_the_code_that_ran(path, monkeypatch):
    base = setkit.load(path)
    rec = Recorder(monkeypatch, base.node)
    K = setkit.load(path)            # compiled after instrumenting: the plan binds the wrappers
    # load() parses again: a new node; instrument that one instead
    rec.node = K.node
    rec.form = K.linear_form()
    routes = K.routes()
    rng = np.random.default_rng(0)
    y = rng.standard_normal(K.shape) * 2.0
    inside = K.project(y)
    calls = {
        "project": lambda: K.project(y),
        "distance": lambda: K.distance(y),
        "lmo": lambda: K.lmo(y),
        "support": lambda: K.support(y),
        "contains": lambda: K.contains(inside),
        "violation": lambda: K.violation(y),
    }
    checked = 0
    for op, call in calls.items():
        r = routes[op]
        if r.provider == "none":
            continue
        rec.calls.clear()
        try:
            call()
        except setkit.UnboundedDirectionError:
            pass
        want = _expected(routes, op)
        if op == "contains" and r.provider == "derived" and ("screen", "contains") in rec.calls:
            # the derived membership rule decided by the set's constraint screen, projecting only
            # undecided points: the screen ran, and the source operator ran on the rest (if any)
            checked += 1
            continue
        assert want in rec.calls, (f"{path}: {op} reports {r.provider} ({r.reason}) but the code that ran was "
                                   f"{rec.calls}")
        served_op = [c for c in rec.calls if c[1] == want[1] and c[0] != want[0]]
        assert not served_op, f"{path}: {op} reports {want[0]} but {served_op} also served it"
        checked += 1
    assert checked >= 4


@pytest.mark.parametrize("description", [
    {"kind": "spectraplex", "n": 3},
    {"kind": "nuclear_ball", "rows": 2, "cols": 3, "radius": 1.0},
    {"kind": "spectral_ball", "rows": 2, "cols": 2, "radius": 1.0},
])
def test_kl_route_of_a_set_outside_the_orthant_says_none_and_why(description):
    """A set that leaves x >= 0 has no KL projection: explain() says "none" with the family's reason
    (it used to name the conic reference, which then refused at call time)."""
    K = setkit.compile(description)
    route = K.routes()["project_kl"]
    assert route.provider == "none"
    assert "nonnegative orthant" in route.reason
    with pytest.raises(setkit.errors.UnsupportedOperationError, match="nonnegative orthant"):
        K.project(np.ones(K.shape), geometry="kl")
