"""The first call in a fresh process: what gets imported, what is cached, what is said on stderr.

Timings are measured by benchmarks/bench_first_call.py, never here; these tests check the
mechanisms the timings rest on, in fresh processes (subprocess) where it matters.
"""
from __future__ import annotations

import json
import os
import re
import subprocess
import sys
import textwrap
from pathlib import Path

import pytest

from setkit.errors import DescriptionError
from setkit.families import _FAMILIES, builtin_index, known_kinds, load_all, lookup

ROOT = Path(__file__).resolve().parent.parent
NOTICE = "setkit: compiling native kernels"


def run(code, cache_dir=None):
    env = dict(os.environ, PYTHONPATH=str(ROOT) + (os.pathsep + os.environ["PYTHONPATH"]
                                                   if os.environ.get("PYTHONPATH") else ""))
    env.pop("SETKIT_QUIET_COMPILE", None)
    if cache_dir is not None:
        env["NUMBA_CACHE_DIR"] = str(cache_dir)
    out = subprocess.run([sys.executable, "-c", textwrap.dedent(code)], capture_output=True, text=True, env=env,
                         cwd=str(ROOT), timeout=600)
    assert out.returncode == 0, out.stderr[-3000:]
    return json.loads(out.stdout.strip().splitlines()[-1]), out.stderr


def test_the_index_read_from_the_sources_equals_the_registry():
    load_all()
    builtin = {kind: cls.__module__ for kind, cls in _FAMILIES.items()
               if cls.__module__.startswith(("setkit.families.", "setkit.combinators."))}
    assert builtin_index() == builtin
    assert set(builtin) <= set(known_kinds())
    assert {"simplex", "flow", "intersection", "product", "affine"} <= set(builtin)


def test_compiling_a_set_imports_its_family_only():
    found, _ = run("""
        import json, sys
        import numpy as np, setkit
        K = setkit.compile({"kind": "simplex", "dim": 4})
        K.project(np.array([0.3, 2.0, -1.0, 0.1]))
        simplex_only = sorted(m for m in sys.modules if m.startswith("setkit.families.") and not
                              m.startswith("setkit.families._"))
        F = setkit.compile({"kind": "flow", "nodes": ["a", "b", "c"],
                            "edges": [{"from": "a", "to": "b", "capacity": 2}, {"from": "b", "to": "c", "capacity": 2},
                                      {"from": "a", "to": "c", "capacity": 1}], "supply": {"a": 2, "c": -2}})
        F.lmo(np.array([1.0, 0.0, 0.5]))          # served by the HiGHS backend: routing looked backends up
        try:
            setkit.compile({"kind": "simplx", "dim": 3})
        except setkit.DescriptionError as exc:
            message = str(exc)
        print(json.dumps({"after_simplex": simplex_only, "message": message,
                          "cvxpy": "cvxpy" in sys.modules, "networkx": "networkx" in sys.modules,
                          "transport": "setkit.families.transport" in sys.modules,
                          "routes": F.routes()["lmo"].provider}))
    """)
    assert found["after_simplex"] == ["setkit.families.simplex"]
    assert found["routes"] == "highs"
    assert not found["cvxpy"]                # the reference backend's package was looked up, not imported
    assert not found["transport"]            # the misspelled kind was answered from the names alone
    assert "unknown kind 'simplx'" in found["message"] and "Did you mean 'simplex'?" in found["message"]
    assert "permutahedron" in found["message"]          # the known kinds are listed


def test_unknown_kind_in_process_suggests_the_closest():
    with pytest.raises(DescriptionError, match=r"Did you mean 'permutahedron'\?"):
        lookup("permutahedorn")


def test_every_compiled_kernel_is_cached_on_disk():
    """cache=True on every @njit of setkit (the per-set closures of kernels/bound.py excepted)."""
    offenders = []
    for path in sorted((ROOT / "setkit").rglob("*.py")):
        if path.name == "bound.py":
            continue
        text = path.read_text(encoding="utf-8")
        for m in re.finditer(r"^\s*@(?:numba\.)?njit\b(\([^)]*\))?", text, flags=re.M):
            if "cache=True" not in (m.group(1) or ""):
                offenders.append(f"{path.relative_to(ROOT)}:{text[:m.start()].count(chr(10)) + 1}")
    assert offenders == []
    from numba.core.dispatcher import Dispatcher
    import importlib
    import pkgutil
    import setkit.kernels
    load_all()
    for info in pkgutil.iter_modules(setkit.kernels.__path__):
        importlib.import_module(f"setkit.kernels.{info.name}")
    seen = 0
    for name, mod in list(sys.modules.items()):
        if not name.startswith("setkit") or mod is None or name.endswith(".bound"):
            continue
        for obj in list(vars(mod).values()):
            if isinstance(obj, Dispatcher) and obj.py_func.__module__ == name:
                seen += 1
                assert obj.stats.cache_path is not None, f"{name}.{obj.py_func.__name__} is not cached"
    assert seen > 50


def test_a_second_process_loads_every_kernel_and_the_notice_is_said_once(tmp_path):
    code = """
        import json, sys
        import numpy as np, setkit
        K = setkit.compile({"kind": "box", "dim": 3, "lower": 0.0, "upper": 1.0})
        y = np.array([2.0, -1.0, 0.5])
        out = [K.project(y).tolist(), float(K.distance(y)), K.project(np.stack([y, y])).tolist()]
        from numba.core.dispatcher import Dispatcher
        misses = 0
        for name, mod in list(sys.modules.items()):
            if name.startswith("setkit") and mod is not None:
                for obj in list(vars(mod).values()):
                    if isinstance(obj, Dispatcher) and obj.py_func.__module__ == name:
                        misses += sum(obj.stats.cache_misses.values())
        print(json.dumps({"misses": misses, "out": out}))
    """
    first, err1 = run(code, cache_dir=tmp_path)
    second, err2 = run(code, cache_dir=tmp_path)
    assert first["misses"] > 0 and err1.count(NOTICE) == 1     # compiled, said once
    assert second["misses"] == 0 and NOTICE not in err2         # loaded from the cache, nothing said
    assert first["out"] == second["out"]
    assert second["out"][0] == [1.0, 0.0, 0.5] and second["out"][1] == pytest.approx(2 ** 0.5)
