"""Cheap input checks shared by the dispatcher (compiled, early exit)."""
from __future__ import annotations

import numpy as np
from numba import njit


@njit(cache=True, fastmath={"reassoc"})
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
    return bool(_all_finite(flat))
