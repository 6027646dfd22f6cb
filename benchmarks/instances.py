"""Benchmark instances, read from the families themselves.

Nothing here lists families. For every kind, the runner (``benchmarks/run.py``)
asks the family class:

* ``benchmark_example(n, rng)`` (optional classmethod): an instance with about
  ``n`` coordinates, built from the seeded ``numpy.random.Generator`` ``rng``.
  It returns a description dict for ``setkit.compile`` (NumPy arrays and scipy
  sparse matrices are accepted as values), a list of such dicts (variants: each
  is its own workload, e.g. the l2 and the l1 ball), or None when the family
  has no instance of that size (e.g. above the size its data can be built
  cheaply at). The description's optional ``about`` text labels the workload
  in the report. It must be cheap: it runs at every size, up to n = 1e6.
* otherwise its first declared example (``examples()``, else
  ``random_example(rng)``), benchmarked at that example's own size.

A description that refers to kinds that are not registered (an intersection
of a family that is not installed) yields a row saying so instead of a crash.

Floors, the yardsticks of native rows, are the same for every workload:
``np.sort`` of the data for projections and distances, one ``np.sum`` pass
for the other operators.
"""
from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from typing import Callable

import numpy as np

from setkit.errors import DescriptionError
from setkit.families import Family, known_kinds, lookup

QUICK_SIZES = (24,)
FULL_SIZES = (100, 1_000, 10_000, 100_000, 1_000_000)

# floor names: "sort" (np.sort of the data), "sort+isotonic" (np.sort then
# scipy.optimize.isotonic_regression), "pass" (one np.sum over the data)
FLOORS = {"project": "sort", "distance": "sort", "lmo": "pass", "support": "pass", "contains": "pass"}

HOOK = "benchmark_example"


@dataclass(frozen=True)
class Workload:
    """One benchmarked instance family: ``build(n, rng)`` gives its description at size ``n``."""

    kind: str
    label: str
    build: Callable
    sizes: tuple | None     # None: once, at the instance's own size
    batch: int = 1          # points per call

    def floor(self, op: str) -> str:
        return FLOORS.get(op, "pass")


def benchmark_specs(family, n: int, rng) -> list:
    """The family's scalable benchmark descriptions at size ``n`` (an empty list when it has none).

    The one place that reads the optional ``benchmark_example`` hook (see the module docstring);
    combinators whose modules do not declare it yet are served by :data:`HELD`. A hook a family
    inherits unchanged from ``Family`` (the default, "no instance") is not called.
    """
    hook = getattr(family, HOOK, None)
    declared = hook is not None and getattr(hook, "__func__", hook) is not getattr(getattr(Family, HOOK, None),
                                                                                  "__func__", None)
    got = hook(n, rng) if declared else None
    if got is None and family.kind in HELD:
        got = HELD[family.kind](n, rng)
    if got is None:
        return []
    specs = [got] if isinstance(got, Mapping) else list(got) if isinstance(got, (list, tuple)) else None
    if specs is None or not all(isinstance(s, Mapping) for s in specs):
        raise DescriptionError(f"{family.__module__}.{family.__qualname__}.{HOOK}({n}, rng) returned {got!r:.80}; "
                               f"expected a description dict, a list of them, or None.")
    return [dict(s, kind=s.get("kind", family.kind)) for s in specs]


def first_example(family, rng):
    """The family's first declared example (``examples()``, else ``random_example(rng)``), or None."""
    specs = list(family.examples() or [])
    if not specs:
        specs = [s for s in (family.random_example(rng),) if s is not None]
    return dict(specs[0], kind=specs[0].get("kind", family.kind)) if specs else None


def workloads(kind: str, sizes: tuple, seed: int = 0) -> list:
    """The workloads of ``kind``: one per variant of its hook, else one on its first example.

    A hook's workload runs at every size of ``sizes`` its ``build`` does not return None for; an
    example's workload has ``sizes`` None (it runs once, at the example's own size).
    """
    family = lookup(kind)
    for n in sizes:   # the variants (labels) are those of the first size the hook serves
        specs = benchmark_specs(family, n, np.random.default_rng([seed, n]))
        if specs:
            return [Workload(kind, spec.get("about") or f"{kind} #{i}", _variant(family, i), tuple(sizes))
                    for i, spec in enumerate(specs)]
    example = first_example(family, np.random.default_rng([seed, 0]))
    if example is None:
        return []
    return [Workload(kind, example.get("about") or f"{kind}: its first declared example",
                     lambda n, rng, spec=example: spec, None)]


def _variant(family, i):
    def build(n, rng):
        specs = benchmark_specs(family, n, rng)
        return specs[i] if i < len(specs) else None
    return build


def missing_kinds(spec) -> list:
    """Kinds a description refers to (at any depth) that are not registered."""
    found, stack = set(), [spec]
    while stack:
        v = stack.pop()
        if isinstance(v, Mapping):
            if isinstance(v.get("kind"), str):
                found.add(v["kind"])
            stack.extend(v.values())
        elif isinstance(v, (list, tuple)):
            stack.extend(v)
    known = set(known_kinds())
    out = []
    for k in sorted(found - known):
        try:
            lookup(k)   # an entry point registers it on first use
        except DescriptionError:
            out.append(k)
    return out


# ---------------------------------------------------------------------------------------------
# held here until the combinator modules declare benchmark_example themselves (issue 10: each
# function below is that classmethod's body; move it into setkit/combinators/<kind>.py)
# ---------------------------------------------------------------------------------------------
def _intersection(n, rng):
    """permutahedron(n) with 3 halfspaces through points near its centre; none above n = 1e4."""
    if n > 10_000:
        return None
    from .bench_combinators import cut_permutahedron
    return dict(cut_permutahedron(max(2, n // 2) if n < 100 else n, rng),
                about="permutahedron(n) with 3 halfspaces (n/2 below n = 100)")


def _product(n, rng):
    """n/50 simplices of dim 50 (2 of dim n/2 below n = 100); none above n = 1e5."""
    if n > 100_000:
        return None
    k, d = (max(1, n // 50), 50) if n >= 100 else (2, max(1, n // 2))
    return {"kind": "product", "about": "product of n/50 simplices of dim 50 (2 of dim n/2 below n = 100)",
            "of": [{"kind": "simplex", "dim": d}], "copies": k}


def _affine(n, rng):
    """The image 2 x + 1 of the simplex in R^n."""
    return {"kind": "affine", "about": "affine image 2 x + 1 of a simplex, dim n",
            "set": {"kind": "simplex", "dim": n}, "scale": 2.0, "shift": 1.0}


HELD = {"intersection": _intersection, "product": _product, "affine": _affine}
