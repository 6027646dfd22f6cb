"""The only place that chooses an implementation for each operator.

Order of preference: a native kernel of the family > a rule derived from
another operator > a generic backend (by its declared priority). Every choice
is recorded with its reason for ``explain()``.
"""
from __future__ import annotations

from dataclasses import dataclass

from .backends import all_backends, get_backend
from .errors import BackendUnavailableError, UnsupportedOperationError
from .families import OPERATORS

# operator -> (operator it is derived from, the rule in words)
DERIVED_RULES = {
    "distance": ("project", "distance = ||y - project(y)||"),
    "support": ("lmo", "support(c) = <c, lmo(-c)>"),
    "contains": ("distance", "contains(x) = distance(x) <= tol"),
}
FORM_RULES = {
    "violation": "largest violated constraint of the linear form",
}


@dataclass(frozen=True)
class Route:
    operator: str
    provider: str        # "native" | "derived" | "form" | backend name | "none"
    reason: str
    source: str | None = None   # for derived routes: the operator used

    def describe(self) -> str:
        return f"{self.operator:<10} {self.provider:<10} {self.reason}"


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
    return Route(op, name, ("chosen by the caller; " if forced else "") + f"{cls.about} ({why})")


def _generic(op, node):
    for name, cls in sorted(all_backends().items(), key=lambda kv: kv[1].priority):
        if op in cls.operators and cls.available():
            ok, why = cls.accepts(node)
            if ok:
                return Route(op, name, f"no native kernel; generic {cls.problem} backend: {cls.about}")
    return None


def plan(node, overrides: dict | None = None) -> dict:
    """Choose a route for every operator of ``node``; ``overrides`` maps operator -> provider."""
    overrides = dict(overrides or {})
    for op in overrides:
        if op not in OPERATORS:
            raise UnsupportedOperationError(
                f"with_backends: unknown operator {op!r}; the operators are {', '.join(OPERATORS)}.")
    routes = {}
    for op in OPERATORS:
        want = overrides.get(op)
        if want is not None:
            if want == "native":
                if op not in node.kernels:
                    raise BackendUnavailableError(f"{node.label} has no native kernel for {op}; "
                                                  f"its native kernels are {', '.join(node.kernels) or '(none)'}.")
                routes[op] = Route(op, "native", "chosen by the caller; " + _native_reason(node, op))
            elif want == "derived":
                if op not in DERIVED_RULES:
                    raise BackendUnavailableError(f"{op} has no derived rule; the derived operators are "
                                                  f"{', '.join(DERIVED_RULES)}.")
                src, rule = DERIVED_RULES[op]
                routes[op] = Route(op, "derived", "chosen by the caller; " + rule, src)
            else:
                routes[op] = _backend_route(op, node, want, True)
            continue
        if op in node.kernels:
            routes[op] = Route(op, "native", _native_reason(node, op))
        elif op in DERIVED_RULES:
            src, rule = DERIVED_RULES[op]
            routes[op] = Route(op, "derived", rule, src)
        elif op in FORM_RULES:
            form = node.linear_form()
            if form is not None and form.n_aux == 0:
                routes[op] = Route(op, "form", FORM_RULES[op])
            else:
                routes[op] = Route(op, "none", "no native kernel and no linear form without auxiliaries")
        else:
            r = _generic(op, node)
            routes[op] = r if r is not None else Route(op, "none", "no implementation can serve it")
    return routes


def _native_reason(node, op):
    fn = getattr(type(node), node.kernels[op])
    doc = (fn.__doc__ or "").strip().splitlines()
    return "native kernel: " + (doc[0].rstrip(".") if doc else fn.__name__)
