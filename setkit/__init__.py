"""setkit: describe a convex decision set in a few lines, compile it into fast,
verified operators (projection, distance, LMO, support, membership, centroid,
sampling, distance penalties).

>>> import setkit
>>> K = setkit.compile({"kind": "simplex", "dim": 3})
>>> K.project([0.5, 0.5, 0.5]).round(6).tolist()
[0.333333, 0.333333, 0.333333]
"""
from __future__ import annotations

import os

from .errors import (AccuracyWarning, BackendUnavailableError, DescriptionError, EmptySetError,
                     InputError, SetkitError, SetkitWarning, SolveError, UnboundedDirectionError,
                     UnsupportedOperationError)

__version__ = "0.1.0"

__all__ = ["load", "compile", "verify", "build", "from_cvxpy", "DecisionSet", "register", "kernel", "Family",
           "SetkitError", "DescriptionError", "EmptySetError", "InputError", "UnboundedDirectionError",
           "BackendUnavailableError", "UnsupportedOperationError", "SolveError", "SetkitWarning",
           "AccuracyWarning"]


def compile(description, *, source: str = "<dict>", base_dir: str | None = None, loose: bool = False,
            **backends):
    """Compile a description (dict, node or DecisionSet) into a :class:`DecisionSet`.

    Keyword arguments choose backends per operator, as in ``K.with_backends``; ``loose=True``
    lets iterative methods return answers above their tolerance with an AccuracyWarning
    instead of raising.
    """
    from .decision_set import DecisionSet
    from .description import parse
    node = parse(description, source=source, base_dir=base_dir)
    return DecisionSet(node, backends or None, loose=loose)


def load(path, *, loose: bool = False, **backends):
    """Read a YAML or JSON description file and compile it."""
    from .decision_set import DecisionSet
    from .description import load_file
    return DecisionSet(load_file(os.fspath(path)), backends or None, loose=loose)


def verify(target, **kw):
    """Compare every operator of a set with the cvxpy reference; returns a report."""
    from .checks import verify as _verify
    K = load(target) if isinstance(target, (str, os.PathLike)) else compile(target)
    return _verify(K, **kw)


def build(kind: str, **params):
    """Builder: ``setkit.build("simplex", dim=5)`` is ``setkit.compile({"kind": "simplex", "dim": 5})``."""
    from .decision_set import DecisionSet
    from .description import Location, parse_node
    node = parse_node({"kind": kind, **params}, Location("argument", ()))
    return DecisionSet(node)


def from_cvxpy(constraints, shape, **options):
    """A set stated by cvxpy constraints alone: ``setkit.from_cvxpy(lambda x: [x >= 0, ...], 3)``.

    Every operator is served by generic or reference backends; see
    :func:`setkit.families.custom.from_cvxpy` for the options.
    """
    from .families.custom import from_cvxpy as _from_cvxpy
    return _from_cvxpy(constraints, shape, **options)


def __getattr__(name):
    # builders for every registered kind: setkit.simplex(dim=5), setkit.intersection(of=[...])
    if name == "DecisionSet":
        from .decision_set import DecisionSet
        return DecisionSet
    if name in ("register", "kernel", "Family"):
        from . import families
        return getattr(families, name)
    if not name.startswith("_"):
        from .families import known_kinds
        if name in known_kinds():
            def builder(**params):
                return build(name, **params)
            builder.__name__ = name
            builder.__doc__ = f"Build a {name} set: setkit.{name}(**params) == setkit.build({name!r}, **params)."
            return builder
    raise AttributeError(f"module 'setkit' has no attribute {name!r}")
