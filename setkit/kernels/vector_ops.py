"""Fused single-pass loops for the cheap vector operators (one pass, no temporaries).

At n = 1000 a NumPy expression of five or six array operations spends more time
allocating and dispatching than computing; these compiled loops do the same
arithmetic in one pass per row. All are exact (no iteration).
"""
from __future__ import annotations

import numpy as np
from numba import njit

from .simplex import _simplex_tau, scaled_norm, simplex_tau_inplace, simplex_tau_scan


@njit(cache=True, nogil=True)
def bounds_sum_violation(X, lo, hi, w, total, equal):
    """max(lo - x, x - hi, |<w, x> - total| (equal) or (<w, x> - total)+, 0) per row."""
    b, n = X.shape
    out = np.empty(b)
    for r in range(b):
        v = 0.0
        s = 0.0
        for j in range(n):
            x = X[r, j]
            s += w[j] * x
            v = max(v, lo[j] - x, x - hi[j])
        d = s - total
        if equal:
            d = abs(d)
        out[r] = max(v, d)
    return out


@njit(cache=True, nogil=True)
def l2_ball_project(Y, c, radius):
    """c + (y - c) min(1, r / ||y - c||) per row; rows inside are copied unchanged.

    The norm is rescaled when the plain sum of squares would overflow or underflow,
    so the answer is exact up to rounding for finite |y - c| <= 1e300.
    """
    out = np.empty_like(Y)
    l2_ball_project_into(Y, c, radius, out)
    return out


@njit(cache=True, nogil=True)
def l2_ball_project_into(Y, c, radius, out):
    """:func:`l2_ball_project` written into ``out``; returns whether every entry of Y is finite (read in the
    same pass; the answer is meaningful only when it is)."""
    b, n = Y.shape
    dv = np.empty(n)
    nf = 0
    for r in range(b):
        for j in range(n):
            a = Y[r, j]
            nf += a - a != 0.0          # an integer count (no float reduction): 1 for inf and NaN
            dv[j] = a - c[j]
        nv = scaled_norm(dv, n)       # no overflow above 1e154, no underflow below 1e-154
        if nv <= radius:
            for j in range(n):
                out[r, j] = Y[r, j]
        else:
            f = radius / nv
            for j in range(n):
                out[r, j] = c[j] + (Y[r, j] - c[j]) * f
    return nf == 0


@njit(cache=True, nogil=True)
def ball_lmo(C, c, radius, p):
    """center - r u with u the unit-norm maximizer of <c, u>; p = 1, 2 or 0 (meaning inf)."""
    out = np.empty_like(C)
    return ball_lmo_into(C, c, radius, p, out)


@njit(cache=True, nogil=True)
def ball_lmo_into(C, c, radius, p, out):
    """:func:`ball_lmo` written into ``out`` (returned)."""
    b, n = C.shape
    for r in range(b):
        for j in range(n):
            out[r, j] = c[j]
        if p == 2:
            nc = scaled_norm(C[r], n)       # no overflow/underflow of the sum of squares
            if nc > 0.0:
                for j in range(n):
                    out[r, j] -= radius * (C[r, j] / nc)
        elif p == 0:
            for j in range(n):
                v = C[r, j]
                if v > 0.0:
                    out[r, j] -= radius
                elif v < 0.0:
                    out[r, j] += radius
        else:
            k = 0
            m = -1.0
            for j in range(n):
                a = abs(C[r, j])
                if a > m:
                    m = a
                    k = j
            v = C[r, k]
            if v > 0.0:
                out[r, k] -= radius
            elif v < 0.0:
                out[r, k] += radius
    return out


@njit(cache=True, nogil=True)
def ball_violation(X, c, radius, p):
    """max(||x - c||_p - r, 0) per row; p = 1, 2 or 0 (meaning inf)."""
    b, n = X.shape
    out = np.empty(b)
    dv = np.empty(n)
    for r in range(b):
        s = 0.0
        for j in range(n):
            d = abs(X[r, j] - c[j])
            dv[j] = d
            if p == 1:
                s += d
            elif p == 0:
                s = max(s, d)
        if p == 2:
            s = scaled_norm(dv, n)
        out[r] = max(s - radius, 0.0)
    return out


