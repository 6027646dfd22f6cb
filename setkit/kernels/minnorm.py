"""Wolfe's minimum-norm-point algorithm: Euclidean projection onto a polytope known by its LMO.

Given a point y and a linear minimization oracle ``lmo(c) -> argmin_{v in P} <c, v>`` over a
polytope P, the projection p* = argmin_{p in P} ||p - y|| is found as the minimum-norm point of
P - y. The iterate p is kept as a convex combination of a "corral" of affinely independent
vertices; each major cycle asks the LMO for the vertex q minimizing <p - y, q>, stops when the
Frank-Wolfe gap

    g(p) = <p - y, p - q>  =  max_{v in P} <y - p, v - p>   (>= (1/2) ||p - p*||^2 for p in P)

is small, and otherwise adds q and moves to the affine minimizer of the corral (dropping vertices
by a line search when that minimizer leaves the convex hull: the minor cycles). The algorithm is
finite in exact arithmetic (Wolfe 1976); in floating point it stops on the gap. On base polytopes
of submodular functions (spanning trees, matroid bases) this is the Fujishige-Wolfe method.

Each major cycle costs one LMO call, O(d k) to extend the corral's Gram matrix and O(k^3) per
affine minimization (normal equations on the Gram matrix), for k corral vertices in R^d (k <= d + 1).
"""
from __future__ import annotations

import numpy as np
from numba import njit

from ..errors import SolveError

# R^2 = d * max(1, scale, |y|_inf)^2: the size of the inner products the gap is computed from, so
# that rounding (about 1e-16 R^2) cannot keep the gap above the tolerance
GAP_RTOL = 1e-15         # stop when g <= GAP_RTOL * R^2 (||p - p*|| <= 4.5e-8 R)
ACCEPT_RTOL = 1e-12      # a stalled run is accepted when g <= ACCEPT_RTOL * R^2 (||p - p*|| <= 1.5e-6 R)
STALL_CYCLES = 20        # stop after 2 d + STALL_CYCLES major cycles without a smaller gap
COMPILED_MAX_DIM = 1000  # the compiled coverage loop keeps O(d^2) buffers (16 MB at d = 1000): up to this dimension


def _affine_minimizer(G, Vy):
    """Weights a (sum 1) of the point of the affine hull of the corral closest to y.

    With the corral's rows v_0..v_{k-1}, G = V V^T and Vy = V y: writing the point as
    v_0 + sum_j beta_j (v_j - v_0), beta solves the normal equations (D D^T) beta = D (y - v_0),
    D = V[1:] - v_0, formed from G and Vy alone (O(k^3), no pass over the d coordinates; exact
    integer Gram entries for 0/1 vertices).
    """
    k = G.shape[0]
    if k == 1:
        return np.ones(1)
    g0 = G[0, 0]
    c = G[1:, 0]
    M = G[1:, 1:] - c[:, None] - c[None, :] + g0
    r = (Vy[1:] - Vy[0]) - (c - g0)
    try:
        beta = np.linalg.solve(M, r)
        if not np.all(np.isfinite(beta)):
            raise np.linalg.LinAlgError
    except np.linalg.LinAlgError:          # affinely dependent corral (rounding): least squares
        beta = np.linalg.lstsq(M, r, rcond=None)[0]
    return np.concatenate([[1.0 - beta.sum()], beta])


@njit(cache=True)
def _chol_append(L, k, m, mkk):
    """Extend the lower Cholesky factor L[:k, :k] of M by a row/column (m, mkk); False when the new
    pivot is not positive beyond rounding (an affinely dependent vertex). O(k^2), one thread."""
    for i in range(k):
        s = m[i]
        for j in range(i):
            s -= L[i, j] * L[k, j]
        L[k, i] = s / L[i, i]
    d = mkk
    for j in range(k):
        d -= L[k, j] * L[k, j]
    if not d > 1e-13 * abs(mkk):
        for j in range(k):
            L[k, j] = 0.0
        return False
    L[k, k] = np.sqrt(d)
    return True


