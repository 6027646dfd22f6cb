"""Operators on dask arrays: lazy, block by block, on one machine or on dask.distributed workers.

``K.project(Y)`` with ``Y`` a ``dask.array.Array`` of shape ``lead + K.shape`` returns a dask array
of the same shape and chunks without computing anything; ``distance``, ``support``, ``violation``,
``contains`` return dask arrays of the batch shape ``lead`` (``contains``: bool), and so do
``lmo``, ``certificate``, ``project_jvp`` / ``project_vjp``, the KL geometry
(``geometry="kl"``, ``log_input``) and a penalty's ``value`` / ``grad`` / ``value_and_grad``.

How. The batch axes keep the caller's chunks; the set's trailing axes must be whole in every block
(an operator needs the whole point), so they are rechunked to one chunk when they are not (that
moves data: chunk only the batch axes when you build the array). Each block is one call of the
in-process operator on a NumPy block (``dask.array.map_blocks``), so a block's answer is the
in-process answer on those rows, bit for bit: every operator treats rows independently. The set
enters the graph once, as one task holding the :class:`~setkit.decision_set.DecisionSet`; on
``dask.distributed`` it is pickled once per worker (its description, its backend choices and
``loose``) and rebuilt there: the plan is compiled again and solver workspaces are built lazily,
one per worker thread, never shipped. Read-only blocks (data deserialized by a worker) are copied
once so that the compiled kernels see the array type they were compiled and cached for.

Input checks that need no data (numeric dtype, trailing shape, known chunk sizes) run when the
lazy array is built and raise :class:`~setkit.errors.InputError`; checks on values (finite
entries, y > 0 for the KL geometry) run when a block is computed and raise the same errors as
in-process, naming the batch row in the whole array. ``details=True`` needs the answer in memory
and raises :class:`~setkit.errors.UnsupportedOperationError` for dask input (call the operator on a
computed block instead). dask is an optional extra: ``pip install "setkit[dask]"``.

Complexity: that of the operator per block, plus dask's per-task overhead (about a millisecond
per block on distributed): use blocks of thousands of rows.

>>> import numpy as np, dask.array as da, setkit
>>> K = setkit.compile({"kind": "simplex", "dim": 3})
>>> P = K.project(da.from_array(2.0 * np.eye(3), chunks=(2, 3)))
>>> type(P).__name__, P.chunks
('Array', ((2, 1), (3,)))
>>> P.compute().tolist()
[[1.0, 0.0, 0.0], [0.0, 1.0, 0.0], [0.0, 0.0, 1.0]]
>>> K.distance(da.from_array(2.0 * np.eye(3), chunks=(2, 3))).compute().round(6).tolist()
[1.0, 1.0, 1.0]
"""
from __future__ import annotations

import hashlib
import pickle
import threading
import weakref

import numpy as np

from .errors import BackendUnavailableError, InputError, SetkitError, UnsupportedOperationError

POINT_OPERATORS = ("project", "lmo", "project_jvp", "project_vjp", "grad")
VALUE_OPERATORS = ("distance", "support", "violation", "certificate", "value")


def is_dask_array(a) -> bool:
    """Whether ``a`` is a dask array (checked by type, without importing dask).

    >>> import numpy as np
    >>> is_dask_array(np.zeros(3)), is_dask_array([1.0, 2.0])
    (False, False)
    """
    t = type(a)
    return t.__module__.startswith("dask.") and hasattr(t, "__dask_graph__") and hasattr(a, "chunks")


def _dask():
    try:
        import dask
        import dask.array as da
    except ImportError as exc:      # pragma: no cover - an array of dask was passed, so dask is there
        raise BackendUnavailableError("dask arrays need dask: pip install \"setkit[dask]\".") from exc
    return dask, da


_KEYS: "weakref.WeakKeyDictionary" = weakref.WeakKeyDictionary()
_KEYS_LOCK = threading.Lock()


