"""Generic backends, each declaring as data what it can solve.

A backend module defines a subclass of :class:`Backend` decorated with
:func:`register_backend`. The class attributes say which operators it serves,
what it needs from a set (``requires``: ``"linear_form"`` or ``"cvxpy"``), the
problem class it solves and its tolerance; :mod:`setkit.routing` reads them.
Heavy packages (cvxpy, osqp) are imported inside the workspace, never at
module import, so ``import setkit`` stays fast.
"""
from __future__ import annotations

import importlib
import importlib.util
import sys
import threading
from typing import ClassVar

from .._discovery import import_submodules
from ..errors import BackendUnavailableError

_BACKENDS: dict[str, type] = {}
_loaded = False
_lock = threading.Lock()


class Backend:
    """A generic implementation of some operators for any set it accepts.

    One instance is one workspace: built lazily for one set, used by one thread.
    Operator methods take a flat batch ``(b, dim)`` and return ``(out, info)``
    where ``info`` is a dict with optional keys ``status`` (list of str),
    ``iterations`` (list of int) and ``backend_status`` (list of str).
    """

    name: ClassVar[str] = "?"
    operators: ClassVar[tuple] = ()
    requires: ClassVar[str] = "cvxpy"      # "linear_form" | "cvxpy"
    problem: ClassVar[str] = ""            # "qp" | "lp" | "conic"
    priority: ClassVar[int] = 100          # lower is preferred among generic backends
    tolerance: ClassVar[float] = 1e-8
    package: ClassVar[str] = ""            # the Python package it needs
    about: ClassVar[str] = ""

    def __init__(self, node, loose: bool = False):
        self.node = node
        self.loose = loose

    @classmethod
    def accepts(cls, node) -> tuple[bool, str]:
        """Whether this backend can serve ``node``, and why (or why not)."""
        if cls.requires == "linear_form":
            if node.linear_form() is None:
                return False, f"{node.label} has no linear form"
            return True, "the set has a linear form"
        return True, "the set states cvxpy constraints"

    @classmethod
    def available(cls) -> bool:
        """Whether the package it needs is installed (looked up, not imported: routing stays cheap).

        Importing cvxpy to answer this cost seconds on every compile of a set routed to a generic
        backend; the workspace imports the package when it is first built and raises
        BackendUnavailableError if that fails.
        """
        if not cls.package:
            return True
        return _installed(cls.package)


_INSTALLED: dict[str, bool] = {}


def _installed(package: str) -> bool:
    """Whether ``package`` can be found (imported already, or an import spec exists); cached."""
    found = _INSTALLED.get(package)
    if found is None:
        if package in sys.modules:
            found = sys.modules[package] is not None
        else:
            try:
                found = importlib.util.find_spec(package) is not None
            except (ImportError, ValueError):
                found = False
        _INSTALLED[package] = found
    return found


def register_backend(name: str):
    def deco(cls):
        cls.name = name
        _BACKENDS[name] = cls
        return cls
    return deco


def _load():
    global _loaded
    if _loaded:
        return
    with _lock:
        if _loaded:
            return
        import_submodules(__name__)
        _loaded = True


def all_backends() -> dict[str, type]:
    _load()
    return dict(_BACKENDS)


def get_backend(name: str) -> type:
    _load()
    if name not in _BACKENDS:
        raise BackendUnavailableError(
            f"backend {name!r} is unknown; the backends are {', '.join(sorted(_BACKENDS))} (and 'native').")
    cls = _BACKENDS[name]
    if not cls.available():
        raise BackendUnavailableError(
            f"backend {name!r} needs the package {cls.package!r}, which is not installed; "
            f"install it with pip install {cls.package}.")
    return cls
