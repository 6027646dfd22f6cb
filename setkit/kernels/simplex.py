"""Exact projections onto simplices and weighted capped simplices (continuous quadratic knapsack).

All functions are pure, batched over rows and exact up to rounding (no iterative
tolerance): they find the threshold of the KKT conditions by sorting or by
breakpoint search.
"""
from __future__ import annotations

import numpy as np
from numba import njit, types
from numba.extending import overload

from .checks import _max_abs


def at(a, j):
    """a[j] for an array, a itself for a number: one kernel source serves per-coordinate data and
    data equal at every coordinate (passed as a number: a separate compiled specialization that
    reads one array less per pass)."""
    return a[j]


@overload(at, inline="always")
def _at_overload(a, j):
    if isinstance(a, types.Array):
        return lambda a, j: a[j]
    return lambda a, j: a


def _move(a, i, k):
    """a[i] = a[k] for an array; nothing for a number (see :func:`at`)."""
    a[i] = a[k]


@overload(_move, inline="always")
def _move_overload(a, i, k):
    if isinstance(a, types.Array):
        def impl(a, i, k):
            a[i] = a[k]
        return impl
    return lambda a, i, k: None


def _put(a, buf, i, j):
    """buf[i] = a[j] for an array ``a``; nothing for a number."""
    buf[i] = a[j]


@overload(_put, inline="always")
def _put_overload(a, buf, i, j):
    if isinstance(a, types.Array):
        def impl(a, buf, i, j):
            buf[i] = a[j]
        return impl
    return lambda a, buf, i, j: None


def _part(a, buf):
    """``buf`` (the compact copy) for an array ``a``; ``a`` itself for a number."""
    return buf


@overload(_part, inline="always")
def _part_overload(a, buf):
    if isinstance(a, types.Array):
        return lambda a, buf: buf
    return lambda a, buf: a


def uniform_or_array(v):
    """float(v[0]) when every entry of the float vector v has the same bits (then kernels take it as a
    number; -0.0 and +0.0 count as different), else v."""
    v = np.ascontiguousarray(v, dtype=float)
    if v.size:
        bits = v.view(np.int64)
        if np.all(bits == bits[0]):
            return float(v[0])
    return v


# clean-up passes allowed before falling back to the sort-based threshold
_MAX_PASSES = 64


@njit(cache=True, nogil=True)
def _simplex_tau(y, total, v, vt):
    """Threshold tau with sum max(y - tau, 0) = total (total > 0), by Condat's method.

    One pass keeps a candidate list v with rho = (sum v - total) / |v| (values that
    cannot be above the threshold are set aside in vt and only re-examined once);
    then passes drop the candidates <= rho until none is dropped. tau is recomputed
    from the final list for accuracy. Returns NaN if the clean-up needs too many
    passes (the caller then sorts). O(n) in practice.
    """
    n = y.size
    m = 1
    mt = 0
    v[0] = y[0]
    rho = y[0] - total
    for i in range(1, n):
        yi = y[i]
        if yi > rho:
            rho += (yi - rho) / (m + 1)
            if rho > yi - total:
                v[m] = yi
                m += 1
            else:
                for k in range(m):
                    vt[mt] = v[k]
                    mt += 1
                v[0] = yi
                m = 1
                rho = yi - total
    for k in range(mt):
        yk = vt[k]
        if yk > rho:
            v[m] = yk
            m += 1
            rho += (yk - rho) / m
    for _ in range(_MAX_PASSES):
        m2 = 0
        for k in range(m):
            yk = v[k]
            if yk > rho:
                v[m2] = yk
                m2 += 1
            else:
                left = m - 1 - (k - m2)                  # the list size after this removal
                if left <= 0:
                    return np.nan                        # never with shifted input; the caller sorts
                rho += (rho - yk) / left
        if m2 == m:
            s = 0.0
            for k in range(m):
                s += v[k]
            return (s - total) / m
        m = m2
    return np.nan


@njit(cache=True, nogil=True)
def simplex_tau_inplace(z, total):
    """:func:`simplex_tau_shifted` on z itself (z is destroyed; see there)."""
    return simplex_tau_shifted(z, 0.0, -np.inf, total, z)


@njit(cache=True, nogil=True)
def simplex_tau_shifted(y, top, floor, total, z):
    """The threshold of z = max(y - top, floor) (computed on the fly), with Condat's lists kept in ``z``.

    :func:`_simplex_tau` without its two work buffers (z is overwritten). The same steps as
    :func:`_simplex_tau` (the same running thresholds); only the order of the final list
    differs, so tau may differ in the last bits of its sum. The lists only hold values already
    read, so they fit in z[:i] when the i-th value is read (also when z is y itself). Layout: the set-aside values vt occupy
    z[0:mt] in the order they were set aside, the candidate list v follows at z[mt:mt + m]; a
    reset of v retires it in place (mt += m) instead of copying it; the set-aside values that
    rejoin are compacted to the front and v moved behind them. Returns NaN when the
    clean-up needs too many passes (the caller then sorts). O(n) in practice, no allocation.

    ``z`` may be ``y`` itself (top = 0, floor = -inf: the values as they are) or a separate
    buffer of the same size (then y is only read, and z holds no copy of the shifted values:
    one pass less)."""
    return simplex_tau_scan(y, top, floor, total, z, False)


# rows at least this long skip blocks of SCAN_BLOCK values that Condat's first pass would pass over
SCAN_BLOCK_MIN = 4096
SCAN_BLOCK = 32


@njit(cache=True, nogil=True)
def simplex_tau_scan(y, top, floor, total, z, absolute):
    """:func:`simplex_tau_shifted` of the values max(y - top, floor), or of max(|y| - top, floor)
    when ``absolute`` (the l1 ball's threshold, computed on the fly).

    Condat's first pass only acts on a value above its running threshold rho; once rho is near
    the answer almost no value is, so on rows of at least SCAN_BLOCK_MIN values a branch-free
    (vectorizable) count of the values above rho in each block of SCAN_BLOCK skips the blocks
    where it is zero. The values read, the lists and the arithmetic are those of the plain
    pass: the same threshold bit for bit, fewer branches."""
    n = y.size
    m = 1
    mt = 0
    v0 = (abs(y[0]) if absolute else y[0]) - top
    v0 = v0 if v0 > floor else floor
    z[0] = v0
    rho = v0 - total
    i = 1
    while i < n:
        end = n
        if n >= SCAN_BLOCK_MIN and i + SCAN_BLOCK <= n:
            end = i + SCAN_BLOCK
            cnt = 0
            for j in range(i, end):
                v = (abs(y[j]) if absolute else y[j]) - top
                v = v if v > floor else floor
                cnt += np.int64(v > rho)
            if cnt == 0:
                i = end
                continue
        for j in range(i, end):
            yi = (abs(y[j]) if absolute else y[j]) - top
            yi = yi if yi > floor else floor
            if yi > rho:
                rho += (yi - rho) / (m + 1)
                if rho > yi - total:
                    z[mt + m] = yi
                    m += 1
                else:
                    mt += m                         # v retires in place: it becomes the tail of vt
                    z[mt] = yi
                    m = 1
                    rho = yi - total
        i = end
    return _condat_finish(z, m, mt, rho, total)


@njit(cache=True, nogil=True)
def _condat_finish(z, m, mt, rho, total):
    """The set-aside values rejoin, then Condat's clean-up passes (lists laid out as in simplex_tau_inplace)."""
    s = 0
    mv = m
    for k in range(mt):
        yk = z[k]
        if yk > rho:
            z[s] = yk
            s += 1
            m += 1
            rho += (yk - rho) / m
    if s < mt:
        for k in range(mv):
            z[s + k] = z[mt + k]
    for _ in range(_MAX_PASSES):
        m2 = 0
        for k in range(m):
            yk = z[k]
            if yk > rho:
                z[m2] = yk
                m2 += 1
            else:
                left = m - 1 - (k - m2)
                if left <= 0:
                    return np.nan
                rho += (rho - yk) / left
        if m2 == m:
            sm = 0.0
            for k in range(m):
                sm += z[k]
            return (sm - total) / m
        m = m2
    return np.nan


