"""The PyTorch layer: a projection onto a compiled set as a ``torch.autograd.Function``.

Forward is ``K.project`` on the tensor's data (a NumPy view of the CPU tensor, no copy for
float64), backward is the exact vector-Jacobian product ``K.project_vjp`` with the incoming
gradient. Only CPU tensors are accepted: the projection runs in NumPy, and a tensor on a
GPU (or on the ``meta`` device) raises :class:`~setkit.errors.InputError` rather than being
copied to the host and back without your knowing it.

Import it through :func:`setkit.autodiff.torch_project`, which says which extra to install
when torch is missing.
"""
from __future__ import annotations

import numpy as np
import torch
from torch.autograd.function import once_differentiable

from ..errors import InputError
from .inputs import check_route, checked_geometry, checked_set, operators_for

__all__ = ["torch_project", "SetProjection"]

WHERE = "setkit.autodiff.torch_project"
# dtypes NumPy holds directly; other floating dtypes (bfloat16) go through float64
_NUMPY_FLOATS = (torch.float16, torch.float32, torch.float64)


def _host_array(t: "torch.Tensor") -> np.ndarray:
    """A NumPy array of a CPU tensor's values (a view when the dtype allows), for the set's operators."""
    if t.dtype in _NUMPY_FLOATS:
        return t.detach().numpy()
    return t.detach().to(torch.float64).numpy()


def _check_tensor(y, name: str = "y") -> None:
    if not isinstance(y, torch.Tensor):
        raise InputError(f"{WHERE}: {name} must be a torch.Tensor; got {type(y).__name__}. "
                         f"Wrap it with torch.as_tensor({name}, dtype=torch.float64).")
    if y.device.type != "cpu":
        raise InputError(f"{WHERE}: {name} is on device {str(y.device)!r}; the layer works on CPU tensors only "
                         f"(the projection runs in NumPy on the host, and setkit does not copy across devices "
                         f"on its own). Move it with {name}.cpu() and the result back with .to({name}.device).")
    if y.layout != torch.strided:
        raise InputError(f"{WHERE}: {name} has layout {y.layout}; the layer needs a dense (strided) tensor. "
                         f"Convert it with {name}.to_dense().")
    if not y.is_floating_point():
        raise InputError(f"{WHERE}: {name} must hold floating-point values (float32 or float64); got {y.dtype}. "
                         f"Convert it with {name}.double() or {name}.float().")


class SetProjection(torch.autograd.Function):
    """``apply(y, K, geometry, log_input)``: P_K(y) forward, J^T g = K.project_vjp(y, g) backward.

    Differentiable once (``once_differentiable``): the backward pass itself carries no graph.
    """

    @staticmethod
    def forward(y, K, geometry, log_input):
        P = np.asarray(K.project(_host_array(y), geometry=geometry, log_input=log_input))
        Y = y.detach().numpy() if y.dtype in _NUMPY_FLOATS else None
        if Y is not None and np.may_share_memory(P, Y):
            P = P.copy()           # the output never aliases the input
        return torch.from_numpy(P).to(y.dtype)

    @staticmethod
    def setup_context(ctx, inputs, output):
        y, K, geometry, log_input = inputs
        ctx.save_for_backward(y)
        ctx.set_geometry = (K, geometry, log_input)

    @staticmethod
    @once_differentiable
    def backward(ctx, grad_output):
        (y,) = ctx.saved_tensors
        K, geometry, log_input = ctx.set_geometry
        if not ctx.needs_input_grad[0]:
            return None, None, None, None
        G = _host_array(grad_output)
        U = np.asarray(K.project_vjp(_host_array(y), G, geometry=geometry, log_input=log_input))
        return torch.from_numpy(U).to(y.dtype), None, None, None


def torch_project(K, y, geometry: str = "euclidean", *, log_input: bool = False):
    """Projection of a CPU tensor onto K that gradients flow through.

    .. math:: p = P_K(y), \\qquad \\frac{\\partial L}{\\partial y} = J_{P_K}(y)^\\top \\frac{\\partial L}{\\partial p}

    Parameters
    ----------
    K : setkit.DecisionSet
        The compiled set (compile it once, outside the training loop).
    y : torch.Tensor, shape ``(..., *K.shape)``, on the CPU
        Points; leading axes are a batch. float32 or float64 (other floating dtypes are
        computed in float64 and rounded back).
    geometry : {"euclidean", "kl"}
        As in ``K.project``; ``"kl"`` needs y > 0 (or ``log_input=True``).
    log_input : bool
        With ``geometry="kl"``: y holds log-values t = log y, and gradients are with respect to t.

    Returns
    -------
    torch.Tensor of y's shape and dtype, on the CPU.

    Notes
    -----
    Forward ``K.project``; backward ``K.project_vjp`` (exact on the active face; at a kink,
    where the projection is not differentiable, every constraint that holds with equality
    at the projection counts as active, which returns the Jacobian of the smallest face
    containing the projection: a documented element of the generalized Jacobian, see
    :mod:`setkit.derivatives`). Differentiable once: second derivatives raise torch's
    error about ``once_differentiable``. ``torch.func`` transforms (``vmap``, ``grad``) are
    not supported: batch over the leading axes instead. Cost: one projection forward, one
    vector-Jacobian product backward (plus a dtype conversion for float32).

    Raises
    ------
    InputError
        y not a tensor, on another device than the CPU, sparse, not floating, of the
        wrong trailing shape or not finite; an unknown geometry; K not a compiled set.
    UnsupportedOperationError
        y requires a gradient and K has no vector-Jacobian product for the geometry.

    Examples
    --------
    >>> import torch, setkit
    >>> from setkit.autodiff import torch_project
    >>> K = setkit.compile({"kind": "simplex", "dim": 3})
    >>> y = torch.tensor([0.9, 0.4, -0.2], dtype=torch.float64, requires_grad=True)
    >>> p = torch_project(K, y)
    >>> p.detach().round(decimals=6).tolist()
    [0.75, 0.25, 0.0]
    >>> (p * torch.tensor([1.0, 0.0, 0.0], dtype=torch.float64)).sum().backward()
    >>> y.grad.tolist()            # the projector onto the face {p_3 = 0, p_1 + p_2 = 1}
    [0.5, -0.5, 0.0]
    """
    K = checked_set(K, WHERE)
    geometry = checked_geometry(geometry, WHERE)
    _check_tensor(y)
    if y.requires_grad and torch.is_grad_enabled():
        check_route(K, operators_for(geometry)[1], WHERE)
    return SetProjection.apply(y, K, geometry, bool(log_input))
