"""setkit: describe a convex decision set in a few lines, compile it into fast,
verified operators (projection, distance, LMO, support, membership, centroid,
sampling, distance penalties).

The user API is ``setkit.__all__``: :func:`compile`, :func:`load`,
:func:`build` and one builder per kind (:func:`simplex`, :func:`budget`, ...),
:func:`from_cvxpy`, :func:`verify`, :class:`DecisionSet`, the records operators
return (:class:`Details`, :class:`PenaltyEstimate`, ...) and the errors and
warnings. The API for writing families and backends is :mod:`setkit.extend`.

>>> import setkit
>>> K = setkit.compile({"kind": "simplex", "dim": 3})
>>> K.project([0.5, 0.5, 0.5]).round(6).tolist()
[0.333333, 0.333333, 0.333333]
"""
from __future__ import annotations

import os as _os

from .builders import (affine, ball, birkhoff, box, budget, build, flow, hull, intersection, permutahedron,
                       polyhedron, product, simplex, transport)
from .errors import (AccuracyWarning, BackendUnavailableError, DescriptionError, EmptySetError,
                     InputError, SetkitError, SetkitWarning, SolveError, TimeLimitError, UnboundedDirectionError,
                     UnsupportedOperationError)
from .limits import time_limit

# what the lazy names below resolve to, for type checkers and IDEs (mypy and pyright take any name
# TYPE_CHECKING as true); the typing module is not imported at run time, to keep `import setkit` light
TYPE_CHECKING = False
if TYPE_CHECKING:
    from typing import Any, Callable, Iterable

    from .checks import CheckRow, Report
    from .decision_set import DecisionSet, Details
    from .forms import LinearForm
    from .measures import MeasureResult
    from .penalty import DistancePenalty, ExtendedLoss, PenaltyEstimate
    from .routing import Route

__version__ = "0.1.0"

# user API only; the extension API (Family, register, kernel, backends, ...) is setkit.extend
__all__ = [
    # compile and check sets
    "compile", "load", "build", "from_cvxpy", "verify", "time_limit",
    # builders, one per built-in kind
    "simplex", "budget", "box", "ball", "permutahedron", "transport", "birkhoff", "flow", "polyhedron",
    "hull", "intersection", "product", "affine",
    # the compiled set and the records its operators return
    "DecisionSet", "Details", "Route", "DistancePenalty", "ExtendedLoss", "PenaltyEstimate", "MeasureResult",
    "Report", "CheckRow",
    # errors and warnings
    "SetkitError", "DescriptionError", "EmptySetError", "InputError", "UnboundedDirectionError",
    "BackendUnavailableError", "UnsupportedOperationError", "SolveError", "TimeLimitError", "SetkitWarning",
    "AccuracyWarning",
]

# user names served lazily (their modules import numpy and more): name -> (module, attribute)
_LAZY = {
    "DecisionSet": ("decision_set", "DecisionSet"),
    "Details": ("decision_set", "Details"),
    "Route": ("routing", "Route"),
    "DistancePenalty": ("penalty", "DistancePenalty"),
    "ExtendedLoss": ("penalty", "ExtendedLoss"),
    "PenaltyEstimate": ("penalty", "PenaltyEstimate"),
    "MeasureResult": ("measures", "MeasureResult"),
    "Report": ("checks", "Report"),
    "CheckRow": ("checks", "CheckRow"),
}
# extension names kept reachable as setkit.<name> for existing code; not in __all__ (see setkit.extend)
_EXTENSION_ALIASES = {
    "register": ("families", "register"),
    "kernel": ("families", "kernel"),
    "Family": ("families", "Family"),
}


