"""Batched native calls over every core: the rows of a large flat batch split into chunks run in threads.

The compiled kernels release the GIL (numba ``nogil=True``; NumPy's sorts release it too),
so chunks of rows run truly in parallel. Rows are independent in the native kernels of the
vector, norm-ball, matrix and combinatorial families (the randomized pivots of the budget
search are seeded per row; sums over a row in a fixed order), so their answers are
bit-identical to one serial call (tests/test_parallel_split.py). The network projection
(flow, transport, birkhoff, paths) warm-starts each row's dual Newton iteration from the
previous row's potentials, so a split batch starts its chunks elsewhere: its answers agree
with the serial call's within the kernel's stated tolerance, not bit for bit (measured on the
built-in examples: at most 1e-15 relative). A chunk that raises makes the whole batch run
again serially, so an error names the right batch row.

Policy (environment): ``SETKIT_THREADS`` = number of threads (default: the CPUs this
process may use; 1 turns the splitting off). Batches below ``MIN_ENTRIES`` entries
(b * dim) or with fewer rows than threads run serially: thread hand-off costs tens of
microseconds.
"""
from __future__ import annotations

import os
import threading
import time

import numpy as np

from .errors import NonFiniteRows

MIN_ENTRIES = 200_000
SPLIT_OPERATORS = frozenset({"project", "lmo", "distance", "support", "violation", "contains"})



def thread_count() -> int:
    """Threads a batch is split over: SETKIT_THREADS, else the CPUs available to this process."""
    env = os.environ.get("SETKIT_THREADS")
    if env:
        try:
            return max(1, int(env))
        except ValueError:
            pass
    return _cpus()


_CPUS = []


def _cpus():
    """The CPUs this process may use (read once: the affinity of a process seldom changes)."""
    if not _CPUS:
        try:
            _CPUS.append(max(1, len(os.sched_getaffinity(0))))
        except AttributeError:      # not on Linux
            _CPUS.append(max(1, os.cpu_count() or 1))
    return _CPUS[0]


class _Hand:
    """One persistent worker thread of the crew, woken by its own lock: handing it a job is one
    C-level lock release (no Future, no queue), and its answer waits in ``done``."""

    def __init__(self, name):
        self.go = threading.Lock()
        self.go.acquire()
        self.done = threading.Lock()
        self.done.acquire()
        self.job = None
        self.value = None
        self.error = None
        threading.Thread(target=self._loop, name=name, daemon=True).start()

    def _loop(self):
        while True:
            self.go.acquire()
            fn, args = self.job
            self.job = None
            try:
                self.value, self.error = fn(*args), None
            except BaseException as e:  # noqa: BLE001 - handed to the caller by result()
                self.value, self.error = None, e
            self.done.release()

    def submit(self, fn, *args):
        self.job = (fn, args)
        self.go.release()
        return self

    def result(self):
        self.done.acquire()
        v, e = self.value, self.error
        self.value = self.error = None
        if e is not None:
            raise e
        return v


_crew: list = []
_crew_lock = threading.Lock()


def _take_crew(k):
    """k - 1 idle hands for one split batch, or None when another batch holds them (that batch runs in
    its own caller's thread then: the cores are busy anyway). Give them back with _give_crew()."""
    if not _crew_lock.acquire(blocking=False):
        return None
    while len(_crew) < k - 1:
        _crew.append(_Hand(f"setkit-crew-{len(_crew) + 1}"))
    return _crew[:k - 1]


def _give_crew(clean=True):
    """Release the hands; after an interrupted batch (a hand may still be busy) they are replaced."""
    if not clean:
        _crew.clear()
    _crew_lock.release()


def _forget_crew():           # a forked child has none of the parent's threads
    global _crew_lock
    _crew.clear()
    _crew_lock = threading.Lock()


if hasattr(os, "register_at_fork"):
    os.register_at_fork(after_in_child=_forget_crew)


class CrewPool:
    """``submit(fn, *args)`` / ``result()`` over held hands, in turn (for code written against an
    executor that submits at most len(hands) jobs and collects them all before submitting again)."""

    def __init__(self, hands):
        self.hands = hands
        self.turn = 0

    def submit(self, fn, *args):
        h = self.hands[self.turn % len(self.hands)]
        self.turn += 1
        return h.submit(fn, *args)


