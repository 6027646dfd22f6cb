"""The only place that chooses an implementation for each operator, and builds the plan.

Order of preference for every operator of a node:

1. a native kernel of the family (a method marked ``@kernel(op)``);
2. a combinator strategy declared for the node's kind (:mod:`setkit.strategies`),
   the accepted one with the lowest priority;
3. a rule derived from another operator (:data:`DERIVED_RULES`: distance from the
   projection, support from the LMO, membership from the distance);
4. the linear form (:data:`FORM_RULES`: the largest constraint violation);
5. a generic backend (:mod:`setkit.backends`), by its declared priority.

A caller may force any provider with ``K.with_backends(op=name)`` where name is
``"native"``, ``"derived"``, a strategy name or a backend name. The result is a
:class:`Plan`: for every operator the callable that serves flat batches, with its
:class:`Route` (provider and reason). Compiling also runs the node's emptiness
check (``Family.check_nonempty``), once per node.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from types import MappingProxyType
from typing import Any, Callable, Mapping

import numpy as np

from .backends import all_backends, get_backend
from .errors import (BackendUnavailableError, SolveError, TimeLimitError, UnboundedDirectionError,
                     UnsupportedOperationError)
from .families import OPERATORS, memo
from .parallel import split_rows
from .strategies import strategies_for, strategy


# -- derived rules, declared as data and executed here --------------------------------------
def row_norms(R):
    """Euclidean norm of each row without overflow or underflow (rows scaled by their largest entry)."""
    top = np.abs(R).max(axis=1, initial=0.0) if R.size else np.zeros(R.shape[0])
    safe = np.where((top > 0) & np.isfinite(top), top, 1.0)
    with np.errstate(over="ignore", invalid="ignore"):
        return np.where(np.isfinite(top), safe * np.linalg.norm(R / safe[:, None], axis=1), top)


def _distance_from_projection(run, node, context):
    def distance(X):
        P, info = run("project", X)
        with np.errstate(over="ignore", invalid="ignore"):
            R = X - P
        return row_norms(R), info
    return distance


def _support_from_lmo(run, node, context):
    def support(C):
        try:
            L, info = run("lmo", -C)       # max <c, x> = <c, argmin <-c, x>>
        except UnboundedDirectionError as exc:
            # speak of the operator the user called, with the user's own c (the LMO saw -c)
            ray = getattr(exc, "ray", None)
            given = (f" (given c = {np.array2string(C[0], precision=4, threshold=8)})" if len(C) == 1
                     else f" (for at least one of the {len(C)} given directions)")
            raise UnboundedDirectionError(
                f"{node.label}: support(c) = max <c, x> over the set is +infinity: the set is unbounded "
                f"in a direction d with <c, d> > 0{given}. Use a direction c on which the set is bounded "
                f"(the set's recession directions must have <c, d> <= 0).", ray=ray) from None
        return np.einsum("ij,ij->i", C, L), info
    return support


def _vjp_from_jvp(source):
    def build(run, node, context):
        def vjp(Y, U):
            # the Jacobian is symmetric: a Euclidean projection is the gradient of the convex function
            # (1/2)||y||^2 - (1/2)d_K(y)^2, and the KL projection in log coordinates the gradient of the
            # conjugate of the entropy restricted to K; so J^T u = J u
            return run(source, Y, U)
        return vjp
    return build


def _contains_from_distance(run, node, context):
    def screen(X, tol):
        # the family's own screen, else one from its constraints (a linear form without auxiliaries)
        v = node.membership_screen(X, tol, context.parts if node.children() else ())
        if v is None:
            form = context.linear_form() if context is not None else None
            if form is not None and form.n_aux == 0:
                v = form.membership_screen(X, tol)
        return v

    def contains(X, tol):
        v = screen(X, tol) if context is not None else None
        if v is None:
            d, info = run("distance", X)
            return np.asarray(d) <= tol, info
        out = np.asarray(v) > 0
        todo = np.flatnonzero(np.asarray(v) == 0)
        if todo.size:
            d, _ = run("distance", X[todo])
            out[todo] = np.asarray(d) <= tol[todo]
        return out, {}
    return contains


@dataclass(frozen=True)
class DerivedRule:
    source: str                  # the operator it is computed from
    text: str                    # the rule in words, for explain()
    build: Callable              # build(run, node, context) -> callable on flat batches returning (out, info)


DERIVED_RULES = {
    "distance": DerivedRule("project", "distance = ||y - project(y)||", _distance_from_projection),
    "support": DerivedRule("lmo", "support(c) = <c, lmo(-c)>", _support_from_lmo),
    "project_vjp": DerivedRule("project_jvp", "J^T u = J u (the Jacobian of a Euclidean projection is symmetric: "
                                              "the Hessian of (1/2)||y||^2 - (1/2)d(y)^2)", _vjp_from_jvp("project_jvp")),
    "project_kl_vjp": DerivedRule("project_kl_jvp", "J^T u = J u (in log coordinates the KL projection is the gradient "
                                                    "of a convex conjugate, so its Jacobian is symmetric)",
                                  _vjp_from_jvp("project_kl_jvp")),
    "contains": DerivedRule("distance", "contains(x) = distance(x) <= tol, after a screen by the constraints "
                                        "where the set has one (only undecided points are projected)",
                            _contains_from_distance),
}


def derived_call(op: str, run, node=None):
    """The derived rule for ``op`` as a callable on flat batches, built on ``run(op, X, tol=None)``; None if none."""
    rule = DERIVED_RULES.get(op)
    if rule is None:
        return None
    if node is None:
        from .families import Family
        node = Family()
    return rule.build(run, node, None)


FORM_RULES = {
    "violation": "largest violated constraint of the linear form",
    "project_jvp": "projection of v onto the tangent subspace of the face at project(y): of the linear form, "
                   "or the intersection of the parts' faces (setkit.derivatives.form_jvp)",
    "project_kl_jvp": "KL face route: diag(x) v minus its diag(x)-weighted projection onto the tight rows of the "
                      "linear form at x = project_kl(t), in log coordinates (setkit.derivatives.form_kl_jvp)",
}
TAKES_TOL = frozenset({"contains", "project_jvp", "project_vjp", "project_kl_jvp", "project_kl_vjp"})
# (operators whose kernels take a second flat array: the tolerance, or the tangent / cotangent)
CHAINED = frozenset({"project"})     # operators whose generic backends fall back to the next one on a failed solve


@dataclass(frozen=True)
class Route:
    """How one operator is served: ``provider`` is "native", "derived", "form", "none", a strategy
    name or a backend name; ``category`` says which of these it is; ``source`` is the operator a
    derived route is computed from."""

    operator: str
    provider: str
    reason: str
    source: str | None = None
    category: str = ""
    forced: bool = False         # chosen by the caller with with_backends (no fallback then)

    def describe(self) -> str:
        return f"{self.operator:<14} {self.provider:<10} {self.reason}"


@dataclass(frozen=True)
class Plan:
    """The compiled plan of one set: for every operator its route and the callable serving it.

    ``run(op, X, tol=None)`` calls the operator on a flat (b, dim) float64 batch and returns
    ``(out, info)``; ``direct`` holds the bound native kernels (raw returns) that a
    single-point fast path may call.
    """

    node: Any
    routes: Mapping[str, Route]
    calls: Mapping[str, Callable]
    direct: Mapping[str, Callable]
    unchecked: Mapping[str, Callable] = field(default_factory=lambda: MappingProxyType({}))
    """the raw native kernels of routes whose ``direct`` entry runs the contract's check (K.unchecked)"""
    point: Mapping[str, tuple] = field(default_factory=lambda: MappingProxyType({}))
    """operator -> (checked, unchecked) single-point entries ``(function, leading arguments)`` of native
    routes (the family's ``point_kernels`` hook); bind them with :func:`bind_point`"""

    self_checking: frozenset = frozenset()
    """operators whose call validates its own rows when given ``check_finite=True`` (native kernels split
    over threads: each thread checks its chunk, so the finiteness pass runs on every core)"""

    def run(self, op: str, X, tol=None, check_finite=False):
        fn = self.calls[op]
        if check_finite:
            return fn(X, tol, check_finite=True) if op in TAKES_TOL else fn(X, check_finite=True)
        return fn(X, tol) if op in TAKES_TOL else fn(X)

    def route(self, op: str) -> Route:
        return self.routes[op]


