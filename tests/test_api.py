"""The public API: what ``setkit.__all__`` holds, the builders, the extension module, import cost."""
from __future__ import annotations

import inspect
import re
import subprocess
import sys
import tomllib
from pathlib import Path

import numpy as np
import pytest

import setkit
import setkit.builders
import setkit.extend
import setkit.families
import setkit.penalty
import setkit.testing
from setkit.description import Location, Reader

ROOT = Path(__file__).resolve().parents[1]
BUILDERS = [n for n in setkit.builders.__all__ if n != "build"]
SECTION = re.compile(r"^(\w[\w ]*)\n-{3,}$", re.M)


def sections(doc: str) -> dict:
    """The numpydoc sections of a docstring: title -> body text (the summary under '')."""
    text = inspect.cleandoc(doc or "")
    out, heads = {}, list(SECTION.finditer(text))
    out[""] = text[:heads[0].start()] if heads else text
    for i, m in enumerate(heads):
        end = heads[i + 1].start() if i + 1 < len(heads) else len(text)
        out[m.group(1)] = text[m.end():end]
    return out


def documented_parameters(doc: str) -> list:
    """Names in the Parameters section (lines 'name : type' at the section's indentation)."""
    body = sections(doc).get("Parameters", "")
    return [m.group(1) for m in re.finditer(r"^\**(\w+)(?: :|$)", body, re.M)]


class RecordingReader(Reader):
    """A Reader that records every key a family's from_spec asks about."""

    def __init__(self, spec, kind):
        super().__init__(spec, Location("test", ()), kind)
        self.asked = set()

    def has(self, key):
        self.asked.add(key)
        return super().has(key)

    def raw(self, key, *args, **kw):
        self.asked.add(key)
        return super().raw(key, *args, **kw)


SIMPLEX = {"kind": "simplex", "dim": 3}
# hand-written instances of every builder's kind, together touching every parameter and branch of from_spec
SPECS = {
    "simplex": [{"dim": 4}, {"dim": 3, "total": 2.5, "mode": "at_most"}, {"dim": 1, "total": 0.0}],
    "budget": [{"dim": 4, "total": 1.0, "upper": 0.5},
               {"dim": 3, "total": 2.0, "lower": [0.1, 0, 0.2], "upper": [1, 1.5, 0.9], "weights": [1, 2, 0.5]},
               {"dim": 3, "total": 1.5, "upper": 1.0, "mode": "at_most"}],
    "box": [{"dim": 3, "lower": 0, "upper": 1}, {"lower": [-1.0, 0.0]}, {"upper": [1.0, 2.0, 3.0]}],
    "ball": [{"dim": 3, "radius": 1.5, "center": [0.5, -1.0, 2.0]}, {"center": [1.0, 2.0], "radius": 0.5, "norm": "inf"},
             {"dim": 4, "norm": 1, "radius": 0.7}],
    "permutahedron": [{"weights": [3, 1, 0.5, 0]}, {"weights": [1, 1, 0.25], "dim": 3}],
    "transport": [{"rows": [3, 2], "cols": [1, 2.5, 1.5]}],
    "birkhoff": [{"n": 3}],
    "flow": [{"nodes": ["a", "b", "c"], "supply": {"a": 2, "c": -2},
              "edges": [{"from": "a", "to": "b", "capacity": 1}, ["a", "c"], ["b", "c", 2, 0.5]]},
             {"edges": [[0, 1, 2], [1, 2, 2], [2, 0, 2]]},
             {"nodes": 3, "edges": [[0, 1], [1, 2]], "supply": [1, 0, -1]}],
    "polyhedron": [{"A": [[1, 1]], "b": [1], "lower": 0},
                   {"A": [[1, 2]], "b": 2, "C": [[1, -1]], "d": [0], "lower": [-1, -1], "upper": [3, 3]},
                   {"dim": 2, "lower": 0, "upper": 1}],
    "hull": [{"points": [[0, 0], [2, 0], [0, 2]]}, {"points": [[1, 0, 0], [0, 1, 0], [0, 0, 1]], "dim": 3}],
    "intersection": [{"of": [SIMPLEX, {"kind": "box", "dim": 3, "lower": 0, "upper": 0.5}]},
                     {"of": [{"kind": "ball", "dim": 2, "radius": 1.0},
                             {"kind": "ball", "center": [0.5, 0.0], "radius": 1.0, "norm": "inf"}],
                      "accuracy": 1e-8, "max_iterations": 5000, "splitting": "dykstra"}],
    "product": [{"of": [{"kind": "simplex", "dim": 2}], "copies": 2},
                {"of": [{"kind": "box", "dim": 2, "lower": 0, "upper": 1}, {"kind": "ball", "dim": 3, "radius": 1}]}],
    "affine": [{"set": {"kind": "simplex", "dim": 2}, "scale": 2.0, "shift": [1.0, 0.0]},
               {"set": {"kind": "box", "dim": 3, "lower": -1, "upper": 1}, "matrix": [[1, 2, 0], [0, 1, -1]],
                "shift": 0.5, "accuracy": 1e-8, "max_iterations": 1000}],
}


