"""Euclidean projection onto network-flow polytopes by a dual Newton method on node potentials.

The set is {x : B x = s, lo <= x <= hi}, B the node-arc incidence matrix
((B x)_v = flow out of v - flow into v) and s the net supplies. Its projection
problem min 0.5 ||x - y||^2 has the concave dual

    g(p) = min_{lo <= x <= hi} 0.5 ||x - y||^2 + p^T (B x - s),
    x(p)_e = clip(y_e - (p_tail(e) - p_head(e)), lo_e, hi_e),   grad g(p) = B x(p) - s,

a piecewise-quadratic function of the node potentials p. We maximize it with
a semismooth Newton method: the generalized Hessian is minus the Laplacian of
the edges that are strictly between their bounds, B D B^T; the Newton system
(B D B^T + mu I) d = grad g is solved matrix-free by Jacobi-preconditioned
conjugate gradients (O(E) per iteration, no factorization of the random
graph's Laplacian), followed by a line search on the directional derivative
of g (piecewise linear and monotone). When a Newton step stalls, a Gauss-Seidel
sweep of exact coordinate maximization repairs it: each node's balance is a
monotone piecewise-linear function of its own potential and is solved exactly
over its sorted breakpoints.

Stopping rule (measured here, not trusted from anywhere): the balance
residual ||B x(p) - s||_inf and the duality gap |p^T (B x(p) - s)| are both
below their tolerances. x(p) always satisfies the bounds exactly. A point that
does not meet the rule within the iteration budget is reported as not converged
(status 1) and the caller raises.
"""
from __future__ import annotations

import numpy as np
from numba import njit

STATUS_TEXT = {0: "converged", 1: "iteration limit reached before the residual and gap tolerances",
               2: "a node balance cannot be met (the set looks empty)"}


@njit(cache=True)
def _primal(y, p, tail, head, lo, hi, x, free):
    for e in range(y.size):
        v = y[e] - (p[tail[e]] - p[head[e]])
        if v <= lo[e]:
            x[e] = lo[e]
            free[e] = 0
        elif v >= hi[e]:
            x[e] = hi[e]
            free[e] = 0
        else:
            x[e] = v
            free[e] = 1


@njit(cache=True)
def _balance(x, tail, head, s, r):
    for v in range(s.size):
        r[v] = -s[v]
    for e in range(x.size):
        r[tail[e]] += x[e]
        r[head[e]] -= x[e]


@njit(cache=True)
def _dir_deriv(y, p, d, t, tail, head, lo, hi, s):
    """phi'(t) for phi(t) = g(p + t d): sum_v d_v (B x(p + t d) - s)_v."""
    acc = 0.0
    for v in range(s.size):
        acc -= s[v] * d[v]
    for e in range(y.size):
        a, b = tail[e], head[e]
        v = y[e] - ((p[a] + t * d[a]) - (p[b] + t * d[b]))
        if v < lo[e]:
            v = lo[e]
        elif v > hi[e]:
            v = hi[e]
        acc += v * (d[a] - d[b])
    return acc


@njit(cache=True)
def _matvec(d, free, tail, head, mu, out):
    for v in range(d.size):
        out[v] = mu * d[v]
    for e in range(free.size):
        if free[e]:
            w = d[tail[e]] - d[head[e]]
            out[tail[e]] += w
            out[head[e]] -= w


