"""Compiled single-point entries of native kernels (the per-call fast path).

One call of ``K.project(y)`` / ``K.lmo(c)`` (and ``distance`` / ``support``, which return a (1,)
array here) on one float64 point should cost little more than the arithmetic. These functions
``f(D, y)`` take the set's data packed in one 2-d array ``D`` (rows: the data vectors in their
first n entries; last row: the scalar parameters; width max(n, number of parameters)) and the
point ``y``, so they are compiled once and cached on disk for every set of a family, and one
call unboxes two arrays. They check that every entry of the point is finite (when ``check`` is
true) and run the same compiled row kernel as the family's batch kernel on the point viewed as a
(1, n) batch, or the same expression in one loop, so answers are bit-identical to the batch path
(tests/test_point_entries.py).

A point the fast path does not settle raises :class:`setkit.errors.TakeGeneralPath` (from
compiled code): a non-finite entry, a budget point far above the data (the batch path re-solves
those after a shift), a simplex row that needs the sorted fallback, an unbounded box LMO, an
at_most sum within rounding of the total (the batch path sums in another order), a support value
that overflowed (the batch path rescales). The caller then takes the general path, which
validates, reports and answers exactly as before.

``routing.build_plan`` binds them (``Plan.point``) from the family hook ``point_kernels()``;
``DecisionSet`` checks type, dtype, shape and layout in Python before calling (the compiled
entry point trusts its argument types).

These entries serve simplex, budget, box, l1/l2/l-inf balls and permutahedra (their
``point_kernels`` hook), not rows of LONG_ROW coordinates and more (budget) or 50,000 and more
(permutahedron): those take their long-vector routes on the general path.
"""
from __future__ import annotations

import numpy as np
from numba import njit

from ..errors import TakeGeneralPath
from .isotonic import (pack_rows, permutahedron_lmo_keys, permutahedron_lmo_packed, permutahedron_rows_keys,
                       permutahedron_rows_packed)
from .simplex import _capped_rows_nb, _simplex_rows_nb, knapsack_lmo_rows, simplex_distance_rows
from .vector_ops import (ball_lmo, box_ops, box_values, l1_ball_project, l2_ball_project,
                         l2_dist_rows, norm_rows, simplex_lmo_rows, simplex_support_rows)

EPS = 2.220446049250313e-16


@njit(cache=True, nogil=True, fastmath={"reassoc"})
def _finite(y):
    acc = 0.0
    for i in range(y.size):
        acc += y[i] * 0.0          # NaN for NaN and +-inf, 0 otherwise; reassociation lets it vectorize
    return acc == 0.0


def pack(rows, params):
    """The ``D`` argument: the data rows (each of length n) and a last row holding ``params``."""
    rows = [np.asarray(r, dtype=float).reshape(-1) for r in rows]
    n = rows[0].size if rows else 0
    D = np.zeros((len(rows) + 1, max(n, len(params), 1)))
    for i, r in enumerate(rows):
        D[i, :n] = r
    D[-1, :len(params)] = params
    return D


# -- simplex: params (total, at_most, check) ---------------------------------------------------
@njit(cache=True, nogil=True)
def simplex_project_point(D, y):
    """project_simplex_rows (mode equal) / Simplex.project (at_most) of one point."""
    s = D[-1]
    if s[2] != 0.0 and not _finite(y):
        raise TakeGeneralPath()
    total = s[0]
    n = y.size
    if s[1] != 0.0:
        # at_most: max(y, 0) when its sum is below the total (np.maximum returns 0.0 at y == 0)
        x = np.empty(n)
        t = 0.0
        for i in range(n):
            v = y[i]
            x[i] = v if v > 0.0 else 0.0
            t += x[i]
        # NumPy sums pairwise, this loop sequentially: within rounding of the total, let it decide
        if abs(t - total) <= 2.0 * n * EPS * t + 1e-300:
            raise TakeGeneralPath()
        if t <= total:
            return x
    if total == 0.0:
        return np.zeros(n)
    out = np.empty((1, n))
    if _simplex_rows_nb(y.reshape(1, n), total, out):
        raise TakeGeneralPath()        # the sorted-prefix fallback runs in NumPy on the general path
    return out[0]


