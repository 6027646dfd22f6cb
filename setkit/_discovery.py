"""Declaration-based discovery: import every public module of a built-in package once."""
from __future__ import annotations

import importlib
import pkgutil


def import_submodules(pkg_name: str) -> None:
    """Import every module of ``pkg_name`` whose name does not start with '_'.

    A missing package is skipped (an optional built-in package not present).
    """
    try:
        pkg = importlib.import_module(pkg_name)
    except ModuleNotFoundError as exc:
        if exc.name != pkg_name:
            raise
        return
    for info in pkgutil.iter_modules(pkg.__path__):
        if not info.name.startswith("_"):
            importlib.import_module(f"{pkg_name}.{info.name}")
