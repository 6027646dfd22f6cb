"""Euclidean projection onto network-flow polytopes by a dual Newton method on node potentials.

The set is {x : B x = s, lo <= x <= hi}, B the node-arc incidence matrix
((B x)_v = flow out of v - flow into v) and s the net supplies. Its projection
problem min 0.5 ||x - y||^2 has the concave dual

    g(p) = min_{lo <= x <= hi} 0.5 ||x - y||^2 + p^T (B x - s),
    x(p)_e = clip(y_e - (p_tail(e) - p_head(e)), lo_e, hi_e),   grad g(p) = B x(p) - s,

a piecewise-quadratic function of the node potentials p. We maximize it by
alternating two exact ascent moves:

* component shifts: the edges strictly between their bounds split the nodes into
  components; adding one constant to the potentials of a component changes only
  the edges crossing its boundary, and the shift that balances the component as a
  whole is the root of a monotone piecewise-linear function, found exactly over its
  sorted breakpoints (a single node is the smallest component);
* a semismooth Newton step on the component-centred balances: the generalized
  Hessian is minus the Laplacian of the free edges, B D B^T; the system is solved
  matrix-free by Jacobi-preconditioned conjugate gradients (O(E) per iteration, no
  factorization of the random graph's Laplacian), followed by a line search on the
  directional derivative of g (piecewise linear and monotone; Illinois regula falsi).

Potentials are centred on every connected component of the graph at each step
(g is invariant to such shifts), which keeps rounding at the scale of the data.

Stopping rule (measured here, not trusted from anywhere): the balance
residual ||B x(p) - s||_inf and the duality gap |p^T (B x(p) - s)| are both
below their tolerances. x(p) always satisfies the bounds exactly. A point that
does not meet the rule within the iteration budget is reported as not converged
(status 1) and the caller raises. The kernel never reports emptiness: that is
decided once, at compile time (``setkit.families._network.check_feasible``).

Accuracy and range. Flows are faithfully rounded (:func:`_reduced`: an exact three-term
expansion), tolerances are per row, and converged rows get a primal repair on the free edges, so
balance residuals end near 1e-15 of the data's scale (measured) — far below the 1e-7 that
membership allows. Inner products, sums of squares and the duality gap are formed on power-of-two
multiples of the vectors, so the arithmetic stays finite up to |y| ~ 1e300. Far points (|y| >> data)
are re-solved on y - B^T (p_1 + ... + p_k), kept as an exact floating-point expansion across rounds,
until their residual reaches the data's scale; far rows of networks with 5,000 edges or more start
from the duals of the LP max <y, x>. Measured on the seeded corpus of
``tests/test_network_far_points.py`` (certified by exact rational KKT conditions): every point up to
1e100; at 1e160..1e300 all birkhoff points, all but one Gaussian transport point, and all flow
points except some whose entries mix exponents. A point that does not reach tolerance is reported
as not converged (a SolveError for the caller), never returned. Under ``setkit.time_limit``,
networks of 20,000 edges or more check the deadline every 5 Newton steps and between rounds.
"""
from __future__ import annotations

import numpy as np
from numba import njit

from .. import limits

STATUS_TEXT = {0: "converged", 1: "iteration limit reached before the residual and gap tolerances",
               2: "a component's balance cannot be met (the set looks empty)"}


@njit(cache=True)
def _reduced(ye, pa, pb):
    """y_e - (p_a - p_b), faithfully rounded: error about one ulp of the result, whatever |y|, |p|.

    Potentials reach the magnitude of y (1e300 and more) while the flow on a free edge is at the
    scale of the data; plain arithmetic would lose all of it to cancellation, and a compensated
    sum still loses everything below eps^2 |p| (1e268 at 1e300: points whose entries span more
    than 30 orders of magnitude). The three terms are summed exactly into a non-overlapping
    expansion h0 + h1 + h2 (Knuth's TwoSum, Shewchuk's Grow-Expansion; Shewchuk, "Adaptive
    precision floating-point arithmetic and fast robust geometric predicates", 1997), rounded
    from the smallest component up.
    """
    a1 = ye - pa
    bb = a1 - ye
    a0 = (ye - (a1 - bb)) + (-pa - bb)           # a1 + a0 = ye - pa exactly
    q = pb + a0
    bb = q - pb
    h0 = (pb - (q - bb)) + (a0 - bb)             # q + h0 = pb + a0 exactly
    h2 = q + a1
    bb = h2 - q
    h1 = (q - (h2 - bb)) + (a1 - bb)             # h2 + h1 = q + a1 exactly
    return h2 + (h1 + h0)