def example_specs(kind: str) -> list:
    return [dict(s) for s in SPECS[kind]]


def keys_read(kind: str) -> set:
    cls = setkit.extend.lookup(kind)
    asked = set()
    for params in example_specs(kind):
        r = RecordingReader({"kind": kind, **params}, kind)
        cls.from_spec(r)
        asked |= r.asked
    return asked


# -- __all__ -------------------------------------------------------------------------------------
def test_every_name_in_all_resolves_and_star_import_works():
    for name in setkit.__all__:
        assert getattr(setkit, name) is not None, name
    ns = {}
    exec("from setkit import *", ns)
    assert set(setkit.__all__) <= set(ns)
    assert len(set(setkit.__all__)) == len(setkit.__all__)


def test_all_holds_no_extension_names():
    extension = set(setkit.extend.__all__)
    assert not extension & set(setkit.__all__)
    ext_objects = [getattr(setkit.extend, n) for n in setkit.extend.__all__]
    for name in setkit.__all__:
        obj = getattr(setkit, name)
        assert not any(obj is e for e in ext_objects), name
        if isinstance(obj, type):
            assert not issubclass(obj, (setkit.extend.Family, setkit.extend.Backend, setkit.extend.Strategy,
                                       setkit.extend.Reader)), name


def test_record_types_are_the_types_operators_return():
    K = setkit.simplex(dim=3)
    assert isinstance(K, setkit.DecisionSet)
    assert isinstance(K.project([1.0, 2.0, 3.0], details=True), setkit.Details)
    pen = K.penalty(2.0, "ball", width=0.1, samples=4)
    assert isinstance(pen, setkit.DistancePenalty)
    assert isinstance(pen.value([1.0, 2.0, 3.0], details=True), setkit.PenaltyEstimate)
    assert isinstance(pen.extend(lambda x: 0.0), setkit.ExtendedLoss)
    assert isinstance(K.centroid("vertices", details=True), setkit.MeasureResult)
    assert all(isinstance(r, setkit.Route) for r in K.routes().values())
    assert setkit.Report.__name__ == "Report" and setkit.CheckRow.__name__ == "CheckRow"


def test_old_extension_names_keep_working_outside_all():
    assert setkit.register is setkit.extend.register is setkit.families.register
    assert setkit.kernel is setkit.extend.kernel
    assert setkit.Family is setkit.extend.Family
    for name in ("register", "kernel", "Family"):
        assert name not in setkit.__all__


def test_dir_lists_the_user_api_and_builders():
    names = dir(setkit)
    assert set(setkit.__all__) <= set(names)
    assert "TYPE_CHECKING" not in names and "annotations" not in names
    with pytest.raises(AttributeError, match="no attribute 'not_a_kind'"):
        setkit.not_a_kind


# -- builders ------------------------------------------------------------------------------------
def test_every_builder_is_a_real_exported_function():
    assert set(BUILDERS) <= set(setkit.extend.known_kinds())
    assert set(SPECS) == set(BUILDERS)
    for name in BUILDERS + ["build"]:
        fn = getattr(setkit, name)
        assert inspect.isfunction(fn) and fn.__module__ == "setkit.builders", name
        assert fn is getattr(setkit.builders, name)
        assert name in setkit.__all__ and name in dir(setkit)


@pytest.mark.parametrize("kind", BUILDERS)
def test_builder_docstring_lists_every_parameter_from_spec_reads(kind):
    fn = getattr(setkit, kind)
    sig = [p for p in inspect.signature(fn).parameters.values()]
    assert all(p.kind is inspect.Parameter.KEYWORD_ONLY for p in sig)
    signature_names = [p.name for p in sig]
    documented = documented_parameters(fn.__doc__)
    assert documented == signature_names, (kind, documented, signature_names)
    read = keys_read(kind)
    assert read <= set(signature_names), f"{kind}: from_spec reads {sorted(read - set(signature_names))}, not builder parameters"
    assert set(signature_names) - {"name"} <= read, f"{kind}: builder parameters {sorted(set(signature_names) - read - {'name'})} are never read"
    parts = sections(fn.__doc__)
    for title in ("Parameters", "Returns", "Notes", "Examples"):
        assert title in parts, (kind, title)
    assert "K = " in parts[""], f"{kind}: the summary states the set in math"
    assert re.search(r"O\(", parts["Notes"]), f"{kind}: Notes state the complexity"
    assert ">>> " in parts["Examples"] and f"setkit.{kind}(" in parts["Examples"]
    # every documented parameter says its type
    body = parts["Parameters"]
    for name in documented:
        assert re.search(rf"^{name} : \S", body, re.M), (kind, name)