def compile(description, *, source: str = "<dict>", base_dir: str | None = None, loose: bool = False,
            **backends: str) -> DecisionSet:
    """Compile a description (a mapping, a node or a DecisionSet) into a :class:`DecisionSet`.

    A description is ``{"kind": ..., <parameters>}`` (the keys of each kind are
    those of its builder, e.g. :func:`simplex`), or a document ``{"set": {...},
    "about": ...}`` as read from a file.

    Parameters
    ----------
    description : mapping, DecisionSet or node
        The set; nested sets (``of``, ``set``) may be mappings or DecisionSets.
    source : str, default "<dict>"
        What error messages name as the origin of the description.
    base_dir : str, optional
        The folder that relative array paths (``.npy``, ``.npz``, ``.csv``) are
        read from. Default: the current folder.
    loose : bool, default False
        Let iterative methods return answers above their tolerance with an
        :class:`AccuracyWarning` instead of raising :class:`SolveError`.
    **backends : str
        Backends per operator, as in ``K.with_backends``, e.g. ``project="osqp"``.

    Returns
    -------
    DecisionSet

    Raises
    ------
    DescriptionError
        For an unknown kind or parameter or an invalid value, naming its key path.
    EmptySetError
        When the parameters describe an empty set that is detected while building.

    Notes
    -----
    Cost: parsing and validation, linear in the size of the data; solver
    workspaces are built lazily on the first call of an operator.

    Examples
    --------
    >>> import setkit
    >>> K = setkit.compile({"kind": "budget", "dim": 3, "total": 1.0, "upper": 0.5})
    >>> K.shape
    (3,)
    >>> K.project([1.0, 1.0, -1.0]).round(6).tolist()
    [0.5, 0.5, 0.0]
    >>> setkit.compile({"kind": "budget", "dim": 3, "total": 2.0, "upper": 0.5})
    Traceback (most recent call last):
    ...
    setkit.errors.DescriptionError: budget (<dict>: total): total must be at most the sum of upper bounds, 1.5; got 2.0.
    """
    from .decision_set import DecisionSet
    from .description import parse
    node = parse(description, source=source, base_dir=base_dir)
    return DecisionSet(node, backends or None, loose=loose)


def load(path: str | _os.PathLike, *, loose: bool = False, **backends: str) -> DecisionSet:
    """Read a YAML or JSON description file and compile it.

    Array parameters may be paths relative to the file's folder.

    Parameters
    ----------
    path : str or os.PathLike
        A ``.yaml``/``.yml`` or ``.json`` file with a top-level ``set`` (and
        optionally ``about`` and ``name``), or a bare set mapping.
    loose : bool, default False
        As in :func:`compile`.
    **backends : str
        Backends per operator, as in ``K.with_backends``.

    Returns
    -------
    DecisionSet

    Raises
    ------
    DescriptionError
        When the file is missing or unreadable, or a value is invalid; the
        message names the file, the key path and what was expected.

    Notes
    -----
    Cost: reading the file and validation, linear in its size.

    Examples
    --------
    >>> import os, tempfile, setkit
    >>> path = os.path.join(tempfile.mkdtemp(), "shares.yaml")
    >>> with open(path, "w") as fh:
    ...     _ = fh.write("set:\\n  kind: simplex\\n  dim: 2\\n  total: 4\\n")
    >>> setkit.load(path).project([5.0, 1.0]).tolist()
    [4.0, 0.0]
    """
    from .decision_set import DecisionSet
    from .description import load_file
    return DecisionSet(load_file(_os.fspath(path)), backends or None, loose=loose)


def verify(target, *, n_points: int = 4, seed: int = 0, rtol: float = 2e-5) -> Report:
    """Compare every operator of a set with the cvxpy reference (Clarabel) on seeded points.

    For each operator the largest error over points inside, near and far from
    the set is measured against its allowed value, rtol times the size of the
    input and of the set's data.

    Parameters
    ----------
    target : str, os.PathLike, mapping or DecisionSet
        A description file, a description or a compiled set.
    n_points : int, default 4
        Random points per category (inside, near, at the set's scale, far).
    seed : int, default 0
        Seed of the points.
    rtol : float, default 2e-5
        Relative tolerance of the comparison.

    Returns
    -------
    Report
        One :class:`CheckRow` per operator; ``ok`` says whether all agree and
        ``text()`` prints a table.

    Notes
    -----
    Cost: about 4·n_points reference solves per operator (interior-point
    solves, milliseconds each on small sets).

    Examples
    --------
    >>> import setkit
    >>> report = setkit.verify({"kind": "simplex", "dim": 3}, n_points=2)
    >>> report.ok
    True
    >>> {"project", "lmo", "support"} <= {row.operator for row in report.rows}
    True
    """
    from .checks import verify as _verify
    K = load(target) if isinstance(target, (str, _os.PathLike)) else compile(target)
    return _verify(K, n_points=n_points, seed=seed, rtol=rtol)


