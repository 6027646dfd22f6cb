"""Nearest point of a convex hull conv{v_1, ..., v_k} by Wolfe's algorithm on the convex weights.

Wolfe (1976), "Finding the nearest point in a polytope": keep a corral (an
affinely independent subset S of the points) and weights on it; a major cycle
adds the point minimizing <x - y, v>, minor cycles move to the affine minimizer
of S and drop points whose weight would turn negative. It stops when the
Frank-Wolfe gap max_j <y - x, v_j - x> (an upper bound on ||x - x*||^2) is
below the tolerance: that gap is the certificate of the answer. Each major
cycle costs O(k d + |S|^2 d).

Far points. The algorithm never forms v - y (which rounds to -y once |y| exceeds
about 1e16 times the data and loses the points). It works on the weights alone,
with the quadratic part from the centred points (data scale) and the linear part
``l_j = <v_j - v_m, y - c>`` (m: a point with the largest <v, y>, c: the centroid
of the points), whose term ``<v_j - v_m, y>`` is summed exactly (error-free
products, Dekker 1971 "A floating-point technique for extending the available
precision", and a correctly rounded sum, ``math.fsum``; Shewchuk 1997). The
objective is ``||V^T a - y||^2`` up to a constant on the simplex of weights
``a``, so the answer is the same; its accuracy is relative to the data's
spread, whatever |y| is (1e-300 .. 1e300).
"""
from __future__ import annotations

import math

import numpy as np

_SPLIT = 134217729.0          # 2^27 + 1: Dekker's splitting constant for float64
_HOPELESS = 1e200             # |l_j| beyond this (data scale 1): the point is never in the answer


def _split(a):
    c = _SPLIT * a
    hi = c - (c - a)
    return hi, a - hi


def _exact_products(a, b):
    """(p, e) with p + e == a * b exactly for every entry (Dekker's TwoProduct); |a|, |b| <= 2^996."""
    p = a * b
    ah, al = _split(a)
    bh, bl = _split(b)
    e = ((ah * bh - p) + ah * bl + al * bh) + al * bl
    return p, e


def exact_dot(a, b) -> float:
    """<a, b> correctly rounded (error-free products, ``math.fsum``); entries up to about 2^996.

    >>> exact_dot(np.array([1e20, 1.0, -1e20]), np.array([1.0, 1.0, 1.0]))
    1.0
    """
    a = np.asarray(a, float)
    b = np.asarray(b, float)
    ea = int(np.frexp(float(np.abs(a).max(initial=0.0)))[1])
    eb = int(np.frexp(float(np.abs(b).max(initial=0.0)))[1])
    # scaled by powers of two to magnitude <= 1 (exact unless entries fall below 2^-1022 of the largest,
    # which cannot change the correctly rounded sum beyond its last bits)
    p, e = _exact_products(np.ldexp(a, -ea), np.ldexp(b, -eb))
    with np.errstate(over="ignore"):
        return float(np.ldexp(math.fsum(np.concatenate([p, e])), ea + eb))


def _linear_terms(Vs, ys, m):
    """``<v_j - v_m, ys>`` for every row j of ``Vs``, each correctly rounded (exact products, fsum).

    ``ys`` has entries <= 2^900 in magnitude and ``Vs`` <= 1 (so no product overflows).
    """
    P, E = _exact_products(Vs, ys[None, :])
    pm, em = P[m], E[m]
    out = np.empty(Vs.shape[0])
    for j in range(Vs.shape[0]):
        out[j] = 0.0 if j == m else math.fsum(np.concatenate([P[j], E[j], -pm, -em]))
    return out


