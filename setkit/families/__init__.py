"""Set families: one module per family, registered by the ``@register`` decorator.

Nothing outside this package lists the families: :func:`lookup` reads the
``@register("kind")`` declarations of the modules of ``setkit.families`` and
``setkit.combinators`` (without importing them), imports the one module declaring the
kind asked for, and otherwise the entry points of the group ``setkit.families`` that
third-party packages declare.
"""
from __future__ import annotations

import re
import threading
import weakref
from dataclasses import dataclass
from typing import ClassVar

from .._discovery import import_submodules
from ..errors import DescriptionError

ENTRY_POINT_GROUP = "setkit.families"
OPERATORS = ("project", "distance", "lmo", "support", "contains", "violation",
             # the Bregman (relative entropy) projection, from log-domain input t = log y
             "project_kl",
             # Jacobian products of the projections (second argument: the tangent / cotangent);
             # the KL ones are with respect to the log-domain input t
             "project_jvp", "project_vjp", "project_kl_jvp", "project_kl_vjp")

_FAMILIES: dict[str, type] = {}
_MEMO: "weakref.WeakKeyDictionary" = weakref.WeakKeyDictionary()
_MEMO_LOCK = threading.Lock()


def memo(node, key, build):
    """Memoize ``build()`` for ``node`` in a cache beside it (nodes stay frozen; pure data only).

    Formulations, analyses and verdicts derived from a node's data (its linear form, the
    cut rows of an intersection, the emptiness check) are computed once per node.
    """
    with _MEMO_LOCK:
        store = _MEMO.get(node)
        if store is None:
            store = _MEMO[node] = {}
        if key in store:
            return store[key]
    value = build()
    with _MEMO_LOCK:
        return store.setdefault(key, value)
_loaded = False
_lock = threading.Lock()


def kernel(operator: str, *, workspace: bool = False, into: bool = False, checks: bool = False):
    """Mark a method of a family as its native implementation of ``operator``.

    Kernels work on flat batches: a ``(b, dim)`` float64 array in, ``(b, dim)``
    points or ``(b,)`` values out. ``contains`` kernels take ``(X, tol)`` where
    ``tol`` is a ``(b,)`` array; Jacobian-product kernels take ``(Y, V)`` with ``V`` of
    the shape of ``Y``; ``project_kl`` kernels take log-domain input ``T = log y``. Kernels
    of combinators receive the compiled
    parts as a last argument. With ``workspace=True`` the kernel receives instead,
    as its last argument, this thread's workspace of the set, built by the
    family's ``new_workspace()`` hook and owned by the DecisionSet (per thread,
    rebuilt after pickling).

    With ``into=True`` (``project`` and ``lmo`` kernels) the kernel also accepts ``out=``, a
    float64 array of the input's shape, writes its answer there and returns it: a large batch
    split over threads is then written in place, without a copy of each thread's rows. With
    ``checks=True`` the kernel also accepts ``check=``: when true it verifies that every entry of its
    input is finite, in the same pass where it can, and raises ``errors.NonFiniteRows`` if one is not
    (otherwise the threads run a separate finiteness pass first).
    """
    if operator not in OPERATORS:
        raise ValueError(f"kernel: operator must be one of {', '.join(OPERATORS)}; got {operator!r}.")

    def mark(fn):
        fn._setkit_operator = operator
        fn._setkit_workspace = bool(workspace)
        fn._setkit_into = bool(into) and operator in ("project", "lmo")
        fn._setkit_checks = bool(checks)
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
        # the kernel functions as declared (routing gives single-point entries only while they are still the
        # methods in place: a kernel replaced on the class later, e.g. monkeypatched, is served as replaced)
        cls._declared_kernels = {op: next(vars(k)[attr] for k in cls.__mro__ if attr in vars(k))
                                 for op, attr in found.items()}

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

    # -- optional hooks, read by other modules; each returns None when it does not know --------
    def extended_form(self):
        """A linear form with auxiliary variables (extended formulation) for LPs, or None.

        Offered by families whose only polyhedral description needs auxiliaries (a
        permutahedron as the image of the Birkhoff polytope) without declaring a
        ``linear_form()``; intersections use it for one-LP LMOs.
        """
        return None

    def check_nonempty(self, parts, fail) -> None:
        """Raise (through ``fail(key, message, EmptySetError)``) if the set is empty; called at compile.

        ``parts`` are the compiled parts of a combinator (empty for a family); ``fail``
        names the description file and key path. The verdict is computed once per node.
        """
        return None

    def membership_screen(self, X, tol, parts):
        """A cheap membership verdict per row: +1 in, -1 farther than tol, 0 undecided; or None.

        Used by routing's derived membership rule before any distance is computed (only the
        undecided rows are projected). ``parts`` are the compiled parts of a combinator.
        """
        return None

    def bound_kernels(self) -> dict:
        """Operator -> numba function of one point with this set's data bound (for K.jit_kernels()); {} if none."""
        return {}

    def point_kernels(self, check: bool = True) -> dict:
        """Operator -> (compiled function, leading arguments) serving one point on the single-point fast path.

        Operators: project, lmo (answer: a point), distance, support (answer: a (1,) array).
        ``f(*args, y)`` takes one float64 C-contiguous 1-d point and returns the answer the
        family's batch kernel gives for it, bit for bit, or raises
        :class:`setkit.errors.TakeGeneralPath` to leave the point to the general path (always
        for a non-finite point when ``check`` is true; ``check=False`` serves ``K.unchecked``).
        A numba dispatcher is called through the compiled entry point of its signature.
        Routing uses an entry only for a native route whose kernel method is declared by the
        same class as this hook (a subclass overriding the kernel does not inherit it). {} if none.
        """
        return {}

    def orthant_violation(self):
        """Whether the set lies in the nonnegative orthant (the domain of the KL geometry).

        None (or "") when it does, a sentence saying why not otherwise, and ``NotImplemented``
        (the default) when the family does not know: the reference then checks by LPs.
        """
        return NotImplemented

    def factored(self, op: str, X):
        """Low-rank answers of a matrix set in factored form, or None when the family offers none.

        ``op`` is "project" or "lmo", ``X`` a flat (b, dim) batch; returns (U (b, m, q), s (b, q),
        Vt (b, q, n)) with answer_i = U_i diag(s_i) Vt_i (read by DecisionSet.project_factors and
        lmo_factors).
        """
        return None

    def new_workspace(self):
        """A fresh per-thread workspace for kernels marked ``@kernel(op, workspace=True)``, or None."""
        return None

    def exact_centroid(self, measure: str):
        """The centroid under ``measure`` in closed form (flat array of length dim), or None."""
        return None

    def exact_sample(self, k: int, measure: str, rng):
        """k exact samples from ``measure`` as a (k, dim) array, or None."""
        return None

    def stack_key(self):
        """A key under which blocks of this family that differ only in data share one batched call, or None."""
        return None

    @classmethod
    def stack_params(cls, nodes):
        """Parameters of one batched call over ``nodes`` (all with one stack_key), or None."""
        return None

    @classmethod
    def stacked(cls, op: str, params, X):
        """Operator ``op`` on a batch laid out by :meth:`stack_params` (flat rows), or None."""
        return None

    def vertex_cleanup(self, x):
        """Snap an LP vertex answer of the linear form to exact data (e.g. integral flows); x by default."""
        return x

    def unbounded_ray(self, c):
        """A recession direction d of the set with <c, d> < 0 (flat array), or None when unknown."""
        return None

    @classmethod
    def examples(cls) -> list:
        """Small description dicts of this family, run by the conformance suite and quick benchmarks."""
        return []

    @classmethod
    def random_example(cls, rng):
        """A random small description dict of this family (seeded by ``rng``), or None."""
        return None

    @classmethod
    def benchmark_example(cls, n: int, rng):
        """A description dict of about ``n`` coordinates for scaling benchmarks (seeded by ``rng``), or None."""
        return None


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