def set_task(target):
    """One dask task holding ``target`` (a DecisionSet or a penalty), named by a digest of its pickle.

    Every lazy call on the same object refers to this key, so the object is pickled and shipped
    once per graph (once per worker on dask.distributed) rather than once per block.
    """
    dask, _ = _dask()
    with _KEYS_LOCK:
        key = _KEYS.get(target)
    if key is None:
        digest = hashlib.sha1(pickle.dumps(target, protocol=pickle.HIGHEST_PROTOCOL)).hexdigest()
        key = f"setkit-{type(target).__name__}-{digest}"
        with _KEYS_LOCK:
            _KEYS[target] = key
    return dask.delayed(target, name=key, pure=True, traverse=False)


def _check_array(K, a, argname, op):
    """Validate a dask array's dtype and trailing shape (no data read); rechunk the trailing axes whole."""
    label = K.node.label
    kind = getattr(a.dtype, "kind", "O")
    if kind not in "biuf":
        raise InputError(f"{op} on {label}: argument {argname} must be numeric, real numbers (bool, int or float "
                         f"dtypes); got a dask array of dtype {a.dtype}. Convert it with .astype(float).")
    shape, k = tuple(K.shape), len(K.shape)
    if any(s != s for s in a.shape):          # NaN: unknown chunk sizes
        raise InputError(f"{op} on {label}: argument {argname} is a dask array with unknown chunk sizes "
                         f"(shape {a.shape}); call .compute_chunk_sizes() on it first.")
    if a.ndim < k or tuple(a.shape[a.ndim - k:]) != shape:
        raise InputError(f"{op} on {label}: argument {argname} must have trailing shape {shape} (leading axes are "
                         f"a batch); got a dask array of shape {a.shape}.")
    lead = a.ndim - k
    if any(len(c) > 1 for c in a.chunks[lead:]):
        a = a.rechunk({ax: -1 for ax in range(lead, a.ndim)})
    if a.dtype != np.float64:
        a = a.astype(np.float64)
    return a


def _writable(b):
    b = np.asarray(b)
    return b if b.flags.writeable else b.copy()


def _run_block(*blocks, target, op, kw, lead, nbatch, out_kind, block_info=None):
    """One block through the in-process operator; errors name the rows in the whole array."""
    arrays = [_writable(b) for b in blocks[:nbatch]]
    extra = {}
    if len(blocks) > nbatch:                 # contains: a tolerance block of shape lead + (1,)*k
        tb = np.asarray(blocks[nbatch], dtype=float)
        extra["tol"] = tb.reshape(tb.shape[:lead])
    try:
        out = getattr(target, op)(*arrays, **kw, **extra)
    except SetkitError as exc:
        where = None
        if block_info and 0 in block_info:
            where = [int(start) for start, _ in block_info[0]["array-location"][:lead]]
        if where is not None and exc.args:
            exc.args = (f"{exc.args[0]} [dask block whose first batch index is {tuple(where)}: add it to the "
                        f"index above to find the row in the whole array]",) + tuple(exc.args[1:])
        raise
    if out_kind == "flags":
        return np.asarray(out, dtype=bool)
    return np.asarray(out, dtype=np.float64)


