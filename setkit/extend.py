"""The extension API: what a new family, combinator or backend is written against.

Users of sets need only :mod:`setkit` (``setkit.__all__``); authors of families
and backends import from here::

    from setkit.extend import Family, Reader, kernel, register

* families: :class:`Family` (the base of every set node), :func:`register`
  (class decorator naming the kind), :func:`kernel` (marks a native operator),
  :class:`Reader` (what ``from_spec`` reads parameters through),
  :func:`known_kinds`, :func:`lookup`, :func:`memo` (a cache beside a frozen
  node), ``OPERATORS`` and ``ENTRY_POINT_GROUP`` (the entry-point group
  third-party packages declare kinds in);
* combinator strategies: :class:`Strategy`, :func:`register_strategy`,
  :func:`all_strategies`;
* backends: :class:`Backend`, :func:`register_backend`, :func:`all_backends`,
  :func:`get_backend`;
* formulations: :class:`LinearForm`, the standard linear form
  {A_eq z = b_eq, A_ub z <= b_ub, lo <= z <= hi} that generic backends solve on.

DEVELOPERS.md walks through adding each. ``setkit.register``, ``setkit.kernel``
and ``setkit.Family`` keep working as aliases but are not part of
``setkit.__all__``.

>>> from setkit.extend import known_kinds
>>> {"simplex", "intersection"} <= set(known_kinds())
True
"""
from __future__ import annotations

from .backends import Backend, all_backends, get_backend, register_backend
from .description import Location, Reader
from .families import ENTRY_POINT_GROUP, OPERATORS, Family, kernel, known_kinds, lookup, memo, register
from .forms import LinearForm
from .strategies import Strategy, all_strategies, register_strategy

__all__ = ["Family", "register", "kernel", "Reader", "Location", "known_kinds", "lookup", "memo", "OPERATORS",
           "ENTRY_POINT_GROUP", "Strategy", "register_strategy", "all_strategies", "Backend", "register_backend",
           "all_backends", "get_backend", "LinearForm"]