@njit(cache=True, nogil=True)
def rows_dot(A, v):
    """<a_i, v> per row of A, summed in one fixed order (four running sums over j mod 4, then
    ((s0 + s1) + (s2 + s3)) + the tail), O(n). A row's value does not depend on its batch (BLAS's
    matrix-vector product may sum a row differently by its place in the batch)."""
    b, n = A.shape
    out = np.empty(b)
    k4 = n - n % 4
    for r in range(b):
        s0 = 0.0
        s1 = 0.0
        s2 = 0.0
        s3 = 0.0
        for j in range(0, k4, 4):
            s0 += A[r, j] * v[j]
            s1 += A[r, j + 1] * v[j + 1]
            s2 += A[r, j + 2] * v[j + 2]
            s3 += A[r, j + 3] * v[j + 3]
        s = (s0 + s1) + (s2 + s3)
        for j in range(k4, n):
            s += A[r, j] * v[j]
        out[r] = s
    return out


@njit(cache=True, nogil=True)
def norm_rows(X):
    """||x||_2 per row without overflow or underflow (rescaled when needed), O(n)."""
    b, n = X.shape
    out = np.empty(b)
    for r in range(b):
        out[r] = scaled_norm(X[r], n)
    return out


@njit(cache=True, nogil=True)
def _abs_diff2(yj, cj):
    """|y - c| as an unevaluated sum vh + vl (TwoSum, sign folded in): |y| >> |c| loses nothing of c."""
    vh = yj - cj
    bb = vh - yj
    vl = (yj - (vh - bb)) + (-cj - bb)
    if vh < 0.0 or (vh == 0.0 and vl < 0.0):
        vh = -vh
        vl = -vl
    return vh, vl


@njit(cache=True, nogil=True)
def l1_ball_project(Y, c, radius):
    """Rows onto {||x - c||_1 <= r}: unchanged inside, else c + sign(v) max(|v| - tau, 0), v = y - c.

    tau is the simplex threshold of |v| for the total r (Condat's method) on |v|
    shifted by its maximum and floored at -2r (the same threshold, minus max|v|;
    see ``setkit.kernels.simplex.shift_to_top``), so the answer is exact up to
    rounding for finite |y - c| <= 1e300 and r in [1e-300, 1e300]. O(n).

    No work buffer: |v| (as TwoSum parts) is recomputed in each of three passes, the shifted
    values are written into the output row and Condat's lists live there
    (``simplex_tau_inplace``); at the origin the threshold pass reads |y| itself
    (``simplex_tau_scan``), so the shifted values are never written. Memory: the output only.
    An empty ``c`` means the origin as center (then |v| = |y| needs no TwoSum and c is not
    read). The passes are separate compiled functions of one row (each a simple loop).
    """
    out = np.empty_like(Y)
    l1_ball_rows_into(Y, c, radius, out)
    return out


def l1_ball_project_rows(Y, c, radius):
    """:func:`l1_ball_project` with the output allocated by NumPy (for long rows numba's allocator
    costs about one more pass over memory)."""
    out = np.empty_like(Y)
    l1_ball_rows_into(Y, c, radius, out)
    return out


