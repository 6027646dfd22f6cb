"""Polishing a KL projection onto a polyhedron read off an approximate answer (dual Newton on its face).

An interior-point answer x of  min KL(x || e^t)  over {A_eq x = b_eq, A_ub x <= b_ub, lo <= x <= hi}
names its face: the inequality rows and bounds that are tight at x. On that face the projection is

    x_i = exp(t_i - (E^T lam)_i)  (i free),    x_i = bound_i  (i fixed),

with E the tight rows (equalities and tight inequalities) and lam the minimizer of the smooth convex
dual  phi(lam) = sum_free exp(t_i - (E^T lam)_i) + <lam, e - E_fixed x_fixed>,  whose gradient is the
rows' residual and whose Hessian is E_F diag(x_F) E_F^T (Newton with backtracking; a least-squares
start from log x - t). The result is kept by the caller only when it is feasible and its Bregman gap
(the certificate) is smaller: a misread face costs one wasted polish, never a wrong answer.
"""
from __future__ import annotations

import numpy as np


def polish_kl_on_face(t, x, form, scale, tight_rtol=1e-6, max_steps=60):
    """The KL projection of e^t on the face of ``form`` tight at ``x``, or None when Newton fails."""
    n = t.size
    if form.n_aux or x.size != n:
        return None
    tol = tight_rtol * max(1.0, scale, float(np.abs(x).max(initial=0.0)))
    lo, hi = form.lo, form.hi
    at_hi = np.isfinite(hi) & (x >= hi - tol)
    fixed = at_hi | (np.isfinite(lo) & (lo > 0) & (x <= lo + tol))
    xf = np.where(at_hi, hi, lo)
    A_eq = form.A_eq.toarray() if form.A_eq.shape[0] else np.zeros((0, n))
    A_ub = form.A_ub.toarray() if form.A_ub.shape[0] else np.zeros((0, n))
    tight = np.abs(A_ub @ x - form.b_ub) <= tol * np.maximum(1.0, np.abs(A_ub).sum(axis=1)) if A_ub.size else \
        np.zeros(0, dtype=bool)
    E = np.vstack([A_eq, A_ub[tight]])
    e = np.concatenate([form.b_eq, form.b_ub[tight]])
    free = ~fixed
    z = np.where(fixed, xf, 0.0)
    if E.shape[0] == 0:
        z[free] = np.exp(t[free])
        return z
    r = e - E[:, fixed] @ xf[fixed]
    EF = E[:, free]
    tF = t[free]
    with np.errstate(divide="ignore"):
        target = np.log(np.maximum(x[free], 1e-300)) - tF
    lam = np.linalg.lstsq(EF.T, -target, rcond=None)[0]

    def phi(lam):
        with np.errstate(over="ignore"):
            xF = np.exp(np.minimum(tF - EF.T @ lam, 700.0))
        return float(xF.sum() + lam @ r), xF

    f, xF = phi(lam)
    rtol = 1e-14 * max(1.0, scale) * max(1, n)
    for _ in range(max_steps):
        g = r - EF @ xF
        if float(np.abs(g).max(initial=0.0)) <= rtol:
            z[free] = xF
            return z
        H = (EF * xF) @ EF.T
        try:
            step = np.linalg.lstsq(H, -g, rcond=None)[0]
        except np.linalg.LinAlgError:
            return None
        slope = float(g @ step)
        if not slope < 0:
            return None
        a = 1.0
        while a > 1e-12:
            f2, x2 = phi(lam + a * step)
            if np.isfinite(f2) and f2 <= f + 1e-4 * a * slope:
                break
            a *= 0.5
        else:
            return None
        lam, f, xF = lam + a * step, f2, x2
    g = r - EF @ xF
    if float(np.abs(g).max(initial=0.0)) <= 1e3 * rtol:
        z[free] = xF
        return z
    return None


def polish_kl_in_hull(t, x, V, max_steps=60):
    """:func:`_polish_in_hull` with the face read at weight thresholds 1e-6, then 1e-9 (relative):
    an interior-point answer carries spurious weights of about 1e-10 on points off the face."""
    from .hull import nearest_in_hull
    V = np.asarray(V, dtype=float)
    _, w, _, _, ok = nearest_in_hull(V, x)
    if not ok:
        return None
    w = np.asarray(w, dtype=float)
    if not w.sum() > 0:
        return None
    for level in (1e-6, 1e-9):
        z = _polish_in_hull(t, x, V, w, level, max_steps)
        if z is not None:
            return z
    return None


def _polish_in_hull(t, x, V, w, level, max_steps):
    """The KL projection of e^t onto conv(rows of V) on the face carrying ``x``, or None.

    The face: the points with positive weight in Wolfe's representation of x (an affinely
    independent corral, :func:`setkit.kernels.hull.nearest_in_hull`). On it x = V_S^T w with
    sum w = 1, and optimality says <log x - t, v_j> is the same for every j in S; Newton's
    method on (w, c) solves V_S (log(V_S^T w) - t) = c 1, 1^T w = 1, keeping w > 0. Coordinates
    that vanish on the whole face stay 0 (their terms vanish in every equation).
    """
    keep = w > level * w.max()
    VS = V[keep]
    w = w[keep] / w[keep].sum()
    cols = np.any(VS != 0.0, axis=0)
    if np.any(VS < 0.0):
        return None
    A = VS[:, cols]                       # (k, m)
    tc = t[cols]
    k = A.shape[0]

    def resid(w, c):
        xm = w @ A
        return np.concatenate([A @ (np.log(xm) - tc) - c, [w.sum() - 1.0]]), xm

    xm = w @ A
    if np.any(xm <= 0):
        return None
    c = float(np.mean(A @ (np.log(xm) - tc)))
    F, xm = resid(w, c)
    for _ in range(max_steps):
        nrm = float(np.abs(F).max())
        if nrm <= 1e-14 * max(1.0, float(np.abs(tc).max(initial=0.0))):
            break
        J = np.zeros((k + 1, k + 1))
        J[:k, :k] = (A / xm) @ A.T
        J[:k, k] = -1.0
        J[k, :k] = 1.0
        step = np.linalg.lstsq(J, -F, rcond=None)[0]
        dw, dc = step[:k], step[k]
        a = 1.0
        neg = dw < 0
        if np.any(neg):
            a = min(1.0, 0.99 * float(np.min(-w[neg] / dw[neg])))
        while a > 1e-12:
            w2, c2 = w + a * dw, c + a * dc
            if np.all(w2 > 0):
                F2, x2 = resid(w2, c2)
                if np.all(x2 > 0) and np.abs(F2).max() < (1 - 1e-4 * a) * nrm:
                    break
            a *= 0.5
        else:
            return None
        w, c, F, xm = w2, c2, F2, x2
    else:
        return None
    out = np.zeros_like(x)
    out[cols] = w @ A
    return out
