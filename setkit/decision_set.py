"""The DecisionSet every consumer sees: validation of inputs, then dispatch.

Batching follows NumPy's generalized-ufunc rule: trailing axes match
``K.shape``, leading axes are a batch.
"""
from __future__ import annotations

import threading
import time
import warnings
from dataclasses import dataclass
from typing import Any

import numpy as np

from .errors import AccuracyWarning, InputError, NonFiniteRows, SetkitError, SolveError, TakeGeneralPath
from .parallel import MIN_ENTRIES as MIN_SPLIT_ENTRIES
from .routing import bind_point, build_plan, check_nonempty


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
        return nb(a)     # one compiled pass; np.isfinite(a).all() costs several times more even for short a
    return _finite_1d(a)


def _finite_max_abs(a):
    from .kernels.checks import finite_max_abs   # numba-compiled; imported on first use
    global _finite_max_abs
    _finite_max_abs = finite_max_abs
    return finite_max_abs(a)


_F64 = np.dtype(np.float64)
_ND = np.ndarray
GEOMETRIES = ("euclidean", "kl")


def _is_dask(a) -> bool:
    """Whether a is a dask array (by its type's module: dask is not imported for this)."""
    return type(a).__module__[:5] == "dask." and hasattr(a, "chunks")


def kl_divergence(X, T):
    """Generalized relative entropy KL(x || y) = sum x log(x/y) - x + y per row, from t = log y (0 log 0 = 0)."""
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        logx = np.where(X > 0, np.log(np.where(X > 0, X, 1.0)), 0.0)
        terms = np.where(X > 0, X * (logx - T), 0.0) - X + np.exp(T)
    return terms.sum(axis=1)