@njit(cache=True, nogil=True)
def _l1_sum_top(y, c, zc):
    """(sum |v|, max |v| as TwoSum parts) of v = y - c (c not read when ``zc``)."""
    # four partial sums (the sum only decides inside / outside; the same order for both paths)
    s0 = 0.0
    s1 = 0.0
    s2 = 0.0
    s3 = 0.0
    top = 0.0
    top_l = 0.0
    n = y.size
    k4 = n - n % 4
    if zc:
        t1 = 0.0
        t2 = 0.0
        t3 = 0.0
        for k in range(0, k4, 4):
            a = abs(y[k])
            b = abs(y[k + 1])
            cc = abs(y[k + 2])
            d = abs(y[k + 3])
            s0 += a
            s1 += b
            s2 += cc
            s3 += d
            top = a if a > top else top
            t1 = b if b > t1 else t1
            t2 = cc if cc > t2 else t2
            t3 = d if d > t3 else t3
        for j in range(k4, n):
            a = abs(y[j])
            s0 += a
            top = a if a > top else top
        top = t1 if t1 > top else top
        top = t2 if t2 > top else top
        top = t3 if t3 > top else top
        return (s0 + s1) + (s2 + s3), top, top_l
    for j in range(n):
        vh, vl = _abs_diff2(y[j], c[j])
        q = j % 4 if j < k4 else 0
        if q == 0:
            s0 += vh
        elif q == 1:
            s1 += vh
        elif q == 2:
            s2 += vh
        else:
            s3 += vh
        if vh > top or (vh == top and vl > top_l):
            top = vh
            top_l = vl
    return (s0 + s1) + (s2 + s3), top, top_l


@njit(cache=True, nogil=True)
def _l1_write(y, c, zc, top, top_l, floor, tau, out):
    """out = c + sign(y - c) max(|v| - max|v| (floored) - tau, 0)."""
    if zc:
        for j in range(y.size):
            yj = y[j]
            m = max((abs(yj) - top) + (0.0 - top_l), floor) - tau
            v = (m if yj > 0 else -m) if m > 0.0 else 0.0
            out[j] = 0.0 + v
        return
    for j in range(y.size):
        yj = y[j]
        cj = c[j]
        vh, vl = _abs_diff2(yj, cj)
        d = yj - cj
        m = max((vh - top) + (vl - top_l), floor) - tau
        if m > 0.0:
            out[j] = cj + (m if (d > 0 or (d == 0 and yj > cj)) else -m)
        else:
            out[j] = cj


@njit(cache=True, nogil=True)
def l1_ball_rows_into(Y, c, radius, out):
    """The rows of :func:`l1_ball_project`, written into ``out``."""
    b, n = Y.shape
    zc = c.size == 0
    floor = -2.0 * radius
    for r in range(b):
        y = Y[r]
        z = out[r]
        s, top, top_l = _l1_sum_top(y, c, zc)
        if s <= radius:
            for j in range(n):
                z[j] = y[j]
            continue
        if radius == 0.0:
            for j in range(n):
                z[j] = 0.0 if zc else c[j]
            continue
        if zc:
            # |y_j| - max|y| floored, computed on the fly by the threshold pass (one pass less)
            tau = simplex_tau_scan(y, top, floor, radius, z, True)
        else:
            for j in range(n):
                vh, vl = _abs_diff2(y[j], c[j])
                # |v_j| - max|v| (exact where it matters: Sterbenz on the high parts)
                z[j] = max((vh - top) + (vl - top_l), floor)
            tau = simplex_tau_inplace(z, radius)
        if np.isnan(tau):          # clean-up did not settle: the sorted threshold
            for j in range(n):
                vh, vl = (abs(y[j]), 0.0) if zc else _abs_diff2(y[j], c[j])
                z[j] = max((vh - top) + (vl - top_l), floor)
            u = -np.sort(-z)
            cs = 0.0
            tau = 0.0
            for k in range(n):
                cs += u[k]
                t = (cs - radius) / (k + 1)
                if u[k] > t:
                    tau = t
        _l1_write(y, c, zc, top, top_l, floor, tau, z)


