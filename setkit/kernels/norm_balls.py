"""Projections and linear minimization for structured norm balls (compiled, batched over rows).

* ordered weighted l1 (OWL): Omega(x) = sum_i w_i |x|_(i), w nonincreasing >= 0;
* k-support norm: the gauge of conv{x : ||x||_0 <= k, ||x||_2 <= 1};
* elastic net: alpha ||x||_1 + beta/2 ||x||_2^2 (a sublevel set, not a norm ball).

All functions are pure; rows are independent. The homogeneous balls (OWL,
k-support) take rows already divided by a power of two (see
``kernels.spectral.pow2_scales``) so that squares cannot overflow.
"""
from __future__ import annotations

import numpy as np
from numba import njit

MAX_NEWTON = 10_000


# -- ordered weighted l1 ------------------------------------------------------------------------
@njit(cache=True)
def _owl_compact(bz, bw, bc, nb, lam):
    """Pool adjacent violators among the blocks (sum z, sum w, count) at multiplier lam, in place,
    then drop the tail of blocks whose mean (sum z - lam sum w) / count is <= 0.

    Returns (blocks kept, g = sum over kept blocks of (sum w) * mean, S = sum of (sum w)^2 / count)."""
    m = 0
    for i in range(nb):
        bz[m] = bz[i]
        bw[m] = bw[i]
        bc[m] = bc[i]
        m += 1
        # previous mean < last mean  <=>  (z_p - lam w_p) c_l < (z_l - lam w_l) c_p
        while m > 1 and (bz[m - 2] - lam * bw[m - 2]) * bc[m - 1] < (bz[m - 1] - lam * bw[m - 1]) * bc[m - 2]:
            bz[m - 2] += bz[m - 1]
            bw[m - 2] += bw[m - 1]
            bc[m - 2] += bc[m - 1]
            m -= 1
    while m > 0 and bz[m - 1] - lam * bw[m - 1] <= 0.0:
        m -= 1
    g = 0.0
    S = 0.0
    for j in range(m):
        g += bw[j] * (bz[j] - lam * bw[j]) / bc[j]
        S += bw[j] * bw[j] / bc[j]
    return m, g, S


@njit(cache=True)
def _owl_first_blocks(z, w, lam, bz, bw, bc):
    """The pooling of z - lam w from single entries (as _owl_compact, reading z and w directly)."""
    m = 0
    for i in range(z.size):
        bz[m] = z[i]
        bw[m] = w[i]
        bc[m] = 1
        m += 1
        while m > 1 and (bz[m - 2] - lam * bw[m - 2]) * bc[m - 1] < (bz[m - 1] - lam * bw[m - 1]) * bc[m - 2]:
            bz[m - 2] += bz[m - 1]
            bw[m - 2] += bw[m - 1]
            bc[m - 2] += bc[m - 1]
            m -= 1
    return _owl_compact(bz, bw, bc, m, lam)


@njit(cache=True)
def owl_project_sorted(z, w, r, u):
    """Write into u the projection of z (sorted nonincreasing, >= 0) onto {Omega <= r}.

    The projection is prox_{lam Omega}(z) = max(PAV_nonincreasing(z - lam w), 0) for the
    multiplier lam >= 0 with g(lam) = <w, u(lam)> = r. As lam grows the pooled blocks only merge
    (the differences of z - lam w decrease, w being nonincreasing) and blocks whose mean reaches 0
    stay clipped, so |g'| = sum (sum_B w)^2 / |B| only decreases: g is convex, nonincreasing and
    piecewise linear, and Newton's method from lam = 0 stays left of the root and ends on the
    root's piece after finitely many steps. Each step pools the previous step's blocks (warm
    start: O(number of positive blocks), the first step O(n)). Returns (lam, steps, converged);
    steps = -1 when z is inside (u = z).
    """
    n = z.size
    g = 0.0
    S = 0.0
    for i in range(n):
        if z[i] > 0.0:
            g += w[i] * z[i]
            S += w[i] * w[i]
    if g <= r:
        for i in range(n):
            u[i] = z[i]
        return 0.0, -1, True
    bz = np.empty(n)
    bw = np.empty(n)
    bc = np.empty(n, np.int64)
    lam = (g - r) / S
    nb, g, S = _owl_first_blocks(z, w, lam, bz, bw, bc)
    steps = 1
    ok = True
    while g > r:
        if steps >= MAX_NEWTON or S <= 0.0:
            ok = False
            break
        new = lam + (g - r) / S
        if not new > lam:
            break
        lam = new
        nb, g, S = _owl_compact(bz, bw, bc, nb, lam)
        steps += 1
    # rounding can leave <w, u> a few ulps above r: scale into the ball (u stays sorted)
    f = r / g if (g > r and g > 0.0) else 1.0
    k = 0
    for b in range(nb):
        m = (bz[b] - lam * bw[b]) / bc[b]
        if m < 0.0:
            m = 0.0
        m *= f
        for _ in range(bc[b]):
            u[k] = m
            k += 1
    for i in range(k, n):
        u[i] = 0.0
    return lam, steps, ok


