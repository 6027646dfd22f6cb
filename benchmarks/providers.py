"""Which implementations can serve an operator of a set, found from the registered backends.

Nothing here lists backends: a backend declares its ``operators``, ``priority`` and
``tolerance`` as class attributes (``setkit.backends.Backend``) and ``accepts(node)``;
the benchmarks compare the native kernel (when the family has one) with every backend
that is installed and accepts the set.
"""
from __future__ import annotations

from setkit.backends import all_backends

NATIVE = "native"
REFERENCE = "reference"   # the judge of every comparison: cvxpy with Clarabel (setkit.backends.reference)


def _backends_by_priority() -> list:
    return sorted(all_backends().items(), key=lambda kv: (kv[1].priority, kv[0]))


def direct_providers(node, op) -> list:
    """Providers serving ``op`` directly: the native kernel first, then generic backends by priority."""
    out = [NATIVE] if op in node.kernels else []
    for name, cls in _backends_by_priority():
        if op in cls.operators and cls.available() and cls.accepts(node)[0]:
            out.append(name)
    return out


def candidates(node, op) -> list:
    """(label, with_backends overrides) for every implementation of ``op`` on ``node``.

    Derived operators run through each provider of the operator they come from: distance and
    membership through a projection ("osqp (via project)"), support through an LMO.
    """
    direct = direct_providers(node, op)
    out = [(p, {op: p}) for p in direct]
    if op == "distance":
        for q in direct_providers(node, "project"):
            if q == NATIVE and NATIVE in direct:
                continue
            out.append((f"{q} (via project)", {"distance": "derived", "project": q}))
    elif op == "support":
        for q in direct_providers(node, "lmo"):
            if q not in direct:
                out.append((f"{q} (via lmo)", {"support": "derived", "lmo": q}))
    elif op == "contains":
        if "distance" in node.kernels and NATIVE not in direct:
            out.append((f"{NATIVE} (via distance)", {"contains": "derived", "distance": NATIVE}))
        for q in direct_providers(node, "project"):
            if q == NATIVE and (NATIVE in direct or "distance" in node.kernels):
                continue
            out.append((f"{q} (via project)", {"contains": "derived", "distance": "derived", "project": q}))
    return out


def provider_of(label) -> str:
    """The provider a candidate label runs on: "osqp (via project)" -> "osqp"."""
    return label.split(" ")[0]


def judge_order() -> tuple:
    """Whose answer others are measured against, most trusted first: the reference, the native
    kernel (exact algorithms), then the other backends by declared tolerance."""
    rest = sorted((cls.tolerance, cls.priority, name) for name, cls in all_backends().items() if name != REFERENCE)
    return (REFERENCE, NATIVE) + tuple(name for _, _, name in rest)


def display_order(labels) -> list:
    """Providers in a fixed order for legends and colours: native, then backends by priority."""
    order = [NATIVE] + [name for name, _ in _backends_by_priority()]
    seen = {provider_of(lb) for lb in labels}
    return [p for p in order if p in seen] + sorted(seen - set(order))
