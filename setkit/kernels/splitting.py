"""Splitting methods for projections onto intersections and linear images of sets.

Pure, batched functions built only on the parts' own operators (passed in as
callables on flat ``(b, d)`` batches). Each one stops on a certificate it can
compute exactly, never on an iteration count alone, and reports per row::

    status       "solved" | "not_converged" | "empty"
    iterations   sweeps (or function evaluations) used
    gap          the duality gap (see each function for what it bounds)
    residual     the measured infeasibility of the returned point

What the certificates bound (p the returned point, p* the exact projection):

* :func:`dykstra` and :func:`project_with_cuts` return a point exactly in one
  part (up to that part's rounding) and within ``residual`` of the others. Their
  gap is a Lagrangian duality gap computed without cancellation. If
  ``residual`` is 0 the gap bounds (1/2)||p - p*||^2 exactly (weak duality plus
  strong convexity of (1/2)||x - y||^2). With ``residual`` r > 0 the bound holds
  up to a term of order dist(p, K) * ||y - p*||, and dist(p, K) <= c * r for a
  regularity (Hoffman) constant c of the intersection that we cannot compute;
  this is why both the gap and the residual must be small before a row is
  accepted.
* :func:`project_linear_image` keeps its iterate exactly in the part, so its
  Frank-Wolfe gap bounds (1/2)||u - u*||^2 for the image point u without
  any extra term.
"""
from __future__ import annotations

import numpy as np

__all__ = ["dykstra", "project_with_cuts", "project_linear_image"]


def _new_info(b):
    return {"status": ["not_converged"] * b, "iterations": [0] * b,
            "gap": np.full(b, np.nan), "residual": np.full(b, np.nan)}


def dykstra(projections, Y, scale, accuracy=1e-7, max_iterations=20_000, divergence=1e8):
    """Dykstra's alternating projections onto K_1 ∩ ... ∩ K_m, batched over rows.

    Each sweep projects x + q_i onto K_i and keeps the increment q_i (an outer
    normal of K_i at the new point x_i). The invariant y - x = sum q_i makes the
    increments dual variables of min (1/2)||x - y||^2 + sum indicator_i(x), and
    sigma_i(q_i) = <q_i, x_i>, so the duality gap at the last point x is

        gap = sum_i <q_i, x_i - x>        (no cancellation of large terms)

    and the residual is max_i ||x_i - x|| >= max_i dist(x, K_i). A row stops when
    gap <= (1/2)(accuracy*scale)^2 and residual <= accuracy*scale. O(sweeps * sum of
    the parts' projection costs).

    Parameters
    ----------
    projections : list of callables mapping a (b, d) batch to its projections.
    Y : (b, d) points to project.
    scale : (b,) magnitudes that make the tolerances relative.
    divergence : rows whose increments grow beyond ``divergence * (scale + ||y||)``
        are reported with status "empty" (the parts have no common point).

    Returns
    -------
    X : (b, d) points; info : dict of per-row lists/arrays (see module doc).
    """
    Y = np.asarray(Y, dtype=float)
    b, d = Y.shape
    m = len(projections)
    out = Y.copy()
    info = _new_info(b)
    rows = np.arange(b)
    scale = np.broadcast_to(np.asarray(scale, dtype=float), (b,)).copy()
    tol_r = accuracy * scale
    tol_g = 0.5 * tol_r ** 2
    big = divergence * (scale + np.abs(Y).max(axis=1))
    X = Y.copy()
    Yact = Y.copy()
    Q = np.zeros((m, b, d))
    Xi = np.zeros((m, b, d))
    for it in range(1, max_iterations + 1):
        for i, proj in enumerate(projections):
            Z = X + Q[i]
            X = proj(Z)
            Q[i] = Z - X
            Xi[i] = X
        diff = Xi - X[None]
        res = np.sqrt(np.einsum("mbd,mbd->mb", diff, diff)).max(axis=0)
        gap = np.einsum("mbd,mbd->b", Q, diff)
        done = (res <= tol_r[rows]) & (gap <= tol_g[rows])
        qmax = np.sqrt(np.einsum("mbd,mbd->mb", Q, Q)).max(axis=0)
        empty = ~done & (qmax > big[rows])
        last = it == max_iterations
        finish = done | empty | last
        if finish.any():
            for j in np.flatnonzero(finish):
                r = rows[j]
                out[r] = X[j]
                info["status"][r] = "solved" if done[j] else ("empty" if empty[j] else "not_converged")
                info["iterations"][r] = it
                info["gap"][r] = gap[j]
                info["residual"][r] = res[j]
            keep = ~finish
            if not keep.any():
                break
            rows, X, Yact, Q, Xi = rows[keep], X[keep], Yact[keep], Q[:, keep], Xi[:, keep]
    return out, info


