"""Splitting methods for projections onto intersections and linear images of sets.

Pure, batched functions built only on the parts' own operators (passed in as
callables on flat ``(b, d)`` batches). Each one stops on a certificate it can
compute exactly, never on an iteration count alone, and reports per row::

    status       "solved" | "not_converged" | "empty"
    iterations   sweeps (or function evaluations) used
    gap          the duality gap (see each function for what it bounds)
    residual     the measured infeasibility of the returned point

What the certificates bound (p the returned point, p* the exact projection):

* :func:`dykstra`, :func:`fast_dual_projections` and :func:`project_with_cuts` return a point exactly in one
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

from ..limits import check as _check_time

__all__ = ["dykstra", "fast_dual_projections", "project_with_cuts", "project_linear_image", "lmo_with_cuts"]

# gaps are sums of products of O(scale) numbers: below ~ a few ulps of scale^2 they are rounding noise,
# so the gap tolerance never goes below GAP_FLOOR * (number of terms) * scale^2
GAP_FLOOR = 8 * np.finfo(float).eps


def _new_info(b):
    return {"status": ["not_converged"] * b, "iterations": [0] * b,
            "gap": np.full(b, np.nan), "residual": np.full(b, np.nan)}


def dykstra(projections, Y, scale, accuracy=1e-7, max_iterations=20_000, divergence=1e4, feasibility_scale=None):
    """Dykstra's alternating projections onto K_1 ∩ ... ∩ K_m, batched over rows.

    Each sweep projects x + q_i onto K_i and keeps the increment q_i (an outer
    normal of K_i at the new point x_i). The invariant y - x = sum q_i makes the
    increments dual variables of min (1/2)||x - y||^2 + sum indicator_i(x), and
    sigma_i(q_i) = <q_i, x_i>, so the duality gap at the last point x is

        gap = sum_i <q_i, x_i - x>        (no cancellation of large terms)

    and the residual is max_i ||x_i - x|| >= max_i dist(x, K_i). A row stops when
    |gap| <= (1/2)(accuracy*scale)^2 and residual <= accuracy*feasibility_scale
    (default: scale). O(sweeps * sum of the parts' projection costs).

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
    fs = scale if feasibility_scale is None else np.broadcast_to(np.asarray(feasibility_scale, float), (b,))
    tol_r = accuracy * fs
    tol_g = np.maximum(0.5 * (accuracy * scale) ** 2, GAP_FLOOR * m * scale ** 2)
    big = divergence * (scale + np.abs(Y).max(axis=1))
    X = Y.copy()
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
        _check_time(f"projection of {b} point(s) onto an intersection of {m} sets (Dykstra's method)",
                    lambda: f"feasibility residual {res.max():.3g}, duality gap {np.abs(gap).max():.3g} "
                            f"(wanted {tol_r.max():.3g} and {tol_g.max():.3g}) after {it} sweeps")
        done = (res <= tol_r[rows]) & (np.abs(gap) <= tol_g[rows])
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
            rows, X, Q, Xi = rows[keep], X[keep], Q[:, keep], Xi[:, keep]
    return out, info


def fast_dual_projections(projections, Y, scale, accuracy=1e-7, max_iterations=20_000, divergence=1e4,
                          feasibility_scale=None, check_every=5):
    """Accelerated dual proximal gradient for the projection onto K_1 ∩ ... ∩ K_m, batched over rows.

    The dual of min (1/2)||x - y||^2 + i_{K_1}(x) + sum_{i>=2} i_{K_i}(z_i), z_i = x, has a smooth
    part (gradient x(w) = proj_1(y - sum w_i), Lipschitz constant L = m - 1) and the supports
    sigma_i(w_i), whose proximal steps are projections onto K_i:
    w_i <- w_i + (x - proj_i(x + L w_i)) / L (Beck and Teboulle's fast dual proximal
    gradient, with FISTA momentum and adaptive restart). Dykstra's method is the
    unaccelerated case; this one stays fast for points far from the set. After a step
    each w_i is an outer normal of K_i at z_i, so sigma_i(w_i) = <w_i, z_i> and, at the
    checked point x = proj_1(y - sum w_i) (in K_1), the duality gap is

        gap = sum_i <w_i, z_i - x>        (no cancellation)

    with residual max_i ||z_i - x|| >= max_i dist(x, K_i). Stopping rule and meaning as in
    :func:`dykstra`. O(iterations * sum of the parts' projection costs).
    """
    Y = np.asarray(Y, dtype=float)
    b, d = Y.shape
    P1, rest = projections[0], list(projections[1:])
    m = len(rest)
    info = _new_info(b)
    out = Y.copy()
    if m == 0:
        out = P1(Y)
        info["status"] = ["solved"] * b
        info["iterations"] = [1] * b
        info["gap"][:] = 0.0
        info["residual"][:] = 0.0
        return out, info
    L = float(m)
    scale = np.broadcast_to(np.asarray(scale, dtype=float), (b,)).copy()
    fs = scale if feasibility_scale is None else np.broadcast_to(np.asarray(feasibility_scale, float), (b,))
    tol_r = accuracy * fs
    tol_g = np.maximum(0.5 * (accuracy * scale) ** 2, GAP_FLOOR * m * scale ** 2)
    big = divergence * (scale + np.abs(Y).max(axis=1))
    rows = np.arange(b)
    Ya = Y.copy()
    W = np.zeros((m, b, d))
    Wh = W.copy()
    t = np.ones(b)
    for it in range(1, max_iterations + 1):
        X = P1(Ya - Wh.sum(axis=0))
        Z = np.stack([P(X + L * Wh[i]) for i, P in enumerate(rest)])
        Wn = Wh + (X[None] - Z) / L
        tn = 0.5 * (1.0 + np.sqrt(1.0 + 4.0 * t * t))
        # adaptive restart (O'Donoghue and Candes 2015): drop the momentum when it points backwards
        restart = np.einsum("mbd,mbd->b", Wn - Wh, Wn - W) < 0
        mom = np.where(restart, 0.0, (t - 1.0) / tn)
        Wh = Wn + mom[None, :, None] * (Wn - W)
        W = Wn
        t = np.where(restart, 1.0, tn)
        last = it == max_iterations
        if it % check_every and not last:
            continue
        Xc = P1(Ya - W.sum(axis=0))
        diff = Z - Xc[None]
        res = np.sqrt(np.einsum("mbd,mbd->mb", diff, diff)).max(axis=0)
        gap = np.einsum("mbd,mbd->b", W, diff)
        _check_time(f"projection of {b} point(s) onto an intersection of {m} sets (fast dual projections)",
                    lambda: f"feasibility residual {res.max():.3g}, duality gap {np.abs(gap).max():.3g} "
                            f"(wanted {tol_r.max():.3g} and {tol_g.max():.3g}) after {it} iterations")
        done = (res <= tol_r[rows]) & (np.abs(gap) <= tol_g[rows])
        wmax = np.sqrt(np.einsum("mbd,mbd->mb", W, W)).max(axis=0)
        empty = ~done & (wmax > big[rows])
        finish = done | empty | last
        if finish.any():
            for j in np.flatnonzero(finish):
                r = rows[j]
                out[r] = Xc[j]
                info["status"][r] = "solved" if done[j] else ("empty" if empty[j] else "not_converged")
                info["iterations"][r] = it
                info["gap"][r] = gap[j]
                info["residual"][r] = res[j]
            keep = ~finish
            if not keep.any():
                break
            rows, Ya, W, Wh, t = rows[keep], Ya[keep], W[:, keep], Wh[:, keep], t[keep]
    return out, info


def project_with_cuts(project_base, Y, A, rhs, n_eq, scale, accuracy=1e-7, max_iterations=2_000,
                      divergence=1e6, feasibility_scale=None):
    """Projection onto B ∩ {a_j·x = rhs_j (j < n_eq), a_j·x <= rhs_j (j >= n_eq)} by its dual.

    Lagrangian dual over the few cut multipliers lam (free for equalities, >= 0 for
    inequalities): x(lam) = proj_B(y - A^T lam) minimizes the Lagrangian over B, the
    dual function g(lam) = (1/2)||x - y||^2 + lam·(A x - rhs) is concave and smooth
    with gradient r = A x(lam) - rhs. It is maximized by projected Newton steps on
    the active cuts (Jacobian of r by finite differences, exact for polyhedral B whose
    projection is piecewise affine) with an Armijo backtracking on g, falling back to
    projected gradient steps lam + r/L (L = ||A||_2^2 bounds the curvature since the
    projection is nonexpansive). The returned point lies in B; gap = -lam·r (duality
    gap, no cancellation), residual = the largest cut violation (rows of A have unit
    norm, so this is a distance). A row is accepted when |gap| <= (1/2)(accuracy*scale)^2
    and residual <= accuracy*feasibility_scale. O(steps * (k + 1) * cost of proj_B) for
    k cuts; a handful of steps per point in practice (warm-started along the batch).
    """
    Y = np.asarray(Y, dtype=float)
    b, d = Y.shape
    A = np.asarray(A, dtype=float)
    rhs = np.asarray(rhs, dtype=float)
    k = A.shape[0]
    scale = np.broadcast_to(np.asarray(scale, dtype=float), (b,))
    fs = scale if feasibility_scale is None else np.broadcast_to(np.asarray(feasibility_scale, float), (b,))
    out = np.empty_like(Y)
    info = _new_info(b)
    L = max(float(np.linalg.norm(A, 2)) ** 2, 1e-300)
    ineq = np.arange(k) >= n_eq
    lam_prev = np.zeros(k)

    for row in range(b):
        y = Y[row]
        tol_r = accuracy * fs[row]
        tol_g = max(0.5 * (accuracy * scale[row]) ** 2, GAP_FLOOR * k * scale[row] ** 2)
        big = divergence * (scale[row] + np.abs(y).max())
        evals = [0]

        best_seen = [np.inf]

        def state(lam):
            _check_time(f"projection of row {row} of {b} onto a set with {k} cuts (dual method)",
                        lambda: f"cut violation {best_seen[0]:.3g} (wanted {tol_r:.3g}) after {evals[0]} evaluations")
            evals[0] += 1
            x = project_base((y - A.T @ lam)[None, :])[0]
            r = A @ x - rhs
            g = 0.5 * float(np.dot(x - y, x - y)) + float(lam @ r)
            v = max(float(np.abs(r[~ineq]).max(initial=0.0)), float(np.maximum(r[ineq], 0.0).max(initial=0.0)))
            best_seen[0] = min(best_seen[0], v)
            return x, r, g, v

        def newton_phase(lam, x, r, g, v, budget):
            stop = min(max_iterations, evals[0] + budget)
            while evals[0] < stop:
                gap = float(-(lam @ r))
                if v <= tol_r and abs(gap) <= tol_g:
                    return "solved", lam, x, r, g, v
                if np.abs(lam).max(initial=0.0) > big:
                    return "empty", lam, x, r, g, v
                lam, x, r, g, v = _dual_step(state, lam, x, r, g, v, ineq, L)
            gap = float(-(lam @ r))
            return ("solved" if v <= tol_r and abs(gap) <= tol_g else "not_converged"), lam, x, r, g, v

        best = None
        for lam0 in ((lam_prev, np.zeros(k)) if np.any(lam_prev) else (np.zeros(k),)):
            status, lam, x, r, g, v = newton_phase(lam0.copy(), *state(lam0), budget=25 * (k + 2))
            if status == "not_converged" and evals[0] < max_iterations:
                # hard geometry (many active cuts, tiny curvature): quasi-Newton on the dual, then finish
                lam = _lbfgsb_dual(state, lam, ineq, tol_r, big, max_iterations - evals[0])
                status, lam, x, r, g, v = newton_phase(lam, *state(lam), budget=max_iterations)
            gap = float(-(lam @ r))
            if best is None or (status == "solved") or v < best[3]:
                best = (lam, x, gap, v, status)
            if status != "not_converged":
                break
        lam, x, gap, v, status = best
        out[row] = x
        if status == "solved":
            lam_prev = lam
        info["status"][row] = status
        info["iterations"][row] = evals[0]
        info["gap"][row] = gap
        info["residual"][row] = v
    return out, info


def _lbfgsb_dual(state, lam, ineq, tol_r, big, budget):
    """L-BFGS-B on the negated dual from lam (bounds lam >= 0 on the inequality cuts)."""
    from scipy.optimize import minimize

    def neg(l):
        _, r, g, _ = state(l)
        return -g, -r

    def stop_when_unbounded(intermediate_result):
        if np.abs(intermediate_result.x).max(initial=0.0) > big:
            raise StopIteration

    bounds = [(0.0, None) if q else (None, None) for q in ineq]
    res = minimize(neg, lam, jac=True, method="L-BFGS-B", bounds=bounds, callback=stop_when_unbounded,
                   options=dict(maxiter=max(1, budget), maxfun=max(1, budget), ftol=1e-300,
                                gtol=0.1 * tol_r, maxcor=20))
    out = np.asarray(res.x, dtype=float).copy()
    out[ineq] = np.maximum(out[ineq], 0.0)
    return out


def _dual_step(state, lam, x, r, g, v, ineq, L):
    """One ascent step on the concave dual.

    Semismooth Newton on the natural residual of the KKT conditions: cuts with
    lam_j + r_j > 0 (and all equalities) are *free* and solve r_F(lam) = 0 by Newton (Jacobian
    of r in lam_F by finite differences), the others are set to lam_j = 0. The step is kept
    when it increases the dual (Armijo) or halves the violation; otherwise a projected gradient
    step lam + t r with a growing t (t = 1/L always ascends, L = ||A||_2^2).
    """
    k = lam.size
    free = ~ineq | (lam + r > 0)
    base = lam.copy()
    base[~free] = 0.0
    if np.any(base != lam):
        xb, rb, gb, vb = state(base)
    else:
        _xb, rb, _gb, _vb = x, r, g, v
    S = np.flatnonzero(free)
    if S.size:
        h = 1e-7 * max(1.0, float(np.abs(base).max(initial=0.0)))
        J = np.empty((S.size, S.size))
        for c, j in enumerate(S):
            lj = base.copy()
            lj[j] += h
            _, rj, _, _ = state(lj)
            J[:, c] = (rj[S] - rb[S]) / h
        # J = -A_S D A_S^T is negative semidefinite; a tiny shift keeps the solve well posed
        mu = 1e-12 * max(1.0, float(np.abs(J).max(initial=0.0)))
        try:
            step = np.linalg.solve(J - mu * np.eye(S.size), -rb[S])
        except np.linalg.LinAlgError:
            step = None
        if step is not None and np.all(np.isfinite(step)):
            dlam = np.zeros(k)
            dlam[S] = step
            t = 1.0
            for _ in range(10):
                new = base + t * dlam
                new[ineq] = np.maximum(new[ineq], 0.0)
                x2, r2, g2, v2 = state(new)
                if g2 >= g + 1e-4 * float(r @ (new - lam)) or (v2 < 0.5 * v and g2 >= g - 1e-12 * abs(g)):
                    return new, x2, r2, g2, v2
                t *= 0.5
    # projected gradient with a growing step while the dual keeps increasing (1/L always ascends)
    t = 1.0 / L
    new = lam + t * r
    new[ineq] = np.maximum(new[ineq], 0.0)
    cur = (new,) + state(new)
    for _ in range(20):
        t *= 4.0
        new = lam + t * r
        new[ineq] = np.maximum(new[ineq], 0.0)
        nxt = (new,) + state(new)
        if nxt[3] <= cur[3]:
            break
        cur = nxt
    return cur


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
    if L == 0.0 or b == 0:
        out[:] = shift
        info["status"] = ["solved"] * b
        info["gap"][:] = 0.0
        info["residual"][:] = 0.0
        return out, info
    scale = np.broadcast_to(np.asarray(scale, dtype=float), (b,))
    tol_g = np.maximum(0.5 * (accuracy * scale) ** 2, GAP_FLOOR * scale ** 2)
    rows = np.arange(b)
    # start from the part's projection of a least-squares preimage
    pre = np.linalg.lstsq(M, (Y - shift).T, rcond=None)[0].T
    X = project_part(pre)
    Z = X.copy()
    t = np.ones(b)
    Ya = Y.copy()
    last_gap = [None]
    for it in range(1, max_iterations + 1):
        _check_time(f"projection of {b} point(s) onto a linear image of a set (accelerated projected gradient)",
                    lambda: ("no gap measured yet" if last_gap[0] is None else
                             f"Frank-Wolfe gap {last_gap[0]:.3g} (wanted {tol_g.max():.3g}) after {it - 1} iterations"))
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
        last_gap[0] = float(np.max(gap))
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


def lmo_with_cuts(lmo_base, C, A, rhs, n_eq, scale, max_columns=400, tol=1e-9):
    """argmin <c, x> over B ∩ {a_j·x = rhs_j (j < n_eq), a_j·x <= rhs_j} by column generation.

    Dantzig-Wolfe decomposition: a master LP (HiGHS) over convex combinations of vertices of
    B found so far, with the cuts as rows and elastic slacks priced at a big M; the pricing
    problem is one LMO of B at c - A^T pi (pi the duals of the cut rows). It stops when no
    vertex has a negative reduced cost (exact optimality of the master for B ∩ cuts) and the
    slacks are zero. The answer is a convex combination of at most k + 1 vertices of B.
    Returns (X, info) with per-row status "solved" | "empty" | "not_converged" and the number
    of columns generated. O(columns * (LMO of B + a small LP)).
    """
    from scipy.optimize import linprog

    C = np.asarray(C, dtype=float)
    b, d = C.shape
    k = A.shape[0]
    out = np.empty_like(C)
    info = {"status": ["not_converged"] * b, "iterations": [0] * b, "gap": np.full(b, np.nan),
            "residual": np.full(b, np.nan)}
    eq, ub = slice(0, n_eq), slice(n_eq, k)
    for row in range(b):
        c = C[row]
        cs = max(1.0, float(np.abs(c).max()))
        M = 1e6 * cs * max(1.0, float(scale))
        V = [lmo_base(c[None, :])[0]]
        status, x = "not_converged", V[0]
        for it in range(1, max_columns + 1):
            _check_time(f"LMO of row {row} of {b} over a set with {k} cuts (column generation)",
                        f"{len(V)} columns generated, not yet optimal")
            Vm = np.array(V)                      # (p, d)
            AV = A @ Vm.T                         # (k, p)
            p = Vm.shape[0]
            # variables: mu (p), s_plus (k), s_minus (n_eq); minimize c.V mu + M (s)
            cost = np.concatenate([Vm @ c, np.full(k, M), np.full(n_eq, M)])
            A_eq = np.zeros((1 + n_eq, p + k + n_eq))
            A_eq[0, :p] = 1.0
            A_eq[1:, :p] = AV[eq]
            A_eq[1:, p:p + n_eq] = -np.eye(n_eq)
            A_eq[1:, p + k:] = np.eye(n_eq)
            b_eq = np.concatenate([[1.0], rhs[eq]])
            A_ub = np.zeros((k - n_eq, p + k + n_eq))
            A_ub[:, :p] = AV[ub]
            A_ub[:, p + n_eq:p + k] = -np.eye(k - n_eq)
            res = linprog(cost, A_ub=A_ub if k > n_eq else None, b_ub=rhs[ub] if k > n_eq else None,
                          A_eq=A_eq, b_eq=b_eq, bounds=[(0, None)] * (p + k + n_eq), method="highs")
            if res.status != 0:
                break
            mu = res.x[:p]
            slack = float(res.x[p:].sum())
            pi_0 = float(res.eqlin.marginals[0])
            pi = np.zeros(k)
            pi[eq] = res.eqlin.marginals[1:]
            if k > n_eq:
                pi[ub] = res.ineqlin.marginals
            x = mu @ Vm
            v = lmo_base((c - A.T @ pi)[None, :])[0]
            reduced = float(c @ v - pi @ (A @ v) - pi_0)
            if reduced >= -tol * cs * max(1.0, float(np.abs(v).max())):
                status = "solved" if slack <= 1e-9 * max(1.0, float(scale)) else "empty"
                info["gap"][row] = max(0.0, -reduced)
                info["residual"][row] = slack
                break
            V.append(v)
        out[row] = x
        info["status"][row] = status
        info["iterations"][row] = len(V)
    return out, info