def from_cvxpy(constraints: Callable[[Any], list], shape: int | tuple, *, name: str | None = None,
               scale: float = 1.0, traits: Iterable[str] = (), linear_form: LinearForm | None = None
               ) -> DecisionSet:
    """A set stated by cvxpy constraints alone.

    K = {x of shape ``shape`` : every constraint in ``constraints(x)`` holds};
    the constraints must be convex by cvxpy's rules (DCP).

    Parameters
    ----------
    constraints : callable
        ``constraints(x)`` returns a list of cvxpy constraints on ``x``, a cvxpy
        expression of shape ``shape``. It is called once per problem and thread,
        never per operator call; use a module-level function if the set must
        pickle.
    shape : int or tuple of int
        The point shape.
    name : str, optional
        A label used in error messages and ``explain()``.
    scale : float, default 1.0
        A magnitude of the set's data, used to make tolerances relative.
    traits : iterable of str, default ()
        Declared traits, e.g. ``("polyhedral", "bounded")``.
    linear_form : setkit.extend.LinearForm, optional
        The same set as {A_eq z = b_eq, A_ub z <= b_ub, lo <= z <= hi}; lets the
        OSQP and HiGHS backends serve projection and LMO.

    Returns
    -------
    DecisionSet

    Raises
    ------
    DescriptionError
        When the shape is invalid or the constraints are not cvxpy constraints
        or not convex.

    Notes
    -----
    Every operator is served generically (see ``K.explain()``): projection and
    LMO by the cvxpy reference (one conic solve per point, with the problem
    built once), the other operators derived from them.

    Examples
    --------
    >>> import cvxpy as cp, setkit
    >>> K = setkit.from_cvxpy(lambda x: [cp.norm(x, 2) <= 1, x[1] >= 0.5], 2, name="cap")
    >>> round(float(K.support([0.0, 1.0])), 6)
    1.0
    >>> bool(K.contains([0.0, 0.2]))
    False
    """
    from .families.custom import from_cvxpy as _from_cvxpy
    return _from_cvxpy(constraints, shape, name=name, scale=scale, traits=traits, linear_form=linear_form)


def _fallback_builder(kind: str):
    """A builder for a kind without its own function here (kinds added by modules or entry points)."""
    from .families import lookup
    cls = lookup(kind)

    def builder(**params):
        return build(kind, **params)
    builder.__name__ = builder.__qualname__ = kind
    builder.__module__ = __name__
    about = (cls.__doc__ or "").strip()
    builder.__doc__ = (f"Build a {kind} set: ``setkit.{kind}(**params)`` is ``setkit.build({kind!r}, **params)``.\n\n"
                       f"The parameters are the keys of the kind {kind!r} in a description; see "
                       f"{cls.__module__}.{cls.__qualname__}.\n\n" + about)
    return builder


def __getattr__(name: str):
    if name in _LAZY or name in _EXTENSION_ALIASES:
        import importlib
        module, attr = _LAZY.get(name) or _EXTENSION_ALIASES[name]
        value = getattr(importlib.import_module(f"{__name__}.{module}"), attr)
        globals()[name] = value   # resolve once
        return value
    if not name.startswith("_"):
        from .families import known_kinds
        if name in known_kinds():
            return _fallback_builder(name)
    raise AttributeError(f"module 'setkit' has no attribute {name!r}")


def __dir__():
    # the user API, the dunders, and the submodules imported so far (setkit.testing, setkit.extend, ...)
    loaded = {n for n, v in globals().items() if getattr(v, "__name__", "").startswith(__name__ + ".")
              and type(v) is type(_os)}
    return sorted(set(__all__) | loaded | {n for n in globals() if n.startswith("__")})