@njit(cache=True)
def _cg(r, free, tail, head, mu, rel, max_it, d, res, z, q, w, diag):
    """Solve (B D B^T + mu I) d = r by Jacobi-preconditioned CG to ||res|| <= rel ||r||."""
    n = r.size
    for v in range(n):
        diag[v] = mu
    for e in range(free.size):
        if free[e]:
            diag[tail[e]] += 1.0
            diag[head[e]] += 1.0
    rr0 = 0.0
    for v in range(n):
        d[v] = 0.0
        res[v] = r[v]
        z[v] = res[v] / diag[v]
        q[v] = z[v]
        rr0 += r[v] * r[v]
    rz = 0.0
    for v in range(n):
        rz += res[v] * z[v]
    target = rel * rel * rr0
    it = 0
    while it < max_it:
        _matvec(q, free, tail, head, mu, w)
        qw = 0.0
        for v in range(n):
            qw += q[v] * w[v]
        if qw <= 0.0:
            break
        alpha = rz / qw
        rr = 0.0
        for v in range(n):
            d[v] += alpha * q[v]
            res[v] -= alpha * w[v]
            rr += res[v] * res[v]
        it += 1
        if rr <= target:
            break
        rz_new = 0.0
        for v in range(n):
            z[v] = res[v] / diag[v]
            rz_new += res[v] * z[v]
        beta = rz_new / rz
        rz = rz_new
        for v in range(n):
            q[v] = z[v] + beta * q[v]
    return it


@njit(cache=True)
def _gauss_seidel(y, p, tail, head, lo, hi, s, indptr, adj_edge, adj_out, bk_t, bk_k):
    """One sweep of exact coordinate maximization of g: node by node, solve balance_v(p_v) = s_v.

    With a_k, L_k, U_k per incident edge, balance_v(q) = sum_k clip(a_k - q, L_k, U_k) is
    non-increasing and piecewise linear; its root is found over the sorted breakpoints.
    Returns 2 if some node's balance cannot reach s_v (empty set), else 0.
    """
    nn = s.size
    for v in range(nn):
        k0, k1 = indptr[v], indptr[v + 1]
        if k1 == k0:
            continue
        q0 = p[v]
        # value and slope at q0, and the breakpoints
        f = 0.0
        nb = 0
        for k in range(k0, k1):
            e = adj_edge[k]
            if adj_out[k]:
                a = y[e] + p[head[e]]
                L, U = lo[e], hi[e]
            else:
                a = p[tail[e]] - y[e]
                L, U = -hi[e], -lo[e]
            if tail[e] == head[e]:
                continue
            c = a - q0
            if c < L:
                c = L
            elif c > U:
                c = U
            f += c
            if U < np.inf:
                bk_t[nb] = a - U   # below this the term sits at U; above it the term is free
                bk_k[nb] = -1      # slope change when passing upward: -1
                nb += 1
            if L > -np.inf:
                bk_t[nb] = a - L   # above this the term sits at L
                bk_k[nb] = 1
                nb += 1
        target = s[v]
        if f == target:
            continue
        # slope just to the right of q0: minus the number of free terms there
        slope = 0.0
        for k in range(k0, k1):
            e = adj_edge[k]
            if tail[e] == head[e]:
                continue
            if adj_out[k]:
                a = y[e] + p[head[e]]
                L, U = lo[e], hi[e]
            else:
                a = p[tail[e]] - y[e]
                L, U = -hi[e], -lo[e]
            if a - U <= q0 and q0 < a - L:
                slope -= 1.0
        order = np.argsort(bk_t[:nb])
        if f > target:
            # move right: q increases, f decreases
            q = q0
            done = False
            for j in range(nb):
                t = bk_t[order[j]]
                if t <= q0:
                    continue
                ft = f + slope * (t - q)
                if ft <= target:
                    if slope < 0.0:
                        q = q + (target - f) / slope
                    else:
                        q = t
                    done = True
                    break
                f = ft
                q = t
                slope += bk_k[order[j]]
            if not done:
                if slope < 0.0:
                    q = q + (target - f) / slope
                else:
                    return 2
            p[v] = q
        else:
            # move left: q decreases, f increases; slope just left of q0
            slope = 0.0
            for k in range(k0, k1):
                e = adj_edge[k]
                if tail[e] == head[e]:
                    continue
                if adj_out[k]:
                    a = y[e] + p[head[e]]
                    L, U = lo[e], hi[e]
                else:
                    a = p[tail[e]] - y[e]
                    L, U = -hi[e], -lo[e]
                if a - U < q0 and q0 <= a - L:
                    slope -= 1.0
            q = q0
            done = False
            for jj in range(nb):
                j = nb - 1 - jj
                t = bk_t[order[j]]
                if t >= q0:
                    continue
                ft = f - slope * (q - t)
                if ft >= target:
                    if slope < 0.0:
                        q = q + (target - f) / slope
                    else:
                        q = t
                    done = True
                    break
                f = ft
                q = t
                slope -= bk_k[order[j]]
            if not done:
                if slope < 0.0:
                    q = q + (target - f) / slope
                else:
                    return 2
            p[v] = q
    return 0