@njit(cache=True)
def _chol_delete(L, k, i):
    """Remove row/column i from the factor L[:k, :k] (rows shifted up, Givens rotations on the
    columns to restore the triangle). O((k - i) k), one thread."""
    for r in range(i, k - 1):
        for c in range(r + 2):
            L[r, c] = L[r + 1, c]
    for r in range(i, k - 1):
        a = L[r, r]
        b = L[r, r + 1]
        h = np.hypot(a, b)
        if h == 0.0:
            continue
        c = a / h
        s = b / h
        for rr in range(r, k - 1):
            x = L[rr, r]
            z = L[rr, r + 1]
            L[rr, r] = c * x + s * z
            L[rr, r + 1] = -s * x + c * z
        L[r, r + 1] = 0.0
    for c in range(k):
        L[k - 1, c] = 0.0
        L[c, k - 1] = 0.0


@njit(cache=True)
def _chol_solve(L, k, r):
    """M^{-1} r with M = L L^T (k x k): two triangular solves, O(k^2)."""
    w = np.empty(k)
    for i in range(k):
        s = r[i]
        for j in range(i):
            s -= L[i, j] * w[j]
        w[i] = s / L[i, i]
    for i in range(k - 1, -1, -1):
        s = w[i]
        for j in range(i + 1, k):
            s -= L[j, i] * w[j]
        w[i] = s / L[i, i]
    return w


@njit(cache=True)
def _chol_build(L, G):
    """Factor M = D D^T (D = corral differences from vertex 0, formed from the Gram matrix G) into L
    row by row; the number of rows factored (k - 1 when every pivot is positive). O(k^3), one thread."""
    k = G.shape[0]
    m = np.empty(k)
    for a in range(1, k):
        for b in range(1, a):
            m[b - 1] = G[a, b] - G[a, 0] - G[b, 0] + G[0, 0]
        if not _chol_append(L, a - 1, m, G[a, a] - 2.0 * G[a, 0] + G[0, 0]):
            return a - 1
    return k - 1