class DecisionSet:
    """A compiled convex set with its operators.

    Build one with :func:`setkit.compile` or :func:`setkit.load`. It validates inputs,
    dispatches to its :class:`setkit.routing.Plan` and owns its solver workspaces (one
    per thread, rebuilt lazily after pickling).

    >>> import setkit
    >>> K = setkit.compile({"kind": "simplex", "dim": 3})
    >>> K.shape, K.dim
    ((3,), 3)
    """

    def __init__(self, node, overrides: dict | None = None, *, loose: bool = False):
        self.node = node
        self._overrides = dict(overrides or {})
        self._loose = bool(loose)
        self._local = threading.local()
        self._parts = None
        self._form_cache = None
        self._shape = tuple(node.shape)
        self._dim = int(node.dim)
        self._scale = None
        from .description import failer_for
        check_nonempty(node, lambda: self.parts, failer_for(node))
        self._plan = build_plan(node, self._overrides, self)
        self._routes = self._plan.routes
        # bound native kernels, called directly by the single-point fast path
        self._direct = self._plan.direct
        # compiled single-point entries (setkit.kernels.point), bound on first use (loading one costs milliseconds)
        point = self._plan.point
        for op in ("project", "lmo", "distance", "support"):
            setattr(self, "_pt_" + op, self._point_binder(op) if op in point else None)

    def _point_binder(self, op):
        """A stand-in for the checked single-point entry of ``op`` that binds it on its first call."""
        def first_call(y):
            f = bind_point(self._plan.point[op][0])
            setattr(self, "_pt_" + op, f)
            return f(y)
        return first_call

    # -- performance: trusted-input calls and jitted consumers (issue 12) ---------------------------
    @property
    def unchecked(self) -> "UncheckedOperators":
        """The native operators without input validation, for trusted inputs in hot loops.

        ``K.unchecked.project(y)`` (and ``lmo``, ``distance``, ``support``, ``violation`` where the
        set has a native kernel for them) takes one float64 point of shape ``K.shape`` and calls the
        bound native kernel directly: no finiteness check and no conversion. The dtype, shape and
        layout are still compared (a few hundred nanoseconds); a non-finite point gives an undefined
        answer instead of an InputError. Operators not served natively are not offered.

        >>> import numpy as np, setkit
        >>> U = setkit.compile({"kind": "simplex", "dim": 3}).unchecked
        >>> U.project(np.array([1.0, 0.0, 0.0])).tolist()
        [1.0, 0.0, 0.0]
        """
        u = self.__dict__.get("_unchecked")
        if u is None:
            u = self.__dict__["_unchecked"] = UncheckedOperators(self)
        return u

    def jit_kernels(self):
        """The set's native project / lmo as numba functions of one point, with the set's data bound.

        Returns a namedtuple (fields: the operators the family offers this way and the plan serves
        natively, e.g. ``project`` and ``lmo``) of ``@njit`` functions ``f(y) -> x`` on a 1-d float64
        array of length ``K.dim``, callable from the caller's own ``@njit`` code with no Python in
        between. They run the same compiled row kernels as ``K.project`` / ``K.lmo``, so answers are
        bit-identical; they do not validate input. Each compiles once per set on first call. Raises
        UnsupportedOperationError for a set without such kernels (combinators, graph families).

        >>> import numpy as np, setkit
        >>> J = setkit.compile({"kind": "box", "dim": 2, "lower": 0, "upper": 1}).jit_kernels()
        >>> J.project(np.array([2.0, -1.0])).tolist()
        [1.0, 0.0]
        """
        cached = self.__dict__.get("_jit_kernels")
        if cached is not None:
            return cached
        from collections import namedtuple
        from .errors import UnsupportedOperationError
        found = {op: f for op, f in self.node.bound_kernels().items() if self._routes[op].provider == "native"}
        if not found or self.node.children():
            raise UnsupportedOperationError(
                f"jit_kernels on {self.node.label}: this set has no numba kernels of one point; they exist for "
                f"simplex, budget, box, ball and permutahedron sets served by their native kernels. Use "
                f"K.unchecked or K.project from Python instead.")
        J = namedtuple("JitKernels", sorted(found))(**found)
        self.__dict__["_jit_kernels"] = J
        return J

    # -- pickling: workspaces are rebuilt lazily on the other side -------------------------
    def __getstate__(self):
        return {"node": self.node, "overrides": self._overrides, "loose": self._loose}

    def __setstate__(self, state):
        self.__init__(state["node"], state["overrides"], loose=state["loose"])

    # -- description --------------------------------------------------------------------------
    @property
    def shape(self) -> tuple:
        """The point shape, e.g. (n,) or (m, n)."""
        return self._shape

    @property
    def dim(self) -> int:
        """The number of coordinates of a point (the product of ``shape``)."""
        return self._dim

    @property
    def kind(self) -> str:
        """The family or combinator kind of the top node."""
        return self.node.kind

    @property
    def plan(self):
        """The compiled :class:`setkit.routing.Plan`: route and callable of every operator."""
        return self._plan

    @property
    def parts(self) -> tuple:
        """The compiled parts of a combinator (empty for a family)."""
        if self._parts is None:
            self._parts = tuple(DecisionSet(c, loose=self._loose) for c in self.node.children())
        return self._parts

    def __repr__(self):
        return f"<DecisionSet {self.node.label} shape={self.shape}>"

    def routes(self) -> dict:
        """Operator -> :class:`setkit.routing.Route` (provider and reason)."""
        return dict(self._routes)

    def explain(self) -> str:
        """Which algorithm or backend serves each operator, and why.

        >>> import setkit
        >>> print(setkit.compile({"kind": "box", "dim": 2}).explain().splitlines()[0])
        box: shape (2,), dim 2
        """
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

        Values are a backend name, a combinator strategy name, ``"native"``, ``"derived"``,
        or None (default route); ``loose=True`` lets iterative methods warn instead of raise.

        >>> import setkit
        >>> K = setkit.compile({"kind": "simplex", "dim": 3}).with_backends(lmo="highs")
        >>> K.routes()["lmo"].provider
        'highs'
        """
        merged = dict(self._overrides)
        for k, v in choices.items():
            if v is None:
                merged.pop(k, None)
            else:
                merged[k] = v
        loose = merged.pop("loose", self._loose)
        return DecisionSet(self.node, merged, loose=bool(loose))

    # -- flat-batch interface for combinators, penalties, measures and extensions -------------
    @property
    def loose(self) -> bool:
        """Whether iterative methods may return answers above tolerance with an AccuracyWarning."""
        return self._loose

    def run(self, op: str, X, tol=None):
        """Run operator ``op`` on a validated flat batch ``X`` of shape (b, dim); returns (out, info)."""
        return self._plan.run(op, X, tol)

    def native(self, op: str):
        """The bound native kernel serving ``op`` (a callable of flat batches), or None."""
        return self._direct.get(op)

    def workspace(self, name: str):
        """This thread's workspace of backend ``name`` (or of the family's kernels for "native"), built on first use."""
        cache = getattr(self._local, "ws", None)
        if cache is None:
            cache = self._local.ws = {}
        ws = cache.get(name)
        if ws is None:
            if name == "native":
                ws = self.node.new_workspace()
            else:
                from .backends import get_backend
                ws = get_backend(name)(self.node, loose=self._loose)
            cache[name] = ws
        return ws

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
        if self._form_cache is None:
            self._form_cache = (self.node.linear_form(),)
        return self._form_cache[0]

    # -- input handling -------------------------------------------------------------------------
    def _batch(self, arr, argname: str, op: str):
        kind = getattr(getattr(arr, "dtype", None), "kind", None)
        if kind is None:
            try:
                kind = np.asarray(arr).dtype.kind
            except (TypeError, ValueError):
                kind = "O"
        if kind not in "biuf":
            what = {"c": "complex", "U": "text", "S": "bytes", "O": "object", "M": "datetime", "m": "timedelta"}
            raise InputError(f"{op} on {self.node.label}: argument {argname} must be numeric, real numbers (bool, int or "
                             f"float dtypes); got {what.get(kind, kind)} data of type {type(arr).__name__}. "
                             f"Convert it with numpy.asarray(..., dtype=float) after dropping non-real parts.")
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
            if a.ndim == 1 and a.size < 1 << 19:       # longer points: _all_finite checks them over the threads
                if _finite_1d(a):
                    return a.reshape(1, self._dim)
            elif _all_finite(a):
                return a.reshape(1, self._dim)
        return None

    def _fast(self, op, a):
        """The single-point fast path shared by every operator: one finite float64 C-contiguous point of
        exact shape goes straight to the bound native kernel; None means "take the general path"."""
        fn = self._direct.get(op)
        if fn is None:
            return None
        A = self._one(a)
        if A is None:
            return None
        out = fn(A)
        return out[0] if isinstance(out, tuple) else out

    def _out_points(self, P, lead):
        return P.reshape(lead + self.shape)

    @staticmethod
    def _out_values(v, lead):
        v = np.asarray(v)
        return v.reshape(lead)[()] if lead == () else v.reshape(lead)

    # -- dask arrays: lazy block-by-block calls (setkit.chunked) -----------------------------------
    def _lazy(self, op, arrays, details=False, out_kind="points", **kw):
        from . import chunked
        if details:
            raise chunked.no_details(self, op)
        return chunked.lazy_call(self, op, arrays, kw=kw, out_kind=out_kind)

    # -- dispatch ------------------------------------------------------------------------------
    def _run(self, op, X, tol=None):
        return self._plan.run(op, X, tol)

    def _batch_run(self, op, arr, argname):
        """``_batch`` then ``_run``: returns (flat batch, leading shape, answer, info).

        A large float64 C-contiguous batch served by a native kernel that splits over threads skips
        the finiteness pass here: each thread checks its own rows before its kernel runs (the check
        then runs on every core, with no extra hand-off); a non-finite entry anywhere makes the
        ordinary validation run, which names the first bad index."""
        shape = self._shape
        k = len(shape)
        if (op in self._plan.self_checking and type(arr) is _ND and arr.dtype is _F64 and arr.ndim > k
                and arr.size >= MIN_SPLIT_ENTRIES and arr.flags.c_contiguous and arr.shape[arr.ndim - k:] == shape):
            X = arr.reshape(-1, self._dim)
            try:
                out, info = self._plan.run(op, X, check_finite=True)
                return X, arr.shape[:arr.ndim - k], out, info
            except NonFiniteRows:
                pass                # the validation below raises the InputError naming the first bad index
        X, lead = self._batch(arr, argname, op)
        out, info = self._run(op, X)
        return X, lead, out, info

    def _default_tol(self, X):
        if self._scale is None:
            self._scale = max(1.0, float(self.node.scale()))   # nodes are immutable: computed once
        return 1e-7 * np.maximum(np.abs(X).max(axis=1), self._scale)

    # -- operators ------------------------------------------------------------------------------
    # -- geometries ------------------------------------------------------------------------------
    def _geometry(self, geometry, op):
        g = "euclidean" if geometry is None else str(geometry).lower()
        if g not in GEOMETRIES:
            import difflib
            near = difflib.get_close_matches(g, GEOMETRIES, n=1)
            hint = f" Did you mean {near[0]!r}?" if near else ""
            raise InputError(f"{op} on {self.node.label}: geometry must be one of {', '.join(GEOMETRIES)}; "
                             f"got {geometry!r}.{hint}")
        return g

    def _log_input(self, y, argname, op, log_input):
        """Flat log-domain batch T = log y (or y itself when ``log_input``), validated."""
        Y, lead = self._batch(y, argname, op)
        if log_input:
            return Y, lead
        bad = np.flatnonzero((Y <= 0).any(axis=1)) if Y.size else np.zeros(0, int)
        if bad.size:
            i = int(bad[0])
            j = int(np.flatnonzero(Y[i] <= 0)[0])
            raise InputError(f"{op} on {self.node.label}: the KL geometry needs y > 0 (relative entropy KL(x||y) "
                             f"is defined for positive y); got {Y[i, j]!r} at batch row {i}, coordinate {j}. "
                             f"Pass log y with log_input=True to use values that would underflow.")
        with np.errstate(divide="ignore"):
            return np.log(Y), lead

    def _kl_project(self, y, details, log_input, op="project"):
        T, lead = self._log_input(y, "y", op, log_input)
        t0 = time.perf_counter()
        X, info = self._run("project_kl", T)
        secs = time.perf_counter() - t0
        if not details:
            return self._out_points(X, lead), T, X, lead
        return self._details("project_kl", T, X, lead, info, secs, certificate="kl"), T, X, lead

    def project(self, y, details: bool = False, *, geometry: str = "euclidean", log_input: bool = False):
        """Euclidean projection onto the set.

        .. math:: P_K(y) = \\arg\\min_{x \\in K} \\|x - y\\|_2

        Parameters
        ----------
        y : array_like, shape (...) + K.shape
            Points; leading axes are a batch.
        details : bool
            Return a :class:`Details` record (point, status, route, measured residual,
            Frank-Wolfe certificate, iterations, seconds, backend status) instead of the point.

        Returns
        -------
        ndarray of shape y.shape (float64), or Details.

        Notes
        -----
        Cost: that of the route ``explain()`` names (e.g. O(n log n) for a simplex or a
        permutahedron, one QP solve per point for a generic polyhedron).

        Examples
        --------
        >>> import setkit
        >>> setkit.compile({"kind": "simplex", "dim": 3}).project([1.0, 0.0, 0.0]).tolist()
        [1.0, 0.0, 0.0]
        >>> setkit.compile({"kind": "simplex", "dim": 2}).project([[2.0, 0.0], [0.5, 0.5]]).tolist()
        [[1.0, 0.0], [0.5, 0.5]]
        """
        f = self._pt_project
        if (f is not None and type(y) is _ND and y.dtype is _F64 and y.shape == self._shape and details is False
                and geometry == "euclidean" and y.flags.carray):     # carray: C-contiguous, aligned, writeable
            try:
                return f(y)           # one compiled call: the finiteness check and the native kernel
            except TakeGeneralPath:
                pass
        if geometry != "euclidean" and self._geometry(geometry, "project") == "kl":
            if _is_dask(y):
                return self._lazy("project", [(y, "y")], details, geometry="kl", log_input=log_input)
            return self._kl_project(y, details, log_input)[0]
        if not details:
            P = self._fast("project", y)
            if P is not None:
                return P.reshape(self._shape)
        if _is_dask(y):
            return self._lazy("project", [(y, "y")], details)
        t0 = time.perf_counter()
        Y, lead, P, info = self._batch_run("project", y, "y")
        secs = time.perf_counter() - t0
        if not details:
            return self._out_points(P, lead)
        return self._details("project", Y, P, lead, info, secs, certificate=True)

    def distance(self, y, *, geometry: str = "euclidean", log_input: bool = False):
        """Euclidean distance to the set.

        .. math:: d_K(y) = \\min_{x \\in K} \\|x - y\\|_2 = \\|y - P_K(y)\\|_2

        Returns a float for one point, an array of the batch shape otherwise. Cost: one
        projection unless the family has a native distance.

        Examples
        --------
        >>> import setkit
        >>> float(setkit.compile({"kind": "box", "dim": 2, "lower": 0, "upper": 1}).distance([4.0, 5.0]))
        5.0
        """
        if geometry != "euclidean" and self._geometry(geometry, "distance") == "kl":
            if _is_dask(y):
                return self._lazy("distance", [(y, "y")], out_kind="values", geometry="kl", log_input=log_input)
            _, T, X, lead = self._kl_project(y, False, log_input, "distance")
            return self._out_values(kl_divergence(X, T), lead)
        f = self._pt_distance
        if (f is not None and type(y) is _ND and y.dtype is _F64 and y.shape == self._shape
                and geometry == "euclidean" and y.flags.carray):
            try:
                return f(y)[0]
            except TakeGeneralPath:
                pass
        d = self._fast("distance", y)
        if d is not None:
            return d[0] if type(d) is np.ndarray and d.shape == (1,) else self._out_values(d, ())
        if _is_dask(y):
            return self._lazy("distance", [(y, "y")], out_kind="values")
        _, lead, d, _ = self._batch_run("distance", y, "y")
        return self._out_values(d, lead)

    def _jacobian_product(self, op, y, w, wname, geometry, log_input):
        g = self._geometry(geometry, op)
        if _is_dask(y):
            return self._lazy(op, [(y, "y"), (w, wname)], geometry=g, log_input=log_input)
        if g == "kl":
            T, lead = self._log_input(y, "y", op, log_input)
        else:
            T, lead = self._batch(y, "y", op)
        W, lead_w = self._batch(w, wname, op)
        if lead_w != lead:
            raise InputError(f"{op} on {self.node.label}: {wname} must have the shape of y, {lead + self.shape}; "
                             f"got {lead_w + self.shape}.")
        if g == "kl":
            if not log_input:
                Yp = np.exp(T)
                if op == "project_jvp":      # d/dy = d/dt diag(1/y)
                    out, _ = self._run("project_kl_jvp", T, W / Yp)
                else:
                    out, _ = self._run("project_kl_vjp", T, W)
                    out = out / Yp
            else:
                out, _ = self._run("project_kl_jvp" if op == "project_jvp" else "project_kl_vjp", T, W)
        else:
            out, _ = self._run(op, T, W)
        return self._out_points(out, lead)

    def project_jvp(self, y, v, *, geometry: str = "euclidean", log_input: bool = False):
        """Jacobian-vector product of the projection: J(y) v, with J the derivative of project(y).

        .. math:: J_{P_K}(y)\\, v

        Exact where the projection is piecewise linear (the derivative on the active face) and
        by implicit differentiation elsewhere; at a point where P_K is not differentiable the
        family documents which element of the generalized Jacobian is returned. With
        ``geometry="kl"`` the derivative is of the KL projection, with respect to y (or to
        t = log y when ``log_input``). Batched like ``project``; v has the shape of y.
        """
        return self._jacobian_product("project_jvp", y, v, "v", geometry, log_input)

    def project_vjp(self, y, u, *, geometry: str = "euclidean", log_input: bool = False):
        """Vector-Jacobian product of the projection: J(y)^T u (see :meth:`project_jvp`)."""
        return self._jacobian_product("project_vjp", y, u, "u", geometry, log_input)

    def project_factors(self, y):
        """The projection of a matrix set in factored form: (U, s, Vt) with project(y) = U diag(s) Vt.

        Offered by the spectral families (nuclear_ball and spectraplex return only the kept
        singular values / eigenvalues, so q is the answer's rank, padded with zero values to the
        largest rank in a batch; spectral_ball returns its full thin SVD). Shapes:
        lead + (m, q), lead + (q,), lead + (q, n). Same cost and accuracy as ``project``; always
        the family's own kernel (``with_backends`` does not apply).

        Examples
        --------
        >>> import setkit
        >>> K = setkit.compile({"kind": "nuclear_ball", "rows": 2, "cols": 2, "radius": 1.0})
        >>> U, s, Vt = K.project_factors([[3.0, 0.0], [0.0, 1.0]])
        >>> s.tolist(), (U * s) @ Vt
        ([1.0], array([[1., 0.],
               [0., 0.]]))
        """
        return self._factors("project", y, "y")

    def lmo_factors(self, c):
        """The LMO answer of a matrix set in factored form: (U, s, Vt) with lmo(c) = U diag(s) Vt.

        nuclear_ball: (-u1, [radius], v1^T), spectraplex: (v, [trace], v^T) (rank one; a zero
        value where the answer is 0), spectral_ball: (-U, radius, Vt). Shapes as in
        :meth:`project_factors`. Saves forming an m x n matrix in Frank-Wolfe loops.

        Examples
        --------
        >>> import setkit
        >>> K = setkit.compile({"kind": "spectraplex", "n": 2})
        >>> U, s, Vt = K.lmo_factors([[1.0, 0.0], [0.0, -1.0]])
        >>> s.tolist(), abs(U[:, 0]).tolist()
        ([1.0], [0.0, 1.0])
        """
        return self._factors("lmo", c, "c")

    def _factors(self, op, y, argname):
        X, lead = self._batch(y, argname, op + "_factors")
        out = self.node.factored(op, X)
        if out is None:
            from .errors import UnsupportedOperationError
            raise UnsupportedOperationError(
                f"{op}_factors on {self.node.label}: this set offers no factored form (the spectral families "
                f"nuclear_ball, spectral_ball and spectraplex do); call {op}(...) for the dense answer.")
        U, s, Vt = (np.asarray(a, dtype=float) for a in out)
        lead = tuple(lead)
        return U.reshape(lead + U.shape[1:]), s.reshape(lead + s.shape[1:]), Vt.reshape(lead + Vt.shape[1:])

    def lmo(self, c, details: bool = False):
        """Linear minimization oracle: a minimizer of a linear function over the set.

        .. math:: \\mathrm{lmo}_K(c) \\in \\arg\\min_{x \\in K} \\langle c, x \\rangle

        Raises :class:`setkit.UnboundedDirectionError` (with ``ray``) when the minimum is
        unbounded. ``details=True`` returns a :class:`Details` record. Cost: that of the
        route ``explain()`` names (a sort for a permutahedron, one LP for a flow).

        Examples
        --------
        >>> import setkit
        >>> setkit.compile({"kind": "permutahedron", "weights": [3, 2, 1]}).lmo([0.5, -1.0, 2.0]).tolist()
        [2.0, 3.0, 1.0]
        """
        f = self._pt_lmo
        if (f is not None and type(c) is _ND and c.dtype is _F64 and c.shape == self._shape and details is False
                and c.flags.carray):
            try:
                return f(c)
            except TakeGeneralPath:
                pass
        if not details:
            L = self._fast("lmo", c)
            if L is not None:
                return L.reshape(self._shape)
        if _is_dask(c):
            return self._lazy("lmo", [(c, "c")], details)
        t0 = time.perf_counter()
        C, lead, L, info = self._batch_run("lmo", c, "c")
        secs = time.perf_counter() - t0
        if not details:
            return self._out_points(L, lead)
        return self._details("lmo", C, L, lead, info, secs, certificate=False)

    def support(self, c):
        """Support function of the set.

        .. math:: \\sigma_K(c) = \\max_{x \\in K} \\langle c, x \\rangle = \\langle c, \\mathrm{lmo}_K(-c) \\rangle

        A float for one direction, an array of the batch shape otherwise. Cost: one LMO
        unless the family has a native support function.

        Examples
        --------
        >>> import setkit
        >>> float(setkit.compile({"kind": "ball", "dim": 2, "norm": 1, "radius": 2}).support([3.0, -4.0]))
        8.0
        """
        f = self._pt_support
        if f is not None and type(c) is _ND and c.dtype is _F64 and c.shape == self._shape and c.flags.carray:
            try:
                return f(c)[0]
            except TakeGeneralPath:
                pass
        v = self._fast("support", c)
        if v is not None:
            return v[0] if type(v) is np.ndarray and v.shape == (1,) else self._out_values(v, ())
        if _is_dask(c):
            return self._lazy("support", [(c, "c")], out_kind="values")
        _, lead, v, _ = self._batch_run("support", c, "c")
        return self._out_values(v, lead)

    def contains(self, x, tol=None):
        """Membership within tolerance.

        .. math:: x \\in_{tol} K \\iff d_K(x) \\le tol

        ``tol`` is absolute (a number or one per point); by default
        1e-7 * max(1, ||x||_inf, scale of the set's data). Cost: a native screen where the
        family has one, else one distance.

        Examples
        --------
        >>> import setkit
        >>> K = setkit.compile({"kind": "simplex", "dim": 3})
        >>> bool(K.contains([0.2, 0.3, 0.5])), bool(K.contains([0.5, 0.5, 0.5]))
        (True, False)
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
        if _is_dask(x):
            from . import chunked
            return chunked.lazy_call(self, "contains", [(x, "x")], out_kind="flags", tol=tol)
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
        """Largest violated defining constraint of each point (0 inside), NaN if the set has no such check.

        Examples
        --------
        >>> import setkit
        >>> float(setkit.compile({"kind": "box", "dim": 2, "lower": 0, "upper": 1}).violation([1.5, 0.5]))
        0.5
        """
        if _is_dask(x):
            return self._lazy("violation", [(x, "x")], out_kind="values")
        X, lead = self._batch(x, "x", "violation")
        if self._routes["violation"].provider == "none":
            return self._out_values(np.full(X.shape[0], np.nan), lead)
        v, _ = self._run("violation", X)
        return self._out_values(v, lead)

    def certificate(self, y, p):
        """Frank-Wolfe gap of p as a projection of y.

        .. math:: g(y, p) = \\sigma_K(y - p) - \\langle y - p, p \\rangle \\ge \\tfrac12 \\|p - P_K(y)\\|^2
                  \\quad (p \\in K)

        Examples
        --------
        >>> import setkit
        >>> K = setkit.compile({"kind": "simplex", "dim": 2})
        >>> float(K.certificate([2.0, 0.0], K.project([2.0, 0.0])))
        0.0
        """
        if _is_dask(y):
            return self._lazy("certificate", [(y, "y"), (p, "p")], out_kind="values")
        Y, lead = self._batch(y, "y", "certificate")
        P, _ = self._batch(p, "p", "certificate")
        return self._out_values(self._gap(Y, P), lead)

    def _gap(self, Y, P):
        R = Y - P
        s, _ = self._run("support", R)
        return s - np.einsum("ij,ij->i", R, P)

    def _kl_gap(self, T, X):
        """Bregman analogue of the Frank-Wolfe gap: with g = log x - t (the gradient of KL(.||y) at x),
        <g, x - lmo(g)> >= KL(x||y) - KL(x*||y)."""
        if self._routes["lmo"].provider == "none" or X.shape[0] == 0:
            return np.full(X.shape[0], np.nan)
        from .kernels.bregman import kl_gap_rows
        return kl_gap_rows(T, X, lambda G: self._run("lmo", G)[0])[0]

    def _details(self, op, X, P, lead, info, secs, certificate):
        b = X.shape[0]
        if self._routes["violation"].provider != "none":
            resid, _ = self._run("violation", P)
        else:
            resid = np.full(b, np.nan)
        if certificate == "kl":
            cert = self._kl_gap(X, P)
        else:
            cert = self._gap(X, P) if certificate else np.full(b, np.nan)
        status = _flat_info(info, "status", b, "solved")
        iters = _flat_info(info, "iterations", b, 0)
        bstat = _flat_info(info, "backend_status", b, "exact")
        # the accuracy contract: a record never says "solved" above the tolerance the set states
        allowed = self._default_tol(np.concatenate([X, P], axis=1)) if b else np.zeros(0)
        over = np.flatnonzero(np.asarray(resid, dtype=float) > allowed)
        if over.size:
            i = int(over[0])
            msg = (f"{op} on {self.node.label}: the answer for batch row {i} violates the set's constraints by "
                   f"{float(resid[i]):.3g}, above the allowed {float(allowed[i]):.3g} (route {self._routes[op].provider}, "
                   f"input magnitude {float(np.abs(X[i]).max(initial=0.0)):.3g}). Try with_backends({op}=\"reference\").")
            if not self._loose:
                raise SolveError(msg, status="inaccurate")
            warnings.warn(msg, AccuracyWarning, stacklevel=3)
            for j in over:
                status[j] = "inaccurate"

        def pack(v, dtype=None):
            arr = np.asarray(v, dtype=dtype)
            return arr.reshape(lead)[()] if lead == () else arr.reshape(lead)

        r = self._routes[op]
        return Details(point=self._out_points(P, lead), status=pack(status, object), route=r.provider,
                       residual=pack(resid, float), certificate=pack(cert, float),
                       iterations=pack(iters, object), seconds=secs, backend_status=pack(bstat, object))

    # -- modeling --------------------------------------------------------------------------------
    def to_cvxpy(self, x) -> list:
        """The set as a list of cvxpy constraints on ``x`` (a cvxpy expression of shape ``K.shape``).

        Examples
        --------
        >>> import cvxpy as cp, setkit
        >>> K = setkit.compile({"kind": "simplex", "dim": 3})
        >>> x = cp.Variable(3)
        >>> prob = cp.Problem(cp.Minimize(x[0]), K.to_cvxpy(x))
        >>> abs(float(prob.solve())) < 1e-6
        True
        """
        shp = tuple(getattr(x, "shape", ()))
        if shp != self.shape:
            raise InputError(f"to_cvxpy on {self.node.label}: x must be a cvxpy expression of shape "
                             f"{self.shape}; got shape {shp}.")
        return list(self.node.cvxpy_constraints(x))

    # -- measures and penalties are served by their own modules ----------------------------------
    def centroid(self, measure: str = "volume", **kw):
        """Centroid of the set under ``measure``: "volume" (uniform law), "vertices" (uniform on the
        extreme points) or "directions" (the law of lmo(g) for a Gaussian g).

        Exact where a closed form or an exact geometric method exists, else an estimate
        (``details=True`` gives its standard error).

        Examples
        --------
        >>> import setkit
        >>> setkit.compile({"kind": "simplex", "dim": 4}).centroid().tolist()
        [0.25, 0.25, 0.25, 0.25]
        """
        from . import measures
        return measures.centroid(self, measure, **kw)

    def centered(self, measure: str = "volume", **kw) -> "DecisionSet":
        """The same set translated so that its centroid under ``measure`` is the origin: K - centroid(K).

        A random decision drawn from the measure then has zero linear loss in expectation.

        Examples
        --------
        >>> import setkit
        >>> C = setkit.compile({"kind": "box", "dim": 2, "lower": 0, "upper": 2}).centered()
        >>> float(C.support([1.0, 0.0]))
        1.0
        """
        c = np.asarray(self.centroid(measure, **kw), dtype=float)
        if c.shape != self.shape:
            raise SolveError(f"centered: the centroid of {self.node.label} has shape {c.shape}; expected {self.shape}.")
        from .combinators.affine import translated
        label = self.node.name or self.node.kind
        node = translated(self.node, -c.reshape(-1), name=f"{label} centered ({measure})",
                          orthant_note=self._centered_orthant_note(c.reshape(-1), measure))
        return DecisionSet(node, loose=self._loose)

    def _centered_orthant_note(self, c, measure):
        """Why K - centroid leaves x >= 0 (the KL geometry's domain), or "" for a one-point set.

        The centroid c lies in the relative interior of K, so unless K is the single point c, a
        coordinate that varies over K takes values below its mean c_i: K - c holds a point with
        a negative coordinate. One LMO call in a seeded random direction tells the cases apart
        (its answer differs from c unless K = {c}, with probability one).
        """
        g = np.random.default_rng(13).standard_normal(self.dim)
        try:
            v, _ = self._run("lmo", g[None, :])
        except SetkitError:
            v = None
        if v is not None and np.abs(v[0] - c).max() <= 1e-12 * max(1.0, float(np.abs(c).max())):
            return ""
        if v is not None:
            i = int(np.argmax(c - v[0]))
            detail = (f"e.g. coordinate {i} of the vertex {v[0][i]:.6g} minus the centroid "
                      f"{c[i]:.6g} is {v[0][i] - c[i]:.6g}")
        else:
            detail = "the set is not a single point"
        return (f"it is {self.node.label} translated by minus its {measure} centroid (a centered set), so "
                f"every coordinate that varies over the set takes negative values ({detail}). For mirror "
                f"descent, project onto the set itself with geometry='kl' and subtract the centroid afterwards")

    def sample(self, k: int, measure: str = "volume", rng=None, **kw):
        """k points of the set drawn from ``measure`` (seeded by ``rng``); shape (k,) + K.shape.

        Exact samplers where known, hit-and-run otherwise (with a warning when it mixes slowly).

        Examples
        --------
        >>> import setkit
        >>> setkit.compile({"kind": "simplex", "dim": 3}).sample(5, rng=0).shape
        (5, 3)
        """
        from . import measures
        return measures.sample(self, k, measure, rng, **kw)

    def penalty(self, G: float, smoothing: str | None = None, width: float | None = None, **kw):
        """The distance penalty P(x) = G·dist(x, K), optionally smoothed.

        ``smoothing=None``: P = G d(x); ``"moreau"``: P = G h(d(x)) with h(t) = t²/(2δ) for
        t <= δ and t - δ/2 beyond (the Moreau envelope, gradient G (x - P_K x)/max(d, δ));
        ``"ball"``: P = E_u[G d(x + δu)], u uniform in the unit ball (seeded estimate with
        standard errors). ``width`` is δ. Returns an object with ``value(x)`` and ``grad(x)``.
        ``geometry="kl"`` (keyword): P = G min_{z in K} KL(z || x) on x > 0, gradient
        G (1 - q(x)/x) with q the KL projection; no smoothing applies (see setkit.penalty).

        Examples
        --------
        >>> import setkit
        >>> pen = setkit.compile({"kind": "box", "dim": 1, "lower": 0, "upper": 1}).penalty(2.0)
        >>> float(pen.value([3.0])), pen.grad([3.0]).tolist()
        (4.0, [2.0])
        """
        from . import penalty
        return penalty.make_penalty(self, G, smoothing, width, **kw)


class UncheckedOperators:
    """``K.unchecked``: the native single-point operators of a set without input validation.

    Each method takes one float64 C-contiguous point of shape ``K.shape`` (checked by type, dtype,
    shape and layout only, no finiteness check) and returns the bound native kernel's answer.
    """

    __slots__ = ("_set", "_shape", "_dim", "_direct", "__dict__")

    def __init__(self, K):
        self._set = K
        self._shape = K.shape
        self._dim = K.dim
        self._direct = K.plan.direct
        for op in ("project", "lmo", "distance", "support", "violation"):
            fn = K.plan.unchecked.get(op) or self._direct.get(op)   # raw kernels: no contract check either
            if fn is not None:
                setattr(self, op, self._bind(op, fn))

    def _bind(self, op, fn):
        shape, dim = self._shape, self._dim
        label = self._set.node.label
        points = op in ("project", "lmo")
        entry = self._set.plan.point.get(op)

        def refuse(a):
            raise InputError(f"unchecked {op} on {label}: expects one float64 C-contiguous numpy array of "
                             f"shape {shape}; got {type(a).__name__} {getattr(a, 'dtype', '')} "
                             f"{getattr(a, 'shape', '')}. Use numpy.ascontiguousarray(a, dtype=float) or "
                             f"the checked K.{op}.")

        def kernel_call(a):
            out = fn(a.reshape(1, dim))
            if type(out) is tuple:
                out = out[0]
            return out.reshape(shape) if points else out[0]

        if entry is None:
            def call(a):
                if type(a) is not np.ndarray or a.dtype != _F64 or a.shape != shape or not a.flags.c_contiguous:
                    refuse(a)
                return kernel_call(a)
        else:
            def f(a):                             # binds the compiled entry without the finiteness check on first use
                nonlocal f
                f = bind_point(entry[1])
                return f(a)

            def call(a):
                if type(a) is _ND and a.dtype is _F64 and a.shape == shape and a.flags.carray:
                    try:
                        return f(a) if points else f(a)[0]
                    except TakeGeneralPath:       # a point the entry leaves to the batch kernel (e.g. far budget points)
                        return kernel_call(a)
                if type(a) is not np.ndarray or a.dtype != _F64 or a.shape != shape or not a.flags.c_contiguous:
                    refuse(a)
                return kernel_call(a)             # read-only or unaligned: the kernel's own typing
        call.__name__ = op
        call.__doc__ = f"{op} of one trusted point (no finiteness check)."
        return call

    def __repr__(self):
        ops = [op for op in ("project", "lmo", "distance", "support", "violation") if op in self.__dict__]
        return f"<unchecked {self._set.node.label}: {', '.join(ops)}>"