def _as_pair(out):
    # a kernel may return (out, info) to report status/iterations for details=True
    return out if isinstance(out, tuple) else (out, {})


def _first_doc_line(fn) -> str:
    doc = (getattr(fn, "__doc__", None) or "").strip().splitlines()
    return doc[0].rstrip(".") if doc else getattr(fn, "__name__", "?")


# -- choosing ----------------------------------------------------------------------------------
def _native_route(node, op, forced):
    fn = getattr(type(node), node.kernels[op])
    return Route(op, "native", ("chosen by the caller; " if forced else "") + "native kernel: " + _first_doc_line(fn),
                 category="native")


def _strategy_route(cls, op, forced, why):
    fn = getattr(cls, op)
    return Route(op, cls.name, ("chosen by the caller; " if forced else "") + f"{cls.about}: {_first_doc_line(fn)}"
                 + (f" ({why})" if why else ""), category="strategy")


def _backend_route(op, node, name, forced):
    cls = get_backend(name)
    if op not in cls.operators:
        valid = sorted(n for n, c in all_backends().items() if op in c.operators)
        raise BackendUnavailableError(
            f"backend {name!r} does not serve {op}; for {op} choose among native, derived, "
            f"{', '.join(valid)}.")
    ok, why = cls.accepts(node)
    if not ok:
        raise BackendUnavailableError(f"backend {name!r} cannot serve {op} for {node.label}: {why}.")
    return Route(op, name, ("chosen by the caller; " if forced else "") + f"{cls.about} ({why})", category="backend",
                 forced=forced)


