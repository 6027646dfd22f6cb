"""Repository-level pytest configuration.

``python3 -m pytest`` collects the doctests of every module under ``setkit/``
(``--doctest-modules`` in pyproject.toml). A module that needs an optional
extra which is not installed (torch, jax, dask, ...) is left out of that
collection instead of failing it: the module raises ModuleNotFoundError for the
extra's package, or setkit's BackendUnavailableError, when imported.
"""
from __future__ import annotations

import importlib
from pathlib import Path

ROOT = Path(__file__).resolve().parent
PACKAGE = ROOT / "setkit"
# top-level packages of the optional extras (pyproject.toml [project.optional-dependencies])
OPTIONAL_PACKAGES = {"torch", "jax", "jaxlib", "dask", "distributed", "hypothesis", "matplotlib", "sphinx"}


def _module_name(path: Path) -> str | None:
    if path.suffix != ".py" or PACKAGE not in path.parents:
        return None
    parts = path.relative_to(ROOT).with_suffix("").parts
    if parts[-1] == "__init__":
        parts = parts[:-1]
    return ".".join(parts)


def pytest_ignore_collect(collection_path, config):
    name = _module_name(Path(collection_path).resolve())
    if name is None:
        return None
    from setkit.errors import BackendUnavailableError
    try:
        importlib.import_module(name)
    except ModuleNotFoundError as exc:
        if (exc.name or "").split(".")[0] in OPTIONAL_PACKAGES:
            return True     # an optional extra is missing: no doctests to run from this module
    except BackendUnavailableError:
        return True
    except Exception:
        return None         # a real import error: let the doctest collection report it
    return None
