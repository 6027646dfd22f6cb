"""Jacobian products of projections onto structured norm balls and base polytopes (batched over rows).

Each function takes the inputs Y, their projections P (computed by the family) and tangents
V, and returns J(Y) V, with J the derivative of the projection. Every Jacobian here is
symmetric (a Euclidean projection is the gradient of the convex function
(1/2)||y||^2 - (1/2) dist(y, K)^2), so the same function gives the vector-Jacobian product.

* ordered weighted l1 ball: on the sorted magnitudes the projection is max(PAV(z - lam w), 0)
  with <w, u> = radius; on each positive block B, du_B = mean_B(dz) - (W_B/|B|) dlam, and the
  active constraint gives dlam = sum_B W_B mean_B(dz) / sum_B W_B^2/|B| (W_B the sum of the
  weights at B's sorted positions); zero blocks have derivative 0;
* group l1/l2 ball: x_g = y_g (1 - lam w_g / ||y_g||) on the active groups; implicit
  differentiation of <w, t> = radius for the multiplier;
* elastic-net set: x = sign(y)(|y| - lam a)_+ / (1 + lam b); implicit differentiation of
  the active constraint gives (I_A - g g^T/<g, g>) / (1 + lam b) on the support A, with
  g = a sign(x) + b x the constraint's gradient;
* k-support ball: near the answer the ball is {h(x) <= r^2} with the smooth convex quadratic
  h = sum_S x_i^2 + (sum_M |x_i|)^2/(k - q) (S the q largest, M the other nonzeros, the zeros
  fixed); implicit differentiation of the KKT system x - y + mu grad h = 0, h = r^2;
* base polytopes: v minus its mean over each block of the ordered partition given by the
  level sets of y - p (the face of the base polytope exposed by y - p).

Rule at kinks, as everywhere in setkit: constraints tight at the answer are active (exact
zeros are fixed, equal magnitudes of an OWL answer form one block, a point on the boundary
keeps the constraint): the projector onto the smallest face containing the answer.
All compiled loops are O(n) per row after the sort.
"""
from __future__ import annotations

import numpy as np
from numba import njit


# -- ordered weighted l1 --------------------------------------------------------------------------
@njit(cache=True, nogil=True)
def owl_face_rows(P, order, w, V, boundary, out):
    """Rows of J v for the OWL ball at answers P (``order``: decreasing order of |p| per row).

    ``boundary[r]`` False means y was inside (J = I). Blocks are the runs of equal |p| > 0
    along the order (bitwise equal: the kernel gives one value per pooled block). O(n) per row.
    """
    b, n = P.shape
    for r in range(b):
        if not boundary[r]:
            for j in range(n):
                out[r, j] = V[r, j]
            continue
        # pass 1: dlam
        num = 0.0
        den = 0.0
        i = 0
        while i < n:
            a = abs(P[r, order[r, i]])
            if a == 0.0:
                break
            k = i
            W = 0.0
            s = 0.0
            while k < n and abs(P[r, order[r, k]]) == a:
                j = order[r, k]
                W += w[k]
                s += (1.0 if P[r, j] > 0 else -1.0) * V[r, j]
                k += 1
            c = k - i
            num += W * s / c
            den += W * W / c
            i = k
        dlam = num / den if den > 0.0 else 0.0
        for j in range(n):
            out[r, j] = 0.0
        i = 0
        while i < n:
            a = abs(P[r, order[r, i]])
            if a == 0.0:
                break
            k = i
            W = 0.0
            s = 0.0
            while k < n and abs(P[r, order[r, k]]) == a:
                j = order[r, k]
                W += w[k]
                s += (1.0 if P[r, j] > 0 else -1.0) * V[r, j]
                k += 1
            c = k - i
            du = s / c - (W / c) * dlam
            for m in range(i, k):
                j = order[r, m]
                out[r, j] = du if P[r, j] > 0 else -du
            i = k