@njit(cache=True, nogil=True)
def l1_ball_project_buffered(Y, c, radius):
    """The previous kernel (four work buffers), kept as a reference for the tests.

    Rows onto {||x - c||_1 <= r}: unchanged inside, else c + sign(v) max(|v| - tau, 0), v = y - c.

    tau is the simplex threshold of |v| for the total r (Condat's method) on |v|
    shifted by its maximum and floored at -2r (the same threshold, minus max|v|;
    see ``setkit.kernels.simplex.shift_to_top``), so the answer is exact up to
    rounding for finite |y - c| <= 1e300 and r in [1e-300, 1e300]. O(n).
    """
    b, n = Y.shape
    out = np.empty_like(Y)
    a = np.empty(n)
    al = np.empty(n)
    cand = np.empty(n)
    wait = np.empty(n)
    for r in range(b):
        s = 0.0
        top = 0.0
        top_l = 0.0
        for j in range(n):
            # v = y - c as an unevaluated sum vh + vl (TwoSum): |y| >> |c| loses nothing of c
            yj = Y[r, j]
            cj = c[j]
            vh = yj - cj
            bb = vh - yj
            vl = (yj - (vh - bb)) + (-cj - bb)
            if vh < 0.0 or (vh == 0.0 and vl < 0.0):
                vh = -vh
                vl = -vl
            a[j] = vh
            al[j] = vl
            s += vh
            if vh > top or (vh == top and vl > top_l):
                top = vh
                top_l = vl
        if s <= radius:
            for j in range(n):
                out[r, j] = Y[r, j]
            continue
        if radius == 0.0:
            for j in range(n):
                out[r, j] = c[j]
            continue
        for j in range(n):
            # |v_j| - max|v| (exact where it matters: Sterbenz on the high parts)
            a[j] = max((a[j] - top) + (al[j] - top_l), -2.0 * radius)
        tau = _simplex_tau(a, radius, cand, wait)
        if np.isnan(tau):          # clean-up did not settle: the sorted threshold
            u = -np.sort(-a)
            cs = 0.0
            tau = 0.0
            for k in range(n):
                cs += u[k]
                t = (cs - radius) / (k + 1)
                if u[k] > t:
                    tau = t
        for j in range(n):
            d = Y[r, j] - c[j]
            m = a[j] - tau
            if m > 0.0:
                out[r, j] = c[j] + (m if (d > 0 or (d == 0 and Y[r, j] > c[j])) else -m)
            else:
                out[r, j] = c[j]
    return out


@njit(cache=True, nogil=True)
def box_ops(X, lo, hi, tie):
    """Box LMO in one pass per row (lower where c > 0, upper where c < 0, ``tie`` where c = 0), bounds
    possibly infinite; returns (points, index of an unbounded coordinate or -1). The projection is
    :func:`clip_rows_into`."""
    out = np.empty_like(X)
    return out, box_ops_into(X, lo, hi, tie, out)


@njit(cache=True, nogil=True)
def box_ops_into(X, lo, hi, tie, out):
    """:func:`box_ops` written into ``out``; returns the index of an unbounded coordinate or -1."""
    b, n = X.shape
    bad = -1
    for r in range(b):
        for j in range(n):
            v = X[r, j]
            x = lo[j] if v > 0.0 else (hi[j] if v < 0.0 else tie[j])
            if bad < 0 and not (x - x == 0.0):
                bad = r * n + j
            out[r, j] = x
    return bad


@njit(cache=True, nogil=True)
def clip_rows_into(X, lo, hi, out):
    """The box projection min(max(x, lo), hi) per entry, written into ``out``; returns whether every entry
    of X is finite (read in the same pass)."""
    b, n = X.shape
    nf = 0
    for r in range(b):
        for j in range(n):
            v = X[r, j]
            nf += v - v != 0.0          # an integer count (no float reduction): 1 for inf and NaN
            out[r, j] = min(max(v, lo[j]), hi[j])
    return nf == 0


@njit(cache=True, nogil=True)
def box_values(X, lo, hi, op):
    """Box values per row. op 0: distance ||x - clip(x)||; 1: support sum max(c lo, c hi) (finite bounds)."""
    b, n = X.shape
    out = np.empty(b)
    dv = np.empty(n)
    for r in range(b):
        s = 0.0
        for j in range(n):
            v = X[r, j]
            if op == 0:
                d = v - min(max(v, lo[j]), hi[j])
                dv[j] = d
                s += d * d
            else:
                s += v * hi[j] if v > 0.0 else v * lo[j]
        if op == 0:
            # rescaled norm when the plain sum overflowed or may have lost terms to underflow
            out[r] = np.sqrt(s) if (s < np.inf and s > 1e-280) else scaled_norm(dv, n)
        else:
            out[r] = s
    return out


