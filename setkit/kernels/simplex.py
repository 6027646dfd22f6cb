"""Exact projections onto simplices and weighted capped simplices (continuous quadratic knapsack).

All functions are pure, batched over rows and exact up to rounding (no iterative
tolerance): they find the threshold of the KKT conditions by sorting or by
breakpoint search.
"""
from __future__ import annotations

import numpy as np


def project_simplex_rows(Y: np.ndarray, total: float) -> np.ndarray:
    """Project each row of Y onto {x >= 0, sum x = total}.

    Sort-based threshold (Held, Wolfe and Crowder 1974; Duchi et al. 2008):
    x = max(y - tau, 0) with tau from the sorted prefix sums. O(b n log n).
    """
    b, n = Y.shape
    if total == 0.0:
        return np.zeros_like(Y)
    if b == 1 and n > 4096:
        return project_simplex_large(Y[0], total)[None, :]
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
        mid = (L + U) / 2 if np.isfinite(L) and np.isfinite(U) else (L + 1 if np.isfinite(L) else U - 1)
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


def project_capped(Y, lo, hi, w, total, mode="equal"):
    """Project rows of Y onto {lo <= x <= hi, <w, x> = total} (mode "equal") or <= total ("at_most")."""
    X = np.clip(Y, lo, hi)
    if mode == "at_most":
        need = X @ w > total
        if not need.any():
            return X
        rows = np.flatnonzero(need)
    else:
        rows = np.arange(Y.shape[0])
    Ys = Y[rows]
    if Ys.shape[0] == 1:
        lam = np.array([capped_threshold(Ys[0], lo, hi, w, total)])
    else:
        lam = capped_threshold_rows(Ys, lo, hi, w, total)
    X[rows] = np.clip(Ys - lam[:, None] * w, lo, hi)
    return X