def project_with_cuts(project_base, Y, A, rhs, n_eq, scale, accuracy=1e-7, max_iterations=2_000,
                      divergence=1e8):
    """Projection onto B ∩ {a_j·x = rhs_j (j < n_eq), a_j·x <= rhs_j (j >= n_eq)} by its dual.

    Lagrangian dual over the few cut multipliers lam (free for equalities, >= 0 for
    inequalities): x(lam) = proj_B(y - A^T lam) minimizes the Lagrangian over B, the
    dual function g(lam) = (1/2)||x - y||^2 + lam·(A x - rhs) is concave and smooth
    with gradient A x(lam) - rhs, and is maximized by L-BFGS-B (bounds on lam), then
    finished by Newton steps on the active cuts with a finite-difference Jacobian
    (exact for polyhedral B, whose projection is piecewise affine). The returned point
    lies in B; gap = -lam·(A x - rhs) (duality gap, no cancellation), residual = the
    largest cut violation (rows of A have unit norm, so this is a distance).
    O(evaluations * cost of proj_B), a few dozen evaluations per point in practice.
    """
    from scipy.optimize import minimize

    Y = np.asarray(Y, dtype=float)
    b, d = Y.shape
    A = np.asarray(A, dtype=float)
    rhs = np.asarray(rhs, dtype=float)
    k = A.shape[0]
    scale = np.broadcast_to(np.asarray(scale, dtype=float), (b,))
    out = np.empty_like(Y)
    info = _new_info(b)
    bounds = [(None, None)] * n_eq + [(0.0, None)] * (k - n_eq)
    lam_prev = np.zeros(k)

    def viol(r):
        v = np.abs(r[:n_eq]).max(initial=0.0)
        return max(v, float(np.maximum(r[n_eq:], 0.0).max(initial=0.0)))

    for row in range(b):
        y = Y[row]
        tol_r = accuracy * scale[row]
        tol_g = 0.5 * tol_r ** 2
        big = divergence * (scale[row] + np.abs(y).max())
        evals = [0]

        def point(lam):
            evals[0] += 1
            return project_base((y - A.T @ lam)[None, :])[0]

        def neg_dual(lam):
            x = point(lam)
            r = A @ x - rhs
            return -(0.5 * float(np.dot(x - y, x - y)) + float(lam @ r)), -r

        def good(lam):
            x = point(lam)
            r = A @ x - rhs
            return x, r, viol(r), float(-(lam @ r))

        best = None
        for lam0 in (lam_prev, np.zeros(k)):
            res = minimize(neg_dual, lam0, jac=True, method="L-BFGS-B", bounds=bounds,
                           options=dict(maxiter=max_iterations, ftol=1e-300, gtol=0.1 * tol_r, maxcor=20))
            lam = np.clip(res.x, [lo if lo is not None else -np.inf for lo, _ in bounds], np.inf)
            x, r, v, gap = good(lam)
            lam, x, r, v, gap = _newton_finish(point, A, rhs, n_eq, lam, x, r, v, gap, tol_r, tol_g, viol)
            if best is None or v < best[3]:
                best = (lam, x, r, v, gap)
            if v <= tol_r and gap <= tol_g:
                break
        lam, x, r, v, gap = best
        out[row] = x
        ok = v <= tol_r and gap <= tol_g
        if ok:
            lam_prev = lam
        status = "solved" if ok else ("empty" if np.abs(lam).max(initial=0.0) > big else "not_converged")
        info["status"][row] = status
        info["iterations"][row] = evals[0]
        info["gap"][row] = gap
        info["residual"][row] = v
    return out, info


