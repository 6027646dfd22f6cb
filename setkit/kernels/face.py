"""Jacobian products of projections onto polyhedra, from the face the projection lies on.

Where a projection P onto a polyhedron K is differentiable, its Jacobian at y is the
orthogonal projector onto the tangent subspace of the face of K that P(y) lies in
(the constraints with positive multipliers are kept with equality, the others drop
out locally). These kernels apply that projector to a tangent v without forming it:

* capped weighted sum faces {lo <= x <= hi, <w, x> = total}: on the free coordinates
  F = {lo < p < hi}, J v = v_F - w_F <w_F, v_F> / <w_F, w_F> when the sum is active,
  v_F when it is not, and 0 off F (the simplex is lo = 0, hi = inf, w = 1);
* permutahedra: within each block of the pool-adjacent-violators solution, J v is v
  minus its block mean (the blocks are the faces of the majorization constraints).

All functions are pure, batched over rows, O(n) per row after the projection (the
permutahedron: after the sort). The compiled ones are cached on disk by numba.
"""
from __future__ import annotations

import numpy as np
from numba import njit

from .isotonic import decreasing_order


@njit(cache=True)
def simplex_face_rows(P, V, active, out):
    """Rows of J v for the simplex face of P: support S = {p > 0}; v_S - mean(v_S) if active, else v_S.

    ``active[r]`` says whether the sum constraint of row r is kept with equality.
    Coordinates with p_i = 0 exactly are off the support (derivative 0). O(n) per row.
    """
    b, n = P.shape
    for r in range(b):
        m = 0.0
        if active[r]:
            s = 0.0
            k = 0
            for j in range(n):
                if P[r, j] > 0.0:
                    s += V[r, j]
                    k += 1
            m = s / k if k > 0 else 0.0
        for j in range(n):
            out[r, j] = V[r, j] - m if P[r, j] > 0.0 else 0.0
    return out


@njit(cache=True)
def capped_face_rows(P, V, lo, hi, w, active, out):
    """Rows of J v for {lo <= x <= hi, <w, x> = total}: free set F = {lo < p < hi}.

    On F: v_F - w_F <w_F, v_F> / <w_F, w_F> if the sum is active for the row, else v_F;
    0 on coordinates at a bound (bounds reached exactly are active). O(n) per row.
    """
    b, n = P.shape
    for r in range(b):
        c = 0.0
        if active[r]:
            wv = 0.0
            ww = 0.0
            for j in range(n):
                if lo[j] < P[r, j] < hi[j]:
                    wv += w[j] * V[r, j]
                    ww += w[j] * w[j]
            c = wv / ww if ww > 0.0 else 0.0
        for j in range(n):
            out[r, j] = V[r, j] - c * w[j] if lo[j] < P[r, j] < hi[j] else 0.0
    return out


@njit(cache=True)
def _permutahedron_face_rows(Y, order, wdesc, V, mode, tol, out):
    """Block averages of the permutahedron projection of each row (see :func:`permutahedron_face`).

    mode 0: out = v - blockmean(v) (J_y v); mode 1: out[sigma(k)] = blockmean(dw_desc)_k
    (J_w dw, V holding dw in decreasing-weight order); mode 2: out[k] = blockmean(u_sigma)_k
    (J_w^T u in decreasing-weight order).
    """
    b, n = Y.shape
    sums = np.empty(n)
    cnts = np.empty(n, np.int64)
    for r in range(b):
        nb = 0
        for i in range(n):
            sums[nb] = Y[r, order[r, i]] - wdesc[i]
            cnts[nb] = 1
            nb += 1
            # pool only a strict violation (by more than tol): a tie keeps the constraint active
            while nb > 1 and sums[nb - 2] * cnts[nb - 1] < sums[nb - 1] * cnts[nb - 2] - tol * cnts[nb - 1] * cnts[nb - 2]:
                sums[nb - 2] += sums[nb - 1]
                cnts[nb - 2] += cnts[nb - 1]
                nb -= 1
        k = 0
        for blk in range(nb):
            c = cnts[blk]
            s = 0.0
            for i in range(k, k + c):
                if mode == 0:
                    s += V[r, order[r, i]]
                elif mode == 1:
                    s += V[r, i]
                else:
                    s += V[r, order[r, i]]
            m = s / c
            for i in range(k, k + c):
                if mode == 0:
                    j = order[r, i]
                    out[r, j] = V[r, j] - m
                elif mode == 1:
                    out[r, order[r, i]] = m
                else:
                    out[r, i] = m
            k += c


def permutahedron_face(Y, wdesc, V, mode=0, tol=0.0):
    """Jacobian products of the permutahedron projection x = P_w(y), from its isotonic blocks.

    With sigma the decreasing order of y, x_sigma = y_sigma - v where v is the pool-adjacent-
    violators (isotonic) fit of y_sigma - w_desc, constant on blocks B. Hence, on each block,
    dx_sigma = dy_sigma - mean_B(dy_sigma) + mean_B(dw_desc). ``mode`` 0 returns J_y v,
    1 returns J_w dw (``V`` = dw in decreasing-weight order), 2 returns J_w^T u in
    decreasing-weight order. Adjacent blocks whose means differ by at most ``tol`` are kept
    apart (a tie: the majorization constraint between them is treated as active). O(n log n)
    per row (the sort), O(n) after it.
    """
    Y = np.ascontiguousarray(Y, dtype=float)
    V = np.ascontiguousarray(V, dtype=float)
    b, n = Y.shape
    if b == 1:
        order = decreasing_order(Y[0])[None, :]
    else:
        order = np.argsort(-Y, axis=1, kind="stable")
    out = np.empty_like(Y)
    _permutahedron_face_rows(Y, np.ascontiguousarray(order), np.ascontiguousarray(wdesc, dtype=float), V,
                             int(mode), float(tol), out)
    return out