@njit(cache=True)
def owl_rows(A, order, w, rt, out):
    """Rows of A = |Y| / t (with their nonincreasing orders) onto {Omega <= rt_i}; returns #failures.

    Rows already inside are copied. out receives the magnitudes in the original positions."""
    b, n = A.shape
    z = np.empty(n)
    u = np.empty(n)
    bad = 0
    for r in range(b):
        s = 0.0
        for i in range(n):
            z[i] = A[r, order[r, i]]
            s += w[i] * z[i]
        if s <= rt[r]:
            for i in range(n):
                out[r, i] = A[r, i]
            continue
        lam, steps, ok = owl_project_sorted(z, w, rt[r], u)
        if not ok:
            bad += 1
        for i in range(n):
            out[r, order[r, i]] = u[i]
    return bad


# -- k-support norm -----------------------------------------------------------------------------
@njit(cache=True)
def ksupport_norm_sorted(z, k):
    """The k-support norm of a vector whose magnitudes z are sorted nonincreasingly.

    ||z||^2 = sum_{i<q} z_i^2 + (sum_{i>=q} z_i)^2 / (k - q) for the q in 0..k-1 with
    z_{q-1} >= T_q / (k - q) >= z_q, T_q = sum_{i>=q} z_i (0-based; from the variational form
    min over 0 < theta <= 1, sum theta <= k of sum z_i^2 / theta_i, whose minimizer is
    theta_i = min(1, z_i / rho)). O(k) after the sort. Where rounding leaves no q exactly
    consistent, the q with the smallest inconsistency is used."""
    n = z.size
    if k >= n:
        s = 0.0
        for i in range(n):
            s += z[i] * z[i]
        return np.sqrt(s)
    T = 0.0
    for i in range(n):
        T += z[i]
    S2 = 0.0
    best = np.inf
    best_val = 0.0
    for q in range(k):
        tau = T / (k - q)
        val = S2 + T * tau
        bad = max(z[q] - tau, 0.0)
        if q > 0:
            bad = max(bad, tau - z[q - 1])
        if bad == 0.0:
            return np.sqrt(val)
        if bad < best:
            best = bad
            best_val = val
        S2 += z[q] * z[q]
        T -= z[q]
        if T < 0.0:
            T = 0.0
    return np.sqrt(best_val)


@njit(cache=True)
def _ks_inner(z, p, k, nu):
    """The level tau with sum_{i<p} min(1, (z_i - tau)_+ / (nu tau)) = k (z sorted nonincreasing,
    z_i > 0 for i < p, p > k, nu > 0).

    The sum is decreasing in tau; walking tau down through the events (entry m turns active at
    tau = z_m, entry a saturates at tau = z_a / (1 + nu)) finds the piece, on which
    tau = D / ((m - a) + (k - a) nu), D the sum of the active unsaturated entries: no difference
    of large numbers, whatever the size of nu. O(p)."""
    a = 0
    m = 0
    D = 0.0
    for _ in range(2 * p + 2):
        na = z[m] if m < p else 0.0
        ns = z[a] / (1.0 + nu) if a < m else -1.0
        te = na if na >= ns else ns
        if m > a and D - (m - a) * te >= (k - a) * nu * te:
            acc = 0.0
            for i in range(a, m):
                acc += z[i]
            return acc / ((m - a) + (k - a) * nu)
        if na >= ns:
            D += z[m]
            m += 1
        else:
            D -= z[a]
            a += 1
    return np.nan


