"""Combinator strategies: algorithms for sets built from other sets, declared as data.

A strategy serves some operators of one combinator kind (an intersection by a
dual over a few cuts, by splitting on the parts' projections, an affine image by
an exact change of variables, ...). Like a backend it declares what it can do as
class attributes — ``kind`` (the node kind it serves), ``operators``,
``priority`` (lower is preferred) and ``about`` — and an ``accepts(node)`` test;
:mod:`setkit.routing` ranks the accepted ones, and is the only module that
chooses. Its operator methods are named after the operator and take a flat batch
and the compiled parts: ``project(X, parts)``, ``contains(X, tol, parts)``; the
first docstring line is what ``explain()`` prints.

Strategies are defined in the combinator modules (``setkit/combinators``) and
registered with :func:`register_strategy`; users may register their own.
"""
from __future__ import annotations

from typing import ClassVar

_STRATEGIES: dict[str, type] = {}


class Strategy:
    """One algorithm for some operators of one combinator kind.

    An instance is built at compile time for one node (``__init__`` may analyse the
    node; pure analyses should be memoized beside the node with
    :func:`setkit.families.memo`).
    """

    name: ClassVar[str] = "?"
    kind: ClassVar[str] = "?"
    operators: ClassVar[tuple] = ()
    priority: ClassVar[int] = 50
    about: ClassVar[str] = ""
    # operators whose answer may leave rows unsettled (info["unsettled"]); routing sends those rows
    # to the generic backend it would otherwise have chosen, and says so in explain()
    fallback_operators: ClassVar[tuple] = ()

    def __init__(self, node):
        self.node = node
        self.owner = None      # the compiled set this strategy serves (set by routing when the plan is built)

    @classmethod
    def accepts(cls, node) -> tuple[bool, str]:
        """Whether this strategy can serve ``node``, and why (or why not)."""
        return True, "always applicable"


def register_strategy(name: str):
    """Class decorator: register a :class:`Strategy` subclass under ``name`` (a lowercase string)."""
    def deco(cls):
        if not (isinstance(cls, type) and issubclass(cls, Strategy)):
            raise TypeError(f"register_strategy({name!r}): expected a subclass of setkit.strategies.Strategy.")
        cls.name = name
        _STRATEGIES[name] = cls
        return cls
    return deco


def all_strategies() -> dict[str, type]:
    """Every registered strategy by name (built-in modules are imported first)."""
    from .families import load_all
    load_all()
    return dict(_STRATEGIES)


def strategies_for(kind: str) -> list[type]:
    """The strategies declared for ``kind``, best (lowest priority) first.

    Only the module declaring ``kind`` is imported (built-in strategies live beside their kind);
    strategies registered by other modules count once those are imported.
    """
    from .families import builtin_index
    module = builtin_index().get(kind)
    if module is not None:                   # a node of an unregistered class has no module to import
        import importlib
        importlib.import_module(module)
    return sorted((c for c in list(_STRATEGIES.values()) if c.kind == kind), key=lambda c: (c.priority, c.name))


def strategy(name: str) -> type | None:
    """The strategy registered under ``name``, or None (the built-in combinator modules, where the built-in
    strategies live, are imported when the name is unknown so far)."""
    cls = _STRATEGIES.get(name)
    if cls is None:
        from ._discovery import import_submodules
        import_submodules("setkit.combinators")
        cls = _STRATEGIES.get(name)
    return cls