def held_crew(k):
    """Context manager: a CrewPool of k - 1 hands, or None when another batch holds the crew."""
    return _Held(k)


class _Held:
    def __init__(self, k):
        self.k = k
        self.hands = None

    def __enter__(self):
        self.hands = _take_crew(self.k)
        return CrewPool(self.hands) if self.hands is not None else None

    def __exit__(self, kind, value, tb):
        if self.hands is not None:
            _give_crew(kind is None)
        return False


def _gather(hands):
    """Every hand's answer (or the exception it raised, as _Raised), waiting for all of them."""
    out = []
    for h in hands:
        try:
            out.append(h.result())
        except Exception as e:     # noqa: BLE001 - the caller decides
            out.append(_Raised(e))
    return out


class _Raised:
    __slots__ = ("error",)

    def __init__(self, error):
        self.error = error


def _in_worker():
    return threading.current_thread().name.startswith("setkit")


def _fits(o, rows):
    return type(o) is np.ndarray and o.ndim >= 1 and o.shape[0] == rows


def _rows_finite(X):
    from .kernels.checks import _all_finite
    return bool(_all_finite(X.reshape(-1)))


def split_rows(raw, op, into=False, checks=False):
    """``raw`` (a bound native kernel of flat batches) run over row chunks in threads for large batches.

    ``check_finite=True`` (keyword of the returned call) makes every chunk check its own rows before
    its kernel runs, so the validation pass runs on every core instead of before the split; a
    non-finite entry raises :class:`~setkit.errors.NonFiniteRows`. ``checks``: ``raw`` accepts
    ``check=True`` and does that check itself (in the same pass over its input).

    ``into``: ``raw`` accepts ``out=`` (an array of the input's shape, float64) and writes its
    answer there. The result is then allocated once and every thread writes its rows in place.
    Otherwise each thread copies its chunk's answer into the result (NumPy's copy releases the
    GIL), so no serial concatenation follows the parallel part: the main thread computes the first
    chunk, allocates the result from its shape and dtype and lets the others write into it.

    The calling thread computes the first chunk itself, the crew's persistent threads the others;
    the first chunk's size is tuned call by call (:class:`_Balance`). A chunk that raises anything
    else makes the whole batch run again in one call (after the finiteness check, when asked), so
    that the error names the right batch row."""
    if op not in SPLIT_OPERATORS:
        return raw
    balance = _Balance()

    def call(X, *rest, check_finite=False):
        def run(piece, **kw):
            if check_finite:
                if checks:
                    return raw(*piece, check=True, **kw)
                if not _rows_finite(piece[0]):
                    raise NonFiniteRows(f"{op}: the argument must be finite")
            return raw(*piece, **kw)

        k = thread_count()
        b = X.shape[0] if getattr(X, "ndim", 0) == 2 else 0
        if k < 2 or b < 2 * k or X.size < MIN_ENTRIES or _in_worker():
            return run((X,) + rest)
        k = min(k, b)
        hands = _take_crew(k)
        if hands is None:
            return run((X,) + rest)
        clean = False
        try:
            cuts = balance.cuts(b, k)
            pieces = [(X[cuts[i]:cuts[i + 1]],) + tuple(r[cuts[i]:cuts[i + 1]] for r in rest) for i in range(k)]
            answer = (_split_into if into else _split_copy)(run, hands, X, pieces, cuts, k, balance)
            clean = True
        finally:
            _give_crew(clean)
        if answer is _NOT_FINITE:
            raise NonFiniteRows(f"{op}: the argument must be finite")
        if answer is _FAILED:
            return run((X,) + rest)       # serially: the error (or the odd answer) of the whole batch
        return answer
    call.__wrapped__ = raw
    return call


_NOT_FINITE = object()
_FAILED = object()


