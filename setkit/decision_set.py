"""The DecisionSet every consumer sees: validation of inputs, then dispatch.

Batching follows NumPy's generalized-ufunc rule: trailing axes match
``K.shape``, leading axes are a batch.
"""
from __future__ import annotations

import threading
import time
from dataclasses import dataclass
from typing import Any

import numpy as np

from .errors import InputError, UnsupportedOperationError
from .routing import plan


@dataclass(frozen=True)
class Details:
    """A detailed operator result.

    ``point`` has the shape of the answer; the other fields are scalars for a
    single input and arrays (one entry per batch element) for a batch.
    ``residual`` is the measured largest constraint violation of the answer
    (NaN where the set offers no independent check), ``certificate`` the
    Frank-Wolfe gap support(y - p) - <y - p, p>, which bounds (1/2)||p - p*||^2.
    """

    point: Any
    status: Any
    route: str
    residual: Any
    certificate: Any
    iterations: Any
    seconds: float
    backend_status: Any


def _flat_info(info, key, b, default):
    v = info.get(key)
    if v is None:
        return [default] * b
    return list(v)


def _all_finite(a):
    from .kernels.checks import all_finite   # numba-compiled; imported on first use
    global _all_finite
    _all_finite = all_finite
    return all_finite(a)


def _finite_1d(a):
    """all_finite for a 1-d float64 array, calling the compiled loop directly for long ones."""
    from .kernels.checks import _all_finite as nb
    global _finite_1d

    def _finite_1d(a):
        return bool(np.isfinite(a).all()) if a.size < 64 else nb(a)
    return _finite_1d(a)


def _finite_max_abs(a):
    from .kernels.checks import finite_max_abs   # numba-compiled; imported on first use
    global _finite_max_abs
    _finite_max_abs = finite_max_abs
    return finite_max_abs(a)


_F64 = np.dtype(np.float64)