def _generic(op, node):
    """The first backend of :func:`_chain` for ``op`` as a route, or None."""
    for name, cls in _chain(op, node):
        return Route(op, name, f"no native kernel; generic {cls.problem} backend: {cls.about}", category="backend")
    return None


def _chain(op, node):
    """Every available generic backend that serves ``op`` for ``node``, by priority."""
    out = []
    for name, cls in sorted(all_backends().items(), key=lambda kv: kv[1].priority):
        if op in cls.operators and cls.available():
            ok, _ = cls.accepts(node)
            if ok:
                out.append((name, cls))
    return out


def _accepted_strategies(node):
    out = []
    for cls in strategies_for(node.kind):
        ok, why = cls.accepts(node)
        if ok:
            out.append((cls, why))
    return out


def _has_form_without_aux(node):
    form = node.linear_form()
    return form is not None and form.n_aux == 0


def _outside_orthant(node):
    """The family's own sentence saying why the set leaves x >= 0, or "" (inside, or not known without LPs)."""
    try:
        why = node.orthant_violation()
    except Exception:                                   # noqa: BLE001 - a hook that fails leaves the route as it was
        return ""
    return why if isinstance(why, str) else ""


def _faces_of_parts(node):
    from .derivatives import faces_of_parts_apply
    return faces_of_parts_apply(node)