@njit(cache=True, nogil=True)
def bounds_sum_screen(X, lo, hi, w, total, equal, tol, lip):
    """bounds_sum_violation per row, except that a row stops early (returning a partial value
    > tol[r] * lip) as soon as a bound is violated by more than tol[r] * lip: a membership screen
    needs no more."""
    b, n = X.shape
    out = np.empty(b)
    for r in range(b):
        lim = tol[r] * lip
        v = 0.0
        s = 0.0
        j = 0
        while j < n:
            e = min(j + 32, n)
            for k in range(j, e):
                x = X[r, k]
                s += w[k] * x
                v = max(v, lo[k] - x, x - hi[k])
            j = e
            if v > lim:
                break
        if v > lim:
            out[r] = v
            continue
        d = s - total
        if equal:
            d = abs(d)
        out[r] = max(v, d)
    return out


@njit(cache=True, nogil=True)
def ball_screen(X, c, radius, p, tol, lip):
    """ball_violation per row for p = 1 or 0 (inf), stopping early (with a partial value > tol[r] * lip)
    once the partial norm already exceeds radius + tol[r] * lip."""
    b, n = X.shape
    out = np.empty(b)
    for r in range(b):
        lim = tol[r] * lip
        s = 0.0
        j = 0
        while j < n:
            e = min(j + 32, n)
            for k in range(j, e):
                d = abs(X[r, k] - c[k])
                if p == 1:
                    s += d
                else:
                    s = max(s, d)
            j = e
            if s - radius > lim:
                break
        out[r] = max(s - radius, 0.0)
    return out


@njit(cache=True, nogil=True)
def l2_dist_rows(X, c):
    """||x - c||_2 per row (sequential sum; used as a screen beside the exact NumPy distance)."""
    b, n = X.shape
    out = np.empty(b)
    dv = np.empty(n)
    for r in range(b):
        for j in range(n):
            dv[j] = X[r, j] - c[j]
        out[r] = scaled_norm(dv, n)
    return out


@njit(cache=True, nogil=True)
def box_lmo_bounded(C, lo, hi, tie):
    """box_ops(C, lo, hi, tie)[0] for finite bounds (no unboundedness check, one return value)."""
    out = np.empty_like(C)
    return box_lmo_bounded_into(C, lo, hi, tie, out)


@njit(cache=True, nogil=True)
def box_lmo_bounded_into(C, lo, hi, tie, out):
    """:func:`box_lmo_bounded` written into ``out`` (returned)."""
    b, n = C.shape
    for r in range(b):
        for j in range(n):
            v = C[r, j]
            out[r, j] = lo[j] if v > 0.0 else (hi[j] if v < 0.0 else tie[j])
    return out


@njit(cache=True, nogil=True)
def simplex_lmo_rows(C, total, at_most):
    """Simplex LMO per row: total e_j at the first smallest c_j (the origin when at_most and c_j >= 0)."""
    out = np.zeros(C.shape)
    return simplex_lmo_into(C, total, at_most, out, False)


@njit(cache=True, nogil=True)
def simplex_lmo_into(C, total, at_most, out, clear=True):
    """:func:`simplex_lmo_rows` written into ``out`` (returned); ``clear=False`` when out is already zero."""
    b, n = C.shape
    for r in range(b):
        if clear:
            out[r, :] = 0.0
        j = 0
        m = C[r, 0]
        for k in range(1, n):
            if C[r, k] < m:
                m = C[r, k]
                j = k
        if not at_most or m < 0.0:
            out[r, j] = total
    return out


@njit(cache=True, nogil=True)
def simplex_support_rows(C, total, at_most):
    """Simplex support per row: total max c (max(c) replaced by 0 when at_most and it is below 0)."""
    b, n = C.shape
    out = np.empty(b)
    for r in range(b):
        M = C[r, 0]
        for k in range(1, n):
            if C[r, k] > M:
                M = C[r, k]
        if at_most and not (M >= 0.0):
            M = 0.0
        out[r] = total * M
    return out