@njit(cache=True)
def _mnp_cycle(q, y, Vbuf, rows, Gbuf, Vy, lam, L, st, p):
    """One major cycle of Wolfe's method after the LMO answered q, compiled (no array temporaries
    per minor cycle, no multithreaded BLAS call).

    State: the corral is rows[:k] of Vbuf (k = st[0]; st[1] the next free buffer row), its Gram
    matrix Gbuf[:k, :k], Vy[:k] = V y, weights lam[:k]; L[:k-1, :k-1] the Cholesky factor of the
    affine minimizer's normal matrix M = D D^T (D = the differences from vertex 0, see
    :func:`_affine_minimizer`) when st[2] == 1. A new vertex appends a row to L (O(k^2)); a dropped
    vertex other than vertex 0 deletes one (Givens rotations, O(k^2)); a dropped vertex 0 or a
    nearly dependent new vertex marks L stale and the next solve refactors it (O(k^3)) or, when a
    pivot still vanishes, solves by least squares. The caller guarantees room for one more vertex.
    Writes the new iterate into p; returns 1 when q is already in the corral (a stall), else 0.
    """
    k = st[0]
    d = y.size
    qq = 0.0
    for t in range(d):
        qq += q[t] * q[t]
    Vq = np.empty(k)
    for i in range(k):
        r = rows[i]
        acc = 0.0
        for t in range(d):
            acc += Vbuf[r, t] * q[t]
        Vq[i] = acc
    for i in range(k):
        if abs(Gbuf[i, i] - 2.0 * Vq[i] + qq) <= 1e-9 * (qq + Gbuf[i, i]):
            same = True
            r = rows[i]
            for t in range(d):
                if Vbuf[r, t] != q[t]:
                    same = False
                    break
            if same:
                return 1
    # append q
    for i in range(k):
        Gbuf[k, i] = Vq[i]
        Gbuf[i, k] = Vq[i]
    Gbuf[k, k] = qq
    qy = 0.0
    for t in range(d):
        qy += q[t] * y[t]
    Vy[k] = qy
    top = st[1]
    for t in range(d):
        Vbuf[top, t] = q[t]
    rows[k] = top
    st[1] = top + 1
    lam[k] = 0.0
    k += 1
    if st[2] == 1 and k >= 2:
        m = np.empty(k - 2)
        kk = k - 1
        for j in range(1, kk):
            m[j - 1] = Gbuf[kk, j] - Gbuf[kk, 0] - Gbuf[j, 0] + Gbuf[0, 0]
        if not _chol_append(L, kk - 1, m, Gbuf[kk, kk] - 2.0 * Gbuf[kk, 0] + Gbuf[0, 0]):
            st[2] = 0
    a = np.empty(k + 1)
    ratio = np.empty(k + 1)
    for _minor in range(k + 1):
        # the affine minimizer of the corral (weights a summing to 1)
        if k == 1:
            a[0] = 1.0
        else:
            g0 = Gbuf[0, 0]
            rhs = np.empty(k - 1)
            for j in range(1, k):
                rhs[j - 1] = (Vy[j] - Vy[0]) - (Gbuf[j, 0] - g0)
            if st[2] == 0:
                for i in range(k):
                    for j in range(k):
                        L[i, j] = 0.0
                G = np.ascontiguousarray(Gbuf[:k, :k])
                st[2] = 1 if _chol_build(L, G) == k - 1 else 0
            ok = st[2] == 1
            if ok:
                beta = _chol_solve(L, k - 1, rhs)
                for j in range(k - 1):
                    if not np.isfinite(beta[j]):
                        ok = False
            if not ok:
                M = np.empty((k - 1, k - 1))
                for i in range(1, k):
                    for j in range(1, k):
                        M[i - 1, j - 1] = Gbuf[i, j] - Gbuf[i, 0] - Gbuf[j, 0] + g0
                beta = np.linalg.lstsq(M, rhs)[0]
            s = 0.0
            for j in range(k - 1):
                a[j + 1] = beta[j]
                s += beta[j]
            a[0] = 1.0 - s
        amin = a[0]
        for j in range(k):
            amin = min(amin, a[j])
        if amin > 0.0:
            for j in range(k):
                lam[j] = a[j]
            break
        # line search toward a; drop the vertices whose weight reaches 0
        theta = 1.0
        jmin = 0
        for j in range(k):
            if a[j] <= 0.0:
                den = lam[j] - a[j]
                ratio[j] = lam[j] / den if den > 0.0 else 0.0
            else:
                ratio[j] = np.inf
            if ratio[j] < ratio[jmin]:
                jmin = j
        theta = min(max(ratio[jmin], 0.0), 1.0)
        lmax = 0.0
        for j in range(k):
            lam[j] = lam[j] + theta * (a[j] - lam[j])
            lmax = max(lmax, lam[j])
        keep = np.empty(k, np.bool_)
        nkeep = 0
        for j in range(k):
            keep[j] = not (lam[j] <= 1e-15 * lmax)
            nkeep += keep[j]
        if nkeep == k:
            keep[jmin] = False
            nkeep -= 1
        if nkeep == 0:
            jbest = 0
            for j in range(k):
                if lam[j] > lam[jbest]:
                    jbest = j
            keep[jbest] = True
            nkeep = 1
        # the factor: a dropped vertex 0 makes it stale, others are deleted (from the last)
        if st[2] == 1:
            if not keep[0]:
                st[2] = 0
            else:
                kf = k - 1
                for j in range(k - 1, 0, -1):
                    if not keep[j]:
                        _chol_delete(L, kf, j - 1)
                        kf -= 1
        # compact the corral in place (order kept)
        w = 0
        for j in range(k):
            if keep[j]:
                rows[w] = rows[j]
                lam[w] = max(lam[j], 0.0)
                Vy[w] = Vy[j]
                w += 1
        w = 0
        for i in range(k):
            if keep[i]:
                c = 0
                for j in range(k):
                    if keep[j]:
                        Gbuf[w, c] = Gbuf[i, j]
                        c += 1
                w += 1
        k = nkeep
        s = 0.0
        for j in range(k):
            s += lam[j]
        for j in range(k):
            lam[j] /= s
    st[0] = k
    for t in range(d):
        p[t] = 0.0
    for i in range(k):
        r = rows[i]
        li = lam[i]
        if li != 0.0:
            for t in range(d):
                p[t] += li * Vbuf[r, t]
    return 0