@pytest.mark.parametrize("kind", BUILDERS)
def test_builder_equals_build_and_its_defaults_are_the_family_defaults(kind):
    fn = getattr(setkit, kind)
    literal_defaults = {p.name for p in inspect.signature(fn).parameters.values()
                        if p.default is not inspect.Parameter.empty and p.default is not None}
    for params in example_specs(kind):
        for given in (params, {k: v for k, v in params.items() if k not in literal_defaults}):
            try:
                expected = setkit.build(kind, **given)
            except setkit.SetkitError as exc:
                with pytest.raises(type(exc)) as got:
                    fn(**given)
                assert str(got.value) == str(exc)
                continue
            K = fn(**given)
            assert repr(K.node) == repr(expected.node), (kind, given)
            y = np.random.default_rng(3).standard_normal(K.shape) * 3
            np.testing.assert_array_equal(K.project(y), expected.project(y))


def test_builders_report_bad_values_at_the_argument():
    with pytest.raises(setkit.DescriptionError, match=r"simplex \(argument: dim\): dim must be at least 1; got 0"):
        setkit.simplex(dim=0)
    with pytest.raises(setkit.DescriptionError, match=r"norm must be one of 1, 2, inf; got 3"):
        setkit.ball(dim=2, radius=1.0, norm=3)
    with pytest.raises(setkit.DescriptionError, match="unknown parameter 'radius'"):
        setkit.build("simplex", dim=2, radius=1.0)
    with pytest.raises(TypeError):
        setkit.simplex(dim=2, radius=1.0)


def test_none_means_the_family_default():
    # a ball given by its center alone: dim=None is left out instead of being read as a value
    K = setkit.ball(center=[1.0, 2.0], radius=1.0, dim=None)
    assert K.shape == (2,)
    np.testing.assert_allclose(K.project([1.0, 5.0]), [1.0, 3.0])
    np.testing.assert_array_equal(setkit.box(dim=2, upper=1.0).lmo([-1.0, -1.0]), [1.0, 1.0])


def test_fallback_builder_for_kinds_without_a_function(monkeypatch):
    # a kind that only the registry knows (as third-party or later families are): served by __getattr__
    real_known, real_lookup = setkit.families.known_kinds, setkit.families.lookup
    monkeypatch.setattr(setkit.families, "known_kinds", lambda: real_known() + ["shares_left"])
    monkeypatch.setattr(setkit.families, "lookup",
                        lambda kind, location=None: real_lookup("simplex" if kind == "shares_left" else kind, location))
    fn = setkit.shares_left
    assert fn.__name__ == "shares_left"
    assert "setkit.build('shares_left', **params)" in fn.__doc__
    assert setkit.extend.lookup("simplex").__doc__.strip().splitlines()[0] in fn.__doc__
    np.testing.assert_allclose(fn(dim=3, total=2.0).project([3.0, 0.0, 0.0]), [2.0, 0.0, 0.0])


# -- docstrings of the other public functions ----------------------------------------------------
PUBLIC_FUNCTIONS = ([getattr(setkit, n) for n in ("compile", "load", "build", "verify", "from_cvxpy")]
                    + [getattr(setkit.testing, n) for n in ("check_set", "check_family", "checks", "family_checks",
                                                            "parametrize", "points", "directions")]
                    + [getattr(setkit.penalty.DistancePenalty, n) for n in ("value", "grad", "value_and_grad",
                                                                            "extend")]
                    + [getattr(setkit.penalty.ExtendedLoss, n) for n in ("value", "grad", "lipschitz")]
                    + [setkit.penalty.make_penalty])


@pytest.mark.parametrize("fn", PUBLIC_FUNCTIONS, ids=lambda f: f.__qualname__)
def test_public_functions_have_numpydoc_docstrings_with_examples(fn):
    parts = sections(fn.__doc__)
    assert parts[""].strip(), "a one-line summary"
    assert "Examples" in parts and ">>> " in parts["Examples"]
    params = [p.name for p in inspect.signature(fn).parameters.values() if p.name != "self"]
    if params:
        assert documented_parameters(fn.__doc__) == params, (documented_parameters(fn.__doc__), params)


# -- packaging and import cost -------------------------------------------------------------------
def test_py_typed_ships():
    assert (ROOT / "setkit" / "py.typed").is_file()
    meta = tomllib.loads((ROOT / "pyproject.toml").read_text())
    assert "py.typed" in meta["tool"]["setuptools"]["package-data"]["setkit"]


def test_pytest_collects_the_package_doctests():
    opts = tomllib.loads((ROOT / "pyproject.toml").read_text())["tool"]["pytest"]["ini_options"]
    assert "setkit" in opts["testpaths"] and "--doctest-modules" in opts["addopts"]


def test_import_setkit_loads_no_heavy_module():
    code = ("import sys, setkit; heavy = sorted(m for m in sys.modules if m.split('.')[0] in "
            "('numpy', 'scipy', 'cvxpy', 'numba', 'osqp', 'highspy', 'networkx', 'yaml')); print(heavy)")
    out = subprocess.run([sys.executable, "-c", code], cwd=ROOT, capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "[]"