@njit(cache=True)
def _ks_point(z, p, k, nu, x):
    """x = prox of ||.||_sp^2 / (2 nu) at z (sorted, first p positive), and ||x||_sp / nu.

    theta_i = min(1, (z_i - tau)_+ / (nu tau)) (sum theta = k), x_i = z_i nu theta_i / (1 + nu theta_i),
    and ||x||_sp^2 = sum x_i^2 / theta_i = nu^2 sum theta_i (z_i / (1 + nu theta_i))^2: the returned
    root sum stays near the size of z however small nu (a tiny radius against z) is."""
    tau = _ks_inner(z, p, k, nu)
    R = 0.0
    for i in range(z.size):
        x[i] = 0.0
    for i in range(p):
        if z[i] > tau:
            # theta = min(1, (z_i - tau) / (nu tau)), written so that nu tau underflowing to 0 (a tiny
            # radius against entries that span hundreds of decades) reads as theta = 1, not 0/0
            d = z[i] - tau
            den = nu * tau
            th = 1.0 if d >= den else d / den
            v = z[i] / (1.0 + nu * th)
            x[i] = v * nu * th
            R += th * v * v
    return np.sqrt(R)


@njit(cache=True)
def ksupport_project_sorted(z, k, r, x):
    """Write into x the projection of z (sorted nonincreasing, >= 0, ||z||_sp > r > 0) onto {||.||_sp <= r}.

    x = prox of ||.||_sp^2 / (2 nu), which is x_i = z_i nu theta_i / (1 + nu theta_i) with
    theta_i = min(1, (z_i - tau)_+ / (nu tau)), sum theta = k (minimizing over theta in the
    variational form of the squared norm); nu > 0 makes ||x||_sp = r, and ||x(nu)||_sp is
    nondecreasing in nu. nu is bracketed from r / (sqrt(k) z_0) (feasible) by doubling, then
    bisected until the bracket stops shrinking (about 53 steps), each an O(n) walk; x is taken at
    the feasible end and scaled into the ball if rounding left it a few ulps out. Returns steps."""
    n = z.size
    p = 0
    while p < n and z[p] > 0.0:
        p += 1
    if p <= k:
        # at most k nonzeros: on such vectors the norm is the l2 norm, and the radial l2
        # projection lies in the (smaller) k-support ball, so it is the projection
        s = 0.0
        for i in range(n):
            s += (z[i] / z[0]) ** 2
        f = (r / z[0]) / np.sqrt(s)
        for i in range(n):
            x[i] = z[i] * f
        return 0
    tmp = np.empty(n)
    lo = r / (np.sqrt(k) * z[0])
    hi = 2.0 * lo
    steps = 0
    while hi * _ks_point(z, p, k, hi, tmp) <= r and steps < 5000:
        lo = hi
        hi *= 2.0
        steps += 1
    while steps < 5000:
        mid = 0.5 * (lo + hi)
        if not (lo < mid < hi):
            break
        if mid * _ks_point(z, p, k, mid, tmp) > r:
            hi = mid
        else:
            lo = mid
        steps += 1
    nrm = lo * _ks_point(z, p, k, lo, x)
    if nrm > r:
        f = r / nrm
        for i in range(n):
            x[i] *= f
    return steps


@njit(cache=True)
def ksupport_rows(A, order, k, rt, out):
    """Rows of A = |Y| / t (with their nonincreasing orders) onto {||.||_sp <= rt_i}; rows inside are copied."""
    b, n = A.shape
    z = np.empty(n)
    x = np.empty(n)
    for r in range(b):
        for i in range(n):
            z[i] = A[r, order[r, i]]
        if ksupport_norm_sorted(z, k) <= rt[r]:
            for i in range(n):
                out[r, i] = A[r, i]
            continue
        if rt[r] == 0.0:
            for i in range(n):
                out[r, i] = 0.0
            continue
        ksupport_project_sorted(z, k, rt[r], x)
        for i in range(n):
            out[r, order[r, i]] = x[i]


@njit(cache=True)
def ksupport_norm_rows(A, order, k):
    b, n = A.shape
    out = np.empty(b)
    z = np.empty(n)
    for r in range(b):
        for i in range(n):
            z[i] = A[r, order[r, i]]
        out[r] = ksupport_norm_sorted(z, k)
    return out


# -- elastic net ---------------------------------------------------------------------------------
@njit(cache=True)
def elastic_level(alpha, beta, r):
    """The t >= 0 with alpha t + beta t^2 / 2 = r (stable root), the largest |x_i| in the set."""
    return 2.0 * r / (alpha + np.sqrt(alpha * alpha + 2.0 * beta * r))