@njit(cache=True)
def coverage_greedy(c, indptr, items, iw, covered, out):
    """Edmonds' greedy for a coverage function F(S) = sum of w_u over the items u covered by S: the
    elements in increasing c (stable order), each gaining the weights of the items it is the first
    to cover. ``indptr``/``items``: element -> items (CSR); ``covered``: a scratch flag per item.
    O(n log n + nnz)."""
    covered[:] = False
    order = np.argsort(c, kind="mergesort")
    for j in range(c.size):
        i = order[j]
        acc = 0.0
        for t in range(indptr[i], indptr[i + 1]):
            u = items[t]
            if not covered[u]:
                covered[u] = True
                acc += iw[u]
        out[i] = acc


@njit(cache=True)
def _mnp_coverage_loop(y, Rm, tol, cap, stall, indptr, items, iw):
    """Wolfe's method with the coverage greedy as its LMO, every cycle compiled (the loop of
    :func:`project_by_min_norm_point`, same stopping rules: gap <= tol, no smaller gap for ``stall``
    cycles, or q already in the corral). Returns (status 0 solved / 1 stalled / 2 cap, cycles,
    last gap, best gap, best point, corral size); gaps in units of Rm^2."""
    d = y.size
    covered = np.zeros(iw.size, np.bool_)
    nb = 2 * (d + 2)
    nk = d + 3
    Vbuf = np.empty((nb, d))
    rows = np.zeros(nk, np.int64)
    Gbuf = np.zeros((nk, nk))
    Vy = np.zeros(nk)
    lam = np.zeros(nk)
    L = np.zeros((nk, nk))
    st = np.array([1, 1, 1], np.int64)
    q = np.empty(d)
    z = -y
    coverage_greedy(z, indptr, items, iw, covered, q)
    Vbuf[0] = q
    g00 = 0.0
    vy0 = 0.0
    for t in range(d):
        g00 += q[t] * q[t]
        vy0 += q[t] * y[t]
    Gbuf[0, 0] = g00
    Vy[0] = vy0
    lam[0] = 1.0
    p = q.copy()
    pn = np.empty(d)
    best_gap = np.inf
    best_p = p.copy()
    best_it = 0
    gap = np.inf
    status = 2
    it = 0
    for it in range(1, cap + 1):
        for t in range(d):
            z[t] = p[t] - y[t]
        coverage_greedy(z, indptr, items, iw, covered, q)
        gap = 0.0
        for t in range(d):
            gap += (z[t] / Rm) * ((p[t] - q[t]) / Rm)
        if gap < best_gap:
            best_gap = gap
            best_p[:] = p
            best_it = it
        if gap <= tol:
            status = 0
            break
        if it - best_it > stall:
            status = 1
            break
        k = st[0]
        if st[1] == nb:                      # no free buffer row: the live rows to the front
            for i in range(k):
                Vbuf[i] = Vbuf[rows[i]]
                rows[i] = i
            st[1] = k
        if k + 2 > nk or st[1] == nb:        # no room (a numerically dependent corral): stop
            status = 1
            break
        if _mnp_cycle(q, y, Vbuf, rows, Gbuf, Vy, lam, L, st, pn):
            status = 1
            break
        p, pn = pn, p
    return status, it, gap, best_gap, best_p, st[0]


