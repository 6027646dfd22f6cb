"""Bregman projections for the generalized relative entropy (KL), on flat batches in the log domain.

Every function here takes ``T``, a ``(b, dim)`` batch of t = log y (y > 0 implied),
and returns X with rows

    x = argmin_{x in K} KL(x || y),   KL(x || y) = sum_i x_i log(x_i / y_i) - x_i + y_i

(0 log 0 = 0). Working from t rather than y keeps multiplicative updates
(y = x * exp(-eta * gradient)) representable: t may be far outside [-745, 709],
where exp(t) under- or overflows, and the answers stay exact to rounding.

What each method rests on (first-order conditions of the problem above):

* simplex {x >= 0, sum x = total}: x = total * softmax(t) (common practice);
  mode at_most keeps x = y when sum y <= total.
* box [lower, upper] with lower >= 0: separable, x = clip(y, lower, upper).
* budget {lower <= x <= upper, <w, x> = total}: x_i = clip(y_i exp(-lam w_i), lower_i,
  upper_i) for the multiplier lam of the weighted sum (the capping rule of the capped
  simplex); the sum is monotone in lam, and lam is bracketed between two of the 2n
  breakpoints by selection (pivots from a random sample, then random pivots: expected
  O(n)), then found in closed form (equal weights) or by Newton's method on the last
  smooth piece, where the sum is convex and decreasing (unequal weights).
* permutahedron P(w), w >= 0: with t sorted decreasingly (s) and w sorted
  decreasingly, x_sorted = exp(s - v) where v is the non-increasing minimizer of
  sum_i exp(s_i - v_i) + w_i v_i (the dual of the majorization constraints; the
  method of Lim & Wright 2016 for Bregman projections onto the permutahedron).
  Pool-adjacent-violators solves it exactly; a block B takes the value
  v_B = logsumexp(s_B) - log(sum_B w), so inside a block x is proportional to y
  and sums to the block's weights. O(n log n) for the sort, O(n) for the pooling.
* transport {X >= 0, X 1 = rows, X^T 1 = cols}: X = diag(u) Y diag(v) (Sinkhorn 1964),
  found by Sinkhorn-Knopp scaling with the scalings absorbed into log-domain
  potentials whenever they grow large (stabilized scaling), stopped on the measured
  largest marginal residual; damped Newton steps on the same dual finish nearly
  decomposable matrices, where scaling converges slowly.
* flow {B x = supply, lo <= x <= hi}: x_e = clip(y_e exp(pi_tail - pi_head), lo_e, hi_e) for
  node potentials pi found by damped dual Newton steps (:func:`flow_kl`), stopped on the
  measured conservation residual.
* intersections of sets that have these projections: cyclic Bregman projections with
  Dykstra's corrections (:func:`bregman_dykstra`), stopped on the parts' residual and
  the Bregman gap below.

:func:`kl_certificate` gives the Bregman analogue of the Frank-Wolfe gap, an upper
bound on KL(x || y) - KL(x* || y) computed from the set's linear minimization oracle.
"""
from __future__ import annotations

import numpy as np
from numba import njit

from ..errors import InputError, SolveError, UnsupportedOperationError
from .isotonic import decreasing_order

__all__ = ["kl_divergence", "kl_certificate", "simplex_kl", "box_kl", "budget_kl",
           "permutahedron_kl", "permutahedron_kl_jvp", "sinkhorn_kl", "transport_kl_jvp", "flow_kl", "bregman_dykstra"]

NORMAL = float(np.finfo(float).tiny)     # smallest normal double, 2.2e-308


def outside_orthant_error(label, why):
    """The error for a KL projection asked of a set that is not inside the nonnegative orthant."""
    return UnsupportedOperationError(
        f"project_kl on {label}: the KL (relative entropy) projection needs a set inside the nonnegative "
        f"orthant x >= 0, but {why}. Use the Euclidean projection, or intersect the set with {{x >= 0}} "
        f"(a box with lower bound 0).")


# -- values and certificates ---------------------------------------------------------------------
def kl_divergence(T, X):
    """Generalized relative entropy KL(x || exp(t)) of each row, (b,).

    sum_i x_i (log x_i - t_i) - x_i + exp(t_i), with 0 log 0 = 0; inf where exp(t)
    overflows. O(n).

    >>> import numpy as np
    >>> float(kl_divergence(np.log([[1.0, 2.0]]), np.array([[1.0, 2.0]]))[0])
    0.0
    """
    T = np.asarray(T, dtype=float)
    X = np.asarray(X, dtype=float)
    pos = X > 0
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        xlog = np.where(pos, X * (np.log(np.where(pos, X, 1.0)) - T), 0.0)
        return (xlog - X + np.exp(T)).sum(axis=1)


def kl_gradient(T, X):
    """The gradient log x - t of x -> KL(x || exp(t)) at max(x, 2.2e-308).

    Below the smallest normal double (2.2e-308) a float has lost precision and log x is
    inaccurate (0 after an underflow), so such coordinates are read as 2.2e-308: the
    gradient is then that of a point within n * 2.2e-308 of x.
    """
    return np.log(np.maximum(X, NORMAL)) - T


