"""The conformance checks of setkit.testing run over every registered built-in family.

Each family offers small instances through its classmethods ``examples()`` and
``random_example(rng)``; built-ins meet the same bar as users' sets, and nothing
outside the family's own module lists them.
"""
import pytest

from setkit.families import known_kinds, lookup
from setkit.testing import family_checks


def _builtin_kinds():
    return [k for k in known_kinds() if lookup(k).__module__.startswith("setkit.")]


def _no_examples(message):
    def fail():
        raise AssertionError(message)
    return fail


def _params():
    out = []
    for kind in _builtin_kinds():
        try:
            out.extend(pytest.param(fn, id=name) for name, fn in family_checks(kind, seed=7, count=1, points=2))
        except AssertionError as exc:   # a family without examples fails here, not the whole module
            out.append(pytest.param(_no_examples(str(exc)), id=f"{kind}:examples"))
    return out


@pytest.mark.parametrize("check", _params())
def test_builtin_family_conforms(check):
    outcome = check()
    # a passing check reports its worst gap as a fraction of the allowed one
    assert outcome.worst <= 1.0 or outcome.allowed == 0.0


def test_every_builtin_family_is_covered():
    kinds = _builtin_kinds()
    assert {"box", "simplex", "budget", "ball", "permutahedron", "product"} <= set(kinds)
    # every kind has instances of its own ("kind[i]:check" ids; "kind:examples" when it has none)
    assert {p.id.split("[")[0] for p in _params()} == set(kinds)