def choose(node, overrides: dict | None = None) -> dict:
    """Choose a route for every operator of ``node``; ``overrides`` maps operator -> provider."""
    overrides = dict(overrides or {})
    for op in overrides:
        if op not in OPERATORS:
            raise UnsupportedOperationError(
                f"with_backends: unknown operator {op!r}; the operators are {', '.join(OPERATORS)}.")
    accepted = _accepted_strategies(node)
    routes = {}
    for op in OPERATORS:
        want = overrides.get(op)
        if want is not None:
            if want == "native":
                if op not in node.kernels:
                    raise BackendUnavailableError(f"{node.label} has no native kernel for {op}; "
                                                  f"its native kernels are {', '.join(node.kernels) or '(none)'}.")
                routes[op] = _native_route(node, op, True)
            elif want == "derived":
                if op not in DERIVED_RULES:
                    raise BackendUnavailableError(f"{op} has no derived rule; the derived operators are "
                                                  f"{', '.join(DERIVED_RULES)}.")
                rule = DERIVED_RULES[op]
                routes[op] = Route(op, "derived", "chosen by the caller; " + rule.text, rule.source, "derived")
            elif strategy(want) is not None:
                cls = strategy(want)
                if cls.kind != node.kind or op not in cls.operators:
                    raise BackendUnavailableError(
                        f"strategy {want!r} serves {', '.join(cls.operators)} of {cls.kind} sets; it cannot serve "
                        f"{op} of {node.label}.")
                ok, why = cls.accepts(node)
                if not ok:
                    raise BackendUnavailableError(f"strategy {want!r} cannot serve {node.label}: {why}.")
                routes[op] = _strategy_route(cls, op, True, why)
            else:
                routes[op] = _backend_route(op, node, want, True)
            continue
        if op == "project_kl" and (why := _outside_orthant(node)):
            # the family knows its set leaves x >= 0: no route can serve it (a native kernel would only refuse)
            routes[op] = Route(op, "none", "the KL (relative entropy) projection needs a set inside the nonnegative "
                               f"orthant x >= 0, but {why}", category="none")
            continue
        if op in node.kernels:
            routes[op] = _native_route(node, op, False)
            continue
        strat = next(((c, why) for c, why in accepted if op in c.operators), None)
        if strat is not None:
            routes[op] = _strategy_route(strat[0], op, False, strat[1])
        elif op in DERIVED_RULES:
            rule = DERIVED_RULES[op]
            routes[op] = Route(op, "derived", rule.text, rule.source, "derived")
        elif op in FORM_RULES:
            if _has_form_without_aux(node) or (op == "project_jvp" and _faces_of_parts(node)):
                routes[op] = Route(op, "form", FORM_RULES[op], category="form")
            else:
                routes[op] = Route(op, "none", "no native kernel and no linear form without auxiliaries",
                                   category="none")
        else:
            r = _generic(op, node)
            routes[op] = r if r is not None else Route(op, "none", "no implementation can serve it", category="none")
    # a derived route whose source has no implementation has none either (in dependency order)
    changed = True
    while changed:
        changed = False
        for op, r in routes.items():
            if r.category == "derived" and routes[r.source].provider == "none":
                routes[op] = Route(op, "none", f"derived from {r.source}, which has no implementation", category="none")
                changed = True
    return routes