def kl_gap_rows(T, X, lmo_fn):
    """The Bregman gap of each row as checked on answers: (gap, V) with V = lmo_fn(G) and

        gap = <G, X - V>,  G = log X - T,  log 0 read as -745 (one below the smallest subnormal's log)

    an upper bound on KL(x||y) - KL(x*||y) for x in K (see :func:`kl_certificate`, which reads
    coordinates below 2.2e-308 as 2.2e-308 instead). One call of ``lmo_fn``, O(n).
    """
    X = np.asarray(X, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        G = np.where(X > 0, np.log(np.where(X > 0, X, 1.0)), -745.0) - T
    V = np.asarray(lmo_fn(G), dtype=float)
    return np.einsum("ij,ij->i", G, X - V), V


def kl_certificate(T, X, lmo_fn):
    """Bregman analogue of the Frank-Wolfe gap of X as KL projections of exp(T), (b,).

    For F(x) = KL(x || y), y = exp(t), and g = grad F(x) = log x - t,

        gap(x) = <g, x> - min_{v in K} <g, v> = <g, x - lmo(g)>  >=  F(x) - F(x*)

    by convexity of F (x in K assumed). It is 0 exactly at the projection; rounding
    leaves terms of order eps * sum_i |g_i| (x_i + v_i). Coordinates below 2.2e-308 are
    read as 2.2e-308 (see :func:`kl_gradient`), which moves the bound by terms of order
    n * 2.2e-308 * max |g|. One call of ``lmo_fn``, O(n).

    Parameters
    ----------
    T : (b, n) log-domain inputs t = log y.
    X : (b, n) candidate projections (points of K, >= 0).
    lmo_fn : callable mapping a (b, n) batch of directions to (b, n) minimizers over K.

    >>> import numpy as np
    >>> t = np.array([[0.0, 1.0, 2.0]])
    >>> x = np.exp(t) / np.exp(t).sum()
    >>> lmo = lambda G: np.eye(3)[np.argmin(G, axis=1)]
    >>> abs(float(kl_certificate(t, x, lmo)[0])) < 1e-14
    True
    """
    T = np.asarray(T, dtype=float)
    X = np.maximum(np.asarray(X, dtype=float), NORMAL)
    G = kl_gradient(T, X)
    V = np.asarray(lmo_fn(G), dtype=float)
    return np.einsum("ij,ij->i", G, X - V)


# -- simplex and box ------------------------------------------------------------------------------
def simplex_kl(T, total, at_most=False):
    """KL projection of exp(t) onto {x >= 0, sum x = total} (or <= total), exact, O(n) per row.

    x = total * softmax(t), computed as exp(t - m) * total / sum exp(t - m) with
    m = max t (no overflow); at_most: x = exp(t) when logsumexp(t) <= log total.

    >>> import numpy as np
    >>> simplex_kl(np.log([[1.0, 3.0]]), 2.0).tolist()
    [[0.5, 1.5]]
    """
    T = np.asarray(T, dtype=float)
    b, n = T.shape
    if total <= 0.0 or n == 0:
        return np.zeros_like(T)
    m = T.max(axis=1, keepdims=True)
    E = np.exp(T - m)
    S = E.sum(axis=1, keepdims=True)
    X = E * (total / S)
    if at_most:
        # sum y <= total  <=>  m + log S <= log total
        keep = (m[:, 0] + np.log(S[:, 0])) <= np.log(total)
        if keep.any():
            X[keep] = np.exp(T[keep])
    return X


def box_kl(T, lower, upper, label="box"):
    """KL projection of exp(t) onto [lower, upper] (lower >= 0): x = clip(exp(t), lower, upper), O(n).

    Raises InputError when a coordinate without an upper bound would take the value
    exp(t_i) > 1.8e308 (the answer is not a float64 number).

    >>> import numpy as np
    >>> box_kl(np.log([[0.5, 4.0]]), np.array([1.0, 0.0]), np.array([2.0, 3.0])).tolist()
    [[1.0, 3.0]]
    """
    T = np.asarray(T, dtype=float)
    with np.errstate(over="ignore"):
        X = np.clip(np.exp(T), lower, upper)
    if not np.isfinite(X).all():
        i, j = (int(v) for v in np.argwhere(~np.isfinite(X))[0])
        raise InputError(f"project_kl on {label}: coordinate {j} has no upper bound and log input "
                         f"t = {T[i, j]:.6g} (row {i}), so the projection exp(t) overflows float64; "
                         f"log inputs must stay below 709.78 on unbounded coordinates.")
    return X


# -- budget: capped, weighted simplex -------------------------------------------------------------
@njit(cache=True, error_model="numpy")
def _xorshift(state):
    state ^= (state << np.uint64(13)) & np.uint64(0xFFFFFFFFFFFFFFFF)
    state ^= state >> np.uint64(7)
    state ^= (state << np.uint64(17)) & np.uint64(0xFFFFFFFFFFFFFFFF)
    return state


@njit(cache=True, error_model="numpy")
def _clip_exp(v, lo, hi):
    ev = np.exp(v)
    if ev < lo:
        return lo
    if ev > hi:
        return hi
    return ev


@njit(cache=True, error_model="numpy")
def _bpa(t, lhi, w, i, sb, sw):
    """Breakpoint a_i = (t_i - log upper_i) / w_i: coordinate i is at its upper bound for lam <= a_i."""
    return (t[i] - lhi[i * sb]) / w[i * sw]


@njit(cache=True, error_model="numpy")
def _bpb(t, llo, w, i, sb, sw):
    """Breakpoint b_i = (t_i - log lower_i) / w_i: coordinate i is at its lower bound for lam >= b_i."""
    return (t[i] - llo[i * sb]) / w[i * sw]


@njit(cache=True, error_model="numpy")
def _budget_value(p, t, lo, hi, w, sb, sw, idx, ident, na, free, nf, cst, uniform, fast, M, S, m, e, w0):
    """The weighted sum of x(p) = clip(exp(t - p w), lo, hi): settled part, free part, coordinates in play."""
    val = cst
    if uniform:
        if S > 0.0:
            val += w0 * S * np.exp(m - p * w0)
    else:
        for k in range(nf):
            i = free[k]
            val += w[i * sw] * np.exp(t[i] - p * w[i * sw])
    if fast and abs(M - p * w0) <= 700.0:
        # exp(t_i - p w0) = e_i exp(M - p w0): one product per coordinate (both factors in range)
        C = np.exp(M - p * w0)
        acc = 0.0
        for k in range(na):
            i = k if ident else idx[k]
            v = e[i] * C
            if v < lo[i * sb]:
                v = lo[i * sb]
            elif v > hi[i * sb]:
                v = hi[i * sb]
            acc += v
        val += w0 * acc
    else:
        for k in range(na):
            i = k if ident else idx[k]
            val += w[i * sw] * _clip_exp(t[i] - p * w[i * sw], lo[i * sb], hi[i * sb])
    return val


@njit(cache=True, error_model="numpy")
def _budget_row(t, lo, hi, llo, lhi, w, sb, sw, ident, e, fast, total, at_most, uniform, seed, side, idx, free,
                samp, Mgiven):
    """The multiplier of one row of the budget KL projection; returns (status, lam, shift).

    ``sb``, ``sw``: 0 when the bounds (lo, hi, llo, lhi) or the weights are one number (read at
    index 0; less memory traffic), else 1. ``ident``: no fixed coordinate, so the coordinates in
    play are 0..n-1 until the first settling; ``Mgiven``: max t if known (else -inf);
    ``e`` = exp(t - max t) when ``fast`` (equal weights, log
    inputs spanning at most 700: a trial sum then costs one product per coordinate). Writes
    ``side`` (0: lower bound, 1: upper bound, 2: x_i = exp(t_i + shift) for equal weights,
    exp(t_i - lam w_i) otherwise, clipped). status 0: solved; 1: Newton did not settle.
    The multiplier is bracketed between breakpoints: first (many coordinates in play) by two
    pivots read off a random sample's own root, then by random breakpoints (quickselect).
    """
    n = t.size
    const = 0.0
    na = 0
    wlo = 0.0
    whi = 0.0
    M = -np.inf
    if sb == 0 and sw == 0 and ident and Mgiven > -np.inf:
        # one lower bound, one upper bound, one weight and no fixed coordinate: nothing to scan
        side[:] = 2
        na = n
        wlo = n * w[0] * lo[0]
        whi = n * w[0] * hi[0]
        M = Mgiven
    for i in range(n if na == 0 else 0):
        if lo[i * sb] == hi[i * sb]:
            const += w[i * sw] * lo[i * sb]
            side[i] = 0
        else:
            if not ident:
                idx[na] = i
            na += 1
            wlo += w[i * sw] * lo[i * sb]
            whi += w[i * sw] * hi[i * sb]
            side[i] = 2
        if t[i] > M:
            M = t[i]
    target = total - const
    if na == 0:
        return 0, 0.0, 0.0
    if target <= wlo:
        for k in range(na):
            side[k if ident else idx[k]] = 0
        return 0, np.inf, 0.0
    if (not at_most) and target >= whi:
        for k in range(na):
            side[k if ident else idx[k]] = 1
        return 0, -np.inf, 0.0
    w0 = w[(0 if ident else idx[0]) * sw]
    L = -np.inf
    R = np.inf
    cst = 0.0         # contribution of coordinates settled at a bound over (L, R)
    nf = 0            # coordinates free over all of (L, R)
    S = 0.0           # equal weights: sum over the free coordinates of exp(t_i - m)
    m = M if fast else -np.inf
    if at_most:
        g0 = _budget_value(0.0, t, lo, hi, w, sb, sw, idx, ident, na, free, nf, cst, uniform, fast, M, S, m, e, w0)
        if g0 <= target:
            return 0, 0.0, 0.0        # x = clip(y): sides stay 2 with shift 0
        L = 0.0
    state = np.uint64(seed) * np.uint64(2654435761) + np.uint64(88172645463325252)
    settle = at_most
    while na > 0:
        if settle:
            # settle the coordinates with no breakpoint inside (L, R)
            keep = 0
            if fast:
                # equal weights with e = exp(t - M): the same rule written without branches
                # (selects instead of jumps; the categories interleave at random)
                for k in range(na):
                    i = k if ident else idx[k]
                    ai = (t[i] - lhi[i * sb]) / w0
                    bi = (t[i] - llo[i * sb]) / w0
                    ins = ((L < ai) & (ai < R)) | ((L < bi) & (bi < R))
                    atlo = (not ins) & (bi <= L)
                    athi = (not ins) & (not atlo) & (ai >= R)
                    isfree = not (ins | atlo | athi)
                    if ins:
                        idx[keep] = i
                        keep += 1
                    cst += w0 * (lo[i * sb] if atlo else (hi[i * sb] if athi else 0.0))
                    side[i] = 0 if atlo else (1 if athi else 2)
                    S += e[i] if isfree else 0.0
                    nf += isfree
            else:
                for k in range(na):
                    i = k if ident else idx[k]
                    wi = w[i * sw]
                    ai = (t[i] - lhi[i * sb]) / wi
                    bi = (t[i] - llo[i * sb]) / wi
                    if (L < ai < R) or (L < bi < R):
                        idx[keep] = i
                        keep += 1
                    elif bi <= L:
                        cst += wi * lo[i * sb]
                        side[i] = 0
                    elif ai >= R:
                        cst += wi * hi[i * sb]
                        side[i] = 1
                    else:
                        # free over (L, R): side stays 2; unequal weights keep a list for the final solve
                        if not uniform:
                            free[nf] = i
                        nf += 1
                        if uniform:
                            if t[i] > m:
                                S = S * np.exp(m - t[i]) + 1.0
                                m = t[i]
                            else:
                                S += np.exp(t[i] - m)
            na = keep
            ident = False
            if na == 0:
                break
        settle = True
        if na > 4096:
            # a random sample's breakpoints, sorted; the sample's own root (its sum scaled by
            # na / size) sits between two of them; pivots a few standard deviations of rank on
            # either side bracket the true root with high probability
            ns = 0
            size = 1024
            start = state
            for _ in range(size):
                state = _xorshift(state)
                q = np.int64(state % np.uint64(na))
                j = q if ident else idx[q]
                if L < _bpa(t, lhi, w, j, sb, sw) < R:
                    samp[ns] = _bpa(t, lhi, w, j, sb, sw)
                    ns += 1
                if L < _bpb(t, llo, w, j, sb, sw) < R:
                    samp[ns] = _bpb(t, llo, w, j, sb, sw)
                    ns += 1
            if ns >= 8:
                srt = np.sort(samp[:ns])
                lo_k = 0
                hi_k = ns - 1
                scale = na / size
                while hi_k - lo_k > 1:
                    mid = (lo_k + hi_k) // 2
                    p = srt[mid]
                    est = cst
                    if uniform:
                        if S > 0.0:
                            est += w0 * S * np.exp(m - p * w0)
                    else:
                        for k in range(nf):
                            i = free[k]
                            est += w[i * sw] * np.exp(t[i] - p * w[i * sw])
                    st2 = start        # the same sample again
                    acc = 0.0
                    for _ in range(size):
                        st2 = _xorshift(st2)
                        q = np.int64(st2 % np.uint64(na))
                        j = q if ident else idx[q]
                        acc += w[j * sw] * _clip_exp(t[j] - p * w[j * sw], lo[j * sb], hi[j * sb])
                    est += scale * acc
                    if est > target:
                        lo_k = mid
                    else:
                        hi_k = mid
                d = max(8, int(3.0 * np.sqrt(ns)))
                pl = srt[max(0, lo_k - d)]
                pr = srt[min(ns - 1, hi_k + d)]
                if fast and abs(M - pl * w0) <= 700.0 and abs(M - pr * w0) <= 700.0:
                    # both trial sums in one pass: products only
                    Cl = np.exp(M - pl * w0)
                    Cr = np.exp(M - pr * w0)
                    accl = 0.0
                    accr = 0.0
                    for k in range(na):
                        i = k if ident else idx[k]
                        li = lo[i * sb]
                        hi_ = hi[i * sb]
                        vl_ = min(max(e[i] * Cl, li), hi_)
                        vr_ = min(max(e[i] * Cr, li), hi_)
                        accl += vl_
                        accr += vr_
                    vl = cst + w0 * accl + (w0 * S * np.exp(m - pl * w0) if S > 0.0 else 0.0)
                    vr = cst + w0 * accr + (w0 * S * np.exp(m - pr * w0) if S > 0.0 else 0.0)
                else:
                    vl = _budget_value(pl, t, lo, hi, w, sb, sw, idx, ident, na, free, nf, cst, uniform, fast, M, S,
                                       m, e, w0)
                    vr = _budget_value(pr, t, lo, hi, w, sb, sw, idx, ident, na, free, nf, cst, uniform, fast, M, S,
                                       m, e, w0)
                if vl > target:
                    L = pl
                    if vr > target:
                        L = pr
                    elif vr < target:
                        R = pr
                    else:
                        L = pr
                        R = pr
                elif vl < target:
                    R = pl
                else:
                    L = pl
                    R = pl
                continue
        # a random breakpoint inside (L, R) of a random coordinate in play
        state = _xorshift(state)
        q = np.int64(state % np.uint64(na))
        j = q if ident else idx[q]
        ina = L < _bpa(t, lhi, w, j, sb, sw) < R
        inb = L < _bpb(t, llo, w, j, sb, sw) < R
        if ina and inb:
            state = _xorshift(state)
            p = _bpa(t, lhi, w, j, sb, sw) if (state & np.uint64(1)) else _bpb(t, llo, w, j, sb, sw)
        elif ina:
            p = _bpa(t, lhi, w, j, sb, sw)
        else:
            p = _bpb(t, llo, w, j, sb, sw)
        val = _budget_value(p, t, lo, hi, w, sb, sw, idx, ident, na, free, nf, cst, uniform, fast, M, S, m, e, w0)
        if val > target:
            L = p
        elif val < target:
            R = p
        else:
            L = p
            R = p
    rem = target - cst
    lam = 0.0
    shift = 0.0
    status = 0
    if nf == 0 or rem <= 0.0:
        # the sum is constant between the last breakpoints: the root is a breakpoint
        lam = R if R < np.inf else L
        if rem <= 0.0:
            # nothing left for the free coordinates: they sit at their lower bounds (0)
            if uniform:
                shift = -np.inf
            else:
                for k in range(nf):
                    side[free[k]] = 0
    elif uniform:
        # w0 S exp(m - lam w0) = rem: x_i = exp(t_i + shift) without forming lam (no cancellation)
        shift = np.log(rem / (w0 * S)) - m
        lam = -shift / w0
    else:
        # sum_F w_i exp(t_i - lam w_i) = rem: convex and decreasing in lam, so Newton's method started
        # left of the root climbs to it monotonically. Start: each term <= rem there.
        lam = -np.inf
        for k in range(nf):
            i = free[k]
            v = (t[i] - np.log(rem / w[i * sw])) / w[i * sw]
            if v > lam:
                lam = v
        if lam < L:
            lam = L
        status = 1
        for _ in range(200):
            h = -rem
            dh = 0.0
            for k in range(nf):
                i = free[k]
                term = w[i * sw] * np.exp(t[i] - lam * w[i * sw])
                h += term
                dh -= w[i * sw] * term
            if h <= 4e-16 * rem * (1.0 + nf ** 0.5) or dh == 0.0:
                status = 0
                break
            nxt = lam - h / dh
            if nxt >= R:
                nxt = R
            if nxt <= lam:
                status = 0
                break
            lam = nxt
    return status, lam, shift


@njit(cache=True, error_model="numpy")
def _budget_rows(T, lo, hi, llo, lhi, w, sb, sw, ident, E, fast, Mrow, total, at_most, uniform, X, wsum, wabs,
                 status):
    """Every row: the multiplier, then the answer from the settled sides (not from lam, which
    rounding may put on a breakpoint), its weighted sum and the sum of |w x|."""
    b, n = T.shape
    idx = np.empty(n, np.int64)
    free = np.empty(n, np.int64)
    side = np.empty(n, np.int8)
    samp = np.empty(2048)
    for r in range(b):
        t = T[r]
        e = E[r] if fast[r] else E[0]
        M = Mrow[r]
        if not M > -np.inf:
            for i in range(n):
                if t[i] > M:
                    M = t[i]
        st, lam, shift = _budget_row(t, lo, hi, llo, lhi, w, sb, sw, ident, e, fast[r], total, at_most, uniform,
                                     r + 1, side, idx, free, samp, M)
        status[r] = st
        product = fast[r] and abs(M + shift) <= 700.0
        C = np.exp(M + shift) if product else 1.0
        if not uniform and not np.isfinite(lam):
            lam = 0.0
        s = 0.0
        sa = 0.0
        x = X[r]
        for i in range(n):
            sd = side[i]
            if sd == 0:
                v = lo[i * sb]
            elif sd == 1:
                v = hi[i * sb]
            else:
                if product:
                    v = e[i] * C                    # exp(t_i - M) exp(M + shift)
                elif uniform:
                    v = np.exp(t[i] + shift)
                else:
                    v = np.exp(t[i] - lam * w[i * sw])
                if v < lo[i * sb]:
                    v = lo[i * sb]
                elif v > hi[i * sb]:
                    v = hi[i * sb]
            x[i] = v
            s += w[i * sw] * v
            sa += abs(w[i * sw] * v)
        wsum[r] = s
        wabs[r] = sa


@njit(cache=True, error_model="numpy")
def _capped_rows(E, M, cap, total, at_most, rows, X, wsum, wabs, status, max_passes):
    """Capped simplex rows {0 <= x <= cap, sum x = total (or <= total)}, equal weights, by cap-set passes.

    With e = exp(t - max t), x = min(c e, cap) for the scale c > 0 solving
    f(c) = sum min(c e_i, cap) = total. f is increasing and concave (piecewise linear), so from
    c_0 = total / sum e (no coordinate capped, f(c_0) <= total) the update
    c_{k+1} = (total - cap N_k) / S_k, with N_k the coordinates capped at c_k and S_k the sum of
    the others' e, never overshoots (the line through the current piece lies above f) and
    increases c; it stops exactly when the capped set repeats (a finite search over the cap
    sets, each pass O(n) with one product per coordinate and no sort). A row still moving after
    ``max_passes`` passes gets status 2 (the caller solves it by selection instead).
    """
    n = E.shape[1]
    for k in range(rows.size):
        r = rows[k]
        e = E[r]
        x = X[r]
        S = 0.0
        for i in range(n):
            S += e[i]
        status[r] = 2
        if at_most:
            # y itself when it fits: sum min(y, cap) <= total
            c = np.exp(M[r])
            acc = 0.0
            for i in range(n):
                acc += min(c * e[i], cap)
            if acc <= total:
                for i in range(n):
                    x[i] = min(c * e[i], cap)
                wsum[r] = acc
                wabs[r] = acc
                status[r] = 0
                continue
        c = total / S
        N_prev = -1
        for _ in range(max_passes):
            lim = cap / c                  # e_i >= lim  <=>  c e_i >= cap (up to one rounding)
            N = 0
            Sf = 0.0
            for i in range(n):
                v = e[i]
                if v >= lim:
                    N += 1
                else:
                    Sf += v
            if N == N_prev or Sf <= 0.0:
                status[r] = 0
                break
            c_new = (total - cap * N) / Sf
            N_prev = N
            if c_new <= c:
                status[r] = 0
                break
            c = c_new
        if status[r] != 0:
            continue
        acc = 0.0
        for i in range(n):
            v = c * e[i]
            if v > cap:
                v = cap
            x[i] = v
            acc += v
        wsum[r] = acc
        wabs[r] = acc


def budget_structure(lower, upper, weights):
    """(equal weights, one lower and one upper bound for all, no coordinate with lower == upper)."""
    lo, hi, w = (np.asarray(v, dtype=float) for v in (lower, upper, weights))
    return (bool(np.all(w == w.flat[0])) if w.size else True,
            bool(np.all(lo == lo.flat[0]) and np.all(hi == hi.flat[0])) if lo.size else True,
            not bool(np.any(lo == hi)))


def budget_kl(T, lower, upper, weights, total, at_most=False, label="budget", log_bounds=None, structure=None):
    """KL projection of exp(t) onto {lower <= x <= upper, <w, x> = total (or <= total)}, lower >= 0, w > 0.

    x_i = clip(exp(t_i - lam w_i), lower_i, upper_i) with the multiplier lam >= 0
    (at_most) or free (equal) of the weighted sum; the sum is non-increasing in lam.
    The capped simplex (equal weights, lower 0, one upper bound) takes cap-set passes
    (:func:`_capped_rows`: each pass O(n), no sort, a handful of passes in practice, at
    most 64 before falling back). Otherwise selection among the 2n breakpoints brackets
    lam between two of them (a sampled bracket, then random pivots: expected O(n)); equal
    weights then give lam in closed form, unequal weights by Newton's method on the
    convex last piece. The weighted sum
    of the answer is measured; a relative residual above 1e-10 raises SolveError.
    ``log_bounds``: optional (log lower, log upper) and ``structure``: optional
    :func:`budget_structure`, precomputed by callers that project often.

    >>> import numpy as np
    >>> budget_kl(np.log([[4.0, 1.0, 1.0]]), np.zeros(3), np.full(3, 0.5), np.ones(3), 1.0).tolist()
    [[0.5, 0.25, 0.25]]
    """
    T = np.ascontiguousarray(T, dtype=float)
    b, n = T.shape
    lo = np.ascontiguousarray(np.broadcast_to(lower, (n,)), dtype=float)
    hi = np.ascontiguousarray(np.broadcast_to(upper, (n,)), dtype=float)
    w = np.ascontiguousarray(np.broadcast_to(weights, (n,)), dtype=float)
    if b == 0 or n == 0:
        return np.zeros((b, n))
    uniform, same_bounds, ident = structure if structure is not None else budget_structure(lo, hi, w)
    if log_bounds is None:
        with np.errstate(divide="ignore"):
            log_bounds = (np.log(lo), np.log(hi))
    llo, lhi = (np.ascontiguousarray(v, dtype=float) for v in log_bounds)
    # exp(t - max t) once, vectorized, for the product-only trial sums (equal weights, spread <= 700)
    fast = np.zeros(b, bool)
    E = np.zeros((1, n))
    M = T.max(axis=1)
    if uniform:
        fast = (M - T.min(axis=1)) <= 700.0
        if fast.any():
            E = np.subtract(T, M[:, None])
            np.exp(E, out=E)
    X = np.empty_like(T)
    s, sabs = np.empty(b), np.empty(b)
    status = np.zeros(b, np.int64)
    sb = 0 if same_bounds else 1
    w0 = float(w[0])
    cap = float(hi[0]) * w0
    todo = None
    if (uniform and same_bounds and ident and lo[0] == 0.0 and w0 > 0.0 and 0.0 < cap < np.inf
            and 0.0 < total < n * cap and fast.any()):
        # the capped simplex in z = w0 x: cap-set passes without selection; rows that keep moving fall back
        rows = np.flatnonzero(fast)
        _capped_rows(E, M + np.log(w0), cap, float(total), bool(at_most), rows, X, s, sabs, status, 64)
        if w0 != 1.0:
            X[rows] /= w0
        todo = np.flatnonzero(~fast | (status == 2))
    if todo is None:
        _budget_rows(T, lo, hi, llo, lhi, w, sb, 0 if uniform else 1, ident, E, fast, M, float(total),
                     bool(at_most), uniform, X, s, sabs, status)
    elif todo.size:
        m = todo.size
        Xt, st_, sat, stt = np.empty((m, n)), np.empty(m), np.empty(m), np.zeros(m, np.int64)
        _budget_rows(np.ascontiguousarray(T[todo]), lo, hi, llo, lhi, w, sb, 0, ident,
                     np.ascontiguousarray(E[todo]), fast[todo], M[todo], float(total), bool(at_most), uniform,
                     Xt, st_, sat, stt)
        X[todo], s[todo], sabs[todo], status[todo] = Xt, st_, sat, stt
    if not (np.isfinite(s).all() and np.isfinite(sabs).all()):
        bad = ~np.isfinite(X)
        i, j = (int(v) for v in np.argwhere(bad)[0])
        raise InputError(f"project_kl on {label}: the answer overflows float64 at coordinate {j} (row {i}, "
                         f"log input {T[i, j]:.6g}); log inputs must stay below 709.78 on coordinates "
                         f"without an upper bound.")
    scale = np.maximum(sabs, abs(total)).clip(min=1e-300)
    resid = (s - total) if at_most else np.abs(s - total)
    bad = np.flatnonzero((status != 0) | (resid > 1e-10 * scale))
    if bad.size:
        i = int(bad[0])
        raise SolveError(f"project_kl on {label}: the weighted sum of the answer misses total = {total:g} by "
                         f"{resid[i]:.3g} (row {i}, search status {int(status[i])}); allowed "
                         f"{1e-10 * scale[i]:.3g}.", status="not_converged")
    return X


# -- permutahedron ----------------------------------------------------------------------------------
@njit(cache=True, error_model="numpy")
def _permutahedron_kl_sorted(S, wdesc, logw, out):
    """Pool-adjacent-violators on v_B = logsumexp(s_B) - log(sum_B w) for rows s of S sorted decreasingly.

    Writes log x in the sorted order; the caller scatters and exponentiates (vectorized passes).
    """
    b, n = S.shape
    mx = np.empty(n)      # block maximum of s (its first entry: s is sorted decreasingly)
    se = np.empty(n)      # sum over the block of exp(s_i - mx)
    ws = np.empty(n)      # sum of the block's weights
    gam = np.empty(n)     # block value logsumexp(s_B) - log(sum_B w)
    cnt = np.empty(n, np.int64)
    for r in range(b):
        s = S[r]
        nb = 0
        for i in range(n):
            mx[nb] = s[i]
            se[nb] = 1.0
            ws[nb] = wdesc[i]
            gam[nb] = s[i] - logw[i]          # +inf for a zero weight
            cnt[nb] = 1
            nb += 1
            # v must be non-increasing: merge while the previous block's value is below the last one's
            while nb > 1 and gam[nb - 2] < gam[nb - 1]:
                p = nb - 2
                q = nb - 1
                se[p] = se[p] + se[q] * np.exp(mx[q] - mx[p])
                ws[p] = ws[p] + ws[q]
                cnt[p] += cnt[q]
                gam[p] = mx[p] + np.log(se[p] / ws[p])
                nb -= 1
        k = 0
        for blk in range(nb):
            # log x_i = s_i - gam = (s_i - mx) + log(ws / se)
            c = np.log(ws[blk] / se[blk])
            m0 = mx[blk]
            for _ in range(cnt[blk]):
                out[r, k] = (s[k] - m0) + c
                k += 1


@njit(cache=True, error_model="numpy")
def _permutahedron_kl_sorted_scaled(E, wdesc, out):
    """The same pooling when e = exp(s - max s) is representable for the whole row (spread <= 600).

    A block's value logsumexp(s_B) - log(sum_B w) is then max s + log(sum_B e / sum_B w), so blocks
    compare by the ratios sum e / sum w (cross-multiplied: no exp or log per merge), and
    x = e * sum_B w / sum_B e. Writes x in the sorted order.
    """
    b, n = E.shape
    se = np.empty(n)
    ws = np.empty(n)
    cnt = np.empty(n, np.int64)
    for r in range(b):
        e = E[r]
        nb = 0
        for i in range(n):
            se[nb] = e[i]
            ws[nb] = wdesc[i]
            cnt[nb] = 1
            nb += 1
            # previous value < last value  <=>  se_p / ws_p < se_q / ws_q  <=>  se_p ws_q < se_q ws_p
            while nb > 1 and se[nb - 2] * ws[nb - 1] < se[nb - 1] * ws[nb - 2]:
                se[nb - 2] += se[nb - 1]
                ws[nb - 2] += ws[nb - 1]
                cnt[nb - 2] += cnt[nb - 1]
                nb -= 1
        k = 0
        for blk in range(nb):
            f = ws[blk] / se[blk]
            for _ in range(cnt[blk]):
                out[r, k] = e[k] * f
                k += 1


@njit(cache=True, error_model="numpy")
def _permutahedron_kl_block_ids(s, wdesc, logw, ids):
    """The blocks of the KL pooling for one row s sorted decreasingly: ids[i] = block of position i.

    The same pool-adjacent-violators pass as :func:`_permutahedron_kl_sorted` (log domain); a
    block is pooled only when strictly violating, so at a kink (equal adjacent values) the
    finer partition is kept. Returns the number of blocks. O(n).
    """
    n = s.shape[0]
    mx = np.empty(n)
    se = np.empty(n)
    ws = np.empty(n)
    gam = np.empty(n)
    cnt = np.empty(n, np.int64)
    nb = 0
    for i in range(n):
        mx[nb] = s[i]
        se[nb] = 1.0
        ws[nb] = wdesc[i]
        gam[nb] = s[i] - logw[i]
        cnt[nb] = 1
        nb += 1
        while nb > 1 and gam[nb - 2] < gam[nb - 1]:
            p = nb - 2
            q = nb - 1
            se[p] = se[p] + se[q] * np.exp(mx[q] - mx[p])
            ws[p] = ws[p] + ws[q]
            cnt[p] += cnt[q]
            gam[p] = mx[p] + np.log(se[p] / ws[p])
            nb -= 1
    k = 0
    for blk in range(nb):
        for _ in range(cnt[blk]):
            ids[k] = blk
            k += 1
    return nb


def permutahedron_kl_jvp(T, wdesc, V, X=None, log_wdesc=None):
    """Jacobian-vector products of the permutahedron KL projection in log coordinates t = log y.

    On each block B of the pooling (a run of the decreasing order of t), x_B = W_B softmax(t_B)
    with W_B = sum of the block's weights, so J v = x_B (v_B - <x_B, v_B> / W_B) on B
    (block-diagonal, symmetric: J^T = J). At a kink (two adjacent blocks of equal value) the
    finer partition is used, the Jacobian of the side where the blocks stay apart. Ties in t
    take the stable order. O(n log n) per row (the sort).

    >>> import numpy as np
    >>> t = np.log([[100.0, 1.0, 1.0]])
    >>> permutahedron_kl_jvp(t, np.array([3.0, 2.0, 1.0]), np.array([[1.0, 1.0, -1.0]])).round(12).tolist()
    [[0.0, 1.5, -1.5]]
    """
    T = np.ascontiguousarray(T, dtype=float)
    V = np.asarray(V, dtype=float)
    b, n = T.shape
    wdesc = np.ascontiguousarray(wdesc, dtype=float)
    if log_wdesc is None:
        with np.errstate(divide="ignore"):
            log_wdesc = np.log(wdesc)
    log_wdesc = np.ascontiguousarray(log_wdesc, dtype=float)
    if X is None:
        X = permutahedron_kl(T, wdesc, log_wdesc)
    out = np.empty_like(T)
    ids = np.empty(n, np.int64)
    for r in range(b):
        order = np.argsort(-T[r], kind="stable")
        nb = _permutahedron_kl_block_ids(np.ascontiguousarray(T[r][order]), wdesc, log_wdesc, ids)
        x, v = X[r][order], V[r][order]
        mass = np.bincount(ids, weights=x, minlength=nb)
        xv = np.bincount(ids, weights=x * v, minlength=nb)
        mean = np.divide(xv, mass, out=np.zeros(nb), where=mass > 0)
        out[r, order] = x * (v - mean[ids])
    return out


def permutahedron_kl(T, wdesc, log_wdesc=None):
    """KL projection of exp(t) onto the permutahedron of w >= 0 (``wdesc``: w sorted decreasingly).

    Sort t decreasingly (s), then pool-adjacent-violators for the non-increasing v
    minimizing sum_i exp(s_i - v_i) + w_i v_i; a block's value is
    logsumexp(s_B) - log(sum_B w) and x_sorted = exp(s - v). When the row's log inputs
    span at most 600, the pooling runs on e = exp(s - max s) with cross-multiplied block
    comparisons (no exp or log per merge); otherwise in the log domain. Exact, O(n log n)
    per row. ``log_wdesc``: optional log(wdesc), precomputed by callers that project often.

    >>> import numpy as np
    >>> permutahedron_kl(np.log([[100.0, 1.0, 1.0]]), np.array([3.0, 2.0, 1.0])).round(12).tolist()
    [[3.0, 1.5, 1.5]]
    """
    T = np.ascontiguousarray(T, dtype=float)
    b, n = T.shape
    wdesc = np.ascontiguousarray(wdesc, dtype=float)
    if log_wdesc is None:
        with np.errstate(divide="ignore"):
            log_wdesc = np.log(wdesc)
    if b == 1:
        order = decreasing_order(T[0])[None, :]
    else:
        order = np.argsort(-T, axis=1, kind="stable")
    out = np.empty_like(T)
    for r in range(b):
        s = T[r][order[r]]
        v = np.empty(n)
        if n and s[0] - s[-1] <= 600.0:
            e = np.exp(s - s[0])
            _permutahedron_kl_sorted_scaled(e[None, :], wdesc, v[None, :])
        else:
            _permutahedron_kl_sorted(s[None, :], wdesc, np.ascontiguousarray(log_wdesc, dtype=float), v[None, :])
            np.exp(v, out=v)
        out[r, order[r]] = v
    return out


# -- transport and Birkhoff: Sinkhorn-Knopp ---------------------------------------------------------
def _lse(A, axis):
    m = A.max(axis=axis, keepdims=True)
    m = np.where(np.isfinite(m), m, 0.0)
    return (m + np.log(np.exp(A - m).sum(axis=axis, keepdims=True))).squeeze(axis)


@njit(cache=True, error_model="numpy")
def _scaling_loop(K, r, c, tol, max_iterations, it0, absorb_at, u, v):
    """Sinkhorn-Knopp on K from u = v = 1: u = r / (K v), v = c / (K^T u) until the row residual of
    diag(u) K diag(v) is at most tol after a column update (which makes the column sums exact).
    Returns (iterations, residual, code): code 0 converged,
    1 a scaling left [1/absorb_at, absorb_at] (absorb into the potentials), 2 out of iterations."""
    m, n = K.shape
    for i in range(m):
        u[i] = 1.0
    for j in range(n):
        v[j] = 1.0
    Kv = np.empty(m)
    Ktu = np.empty(n)
    it = it0
    lo = 1.0 / absorb_at
    while True:
        res = 0.0
        for i in range(m):
            acc = 0.0
            for j in range(n):
                acc += K[i, j] * v[j]
            Kv[i] = acc
            d = abs(u[i] * acc - r[i])
            if not d <= res:
                res = d                     # NaN propagates as a failure
        if res <= tol and it > it0:
            # (only after a column update: then the column sums are exact and the rows decide)
            return it, res, 0
        if it >= max_iterations:
            return it, res, 2
        it += 1
        bad = False
        for i in range(m):
            u[i] = r[i] / Kv[i]
            if not (lo < u[i] < absorb_at):
                bad = True
        for j in range(n):
            Ktu[j] = 0.0
        for i in range(m):
            ui = u[i]
            for j in range(n):
                Ktu[j] += K[i, j] * ui
        for j in range(n):
            v[j] = c[j] / Ktu[j]
            if not (lo < v[j] < absorb_at):
                bad = True
        if bad:
            return it, res, 1


def _log_sweep(t, logr, logc, g):
    """One exact log-domain Sinkhorn iteration from column potentials g; returns (f, g, K = exp(t + f + g))."""
    f = logr - _lse(t + g[None, :], 1)
    g = logc - _lse(t + f[:, None], 0)
    return f, g, np.exp(t + f[:, None] + g[None, :])


def _sinkhorn_one(t, r, c, tol, max_iterations, absorb_at=1e12):
    """One m x n log-input matrix with positive margins; returns (X, iterations, residual, converged, u, v, f, g).

    The answer is X = diag(u) exp(t + f + g) diag(v)."""
    logr, logc = np.log(r), np.log(c)
    t = np.ascontiguousarray(t)
    # start from f = log r - (row maxima): every row of K = exp(t + f) has its largest entry r_i,
    # whatever the scale of t; columns that underflow push their scaling out of range, which
    # triggers an exact log-domain sweep (absorption) below
    f = logr - t.max(axis=1)
    g = np.zeros(c.size)
    K = np.exp(t + f[:, None])
    it = 0
    u = np.ones(r.size)
    v = np.ones(c.size)
    while True:
        it, res, code = _scaling_loop(K, r, c, tol, max_iterations, it, absorb_at, u, v)
        if code != 1:
            break
        # move the column scalings into the potentials (where finite) and continue with an exact
        # log-domain sweep: f from g, then g from f (one Sinkhorn iteration in the log domain)
        with np.errstate(divide="ignore", invalid="ignore"):
            gg = g + np.log(v)
        gg = np.where(np.isfinite(gg), gg, g)
        f, g, K = _log_sweep(t, logr, logc, gg)
    X = (u[:, None] * K) * v[None, :]
    return X, it, res, code == 0, u, v, f, g


def _dual_newton(t, r, c, f, g, tol, max_steps=100):
    """Damped Newton's method on the dual of the transport KL projection, from potentials f, g.

    Minimizes D(f, g) = sum_ij exp(t_ij + f_i + g_j) - <r, f> - <c, g>, whose gradient is the
    marginal residual of X = exp(t + f + g); the Newton system is reduced to the columns
    (Schur complement, one potential fixed since (f + a, g - a) is a symmetry), with
    backtracking (Armijo). Used when Sinkhorn scaling stalls (nearly decomposable
    matrices); O((m + n) n^2) per step. Returns (X, steps, residual, converged).
    """
    n = c.size
    eps = np.finfo(float).eps
    if not (np.isfinite(f).all() and np.isfinite(g).all()):
        f = np.log(r) - _lse(t, 1)
        g = np.log(c) - _lse(t + f[:, None], 0)
    with np.errstate(over="ignore"):
        X = np.exp(t + f[:, None] + g[None, :])
    res = np.inf
    for k in range(max_steps + 1):
        rs, cs = X.sum(axis=1), X.sum(axis=0)
        gr, gc = rs - r, cs - c
        res = max(float(np.abs(gr).max()), float(np.abs(gc).max()))
        if res <= tol:
            return X, k, res, True
        if k == max_steps or not np.isfinite(res):
            break
        Xr = X[:, : n - 1]
        with np.errstate(divide="ignore", invalid="ignore"):
            S = np.diag(cs[: n - 1]) - (Xr.T / rs) @ Xr
            rhs = -gc[: n - 1] + Xr.T @ (gr / rs)
        try:
            dg = np.linalg.solve(S, rhs) if n > 1 else np.zeros(0)
        except np.linalg.LinAlgError:
            dg = np.linalg.lstsq(S, rhs, rcond=None)[0]
        df = -(gr + Xr @ dg) / rs
        dgf = np.append(dg, 0.0)
        if not (np.isfinite(df).all() and np.isfinite(dgf).all()):
            break
        D0 = X.sum() - r @ f - c @ g
        slope = gr @ df + gc @ dgf
        noise = 64 * eps * (X.sum() + abs(r @ f) + abs(c @ g))
        step = 1.0
        while True:
            fn, gn = f + step * df, g + step * dgf
            with np.errstate(over="ignore", invalid="ignore"):
                Xn = np.exp(t + fn[:, None] + gn[None, :])
                Dn = Xn.sum() - r @ fn - c @ gn
            if np.isfinite(Dn) and Dn <= D0 + 1e-4 * step * slope + noise:
                break
            step *= 0.5
            if step < 1e-12:
                return X, k, res, False
        f, g, X = fn, gn, Xn
    return X, max_steps, res, False


def sinkhorn_kl(T, rows, cols, accuracy=1e-10, max_iterations=20_000, label="transport", newton_after=1000,
               newton_size=3000):
    """KL projection of exp(t) onto {X >= 0, X 1 = rows, X^T 1 = cols} by Sinkhorn-Knopp scaling.

    By Sinkhorn's theorem the answer is diag(u) Y diag(v). Potentials f, g with
    log X = t + f_i + g_j start from the row maxima of t; then the scalings
    u = rows / (K v), v = cols / (K^T u) of K = exp(t + f + g) run with two
    matrix-vector products per iteration, and are absorbed into f, g (followed by
    another log-domain sweep) when they leave [1e-12, 1e12]. Stopping rule: the
    largest row-sum residual (column sums are exact after each column update) at
    most ``accuracy * max(1, max margin)``; the returned matrix's row and column
    residuals are measured again. O(m n) per iteration. Zero margins give zero rows
    or columns. When ``newton_after`` iterations do not reach the accuracy (slow linear
    convergence of nearly decomposable matrices) and m + n <= ``newton_size``, damped
    Newton steps on the same dual finish the job (the answer keeps the diagonal-scaling
    form); larger matrices continue scaling. Raises SolveError when the accuracy is
    not reached.

    Returns
    -------
    X : (b, m n) answers; info : dict with per-row status, iterations,
    backend_status (the measured residual) and residual (array).

    >>> import numpy as np
    >>> X, info = sinkhorn_kl(np.zeros((1, 4)), np.array([1.0, 1.0]), np.array([0.5, 1.5]))
    >>> X.round(12).tolist()
    [[0.25, 0.75, 0.25, 0.75]]
    """
    T = np.asarray(T, dtype=float)
    rows = np.asarray(rows, dtype=float)
    cols = np.asarray(cols, dtype=float)
    m, n = rows.size, cols.size
    b = T.shape[0]
    scale = max(1.0, float(rows.max(initial=0.0)), float(cols.max(initial=0.0)))
    tol = accuracy * scale
    ri = np.flatnonzero(rows > 0)
    ci = np.flatnonzero(cols > 0)
    positive = ri.size == m and ci.size == n
    out = np.zeros((b, m, n))
    iters, resids, hows = [], np.zeros(b), []
    for k in range(b):
        if ri.size == 0 or ci.size == 0:
            iters.append(0)
            hows.append("zero margins: the zero matrix")
            continue
        t = T[k].reshape(m, n)
        if not positive:
            t = t[np.ix_(ri, ci)]
        r_, c_ = rows[ri], cols[ci]
        X, it, res, ok, u, v, f, g = _sinkhorn_one(t, r_, c_, tol, min(max_iterations, newton_after))
        how = f"Sinkhorn, {it} iterations"
        if not ok:
            with np.errstate(divide="ignore"):
                f, g = f + np.log(u), g + np.log(v)
        if not ok and ri.size + ci.size <= newton_size:
            # slow linear convergence (a nearly decomposable matrix): damped Newton on the same dual
            X, steps, res, ok = _dual_newton(t, r_, c_, f, g, tol)
            it += steps
            how += f" + dual Newton, {steps} steps"
        elif not ok and max_iterations > newton_after:
            X, it2, res, ok = _sinkhorn_one(t + f[:, None] + g[None, :], r_, c_, tol,
                                            max_iterations - newton_after)[:4]
            it += it2
            how = f"Sinkhorn, {it} iterations"
        if positive:
            full = X
        else:
            full = np.zeros((m, n))
            full[np.ix_(ri, ci)] = X
        measured = max(float(np.abs(full.sum(axis=1) - rows).max()), float(np.abs(full.sum(axis=0) - cols).max()))
        if not ok or not np.isfinite(measured) or measured > tol:
            raise SolveError(f"project_kl on {label}: Sinkhorn scaling stopped after {it} iterations with "
                             f"marginal residual {max(res, measured):.3g} (row {k}); required "
                             f"{tol:.3g} = accuracy {accuracy:g} x scale {scale:g}.", status="not_converged")
        out[k] = full
        iters.append(it)
        resids[k] = measured
        hows.append(f"{how}: marginal residual {measured:.2e}")
    info = {"status": ["solved"] * b, "iterations": iters, "backend_status": hows, "residual": resids}
    return out.reshape(b, m * n), info


# -- intersections: cyclic Bregman projections with Dykstra corrections ----------------------------
def transport_kl_jvp(X, V, shape):
    """Jacobian-vector products of the transport KL projection (Sinkhorn's fixed point) in log coordinates.

    The projection is X = exp(t + f 1^T + 1 g^T) with potentials f, g fixed by the marginals
    X 1 = r, X^T 1 = c. Differentiating the fixed point (implicit differentiation):
    dX = X (v + df 1^T + 1 dg^T) with (X v) 1 + diag(r) df + X dg = 0 and
    (X v)^T 1 + X^T df + diag(c) dg = 0. Eliminating df leaves the Schur complement
    S = diag(c) - X^T diag(1/r) X (a weighted graph Laplacian, null space the all-ones
    vector: f + a, g - a is the same scaling), solved with dg_last = 0 by a dense Cholesky-free
    solve on the smaller side. Rows or columns with zero margin stay zero. J is symmetric.
    O(m n min(m, n) + min(m, n)^3) per row.

    Parameters
    ----------
    X : (b, m n) projections (C order of the m x n plans), V : (b, m n) tangents in log coordinates,
    shape : (m, n).

    >>> import numpy as np
    >>> X = np.full((1, 4), 0.5)                       # the 2 x 2 doubly-stochastic centre
    >>> transport_kl_jvp(X, np.array([[1.0, 0.0, 0.0, 0.0]]), (2, 2)).round(12).tolist()
    [[0.125, -0.125, -0.125, 0.125]]
    """
    m, n = shape
    X = np.asarray(X, dtype=float)
    V = np.asarray(V, dtype=float)
    out = np.zeros_like(X)
    for k in range(X.shape[0]):
        M = X[k].reshape(m, n)
        A = M * V[k].reshape(m, n)
        r, c = M.sum(axis=1), M.sum(axis=0)
        I, J = np.flatnonzero(r > 0), np.flatnonzero(c > 0)
        if I.size == 0 or J.size == 0:
            continue
        Ms, As = M[np.ix_(I, J)], A[np.ix_(I, J)]
        rs, cs = r[I], c[J]
        rv, cv = As.sum(axis=1), As.sum(axis=0)
        transpose = I.size < J.size
        if transpose:                                   # eliminate the larger side
            Ms, rs, cs, rv, cv = Ms.T, cs, rs, cv, rv
        # unknowns: dg on the (smaller) column side; df = -(rv + Ms dg) / rs
        S = np.diag(cs) - Ms.T @ (Ms / rs[:, None])
        rhs = -cv + Ms.T @ (rv / rs)
        dg = np.zeros(cs.size)
        if cs.size > 1:
            dg[:-1] = np.linalg.solve(S[:-1, :-1], rhs[:-1])
        df = -(rv + Ms @ dg) / rs
        if transpose:
            df, dg = dg, df
            Ms = Ms.T
        D = np.zeros((m, n))
        D[np.ix_(I, J)] = Ms * (V[k].reshape(m, n)[np.ix_(I, J)] + df[:, None] + dg[None, :])
        out[k] = D.reshape(-1)
    return out


def bregman_dykstra(projections, T, lmo_fn, violations, scale, accuracy=1e-7, max_iterations=20_000,
                    check_every=10):
    """KL projection of exp(t) onto K_1 ∩ ... ∩ K_m from the parts' own KL projections, batched over rows.

    Dykstra's method with Bregman projections (Censor & Reich 1998; Bauschke & Lewis
    2000): in the log domain, for each part i in turn, u = log x + q_i,
    x = P_i^KL(u), q_i = u - log x. The point after a sweep lies in the last part;
    a row stops when the parts' largest violation is at most ``accuracy * scale`` and
    the Bregman Frank-Wolfe gap of :func:`kl_certificate` (with the intersection's
    LMO) is at most 0.5 (accuracy * scale)^2 / max(1, sum x) plus a rounding floor;
    with x in K the gap bounds KL(x || y) - KL(x* || y), which bounds
    ||x - x*||_1^2 / (2 sum x) (Pinsker's inequality). The residual is checked every
    ``check_every`` sweeps, the gap (one LMO of the intersection) only for feasible rows
    and at doubling intervals while it stays above tolerance. O(sweeps * sum of the
    parts' KL projection costs).

    Parameters
    ----------
    projections : callables mapping a (b, n) log-domain batch to its KL projections onto K_i.
    T : (b, n) log inputs.
    lmo_fn : the intersection's LMO on (b, n) directions.
    violations : callables giving each part's violation of (b, n) points.
    scale : (b,) magnitudes that make the tolerances relative.

    Returns
    -------
    X : (b, n); info : dict with per-row status ("solved" | "not_converged"), iterations,
    gap and residual arrays.
    """
    T = np.asarray(T, dtype=float)
    b, n = T.shape
    m = len(projections)
    scale = np.broadcast_to(np.asarray(scale, dtype=float), (b,)).copy()
    eps = np.finfo(float).eps
    out = np.empty_like(T)
    status = ["not_converged"] * b
    iters = [0] * b
    gaps = np.full(b, np.nan)
    resid = np.full(b, np.nan)
    rows = np.arange(b)
    Z = T.copy()                      # log of the current point
    Q = np.zeros((m, b, n))           # corrections, one per part
    X = np.exp(np.minimum(T, 709.0))
    gap_every, next_gap = check_every, 0
    for sweep in range(1, max_iterations + 1):
        for i, proj in enumerate(projections):
            U = Z + Q[i]
            X = proj(U)
            Z = np.log(np.maximum(X, NORMAL))
            Q[i] = U - Z
        if sweep % check_every and sweep != max_iterations:
            continue
        r = np.max([np.asarray(v(X), dtype=float) for v in violations], axis=0)
        last = sweep == max_iterations
        feasible = r <= accuracy * scale[rows]
        if not last and (not feasible.any() or sweep < next_gap):
            continue
        # the gap needs one LMO of the intersection (an LP): only for rows that are feasible, and at
        # doubling intervals while it stays above tolerance
        ask = np.flatnonzero(feasible | last)
        g = np.full(rows.size, np.inf)
        g[ask] = kl_certificate(T[rows[ask]], X[ask], lmo_fn)
        G = np.log(np.maximum(X, NORMAL)) - T[rows]
        floor = 64 * eps * (1.0 + np.abs(G * X).sum(axis=1)) * n
        tol_g = 0.5 * (accuracy * scale[rows]) ** 2 / np.maximum(1.0, X.sum(axis=1)) + floor
        done = feasible & (g <= tol_g)
        if last:
            done = np.ones(rows.size, bool)
        if not done.all():
            gap_every = min(2 * gap_every, 640)
            next_gap = sweep + gap_every
        for k in np.flatnonzero(done):
            j = rows[k]
            out[j] = X[k]
            iters[j] = sweep
            gaps[j] = g[k]
            resid[j] = r[k]
            if feasible[k] and g[k] <= tol_g[k]:
                status[j] = "solved"
        keep = ~done
        if not keep.any():
            break
        rows, Z, Q, X = rows[keep], Z[keep], Q[:, keep], X[keep]
    return out, {"status": status, "iterations": iters, "gap": gaps, "residual": resid}


# -- flow: dual Newton on node potentials -----------------------------------------------------------
def _flow_primal(T, tail, head, lo, hi, pi):
    """x(pi) = clip(exp(t + pi_tail - pi_head), lo, hi) and the free-edge mask (no overflow warnings)."""
    a = T + pi[tail] - pi[head]
    with np.errstate(over="ignore"):
        x = np.exp(a)
    x = np.minimum(np.maximum(x, lo), hi)
    free = (x > lo) & (x < hi)
    return a, x, free


def _flow_dual(T, a, x, pi, supply):
    """The concave dual value: sum_e x_e (log x_e - t_e) - x_e - a_e x_e + <pi, supply> + sum_e exp(t_e)."""
    pos = x > 0
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        xl = np.where(pos, x * (np.log(np.where(pos, x, 1.0)) - T - (a - T)), 0.0)
        return float(np.sum(xl - x) + pi @ supply)


def flow_kl(T, tail, head, lo, hi, supply, label="flow", accuracy=1e-10, max_iterations=2000):
    """KL projection of exp(t) onto {B x = supply, lo <= x <= hi} (lo >= 0) by dual Newton on node potentials.

    The optimality conditions give x_e = clip(y_e exp(pi_tail(e) - pi_head(e)), lo_e, hi_e)
    for node potentials pi (the multipliers of the conservation rows B x = supply, B the
    node-edge incidence matrix). The dual function of pi is concave and once differentiable,
    with gradient supply - B x(pi) and generalized Hessian -B diag(x_e [e free]) B^T (a
    weighted graph Laplacian on the free edges). Each step solves
    (B D B^T + mu I) d = supply - B x with mu = min(1, |residual|_inf / scale) times the largest
    curvature (Levenberg-Marquardt damping, which also fixes the constant shift of each
    component), caps the step at 30 in log units (a trust region for far starts), then
    backtracks on the
    dual value (Armijo; or, once the dual's gain is below its rounding, on a decrease of the
    measured residual). Stopping rule: the measured largest conservation residual
    |B x - supply|_inf <= accuracy * scale (scale = max(1, |supply|, finite bounds, |x|_inf));
    x is within its bounds by construction. A row that does not meet it within
    ``max_iterations`` steps raises SolveError. One sparse factorization per step,
    O(iterations * sparse solve) per row.

    >>> import numpy as np
    >>> tail, head = np.array([0, 0]), np.array([1, 1])          # two parallel edges a -> b, supply 2
    >>> X, info = flow_kl(np.log([[1.0, 3.0]]), tail, head, np.zeros(2), np.full(2, np.inf), np.array([2.0, -2.0]))
    >>> X.round(12).tolist()
    [[0.5, 1.5]]
    """
    import scipy.sparse as sp
    from scipy.sparse.linalg import spsolve
    T = np.asarray(T, dtype=float)
    b, m = T.shape
    nv = int(supply.size)
    tail = np.asarray(tail, dtype=np.intp)
    head = np.asarray(head, dtype=np.intp)
    lo = np.asarray(lo, dtype=float)
    hi = np.asarray(hi, dtype=float)
    supply = np.asarray(supply, dtype=float)
    cols = np.arange(m)
    B = sp.csr_matrix((np.concatenate([np.ones(m), -np.ones(m)]),
                       (np.concatenate([tail, head]), np.concatenate([cols, cols]))), shape=(nv, m))
    # (a dense solve was tried: multithreaded BLAS on a shared machine made it 100x slower than SuperLU)

    def out_minus_in(x):
        return np.bincount(tail, x, nv) - np.bincount(head, x, nv)

    def newton_direction(w, mu, g):
        L = (B @ sp.diags(w) @ B.T).tocsc()
        dmax = float(L.diagonal().max(initial=0.0))
        return spsolve(L + max(min(1.0, mu) * dmax, 1e-200) * eye, g)
    data = max(1.0, float(np.abs(supply).max(initial=0.0)), float(np.abs(lo[np.isfinite(lo)]).max(initial=0.0)),
               float(np.abs(hi[np.isfinite(hi)]).max(initial=0.0)))
    X = np.empty_like(T)
    iters, status, resid_out = [], [], []
    eye = sp.identity(nv, format="csc")
    for r in range(b):
        t = T[r]
        pi = np.zeros(nv)
        a, x, free = _flow_primal(t, tail, head, lo, hi, pi)
        ok = False
        it = 0
        res = np.inf
        for it in range(1, max_iterations + 1):
            g = supply - out_minus_in(x)
            res = float(np.abs(g).max(initial=0.0)) if np.isfinite(x).all() else np.inf
            if not np.isfinite(res):
                break
            if res <= accuracy * max(data, float(np.abs(x).max(initial=0.0))):
                ok = True
                break
            # damping relative to the curvature (scale-free), and a trust region of 30 in log units so that
            # far starts (tiny or huge y) move by bounded multiplicative steps
            d = newton_direction(np.where(free, x, 0.0), res / data, g)
            if not np.isfinite(d).all():
                break
            dmax = float(np.abs(d).max(initial=0.0))
            if dmax > 30.0:
                d *= 30.0 / dmax
            phi = _flow_dual(t, a, x, pi, supply)
            slope = float(g @ d)
            step = 1.0
            while step > 1e-12:
                pn = pi + step * d
                an, xn, fn = _flow_primal(t, tail, head, lo, hi, pn)
                if np.isfinite(xn).all():
                    val = _flow_dual(t, an, xn, pn, supply)
                    if np.isfinite(val) and val >= phi + 1e-4 * step * slope:
                        break
                    # near the answer the dual's gain (of order residual^2) drowns in its rounding: accept
                    # a step that shrinks the measured residual instead
                    if (abs(slope) * step <= 1e-11 * (1.0 + abs(phi))
                            and float(np.abs(supply - out_minus_in(xn)).max(initial=0.0)) <= (1.0 - 1e-4 * step) * res):
                        break
                step *= 0.5
            else:
                break
            pi, a, x, free = pn, an, xn, fn
        X[r] = x
        iters.append(it)
        resid_out.append(res)
        status.append("solved" if ok else "not_converged")
        if not ok:
            if not np.isfinite(x).all():
                raise InputError(f"project_kl on {label}: the answer overflows float64 (row {r}): log inputs "
                                 f"must stay below 709.78 on edges without a capacity.")
            raise SolveError(f"project_kl on {label}: dual Newton on the node potentials stopped after {it} "
                             f"steps with conservation residual {res:.3g} (row {r}); allowed "
                             f"{accuracy * data:.3g}.", status="not_converged")
    return X, {"status": status, "iterations": iters, "backend_status": [f"residual {v:.2e}" for v in resid_out]}
