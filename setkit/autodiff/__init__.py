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
    """Differentiable projection of a torch tensor onto K (a ``torch.autograd.Function``).

    .. math:: y \\mapsto P_K(y), \\qquad \\bar y = J_{P_K}(y)^\\top \\bar p

    Forward: ``K.project(y, geometry=geometry, log_input=log_input)``; backward:
    ``K.project_vjp`` with the incoming gradient. See
    :func:`setkit.autodiff.torch_layer.torch_project` for the full description.

    Cost: one projection forward, one vector-Jacobian product backward (which recomputes
    what it needs of the projection), plus a dtype conversion for float32 tensors.

    Raises
    ------
    BackendUnavailableError
        When torch is not installed (install ``setkit[torch]``).
    """
    return _layer_module("torch").torch_project(K, y, geometry, log_input=log_input)


def jax_project(K, y, geometry: str = "euclidean", *, log_input: bool = False):
    """Differentiable projection of a JAX array onto K (``jax.custom_vjp`` over ``jax.pure_callback``).

    .. math:: y \\mapsto P_K(y), \\qquad \\bar y = J_{P_K}(y)^\\top \\bar p

    Works under ``jax.jit``, ``jax.vmap`` and ``jax.grad``. See
    :func:`setkit.autodiff.jax_layer.jax_project` for the full description.

    Cost: one projection forward, one vector-Jacobian product backward, each through a
    host callback (a copy of the batch in and out).

    Raises
    ------
    BackendUnavailableError
        When jax is not installed (install ``setkit[jax]``).
    """
    return _layer_module("jax").jax_project(K, y, geometry, log_input=log_input)