@njit(cache=True, nogil=True, fastmath={"nnan", "ninf", "nsz", "reassoc"})
def _min_finite(y):
    # the minimum of finite values is exact in any order (only the sign of a zero may differ); these
    # flags and eight running minima let the reduction vectorize, so callers check finiteness first
    n = y.size
    m0 = m1 = m2 = m3 = m4 = m5 = m6 = m7 = y[0]
    i = 0
    while i + 8 <= n:
        m0 = min(m0, y[i])
        m1 = min(m1, y[i + 1])
        m2 = min(m2, y[i + 2])
        m3 = min(m3, y[i + 3])
        m4 = min(m4, y[i + 4])
        m5 = min(m5, y[i + 5])
        m6 = min(m6, y[i + 6])
        m7 = min(m7, y[i + 7])
        i += 8
    m0 = min(min(min(m0, m1), min(m2, m3)), min(min(m4, m5), min(m6, m7)))
    while i < n:
        m0 = min(m0, y[i])
        i += 1
    return m0


@njit(cache=True, nogil=True)
def simplex_lmo_point(D, y):
    """simplex_lmo_rows of one point: total e_j at the first smallest y_j (one vectorized minimum, then
    the first index holding it; -0.0 and 0.0 tie, as in the row kernel's strict comparison)."""
    s = D[-1]
    if s[2] != 0.0 and not _finite(y):
        raise TakeGeneralPath()
    n = y.size
    if s[2] == 0.0 or n == 0:       # unchecked: the row kernel (defined for every input)
        return simplex_lmo_rows(y.reshape(1, n), s[0], s[1] != 0.0)[0]
    m = _min_finite(y)
    j = 0
    while y[j] != m:
        j += 1
    out = np.zeros(n)
    if s[1] == 0.0 or m < 0.0:
        out[j] = s[0]
    return out


@njit(cache=True, nogil=True)
def simplex_distance_point(D, y):
    """simplex_distance_rows of one point, as a (1,) array."""
    s = D[-1]
    if s[2] != 0.0 and not _finite(y):
        raise TakeGeneralPath()
    return simplex_distance_rows(y.reshape(1, y.size), s[0], s[1] != 0.0)


@njit(cache=True, nogil=True)
def simplex_support_point(D, y):
    """simplex_support_rows of one point, as a (1,) array (an overflow goes to the general path's rescaling)."""
    s = D[-1]
    if s[2] != 0.0 and not _finite(y):
        raise TakeGeneralPath()
    v = simplex_support_rows(y.reshape(1, y.size), s[0], s[1] != 0.0)
    if not np.isfinite(v[0]):
        raise TakeGeneralPath()
    return v


# -- box: rows (lower, upper, tie); params (check, all bounds finite) --------------------------
@njit(cache=True, nogil=True, fastmath={"reassoc"})
def box_project_point(D, y):
    """clip_rows_into (the box projection) of one point: min(max(y_i, lower_i), upper_i), the same
    expression, with the finiteness check in the same pass (reassociating only its sum of y_i * 0, so
    the loop vectorizes; min and max are comparisons, exact in any case)."""
    n = y.size
    x = np.empty(n)
    acc = 0.0
    for i in range(n):
        v = y[i]
        acc += v * 0.0
        x[i] = min(max(v, D[0, i]), D[1, i])
    if D[-1, 0] != 0.0 and acc != 0.0:
        raise TakeGeneralPath()
    return x