def project_by_min_norm_point(y, lmo, *, scale=1.0, max_iter=None, label="set", coverage=None):
    """Project ``y`` onto conv(vertices) with Wolfe's minimum-norm-point algorithm.

    Parameters
    ----------
    y : (d,) array
    lmo : callable, (d,) direction -> (d,) vertex minimizing <c, v>
    scale : a magnitude of the vertices (R^2 = d max(1, scale, |y|_inf)^2 sets the relative tolerances)
    max_iter : cap on major cycles (default 50 d + 500)
    coverage : optional (indptr, items, item_weights) when ``lmo`` is the greedy of a coverage
        function (element -> items in CSR form) and d <= COMPILED_MAX_DIM: the whole loop then runs
        compiled (:func:`_mnp_coverage_loop`), with the same stopping rules and the same answer

    Returns
    -------
    p, info : the projection and a dict (iterations, gap, corral size, status)

    Raises
    ------
    SolveError when the gap is above ``ACCEPT_RTOL * R^2`` at the iteration cap or at a stall.

    Examples
    --------
    >>> import numpy as np
    >>> simplex_lmo = lambda c: np.eye(3)[np.argmin(c)]
    >>> p, info = project_by_min_norm_point(np.array([1.0, 0.2, -1.0]), simplex_lmo)
    >>> p.round(6).tolist()
    [0.9, 0.1, 0.0]
    """
    y = np.asarray(y, dtype=float)
    d = y.size
    # tolerances on g / R^2, with R^2 = d Rm^2 formed by division only (no overflow near 1e308)
    Rm = max(1.0, float(scale), float(np.abs(y).max(initial=0.0)))
    tol = GAP_RTOL * d
    accept = ACCEPT_RTOL * d
    cap = (50 * d + 500) if max_iter is None else int(max_iter)
    if coverage is not None and 0 < d <= COMPILED_MAX_DIM:
        code, it, gap, best_gap, best_p, corral = _mnp_coverage_loop(y, Rm, tol, cap, 2 * d + STALL_CYCLES, *coverage)
        status = ("solved", "stalled", "max_iter")[code]
        p = best_p
        if status != "solved":
            gap = best_gap
            if gap <= accept:
                status = "solved"
        return _finish(p, gap, it, corral, status, tol, accept, Rm, label)
    # the corral's vertices: rows `rows` of a buffer (a dropped vertex leaves its row unused until the
    # buffer is full and compacted: no O(k d) copy per minor cycle); see _mnp_cycle for the state
    c0 = min(d + 2, 16)
    Vbuf = np.empty((c0, d))
    Vbuf[0] = np.asarray(lmo(-y), dtype=float)
    rows = np.zeros(c0, dtype=np.int64)
    Gbuf = np.zeros((c0, c0))
    Gbuf[0, 0] = float(Vbuf[0] @ Vbuf[0])
    Vy = np.zeros(c0)
    Vy[0] = float(Vbuf[0] @ y)
    lam = np.zeros(c0)
    lam[0] = 1.0
    L = np.zeros((c0, c0))
    st = np.array([1, 1, 1], dtype=np.int64)         # corral size, next free buffer row, factor valid
    p = Vbuf[0].copy()
    gap = np.inf
    status = "max_iter"
    it = 0
    best = (np.inf, p)
    best_it = 0
    for it in range(1, cap + 1):
        z = p - y
        q = np.ascontiguousarray(lmo(z), dtype=float)
        gap = float((z / Rm) @ ((p - q) / Rm))          # g / Rm^2
        if gap < best[0]:
            best = (gap, p)
            best_it = it
        if gap <= tol:
            status = "solved"
            break
        if it - best_it > 2 * d + STALL_CYCLES:
            status = "stalled"       # no smaller gap for many cycles: rounding stops the progress
            break
        k = int(st[0])
        if st[1] == Vbuf.shape[0]:                   # no free buffer row: compact or grow
            if k < Vbuf.shape[0] // 2:
                Vbuf[:k] = Vbuf[rows[:k]]
                rows[:k] = np.arange(k)
                st[1] = k
            else:
                Vbuf = np.concatenate([Vbuf, np.empty((Vbuf.shape[0], d))])
        if k + 2 > rows.size:                        # room for one more vertex in the small arrays
            c = 2 * (k + 2)
            rows, Vy, lam = (np.concatenate([a, np.zeros(c - a.size, a.dtype)]) for a in (rows, Vy, lam))
            G2, L2 = np.zeros((c, c)), np.zeros((c, c))
            G2[:k, :k], L2[:k, :k] = Gbuf[:k, :k], L[:k, :k]
            Gbuf, L = G2, L2
        p = np.empty(d)
        if _mnp_cycle(q, y, Vbuf, rows, Gbuf, Vy, lam, L, st, p):
            status = "stalled"       # q already in the corral: rounding stops the progress
            p = best[1]
            break
    else:
        it = cap
    if status != "solved":
        gap, p = best
        if gap <= accept:
            status = "solved"
    return _finish(p, gap, it, int(st[0]), status, tol, accept, Rm, label)


