"""Nearest point of a convex hull conv{v_1, ..., v_k} by Wolfe's algorithm on the convex weights.

Wolfe (1976), "Finding the nearest point in a polytope": keep a corral (an
affinely independent subset S of the points) and weights on it; a major cycle
adds the point minimizing <x - y, v>, minor cycles move to the affine minimizer
of S and drop points whose weight would turn negative. It stops when the
Frank-Wolfe gap max_j <y - x, v_j - x> (an upper bound on ||x - x*||^2) is
below the tolerance: that gap is the certificate of the answer. Each major
cycle costs O(k d + |S|^2 d).
"""
from __future__ import annotations

import numpy as np


def nearest_in_hull(V: np.ndarray, y: np.ndarray, tol_rel: float = 1e-14, max_cycles: int | None = None):
    """argmin_{x in conv(rows of V)} ||x - y||; returns (x, weights, gap, cycles, converged).

    Works on W = (V - y) / 2^e with 2^e near max|V - y| (the same nearest point, scaled
    exactly), so squared norms neither overflow nor underflow for |V - y| in 1e-300..1e300.
    """
    k, dim = V.shape
    W = V - y                      # shift: nearest point of conv(W) to the origin
    # scale by a power of two (exact): squared norms stay finite and normal for |W| in 1e-300..1e300
    top = float(np.abs(W).max(initial=0.0))
    unit = 1.0
    if top > 0.0 and np.isfinite(top):
        unit = float(np.ldexp(1.0, int(np.frexp(top)[1])))
        W = W / unit
    sq = np.einsum("ij,ij->i", W, W)
    scale2 = max(float(sq.max()), 1e-300)
    tol = tol_rel * scale2
    max_cycles = max_cycles or 50 * (k + dim) + 100
    j0 = int(np.argmin(sq))
    S = [j0]
    lam = np.array([1.0])
    x = W[j0].copy()
    gap = np.inf
    cycles = 0
    while cycles < max_cycles:
        cycles += 1
        g = W @ x
        j = int(np.argmin(g))
        xx = float(x @ x)
        gap = xx - float(g[j])           # = max_j <-x, w_j - x> = FW gap in the original coordinates
        if gap <= tol or j in S:
            return unit * x + y, _weights(k, S, lam), max(gap, 0.0) * unit * unit, cycles, gap <= max(tol, 1e-12 * scale2)
        S.append(j)
        lam = np.append(lam, 0.0)
        for _minor in range(len(S) + 2):
            alpha = _affine_minimizer(W[S])
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
            S = [s for s, dr in zip(S, drop) if not dr]
            lam = lam[~drop]
            lam = lam / lam.sum()
        x = lam @ W[S]
    return unit * x + y, _weights(k, S, lam), max(gap, 0.0) * unit * unit, cycles, False


def _affine_minimizer(P):
    """Weights alpha (sum 1) of the point of minimum norm in the affine hull of the rows of P."""
    m = P.shape[0]
    if m == 1:
        return np.ones(1)
    D = (P[1:] - P[0]).T                 # dim x (m-1)
    beta, *_ = np.linalg.lstsq(D, -P[0], rcond=None)
    return np.concatenate([[1.0 - beta.sum()], beta])


def _weights(k, S, lam):
    w = np.zeros(k)
    w[S] = lam
    return w
