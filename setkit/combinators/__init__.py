"""Combinators: sets built from other sets (intersection, product, affine image).

Each combinator is a :class:`setkit.families.Family` registered with ``@register``
in its own module; its kernels receive the compiled parts (a tuple of
:class:`setkit.decision_set.DecisionSet`) as their last argument.
This module holds the small helpers they share.
"""
from __future__ import annotations

from dataclasses import fields

import numpy as np


def node_key(node):
    """A hashable value key of a node: equal keys mean the same set with the same data.

    Used to group identical blocks of a product so that they are served by one
    batched call. The optional ``name`` is ignored.
    """
    items = [type(node).__module__, type(node).__qualname__]
    for f in fields(node):
        if f.name == "name":
            continue
        items.append((f.name, _value_key(getattr(node, f.name))))
    return tuple(items)


def _value_key(v):
    from ..families import Family
    if isinstance(v, Family):
        return node_key(v)
    if isinstance(v, np.ndarray):
        return ("array", v.shape, v.dtype.str, v.tobytes())
    if isinstance(v, (tuple, list)):
        return tuple(_value_key(x) for x in v)
    if hasattr(v, "toarray"):       # scipy sparse
        a = v.toarray()
        return ("sparse", a.shape, a.tobytes())
    try:
        hash(v)
    except TypeError:
        return ("id", id(v))
    return v


def lp_form(node):
    """A linear form of ``node`` for LPs: its ``linear_form()``, else its optional ``extended_form()`` hook.

    A family whose only linear description needs auxiliary variables (an extended
    formulation, e.g. a permutahedron as the image of the Birkhoff polytope) may
    offer it as ``extended_form()`` without declaring a ``linear_form()``; then the
    family itself keeps its native routes, and combinators still get one LP.
    """
    f = node.linear_form()
    return f if f is not None else node.extended_form()


def part_violation(part, X):
    """A part's violation of each row, NaN where the part has no independent check."""
    if part.plan.route("violation").provider == "none":
        return np.full(X.shape[0], np.nan)
    v, _ = part.run("violation", X)
    return np.asarray(v, dtype=float)


def loose_of(parts) -> bool:
    return any(p.loose for p in parts)