def _split_into(run, hands, X, pieces, cuts, k, balance):
    """The chunks of :func:`split_rows` for a kernel writing into ``out=``: one result, no copies."""
    out = np.empty(X.shape, dtype=np.float64)
    ends = [0.0] * k

    def job(i):
        view = out[cuts[i]:cuts[i + 1]]
        try:
            o = run(pieces[i], out=view)
        except NonFiniteRows:
            return _NOT_FINITE
        if o is not view and not (type(o) is np.ndarray and o.shape == view.shape and o.ctypes.data == view.ctypes.data):
            view[...] = o             # a kernel that answered elsewhere (e.g. on a special path): copy its rows
        ends[i] = time.perf_counter()
        return None

    for i in range(1, k):
        hands[i - 1].submit(job, i)
    t0 = time.perf_counter()
    try:
        first = job(0)
    except Exception as e:         # noqa: BLE001 - run serially so that the error names the right row
        first = _Raised(e)
    results = [first] + _gather(hands)
    if any(r is _NOT_FINITE for r in results):
        return _NOT_FINITE
    if any(r is not None for r in results):
        return _FAILED
    balance.update(X.shape[0], k, cuts[1], t0, ends[0], max(ends[1:]))
    return out


def _split_copy(run, hands, X, pieces, cuts, k, balance):
    """The chunks of :func:`split_rows` for other kernels: each copies its answer into the result,
    allocated by the calling thread from its own chunk's answer."""
    b = X.shape[0]
    ready = threading.Event()
    slot = []                         # the result, once the calling thread has allocated it
    ends = [0.0] * k

    def job(i):
        try:
            o = run(pieces[i])
        except NonFiniteRows:
            return _NOT_FINITE
        ends[i] = time.perf_counter()           # the balance compares the kernels' times (copies run in parallel)
        ready.wait()
        n = cuts[i + 1] - cuts[i]
        if slot and _fits(o, n) and o.shape[1:] == slot[0].shape[1:] and o.dtype == slot[0].dtype:
            slot[0][cuts[i]:cuts[i + 1]] = o
            return None
        return _FAILED                # not an array of rows like the first chunk's: served serially

    for i in range(1, k):
        hands[i - 1].submit(job, i)
    t0 = time.perf_counter()
    t1 = 0.0
    try:
        o0 = run(pieces[0])
        t1 = time.perf_counter()
        if _fits(o0, cuts[1]):
            slot.append(np.empty((b,) + o0.shape[1:], dtype=o0.dtype))
            ready.set()
            slot[0][:cuts[1]] = o0
    except NonFiniteRows:
        o0 = _NOT_FINITE
    except Exception as e:         # noqa: BLE001 - run serially so that the error names the right row
        o0 = _Raised(e)
    finally:
        ready.set()
    results = _gather(hands)
    if o0 is _NOT_FINITE or any(r is _NOT_FINITE for r in results):
        return _NOT_FINITE
    if not slot or any(r is not None for r in results):
        return _FAILED
    balance.update(b, k, cuts[1], t0, t1, max(ends[1:]))
    return slot[0]


class _Balance:
    """The main thread's share of a split batch's rows, tuned call by call so that the workers finish
    just before it does: a worker starts tens of microseconds after the main thread (it is woken),
    and a main thread left waiting for the last worker is woken again, tens of microseconds more on
    a VM. With equal shares both delays fall on the critical path; with the main thread's share
    raised by that much work, neither does. Answers do not depend on the split (rows are
    independent in every native kernel), only the time does."""

    __slots__ = ("share",)
    GAP = 10e-6                     # the workers should be done this long before the main thread

    def __init__(self):
        self.share = 0.0            # 0: not measured yet (equal shares)

    def cuts(self, b, k):
        s = self.share if self.share > 0.0 else 1.0 / k
        m = min(max(int(b * s + 0.5), 1), b - (k - 1))
        rest = b - m
        return [0] + [m + rest * i // (k - 1) for i in range(k)]

    def update(self, b, k, rows, t0, t_main, t_workers):
        """One proportional step from the last call: its main thread ran ``rows`` rows from t0 to
        t_main; its last worker finished at t_workers."""
        if t_main <= t0 or t_workers <= 0.0:
            return
        rate = rows / (t_main - t0)             # rows per second on the main thread
        s = (self.share if self.share > 0.0 else 1.0 / k) + 0.5 * (t_workers - t_main + self.GAP) * rate / b
        self.share = min(max(s, 1.0 / k), min(0.9, 1.0 / k + 0.25))


