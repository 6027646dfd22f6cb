"""Batched native calls over every core: the rows of a large flat batch split into chunks run in threads.

The compiled kernels release the GIL (numba ``nogil=True``; NumPy's sorts release it too),
so chunks of rows run truly in parallel. Rows are independent in every native kernel (the
randomized pivots of the budget search are seeded per row), so the answer is bit-identical
to one serial call; a chunk that raises makes the whole batch run again serially, so an
error names the right batch row.

Policy (environment): ``SETKIT_THREADS`` = number of threads (default: the CPUs this
process may use; 1 turns the splitting off). Batches below ``MIN_ENTRIES`` entries
(b * dim) or with fewer rows than threads run serially: thread hand-off costs tens of
microseconds.
"""
from __future__ import annotations

import os
import threading
from concurrent.futures import ThreadPoolExecutor

import numpy as np

MIN_ENTRIES = 200_000
SPLIT_OPERATORS = frozenset({"project", "lmo", "distance", "support", "violation", "contains"})

_pool = None
_pool_lock = threading.Lock()


def thread_count() -> int:
    """Threads a batch is split over: SETKIT_THREADS, else the CPUs available to this process."""
    env = os.environ.get("SETKIT_THREADS")
    if env:
        try:
            return max(1, int(env))
        except ValueError:
            pass
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:      # not on Linux
        return max(1, os.cpu_count() or 1)


def _executor(k):
    global _pool
    with _pool_lock:
        if _pool is None or _pool._max_workers < k:
            _pool = ThreadPoolExecutor(max_workers=k, thread_name_prefix="setkit")
        return _pool


def _in_worker():
    return threading.current_thread().name.startswith("setkit")


def _fits(o, rows):
    return type(o) is np.ndarray and o.ndim >= 1 and o.shape[0] == rows


def split_rows(raw, op):
    """``raw`` (a bound native kernel of flat batches) run over row chunks in threads for large batches.

    Each thread also copies its chunk's answer into the result (NumPy's copy releases the GIL), so
    no serial concatenation follows the parallel part: the main thread computes the first chunk,
    allocates the result from its shape and dtype and lets the others write into it."""
    if op not in SPLIT_OPERATORS:
        return raw

    def call(X, *rest):
        k = thread_count()
        b = X.shape[0] if getattr(X, "ndim", 0) == 2 else 0
        if k < 2 or b < 2 * k or X.size < MIN_ENTRIES or _in_worker():
            return raw(X, *rest)
        k = min(k, b)
        cuts = np.linspace(0, b, k + 1).astype(np.int64)
        pieces = [(X[cuts[i]:cuts[i + 1]],) + tuple(r[cuts[i]:cuts[i + 1]] for r in rest) for i in range(k)]
        ready = threading.Event()
        slot = []                       # the result, once the main thread has allocated it

        def job(i):
            o = raw(*pieces[i])
            ready.wait()
            n = cuts[i + 1] - cuts[i]
            if slot and _fits(o, n) and o.shape[1:] == slot[0].shape[1:] and o.dtype == slot[0].dtype:
                slot[0][cuts[i]:cuts[i + 1]] = o
                return None
            return o                    # not an array of rows like the first chunk's: served serially below

        pool = _executor(k)
        futures = [pool.submit(job, i) for i in range(1, k)]
        try:
            o0 = raw(*pieces[0])
            if _fits(o0, cuts[1]):
                slot.append(np.empty((b,) + o0.shape[1:], dtype=o0.dtype))
        except Exception:          # noqa: BLE001 - run serially so that the error names the right row
            for f in futures:
                f.cancel()
            ready.set()
            for f in futures:
                try:
                    f.result()
                except Exception:  # noqa: BLE001, S110 - the serial call below raises the error
                    pass
            return raw(X, *rest)
        finally:
            ready.set()
        if not slot:
            for f in futures:
                f.result()
            return raw(X, *rest)      # a kernel returning (out, info) or a scalar: serve it serially
        out = slot[0]
        out[:cuts[1]] = o0
        try:
            leftovers = [f.result() for f in futures]
        except Exception:          # noqa: BLE001 - run serially so that the error names the right row
            return raw(X, *rest)
        if any(o is not None for o in leftovers):
            return raw(X, *rest)
        return out
    call.__wrapped__ = raw
    return call
