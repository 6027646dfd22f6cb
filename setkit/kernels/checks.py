"""Cheap input checks shared by the dispatcher (compiled, early exit)."""
from __future__ import annotations

import numpy as np
from numba import njit


@njit(cache=True, nogil=True, fastmath={"reassoc"})
def _all_finite(a):
    # v * 0 is 0 for finite v and NaN for NaN and +-inf; reassociation lets the sum vectorize
    acc = 0.0
    for i in range(a.size):
        acc += a[i] * 0.0
    return acc == 0.0


def all_finite(a: np.ndarray) -> bool:
    """Whether every entry of a float64 array is finite; one pass, no temporary array."""
    flat = a.reshape(-1)
    if flat.size < 64:
        return bool(np.isfinite(flat).all())
    if flat.size >= (1 << 19):
        # large batches: the halves (or more parts) checked in setkit.parallel's threads
        from .. import parallel
        k = parallel.thread_count()
        if k >= 2 and not parallel._in_worker():
            with parallel.held_crew(k) as pool:
                if pool is not None:
                    cuts = [flat.size * i // k for i in range(k + 1)]
                    futs = [pool.submit(_all_finite, flat[cuts[i]:cuts[i + 1]]) for i in range(1, k)]
                    ok = bool(_all_finite(flat[:cuts[1]]))
                    return all([bool(f.result()) for f in futs]) and ok
    return bool(_all_finite(flat))


@njit(cache=True, fastmath=True)
def _max_abs(a):
    # the maximum is exact in any order (callers pass finite arrays); four independent running
    # maxima let the loop pipeline / vectorize
    m0 = 0.0
    m1 = 0.0
    m2 = 0.0
    m3 = 0.0
    n = a.size
    i = 0
    while i + 4 <= n:
        v0 = abs(a[i])
        v1 = abs(a[i + 1])
        v2 = abs(a[i + 2])
        v3 = abs(a[i + 3])
        m0 = m0 if m0 > v0 else v0
        m1 = m1 if m1 > v1 else v1
        m2 = m2 if m2 > v2 else v2
        m3 = m3 if m3 > v3 else v3
        i += 4
    while i < n:
        v0 = abs(a[i])
        m0 = m0 if m0 > v0 else v0
        i += 1
    return max(max(m0, m1), max(m2, m3))


def max_abs(a: np.ndarray) -> float:
    """max |a_i| of a float64 array (0 for an empty one); one pass, no temporary array."""
    return float(_max_abs(a.reshape(-1)))


@njit(cache=True, fastmath={"reassoc"})
def finite_max_abs(a):
    """max |a_i| of a 1-d float64 array if every entry is finite, else -1.0; one pass.

    v * 0 is 0 for finite v and NaN otherwise (each term separately, so no overflow of a sum can
    flag a finite entry); the maxima are compare-and-select, exact in any order."""
    m0 = 0.0
    m1 = 0.0
    m2 = 0.0
    m3 = 0.0
    acc = 0.0
    n = a.size
    i = 0
    while i + 4 <= n:
        v0 = abs(a[i])
        v1 = abs(a[i + 1])
        v2 = abs(a[i + 2])
        v3 = abs(a[i + 3])
        acc += v0 * 0.0 + v1 * 0.0 + v2 * 0.0 + v3 * 0.0
        m0 = m0 if m0 > v0 else v0
        m1 = m1 if m1 > v1 else v1
        m2 = m2 if m2 > v2 else v2
        m3 = m3 if m3 > v3 else v3
        i += 4
    while i < n:
        v0 = abs(a[i])
        acc += v0 * 0.0
        m0 = m0 if m0 > v0 else v0
        i += 1
    if acc != 0.0:
        return -1.0
    return max(max(m0, m1), max(m2, m3))