@njit(cache=True)
def project_network(Y, P0, tail, head, lo, hi, s, indptr, adj_edge, adj_out,
                    tol_r, tol_gap, max_newton, warm, scale, mu_c, stall_t):
    """Batched projection; returns X, P (final potentials), iterations, residuals, gaps, status.

    Row i starts from the potentials of row i-1 (row 0 from P0) when ``warm``.
    """
    b, m = Y.shape
    nn = s.size
    X = np.empty((b, m))
    P = np.empty((b, nn))
    iters = np.zeros(b, np.int64)
    resid = np.zeros(b)
    gaps = np.zeros(b)
    status = np.zeros(b, np.int64)
    cgit = np.zeros(b, np.int64)
    lsit = np.zeros(b, np.int64)
    gsit = np.zeros(b, np.int64)
    x = np.empty(m)
    free = np.zeros(m, np.int8)
    r = np.empty(nn)
    d = np.empty(nn)
    res = np.empty(nn)
    z = np.empty(nn)
    q = np.empty(nn)
    w = np.empty(nn)
    diag = np.empty(nn)
    maxdeg = 1
    for v in range(nn):
        if indptr[v + 1] - indptr[v] > maxdeg:
            maxdeg = indptr[v + 1] - indptr[v]
    bk_t = np.empty(2 * maxdeg)
    bk_k = np.empty(2 * maxdeg)
    p = P0.copy()
    inv_scale = 1.0 / scale
    for i in range(b):
        y = Y[i]
        if not warm:
            for v in range(nn):
                p[v] = P0[v]
        it = 0
        st = 1
        rn = np.inf
        gap = np.inf
        stalls = 0
        while it < max_newton:
            _primal(y, p, tail, head, lo, hi, x, free)
            _balance(x, tail, head, s, r)
            rn = 0.0
            rr = 0.0
            gap = 0.0
            for v in range(nn):
                a = abs(r[v])
                if a > rn:
                    rn = a
                rr += r[v] * r[v]
                gap += p[v] * r[v]
            gap = abs(gap)
            if rn <= tol_r and gap <= tol_gap:
                st = 0
                break
            it += 1
            if stalls > 0:
                # repair a stalled Newton step with an exact coordinate sweep
                if _gauss_seidel(y, p, tail, head, lo, hi, s, indptr, adj_edge, adj_out, bk_t, bk_k) == 2:
                    st = 2
                    break
                stalls = 0
                gsit[i] += 1
                continue
            rnorm = np.sqrt(rr)
            mu = 1e-10 + mu_c * min(1.0, rnorm * inv_scale)
            eta = min(0.1, rnorm)
            cgit[i] += _cg(r, free, tail, head, mu, max(eta, 1e-12), 4 * nn + 50, d, res, z, q, w, diag)
            # line search on phi'(t) = <d, B x(p + t d) - s>, non-increasing in t
            d0 = 0.0
            for v in range(nn):
                d0 += d[v] * r[v]
            if not d0 > 0.0:
                stalls = 1
                continue
            t = 1.0
            dt = _dir_deriv(y, p, d, t, tail, head, lo, hi, s)
            if dt < -0.5 * d0:
                lo_t, lo_v = 0.0, d0
                hi_t, hi_v = 1.0, dt
                for _k in range(40):
                    # regula falsi on the piecewise-linear phi'
                    t = lo_t + (hi_t - lo_t) * lo_v / (lo_v - hi_v)
                    if not (t > lo_t and t < hi_t):
                        t = 0.5 * (lo_t + hi_t)
                    dt = _dir_deriv(y, p, d, t, tail, head, lo, hi, s)
                    lsit[i] += 1
                    if dt >= -0.5 * d0 and dt <= 0.5 * d0:
                        break
                    if dt > 0.0:
                        lo_t, lo_v = t, dt
                    else:
                        hi_t, hi_v = t, dt
                if t < stall_t:
                    stalls = 1
            for v in range(nn):
                p[v] += t * d[v]
        if st == 1 and it >= max_newton:
            _primal(y, p, tail, head, lo, hi, x, free)
            _balance(x, tail, head, s, r)
            rn = 0.0
            gap = 0.0
            for v in range(nn):
                if abs(r[v]) > rn:
                    rn = abs(r[v])
                gap += p[v] * r[v]
            gap = abs(gap)
            if rn <= tol_r and gap <= tol_gap:
                st = 0
        for e in range(m):
            X[i, e] = x[e]
        for v in range(nn):
            P[i, v] = p[v]
        iters[i] = it
        resid[i] = rn
        gaps[i] = gap
        status[i] = st
    return X, P, iters, resid, gaps, status, cgit, lsit, gsit