@njit(cache=True)
def elastic_project_row(z, alpha, beta, r, u):
    """Write into u the projection of z >= 0 (outside) onto {alpha sum u + beta/2 sum u^2 <= r}.

    u_i = (z_i - lam alpha)_+ / (1 + lam beta) (soft threshold then scale, the KKT form) with
    phi(lam) = alpha sum u + beta/2 sum u^2 = r. Each u_i is convex and nonincreasing in lam, so
    phi is; Newton's method started at a lower bound of the root (the root of the one-coordinate
    problem of the largest z, which keeps every square finite) stays left of the root and
    converges quadratically. Stops when a step no longer moves lam; u is then scaled into the
    set if rounding left phi a few ulps above r. Returns (lam, steps, converged)."""
    n = z.size
    zmax = 0.0
    for i in range(n):
        if z[i] > zmax:
            zmax = z[i]
    c1 = elastic_level(alpha, beta, r)
    lam = 0.0
    if zmax > c1:
        lam = (zmax - c1) / (alpha + c1 * beta)
    steps = 0
    ok = True
    while True:
        D = 1.0 + lam * beta
        a1 = 0.0
        a2 = 0.0
        dphi = 0.0
        for i in range(n):
            v = z[i] - lam * alpha
            if v > 0.0:
                ui = v / D
                a1 += ui
                a2 += ui * ui
                g = alpha + beta * ui
                dphi += g * g
        phi = alpha * a1 + 0.5 * beta * a2
        if phi <= r or dphi == 0.0:
            break
        if steps >= 200:
            ok = False
            break
        new = lam + (phi - r) * D / dphi
        if not new > lam:
            break
        lam = new
        steps += 1
    D = 1.0 + lam * beta
    a1 = 0.0
    a2 = 0.0
    for i in range(n):
        v = z[i] - lam * alpha
        u[i] = v / D if v > 0.0 else 0.0
        a1 += u[i]
        a2 += u[i] * u[i]
    if alpha * a1 + 0.5 * beta * a2 > r:
        f = 2.0 * r / (alpha * a1 + np.sqrt(alpha * alpha * a1 * a1 + 2.0 * beta * a2 * r))
        for i in range(n):
            u[i] *= f
    return lam, steps, ok


@njit(cache=True)
def elastic_rows(A, alpha, beta, r, out):
    """Rows of A = |Y| onto the elastic-net set (rows inside copied); returns #failures."""
    b, n = A.shape
    bad = 0
    u = np.empty(n)
    for row in range(b):
        a1 = 0.0
        a2 = 0.0
        big = 0.0
        for i in range(n):
            a1 += A[row, i]
            big = max(big, A[row, i])
        # the square is only formed when it cannot overflow (an entry above 1e150 is far outside)
        inside = False
        if big <= 1e150:
            for i in range(n):
                a2 += A[row, i] * A[row, i]
            inside = alpha * a1 + 0.5 * beta * a2 <= r
        if inside:
            for i in range(n):
                out[row, i] = A[row, i]
            continue
        lam, steps, ok = elastic_project_row(A[row], alpha, beta, r, u)
        if not ok:
            bad += 1
        for i in range(n):
            out[row, i] = u[i]
    return bad


@njit(cache=True)
def elastic_lmo_rows(A, alpha, beta, r, out):
    """Maximizers of <a, x> over the elastic-net set for rows a = |c| / t >= 0 (nonnegative answers).

    beta = 0: (r / alpha) e_j at the largest a_j. Otherwise x_i = (eta a_i - alpha)_+ / beta (KKT,
    eta = 1/multiplier); on the top-m active set the constraint reads eta^2 S2_m / (2 beta) =
    r + m alpha^2 / (2 beta) (the linear terms cancel), so eta = sqrt((2 beta r + m alpha^2) / S2_m)
    for the m with eta a_m > alpha >= eta a_{m+1}; one sort, O(n log n). A single active
    coordinate uses the stable root of alpha t + beta t^2 / 2 = r."""
    b, n = A.shape
    for row in range(b):
        a = A[row]
        for i in range(n):
            out[row, i] = 0.0
        order = np.argsort(-a)
        if a[order[0]] <= 0.0:
            continue
        if beta == 0.0:
            out[row, order[0]] = r / alpha
            continue
        S2 = 0.0
        m = 0
        eta = 0.0
        for j in range(n):
            aj = a[order[j]]
            S2 += aj * aj
            eta = np.sqrt((2.0 * beta * r + (j + 1) * alpha * alpha) / S2)
            nxt = a[order[j + 1]] if j + 1 < n else 0.0
            if eta * nxt <= alpha:
                m = j + 1
                break
        if m == 0:
            m = n
        if m == 1:
            out[row, order[0]] = elastic_level(alpha, beta, r)
            continue
        for j in range(m):
            v = eta * a[order[j]] - alpha
            out[row, order[j]] = v / beta if v > 0.0 else 0.0