@njit(cache=True)
def _primal(y, p, tail, head, lo, hi, x, free):
    for e in range(y.size):
        v = _reduced(y[e], p[tail[e]], p[head[e]])
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
def _down(a, n):
    """A power of two 2^-k (k >= 0) with 2^-k max|a[:n]| <= 1 when max|a| > 1, else 1.0.

    Products and sums of squares of balances and potentials overflow once they pass ~1e154; the
    kernel forms them on vectors multiplied by such factors (exact: powers of two), so points up
    to ~1e300 keep finite arithmetic.
    """
    amax = 0.0
    for v in range(n):
        if abs(a[v]) > amax:
            amax = abs(a[v])
    if not amax > 1.0 or not amax < np.inf:
        return 1.0
    return np.ldexp(1.0, -int(np.ceil(np.log2(amax))))


@njit(cache=True)
def _dir_deriv(y, p, d, t, tail, head, lo, hi, s, fr, fd):
    """phi'(t) * fr * fd for phi(t) = g(p + t d): sum_v d_v (B x(p + t d) - s)_v, each term multiplied
    by the powers of two fr (balances) and fd (direction) so that nothing overflows."""
    acc = 0.0
    for v in range(s.size):
        acc -= (s[v] * fr) * (d[v] * fd)
    for e in range(y.size):
        a, b = tail[e], head[e]
        v = y[e] - ((p[a] + t * d[a]) - (p[b] + t * d[b]))
        if v < lo[e]:
            v = lo[e]
        elif v > hi[e]:
            v = hi[e]
        acc += (v * fr) * ((d[a] - d[b]) * fd)
    return acc


@njit(cache=True)
def _matvec(d, ft, fh, nf, mu, out):
    for v in range(d.size):
        out[v] = mu * d[v]
    for k in range(nf):
        a, b = ft[k], fh[k]
        w = d[a] - d[b]
        out[a] += w
        out[b] -= w


@njit(cache=True)
def _cg(r, free, tail, head, mu, rel, max_it, d, res, z, q, w, diag, ft, fh):
    """Solve (B D B^T + mu I) d = r by Jacobi-preconditioned CG to ||res|| <= rel ||r||.

    The right side is first multiplied by a power of two bringing max|r| to [0.5, 1] (and d by its
    inverse at the end: exact), so that the inner products neither overflow nor underflow.
    """
    n = r.size
    rmax = 0.0
    for v in range(n):
        if abs(r[v]) > rmax:
            rmax = abs(r[v])
    sc = 1.0
    if rmax > 0.0 and rmax < np.inf:
        sc = np.ldexp(1.0, int(np.ceil(np.log2(rmax))))
        for v in range(n):
            r[v] = r[v] / sc
    for v in range(n):
        diag[v] = mu
    nf = 0
    for e in range(free.size):
        if free[e] and tail[e] != head[e]:
            ft[nf] = tail[e]
            fh[nf] = head[e]
            nf += 1
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
        _matvec(q, ft, fh, nf, mu, w)
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
    if sc != 1.0:
        for v in range(n):
            d[v] *= sc
            r[v] *= sc
    return it


@njit(cache=True)
def _solve_shift(ta, tL, tU, nb, target, bt, bd):
    """The shift lam nearest to 0 with sum_k clip(ta_k - lam, tL_k, tU_k) = target.

    The left side is non-increasing and piecewise linear in lam; the root is found
    by walking its sorted breakpoints from 0. Returns (lam, ok); ok is always True:
    a target beyond the reachable range (one ulp past it, by rounding at a
    breakpoint) gives the last breakpoint, since emptiness is decided at compile time.
    """
    f = 0.0
    for k in range(nb):
        c = ta[k]
        if c < tL[k]:
            c = tL[k]
        elif c > tU[k]:
            c = tU[k]
        f += c
    if f == target:
        return 0.0, True
    if f > target:
        sgn = 1.0       # walk right: f decreases
    else:
        sgn = -1.0      # walk left: f increases
    # breakpoints on the walking side, with the slope change met when passing them
    m = 0
    slope = 0.0         # d f / d lam just beyond 0 on the walking side
    for k in range(nb):
        u = ta[k] - tU[k]       # for lam < u the term sits at U
        l = ta[k] - tL[k]       # for lam > l the term sits at L
        if sgn > 0:
            if u <= 0.0 and 0.0 < l:
                slope -= 1.0
            if u > 0.0 and u < np.inf:
                bt[m] = u
                bd[m] = -1.0
                m += 1
            if l > 0.0 and l < np.inf:
                bt[m] = l
                bd[m] = 1.0
                m += 1
        else:
            if u < 0.0 and 0.0 <= l:
                slope -= 1.0
            if u < 0.0 and u > -np.inf:
                bt[m] = -u
                bd[m] = 1.0
                m += 1
            if l < 0.0 and l > -np.inf:
                bt[m] = -l
                bd[m] = -1.0
                m += 1
    order = np.argsort(bt[:m])
    pos = 0.0           # distance walked
    for j in range(m):
        dist = bt[order[j]]
        f_next = f + sgn * slope * (dist - pos)
        if (sgn > 0 and f_next <= target) or (sgn < 0 and f_next >= target):
            if slope != 0.0:
                return sgn * (pos + (target - f) / (sgn * slope)), True
            return sgn * dist, True
        f = f_next
        pos = dist
        slope += bd[order[j]]
    if slope != 0.0:
        return sgn * (pos + (target - f) / (sgn * slope)), True
    # the target lies beyond the reachable range by rounding only (feasibility is decided once, at
    # compile time): the last breakpoint is the closest shift; never a verdict of emptiness here
    return sgn * pos, True