class DecisionSet:
    """A compiled convex set with its operators.

    Build one with :func:`setkit.compile` or :func:`setkit.load`.
    """

    def __init__(self, node, overrides: dict | None = None, *, loose: bool = False):
        self.node = node
        self._overrides = dict(overrides or {})
        self._loose = loose
        self._routes = plan(node, self._overrides)
        self._local = threading.local()
        self._parts = None
        self._form_cache = None
        # cached for the per-call path (a call at n = 1000 costs a few microseconds)
        self._shape = tuple(node.shape)
        self._dim = int(node.dim)
        self._kernels = {op: getattr(node, name) for op, name in node.kernels.items()}
        self._has_children = bool(node.children())
        self._scale = None
        # bound native kernels, called directly by the single-point fast path of each operator
        self._direct = {op: self._bind(self._kernels[op]) for op, r in self._routes.items()
                        if r.provider == "native" and op in self._kernels}

    def _bind(self, fn):
        """The kernel as a callable of (X) or (X, tol); a combinator's also receives its parts."""
        if not self._has_children:
            return fn
        return lambda *args: fn(*args, self.parts)

    # -- pickling: workspaces are rebuilt lazily on the other side -------------------------
    def __getstate__(self):
        return {"node": self.node, "overrides": self._overrides, "loose": self._loose}

    def __setstate__(self, state):
        self.__init__(state["node"], state["overrides"], loose=state["loose"])

    # -- description --------------------------------------------------------------------------
    @property
    def shape(self) -> tuple:
        return self._shape

    @property
    def dim(self) -> int:
        return self._dim

    @property
    def kind(self) -> str:
        return self.node.kind

    @property
    def parts(self) -> tuple:
        """The compiled parts of a combinator (empty for a family)."""
        if self._parts is None:
            self._parts = tuple(DecisionSet(c, loose=self._loose) for c in self.node.children())
        return self._parts

    def __repr__(self):
        return f"<DecisionSet {self.node.label} shape={self.shape}>"

    def routes(self) -> dict:
        return dict(self._routes)

    # -- flat-batch interface for combinators, penalties, measures and extensions -------------
    @property
    def loose(self) -> bool:
        """Whether iterative methods may return answers above tolerance with an AccuracyWarning."""
        return self._loose

    def run(self, op: str, X, tol=None):
        """Run operator ``op`` on a validated flat batch ``X`` of shape (b, dim); returns (out, info)."""
        return self._run(op, X, tol=tol)

    def native(self, op: str):
        """The bound native kernel serving ``op`` (a callable of flat batches), or None."""
        return self._direct.get(op)

    def flatten(self, y, argname: str = "y", operator: str = "call"):
        """Validate an array-like of trailing shape K.shape; returns (flat (b, dim) batch, leading shape)."""
        return self._batch(y, argname, operator)

    def unflatten_points(self, P, lead):
        """Reshape a flat batch of points (b, dim) to lead + K.shape."""
        return self._out_points(P, lead)

    def unflatten_values(self, v, lead):
        """Reshape (b,) values to the leading shape (a scalar for a single point)."""
        return self._out_values(v, lead)

    def linear_form(self):
        """The set's linear form {A_eq z = b_eq, A_ub z <= b_ub, lo <= z <= hi}, or None (computed once)."""
        return self._form()

    def explain(self) -> str:
        """Which algorithm or backend serves each operator, and why."""
        lines = [f"{self.node.label}: shape {self.shape}, dim {self.dim}"]
        for op, r in self._routes.items():
            lines.append("  " + r.describe())
        for i, p in enumerate(self.parts):
            sub = p.explain().splitlines()
            lines.append(f"  part {i}: " + sub[0])
            lines.extend("    " + s for s in sub[1:])
        return "\n".join(lines)

    def with_backends(self, **choices) -> "DecisionSet":
        """The same set with other implementations, e.g. ``with_backends(project="osqp")``.

        Values are a backend name, ``"native"``, ``"derived"``, or None (default route).
        """
        merged = dict(self._overrides)
        for k, v in choices.items():
            if v is None:
                merged.pop(k, None)
            else:
                merged[k] = v
        loose = merged.pop("loose", self._loose)
        return DecisionSet(self.node, merged, loose=bool(loose))

    # -- input handling -------------------------------------------------------------------------
    def _batch(self, arr, argname: str, op: str):
        try:
            a = np.asarray(arr, dtype=float)
        except (TypeError, ValueError):
            raise InputError(f"{op} on {self.node.label}: argument {argname} must be numeric with trailing "
                             f"shape {self.shape}; got {type(arr).__name__}.") from None
        shape = self._shape
        k = len(shape)
        if a.ndim < k or a.shape[a.ndim - k:] != shape:
            raise InputError(f"{op} on {self.node.label}: argument {argname} must have trailing shape "
                             f"{self.shape} (leading axes are a batch); got shape {a.shape}.")
        if not _all_finite(a):
            bad = np.argwhere(~np.isfinite(a))[0]
            raise InputError(f"{op} on {self.node.label}: argument {argname} must be finite; got "
                             f"{a[tuple(bad)]} at index {tuple(int(i) for i in bad)}.")
        lead = a.shape[: a.ndim - k]
        return np.ascontiguousarray(a.reshape(-1, self._dim)), lead

    def _one(self, a):
        """The common case: one point of exact shape, float64, C-contiguous, finite -> (1, dim) view.

        None for anything else (the general path in :meth:`_batch` then validates and reports)."""
        if type(a) is np.ndarray and a.shape == self._shape and a.dtype == _F64 and a.flags.c_contiguous:
            if a.ndim == 1:
                if _finite_1d(a):
                    return a.reshape(1, self._dim)
            elif _all_finite(a):
                return a.reshape(1, self._dim)
        return None

    def _out_points(self, P, lead):
        return P.reshape(lead + self.shape)

    @staticmethod
    def _out_values(v, lead):
        v = np.asarray(v)
        return v.reshape(lead)[()] if lead == () else v.reshape(lead)

    # -- dispatch -------------------------------------------------------------------------------
    def _workspace(self, name):
        from .backends import get_backend
        cache = getattr(self._local, "ws", None)
        if cache is None:
            cache = self._local.ws = {}
        if name not in cache:
            cache[name] = get_backend(name)(self.node, loose=self._loose)
        return cache[name]

    def _form(self):
        if self._form_cache is None:
            self._form_cache = self.node.linear_form()
        return self._form_cache

    def _run(self, op, X, tol=None):
        """Run operator ``op`` on a flat batch; returns (out, info)."""
        r = self._routes[op]
        p = r.provider
        if p == "native":
            fn = self._kernels[op]
            args = (X, tol) if op == "contains" else (X,)
            if self._has_children:
                args = args + (self.parts,)
            out = fn(*args)
            # a kernel may return (out, info) to report status/iterations for details=True
            return out if isinstance(out, tuple) else (out, {})
        if p == "derived":
            if op == "distance":
                P, info = self._run("project", X)
                return np.linalg.norm(X - P, axis=1), info
            if op == "support":
                L, info = self._run("lmo", -X)   # max <c, x> = <c, argmin <-c, x>>
                return np.einsum("ij,ij->i", X, L), info
            if op == "contains":
                d, info = self._run("distance", X)
                return d <= tol, info
        if p == "form":
            return self._form().violation_x(X), {}
        if p == "none":
            raise UnsupportedOperationError(f"{op} on {self.node.label}: {r.reason}.")
        ws = self._workspace(p)
        if op == "contains":
            return getattr(ws, op)(X, tol)
        return getattr(ws, op)(X)

    def _default_tol(self, X):
        if self._scale is None:
            self._scale = max(1.0, float(self.node.scale()))   # nodes are immutable: computed once
        return 1e-7 * np.maximum(np.abs(X).max(axis=1), self._scale)

    # -- operators ------------------------------------------------------------------------------
    def project(self, y, details: bool = False):
        """Euclidean projection onto the set: argmin_{x in K} ||x - y||."""
        if not details:
            fn = self._direct.get("project")
            if fn is not None:
                Y = self._one(y)
                if Y is not None:
                    P = fn(Y)
                    if isinstance(P, tuple):
                        P = P[0]
                    return P.reshape(self._shape)
        Y, lead = self._batch(y, "y", "project")
        t0 = time.perf_counter()
        P, info = self._run("project", Y)
        secs = time.perf_counter() - t0
        if not details:
            return self._out_points(P, lead)
        return self._details("project", Y, P, lead, info, secs, certificate=True)

    def distance(self, y):
        """Euclidean distance to the set: ||y - project(y)||."""
        fn = self._direct.get("distance")
        if fn is not None:
            Y = self._one(y)
            if Y is not None:
                d = fn(Y)
                if isinstance(d, tuple):
                    d = d[0]
                return d[0] if type(d) is np.ndarray and d.shape == (1,) else self._out_values(d, ())
        Y, lead = self._batch(y, "y", "distance")
        d, _ = self._run("distance", Y)
        return self._out_values(d, lead)

    def lmo(self, c, details: bool = False):
        """Linear minimization oracle: a minimizer of <c, x> over the set."""
        if not details:
            fn = self._direct.get("lmo")
            if fn is not None:
                C = self._one(c)
                if C is not None:
                    L = fn(C)
                    if isinstance(L, tuple):
                        L = L[0]
                    return L.reshape(self._shape)
        C, lead = self._batch(c, "c", "lmo")
        t0 = time.perf_counter()
        L, info = self._run("lmo", C)
        secs = time.perf_counter() - t0
        if not details:
            return self._out_points(L, lead)
        return self._details("lmo", C, L, lead, info, secs, certificate=False)

    def support(self, c):
        """Support function: max over the set of <c, x>."""
        fn = self._direct.get("support")
        if fn is not None:
            C = self._one(c)
            if C is not None:
                v = fn(C)
                if isinstance(v, tuple):
                    v = v[0]
                return v[0] if type(v) is np.ndarray and v.shape == (1,) else self._out_values(v, ())
        C, lead = self._batch(c, "c", "support")
        # sigma(c) = -min <-c, x>
        v, _ = self._run("support", C)
        return self._out_values(v, lead)

    def contains(self, x, tol=None):
        """Membership within tolerance: dist(x, K) <= tol.

        ``tol`` is absolute; by default 1e-7 * max(1, ||x||_inf, scale of the set's data).
        """
        if tol is None:
            fn = self._direct.get("contains")
            if fn is not None:
                m = -1.0
                if (type(x) is np.ndarray and x.shape == self._shape and x.dtype == _F64
                        and x.flags.c_contiguous):
                    m = _finite_max_abs(x.reshape(-1))      # -1 when some entry is not finite
                if m >= 0.0:
                    X = x.reshape(1, self._dim)
                    if self._scale is None:
                        self._scale = max(1.0, float(self.node.scale()))
                    t = np.array([1e-7 * max(m, self._scale)])
                    v = fn(X, t)
                    if isinstance(v, tuple):
                        v = v[0]
                    if type(v) is np.ndarray and v.shape == (1,):
                        return v.astype(bool, copy=False)[0]
                    return self._out_values(np.asarray(v, dtype=bool), ())
        X, lead = self._batch(x, "x", "contains")
        if tol is None:
            t = self._default_tol(X)
        else:
            try:
                t = np.broadcast_to(np.asarray(tol, dtype=float), (X.shape[0],))
            except ValueError:
                raise InputError(f"contains on {self.node.label}: tol must be a number or one per point; "
                                 f"got shape {np.shape(tol)}.") from None
            if np.any(~np.isfinite(t)) or np.any(t < 0):
                raise InputError(f"contains on {self.node.label}: tol must be a finite number >= 0; got {tol}.")
        v, _ = self._run("contains", X, tol=t)
        return self._out_values(np.asarray(v, dtype=bool), lead)

    def violation(self, x):
        """Largest violated defining constraint of each point (0 inside), NaN if the set has no such check."""
        X, lead = self._batch(x, "x", "violation")
        if self._routes["violation"].provider == "none":
            return self._out_values(np.full(X.shape[0], np.nan), lead)
        v, _ = self._run("violation", X)
        return self._out_values(v, lead)

    def certificate(self, y, p):
        """Frank-Wolfe gap of p as a projection of y: support(y - p) - <y - p, p> >= (1/2)||p - p*||^2."""
        Y, lead = self._batch(y, "y", "certificate")
        P, _ = self._batch(p, "p", "certificate")
        return self._out_values(self._gap(Y, P), lead)

    def _gap(self, Y, P):
        R = Y - P
        s, _ = self._run("support", R)
        return s - np.einsum("ij,ij->i", R, P)

    def _details(self, op, X, P, lead, info, secs, certificate):
        b = X.shape[0]
        if self._routes["violation"].provider != "none":
            resid, _ = self._run("violation", P)
        else:
            resid = np.full(b, np.nan)
        cert = self._gap(X, P) if certificate else np.full(b, np.nan)
        status = _flat_info(info, "status", b, "solved")
        iters = _flat_info(info, "iterations", b, 0)
        bstat = _flat_info(info, "backend_status", b, "exact")

        def pack(v, dtype=None):
            arr = np.asarray(v, dtype=dtype)
            return arr.reshape(lead)[()] if lead == () else arr.reshape(lead)

        r = self._routes[op]
        return Details(point=self._out_points(P, lead), status=pack(status, object), route=r.provider,
                       residual=pack(resid, float), certificate=pack(cert, float),
                       iterations=pack(iters, object), seconds=secs, backend_status=pack(bstat, object))

    # -- modeling --------------------------------------------------------------------------------
    def to_cvxpy(self, x) -> list:
        """The set as a list of cvxpy constraints on ``x`` (a cvxpy expression of shape ``K.shape``)."""
        shp = tuple(getattr(x, "shape", ()))
        if shp != self.shape:
            raise InputError(f"to_cvxpy on {self.node.label}: x must be a cvxpy expression of shape "
                             f"{self.shape}; got shape {shp}.")
        return list(self.node.cvxpy_constraints(x))

    # -- measures and penalties are served by their own modules ----------------------------------
    def centroid(self, measure: str = "volume", **kw):
        """Centroid of the set under ``measure`` ("volume", "vertices", "directions")."""
        from . import measures
        return measures.centroid(self, measure, **kw)

    def centered(self, measure: str = "volume", **kw) -> "DecisionSet":
        """The same set translated so that its centroid under ``measure`` is the origin (an affine shift)."""
        from .combinators.affine import centered
        return centered(self, measure, **kw)

    def sample(self, k: int, measure: str = "volume", rng=None, **kw):
        """k points of the set drawn from ``measure``; shape (k, *K.shape)."""
        from . import measures
        return measures.sample(self, k, measure, rng, **kw)

    def penalty(self, G: float, smoothing: str | None = None, width: float | None = None, **kw):
        """The distance penalty G·dist(x, K), optionally smoothed ("moreau" or "ball")."""
        from . import penalty
        return penalty.make_penalty(self, G, smoothing, width, **kw)
