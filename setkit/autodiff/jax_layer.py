"""The JAX layer: a projection onto a compiled set as a ``jax.custom_vjp`` function.

The forward pass calls ``K.project`` and the backward pass ``K.project_vjp`` through
``jax.pure_callback`` on the host, so the layer composes with ``jax.jit``, ``jax.vmap``
(the callbacks receive the whole vmapped batch at once: the set's operators are batched
over leading axes) and ``jax.grad``. CPU only: a concrete array placed on another device
raises :class:`~setkit.errors.InputError`. Under ``jax.jit`` the placement of traced
values is not visible while tracing; JAX then hands the callback host copies.

Errors: everything that can be checked while tracing (the set, the geometry, the trailing
shape, the dtype, whether the set has a vector-Jacobian product) raises setkit's own error
at once. A value error found while the projection runs (NaN, y <= 0 in the KL geometry)
happens inside the callback; called eagerly, the layer re-raises setkit's error; inside a
jitted function it reaches you as JAX's runtime error whose message carries setkit's.

Import it through :func:`setkit.autodiff.jax_project`, which says which extra to install
when jax is missing.
"""
from __future__ import annotations

import inspect
import threading
import weakref

import jax
import jax.numpy as jnp
import numpy as np

from ..errors import InputError, SetkitError
from .inputs import check_point_shape, check_route, checked_geometry, checked_set, operators_for

__all__ = ["jax_project"]

WHERE = "setkit.autodiff.jax_project"

# jax >= 0.4.34 names how callbacks are batched; older versions take vectorized=True (the callbacks
# below broadcast their arguments themselves, so both conventions give the same answers)
if "vmap_method" in inspect.signature(jax.pure_callback).parameters:
    _BATCHING = {"vmap_method": "broadcast_all"}
else:                                   # pragma: no cover - depends on the installed jax
    _BATCHING = {"vectorized": True}


class _CallbackErrors:
    """setkit errors raised inside host callbacks, kept so that an eager call re-raises them as they were."""

    def __init__(self, keep: int = 8):
        self._lock = threading.Lock()
        self._errors = []
        self._keep = keep

    def remember(self, exc: SetkitError) -> None:
        with self._lock:
            self._errors = (self._errors + [exc])[-self._keep:]

    def matching(self, message: str):
        """The latest remembered error whose text is part of ``message`` (removed), or None."""
        with self._lock:
            for i in range(len(self._errors) - 1, -1, -1):
                if str(self._errors[i]) in message:
                    return self._errors.pop(i)
        return None


_ERRORS = _CallbackErrors()
# K -> {(geometry, log_input): the custom_vjp function}; one function per set and geometry, so that
# eager calls reuse JAX's compiled callback instead of compiling a new one per call
_LAYERS: "weakref.WeakKeyDictionary" = weakref.WeakKeyDictionary()


def _layer(K, geometry: str, log_input: bool):
    per_set = _LAYERS.setdefault(K, {})
    key = (geometry, log_input)
    if key not in per_set:
        per_set[key] = _build_layer(K, geometry, log_input)
    return per_set[key]


def _build_layer(K, geometry: str, log_input: bool):
    """The custom_vjp function y -> P_K(y) for one set and geometry.

    The callbacks hold the set by a weak reference: the cache above is keyed weakly by the set,
    and a strong reference from its values (or from JAX's caches of compiled callbacks) would
    keep every set ever used alive.
    """
    vjp_op = operators_for(geometry)[1]
    set_ref = weakref.ref(K)
    del K

    def the_set():
        K = set_ref()
        if K is None:
            raise InputError(f"{WHERE}: the set this function was traced with no longer exists; "
                             f"keep a reference to K for as long as the function is used.")
        return K

    def project_on_host(y):
        y = np.asarray(y)
        try:
            P = the_set().project(y, geometry=geometry, log_input=log_input)
        except SetkitError as exc:
            _ERRORS.remember(exc)
            raise
        return np.asarray(P, dtype=y.dtype)

    def vjp_on_host(y, g):
        y, g = np.broadcast_arrays(np.asarray(y), np.asarray(g))
        try:
            U = the_set().project_vjp(y, g, geometry=geometry, log_input=log_input)
        except SetkitError as exc:
            _ERRORS.remember(exc)
            raise
        return np.asarray(U, dtype=y.dtype)

    @jax.custom_vjp
    def project(y):
        return jax.pure_callback(project_on_host, jax.ShapeDtypeStruct(y.shape, y.dtype), y, **_BATCHING)

    def forward(y):
        return project(y), y

    def backward(y, g):
        check_route(the_set(), vjp_op, WHERE)  # while tracing the backward pass: setkit's error, at once
        return (jax.pure_callback(vjp_on_host, jax.ShapeDtypeStruct(y.shape, y.dtype), y, g, **_BATCHING),)

    project.defvjp(forward, backward)
    return project