_BUILTIN_PACKAGES = ("setkit.families", "setkit.combinators")
_REGISTER_CALL = re.compile(r"""^@register\(\s*["']([A-Za-z_][A-Za-z0-9_]*)["']\s*\)""", re.M)
_index = None


def builtin_index() -> dict[str, str]:
    """Kind -> module of every built-in family and combinator, read from the sources without importing them.

    The ``@register("kind")`` lines of the modules of ``setkit/families`` and ``setkit/combinators``
    are the declarations: :func:`lookup` then imports only the module of the kind asked for (with
    its numba kernels), and the names of the kinds (for listings and "did you mean" hints) cost
    one read of the sources. ``tests/test_first_call.py`` checks that the index equals the
    registry filled by importing every module.
    """
    global _index
    if _index is None:
        import importlib.util
        import os
        found = {}
        for pkg_name in _BUILTIN_PACKAGES:
            spec = importlib.util.find_spec(pkg_name)
            if spec is None or not spec.submodule_search_locations:
                continue
            for folder in spec.submodule_search_locations:
                for fname in sorted(os.listdir(folder)):
                    if not fname.endswith(".py") or fname.startswith("_"):
                        continue
                    try:
                        with open(os.path.join(folder, fname), encoding="utf-8") as fh:
                            text = fh.read()
                    except OSError:
                        continue
                    for kind in _REGISTER_CALL.findall(text):
                        found.setdefault(kind, f"{pkg_name}.{fname[:-3]}")
        _index = found
    return _index


def load_all() -> None:
    """Import every module of ``setkit/families`` and ``setkit/combinators`` (registering all built-ins)."""
    global _loaded
    if _loaded:
        return
    with _lock:
        if _loaded:
            return
        for pkg_name in _BUILTIN_PACKAGES:
            import_submodules(pkg_name)
        _loaded = True


_load_builtins = load_all      # the former name


def _load_builtin(kind: str):
    """Import the built-in module declaring ``kind`` (if any); the registered class or None."""
    module = builtin_index().get(kind)
    if module is None:
        return None
    import importlib
    importlib.import_module(module)
    cls = _FAMILIES.get(kind)
    if cls is None:          # the module registers it some other way: import everything once
        load_all()
        cls = _FAMILIES.get(kind)
    return cls


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
    """The registered kinds: every built-in (by name, without importing its module) and every class
    registered so far (by decorator, or through an entry point already looked up)."""
    return sorted(set(builtin_index()) | set(_FAMILIES))


def lookup(kind: str, location=None) -> type:
    """The family class registered under ``kind`` (built-in or entry point).

    Only the module declaring ``kind`` is imported (see :func:`builtin_index`); third-party kinds
    come from the entry-point group ``setkit.families``.
    """
    cls = _FAMILIES.get(kind)
    if cls is not None:
        return cls
    cls = _load_builtin(kind) or _load_entry_point(kind)
    if cls is None:
        import difflib
        where = f" ({location})" if location is not None else ""
        loc = location.child("kind") if location is not None else None
        where = f" ({loc})" if loc is not None else where
        names = known_kinds()
        near = difflib.get_close_matches(str(kind), names, n=1, cutoff=0.6)
        hint = f" Did you mean {near[0]!r}?" if near else ""
        raise DescriptionError(
            f"set{where}: unknown kind {kind!r}; the known kinds are {', '.join(names)}.{hint}", loc)
    return cls