# -- building ----------------------------------------------------------------------------------
def build_plan(node, overrides: dict | None, context) -> Plan:
    """Choose every route of ``node`` and bind the callables.

    ``context`` is the owning DecisionSet: it provides ``parts`` (the compiled parts of a
    combinator), ``workspace(name)`` (this thread's workspace of a backend, or of the family
    for ``name == "native"``) and ``linear_form()``.
    """
    routes = choose(node, overrides)
    calls: dict[str, Callable] = {}
    direct: dict[str, Callable] = {}
    has_parts = bool(node.children())
    strategies = {}

    def run(op, X, tol=None):
        fn = calls[op]
        return fn(X, tol) if op in TAKES_TOL else fn(X)

    for op, r in routes.items():
        if r.category == "native":
            fn = getattr(node, node.kernels[op])
            if getattr(fn, "_setkit_workspace", False):
                raw = (lambda f: (lambda *a, **k: f(*a, context.workspace("native"), **k)))(fn)
            elif has_parts:
                raw = (lambda f: (lambda *a, **k: f(*a, context.parts, **k)))(fn)
            else:
                raw = fn
            direct[op] = raw
            calls[op] = _split_call(raw, op, bool(getattr(fn, "_setkit_into", False)),   # large batches: all cores
                                    bool(getattr(fn, "_setkit_checks", False)))
        elif r.category == "strategy":
            if r.provider not in strategies:
                strategies[r.provider] = strategy(r.provider)(node)
                strategies[r.provider].owner = context
            meth = getattr(strategies[r.provider], op)
            fallback = _generic(op, node) if op in strategies[r.provider].fallback_operators else None
            if fallback is not None:
                routes[op] = Route(op, r.provider, r.reason + f"; rows it leaves unsettled go to {fallback.provider}",
                                   r.source, r.category)
            raw = (lambda f: (lambda *a: f(*a, context.parts)))(meth)
            if fallback is None:
                direct[op] = raw          # no unsettled rows to route: the single-point path may call it
                calls[op] = (lambda f: (lambda *a: _as_pair(f(*a))))(raw)
            else:
                calls[op] = _with_fallback((lambda f: (lambda *a: _as_pair(f(*a))))(raw), op, fallback, context, node)
        elif r.category == "derived":
            calls[op] = DERIVED_RULES[op].build(run, node, context)
        elif r.category == "form" and op == "project_jvp":
            from .derivatives import form_jvp
            calls[op] = form_jvp(run, context)
        elif r.category == "form" and op == "project_kl_jvp":
            from .derivatives import form_kl_jvp
            calls[op] = form_kl_jvp(run, context)
        elif r.category == "form":
            calls[op] = lambda X: (context.linear_form().violation_x(X), {})
        elif r.category == "backend":
            chain = [r.provider] + [name for name, _ in _chain(op, node) if name != r.provider]
            if len(chain) > 1 and op in CHAINED and not r.forced:
                routes[op] = Route(op, r.provider, r.reason + "; on a failed solve: " + ", then ".join(chain[1:]),
                                   r.source, r.category)
            else:
                chain = chain[:1]
            calls[op] = _backend_chain(op, chain, context, node)
        else:
            def unsupported(*a, _op=op, _why=r.reason):
                if _op == "project_kl" and (why := _outside_orthant(node)):
                    from .kernels.bregman import outside_orthant_error
                    raise outside_orthant_error(node.label, why)
                raise UnsupportedOperationError(f"{_op} on {node.label}: {_why}.")
            calls[op] = unsupported
    # scale guards (found by benchmarks/fuzz_operators.py): the LMO is unchanged when a row of c is multiplied by
    # a positive number, so solver routes get rows with largest |entry| in [1, 2) (tiny costs read as zero by LP
    # and conic tolerances otherwise); a support value that came out NaN/inf is recomputed as 2^e support(c / 2^e)
    if routes["lmo"].category in ("strategy", "backend"):
        calls["lmo"] = _unit_cost_rows(calls["lmo"])
        if "lmo" in direct:
            direct["lmo"] = _unit_cost_rows(direct["lmo"])
    if routes["support"].category not in ("none",):
        calls["support"] = _overflow_safe_support(calls["support"], pair=True)
        if "support" in direct:
            direct["support"] = _overflow_safe_support(direct["support"], pair=False)
    if routes["project_kl"].category == "backend" and routes["lmo"].provider != "none":
        from .contract import checked_kl_projection
        r = routes["project_kl"]
        calls["project_kl"] = checked_kl_projection(calls["project_kl"], node, lambda G: run("lmo", G)[0],
                                                    r.provider, loose=bool(getattr(context, "_loose", False)))
        routes["project_kl"] = Route("project_kl", r.provider, r.reason + "; every answer's Bregman gap is checked "
                                     "(one LMO per row; SolveError above 1e-6 x scale x sqrt(n))", r.source,
                                     r.category, r.forced)
    unchecked = _bind_contract(node, routes, calls, direct, run, context)
    point = _point_entries(node, routes, unchecked) if not has_parts else {}
    checking = frozenset(op for op, c in calls.items() if getattr(c, "_setkit_checks_rows", False))
    return Plan(node, MappingProxyType(routes), MappingProxyType(calls), MappingProxyType(direct),
                MappingProxyType(unchecked), MappingProxyType(point), checking)


def _split_call(raw, op, into, checks):
    """The plan's call of a native route: ``split_rows`` over threads, returning ``(out, info)``; for
    the operators it splits, the call takes ``check_finite=`` (each thread validates its rows)."""
    f = split_rows(raw, op, into, checks)
    if f is raw:
        return lambda *a: _as_pair(raw(*a))

    def call(*a, check_finite=False):
        return _as_pair(f(*a, check_finite=check_finite))
    call._setkit_checks_rows = True
    return call


def _declaring_class(cls, attr):
    for klass in cls.__mro__:
        if attr in vars(klass):
            return klass
    return None


POINT_OPERATORS = ("project", "lmo", "distance", "support")
"""the operators a family's ``point_kernels`` may serve (points for the first two, (1,) values for the others)"""
POINT_MAX_DIM = 1 << 16
"""sets of more coordinates get no single-point entries (their per-call overhead does not matter)"""


