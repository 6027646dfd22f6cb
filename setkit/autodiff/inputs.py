"""Checks the two framework layers share: the set, the geometry, the point shape, the routes they need.

They run before any data leaves the framework, so that a bad call fails with setkit's
own error at the line that made it (under ``jax.jit``: while tracing).
"""
from __future__ import annotations

import difflib

from ..decision_set import GEOMETRIES, DecisionSet
from ..errors import InputError, UnsupportedOperationError

__all__ = ["checked_set", "checked_geometry", "check_point_shape", "operators_for", "check_route"]


def checked_set(K, where: str) -> DecisionSet:
    """K itself when it is a compiled set; otherwise InputError saying how to get one."""
    if isinstance(K, DecisionSet):
        return K
    raise InputError(f"{where}: K must be a compiled set (a setkit.DecisionSet, from setkit.compile(...) or "
                     f"setkit.load(...)); got {type(K).__name__}. Compile it once, outside the training loop: "
                     f"K = setkit.compile(description).")


def checked_geometry(geometry, where: str) -> str:
    """The geometry name in lower case, or InputError naming the valid ones and the closest."""
    g = "euclidean" if geometry is None else str(geometry).lower()
    if g in GEOMETRIES:
        return g
    near = difflib.get_close_matches(g, GEOMETRIES, n=1)
    hint = f" Did you mean {near[0]!r}?" if near else ""
    raise InputError(f"{where}: geometry must be one of {', '.join(GEOMETRIES)}; got {geometry!r}.{hint}")


def check_point_shape(K: DecisionSet, shape, where: str) -> None:
    """InputError unless the trailing axes of ``shape`` are ``K.shape`` (leading axes are a batch)."""
    shape = tuple(int(s) for s in shape)
    k = len(K.shape)
    if len(shape) < k or shape[len(shape) - k:] != tuple(K.shape):
        raise InputError(f"{where} on {K.node.label}: y must have shape (..., {', '.join(map(str, K.shape))}) "
                         f"(trailing axes the point shape {tuple(K.shape)}, leading axes a batch); got {shape}.")


def operators_for(geometry: str) -> tuple:
    """(forward operator, backward operator) of the set's routes for a projection geometry."""
    return ("project_kl", "project_kl_vjp") if geometry == "kl" else ("project", "project_vjp")


def check_route(K: DecisionSet, op: str, where: str) -> None:
    """UnsupportedOperationError when K has no implementation of the operator ``op``."""
    route = K.routes().get(op)
    if route is None or route.category == "none":
        reason = route.reason if route is not None else "no route"
        raise UnsupportedOperationError(f"{where} on {K.node.label}: the set has no {op} ({reason}), so the "
                                        f"projection cannot be differentiated; K.explain() lists what it offers.")