class NetworkProjector:
    """The arrays of one flow polytope, arranged for :func:`project_network`, plus warm-start potentials.

    One instance per thread (it keeps the last potentials for the next call).
    """

    def __init__(self, tail, head, lo, hi, supply, tol=1e-10):
        self.tail = np.ascontiguousarray(tail, dtype=np.int64)
        self.head = np.ascontiguousarray(head, dtype=np.int64)
        self.lo = np.ascontiguousarray(lo, dtype=float)
        self.hi = np.ascontiguousarray(hi, dtype=float)
        self.s = np.ascontiguousarray(supply, dtype=float)
        n, m = self.s.size, self.tail.size
        # incidence lists: for node v, its edges with a flag "edge leaves v"
        ends = np.concatenate([self.tail, self.head])
        edge = np.concatenate([np.arange(m), np.arange(m)])
        out = np.concatenate([np.ones(m, np.int8), np.zeros(m, np.int8)])
        order = np.argsort(ends, kind="stable")
        self.adj_edge = np.ascontiguousarray(edge[order], dtype=np.int64)
        self.adj_out = np.ascontiguousarray(out[order])
        self.indptr = np.zeros(n + 1, np.int64)
        np.cumsum(np.bincount(ends, minlength=n), out=self.indptr[1:])
        fin = np.concatenate([self.lo[np.isfinite(self.lo)], self.hi[np.isfinite(self.hi)], self.s])
        self.data_scale = float(np.abs(fin).max(initial=0.0))
        self.tol = tol
        self.potentials = np.zeros(n)
        self.max_newton = 500
        self.mu_c = 1.0
        self.stall_t = 0.05

    def project(self, Y, warm=True):
        """Project the rows of Y; returns X and a dict with iterations, residual, gap, status per row."""
        Y = np.ascontiguousarray(Y, dtype=float)
        scale = max(1.0, self.data_scale, float(np.abs(Y).max(initial=0.0)))
        tol_r = self.tol * scale
        tol_gap = self.tol * scale * scale * max(1.0, np.sqrt(self.s.size))
        p0 = self.potentials if warm else np.zeros_like(self.potentials)
        X, P, it, rn, gap, st, cg, ls, gs = project_network(Y, p0, self.tail, self.head, self.lo, self.hi, self.s,
                                                self.indptr, self.adj_edge, self.adj_out, tol_r, tol_gap,
                                                self.max_newton, warm, scale, self.mu_c, self.stall_t)
        ok = st == 0
        if ok.any():
            self.potentials = P[np.flatnonzero(ok)[-1]].copy()
        else:
            self.potentials = np.zeros_like(self.potentials)
        return X, dict(iterations=it, cg_iterations=cg, line_search=ls, sweeps=gs, residual=rn, gap=gap, status=st, tol_r=tol_r, tol_gap=tol_gap)