@njit(cache=True)
def _components(free, tail, head, nn, parent, comp):
    """Connected components of the free edges (union-find); comp[v] in 0..k-1. Returns k."""
    for v in range(nn):
        parent[v] = v
    for e in range(free.size):
        if free[e]:
            a = tail[e]
            while parent[a] != a:
                parent[a] = parent[parent[a]]
                a = parent[a]
            b = head[e]
            while parent[b] != b:
                parent[b] = parent[parent[b]]
                b = parent[b]
            if a != b:
                parent[a] = b
    k = 0
    for v in range(nn):
        comp[v] = -1
    for v in range(nn):
        a = v
        while parent[a] != a:
            a = parent[a]
        if comp[a] < 0:
            comp[a] = k
            k += 1
        comp[v] = comp[a]
    return k


@njit(cache=True)
def _block_sweep(y, p, tail, head, lo, hi, s, indptr, adj_edge, adj_out, comp, ncomp, r, tol,
                 c_ptr, c_nodes, ta, tL, tU, bt, bd, fill):
    """Exact dual ascent along component shifts: for each component c of the free edges with a
    nonzero net imbalance, add to the potentials of c the shift that balances c as a whole
    (only the edges crossing c's boundary change). Returns False if some component cannot balance.
    """
    nn = s.size
    # nodes grouped by component
    for c in range(ncomp + 1):
        c_ptr[c] = 0
    for v in range(nn):
        c_ptr[comp[v] + 1] += 1
    for c in range(ncomp):
        c_ptr[c + 1] += c_ptr[c]
    for c in range(ncomp):
        fill[c] = c_ptr[c]
    for v in range(nn):
        c_nodes[fill[comp[v]]] = v
        fill[comp[v]] += 1
    for c in range(ncomp):
        R = 0.0
        for j in range(c_ptr[c], c_ptr[c + 1]):
            R += r[c_nodes[j]]
        if abs(R) <= tol:
            continue
        target = 0.0
        nb = 0
        for j in range(c_ptr[c], c_ptr[c + 1]):
            v = c_nodes[j]
            target += s[v]
            for k in range(indptr[v], indptr[v + 1]):
                e = adj_edge[k]
                a_, b_ = tail[e], head[e]
                if comp[a_] == comp[b_]:
                    continue        # inside the component: unchanged by the shift
                if adj_out[k]:
                    ta[nb] = _reduced(y[e], p[a_], p[b_])
                    tL[nb] = lo[e]
                    tU[nb] = hi[e]
                else:
                    ta[nb] = -_reduced(y[e], p[a_], p[b_])
                    tL[nb] = -hi[e]
                    tU[nb] = -lo[e]
                nb += 1
        # internal edges contribute nothing to the component's total balance
        lam, ok = _solve_shift(ta, tL, tU, nb, target, bt, bd)
        if not ok:
            return False
        if lam != 0.0:
            for j in range(c_ptr[c], c_ptr[c + 1]):
                p[c_nodes[j]] += lam
    return True