@njit(cache=True, nogil=True, fastmath={"reassoc"})
def box_lmo_point(D, y):
    """box_lmo_bounded for finite bounds (the same selection, with the finiteness check in the same pass;
    only its sum of y_i * 0 reassociates), else box_ops with its unboundedness check."""
    n = y.size
    s = D[-1]
    if s[1] != 0.0:
        x = np.empty(n)
        acc = 0.0
        for i in range(n):
            v = y[i]
            acc += v * 0.0
            x[i] = D[0, i] if v > 0.0 else (D[1, i] if v < 0.0 else D[2, i])
        if s[0] != 0.0 and acc != 0.0:
            raise TakeGeneralPath()
        return x
    if s[0] != 0.0 and not _finite(y):
        raise TakeGeneralPath()
    X, bad = box_ops(y.reshape(1, n), D[0, :n], D[1, :n], D[2, :n])
    if bad >= 0:
        raise TakeGeneralPath()        # the general path names the unbounded coordinate
    return X[0]


@njit(cache=True, nogil=True)
def box_distance_point(D, y):
    """box_values (distance) of one point, as a (1,) array."""
    n = y.size
    if D[-1, 0] != 0.0 and not _finite(y):
        raise TakeGeneralPath()
    return box_values(y.reshape(1, n), D[0, :n], D[1, :n], 0)


@njit(cache=True, nogil=True)
def box_support_point(D, y):
    """box_values (support, finite bounds) of one point, as a (1,) array (overflow: the general path)."""
    n = y.size
    if D[-1, 0] != 0.0 and not _finite(y):
        raise TakeGeneralPath()
    v = box_values(y.reshape(1, n), D[0, :n], D[1, :n], 1)
    if not np.isfinite(v[0]):
        raise TakeGeneralPath()
    return v


# -- ball: rows (center, center - radius, center + radius); params (radius, p, check, center is 0)
@njit(cache=True, nogil=True)
def ball_project_point(D, y):
    """l2_ball_project, l1_ball_project or np.clip (p = inf) of one point, as Ball.project."""
    n = y.size
    s = D[-1]
    if s[2] != 0.0 and not _finite(y):
        raise TakeGeneralPath()
    p = int(s[1])
    Y = y.reshape(1, n)
    if p == 2:
        return l2_ball_project(Y, D[0, :n], s[0])[0]
    if p == 1:
        if s[3] != 0.0:                # Ball.project passes an empty center for a ball at the origin
            return l1_ball_project(Y, np.empty(0), s[0])[0]
        return l1_ball_project(Y, D[0, :n], s[0])[0]
    # p = inf: np.clip(y, lo, hi), which returns y at equality with a bound, like this min/max
    x = np.empty(n)
    for i in range(n):
        x[i] = min(max(y[i], D[1, i]), D[2, i])
    return x


@njit(cache=True, nogil=True)
def ball_lmo_point(D, y):
    """ball_lmo of one point."""
    n = y.size
    s = D[-1]
    if s[2] != 0.0 and not _finite(y):
        raise TakeGeneralPath()
    return ball_lmo(y.reshape(1, n), D[0, :n], s[0], int(s[1]))[0]


@njit(cache=True, nogil=True)
def ball_distance_point(D, y):
    """Ball.distance of one point, as a (1,) array: max(||y - c||_2 - r, 0) (np.maximum's rule) for p = 2,
    the norm of y - np.minimum(np.maximum(y, lo), hi) for p = inf, of y - l1 projection for p = 1."""
    n = y.size
    s = D[-1]
    if s[2] != 0.0 and not _finite(y):
        raise TakeGeneralPath()
    p = int(s[1])
    Y = y.reshape(1, n)
    if p == 2:
        d = l2_dist_rows(Y, D[0, :n])
        v = d[0] - s[0]
        d[0] = v if v > 0.0 else 0.0
        return d
    if p == 0:
        Z = np.empty((1, n))
        for i in range(n):
            a = y[i]
            m = a if a > D[1, i] else D[1, i]     # np.maximum(y, lo)
            m = m if m < D[2, i] else D[2, i]     # np.minimum(., hi)
            Z[0, i] = a - m
        return norm_rows(Z)
    if s[3] != 0.0:
        P = l1_ball_project(Y, np.empty(0), s[0])
    else:
        P = l1_ball_project(Y, D[0, :n], s[0])
    return norm_rows(Y - P)


