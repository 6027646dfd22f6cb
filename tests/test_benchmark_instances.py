"""The benchmark instances come from the families, the implementations from the registered backends.

No timing here: these tests check that every registered kind yields instances that compile at
the benchmark sizes, that a malformed hook is reported with the family's name, and that the
providers compared by the runner are exactly those the backends declare.
"""
import numpy as np
import pytest

pytest.importorskip("benchmarks.run")

import setkit  # noqa: E402
from benchmarks.instances import FULL_SIZES, benchmark_specs, missing_kinds, workloads  # noqa: E402
from benchmarks.providers import NATIVE, REFERENCE, candidates, direct_providers, judge_order  # noqa: E402
from setkit.backends import all_backends  # noqa: E402
from setkit.errors import DescriptionError  # noqa: E402
from setkit.families import known_kinds, lookup  # noqa: E402


@pytest.mark.parametrize("kind", known_kinds())
def test_every_kind_has_a_workload_that_compiles(kind):
    wls = workloads(kind, FULL_SIZES[:2])
    assert wls, f"{kind}: no benchmark instance"
    assert len({w.label for w in wls}) == len(wls)   # each variant has its own label
    for w in wls:
        for n in w.sizes or (None,):
            spec = w.build(n, np.random.default_rng([0, n or 0]))
            if spec is None:
                continue
            K = setkit.compile(spec)
            assert K.node.kind == kind
            if n is not None and kind != "hull":   # hull: n counts its data (points x dim), not coordinates
                assert n / 2 <= K.dim <= 2 * n, (w.label, n, K.dim)


def test_the_same_seed_gives_the_same_instance():
    fam = lookup("budget")
    a = benchmark_specs(fam, 100, np.random.default_rng([0, 100]))[0]
    b = benchmark_specs(fam, 100, np.random.default_rng([0, 100]))[0]
    assert np.array_equal(a["upper"], b["upper"]) and np.array_equal(a["weights"], b["weights"])


def test_hooks_decline_sizes_they_cannot_build_cheaply():
    rng = np.random.default_rng(0)
    assert benchmark_specs(lookup("flow"), 1_000_000, rng) == []
    assert benchmark_specs(lookup("simplex"), 1_000_000, rng)[0]["dim"] == 1_000_000


def test_a_malformed_hook_is_reported_with_the_family():
    class Odd(lookup("simplex")):
        @classmethod
        def benchmark_example(cls, n, rng):
            return 42

    with pytest.raises(DescriptionError, match=r"Odd\.benchmark_example\(24, rng\) returned 42"):
        benchmark_specs(Odd, 24, np.random.default_rng(0))


def test_missing_kinds_are_found_at_any_depth():
    spec = {"kind": "product", "of": [{"kind": "simplex", "dim": 2},
                                      {"kind": "intersection", "of": [{"kind": "no_such_kind_here"}]}]}
    assert missing_kinds(spec) == ["no_such_kind_here"]
    assert missing_kinds({"kind": "simplex", "dim": 3}) == []


def test_providers_are_the_declared_backends():
    K = setkit.compile({"kind": "simplex", "dim": 4})
    backends = all_backends()
    for op in ("project", "lmo", "support"):
        want = [NATIVE] + sorted((n for n, c in backends.items()
                                  if op in c.operators and c.available() and c.accepts(K.node)[0]),
                                 key=lambda n: (backends[n].priority, n))
        assert direct_providers(K.node, op) == want
    # every candidate routes the operator as its label says
    for op in ("project", "distance", "lmo", "support", "contains"):
        for label, over in candidates(K.node, op):
            assert K.with_backends(**over).routes()[op].provider == over[op], (op, label)
    order = judge_order()
    assert order[:2] == (REFERENCE, NATIVE) and set(order) == set(backends) | {NATIVE}


def test_no_import_circle_among_the_benchmark_modules():
    """Every import between modules of benchmarks/ (at any depth of the code) forms an acyclic graph."""
    import ast
    import os
    here = os.path.join(os.path.dirname(os.path.dirname(os.path.abspath(__file__))), "benchmarks")
    mods = {f[:-3] for f in os.listdir(here) if f.endswith(".py") and f != "__init__.py"}
    graph = {}
    for m in mods:
        with open(os.path.join(here, m + ".py")) as fh:
            tree = ast.parse(fh.read())
        deps = set()
        for node in ast.walk(tree):
            if isinstance(node, ast.ImportFrom):
                base = (node.module or "").split(".")[-1] if node.level or (node.module or "").startswith("benchmarks") \
                    else (node.module or "").split(".")[0]
                deps |= {base} & mods if base else {a.name for a in node.names} & mods
            elif isinstance(node, ast.Import):
                deps |= {a.name.split(".")[-1] for a in node.names if a.name.startswith("benchmarks.")} & mods
        graph[m] = deps - {m}
    assert "providers" in graph["targets"] and "run" not in graph["targets"]
    done, active = set(), []

    def visit(m):
        assert m not in active, "import circle: " + " -> ".join(active[active.index(m):] + [m])
        if m in done:
            return
        active.append(m)
        for d in sorted(graph[m]):
            visit(d)
        active.pop()
        done.add(m)
    for m in sorted(graph):
        visit(m)