def _finish(p, gap, it, corral, status, tol, accept, Rm, label):
    """The answer and its record, or SolveError when the gap is above the accepted one."""
    gap *= Rm * Rm
    info = {"iterations": it, "gap": gap, "corral": int(corral), "status": status,
            "tolerance": tol * Rm * Rm}
    if status != "solved":
        raise SolveError(
            f"{label}: the minimum-norm-point projection stopped ({status}) after {it} major cycles with "
            f"Frank-Wolfe gap {gap:.3g}, above the accepted {accept * Rm * Rm:.3g}; the answer is not returned.",
            status="not_converged")
    return p, info


def project_far_point(y, lmo, *, scale=1.0, max_iter=None, label="set", tol_rel=1e-14, accept_rel=1e-10):
    """Projection of a point far from a polytope known by its LMO, accurate at the data's scale.

    Wolfe's algorithm as in :func:`project_by_min_norm_point`, but on the weights of the corral
    with the quadratic part from the vertices' differences (data scale) and the linear part
    ``l_j = <v_j - v_0, y>`` summed exactly (:func:`setkit.kernels.hull.exact_dot`), so that y never
    meets the vertices in a rounded difference. The gap is computed the same way, and tolerances
    are relative to ``d * scale^2`` (the data), not to |y|^2. The LMO still receives the rounded
    direction p - y: when vertices tie within about one ulp of |y| times the data, the corral may
    stall; the run then raises SolveError stating the gap reached. O(major cycles * (LMO + d k)).

    >>> import numpy as np
    >>> simplex_lmo = lambda c: np.eye(3)[np.argmin(c)]
    >>> p, info = project_far_point(np.array([1e30, 1e30 + 2 ** 50, -1e30]), simplex_lmo)
    >>> p.tolist()
    [0.0, 1.0, 0.0]
    """
    from .hull import affine_minimizer, exact_dot
    y = np.asarray(y, dtype=float)
    d = y.size
    s2 = max(1.0, float(scale)) ** 2
    tol, accept = tol_rel * d * s2, accept_rel * d * s2
    cap = (50 * d + 500) if max_iter is None else int(max_iter)
    v0 = np.asarray(lmo(-y), dtype=float)
    v0y = exact_dot(v0, y)

    def linear_term(v):           # <v - v0, y - v0>, the y part exactly
        w = v - v0
        return (exact_dot(v, y) - v0y) - float(w @ v0)

    V = [v0]
    lin = [0.0]
    S = [0]
    lam = np.array([1.0])
    p = v0.copy()
    gap, status, it = np.inf, "max_iter", 0
    for it in range(1, cap + 1):
        W = np.array([v - v0 for v in V])
        xc = lam @ W[S]
        q = np.asarray(lmo(p - y), dtype=float)
        wq = q - v0
        lq = linear_term(q)
        g_S = W[S] @ xc - np.asarray(lin)[S]
        gap = float(lam @ g_S) - (float(wq @ xc) - lq)     # max_v <y - p, v - p> over the corral and q
        if gap <= tol:
            status = "solved"
            break
        if any(np.array_equal(q, V[j]) for j in S):
            status = "stalled"
            break
        V.append(q)
        lin.append(lq)
        S.append(len(V) - 1)
        lam = np.append(lam, 0.0)
        W = np.array([v - v0 for v in V])
        L = np.asarray(lin)
        for _minor in range(len(S) + 2):
            alpha = affine_minimizer(W[S], L[S])
            if np.all(alpha > 1e-15):
                lam = alpha
                break
            neg = alpha <= 1e-15
            with np.errstate(divide="ignore", invalid="ignore"):
                ratios = np.where(neg, lam / (lam - alpha), np.inf)
            theta = float(min(1.0, ratios.min()))
            lam = lam + theta * (alpha - lam)
            drop = lam <= 1e-15
            if not drop.any():
                drop[int(np.argmin(lam))] = True
            S = [j for j, dr in zip(S, drop) if not dr]
            lam = lam[~drop]
            lam = lam / lam.sum()
        p = lam @ np.array([V[j] for j in S])
    if status != "solved" and gap <= accept:
        status = "solved"
    info = {"iterations": it, "gap": gap, "corral": len(S), "status": status, "tolerance": tol}
    if status != "solved":
        raise SolveError(
            f"{label}: the far-point projection (|y| = {float(np.abs(y).max()):.3g}) stopped ({status}) after {it} "
            f"major cycles with Frank-Wolfe gap {gap:.3g}, above the accepted {accept:.3g} (data scale "
            f"{max(1.0, float(scale)):.3g}); the LMO sees the direction p - y rounded to one ulp of |y|, which "
            f"cannot separate vertices that tie that closely. The answer is not returned.", status="not_converged")
    return p, info


