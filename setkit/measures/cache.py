"""Geometry derived from a set's node, kept beside the node rather than inside it.

Nodes are frozen: what the measures compute from them (the reduced polytope, its vertices) is a
pure function of their data, so it is computed once per node, kept in a store keyed weakly by the
node, and dropped with the node. The node itself is never modified.
"""
from __future__ import annotations

import threading
import weakref
from typing import Any, Callable

_STORE: "weakref.WeakKeyDictionary[Any, dict]" = weakref.WeakKeyDictionary()
_LOCK = threading.Lock()


def beside(node, name: str, build: Callable[[], Any]):
    """The value ``build()`` for ``(node, name)``, computed once and kept while ``node`` lives.

    ``build`` runs outside the lock, so a slow build never blocks other sets; when two threads
    build the same entry at once, the first stored value is kept and returned to both. A build
    that raises stores nothing (the next call tries again). O(1) per hit.

    >>> class Node:
    ...     pass
    >>> n = Node()
    >>> beside(n, "answer", lambda: 42), beside(n, "answer", lambda: 0)
    (42, 42)
    """
    with _LOCK:
        entries = _STORE.get(node)
        if entries is not None and name in entries:
            return entries[name]
    value = build()
    with _LOCK:
        return _STORE.setdefault(node, {}).setdefault(name, value)