@njit(cache=True, nogil=True)
def row_max(y):
    """max(y) of a non-empty row with four running maxima (independent selects: several times faster
    than one chain on long rows; the maximum is exact, so the same value)."""
    n = y.size
    t0 = y[0]
    t1 = t0
    t2 = t0
    t3 = t0
    k = 0
    while k + 4 <= n:
        a = y[k]
        b = y[k + 1]
        c = y[k + 2]
        d = y[k + 3]
        t0 = a if a > t0 else t0
        t1 = b if b > t1 else t1
        t2 = c if c > t2 else t2
        t3 = d if d > t3 else t3
        k += 4
    for j in range(k, n):
        t0 = y[j] if y[j] > t0 else t0
    t0 = t1 if t1 > t0 else t0
    t0 = t2 if t2 > t0 else t0
    return t3 if t3 > t0 else t0


@njit(cache=True, nogil=True)
def _simplex_rows_nb(Y, total, out):
    """Rows shifted by their maximum and floored at -2 total (see :func:`shift_to_top`), then Condat.

    No work buffer: Condat's lists live in the output row (:func:`simplex_tau_shifted` shifts
    on the fly), and the answer max(z - tau, 0) is recomputed from y.
    Memory: the output only. Returns the number of rows that need the sorted fallback
    (their output rows are NaN).
    """
    b, n = Y.shape
    bad = 0
    floor = -2.0 * total
    for r in range(b):
        top = row_max(Y[r])
        tau = simplex_tau_shifted(Y[r], top, floor, total, out[r])
        if np.isnan(tau):
            bad += 1
            for j in range(n):
                out[r, j] = np.nan
            continue
        for j in range(n):
            v = Y[r, j] - top
            v = (v if v > floor else floor) - tau
            out[r, j] = v if v > 0.0 else 0.0
    return bad


@njit(cache=True, nogil=True)
def simplex_rows_buffered(Y, total, out):
    """The previous row kernel (separate work buffers for z and Condat's two lists), kept as a reference."""
    b, n = Y.shape
    cand = np.empty(n)
    wait = np.empty(n)
    z = np.empty(n)
    bad = 0
    floor = -2.0 * total
    for r in range(b):
        top = Y[r, 0]
        for j in range(1, n):
            if Y[r, j] > top:
                top = Y[r, j]
        for j in range(n):
            v = Y[r, j] - top
            z[j] = v if v > floor else floor
        tau = _simplex_tau(z, total, cand, wait)
        if np.isnan(tau):
            bad += 1
            for j in range(n):
                out[r, j] = np.nan
            continue
        for j in range(n):
            v = z[j] - tau
            out[r, j] = v if v > 0.0 else 0.0
    return bad


def shift_to_top(Y: np.ndarray, total: float) -> np.ndarray:
    """Rows of Y shifted by their maximum and floored at -2 total: the same simplex projection.

    The threshold satisfies max(y) - total <= tau < max(y), so subtracting max(y)
    (a translation along the all-ones normal of the simplex's affine hull) changes
    tau by the same amount and no coordinate of the answer; coordinates below
    max(y) - total are zero in the answer, so flooring them changes nothing
    either. Every coordinate that ends up positive is within ``total`` of max(y),
    where y - max(y) is exact (Sterbenz), so the answer no longer depends on
    |y|: no cancellation at 1e17 and no overflow of sums at 1e300.
    """
    with np.errstate(over="ignore", invalid="ignore"):
        Z = Y - Y.max(axis=1, keepdims=True)
    return np.maximum(Z, -2.0 * total)


def project_simplex_rows(Y: np.ndarray, total: float, out: np.ndarray | None = None) -> np.ndarray:
    """Project each row of Y onto {x >= 0, sum x = total}.

    x = max(y - tau, 0) with the threshold tau of the KKT conditions found by
    Condat's method in compiled code (O(n) per row in practice); rows where its
    clean-up needs too many passes fall back to the sorted-prefix threshold
    (Held, Wolfe and Crowder 1974), O(n log n). Rows are first shifted by their
    maximum (:func:`shift_to_top`), so the answer is exact up to a few ulps of
    ``total`` for every finite y with |y| <= 1e300 and total in [1e-300, 1e300]
    (n * total below the float range). ``out``: where to write the answer (allocated when None).
    """
    Y = np.ascontiguousarray(Y, dtype=float)
    b, n = Y.shape
    if out is None:
        out = np.empty_like(Y)
    if total == 0.0:
        out[...] = 0.0
        return out
    if b == 0:
        return out
    bad = _simplex_rows_nb(Y, float(total), out)
    if bad:
        rows = np.flatnonzero(np.isnan(out[:, 0]))
        out[rows] = project_simplex_sorted(Y[rows], total)
    return out


def project_simplex_sorted(Y: np.ndarray, total: float) -> np.ndarray:
    """Rows of Y onto {x >= 0, sum x = total} by the sorted-prefix threshold, O(b n log n).

    Exact at every magnitude, like :func:`project_simplex_rows` (rows shifted by their maximum).
    """
    b, n = Y.shape
    if total == 0.0:
        return np.zeros_like(Y)
    if b == 0:
        return np.empty_like(Y)
    Y = shift_to_top(np.asarray(Y, dtype=float), total)
    U = -np.sort(-Y, axis=1)
    css = np.cumsum(U, axis=1)
    css -= total
    k = np.arange(1, n + 1, dtype=float)
    cond = U * k > css
    rho = n - 1 - np.argmax(cond[:, ::-1], axis=1)
    tau = css[np.arange(b), rho] / (rho + 1.0)
    return np.maximum(Y - tau[:, None], 0.0)


def project_simplex_large(y: np.ndarray, total: float) -> np.ndarray:
    """One long vector onto {x >= 0, sum x = total} without a full sort.

    Pivot search on the candidate set (Michelot 1986 / Condat 2016 style): keep the
    coordinates above the running threshold until it stops changing. O(n) on average.
    """
    # Michelot's fixed point: tau = (sum_{v in S} v - total)/|S|, S = {y > tau}; starts from all
    y = shift_to_top(np.asarray(y, dtype=float)[None, :], total)[0]
    v = y
    tau = (v.sum() - total) / v.size
    while True:
        keep = v[v > tau]
        if keep.size == v.size:
            break
        v = keep
        tau = (v.sum() - total) / v.size
    return np.maximum(y - tau, 0.0)


