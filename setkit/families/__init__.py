"""Set families: one module per family, registered by the ``@register`` decorator.

Nothing outside this package lists the families: :func:`lookup` imports every
module of ``setkit.families`` and ``setkit.combinators`` on first use, then the
entry points of the group ``setkit.families`` that third-party packages declare.
"""
from __future__ import annotations

import threading
from dataclasses import dataclass
from typing import ClassVar

from .._discovery import import_submodules
from ..errors import DescriptionError

ENTRY_POINT_GROUP = "setkit.families"
OPERATORS = ("project", "distance", "lmo", "support", "contains", "violation", "project_kl")

_FAMILIES: dict[str, type] = {}
_loaded = False
_lock = threading.Lock()


def kernel(operator: str):
    """Mark a method of a family as its native implementation of ``operator``.

    Kernels work on flat batches: a ``(b, dim)`` float64 array in, ``(b, dim)``
    points or ``(b,)`` values out. ``contains`` kernels take ``(X, tol)`` where
    ``tol`` is a ``(b,)`` array. Kernels of combinators receive the compiled
    parts as a third argument.
    """
    if operator not in OPERATORS:
        raise ValueError(f"kernel: operator must be one of {', '.join(OPERATORS)}; got {operator!r}.")

    def mark(fn):
        fn._setkit_operator = operator
        return fn
    return mark


@dataclass(frozen=True, eq=False, kw_only=True)
class Family:
    """Base of every set node: immutable parameters plus declared traits.

    Subclasses are frozen keyword-only dataclasses and implement

    * ``from_spec(reader)`` (classmethod): read and validate parameters;
    * ``shape`` (property): the point shape;
    * ``cvxpy_constraints(x)``: the set as cvxpy constraints on an expression of ``shape``;
    * optionally ``linear_form()`` returning a :class:`setkit.forms.LinearForm`;
    * optionally native kernels marked with :func:`kernel`.
    """

    name: str | None = None

    kind: ClassVar[str] = "?"
    traits: ClassVar[frozenset] = frozenset()
    kernels: ClassVar[dict] = {}

    def __init_subclass__(cls, **kw):
        super().__init_subclass__(**kw)
        found = {}
        for klass in reversed(cls.__mro__):
            for attr, fn in vars(klass).items():
                op = getattr(fn, "_setkit_operator", None)
                if op is not None:
                    found[op] = attr
        cls.kernels = found

    # -- description ---------------------------------------------------------
    @classmethod
    def from_spec(cls, reader):  # pragma: no cover - abstract
        raise NotImplementedError

    @property
    def shape(self) -> tuple:  # pragma: no cover - abstract
        raise NotImplementedError

    @property
    def dim(self) -> int:
        n = 1
        for s in self.shape:
            n *= int(s)
        return n

    @property
    def label(self) -> str:
        return self.kind + (f" '{self.name}'" if self.name else "")

    def children(self) -> tuple:
        return ()

    def has_trait(self, trait: str) -> bool:
        return trait in self.traits

    # -- formulations --------------------------------------------------------
    def cvxpy_constraints(self, x) -> list:  # pragma: no cover - abstract
        raise NotImplementedError

    def linear_form(self):
        """The set as {A_eq z = b_eq, A_ub z <= b_ub, lo <= z <= hi} or None."""
        return None

    def scale(self) -> float:
        """A magnitude of the set's data, used to make tolerances relative."""
        return 1.0


def register(kind: str):
    """Class decorator: register a :class:`Family` subclass under ``kind``."""
    def deco(cls):
        if not (isinstance(cls, type) and issubclass(cls, Family)):
            raise TypeError(f"register({kind!r}): expected a subclass of setkit.families.Family; got {cls!r}.")
        if kind in _FAMILIES and _FAMILIES[kind] is not cls:
            old = _FAMILIES[kind]
            if (old.__module__, old.__qualname__) != (cls.__module__, cls.__qualname__):
                raise ValueError(f"register: the kind {kind!r} is taken by {old.__module__}.{old.__qualname__}.")
        cls.kind = kind
        _FAMILIES[kind] = cls
        return cls
    return deco


def _load_builtins():
    global _loaded
    if _loaded:
        return
    with _lock:
        if _loaded:
            return
        for pkg_name in ("setkit.families", "setkit.combinators"):
            import_submodules(pkg_name)
        _loaded = True


def _load_entry_point(kind: str):
    from importlib.metadata import entry_points
    for ep in entry_points(group=ENTRY_POINT_GROUP):
        if ep.name == kind:
            obj = ep.load()
            if kind not in _FAMILIES and isinstance(obj, type) and issubclass(obj, Family):
                register(kind)(obj)
            return _FAMILIES.get(kind)
    return None


def known_kinds() -> list[str]:
    _load_builtins()
    return sorted(_FAMILIES)


def lookup(kind: str, location=None) -> type:
    """The family class registered under ``kind`` (built-in or entry point)."""
    _load_builtins()
    cls = _FAMILIES.get(kind) or _load_entry_point(kind)
    if cls is None:
        where = f" ({location})" if location is not None else ""
        loc = location.child("kind") if location is not None else None
        where = f" ({loc})" if loc is not None else where
        raise DescriptionError(
            f"set{where}: unknown kind {kind!r}; the known kinds are {', '.join(sorted(_FAMILIES))}.", loc)
    return cls