@njit(cache=True)
def project_network(Y, P0, tail, head, lo, hi, s, indptr, adj_edge, adj_out,
                    tol_r_rows, tol_gap_rows, max_newton, warm, scale_rows, gcomp, gcount):
    """Batched projection; returns X, P (final potentials), Newton steps, residuals, gaps, status, CG steps.

    Each step: (1) primal x(p), balances r; (2) components of the free edges and one exact
    block shift per imbalanced component; (3) a Newton step on the component-centred
    balances, solved by CG, with a line search on phi'(t). Row i starts from the potentials
    of row i-1 (row 0 from P0) when ``warm``.
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
    x = np.empty(m)
    free = np.zeros(m, np.int8)
    r = np.empty(nn)
    d = np.empty(nn)
    res = np.empty(nn)
    z = np.empty(nn)
    q = np.empty(nn)
    w = np.empty(nn)
    diag = np.empty(nn)
    rhs = np.empty(nn)
    ft = np.empty(m, np.int64)
    r2 = np.empty(nn)
    x2 = np.empty(m)
    fh = np.empty(m, np.int64)
    parent = np.empty(nn, np.int64)
    comp = np.empty(nn, np.int64)
    csum = np.empty(nn)
    ccount = np.empty(nn)
    c_ptr = np.empty(nn + 1, np.int64)
    c_nodes = np.empty(nn, np.int64)
    ta = np.empty(2 * m + 1)
    tL = np.empty(2 * m + 1)
    tU = np.empty(2 * m + 1)
    bt = np.empty(4 * m + 2)
    bd = np.empty(4 * m + 2)
    fill = np.empty(nn, np.int64)
    smax = 0.0
    for v in range(nn):
        if abs(s[v]) > smax:
            smax = abs(s[v])
    maxdeg = 1
    for v in range(nn):
        if indptr[v + 1] - indptr[v] > maxdeg:
            maxdeg = indptr[v + 1] - indptr[v]
    p = P0.copy()
    for i in range(b):
        y = Y[i]
        tol_r = tol_r_rows[i]
        tol_gap = tol_gap_rows[i]
        scale = scale_rows[i]
        if not warm:
            for v in range(nn):
                p[v] = P0[v]
        else:
            # a warm start only seeds the iteration: bound it by what the data can justify
            # (on a free path, potentials differ by at most |y_e| + |x_e| per edge)
            ymax = 0.0
            for e in range(m):
                if abs(y[e]) > ymax:
                    ymax = abs(y[e])
            R = nn * (ymax + scale)
            for v in range(nn):
                if p[v] > R:
                    p[v] = R
                elif p[v] < -R:
                    p[v] = -R
            # keep the warm start only if it balances better than zero potentials
            _primal(y, p, tail, head, lo, hi, x, free)
            _balance(x, tail, head, s, r)
            r_warm = 0.0
            for v in range(nn):
                if abs(r[v]) > r_warm:
                    r_warm = abs(r[v])
            for v in range(nn):
                d[v] = 0.0
            _primal(y, d, tail, head, lo, hi, x, free)
            _balance(x, tail, head, s, r)
            r_zero = 0.0
            for v in range(nn):
                if abs(r[v]) > r_zero:
                    r_zero = abs(r[v])
            if r_zero < r_warm:
                for v in range(nn):
                    p[v] = 0.0
        # centre the potentials on every connected component of the graph (g is invariant to
        # such shifts; centring keeps their magnitude, hence the rounding, at the data's scale)
        yabs = 0.0
        for e in range(m):
            if abs(y[e]) > yabs:
                yabs = abs(y[e])
        it = 0
        st = 1
        rn = np.inf
        gap = np.inf
        best_rn = np.inf
        stall = 0
        while True:
            for c in range(gcount.size):
                csum[c] = 0.0
            for v in range(nn):
                csum[gcomp[v]] += p[v] / gcount[gcomp[v]]      # the mean, without overflow near 1e308
            for v in range(nn):
                p[v] -= csum[gcomp[v]]
            _primal(y, p, tail, head, lo, hi, x, free)
            _balance(x, tail, head, s, r)
            rn = 0.0
            for v in range(nn):
                if abs(r[v]) > rn:
                    rn = abs(r[v])
            # the gap p^T r formed on power-of-two multiples of p and r (finite up to |p|, |r| ~ 1e300)
            fp = _down(p, nn)
            fr = _down(r, nn)
            gap_s = 0.0
            for v in range(nn):
                gap_s += (p[v] * fp) * (r[v] * fr)
            gap_s = abs(gap_s)
            gap = gap_s / fp / fr
            # rounding floor of the balances: each sums up to maxdeg terms of size ~ |p| + |y|
            pmax = 0.0
            for v in range(nn):
                if abs(p[v]) > pmax:
                    pmax = abs(p[v])
            # (flows are compensated, so |y| adds nothing; the granularity of the potentials does)
            floor = 8.0 * 2.220446049250313e-16 * maxdeg * (pmax + smax)
            # below the floor only once Newton steps stop helping (3 steps without halving the
            # residual): far points have a huge floor long before their active set is right
            if rn < 0.5 * best_rn:
                best_rn = rn
                stall = 0
            else:
                stall += 1
            if (rn <= tol_r or (rn <= floor and stall >= 3)) and \
                    gap_s <= max(tol_gap * fp * fr, floor * (pmax * fp) * nn * fr):
                st = 0
                # primal repair: the balances of x(p) cannot go below the granularity of the
                # potentials (one ulp of |p| moves a flow by that much), so Newton steps solved to
                # full precision on the identified free set update the flows directly,
                # x_F <- x_F - B_F^T d with (B_F B_F^T) d = B x - s; each kept only if it lowers
                # the measured residual (flows stay clipped to their bounds)
                xmax = smax
                for e in range(m):
                    if abs(x[e]) > xmax and abs(x[e]) < np.inf:
                        xmax = abs(x[e])
                repair_floor = 4.0 * 2.220446049250313e-16 * maxdeg * xmax
                for _rep in range(4):
                    if rn <= repair_floor:
                        break
                    ncomp = _components(free, tail, head, nn, parent, comp)
                    for c in range(ncomp):
                        csum[c] = 0.0
                        ccount[c] = 0.0
                    for v in range(nn):
                        csum[comp[v]] += r[v]
                        ccount[comp[v]] += 1.0
                    for v in range(nn):
                        rhs[v] = r[v] - csum[comp[v]] / ccount[comp[v]]
                    cgit[i] += _cg(rhs, free, tail, head, 1e-12, 1e-15, 4 * nn + 50, d, res, z, q, w, diag, ft, fh)
                    for e in range(m):
                        if free[e]:
                            v2 = x[e] - (d[tail[e]] - d[head[e]])
                            if v2 < lo[e]:
                                v2 = lo[e]
                            elif v2 > hi[e]:
                                v2 = hi[e]
                            x2[e] = v2
                        else:
                            x2[e] = x[e]
                    _balance(x2, tail, head, s, r2)
                    rn2 = 0.0
                    for v in range(nn):
                        if abs(r2[v]) > rn2:
                            rn2 = abs(r2[v])
                    if not rn2 < rn:
                        break
                    rn = rn2
                    for v in range(nn):
                        p[v] += d[v]
                        r[v] = r2[v]
                    fp = _down(p, nn)
                    fr = _down(r, nn)
                    gap_s = 0.0
                    for v in range(nn):
                        gap_s += (p[v] * fp) * (r[v] * fr)
                    gap = abs(gap_s) / fp / fr
                    for e in range(m):
                        x[e] = x2[e]
                break
            if it >= max_newton:
                break
            it += 1
            # (2) exact shifts of imbalanced components of the free edges
            ncomp = _components(free, tail, head, nn, parent, comp)
            for c in range(ncomp):
                csum[c] = 0.0
                ccount[c] = 0.0
            for v in range(nn):
                csum[comp[v]] += r[v]
                ccount[comp[v]] += 1.0
            big = 0.0
            for c in range(ncomp):
                if abs(csum[c]) > big:
                    big = abs(csum[c])
            if big > tol_r:
                if not _block_sweep(y, p, tail, head, lo, hi, s, indptr, adj_edge, adj_out, comp, ncomp, r,
                                    0.1 * tol_r, c_ptr, c_nodes, ta, tL, tU, bt, bd, fill):
                    st = 2
                    break
                _primal(y, p, tail, head, lo, hi, x, free)
                _balance(x, tail, head, s, r)
                ncomp = _components(free, tail, head, nn, parent, comp)
                for c in range(ncomp):
                    csum[c] = 0.0
                    ccount[c] = 0.0
                for v in range(nn):
                    csum[comp[v]] += r[v]
                    ccount[comp[v]] += 1.0
            # (3) Newton step on the component-centred balances
            for v in range(nn):
                w[v] = r[v] - csum[comp[v]] / ccount[comp[v]]
            fw = _down(w, nn)
            rr = 0.0
            for v in range(nn):
                rr += (w[v] * fw) * (w[v] * fw)
            rnorm = np.sqrt(rr) / fw
            if rnorm <= 0.1 * tol_r:
                continue
            for v in range(nn):
                rhs[v] = w[v]
            eta = min(0.1, rnorm / scale)
            cgit[i] += _cg(rhs, free, tail, head, 1e-12, max(eta, 1e-13), 4 * nn + 50, d, res, z, q, w, diag, ft, fh)
            # phi'(0) = d^T r and phi'(t) below are formed times fr * fd (powers of two): finite at 1e300
            fr = _down(r, nn)
            fd = _down(d, nn)
            d0 = 0.0
            for v in range(nn):
                d0 += (d[v] * fd) * (r[v] * fr)
            if not d0 > 0.0:
                continue
            t = 1.0
            dt = _dir_deriv(y, p, d, t, tail, head, lo, hi, s, fr, fd)
            lo_t, lo_v = 0.0, d0
            while dt > 0.5 * d0 and t < 1e8:
                lo_t, lo_v = t, dt
                t *= 4.0
                dt = _dir_deriv(y, p, d, t, tail, head, lo, hi, s, fr, fd)
            if dt > 0.5 * d0:
                t = lo_t
            elif dt < -0.5 * d0:
                hi_t, hi_v = t, dt
                side = 0
                for _k in range(60):
                    # Illinois variant of regula falsi on the piecewise-linear, non-increasing phi'
                    t = lo_t + (hi_t - lo_t) * lo_v / (lo_v - hi_v)
                    if not (t > lo_t and t < hi_t):
                        t = 0.5 * (lo_t + hi_t)
                    dt = _dir_deriv(y, p, d, t, tail, head, lo, hi, s, fr, fd)
                    if dt >= -0.5 * d0 and dt <= 0.5 * d0:
                        break
                    if dt > 0.0:
                        lo_t, lo_v = t, dt
                        if side == 1:
                            hi_v *= 0.5
                        side = 1
                    else:
                        hi_t, hi_v = t, dt
                        if side == -1:
                            lo_v *= 0.5
                        side = -1
            for v in range(nn):
                p[v] += t * d[v]
        for e in range(m):
            X[i, e] = x[e]
        for v in range(nn):
            P[i, v] = p[v]
        iters[i] = it
        resid[i] = rn
        gaps[i] = gap
        status[i] = st
    return X, P, iters, resid, gaps, status, cgit


def _round_expansion(comps):
    """The value of a non-overlapping expansion (smallest component first), summed from the smallest
    up: within about one ulp of the exact sum; clipped to +-1e300 (the kernel's range)."""
    z = np.zeros_like(comps[0])
    with np.errstate(over="ignore", invalid="ignore"):
        for c in comps:
            z = z + c
    return np.clip(np.nan_to_num(z, nan=0.0), -1e300, 1e300)


class NetworkProjector:
    """The arrays of one flow polytope, arranged for :func:`project_network`, plus warm-start potentials.

    One instance per thread (it keeps the last potentials for the next call).
    """

    def __init__(self, tail, head, lo, hi, supply, tol=1e-12):
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
        import scipy.sparse as sp
        from scipy.sparse.csgraph import connected_components
        G = sp.csr_matrix((np.ones(m), (self.tail, self.head)), shape=(n, n))
        _, comp = connected_components(G, directed=True, connection="weak")
        self.gcomp = np.ascontiguousarray(comp, dtype=np.int64)
        self.gcount = np.bincount(self.gcomp).astype(float)
        self.max_newton = 500

    # networks with at least this many edges run their Newton steps in chunks, between which the
    # thread's time limit (setkit.time_limit) is checked; smaller ones run in one compiled call.
    # chunk_steps must be at least 4: the kernel accepts a far point's rounding floor after 3 steps
    # without progress, counted within one call (measured: with chunks of 2, far rows never finish)
    chunk_edges = 20_000
    chunk_steps = 5

    def _tolerances(self, Y):
        """Per row: (scale, balance tolerance, gap tolerance)."""
        scale = np.maximum(max(1.0, self.data_scale), np.abs(Y).max(axis=1, initial=0.0))
        # balances are at the data's scale whatever |y| is (flows are faithfully rounded, see _reduced)
        tol_r = np.full(Y.shape[0], self.tol * max(1.0, self.data_scale))
        with np.errstate(over="ignore"):
            tol_gap = self.tol * scale * scale * max(1.0, np.sqrt(self.s.size))
        return scale, tol_r, tol_gap

    def _solve(self, Y, p0, warm):
        scale, tol_r, tol_gap = self._tolerances(Y)
        args = (self.tail, self.head, self.lo, self.hi, self.s, self.indptr, self.adj_edge, self.adj_out)
        if self.tail.size < self.chunk_edges or not limits.active():
            out = project_network(Y, p0, *args, tol_r, tol_gap, self.max_newton, warm, scale, self.gcomp, self.gcount)
            return out, tol_r, tol_gap
        # row by row, chunk_steps Newton steps at a time, resumed from the potentials reached
        b, m = Y.shape
        X, P = np.empty((b, m)), np.empty((b, self.s.size))
        it, cg, st = np.zeros(b, np.int64), np.zeros(b, np.int64), np.zeros(b, np.int64)
        rn, gap = np.zeros(b), np.zeros(b)
        p = p0
        for i in range(b):
            w = warm            # warm: row i starts from row i-1's potentials (as the kernel's batches)
            if not warm:
                p = p0
            while True:
                limits.check(f"projection onto a flow polytope of {m:,} edges (batch row {i})",
                             lambda: f"balance residual {rn[i]:.3g} after {int(it[i])} Newton steps" if it[i] else None)
                o = project_network(Y[i:i + 1], p, *args, tol_r[i:i + 1], tol_gap[i:i + 1],
                                    min(self.chunk_steps, self.max_newton - int(it[i])), w, scale[i:i + 1],
                                    self.gcomp, self.gcount)
                w = False
                X[i], P[i], rn[i], gap[i], st[i] = o[0][0], o[1][0], o[3][0], o[4][0], o[5][0]
                it[i] += o[2][0]
                cg[i] += o[6][0]
                p = P[i]
                if st[i] != 1 or it[i] >= self.max_newton:
                    break
        return (X, P, it, rn, gap, st, cg), tol_r, tol_gap

    def reduce(self, y, p):
        """y - B^T p (y_e - (p_tail - p_head)), faithfully rounded (as :func:`_reduced`): the same projection problem.

        The set lies in {B x = s}, so ||x - y + B^T p||^2 = ||x - y||^2 + const on it and the
        projection does not change; the free edges of the answer are then small numbers.
        """
        pa, pb = p[self.tail], p[self.head]
        with np.errstate(over="ignore", invalid="ignore"):      # the exact expansion of _reduced
            a1 = y - pa
            bb = a1 - y
            a0 = (y - (a1 - bb)) + (-pa - bb)
            q = pb + a0
            bb = q - pb
            h0 = (pb - (q - bb)) + (a0 - bb)
            h2 = q + a1
            bb = h2 - q
            h1 = (q - (h2 - bb)) + (a1 - bb)
            z = h2 + (h1 + h0)
        return np.clip(np.nan_to_num(z, nan=0.0), -1e300, 1e300)

    def _subtract_exact(self, comps, p):
        """The expansion of (sum of comps) - B^T p, exactly: -p_tail and +p_head are added to the
        non-overlapping expansion comps (smallest component first) by Shewchuk's Grow-Expansion,
        vectorized over the edges; components that are zero on every edge are dropped.

        A far point's reduction y - B^T (p_1 + ... + p_k) over several rounds must not round in
        between: a reduced value as large as 1e284 keeps only its top 53 bits, and the rounding
        (1e268) would erase the differences of y's smaller entries (a cycle of y summing to 1e189
        would be taken as balanced); the expansion keeps every bit of y.
        """
        for term in (-p[self.tail], p[self.head]):
            q = term
            out = []
            with np.errstate(over="ignore", invalid="ignore"):
                for h in comps:
                    s = q + h
                    bb = s - q
                    err = (q - (s - bb)) + (h - bb)
                    out.append(err)
                    q = s
            out.append(q)
            comps = [c for c in out if np.any(c != 0)] or [np.zeros_like(term)]
        return comps

    def project(self, Y, warm=True):
        """Project the rows of Y; returns X and a dict with iterations, residual, gap, status per row.

        Tolerances are per row (one far row never loosens another). The potentials of a far
        point are as large as the point, and one ulp of them (16 at 1e17) is far above the data:
        rows whose balance residual is only below the potentials' rounding floor are solved
        again on y - B^T p (:meth:`reduce`, exact up to rounding), which leaves the free edges
        at about one ulp of the old potentials; a few rounds reach the data's scale (each gains
        about 2^-50). A row is solved when its residual is within tol * data scale (or 64 ulps
        of it); otherwise its status is 1 (not converged) and the caller raises.
        Range: finite |y| <= 1e300 / (number of nodes).
        """
        Y = np.ascontiguousarray(Y, dtype=float)
        p0 = self.potentials if warm else np.zeros_like(self.potentials)
        X, P, it, rn, gap, st, cg, tol_r, tol_gap = self._project_rows(Y, p0, warm, lp_start=True)
        if warm:
            # a warm start from another point can lead the far-point rounds astray: such rows get one
            # cold attempt (from zero potentials) before they are reported as not converged
            for i in np.flatnonzero(st != 0):
                X1, P1, it1, rn1, gap1, st1, cg1, _, _ = self._project_rows(Y[i:i + 1], np.zeros_like(p0), False)
                it[i] += it1[0]
                cg[i] += cg1[0]
                if st1[0] == 0:
                    X[i], P[i], rn[i], gap[i], st[i] = X1[0], P1[0], rn1[0], gap1[0], 0
        ok = st == 0
        if ok.any():
            self.potentials = P[np.flatnonzero(ok)[-1]].copy()
        else:
            self.potentials = np.zeros_like(self.potentials)
        return X, dict(iterations=it, cg_iterations=cg, residual=rn, gap=gap, status=st, tol_r=tol_r, tol_gap=tol_gap)

    # far rows (|y| > lp_far x the data's scale) of networks with at least lp_edges edges start from
    # the potentials of the LP max <y, x> over the set (HiGHS duals, scaled back): for a far point the
    # projection's potentials are those plus a correction at the data's scale. Measured on the
    # 20,000-edge flow of benchmarks/flow_scaling: Newton steps 44 -> 4 at |y| = 1e16 (4.1 s -> 1.5 s
    # with the far-point rounds), 45 -> 13 at 1e6. Only the start changes: the stopping rule is the same.
    lp_far = 1e4
    lp_edges = 5_000

    def _lp_potentials(self, y):
        """Node potentials p with y_e - (p_tail - p_head) ~ 0 on the edges of the face maximizing <y, x>
        (minus the LP duals of the balance rows, times the power of two that scaled y), or None when
        the LP does not solve (unbounded along a cycle of uncapacitated edges, or a solver failure)."""
        from scipy.optimize import linprog
        top = float(np.abs(y).max(initial=0.0))
        if not (top > 0.0 and np.isfinite(top)):
            return None
        sig = float(np.ldexp(1.0, int(np.ceil(np.log2(top)))))
        # presolve off and one balance row per connected component dropped (it is the negative sum of
        # the others): HiGHS's presolve, removing those dependent rows itself, was measured factorizing
        # for over 10 minutes on a 200,000-edge flow; without it the LP took 3-4 s
        opts = {"presolve": False}
        left = limits.remaining()
        if left is not None:
            opts["time_limit"] = max(left, 1e-3)
        keep = np.ones(self.s.size, bool)
        keep[np.unique(self.gcomp, return_index=True)[1]] = False
        try:
            res = linprog(-y / sig, A_eq=self._incidence()[keep], b_eq=self.s[keep],
                          bounds=np.column_stack([self.lo, self.hi]), method="highs", options=opts)
            if res.status != 0:
                return None
            lam = np.zeros(self.s.size)
            lam[keep] = np.asarray(res.eqlin.marginals, dtype=float)
        except (ValueError, AttributeError, TypeError):
            return None
        with np.errstate(over="ignore", invalid="ignore"):
            p = -sig * lam
        return p if np.all(np.isfinite(p)) else None

    def _incidence(self):
        import scipy.sparse as sp
        if getattr(self, "_B", None) is None:
            m, n = self.tail.size, self.s.size
            cols = np.arange(m)
            self._B = sp.csr_matrix((np.concatenate([np.ones(m), -np.ones(m)]),
                                     (np.concatenate([self.tail, self.head]), np.concatenate([cols, cols]))),
                                    shape=(n, m))
        return self._B

    def _project_rows(self, Y, p0, warm, lp_start=False):
        """One pass of :meth:`project` without the cold retry: the dual solve (far rows of large networks
        from LP potentials when ``lp_start``), then far-point rounds."""
        far = np.zeros(Y.shape[0], bool)
        if lp_start and self.tail.size >= self.lp_edges:
            far = np.abs(Y).max(axis=1, initial=0.0) > self.lp_far * max(1.0, self.data_scale)
        if far.any():
            out = [None] * Y.shape[0]
            near = np.flatnonzero(~far)
            if near.size:
                res = self._project_rows(Y[near], p0, warm)
                for k, i in enumerate(near):
                    out[i] = tuple(a[k:k + 1] for a in res[:7])
            for i in np.flatnonzero(far):
                start = self._lp_potentials(Y[i])
                res = self._project_rows(Y[i:i + 1], p0 if start is None else start, warm and start is None)
                out[i] = res[:7]
            X, P, it, rn, gap, st, cg = (np.concatenate([o[j] for o in out]) for j in range(7))
            _, tol_r, tol_gap = self._tolerances(Y)
            return X, P, it, rn, gap, st, cg, tol_r, tol_gap
        (X, P, it, rn, gap, st, cg), tol_r, tol_gap = self._solve(Y, p0, warm)
        X, P = X.copy(), P.copy()
        target = np.maximum(tol_r, 64 * 2.220446049250313e-16 * max(1.0, self.data_scale)
                            * max(1, int(np.diff(self.indptr).max(initial=1))))
        for i in np.flatnonzero((st == 0) & (rn > target)):
            y = Y[i]
            p = P[i]
            comps = [y.copy()]          # y - B^T (p_1 + ... + p_k), kept exact as an expansion
            for _round in range(40):
                limits.check(f"projection of a far point onto a flow polytope (batch row {i}, reduction round "
                             f"{_round + 1})", lambda: f"balance residual {rn[i]:.3g}")
                comps = self._subtract_exact(comps, p)
                z = _round_expansion(comps)
                (x2, p2, it2, rn2, gap2, st2, cg2), _, _ = self._solve(z[None, :], np.zeros_like(p), False)
                it[i] += it2[0]
                cg[i] += cg2[0]
                if st2[0] != 0:
                    break
                if np.array_equal(z, y):
                    break               # the reduction no longer changes the point: no progress possible
                y, p = z, p2[0]
                X[i], rn[i], gap[i] = x2[0], rn2[0], gap2[0]
                if rn2[0] <= target[i]:
                    break
            st[i] = 0 if rn[i] <= target[i] else 1
        return X, P, it, rn, gap, st, cg, tol_r, tol_gap