# -- budget: rows (lower, upper, weights, caps); params (total, at_most, check, far, room) --------
@njit(cache=True, nogil=True)
def budget_project_point(D, y):
    """project_capped of one point (rows shorter than LONG_ROW; far points go to the general path)."""
    n = y.size
    s = D[-1]
    if s[2] != 0.0 and not _finite(y):
        raise TakeGeneralPath()
    m = 0.0
    for v in y:
        a = abs(v)
        if a > m:
            m = a
    if m > s[3]:
        raise TakeGeneralPath()        # project_capped re-solves such points after shifts
    lo, hi, w = D[0, :n], D[1, :n], D[2, :n]
    total = s[0]
    X = np.empty((1, n))
    if s[1] != 0.0:
        t = 0.0
        a = 0.0
        for i in range(n):
            v = y[i]
            v = lo[i] if lo[i] > v else v      # np.clip: y at equality with a bound
            v = hi[i] if hi[i] < v else v
            X[0, i] = v
            t += v * w[i]
            a += abs(v * w[i])
        if abs(t - total) <= 2.0 * n * EPS * a + 1e-300:
            raise TakeGeneralPath()    # X @ w sums in another order: let the general path decide
        if t <= total:
            return X[0]
    _capped_rows_nb(y.reshape(1, n), lo, hi, w, total, np.zeros(1, np.int64), X, np.zeros(1))
    return X[0]


@njit(cache=True, nogil=True)
def budget_lmo_point(D, y):
    """knapsack_lmo_rows of one point."""
    n = y.size
    s = D[-1]
    if s[2] != 0.0 and not _finite(y):
        raise TakeGeneralPath()
    X = np.empty((1, n))
    knapsack_lmo_rows(y.reshape(1, n), D[0, :n], D[3, :n], D[2, :n], s[4], s[1] != 0.0, X)
    return X[0]


# -- permutahedron: rows (w sorted decreasingly,); params (check,) -----------------------------
# Up to SORT_IN_NUMPY coordinates a point's packed keys are sorted by numba inside one compiled call;
# longer points sort them with NumPy's vectorized sort (several times faster at n = 1000) between
# two compiled calls. The keys are unique, so both sorts give one order and the same answer bit for bit.
SORT_IN_NUMPY = 256


def permutahedron_point_sorted(wd, nbits, check, project, y):
    """Project (``project`` true) or lmo of one point through NumPy's sort of its packed keys."""
    if check and not _finite(y):
        raise TakeGeneralPath()
    Y = y.reshape(1, y.size)
    keys = pack_rows(Y, nbits, project)
    keys.sort(axis=1)
    if project:
        return permutahedron_rows_keys(Y, keys, nbits, wd)[0]
    return permutahedron_lmo_keys(Y, keys, nbits, wd)[0]


@njit(cache=True, nogil=True)
def permutahedron_project_point(D, y):
    """permutahedron_rows_packed of one point (rows shorter than 50,000)."""
    n = y.size
    if D[-1, 0] != 0.0 and not _finite(y):
        raise TakeGeneralPath()
    return permutahedron_rows_packed(y.reshape(1, n), D[0, :n])[0]


@njit(cache=True, nogil=True)
def permutahedron_lmo_point(D, y):
    """permutahedron_lmo_packed of one point."""
    n = y.size
    if D[-1, 0] != 0.0 and not _finite(y):
        raise TakeGeneralPath()
    return permutahedron_lmo_packed(y.reshape(1, n), D[0, :n])[0]