def _newton_finish(point, A, rhs, n_eq, lam, x, r, v, gap, tol_r, tol_g, viol, steps=8):
    """Newton steps on the active cuts: solve A_S x(lam) = rhs_S with a finite-difference Jacobian."""
    k = A.shape[0]
    for _ in range(steps):
        if v <= tol_r and gap <= tol_g:
            break
        active = np.zeros(k, bool)
        active[:n_eq] = True
        active[n_eq:] = (lam[n_eq:] > 0) | (r[n_eq:] > 0)
        S = np.flatnonzero(active)
        if S.size == 0:
            break
        h = max(1e-6, 1e-6 * float(np.abs(lam).max(initial=0.0)))
        J = np.empty((S.size, S.size))
        for c, j in enumerate(S):
            lj = lam.copy()
            lj[j] += h
            J[:, c] = (A[S] @ point(lj) - rhs[S] - r[S]) / h
        try:
            step = np.linalg.lstsq(J, -r[S], rcond=1e-12)[0]
        except np.linalg.LinAlgError:
            break
        new = lam.copy()
        new[S] += step
        new[n_eq:] = np.maximum(new[n_eq:], 0.0)
        x2, r2, v2, g2 = _eval(point, A, rhs, new, viol)
        if v2 < v or (v2 <= tol_r and abs(g2) < abs(gap)):
            lam, x, r, v, gap = new, x2, r2, v2, g2
        else:
            break
    return lam, x, r, v, gap


def _eval(point, A, rhs, lam, viol):
    x = point(lam)
    r = A @ x - rhs
    return x, r, viol(r), float(-(lam @ r))


def project_linear_image(project_part, support_part, M, shift, Y, scale, accuracy=1e-7,
                         max_iterations=50_000, check_every=10):
    """Projection onto {M x + shift : x in K} by accelerated projected gradient on x.

    Minimizes f(x) = (1/2)||M x + shift - y||^2 over K (FISTA with adaptive restart,
    step 1/||M||_2^2), using only the part's projection; the iterate stays in K, so
    the Frank-Wolfe gap <g, x> + sigma_K(-g), g = M^T (M x + shift - y), bounds
    f(x) - f* >= (1/2)||u - u*||^2 for the image point u = M x + shift. A row stops
    when that gap <= (1/2)(accuracy*scale)^2. O(iterations * (cost of proj_K + b m d)).

    Returns the image points (b, m) and the info dict (gap is the Frank-Wolfe gap,
    residual 0: the answer is feasible by construction).
    """
    Y = np.asarray(Y, dtype=float)
    b = Y.shape[0]
    M = np.asarray(M, dtype=float)
    L = float(np.linalg.norm(M, 2)) ** 2
    out = np.empty_like(Y)
    info = _new_info(b)
    if L == 0.0:
        out[:] = shift
        info["status"] = ["solved"] * b
        info["gap"][:] = 0.0
        info["residual"][:] = 0.0
        return out, info
    scale = np.broadcast_to(np.asarray(scale, dtype=float), (b,))
    tol_g = 0.5 * (accuracy * scale) ** 2
    rows = np.arange(b)
    # start from the part's projection of a least-squares preimage
    pre = np.linalg.lstsq(M, (Y - shift).T, rcond=None)[0].T
    X = project_part(pre)
    Z = X.copy()
    t = np.ones(b)
    Ya = Y.copy()
    for it in range(1, max_iterations + 1):
        G = (Z @ M.T + shift - Ya) @ M
        Xn = project_part(Z - G / L)
        tn = 0.5 * (1.0 + np.sqrt(1.0 + 4.0 * t * t))
        # adaptive restart (O'Donoghue and Candes 2015): momentum only while it helps
        up = np.einsum("ij,ij->i", Z - Xn, Xn - X) > 0
        mom = np.where(up, 0.0, (t - 1.0) / tn)[:, None]
        Z = Xn + mom * (Xn - X)
        X = Xn
        t = np.where(up, 1.0, tn)
        if it % check_every and it != max_iterations:
            continue
        Gx = (X @ M.T + shift - Ya) @ M
        gap = np.einsum("ij,ij->i", Gx, X) + support_part(-Gx)
        done = gap <= tol_g[rows]
        last = it == max_iterations
        finish = done | last
        if finish.any():
            idx = np.flatnonzero(finish)
            out[rows[idx]] = X[idx] @ M.T + shift
            for j in idx:
                r = rows[j]
                info["status"][r] = "solved" if done[j] else "not_converged"
                info["iterations"][r] = it
                info["gap"][r] = gap[j]
                info["residual"][r] = 0.0
            keep = ~finish
            if not keep.any():
                break
            rows, X, Z, Ya, t = rows[keep], X[keep], Z[keep], Ya[keep], t[keep]
    return out, info