def nearest_in_hull(V: np.ndarray, y: np.ndarray, tol_rel: float = 1e-14, max_cycles: int | None = None):
    """argmin_{x in conv(rows of V)} ||x - y||; returns (x, weights, gap, cycles, converged).

    ``gap`` is the Frank-Wolfe gap max_j <y - x, v_j - x> of the answer (it bounds
    ||x - x*||^2); the stopping tolerance is ``tol_rel`` times the squared spread
    max_j ||v_j - c||^2 of the points around their centroid c. The work is rescaled by a
    power of two (exact) so that the points have magnitude about 1 and y at most 2^900;
    range: finite y and points, |y| in 1e-300..1e300 and beyond.
    """
    V = np.asarray(V, dtype=float)
    y = np.asarray(y, dtype=float)
    k, dim = V.shape
    top = float(np.abs(V).max(initial=0.0))
    e_data = int(np.frexp(top)[1]) if top > 0.0 else 0
    Vs = np.ldexp(V, -e_data)                       # exact (points are not subnormal at this scale)
    ytop = float(np.abs(y).max(initial=0.0))
    # |y| / |data| beyond 2^900: scale y further for the linear terms (their size only ranks points)
    e_extra = max(0, int(np.frexp(ytop)[1]) - e_data - 900) if ytop > 0.0 else 0
    c = Vs.mean(axis=0)
    W = Vs - c                                      # centred points, data scale
    sq = np.einsum("ij,ij->i", W, W)
    scale2 = float(sq.max(initial=0.0))
    if scale2 == 0.0 or k == 1:                     # one distinct point: it is the answer
        w = np.zeros(k)
        w[0] = 1.0
        return V[0].copy(), w, 0.0, 0, True
    y_lin = np.ldexp(y, -e_data - e_extra)
    # m: a point with the largest <v, y> (from the rounded products; the exact terms fix the rest)
    m = int(np.argmax(Vs @ y_lin))
    lin = _linear_terms(Vs, y_lin, m)
    if e_extra:
        with np.errstate(over="ignore"):
            lin = np.ldexp(lin, e_extra)
    # minus <v_j - v_m, c> (data scale) turns <v_j - v_m, y> into <v_j - v_m, y - c>
    lin = np.clip(lin - (Vs - Vs[m]) @ c, -_HOPELESS, _HOPELESS)
    tol = tol_rel * scale2
    max_cycles = max_cycles or 50 * (k + dim) + 100
    S = [m]
    lam = np.array([1.0])
    xc = W[m].copy()                                # x - c in scaled units
    gap = np.inf
    cycles = 0
    done = False
    while cycles < max_cycles:
        cycles += 1
        grad = W @ xc - lin                         # <x - y, v_j - c> up to a constant
        j = int(np.argmin(grad))
        gap = float(lam @ grad[S]) - float(grad[j])     # = max_j <y - x, v_j - x>
        if gap <= tol or j in S:
            done = True
            break
        S.append(j)
        lam = np.append(lam, 0.0)
        for _minor in range(len(S) + 2):
            alpha = affine_minimizer(W[S], lin[S])
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
        xc = lam @ W[S]
    w = _weights(k, S, lam)
    x = w @ V
    ok = done and gap <= max(tol, 1e-12 * scale2)
    with np.errstate(over="ignore"):
        gap_out = float(np.ldexp(max(gap, 0.0), 2 * e_data))   # in the caller's units (may round to 0 or inf)
    return x, w, gap_out, cycles, ok


def affine_minimizer(P, lin):
    """Weights alpha (sum 1) minimizing ||alpha @ P||^2 - 2 alpha @ lin over the affine hull.

    With D = (P[1:] - P[0])^T and alpha = (1 - sum beta, beta): D^T D beta = (lin[1:] - lin[0]) - D^T P[0],
    solved as two least-squares problems (w with D^T w = lin[1:] - lin[0], then D beta ~ w - P[0])
    so that huge linear terms do not meet squared conditioning.
    """
    m = P.shape[0]
    if m == 1:
        return np.ones(1)
    D = (P[1:] - P[0]).T                 # dim x (m-1)
    w, *_ = np.linalg.lstsq(D.T, lin[1:] - lin[0], rcond=None)
    beta, *_ = np.linalg.lstsq(D, w - P[0], rcond=None)
    return np.concatenate([[1.0 - beta.sum()], beta])


def _weights(k, S, lam):
    w = np.zeros(k)
    w[S] = lam
    return w