# -- group l1/l2 ----------------------------------------------------------------------------------
@njit(cache=True, nogil=True)
def group_face_rows(Z, Pz, perm, starts, sizes, w, rt, boundary, V, out):
    """Rows of J v for the group ball; Z = Y / s and Pz = P / s with per-row scales (J is scale-free).

    Active groups: ||p_g|| > 0. With a_g = ||y_g||, e_g = y_g / a_g, lam = (sum_A w a - r) / sum_A w^2:
    dx_g = (1 - lam w_g / a_g) v_g + (lam w_g / a_g) e_g <e_g, v_g> - w_g e_g dlam,
    dlam = sum_A w_g <e_g, v_g> / sum_A w_g^2. O(n) per row.
    """
    b, n = Z.shape
    G = starts.size
    a = np.empty(G)
    t = np.empty(G)
    ev = np.empty(G)
    for r in range(b):
        if not boundary[r]:
            for j in range(n):
                out[r, j] = V[r, j]
            continue
        for j in range(n):
            out[r, j] = 0.0
        swa = 0.0
        sww = 0.0
        for g in range(G):
            sa = 0.0
            st = 0.0
            for m in range(starts[g], starts[g] + sizes[g]):
                j = perm[m]
                sa += Z[r, j] * Z[r, j]
                st += Pz[r, j] * Pz[r, j]
            a[g] = np.sqrt(sa)
            t[g] = np.sqrt(st)
            if t[g] > 0.0 and a[g] > 0.0:
                swa += w[g] * a[g]
                sww += w[g] * w[g]
        if sww == 0.0:
            continue
        lam = (swa - rt[r]) / sww
        if lam < 0.0:
            lam = 0.0
        num = 0.0
        for g in range(G):
            ev[g] = 0.0
            if t[g] > 0.0 and a[g] > 0.0:
                s = 0.0
                for m in range(starts[g], starts[g] + sizes[g]):
                    j = perm[m]
                    s += Z[r, j] * V[r, j]
                ev[g] = s / a[g]
                num += w[g] * ev[g]
        dlam = num / sww
        for g in range(G):
            if t[g] > 0.0 and a[g] > 0.0:
                f = 1.0 - lam * w[g] / a[g]
                c = lam * w[g] / a[g]
                for m in range(starts[g], starts[g] + sizes[g]):
                    j = perm[m]
                    e = Z[r, j] / a[g]
                    out[r, j] = f * V[r, j] + c * e * ev[g] - w[g] * e * dlam


# -- elastic net ----------------------------------------------------------------------------------
@njit(cache=True, nogil=True)
def elastic_face_rows(Y, P, alpha, beta, boundary, V, out):
    """Rows of J v for the elastic-net set: (v_A - g <g, v>_A / <g, g>_A) / (1 + lam beta) on A.

    A = {p != 0} (every coordinate when alpha = 0), g = alpha sign(p) + beta p, and
    lam = (|y_m| - |p_m|) / (alpha + beta |p_m|) at the largest |y_m|. O(n) per row.
    """
    b, n = Y.shape
    for r in range(b):
        if not boundary[r]:
            for j in range(n):
                out[r, j] = V[r, j]
            continue
        m = 0
        for j in range(n):
            if abs(Y[r, j]) > abs(Y[r, m]):
                m = j
        um = abs(P[r, m])
        zm = abs(Y[r, m])
        for j in range(n):
            out[r, j] = 0.0
        if um == 0.0 and alpha == 0.0:
            continue                       # radius 0: the set is the origin
        lam = (zm - um) / (alpha + beta * um)
        D = 1.0 + lam * beta
        gv = 0.0
        gg = 0.0
        for j in range(n):
            if P[r, j] != 0.0 or alpha == 0.0:
                sg = 0.0
                if P[r, j] > 0.0:
                    sg = 1.0
                elif P[r, j] < 0.0:
                    sg = -1.0
                g = alpha * sg + beta * P[r, j]
                gv += g * V[r, j]
                gg += g * g
        c = gv / gg if gg > 0.0 else 0.0
        for j in range(n):
            if P[r, j] != 0.0 or alpha == 0.0:
                sg = 0.0
                if P[r, j] > 0.0:
                    sg = 1.0
                elif P[r, j] < 0.0:
                    sg = -1.0
                g = alpha * sg + beta * P[r, j]
                out[r, j] = (V[r, j] - c * g) / D


# -- k-support norm -------------------------------------------------------------------------------
@njit(cache=True, nogil=True)
def _ksupport_split(x, k):
    """q (the number of leading entries of x, sorted nonincreasing >= 0, kept squared in the norm).

    The q in 0..k-1 with x_{q-1} >= T_q/(k - q) >= x_q, T_q = sum_{i >= q} x_i (the smallest
    inconsistency where rounding leaves none exact); q = n when x has fewer than k nonzeros."""
    n = x.size
    nnz = 0
    for i in range(n):
        if x[i] > 0.0:
            nnz += 1
    if nnz < k or k >= n:
        return n
    T = 0.0
    for i in range(n):
        T += x[i]
    best = np.inf
    bq = 0
    for q in range(k):
        tau = T / (k - q)
        bad = max(x[q] - tau, 0.0)
        if q > 0:
            bad = max(bad, tau - x[q - 1])
        if bad == 0.0:
            return q
        if bad < best:
            best = bad
            bq = q
        T -= x[q]
        if T < 0.0:
            T = 0.0
    return bq


