"""Differentiable projections inside PyTorch and JAX models (optional extras).

:func:`torch_project` and :func:`jax_project` return the projection of a tensor onto a
compiled set as a tensor of the framework that carries gradients: the forward pass is
``K.project`` and the backward pass is the exact vector-Jacobian product ``K.project_vjp``
(see :mod:`setkit.derivatives` for what is returned where the projection has a kink).
Each layer lives in its own module and imports its framework only when first called,
so ``import setkit.autodiff`` costs nothing; a missing framework raises
:class:`~setkit.errors.BackendUnavailableError` naming the extra to install
(``pip install "setkit[torch]"`` or ``pip install "setkit[jax]"``).

Both layers work on the CPU only: the projection runs in NumPy on the host, so a tensor
on another device (a GPU, torch's ``meta`` device) is refused with
:class:`~setkit.errors.InputError` instead of being copied behind your back. Move it
with ``y.cpu()`` (torch) or ``jax.device_put(y, jax.devices("cpu")[0])`` (JAX) when the
copy is what you want.

Shapes follow ``K.project``: the trailing axes match ``K.shape``, leading axes are a
batch. The output has the input's floating dtype (float32 stays float32; the projection
and its derivative are computed in float64 and rounded once).

The doctested examples are in :mod:`setkit.autodiff.torch_layer` and
:mod:`setkit.autodiff.jax_layer` (they run where the framework is installed).
"""
from __future__ import annotations

from importlib import import_module

from ..errors import BackendUnavailableError

__all__ = ["torch_project", "jax_project"]

# framework -> (the module it needs, the extra that installs it)
_EXTRAS = {"torch": ("torch", "torch"), "jax": ("jax", "jax")}


def _layer_module(framework: str):
    """Import ``setkit.autodiff.<framework>_layer``, or say which extra installs the framework."""
    package, extra = _EXTRAS[framework]
    try:
        import_module(package)
    except ImportError as exc:
        raise BackendUnavailableError(
            f"setkit.autodiff.{framework}_project needs the {package!r} package, which is not importable here "
            f"({exc}). Install the optional extra: pip install \"setkit[{extra}]\"."
        ) from None
    return import_module(f"{__name__}.{framework}_layer")


def torch_project(K, y, geometry: str = "euclidean", *, log_input: bool = False):
    """Differentiable projection of a CPU torch tensor onto K (a ``torch.autograd.Function``).

    .. math:: p = P_K(y), \\qquad \\bar y = J_{P_K}(y)^\\top \\bar p

    Parameters
    ----------
    K : setkit.DecisionSet
        The compiled set (compile it once, outside the training loop).
    y : torch.Tensor, shape ``(..., *K.shape)``, on the CPU
        Points; leading axes are a batch; float32 or float64 (kept in the output).
    geometry : {"euclidean", "kl"}
        As in ``K.project``; ``"kl"`` needs y > 0 (or ``log_input=True``).
    log_input : bool
        With ``geometry="kl"``: y holds t = log y, and gradients are with respect to t.

    Returns
    -------
    torch.Tensor of y's shape and dtype: forward ``K.project``, backward ``K.project_vjp``.

    Raises
    ------
    BackendUnavailableError
        When torch is not installed (install ``setkit[torch]``).
    InputError
        A tensor on another device than the CPU (no silent copies), not floating, of the wrong
        trailing shape, not finite; an unknown geometry.

    Notes
    -----
    Details (kinks, double backward, errors): :func:`setkit.autodiff.torch_layer.torch_project`.
    Cost: one projection forward, one vector-Jacobian product backward (which recomputes what
    it needs of the projection), plus a dtype conversion for float32 tensors.

    Examples
    --------
    >>> import pytest, setkit
    >>> torch = pytest.importorskip("torch")     # the example runs where the extra is installed
    >>> K = setkit.compile({"kind": "simplex", "dim": 3})
    >>> y = torch.tensor([0.9, 0.4, -0.2], dtype=torch.float64, requires_grad=True)
    >>> torch_project(K, y)[0].backward()
    >>> y.grad.tolist()
    [0.5, -0.5, 0.0]
    """
    return _layer_module("torch").torch_project(K, y, geometry, log_input=log_input)


def jax_project(K, y, geometry: str = "euclidean", *, log_input: bool = False):
    """Differentiable projection of a JAX array onto K (``jax.custom_vjp`` over ``jax.pure_callback``).

    .. math:: p = P_K(y), \\qquad \\bar y = J_{P_K}(y)^\\top \\bar p

    Parameters
    ----------
    K : setkit.DecisionSet
        The compiled set (compile it once, outside the function you transform).
    y : jax.Array or array_like, shape ``(..., *K.shape)``, on the CPU
        Points; leading axes are a batch; float32 or float64 (kept in the output).
    geometry : {"euclidean", "kl"}
        As in ``K.project``; ``"kl"`` needs y > 0 (or ``log_input=True``).
    log_input : bool
        With ``geometry="kl"``: y holds t = log y, and gradients are with respect to t.

    Returns
    -------
    jax.Array of y's shape and dtype: forward ``K.project``, backward ``K.project_vjp``.

    Raises
    ------
    BackendUnavailableError
        When jax is not installed (install ``setkit[jax]``).
    InputError
        A concrete array placed on another device than the CPU, not floating, of the wrong
        trailing shape; an unknown geometry; non-finite values (eager calls).

    Notes
    -----
    Works under ``jax.jit``, ``jax.vmap`` and ``jax.grad`` (reverse mode only). Details:
    :func:`setkit.autodiff.jax_layer.jax_project`. Cost: one projection forward, one
    vector-Jacobian product backward, each through a host callback (a copy in and out).

    Examples
    --------
    >>> import pytest, setkit
    >>> jax = pytest.importorskip("jax")         # the example runs where the extra is installed
    >>> K = setkit.compile({"kind": "simplex", "dim": 3})
    >>> [float(g) for g in jax.grad(lambda y: jax_project(K, y)[0])(jax.numpy.array([0.9, 0.4, -0.2]))]
    [0.5, -0.5, 0.0]
    """
    return _layer_module("jax").jax_project(K, y, geometry, log_input=log_input)
