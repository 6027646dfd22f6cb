"""The conformance checks of setkit.testing run over every registered built-in family.

Each family offers small instances through its classmethods ``examples()`` and
``random_example(rng)``; built-ins meet the same bar as users' sets.
"""
import pytest

from setkit.families import _FAMILIES, known_kinds
from setkit.testing import CHECKS, checks, family_checks

import numpy as np
from conformance_examples import FALLBACK_EXAMPLES, FALLBACK_RANDOM


def _builtin_kinds():
    known_kinds()   # imports every built-in module
    return sorted(k for k, cls in _FAMILIES.items() if cls.__module__.startswith("setkit."))


def _params():
    out = []
    for kind in _builtin_kinds():
        cls = _FAMILIES[kind]
        if kind == "custom":   # built in Python only; its conformance runs in tests/families/test_custom.py
            continue
        own = cls.examples() or cls.random_example(np.random.default_rng(0)) is not None
        if not own and kind in FALLBACK_EXAMPLES:
            specs = list(FALLBACK_EXAMPLES[kind])
            if kind in FALLBACK_RANDOM:
                specs.append(FALLBACK_RANDOM[kind](np.random.default_rng([7, len(kind)])))
            for i, spec in enumerate(specs):
                out.extend(pytest.param(fn, id=f"{kind}[{i}]:{name}")
                           for name, fn in _lazy(dict(spec, kind=kind)))
            continue
        if not own:
            out.append(pytest.param(None, id=f"{kind}:no-examples",
                                    marks=pytest.mark.skip(reason=f"{kind} offers no examples() yet")))
            continue
        out.extend(pytest.param(fn, id=name) for name, fn in family_checks(kind, seed=7, count=1, points=2))
    return out


def _lazy(spec):
    holder = {}

    def make(name):
        def run():
            if "checks" not in holder:
                holder["checks"] = dict(checks(spec, seed=7, points=2))
            try:
                return holder["checks"][name]()
            except AssertionError as exc:
                raise AssertionError(f"instance {spec!r}:\n{exc}") from None
        return run
    return [(name, make(name)) for name, _ in CHECKS]


@pytest.mark.parametrize("check", _params())
def test_builtin_family_conforms(check):
    outcome = check()
    # a passing check reports its worst gap as a fraction of the allowed one
    assert outcome.worst <= 1.0 or outcome.allowed == 0.0


def test_every_builtin_family_is_covered():
    kinds = _builtin_kinds()
    assert {"box", "simplex"} <= set(kinds)
    with_examples = [k for k in kinds if _FAMILIES[k].examples()]
    assert "box" in with_examples and "simplex" in with_examples
