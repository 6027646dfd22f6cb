"""The extension API: what a new family, combinator or backend is written against.

Users of sets need only :mod:`setkit` (``setkit.__all__``); authors of families
and backends import from here::

    from setkit.extend import Family, Reader, kernel, register

* families: :class:`Family` (the base of every set node), :func:`register`
  (class decorator naming the kind), :func:`kernel` (marks a native operator),
  :class:`Reader` (what ``from_spec`` reads parameters through),
  :func:`known_kinds`, :func:`lookup`, ``OPERATORS`` and ``ENTRY_POINT_GROUP``
  (the entry-point group third-party packages declare kinds in);
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
from .families import ENTRY_POINT_GROUP, OPERATORS, Family, kernel, known_kinds, lookup, register
from .forms import LinearForm

__all__ = ["Family", "register", "kernel", "Reader", "Location", "known_kinds", "lookup", "OPERATORS",
           "ENTRY_POINT_GROUP", "Backend", "register_backend", "all_backends", "get_backend", "LinearForm"]