def capped_threshold(y, lo, hi, w, total):
    """The multiplier lam with sum w * clip(y - lam w, lo, hi) = total (one vector).

    Breakpoint search with median pivots on the shrinking undecided set
    (Kiwiel 2008, "Breakpoint searching algorithms for the continuous quadratic
    knapsack problem"); expected O(n). Requires sum w lo <= total <= sum w hi.
    """
    # breakpoints: coordinate i is at hi for lam <= a_i, free in between, at lo for lam >= b_i
    a = (y - hi) / w
    bnd = (y - lo) / w
    idx = np.arange(y.size)
    fixed = 0.0          # sum of w*x over decided coordinates that sit at a bound
    free_c = 0.0         # sum of w*y over decided free coordinates
    free_s = 0.0         # sum of w^2 over decided free coordinates
    L, U = -np.inf, np.inf
    while idx.size:
        pts = np.concatenate([a[idx], bnd[idx]])
        pts = pts[(pts > L) & (pts < U) & np.isfinite(pts)]
        if pts.size == 0:
            break
        piv = np.partition(pts, pts.size // 2)[pts.size // 2]
        yi, li, hi_, wi = y[idx], lo[idx], hi[idx], w[idx]
        g = fixed + free_c - piv * free_s + np.dot(wi, np.clip(yi - piv * wi, li, hi_))
        if g > total:
            L = piv
        elif g < total:
            U = piv
        else:
            return piv
        # decide coordinates whose status is constant on (L, U)
        ai, bi = a[idx], bnd[idx]
        at_hi = ai >= U
        at_lo = bi <= L
        free = (ai <= L) & (bi >= U)
        fixed += np.dot(wi[at_hi], hi_[at_hi]) + np.dot(wi[at_lo], li[at_lo])
        free_c += np.dot(wi[free], yi[free])
        free_s += np.dot(wi[free], wi[free])
        idx = idx[~(at_hi | at_lo | free)]
    # on (L, U) every remaining coordinate has a constant status: solve the linear equation
    if idx.size:
        yi, li, hi_, wi = y[idx], lo[idx], hi[idx], w[idx]
        mid = _interior_point(L, U)
        xm = yi - mid * wi
        at_hi = xm >= hi_
        at_lo = xm <= li
        free = ~(at_hi | at_lo)
        fixed += np.dot(wi[at_hi], hi_[at_hi]) + np.dot(wi[at_lo], li[at_lo])
        free_c += np.dot(wi[free], yi[free])
        free_s += np.dot(wi[free], wi[free])
    if free_s == 0.0:
        # the function is flat at total on (L, U): any point works
        return L if np.isfinite(L) else (U if np.isfinite(U) else 0.0)
    return (fixed + free_c - total) / free_s


def capped_threshold_rows(Y, lo, hi, w, total):
    """Batched multipliers for the capped weighted simplex, by sorting all 2n breakpoints per row.

    g(lam) = sum_i w_i clip(y_i - lam w_i, lo_i, hi_i) is piecewise linear and
    non-increasing; its values at the sorted breakpoints come from prefix sums of
    the slope and intercept changes. O(b n log n).
    """
    b, n = Y.shape
    W = np.broadcast_to(w, (b, n))
    a = (Y - hi) / W          # leave the upper bound
    c = (Y - lo) / W          # reach the lower bound
    fin_hi = np.isfinite(hi)
    fin_hi_b = np.broadcast_to(fin_hi, (b, n))
    # state at lam -> -inf: coordinates with finite hi at hi; with infinite hi free
    base_int = np.sum(np.where(fin_hi_b, W * np.where(fin_hi, hi, 0.0), W * Y), axis=1)
    base_slope = -np.sum(np.where(fin_hi_b, 0.0, W * W), axis=1)
    t = np.concatenate([np.where(fin_hi_b, a, np.inf), c], axis=1)
    d_int = np.concatenate([np.where(fin_hi_b, W * Y - W * np.where(fin_hi, hi, 0.0), 0.0),
                            W * np.broadcast_to(lo, (b, n)) - W * Y], axis=1)
    d_slope = np.concatenate([np.where(fin_hi_b, -W * W, 0.0), W * W], axis=1)
    order = np.argsort(t, axis=1, kind="stable")
    t = np.take_along_axis(t, order, axis=1)
    I = base_int[:, None] + np.cumsum(np.take_along_axis(d_int, order, axis=1), axis=1)
    S = base_slope[:, None] + np.cumsum(np.take_along_axis(d_slope, order, axis=1), axis=1)
    with np.errstate(invalid="ignore"):
        g = I + S * t               # g just after each breakpoint (continuous, so also at it)
    g = np.where(np.isfinite(t), g, -np.inf)
    # first breakpoint where g <= total; the root lies in the segment before it
    k = np.argmax(g <= total, axis=1)
    rows = np.arange(b)
    k_prev = k - 1
    I_seg = np.where(k_prev >= 0, I[rows, np.maximum(k_prev, 0)], base_int)
    S_seg = np.where(k_prev >= 0, S[rows, np.maximum(k_prev, 0)], base_slope)
    with np.errstate(divide="ignore", invalid="ignore"):
        lam = np.where(S_seg != 0, (total - I_seg) / S_seg, t[rows, k])
    return lam


def _interior_point(L, U):
    """A point strictly inside (L, U) (ends may be infinite), safe for huge magnitudes."""
    if np.isfinite(L) and np.isfinite(U):
        return 0.5 * (L + U)
    if np.isfinite(L):
        return L + max(1.0, abs(L))
    if np.isfinite(U):
        return U - max(1.0, abs(U))
    return 0.0


@njit(cache=True, nogil=True)
def _pick_pivot(y, lo, hi, w, idx, m, L, U, seed, samp):
    """Median of up to 15 random breakpoints strictly inside (L, U); NaN if there is none."""
    cnt = 0
    for _ in range(60):
        seed[0] = seed[0] * 6364136223846793005 + 1442695040888963407   # int64 LCG, wraps
        r = (seed[0] >> 20) & 0x7FFFFFFFFFF
        j = idx[r % m]
        if (seed[0] >> 63) & 1:
            bp = (y[j] - at(hi, j)) / at(w, j)
        else:
            bp = (y[j] - at(lo, j)) / at(w, j)
        if bp > L and bp < U:
            samp[cnt] = bp
            cnt += 1
            if cnt == 15:
                break
    if cnt == 0:
        for k in range(m):
            j = idx[k]
            bp = (y[j] - at(hi, j)) / at(w, j)
            if bp > L and bp < U:
                return bp
            bp = (y[j] - at(lo, j)) / at(w, j)
            if bp > L and bp < U:
                return bp
        return np.nan
    for a in range(1, cnt):                 # insertion sort of the small sample, in place
        v = samp[a]
        c = a - 1
        while c >= 0 and samp[c] > v:
            samp[c + 1] = samp[c]
            c -= 1
        samp[c + 1] = v
    return samp[cnt // 2]


@njit(cache=True, nogil=True)
def _capped_lambda(y, lo, hi, w, total, idx):
    """Multiplier of the capped weighted simplex; see :func:`_capped_search`.

    Long vectors (n > 4096) first solve the same problem on a random sample of
    1024 coordinates (with the total scaled down) and use its root as the first
    pivot; the sorted breakpoints of the sample then supply pivots stepping
    back across the root, so that two full passes settle almost every coordinate.
    """
    n = y.size
    first = np.nan
    sbp = np.empty(0)
    if n > 4096:
        k = 1024
        ys = np.empty(k)
        los = np.empty(k)
        his = np.empty(k)
        ws = np.empty(k)
        seed = np.int64(1442695040888963407)
        smin = 0.0
        smax = 0.0
        for t in range(k):
            seed = seed * 6364136223846793005 + 1442695040888963407
            j = ((seed >> 20) & 0x7FFFFFFFFFF) % n
            ys[t] = y[j]
            los[t] = at(lo, j)
            his[t] = at(hi, j)
            ws[t] = at(w, j)
            smin += ws[t] * los[t]
            smax += ws[t] * his[t]
        ts = total * k / n
        if smin < ts < smax:
            first = _capped_search(ys, los, his, ws, ts, np.empty(k, np.int64), np.nan, sbp)
            allbp = np.concatenate(((ys - his) / ws, (ys - los) / ws))
            sbp = np.sort(allbp[np.isfinite(allbp)])
    return _capped_search(y, lo, hi, w, total, idx, first, sbp)


@njit(cache=True, nogil=True)
def _capped_search(y, lo, hi, w, total, idx, first, sbp):
    """Multiplier lam with sum w clip(y - lam w, lo, hi) = total, by randomized breakpoint search.

    g(lam) is continuous, piecewise linear and non-increasing with breakpoints
    (y - hi)/w (leaves the upper bound) and (y - lo)/w (reaches the lower bound).
    Keep a bracket (L, U) with g(L) > total > g(U); each round takes the median
    of a small random sample of the breakpoints inside the bracket as pivot and,
    in one pass over the undecided list ``idx``, moves every coordinate whose
    status is constant on the bracket into running sums while evaluating g at
    the pivot on the others. Expected O(n); once no breakpoint is left inside
    the bracket, g is linear there and the root is solved exactly.
    Requires finite lo, w > 0 and sum w lo <= total <= sum w hi.
    """
    n = y.size
    for i in range(n):
        idx[i] = i
    return _capped_rounds(y, lo, hi, w, total, idx, n, 0.0, 0.0, 0.0, -np.inf, np.inf, np.inf, -np.inf, first, sbp)


@njit(cache=True, nogil=True)
def _capped_rounds(y, lo, hi, w, total, idx, m, fixed, free_c, free_s, L, U, gL, gU, first, sbp):
    """The rounds of :func:`_capped_search` from a given state: the undecided coordinates idx[:m],
    the running sums of the decided ones (fixed: w x at a bound; free_c, free_s: w y and w^2 of the
    free ones), the bracket (L, U) with g(L) = gL >= total >= g(U) = gU (infinite ends allowed)."""
    seed = np.full(1, 88172645463325252, np.int64)
    samp = np.empty(15)
    step = 1
    secant = False
    piv = first
    if np.isnan(piv) or not np.isfinite(piv):
        piv = _pick_pivot(y, lo, hi, w, idx, m, L, U, seed, samp)
    while not np.isnan(piv):
        m2 = 0
        gk = 0.0
        fixed_lo = 0.0
        if L == -np.inf and U == np.inf:
            # nothing can be settled yet: evaluate only (a cheaper loop)
            for k in range(m):
                j = idx[k]
                gk += at(w, j) * min(max(y[j] - piv * at(w, j), at(lo, j)), at(hi, j))
            m2 = m
        for k in range(m if m2 == 0 else 0):
            j = idx[k]
            yj = y[j]
            hj = at(hi, j)
            lj = at(lo, j)
            wj = at(w, j)
            # branch-free (integer flags, selects): data-dependent branches cost more than the arithmetic
            a = yj - hj
            b = yj - lj
            Uw = U * wj
            Lw = L * wj
            f_hi = np.int64(a >= Uw)                                     # at the upper bound on (L, U)
            f_lo = np.int64(b <= Lw) * (1 - f_hi)                        # at the lower bound on (L, U)
            f_free = np.int64(a <= Lw) * np.int64(b >= Uw) * (1 - f_hi) * (1 - f_lo)   # free on (L, U)
            keep = 1 - f_hi - f_lo - f_free
            fixed += wj * hj if f_hi else 0.0
            fixed_lo += wj * lj if f_lo else 0.0
            free_c += wj * yj if f_free else 0.0
            free_s += wj * wj if f_free else 0.0
            idx[m2] = j
            m2 += keep
            x = min(max(yj - piv * wj, lj), hj)
            gk += wj * x if keep else 0.0
        m = m2
        fixed += fixed_lo
        g = fixed + free_c - piv * free_s + gk
        if g > total:
            L = piv
            gL = g
        elif g < total:
            U = piv
            gU = g
        else:
            return piv
        if m == 0:
            break
        piv = np.nan
        secant = not secant
        if secant and L > -np.inf and U < np.inf:
            # g is piecewise linear: the secant through (L, g(L)), (U, g(U)) often lands in the
            # root's own piece; alternating with sampled medians keeps the expected O(n)
            t = L + (gL - total) * ((U - L) / (gL - gU))
            if t > L and t < U:
                piv = t
        elif sbp.size and (L == -np.inf or U == np.inf):
            # one-sided bracket: step back across the root along the sample's breakpoints,
            # 4, 16, 64, ... sample breakpoints away (a few of all breakpoints in between)
            step *= 4
            if U < np.inf:
                r = np.searchsorted(sbp, U) - step
                if r >= 0:
                    piv = sbp[r]
            else:
                r = np.searchsorted(sbp, L, side="right") + step - 1
                if r < sbp.size:
                    piv = sbp[r]
            if not (piv > L and piv < U):
                piv = np.nan
        if np.isnan(piv):
            piv = _pick_pivot(y, lo, hi, w, idx, m, L, U, seed, samp)
    if m > 0:
        # no breakpoint strictly inside (L, U): classify the rest at an interior point
        if L > -np.inf and U < np.inf:
            mid = 0.5 * (L + U)
        elif L > -np.inf:
            mid = L + max(1.0, abs(L))
        elif U < np.inf:
            mid = U - max(1.0, abs(U))
        else:
            mid = 0.0
        for k in range(m):
            j = idx[k]
            x = y[j] - mid * at(w, j)
            if x >= at(hi, j):
                fixed += at(w, j) * at(hi, j)
            elif x <= at(lo, j):
                fixed += at(w, j) * at(lo, j)
            else:
                free_c += at(w, j) * y[j]
                free_s += at(w, j) * at(w, j)
    if free_s == 0.0:
        # g is flat (= total) on the bracket: any point of it is a root
        if L > -np.inf:
            return L
        if U < np.inf:
            return U
        return 0.0
    return (fixed + free_c - total) / free_s


# single rows at least this long take the sampled-bracket kernel (capped_project_long)
LONG_ROW = 32768


@njit(cache=True, nogil=True)
def _capped_sample_bracket(y, lo, hi, w, total, margin=3.0):
    """A bracket (L, U) for the multiplier of a long capped weighted simplex, from a sample.

    4096 coordinates in 256 random blocks of 16 consecutive ones (cache friendly), the same
    problem solved on them with the total scaled by k/n (:func:`_capped_search`), and the
    sample breakpoints ``margin`` sqrt(K) + 8 ranks either side of the sample's root (K finite sample
    breakpoints) as the ends. Infinite ends where the sample runs out. Returns (L, U, ok);
    ok is False when the sample problem is infeasible or degenerate (the caller then searches
    without a bracket). The bracket is only a guess: the caller verifies it exactly.
    """
    n = y.size
    nblk = 256
    k = nblk * 16
    ys = np.empty(k)
    ls = np.empty(k)
    hs = np.empty(k)
    ws = np.empty(k)
    seed = np.int64(7046029254386353131)
    smin = 0.0
    smax = 0.0
    t = 0
    for _ in range(nblk):
        seed = seed * 6364136223846793005 + 1442695040888963407
        j0 = ((seed >> 20) & 0x7FFFFFFFFFF) % (n - 15)
        for j in range(j0, j0 + 16):
            ys[t] = y[j]
            ls[t] = at(lo, j)
            hs[t] = at(hi, j)
            ws[t] = at(w, j)
            smin += ws[t] * ls[t]
            smax += ws[t] * hs[t]
            t += 1
    ts = total * (k / n)
    if not (smin < ts and ts < smax):
        return -np.inf, np.inf, False
    lam_s = _capped_search(ys, ls, hs, ws, ts, np.empty(k, np.int64), np.nan, np.empty(0))
    bp = np.empty(2 * k)
    K = 0
    for t in range(k):
        a = (ys[t] - hs[t]) / ws[t]
        if np.isfinite(a):
            bp[K] = a
            K += 1
        a = (ys[t] - ls[t]) / ws[t]
        if np.isfinite(a):
            bp[K] = a
            K += 1
    if K < 64:
        return -np.inf, np.inf, False
    # the sample breakpoints r ranks either side of lam_s by selection (np.partition, O(K)) instead of
    # a sort: the same order statistics, several times faster than numba's sort
    r = int(margin * np.sqrt(K)) + 8
    below = np.empty(K)
    above = np.empty(K)
    p = 0
    a = 0
    for t in range(K):
        v = bp[t]
        if v < lam_s:
            below[p] = v
            p += 1
        else:
            above[a] = v
            a += 1
    L = np.partition(below[:p], p - r - 1)[p - r - 1] if p - r - 1 >= 0 else -np.inf
    U = np.partition(above[:a], r)[r] if r < a else np.inf
    if not (L < U):
        return -np.inf, np.inf, False
    return L, U, True


@njit(cache=True, nogil=True)
def _capped_narrow(ys, ls, hs, ws, m, fixed, free_c, free_s, L, U, gL, gU, total, piv, vals, seed):
    """One narrowing round on compact data (ys, ls, hs, ws)[:m] of the capped weighted simplex.

    Three pivots inside (L, U) (the quartiles of the breakpoints of a 64-coordinate random
    sample); vectorized passes evaluate g at each exactly (the decided coordinates enter
    through the sums); the bracket shrinks to the two neighbouring pivots around the root; a
    last pass moves every coordinate whose status is constant on the new bracket into the sums
    and compacts the others in place. About 4x fewer undecided coordinates per round. Returns the new state
    (m, fixed, free_c, free_s, L, U, gL, gU), or the same m when no pivot was found.
    """
    P = 0
    for _ in range(64):
        seed[0] = seed[0] * 6364136223846793005 + 1442695040888963407
        j = ((seed[0] >> 20) & 0x7FFFFFFFFFF) % m
        for side in range(2):
            bp = (ys[j] - (at(hs, j) if side == 0 else at(ls, j))) / at(ws, j)
            if bp > L and bp < U and P < piv.size:
                piv[P] = bp
                P += 1
    if P == 0:
        return m, fixed, free_c, free_s, L, U, gL, gU
    cand = np.sort(piv[:P])
    Q = 0
    for t in range(1, 4):                  # the sample's quartiles: 3 evaluations shrink the set about 4x
        v = cand[(t * P) // 4]
        if Q == 0 or v > vals[Q - 1]:
            vals[Q] = v
            Q += 1
    pv = vals[:Q].copy()
    base = fixed + free_c
    nL, nU, ngL, ngU = L, U, gL, gU
    for t in range(Q):
        gt = base - pv[t] * free_s + _g_sum(ys, ls, hs, ws, m, pv[t])
        if gt >= total:
            nL = pv[t]
            ngL = gt
        else:
            nU = pv[t]
            ngU = gt
            break
    m2 = 0
    for k in range(m):
        # branch-free (selects, and the write position advanced by the flag): the statuses are
        # random, branches on them would mostly be mispredicted; the same sums in the same order
        yk = ys[k]
        lk = at(ls, k)
        hk = at(hs, k)
        wk = at(ws, k)
        a = yk - hk
        b = yk - lk
        f_hi = a >= nU * wk
        f_lo = (b <= nL * wk) & ~f_hi
        f_free = (a <= nL * wk) & (b >= nU * wk) & ~f_hi & ~f_lo
        fixed += (wk * hk if f_hi else wk * lk) if (f_hi | f_lo) else 0.0
        free_c += wk * yk if f_free else 0.0
        free_s += wk * wk if f_free else 0.0
        ys[m2] = yk
        _move(ls, m2, k)
        _move(hs, m2, k)
        _move(ws, m2, k)
        m2 += np.int64(~(f_hi | f_lo | f_free))
    return m2, fixed, free_c, free_s, nL, nU, ngL, ngU


@njit(cache=True, nogil=True, fastmath={"reassoc"})
def _settle_chunk(y, lo, hi, w, j0, j1, L, U, keep):
    """Sums of the coordinates j0 <= j < j1 whose status is constant on (L, U), and keep[j - j0] for the others.

    Branch-free and vectorizable: only the order of the four sums is left to the compiler
    (``reassoc``), every term is the same. Returns (fixed, free_c, free_s, count kept).
    """
    fixed = 0.0
    fixed_lo = 0.0
    free_c = 0.0
    free_s = 0.0
    cnt = 0
    for j in range(j0, j1):
        yj = y[j]
        lj = at(lo, j)
        hj = at(hi, j)
        wj = at(w, j)
        a = yj - hj
        b = yj - lj
        Uw = U * wj
        Lw = L * wj
        f_hi = a >= Uw                                       # at the upper bound on (L, U)
        f_lo = (b <= Lw) & ~f_hi                             # at the lower bound on (L, U)
        f_free = (a <= Lw) & (b >= Uw) & ~f_hi & ~f_lo       # free on (L, U)
        k = ~(f_hi | f_lo | f_free)
        fixed += wj * hj if f_hi else 0.0
        fixed_lo += wj * lj if f_lo else 0.0
        free_c += wj * yj if f_free else 0.0
        free_s += wj * wj if f_free else 0.0
        keep[j - j0] = k
        cnt += np.int64(k)
    return fixed + fixed_lo, free_c, free_s, cnt


@njit(cache=True, nogil=True, fastmath={"reassoc"})
def _g_sum(ys, ls, hs, ws, m, lam):
    """sum_k w_k clip(y_k - lam w_k, l_k, h_k) over k < m (vectorizable; only the order of the sum is free)."""
    s = 0.0
    for k in range(m):
        x = ys[k] - lam * at(ws, k)
        x = x if x > at(ls, k) else at(ls, k)
        x = x if x < at(hs, k) else at(hs, k)
        s += at(ws, k) * x
    return s


@njit(cache=True, nogil=True)
def _settle_part(y, lo, hi, w, L, U, c0, c1, sums, out, base, cap):
    """Chunks c0 <= c < c1 of 1024 coordinates: the sums of the coordinates settled on (L, U) into
    sums[c] (fixed, free_c, free_s), the undecided ones' data compacted, in index order, to
    positions base, base + 1, ... of each quarter of ``out`` (y; lo, hi, w when arrays). Returns the
    count kept, or -1 when it would reach ``cap``. Parts of the chunk range may run in threads."""
    n = y.size
    q = n // 4
    m = 0
    keep = np.zeros(1024, np.bool_)
    words = keep.view(np.uint64)                 # eight flags per word: zero words are skipped
    for c in range(c0, c1):
        j0 = c * 1024
        j1 = min(j0 + 1024, n)
        f1, f2, f3, cnt = _settle_chunk(y, lo, hi, w, j0, j1, L, U, keep)
        sums[c, 0] = f1
        sums[c, 1] = f2
        sums[c, 2] = f3
        if m + cnt >= cap:            # (< cap: the branch-free writes below stay inside the region)
            return -1
        if cnt == 0:
            continue
        if 16 * cnt < j1 - j0:
            # few kept (a narrow bracket): words of eight flags, most of them zero, then a branch
            # per coordinate of the others
            nw = (j1 - j0 + 7) // 8
            for t in range(nw):
                if words[t] == 0:
                    continue
                for j in range(j0 + 8 * t, min(j0 + 8 * t + 8, j1)):
                    if keep[j - j0]:
                        out[base + m] = y[j]
                        _put(lo, out, q + base + m, j)          # data given as numbers are not copied
                        _put(hi, out, 2 * q + base + m, j)
                        _put(w, out, 3 * q + base + m, j)
                        m += 1
            continue
        for j in range(j0, j1):
            # branch-free compaction: written always, kept when the flag says so
            out[base + m] = y[j]
            _put(lo, out, q + base + m, j)
            _put(hi, out, 2 * q + base + m, j)
            _put(w, out, 3 * q + base + m, j)
            m += np.int64(keep[j - j0])
    return m


@njit(cache=True, nogil=True)
def _settled_sums(sums):
    """The per-chunk sums added in chunk order (the same bits however the chunks were split)."""
    fixed = 0.0
    free_c = 0.0
    free_s = 0.0
    for c in range(sums.shape[0]):
        fixed += sums[c, 0]
        free_c += sums[c, 1]
        free_s += sums[c, 2]
    return fixed, free_c, free_s


@njit(cache=True, nogil=True)
def _capped_finish(y, lo, hi, w, total, out, m, sums, L, U):
    """The multiplier from the settled sums and the m compacted undecided coordinates (in the
    quarters of ``out``): g(L), g(U) checked exactly, narrowing rounds, the search rounds; NaN when
    the guessed bracket fails its check."""
    n = y.size
    q = n // 4
    fixed, free_c, free_s = _settled_sums(sums)
    ys = out[0:m]
    ls = _part(lo, out[q:q + m])
    hs = _part(hi, out[2 * q:2 * q + m])
    ws = _part(w, out[3 * q:3 * q + m])
    base = fixed + free_c
    gL = base - L * free_s + _g_sum(ys, ls, hs, ws, m, L) if L > -np.inf else np.inf
    gU = base - U * free_s + _g_sum(ys, ls, hs, ws, m, U) if U < np.inf else -np.inf
    if not (gL >= total and gU <= total):
        return np.nan
    piv = np.empty(128)
    vals = np.empty(15)
    seed = np.full(1, 88172645463325252, np.int64)
    while m > 256:
        m2, fixed, free_c, free_s, L, U, gL, gU = _capped_narrow(ys, ls, hs, ws, m, fixed, free_c,
                                                                 free_s, L, U, gL, gU, total, piv,
                                                                 vals, seed)
        if m2 == m:
            break
        m = m2
    first = np.nan
    if L > -np.inf and U < np.inf and gL > gU:
        t = L + (gL - total) * ((U - L) / (gL - gU))
        if t > L and t < U:
            first = t
    return _capped_rounds(ys, ls, hs, ws, total, np.arange(m), m, fixed, free_c, free_s, L, U, gL, gU,
                          first, np.empty(0))


@njit(cache=True, nogil=True)
def _capped_bracketed(y, lo, hi, w, total, out, L, U):
    """The multiplier given a guessed bracket (L, U) (see :func:`capped_project_long`), NaN when the
    guess fails its exact check or leaves n/4 or more coordinates undecided."""
    n = y.size
    nch = (n + 1023) // 1024
    sums = np.empty((nch, 3))
    m = _settle_part(y, lo, hi, w, L, U, 0, nch, sums, out, 0, n // 4)
    if m < 0:
        return np.nan
    return _capped_finish(y, lo, hi, w, total, out, m, sums, L, U)


@njit(cache=True, nogil=True)
def _write_clipped_range(y, lo, hi, w, lam, out, j0, j1):
    """out[j] = clip(y_j - lam w_j, lo_j, hi_j) for j0 <= j < j1 (selects, so the loop vectorizes;
    parts may run in threads)."""
    for j in range(j0, j1):
        x = y[j] - lam * at(w, j)
        x = x if x > at(lo, j) else at(lo, j)
        out[j] = x if x < at(hi, j) else at(hi, j)


# single vectors at least this long split the settling and writing passes of the budget projection
# over threads (capped_project_threads)
THREAD_ROW = 1 << 19


def capped_project_threads(y, lo, hi, w, total, out, k, pool):
    """:func:`capped_project_long` with its two passes over the data split over ``k`` threads of
    ``pool``: the same steps, the settled sums added in chunk order and the undecided coordinates
    gathered in index order, so the same multiplier and x bit for bit (whatever k)."""
    n = y.size
    q = n // 4
    nch = (n + 1023) // 1024
    cuts = [nch * i // k for i in range(k + 1)]
    lam = np.nan
    for margin in (1.0, 6.0):
        L, U, ok = _capped_sample_bracket(y, lo, hi, w, total, margin)
        if not ok:
            break
        sums = np.empty((nch, 3))
        region = q // k
        futs = [pool.submit(_settle_part, y, lo, hi, w, L, U, cuts[i], cuts[i + 1], sums, out, i * region, region)
                for i in range(1, k)]
        counts = [_settle_part(y, lo, hi, w, L, U, cuts[0], cuts[1], sums, out, 0, region)]
        counts += [f.result() for f in futs]
        if min(counts) < 0:
            # a part ran out of its share of the quarters (undecided coordinates bunched together):
            # the serial pass, whose only limit is the whole quarter, decides as capped_project_long does
            lam = _capped_bracketed(y, lo, hi, w, total, out, L, U)
            if not np.isnan(lam):
                break
            continue
        # gather the parts' undecided coordinates behind each other (index order), in every quarter used
        quarters = [0] + [qq for qq, v in ((1, lo), (2, hi), (3, w)) if isinstance(v, np.ndarray)]
        m = counts[0]
        for i in range(1, k):
            c = counts[i]
            for qq in quarters:
                src = qq * q + i * region
                out[qq * q + m:qq * q + m + c] = out[src:src + c]
            m += c
        lam = _capped_finish(y, lo, hi, w, total, out, m, sums, L, U)
        if not np.isnan(lam):
            break
    if np.isnan(lam):
        lam = _capped_lambda(y, lo, hi, w, total, out.view(np.int64))
    cw = [n * i // k for i in range(k + 1)]
    futs = [pool.submit(_write_clipped_range, y, lo, hi, w, lam, out, cw[i], cw[i + 1]) for i in range(1, k)]
    _write_clipped_range(y, lo, hi, w, lam, out, cw[0], cw[1])
    for f in futs:
        f.result()
    return lam


@njit(cache=True, nogil=True)
def capped_project_long(y, lo, hi, w, total, out):
    """One long vector onto {lo <= x <= hi, <w, x> = total}, writing x into ``out``; returns the multiplier.

    The same multiplier as :func:`_capped_search` (up to
    the order of its sums), by a route that reads the data twice: a bracket (L, U) guessed
    from a sample (:func:`_capped_sample_bracket`); one pass, in chunks of 1024, that settles
    every coordinate whose status is constant on (L, U) into running sums and copies the
    undecided coordinates' data into ``out`` (a quarter each for y, lo, hi, w); g(L) and
    g(U) evaluated exactly on that compact set, which checks the guess; narrowing rounds
    (:func:`_capped_narrow`, about 4x fewer undecided each) and the search rounds
    (:func:`_capped_rounds`) on it; one pass writing x. The first guess is narrow (the sample's
    breakpoints sqrt(K) + 8 ranks either side of its root); if it is wrong (g(L) < total,
    g(U) > total, or n/4 or more undecided) a wide one (6 sqrt(K) + 8 ranks) is tried, then the full
    search runs instead, with ``out`` as its index buffer. Data equal at every coordinate may be
    passed as numbers (:func:`at`). Memory: ``out``, 1024 flags and O(sqrt n)-sized
    samples. Expected O(n).
    Requires finite lo, w > 0, sum w lo <= total <= sum w hi, n >= LONG_ROW.
    """
    lam = np.nan
    for margin in (1.0, 6.0):
        # a narrow guess first (about 5% of the coordinates undecided on random data); when the
        # check fails, a wide one (the sample's root may sit several sqrt(K) ranks off, e.g. on
        # sorted data), then the full search
        L, U, ok = _capped_sample_bracket(y, lo, hi, w, total, margin)
        if not ok:
            break
        lam = _capped_bracketed(y, lo, hi, w, total, out, L, U)
        if not np.isnan(lam):
            break
    if np.isnan(lam):
        # no usable bracket: the full search, with ``out`` as its index buffer
        lam = _capped_lambda(y, lo, hi, w, total, out.view(np.int64))
    _write_clipped_range(y, lo, hi, w, lam, out, 0, y.size)
    return lam


# rows up to this long try the safeguarded Newton iteration first (capped_newton)
NEWTON_ROW = 4096


@njit(cache=True, nogil=True, fastmath={"reassoc"})
def _capped_piece(y, lo, hi, w, lam):
    """The linear piece of g at lam: (sum of w x over coordinates at a bound, sum of w y and of w^2
    over the free ones), with x = y - lam w compared to the bounds. Vectorizable (only the order
    of the sums is left to the compiler; the same data and lam give the same bits)."""
    fixed = 0.0
    free_c = 0.0
    free_s = 0.0
    for j in range(y.size):
        wj = w[j]
        x = y[j] - lam * wj
        up = x >= hi[j]
        down = (x <= lo[j]) & ~up
        free = ~(up | down)
        fixed += wj * hi[j] if up else (wj * lo[j] if down else 0.0)
        free_c += wj * y[j] if free else 0.0
        free_s += wj * wj if free else 0.0
    return fixed, free_c, free_s


@njit(cache=True, nogil=True)
def capped_newton(y, lo, hi, w, total):
    """Multiplier of the capped weighted simplex by safeguarded Newton steps on g; NaN if it stalls.

    g(lam) = sum w clip(y - lam w, lo, hi) is piecewise linear: at lam it equals
    fixed + free_c - lam free_s (:func:`_capped_piece`), and the Newton step
    (fixed + free_c - total) / free_s is the root of that piece. A step is accepted when it
    lies strictly inside the bracket (L, U) kept from the signs of g - total; otherwise (or
    after two moves of the same end) the secant of the bracket, or an outward doubling while
    one end is infinite. The answer is returned when a Newton step lands on the piece it came
    from (its sums repeat, so g = total there up to rounding), or g = total exactly. Each step
    is one vectorized pass, O(n); a few steps for typical rows. After 60 steps it gives up
    (NaN) and the caller runs the breakpoint search.
    """
    L = -np.inf
    U = np.inf
    gL = np.inf
    gU = -np.inf
    sw = 0.0
    sy = 0.0
    for j in range(y.size):
        sw += w[j] * w[j]
        sy += w[j] * y[j]
    lam = (sy - total) / sw if sw > 0.0 else 0.0          # every coordinate free
    newton = False
    pf = np.nan
    pc = np.nan
    ps = np.nan
    side = 0
    same = 0
    for _ in range(60):
        fixed, free_c, free_s = _capped_piece(y, lo, hi, w, lam)
        if newton and fixed == pf and free_c == pc and free_s == ps:
            return lam                                     # the step stayed on its piece: the root
        g = fixed + free_c - lam * free_s
        if g == total:
            return lam
        if g > total:
            L = lam
            gL = g
            same = same + 1 if side == 1 else 1
            side = 1
        else:
            U = lam
            gU = g
            same = same + 1 if side == -1 else 1
            side = -1
        nxt = np.nan
        newton = False
        if free_s > 0.0 and same < 3:
            t = (fixed + free_c - total) / free_s
            if t == lam:
                return lam                                 # lam is the root of its own piece
            if t > L and t < U:
                nxt = t
                newton = True
                pf = fixed
                pc = free_c
                ps = free_s
        if np.isnan(nxt):
            same = 0
            if L > -np.inf and U < np.inf:
                t = L + (gL - total) * ((U - L) / (gL - gU))
                nxt = t if (t > L and t < U) else 0.5 * (L + U)
                if not (nxt > L and nxt < U):
                    break                                  # no float strictly inside: let the search decide
            elif U < np.inf:
                nxt = U - 2.0 * max(1.0, abs(U))
            else:
                nxt = L + 2.0 * max(1.0, abs(L))
            if not np.isfinite(nxt):
                break
        lam = nxt
    return np.nan


@njit(cache=True, nogil=True)
def _capped_rows_nb(Y, lo, hi, w, total, rows, out, lams):
    """The listed rows of Y onto the capped weighted simplex, into ``out``; multipliers into ``lams``.

    Rows up to NEWTON_ROW take the safeguarded Newton iteration (:func:`capped_newton`); the others, and rows where Newton
    stalls, the randomized breakpoint search with the output row as its index buffer (no allocation).
    (Rows of at least LONG_ROW coordinates go to :func:`capped_project_long` from
    :func:`project_capped`: kept out of this kernel so that its first compilation stays short.)
    """
    b, n = Y.shape
    for r in rows:
        lam = capped_newton(Y[r], lo, hi, w, total) if n <= NEWTON_ROW else np.nan
        if np.isnan(lam):
            lam = _capped_lambda(Y[r], lo, hi, w, total, out[r].view(np.int64))
        lams[r] = lam
        for j in range(n):
            out[r, j] = min(max(Y[r, j] - lam * w[j], lo[j]), hi[j])


@njit(cache=True, nogil=True)
def rows_max_abs(Y, rows):
    """max_j |Y[r, j]| for each listed row r (0 for empty rows), without a temporary array (finite Y)."""
    out = np.zeros(rows.size)
    for k in range(rows.size):
        out[k] = _max_abs(Y[rows[k]])
    return out


def _vector(v, shape):
    if isinstance(v, np.ndarray) and v.dtype == np.float64 and v.shape == shape and v.flags.c_contiguous:
        return v
    return np.ascontiguousarray(np.broadcast_to(np.asarray(v, dtype=float), shape))


def _split(a):
    """Veltkamp's split of a (|a| <= 2^996): a = hi + lo with hi holding the top 26 bits."""
    t = 134217729.0 * a
    hi = t - (t - a)
    return hi, a - hi


def two_product(a, b):
    """(p, e) with p = fl(a b) and p + e = a b exactly (Dekker 1971), elementwise, no FMA needed.

    The factors are first scaled to mantissas in [0.5, 1) by their binary exponents, so the
    split cannot overflow; e is exact unless a b is below ~1e-290 (subnormal partial terms)."""
    ma, ea = np.frexp(a)
    mb, eb = np.frexp(b)
    p = ma * mb
    ah, al = _split(ma)
    bh, bl = _split(mb)
    e = ((ah * bh - p) + ah * bl + al * bh) + al * bl
    ex = ea + eb
    with np.errstate(over="ignore"):
        return np.ldexp(p, ex), np.ldexp(e, ex)


def shift_by_multiplier(Y, w, lam):
    """Rows y - lam w, computed so that coordinates near lam w lose nothing to cancellation.

    lam w is formed exactly as p + e (:func:`two_product`); y - p is exact where y is
    within a factor 2 of p (Sterbenz), and only the final subtraction of the small e rounds.
    Results are kept within +-1e300 (beyond that a coordinate sits at a bound anyway).
    """
    p, e = two_product(lam[:, None], np.broadcast_to(w, Y.shape))
    with np.errstate(over="ignore", invalid="ignore"):
        Z = (Y - p) - e
    return np.clip(np.nan_to_num(Z, nan=0.0), -1e300, 1e300)


def _float_key(x):
    """An int64 that orders like the float x (adjacent floats have adjacent keys)."""
    i = int(np.array(x, dtype=np.float64).view(np.int64))
    return i if i >= 0 else -(i & 0x7FFFFFFFFFFFFFFF)


def _key_float(k):
    i = k if k >= 0 else (-k) | (-0x8000000000000000)
    return float(np.array(i, dtype=np.int64).view(np.float64))


def _root_breakpoint(y, lo, hi, w, total):
    """A float c next to the root of g(lam) = sum w clip(y - lam w, lo, hi) = total.

    g is evaluated on y - c w formed by :func:`shift_by_multiplier` (no cancellation);
    outside the finite breakpoints the end breakpoint is returned, otherwise a
    bisection on the ordered bit patterns of the floats (at most 64 evaluations,
    O(n) each) ends at adjacent floats c < c' with g(c) >= total > g(c'). After
    shifting by c the free coordinates are at the scale of the answer.
    """
    with np.errstate(over="ignore", invalid="ignore"):
        t = np.concatenate([(y - hi) / w, (y - lo) / w])
    t = t[np.isfinite(t)]
    if t.size == 0:
        return 0.0

    def g(cs):
        Z = shift_by_multiplier(np.broadcast_to(y, (len(cs), y.size)), w, np.asarray(cs, dtype=float))
        return np.clip(Z, lo, hi) @ w

    lo_c, hi_c = float(t.min()), float(t.max())
    ends = g([lo_c, hi_c])
    if ends[0] < total:
        return lo_c
    if ends[1] >= total:
        return hi_c
    ka, kb = _float_key(lo_c), _float_key(hi_c)
    while kb - ka > 1:
        # a 32-way search on the ordered bit patterns: one batched evaluation narrows by 32
        ks = sorted({ka + (kb - ka) * j // 32 for j in range(1, 32)} - {ka, kb})
        if not ks:
            ks = [ka + 1]
        vals = g([_key_float(k) for k in ks])
        above = np.flatnonzero(vals >= total)
        below = np.flatnonzero(vals < total)
        if above.size:
            ka = ks[int(above.max())]
        if below.size:
            nb = [ks[j] for j in below if ks[j] > ka]
            if nb:
                kb = min(nb)
    return _key_float(ka)


def project_capped(Y, lo, hi, w, total, mode="equal", data_scale=None, long_data=None, out=None):
    """Project rows of Y onto {lo <= x <= hi, <w, x> = total} (mode "equal") or <= total ("at_most").

    The multiplier of the weighted sum comes from the compiled randomized
    breakpoint search (expected O(n) per row); lower bounds must be finite,
    upper bounds may be +inf, weights positive, and the total reachable.

    Range: the answer is x_i = clip(y_i - lam w_i, lo_i, hi_i); when |lam| w is
    far above the data (|y| ~ 1e17 and more) the subtraction would cancel, so
    such rows are solved a second time on y - lam0 w (:func:`shift_by_multiplier`,
    the same projection since the set is unchanged and only lam moves by lam0),
    where the free coordinates are small and exact. Exact up to a few ulps of
    the data for finite |y| <= 1e300 (data within the float range).

    ``long_data``: (lo, hi, w) for rows of at least LONG_ROW coordinates, each the vector or,
    when all its entries are equal, that number (:func:`uniform_or_array`; the caller computes
    it once per set); the long-row kernel then reads fewer arrays. The same answer bit for bit.
    ``out``: where to write the answer (allocated when None).
    """
    Y = np.ascontiguousarray(Y, dtype=float)
    lo, hi, w = (_vector(v, Y.shape[1:]) for v in (lo, hi, w))
    if mode == "at_most":
        X = np.clip(Y, lo, hi, out=out)
        rows = np.flatnonzero(X @ w > total)
        if rows.size == 0:
            return X
    else:
        X = np.empty_like(Y) if out is None else out
        rows = np.arange(Y.shape[0])
    if rows.size == 0:
        return X
    lams = np.zeros(Y.shape[0])
    if Y.shape[1] >= LONG_ROW:
        ld = (lo, hi, w) if long_data is None else long_data
        from .. import parallel
        k = parallel.thread_count()
        k = min(k, 8)
        if Y.shape[1] >= THREAD_ROW and k >= 2 and not parallel._in_worker():
            with parallel.held_crew(k) as pool:
                for r in rows:
                    if pool is None:       # another batch holds the crew: this one in its own thread
                        lams[r] = capped_project_long(Y[r], ld[0], ld[1], ld[2], float(total), X[r])
                    else:
                        lams[r] = capped_project_threads(Y[r], ld[0], ld[1], ld[2], float(total), X[r], k, pool)
        else:
            for r in rows:
                lams[r] = capped_project_long(Y[r], ld[0], ld[1], ld[2], float(total), X[r])
    else:
        _capped_rows_nb(Y, lo, hi, w, float(total), rows, X, lams)
    if data_scale is None:
        fin = np.concatenate([lo, hi[np.isfinite(hi)], [total]])
        data_scale = float(max(1.0, np.abs(fin).max()))
    # rows far from the data: the multiplier cannot be represented finely enough next to |y| (its
    # float grid is ulp(|y|)), so solve again on y - c w with c the breakpoint next to the root
    big = rows[rows_max_abs(Y, rows) > 1e4 * data_scale]
    if big.size:
        wmax = float(w.max(initial=1.0))
        # each shift leaves the free coordinates at about one ulp of the old multiplier, i.e. 2^-52 times
        # smaller: repeat until the multiplier is at the data's scale (at most ~20 rounds from 1e300)
        Z = Y[big].copy()
        for k in range(Z.shape[0]):
            for _ in range(40):
                c = _root_breakpoint(Z[k], lo, hi, w, total)
                if abs(c) * wmax <= 1e4 * data_scale:
                    break
                Z[k] = shift_by_multiplier(Z[k][None, :], w, np.array([c]))[0]
        Xb = np.empty_like(Z)
        _capped_rows_nb(Z, lo, hi, w, float(total), np.arange(Z.shape[0]), Xb, np.zeros(Z.shape[0]))
        X[big] = Xb
    return X


@njit(cache=True, nogil=True)
def knapsack_lmo_rows(C, lo, cap, w, room, at_most, out):
    """Rows of argmin <c, x> over {lo <= x <= cap, <w, x> = lo.w + room} (<= when ``at_most``).

    The continuous-knapsack greedy fills coordinates by increasing ratio c_i / w_i (only the
    negative ratios when at_most); a randomized selection finds the ratio where the budget runs
    out (see :func:`knapsack_lmo_rows_reference`, the same steps with branches and an index
    list). Here the candidates' ratios, weighted rooms w_i (cap_i - lo_i) and indices sit in
    compact arrays, and every pass is branch-free (selects, and compaction by advancing the
    write position by the comparison), so the random comparisons cost no mispredicted
    branches; one pass fills the cheaper side and keeps the dearer one. The same pivots, the
    same sums in the same order and the same fill order of ties: bit-identical to the
    reference. Expected O(n) per row. ``cap`` must be finite.
    """
    b, n = C.shape
    ii = np.empty(n, np.int64)
    rr = np.empty(n)
    ww = np.empty(n)
    wroom = np.empty(n)
    live = np.empty(n, np.bool_)
    for i in range(n):
        wroom[i] = w[i] * (cap[i] - lo[i])
        live[i] = cap[i] > lo[i]
    p3 = np.empty(3)
    for row in range(b):
        seed = np.int64(2862933555777941757)    # per row: a row's answer never depends on its batch
        crow = C[row]
        orow = out[row]
        m = 0
        for i in range(n):
            orow[i] = lo[i]
            ri = crow[i] / w[i]
            ii[m] = i
            rr[m] = ri
            ww[m] = wroom[i]
            m += np.int64(live[i] and (not at_most or ri < 0.0))
        R = room
        while m > 0 and R > 0.0:
            for t in range(3):
                seed = seed * 6364136223846793005 + 1442695040888963407
                p3[t] = rr[((seed >> 20) & 0x7FFFFFFFFFF) % m]
            p = max(min(p3[0], p3[1]), min(max(p3[0], p3[1]), p3[2]))
            s_less = 0.0
            s_eq = 0.0
            for k in range(m):
                v = rr[k]
                x = ww[k]
                s_less += x if v < p else 0.0
                s_eq += x if v == p else 0.0
            if s_less >= R:
                m2 = 0
                for k in range(m):
                    v = rr[k]
                    rr[m2] = v
                    ww[m2] = ww[k]
                    ii[m2] = ii[k]
                    m2 += np.int64(v < p)
                m = m2
                continue
            R -= s_less
            if s_eq >= R:
                # the budget runs out among the ties at p: the cheaper side full, the ties in index order
                for k in range(m):
                    j = ii[k]
                    orow[j] = cap[j] if rr[k] < p else orow[j]
                for k in range(m):
                    if rr[k] == p and R > 0.0:
                        j = ii[k]
                        if ww[k] <= R:
                            orow[j] = cap[j]
                            R -= ww[k]
                        else:
                            orow[j] = lo[j] + R / w[j]
                            R = 0.0
                break
            R -= s_eq
            m2 = 0
            for k in range(m):          # fill the cheaper side and the ties, keep the dearer side
                v = rr[k]
                j = ii[k]
                orow[j] = cap[j] if v <= p else orow[j]
                rr[m2] = v
                ww[m2] = ww[k]
                ii[m2] = j
                m2 += np.int64(v > p)
            m = m2


@njit(cache=True, nogil=True)
def knapsack_lmo_rows_reference(C, lo, cap, w, room, at_most, out):
    """The previous LMO kernel (branches, an index list), kept as a reference for the tests.

    Rows of argmin <c, x> over {lo <= x <= cap, <w, x> = lo.w + room} (<= when ``at_most``).

    The continuous-knapsack greedy fills coordinates by increasing ratio c_i / w_i
    (only the negative ratios when at_most); instead of sorting, a randomized
    selection finds the ratio where the budget runs out: each round partitions the
    candidates around a pivot ratio, fills the cheaper side completely when it fits
    and recurses into the side that holds the last unit. Expected O(n) per row.
    ``cap`` must be finite (the budget bounds every coordinate).
    """
    b, n = C.shape
    idx = np.empty(n, np.int64)
    r = np.empty(n)
    p3 = np.empty(3)
    for row in range(b):
        seed = np.int64(2862933555777941757)    # per row: a row's answer never depends on its batch
        m = 0
        for i in range(n):
            out[row, i] = lo[i]
            ri = C[row, i] / w[i]
            r[i] = ri
            if cap[i] > lo[i] and (not at_most or ri < 0.0):
                idx[m] = i
                m += 1
        R = room
        while m > 0 and R > 0.0:
            # pivot: median of three random candidate ratios
            for t in range(3):
                seed = seed * 6364136223846793005 + 1442695040888963407
                p3[t] = r[idx[((seed >> 20) & 0x7FFFFFFFFFF) % m]]
            p = max(min(p3[0], p3[1]), min(max(p3[0], p3[1]), p3[2]))
            s_less = 0.0
            s_eq = 0.0
            for k in range(m):
                j = idx[k]
                if r[j] < p:
                    s_less += w[j] * (cap[j] - lo[j])
                elif r[j] == p:
                    s_eq += w[j] * (cap[j] - lo[j])
            if s_less >= R:
                m2 = 0
                for k in range(m):
                    j = idx[k]
                    if r[j] < p:
                        idx[m2] = j
                        m2 += 1
                m = m2
                continue
            # everything cheaper than the pivot fits: fill it completely
            for k in range(m):
                j = idx[k]
                if r[j] < p:
                    out[row, j] = cap[j]
            R -= s_less
            if s_eq >= R:
                for k in range(m):
                    j = idx[k]
                    if r[j] == p and R > 0.0:
                        room_j = w[j] * (cap[j] - lo[j])
                        if room_j <= R:
                            out[row, j] = cap[j]
                            R -= room_j
                        else:
                            out[row, j] = lo[j] + R / w[j]
                            R = 0.0
                break
            for k in range(m):
                j = idx[k]
                if r[j] == p:
                    out[row, j] = cap[j]
            R -= s_eq
            m2 = 0
            for k in range(m):
                j = idx[k]
                if r[j] > p:
                    idx[m2] = j
                    m2 += 1
            m = m2


@njit(cache=True, nogil=True)
def scaled_norm(v, n):
    """||v[:n]||_2 without overflow or underflow: the plain sum, rescaled by max |v_j| when it
    overflows or may have lost terms to underflow. Exact up to rounding for every finite v."""
    s = 0.0
    for j in range(n):
        s += v[j] * v[j]
    if s < np.inf and s > 1e-280:
        return np.sqrt(s)
    m = 0.0
    for j in range(n):
        a = abs(v[j])
        if a > m:
            m = a
    if m == 0.0 or not m < np.inf:
        return m
    s = 0.0
    for j in range(n):
        a = v[j] / m
        s += a * a
    return m * np.sqrt(s)


@njit(cache=True, nogil=True)
def simplex_distance_rows(Y, total, at_most):
    """||y - proj(y)|| per row for {x >= 0, sum x = total} (or <= total), without forming proj(y).

    The threshold tau by Condat's method (sorted fallback) on the row shifted by
    its maximum (see :func:`shift_to_top`), and a norm that neither overflows nor
    underflows: exact up to rounding for finite |y| <= 1e300. O(n) per row.
    """
    b, n = Y.shape
    out = np.empty(b)
    cand = np.empty(n)
    wait = np.empty(n)
    z = np.empty(n)
    e = np.empty(n)
    for r in range(b):
        y = Y[r]
        if at_most:
            s = 0.0
            for j in range(n):
                s += max(y[j], 0.0)
            if s <= total:
                for j in range(n):
                    e[j] = min(y[j], 0.0)
                out[r] = scaled_norm(e, n)
                continue
        if total == 0.0:
            for j in range(n):
                e[j] = y[j]
            out[r] = scaled_norm(e, n)
            continue
        top = y[0]
        for j in range(n):
            if y[j] > top:
                top = y[j]
        for j in range(n):
            z[j] = max(y[j] - top, -2.0 * total)
        tau = _simplex_tau(z, total, cand, wait)
        if np.isnan(tau):
            u = -np.sort(-z)
            cs = 0.0
            for k in range(n):
                cs += u[k]
                t = (cs - total) / (k + 1)
                if u[k] > t:
                    tau = t
        for j in range(n):
            e[j] = y[j] - max(z[j] - tau, 0.0)
        out[r] = scaled_norm(e, n)
    return out