@njit(cache=True, nogil=True)
def ksupport_face_rows(Y, P, order, k, boundary, V, out):
    """Rows of J v for the k-support ball by implicit differentiation of its KKT system.

    On S (the q largest |p|) and M (the other nonzeros): h(x) = sum_S x^2 + (sum_M |x|)^2/(k - q),
    g = grad h, Hessian 2 diag(I_S, s s^T/(k - q)) (s the signs on M), mu = <y - p, g>/<g, g>;
    with H = I + mu grad^2 h (inverted in closed form on S and M),
    J v = H^-1 v - H^-1 g <g, H^-1 v>/<g, H^-1 g>; 0 on the zeros. O(n) per row after the sort.
    """
    b, n = Y.shape
    x = np.empty(n)
    g = np.empty(n)
    hv = np.empty(n)
    hg = np.empty(n)
    for r in range(b):
        if not boundary[r]:
            for j in range(n):
                out[r, j] = V[r, j]
            continue
        for i in range(n):
            x[i] = abs(P[r, order[r, i]])
        q = _ksupport_split(x, k)
        sM = 0.0
        mM = 0
        for i in range(q, n):
            if x[i] > 0.0:
                sM += x[i]
                mM += 1
        # gradient (signed, in original positions via order)
        gg = 0.0
        gr = 0.0
        for i in range(n):
            j = order[r, i]
            sg = 1.0 if P[r, j] > 0.0 else (-1.0 if P[r, j] < 0.0 else 0.0)
            if i < q:
                g[i] = 2.0 * P[r, j]
            elif x[i] > 0.0:
                g[i] = 2.0 * sM / (k - q) * sg
            else:
                g[i] = 0.0
            gg += g[i] * g[i]
            gr += g[i] * (Y[r, j] - P[r, j])
        for j in range(n):
            out[r, j] = 0.0
        if gg == 0.0:
            continue
        mu = gr / gg
        if mu < 0.0:
            mu = 0.0
        cS = 1.0 / (1.0 + 2.0 * mu)
        cM = 0.0
        if mM > 0:
            cM = (2.0 * mu / (k - q)) / (1.0 + 2.0 * mu * mM / (k - q))
        # H^-1 v and H^-1 g on M: (I - cM s s^T) in signed coordinates
        sv = 0.0
        sgsum = 0.0
        for i in range(q, n):
            if x[i] > 0.0:
                j = order[r, i]
                sg = 1.0 if P[r, j] > 0.0 else -1.0
                sv += sg * V[r, j]
                sgsum += sg * g[i]
        for i in range(n):
            j = order[r, i]
            if i < q:
                hv[i] = cS * V[r, j]
                hg[i] = cS * g[i]
            elif x[i] > 0.0:
                sg = 1.0 if P[r, j] > 0.0 else -1.0
                hv[i] = V[r, j] - cM * sg * sv
                hg[i] = g[i] - cM * sg * sgsum
            else:
                hv[i] = 0.0
                hg[i] = 0.0
        ghv = 0.0
        ghg = 0.0
        for i in range(n):
            ghv += g[i] * hv[i]
            ghg += g[i] * hg[i]
        c = ghv / ghg if ghg > 0.0 else 0.0
        for i in range(n):
            out[r, order[r, i]] = hv[i] - c * hg[i]


# -- base polytopes: the ordered partition ---------------------------------------------------------
@njit(cache=True, nogil=True)
def partition_face_rows(U, order, V, tol, out):
    """Rows of J v = v - (mean of v over its block), blocks = runs of U (sorted by ``order``) whose
    consecutive gaps are at most tol[r] (a near tie is treated as a tie: the smallest face). O(n) per row."""
    b, n = U.shape
    for r in range(b):
        i = 0
        while i < n:
            k = i + 1
            while k < n and U[r, order[r, k - 1]] - U[r, order[r, k]] <= tol[r]:
                k += 1
            s = 0.0
            for m in range(i, k):
                s += V[r, order[r, m]]
            s /= (k - i)
            for m in range(i, k):
                j = order[r, m]
                out[r, j] = V[r, j] - s
            i = k


def ordered_partition_jvp(Y, P, V, rel):
    """J v for a projection P onto a base polytope: v minus its block means on the level sets of Y - P.

    The face of B(F) exposed by u = y - p is {x in B(F) : x(S) = F(S) for the sets S = {u >= c}};
    where p lies in that face's relative interior (almost every y), the projection is locally the
    projection onto its affine hull, whose tangent space is {d : d(A) = 0 for each level set A of u}.
    Values of u closer than ``rel`` times max(1, |y|_inf, |p|_inf) count as equal. O(n log n) per row.
    """
    Y = np.ascontiguousarray(Y, dtype=float)
    P = np.ascontiguousarray(P, dtype=float)
    V = np.ascontiguousarray(V, dtype=float)
    U = Y - P
    order = np.ascontiguousarray(np.argsort(-U, axis=1, kind="stable"))
    tol = rel * np.maximum(1.0, np.maximum(np.abs(Y).max(axis=1, initial=0.0), np.abs(P).max(axis=1, initial=0.0)))
    out = np.empty_like(V)
    partition_face_rows(U, order, V, np.ascontiguousarray(tol), out)
    return out