def lazy_call(K, op, arrays, *, target=None, kw=None, out_kind="points", tol=None):
    """Apply ``target.op`` (default ``K.op``) block by block to dask arrays; a lazy dask array.

    Parameters
    ----------
    K : DecisionSet
        The set whose shape the trailing axes of every array must match.
    op : str
        The method of ``target`` to call on each block (``project``, ``distance``, ``value``...).
    arrays : list of (array, argname)
        The batch arguments (dask arrays or array-likes of the same shape; the first is a dask array).
    target : object, optional
        What is called on each block (a penalty, or ``K`` itself when omitted); shipped once.
    kw : dict, optional
        Keyword arguments of every call (geometry, log_input...).
    out_kind : {"points", "values", "flags"}
        Points of the shape of the first array, or float / bool values of its batch shape.
    tol : number, array-like or dask array, optional
        For ``contains``: one absolute tolerance, or one per point (broadcast to the batch shape).

    Returns
    -------
    dask.array.Array
        Lazy: nothing is computed until ``.compute()`` (or ``dask.compute``, ``client.compute``).

    Notes
    -----
    O(1) work here (graph construction); the operator's own cost per block when computed.
    """
    dask, da = _dask()
    target = K if target is None else target
    label = K.node.label
    first, name0 = arrays[0]
    first = _check_array(K, first, name0, op)
    lead = first.ndim - len(K.shape)
    blocks = [first]
    for a, argname in arrays[1:]:
        if not is_dask_array(a):
            a = np.asarray(a)
            if a.shape != first.shape:
                raise InputError(f"{op} on {label}: argument {argname} must have the shape of {name0}, "
                                 f"{first.shape}; got {a.shape}.")
            a = da.from_array(a, chunks=first.chunks)
        else:
            if tuple(a.shape) != tuple(first.shape):
                raise InputError(f"{op} on {label}: argument {argname} must have the shape of {name0}, "
                                 f"{first.shape}; got a dask array of shape {a.shape}.")
            a = _check_array(K, a, argname, op).rechunk(first.chunks)
        blocks.append(a)
    nbatch = len(blocks)
    kw = dict(kw or {})
    if tol is not None and not (np.ndim(tol) == 0 and not is_dask_array(tol)):
        t = tol if is_dask_array(tol) else np.asarray(tol, dtype=float)
        bshape = first.shape[:lead]
        try:
            np.broadcast_shapes(tuple(t.shape), bshape)
            if np.broadcast_shapes(tuple(t.shape), bshape) != bshape:
                raise ValueError
        except ValueError:
            raise InputError(f"contains on {label}: tol must be a number or one per point (batch shape "
                             f"{bshape}); got shape {tuple(t.shape)}.") from None
        if not is_dask_array(t):
            if np.any(~np.isfinite(t)) or np.any(t < 0):
                raise InputError(f"contains on {label}: tol must be a finite number >= 0; got {tol}.")
            t = da.from_array(np.ascontiguousarray(np.broadcast_to(t, bshape)), chunks=first.chunks[:lead])
        else:
            t = da.broadcast_to(t.astype(np.float64), bshape).rechunk(first.chunks[:lead])
        t = t.reshape(bshape + (1,) * len(K.shape)) if len(K.shape) else t
        blocks.append(t.rechunk(first.chunks[:lead] + ((1,),) * len(K.shape)))
    elif tol is not None:
        kw["tol"] = tol
    Kd = set_task(target)
    token = dask.base.tokenize(Kd.key, op, sorted(kw.items(), key=lambda kv: kv[0]), out_kind,
                               *[b.name for b in blocks])
    name = f"setkit-{op}-{token}"
    if out_kind == "points":
        return da.map_blocks(_run_block, *blocks, target=Kd, op=op, kw=kw, lead=lead, nbatch=nbatch,
                             out_kind=out_kind, dtype=np.float64, meta=np.empty((0,) * first.ndim),
                             chunks=first.chunks, name=name)
    dtype = bool if out_kind == "flags" else np.float64
    dropped = list(range(lead, first.ndim))
    return da.map_blocks(_run_block, *blocks, target=Kd, op=op, kw=kw, lead=lead, nbatch=nbatch,
                         out_kind=out_kind, dtype=dtype, meta=np.empty((0,) * lead, dtype=dtype),
                         drop_axis=dropped, chunks=first.chunks[:lead], name=name)


def no_details(K, op):
    """The error for ``details=True`` with a dask input."""
    return UnsupportedOperationError(
        f"{op} on {K.node.label}: details=True needs the answers in memory and is not offered for dask arrays. "
        f"Call {op} without details for a lazy dask array, or call {op}(block, details=True) on a computed "
        f"block (numpy array) to inspect status, residual and certificate.")