def _check_placement(y) -> None:
    """InputError when a concrete array lives on a device other than the CPU."""
    if isinstance(y, jax.core.Tracer) or not hasattr(y, "devices"):
        return
    platforms = sorted({d.platform for d in y.devices()})
    if platforms != ["cpu"]:
        raise InputError(f"{WHERE}: y is placed on {', '.join(platforms)}; the layer works on CPU arrays only "
                         f"(the projection runs in NumPy on the host, and setkit does not copy across devices on "
                         f"its own). Move it with jax.device_put(y, jax.devices('cpu')[0]).")


def jax_project(K, y, geometry: str = "euclidean", *, log_input: bool = False):
    """Projection of a JAX array onto K that gradients flow through (``custom_vjp`` over host callbacks).

    .. math:: p = P_K(y), \\qquad \\bar y = J_{P_K}(y)^\\top \\bar p

    Parameters
    ----------
    K : setkit.DecisionSet
        The compiled set (compile it once, outside the function you transform).
    y : jax.Array or array_like, shape ``(..., *K.shape)``, on the CPU
        Points; leading axes are a batch. float32 (JAX's default) or float64 (with
        ``jax.config.update("jax_enable_x64", True)``); other floating dtypes are
        computed in float64 and rounded back.
    geometry : {"euclidean", "kl"}
        As in ``K.project``; ``"kl"`` needs y > 0 (or ``log_input=True``).
    log_input : bool
        With ``geometry="kl"``: y holds log-values t = log y, and gradients are with respect to t.

    Returns
    -------
    jax.Array of y's shape and dtype.

    Notes
    -----
    Forward ``K.project``, backward ``K.project_vjp``, each in a ``jax.pure_callback``
    batched over the leading axes (``jax.vmap`` adds one more leading axis, served in the
    same call). Reverse mode only (``jax.grad``, ``jax.vjp``); forward mode (``jax.jvp``,
    ``jax.jacfwd``) raises JAX's error about custom_vjp functions. At a kink, where the
    projection is not differentiable, every constraint that holds with equality at the
    projection counts as active (the Jacobian of the smallest face containing it; see
    :mod:`setkit.derivatives`). Cost: one projection forward, one vector-Jacobian product
    backward, plus the host copies of the callbacks.

    Raises
    ------
    InputError
        A concrete y placed on another device than the CPU, an integer or complex y, a
        wrong trailing shape, an unknown geometry, K not a compiled set; non-finite values
        (eager calls; under ``jax.jit`` JAX's runtime error carries setkit's message).
    UnsupportedOperationError
        When gradients are taken and K has no vector-Jacobian product for the geometry.

    Examples
    --------
    >>> import jax, jax.numpy as jnp, setkit
    >>> from setkit.autodiff import jax_project
    >>> K = setkit.compile({"kind": "simplex", "dim": 3})
    >>> [round(float(v), 6) for v in jax_project(K, jnp.array([0.9, 0.4, -0.2]))]
    [0.75, 0.25, 0.0]
    >>> [float(v) for v in jax.grad(lambda y: jax_project(K, y)[0])(jnp.array([0.9, 0.4, -0.2]))]
    [0.5, -0.5, 0.0]
    """
    K = checked_set(K, WHERE)
    geometry = checked_geometry(geometry, WHERE)
    _check_placement(y)
    y = jnp.asarray(y)
    if not jnp.issubdtype(y.dtype, jnp.floating):
        raise InputError(f"{WHERE}: y must hold floating-point values (float32 or float64); got {y.dtype}. "
                         f"Convert it with jnp.asarray(y, dtype=jnp.float32).")
    check_point_shape(K, y.shape, WHERE)
    layer = _layer(K, geometry, bool(log_input))
    try:
        return layer(y)
    except SetkitError:
        raise
    except Exception as exc:      # a setkit error inside the host callback, wrapped by JAX's runtime
        original = _ERRORS.matching(str(exc))
        if original is None:
            raise
        raise original from None