def project_rows(Y, lmo, *, scale=1.0, max_iter=None, label="set", coverage=None):
    """Row-wise :func:`project_by_min_norm_point`; returns ``(P, info)`` with per-row lists."""
    P = np.empty_like(Y)
    iters, texts = [], []
    for i, y in enumerate(Y):
        P[i], inf = project_by_min_norm_point(y, lmo, scale=scale, max_iter=max_iter, label=label, coverage=coverage)
        iters.append(inf["iterations"])
        texts.append(f"min-norm-point: gap {inf['gap']:.3g} after {inf['iterations']} major cycles")
    return P, {"status": ["solved"] * len(iters), "iterations": iters, "backend_status": texts}


def uncertified_rows(Y, P, lmo_rows, violation, *, scale=1.0):
    """Rows where a fast projection P of Y is not certified: not finite, outside the set, or with a
    Frank-Wolfe gap above ``ACCEPT_RTOL * R^2`` (R^2 = d max(1, scale, |y|_inf)^2).

    "Outside" means a violation above 1e-12 d min(R, 1e6 s), s = max(1, scale): relative to |y|
    (which bounds the rounding of a kernel computing p from y) but never more than 1e-6 d s, so that
    a point far outside a bounded set is caught even for |y| near 1e300.

    ``lmo_rows`` maps a (b, d) batch of directions to vertices (positively scale-invariant), and
    ``violation`` a batch of points to their largest constraint violation. The gap is computed on
    (p - y) / R so that no square overflows. Returns a boolean mask (b,).
    """
    b, d = Y.shape
    if b == 0:
        return np.zeros(0, bool)
    s = max(1.0, float(scale))
    Rm = np.maximum(s, np.abs(Y).max(axis=1))
    finite = np.isfinite(P).all(axis=1)
    bad = ~finite
    if finite.any():
        Pf, Yf, Rf = P[finite], Y[finite], Rm[finite]
        Z = (Pf - Yf) / Rf[:, None]
        Q = lmo_rows(Z)
        gap = np.einsum("ij,ij->i", Z, (Pf - Q) / Rf[:, None])
        viol = violation(Pf)
        bad[finite] = (gap > ACCEPT_RTOL * d) | ~(viol <= 1e-12 * d * np.minimum(Rf, 1e6 * s))
    return bad