def _point_entries(node, routes, contract_checked):
    """The family's single-point entries of its native routes of POINT_OPERATORS (see Family.point_kernels).

    Only for a native route without the contract's check whose kernel method is declared by the
    class that declares the hook (a subclass that overrides a kernel does not inherit the entry)."""
    if node.dim > POINT_MAX_DIM:
        return {}             # long vectors: the family path (threads, NumPy-allocated outputs) is the faster one
    cls = type(node)
    from .families import Family
    owner = _declaring_class(cls, "point_kernels")
    if owner is None or owner is Family:
        return {}
    declared = getattr(cls, "_declared_kernels", {})
    ops = [op for op in POINT_OPERATORS if routes[op].category == "native" and op not in contract_checked
           and _declaring_class(cls, node.kernels[op]) is owner
           and declared.get(op) is vars(owner).get(node.kernels[op])]
    if not ops:
        return {}
    checked, trusted = node.point_kernels(True), node.point_kernels(False)
    return {op: (checked[op], trusted[op]) for op in ops if op in checked and op in trusted}


def bind_point(entry):
    """``f(y)`` for a single-point entry ``(function, leading arguments)``: a numba dispatcher is
    called through the compiled entry point of the signature (leading arguments, float64 1-d C
    array), which skips the dispatcher's type resolution. The caller checks the point's type,
    dtype (float64 in native byte order), shape and flags (``carray``: C-contiguous, aligned,
    writeable) first: the entry point trusts them."""
    from functools import partial
    fn, args = entry
    if hasattr(fn, "overloads") and hasattr(fn, "compile"):
        from numba import typeof, types
        try:
            fn = fn.compile(tuple(typeof(a) for a in args) + (types.Array(types.float64, 1, "C"),))
        except Exception:  # noqa: BLE001 - the dispatcher itself still serves (slower type resolution)
            pass
    return partial(fn, *args)


def _bind_contract(node, routes, calls, direct, run, context):
    """Wrap the projection routes that :func:`setkit.contract.needs_check` names with the always-on
    residual check (retrying failing rows on the generic backends of the set, by priority)."""
    from .contract import checked_projection, needs_check
    r = routes.get("project")
    if r is None or not needs_check(node, "project", r.category) or routes["violation"].provider == "none":
        return {}
    retries = [(name, (lambda nm: (lambda Z: context.workspace(nm).project(Z)))(name))
               for name, _ in _chain("project", node)]
    calls["project"] = checked_projection(calls["project"], node, lambda P: run("violation", P)[0], retries,
                                          r.provider)
    raw = direct.pop("project", None)
    if raw is None:
        return {}
    direct["project"] = calls["project"]      # the single-point path and parts' callers get the checked call
    return {"project": raw}                   # K.unchecked keeps the raw kernel (the documented opt-out)


def _pow2_exponents(C):
    """Per row, the e with 2^-e max|c| in [1, 2) (0 for zero or non-finite rows)."""
    m = np.abs(C).max(axis=1, initial=0.0)
    e = np.zeros(C.shape[0], dtype=np.int64)
    ok = (m > 0.0) & np.isfinite(m)
    e[ok] = np.floor(np.log2(m[ok])).astype(np.int64)
    return e


def _unit_cost_rows(call):
    """Rows of c far from unit size (largest entry outside 2^-20..2^20) scaled by a power of two first.

    Rows of ordinary size are passed unchanged (solvers are tuned for them: Clarabel reports
    inaccurate solves on some conic LMOs when their costs are rescaled)."""
    def run(C, *rest):
        e = _pow2_exponents(C)
        e[np.abs(e) <= 20] = 0
        return call(np.ldexp(C, -e[:, None]) if e.any() else C, *rest)
    return run


