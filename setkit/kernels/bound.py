"""Native kernels with a set's data bound, as numba-callable functions of one point.

Each factory returns a dict ``operator -> numba dispatcher`` of functions ``f(y) -> x`` on a
1-d float64 array, for use inside a caller's own ``@njit`` loop (no Python between calls).
The set's data are closure constants, so every returned function compiles once per set on
its first call (not cached on disk: the data are part of the compiled code). Each function
runs the same compiled row kernel the Python-level operator runs, on the point viewed as a
(1, n) batch, so its answers are bit-identical to ``K.project`` / ``K.lmo``.

These functions do not validate their input: a non-finite or wrongly sized point gives an
undefined answer. Validate outside the hot loop.
"""
from __future__ import annotations

import numpy as np
from numba import njit

from ..errors import InputError
from .isotonic import permutahedron_lmo_packed, permutahedron_rows_packed
from .simplex import LONG_ROW, _capped_rows_nb, _simplex_rows_nb, capped_project_long, knapsack_lmo_rows
from .vector_ops import ball_lmo, box_lmo_bounded, clip_rows_into, l1_ball_project, l2_ball_project, simplex_lmo_rows


@njit(cache=True, nogil=True)
def simplex_sorted_row(y, total):
    """The sorted-prefix threshold of one row (the rare fallback of the compiled pivot search).

    Same arithmetic, in the same order, as ``project_simplex_sorted``: shift by the maximum, sort decreasingly,
    running sums, the last k with u_k * k > css_k - total, x = max(y - tau, 0).
    """
    n = y.size
    top = y.max()
    y = np.maximum(y - top, -2.0 * total)         # shift_to_top: the same projection, no cancellation
    u = -np.sort(-y)
    css = np.cumsum(u)
    rho = 0
    for k in range(n):
        css[k] -= total
        if u[k] * (k + 1.0) > css[k]:
            rho = k
    tau = css[rho] / (rho + 1.0)
    return np.maximum(y - tau, 0.0)


def simplex_kernels(total, at_most):
    """project and lmo of {x >= 0, sum x = total} (or <= total when ``at_most``)."""
    total = float(total)
    at_most = bool(at_most)

    @njit(nogil=True)
    def project_equal(y):
        if total == 0.0:
            return np.zeros_like(y)
        Y = y.reshape(1, y.size)
        out = np.empty_like(Y)
        bad = _simplex_rows_nb(Y, total, out)
        if bad:
            return simplex_sorted_row(y, total)
        return out[0]

    if at_most:
        @njit(nogil=True)
        def project(y):
            x = np.maximum(y, 0.0)
            s = 0.0
            for v in x:
                s += v
            if s > total:
                return project_equal(y)
            return x
    else:
        project = project_equal

    @njit(nogil=True)
    def lmo(c):
        return simplex_lmo_rows(c.reshape(1, c.size), total, at_most)[0]

    return {"project": project, "lmo": lmo}


def box_kernels(lower, upper, tie, all_finite):
    """project (and lmo when every bound is finite) of {lower <= x <= upper}."""
    lo, hi, tie = (np.ascontiguousarray(v, dtype=float) for v in (lower, upper, tie))

    @njit(nogil=True)
    def project(y):          # the family's kernel (Box.project), so the answers are the same bits
        x = np.empty(y.size)
        clip_rows_into(y.reshape(1, y.size), lo, hi, x.reshape(1, y.size))
        return x

    out = {"project": project}
    if all_finite:
        @njit(nogil=True)
        def lmo(c):
            return box_lmo_bounded(c.reshape(1, c.size), lo, hi, tie)[0]
        out["lmo"] = lmo
    return out


def ball_kernels(center, radius, p, lo, hi):
    """project and lmo of {||x - center||_p <= radius}; p = 1, 2 or 0 (meaning inf)."""
    c = np.ascontiguousarray(center, dtype=float)
    lo, hi = np.ascontiguousarray(lo, dtype=float), np.ascontiguousarray(hi, dtype=float)
    r = float(radius)
    p = int(p)
    if p == 2:
        @njit(nogil=True)
        def project(y):
            return l2_ball_project(y.reshape(1, y.size), c, r)[0]
    elif p == 1:
        @njit(nogil=True)
        def project(y):
            return l1_ball_project(y.reshape(1, y.size), c, r)[0]
    else:
        @njit(nogil=True)
        def project(y):
            return np.minimum(np.maximum(y, lo), hi)

    @njit(nogil=True)
    def lmo(v):
        return ball_lmo(v.reshape(1, v.size), c, r, p)[0]

    return {"project": project, "lmo": lmo}


def budget_kernels(lower, upper, weights, total, at_most, caps, room, data_scale, long_data=None):
    """project and lmo of {lower <= x <= upper, <w, x> = total} (or <= total when ``at_most``).

    The projection serves points with max |y| <= 1e4 * data_scale (the range where the Python-level
    operator solves once); farther points, which the Python-level operator re-solves after a shift,
    raise InputError here instead of answering less accurately.
    """
    lo, hi, w, cap = (np.ascontiguousarray(v, dtype=float) for v in (lower, upper, weights, caps))
    total, room, at_most = float(total), float(room), bool(at_most)
    far = 1e4 * float(data_scale)
    # long vectors: the same specialization as the Python-level operator (numbers for uniform data)
    llo, lhi, lw = (lo, hi, w) if long_data is None else long_data

    @njit(nogil=True)
    def project(y):
        if np.abs(y).max() > far:
            raise InputError("jit_kernels budget project: |y| is far above the set's data (more than 1e4 times "
                             "its scale); call K.project for such points")
        Y = y.reshape(1, y.size)
        rows = np.zeros(1, np.int64)
        if at_most:
            X = np.minimum(np.maximum(Y, lo), hi)
            if np.dot(X[0], w) <= total:
                return X[0]
        else:
            X = np.empty_like(Y)
        if y.size >= LONG_ROW:
            capped_project_long(y, llo, lhi, lw, total, X[0])
        else:
            _capped_rows_nb(Y, lo, hi, w, total, rows, X, np.zeros(1))
        return X[0]

    @njit(nogil=True)
    def lmo(c):
        X = np.empty((1, c.size))
        knapsack_lmo_rows(c.reshape(1, c.size), lo, cap, w, room, at_most, X)
        return X[0]

    return {"project": project, "lmo": lmo}


def permutahedron_kernels(wdesc):
    """project and lmo of the permutahedron of w (``wdesc``: w sorted decreasingly)."""
    wd = np.ascontiguousarray(wdesc, dtype=float)

    @njit(nogil=True)
    def project(y):
        return permutahedron_rows_packed(y.reshape(1, y.size), wd)[0]

    @njit(nogil=True)
    def lmo(c):
        return permutahedron_lmo_packed(c.reshape(1, c.size), wd)[0]

    return {"project": project, "lmo": lmo}