def _overflow_safe_support(call, pair):
    def run(C, *rest):
        with np.errstate(over="ignore", invalid="ignore"):     # overflowing rows are recomputed below
            res = call(C, *rest)
        out, info = (res if pair else (res, None)) if not (not pair and isinstance(res, tuple)) else res
        v = np.asarray(out, dtype=float)
        bad = ~np.isfinite(v) if v.ndim == 1 and v.shape[0] == C.shape[0] else None
        if bad is not None and bad.any():
            e = _pow2_exponents(C[bad])
            sub = call(np.ldexp(C[bad], -e[:, None]), *rest)
            sub = sub[0] if isinstance(sub, tuple) else sub
            v = v.copy()
            with np.errstate(over="ignore"):
                v[bad] = np.ldexp(np.asarray(sub, dtype=float), e)    # inf only where the value exceeds the float range
            out = v
        if pair or isinstance(res, tuple):
            return out, info
        return out
    return run


def _with_fallback(call, op, fallback, context, node):
    """Rows a method reports as ``info["unsettled"]`` are answered by the fallback route's backend."""
    def run(*a):
        out, info = call(*a)
        bad = info.pop("unsettled", None) if isinstance(info, dict) else None
        if bad:
            if fallback is None:
                raise UnsupportedOperationError(f"{op} on {node.label}: {len(bad)} rows were left unsettled and "
                                                f"no fallback backend serves this set.")
            X = a[0]
            ws = context.workspace(fallback.provider)
            sub = ws.contains(X[bad], a[1][bad]) if op in TAKES_TOL else getattr(ws, op)(X[bad])
            out = np.array(out, copy=True)
            out[bad] = sub[0]
            bs = list(info.get("backend_status", [""] * X.shape[0]))
            st = list(info.get("status", ["solved"] * X.shape[0]))
            sub_status = sub[1].get("status") or ["solved"] * len(bad)
            for j, i in enumerate(bad):
                bs[i] = f"{bs[i]}; answered by {fallback.provider}"
                st[i] = sub_status[j]
            info = dict(info, backend_status=bs, status=st)
        return out, info
    return run


def _backend_chain(op, chain, context, node):
    """Serve ``op`` by the first backend of ``chain``; rows whose solve fails go to the next one.

    Only :class:`setkit.errors.SolveError` moves on (an empty set or an unbounded direction is an
    answer, not a failure). When every backend fails on a row, one SolveError lists them all.
    """
    first = chain[0]

    def call(name, *a):
        return getattr(context.workspace(name), op)(*a)

    if len(chain) == 1:
        return lambda *a: call(first, *a)

    def run(*a):
        try:
            return call(first, *a)
        except TimeLimitError:          # a deadline is not a failed solve: no other backend is tried
            raise
        except SolveError as exc:
            if a[0].shape[0] == 0:
                raise
            first_error = exc
        X = a[0]
        rows, infos = [], []
        for i in range(X.shape[0]):
            sub = tuple(v[i:i + 1] for v in a)
            errors = []
            for name in chain:
                try:
                    out, info = call(name, *sub)
                except TimeLimitError:
                    raise
                except SolveError as exc:
                    errors.append(f"{name}: {exc}")
                    continue
                note = (f"{'; '.join(errors)}; answered by {name}" if errors else f"answered by {name}")
                rows.append(np.asarray(out)[0])
                infos.append((info, name, note))
                break
            else:
                raise SolveError(f"{op} on {node.label}: every backend failed on batch row {i} "
                                 f"({' | '.join(errors)}).", status=getattr(first_error, "status", None))
        out = np.stack(rows)
        info = {"status": [(inf.get("status") or ["solved"])[0] for inf, _, _ in infos],
                "iterations": [(inf.get("iterations") or [0])[0] for inf, _, _ in infos],
                "backend_status": [note for _, _, note in infos]}
        return out, info
    return run


def check_nonempty(node, parts_of, fail):
    """Run the node's emptiness check once per node (the verdict is memoized beside the node)."""
    from .families import Family
    if type(node).check_nonempty is Family.check_nonempty:
        return            # the family declares no check: nothing to compile eagerly

    def verdict():
        try:
            node.check_nonempty(parts_of() if node.children() else (), fail)
        except Exception as exc:   # noqa: BLE001 - the same error is raised again on every compile
            return exc
        return None
    exc = memo(node, "nonempty", verdict)
    if exc is not None:
        raise exc


# kept for callers of the former name
def plan(node, overrides: dict | None = None) -> dict:
    """The routes ``node`` would get (operator -> Route), without binding anything."""
    return choose(node, overrides)
