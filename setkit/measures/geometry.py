"""Polytope geometry for the measures: affine hull, vertices, exact centroids.

A polytope given by a linear form without auxiliary variables is reduced to a full-dimensional
polytope of its affine hull, ``{x0 + N t : M t <= q}`` with ``N`` orthonormal (explicit and
implicit equalities removed, rows normalized, Chebyshev center known). In small dimension its
vertices are enumerated (scipy.spatial.HalfspaceIntersection) and its exact centroids follow:
the vertex mean, the volume centroid by a triangulation (scipy.spatial.ConvexHull facets coned
from an interior point) and, in dimension <= 2, the law of lmo(g) by normal-cone angles.
Results are kept beside each node (:func:`setkit.families.memo`), never inside it.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..errors import EmptySetError, SolveError
from ..families import memo

EXACT_MAX_DIM = 8          # largest affine-hull dimension for vertex enumeration by default
MAX_VERTICES = 200_000     # more vertices than this are not used for exact answers


@dataclass(frozen=True, eq=False)
class ReducedPolytope:
    """A polytope in its affine hull: {x0 + N t : M t <= q}, N orthonormal (dim x m)."""

    x0: np.ndarray
    N: np.ndarray
    M: np.ndarray
    q: np.ndarray
    center: np.ndarray      # Chebyshev center in t
    radius: float
    bounded: bool

    @property
    def m(self) -> int:
        return self.N.shape[1]

    def to_x(self, T):
        return self.x0 + T @ self.N.T


def solve_lp(c, A_ub=None, b_ub=None, A_eq=None, b_eq=None, bounds=None):
    from scipy.optimize import linprog
    return linprog(c, A_ub=A_ub, b_ub=b_ub, A_eq=A_eq, b_eq=b_eq, bounds=bounds, method="highs",
                   options=dict(primal_feasibility_tolerance=1e-10, dual_feasibility_tolerance=1e-10))


def reduce_form(form, label="set") -> ReducedPolytope:
    """Affine hull, implicit equalities, Chebyshev center of a linear form without auxiliaries.

    Implicit equalities are found by repeated LPs: maximize the sum of capped
    slacks of the undecided inequalities; those with positive slack are proper,
    and when the optimum is zero the remaining ones hold with equality on the
    whole set. O(rows) LPs in the worst case, one or two in practice.
    """
    from scipy.linalg import null_space
    n = form.n_x
    A_ub = form.A_ub.toarray()
    rows = [A_ub]
    rhs = [form.b_ub]
    eye = np.eye(n)
    flo, fhi = np.isfinite(form.lo), np.isfinite(form.hi)
    rows += [-eye[flo], eye[fhi]]
    rhs += [-form.lo[flo], form.hi[fhi]]
    Gm = np.vstack(rows) if rows else np.zeros((0, n))
    h = np.concatenate(rhs)
    E = form.A_eq.toarray()
    f = form.b_eq.copy()
    # normalize rows so slacks are Euclidean distances
    gn = np.linalg.norm(Gm, axis=1)
    keep = gn > 0
    if np.any(~keep & (h < 0)):
        raise EmptySetError(f"{label}: a constraint 0 <= b with b < 0 makes the set empty.")
    Gm, h, gn = Gm[keep], h[keep], gn[keep]
    Gm, h = Gm / gn[:, None], h / gn
    scale = max(1.0, float(np.abs(h).max(initial=0.0)), float(np.abs(f).max(initial=0.0)))
    tol_s = 1e-9 * scale
    r = Gm.shape[0]
    implicit = np.ones(r, bool)
    free = [(None, None)] * n
    x_feas = None
    while True:
        U = np.flatnonzero(implicit)
        nU = U.size
        c = np.concatenate([np.zeros(n), -np.ones(nU)])
        S = np.zeros((r, nU))
        S[U, np.arange(nU)] = 1.0
        A = np.hstack([Gm, S]) if r else None
        Aeq = np.hstack([E, np.zeros((E.shape[0], nU))]) if E.shape[0] else None
        res = solve_lp(c, A_ub=A, b_ub=h if r else None, A_eq=Aeq, b_eq=f if E.shape[0] else None,
                       bounds=free + [(0.0, 1.0)] * nU)
        if res.status == 2:
            raise EmptySetError(f"{label}: the set is empty (HiGHS: {res.message}).")
        if res.status != 0:
            raise SolveError(f"{label}: the LP finding the affine hull failed (status {res.status}: {res.message}).")
        x_feas = res.x[:n]
        s = res.x[n:]
        pos = s > tol_s
        if nU == 0 or not pos.any():
            break
        implicit[U[pos]] = False
    Eall = np.vstack([E, Gm[implicit]]) if implicit.any() else E
    if Eall.shape[0]:
        N = null_space(Eall, rcond=1e-10)
    else:
        N = np.eye(n)
    x0 = x_feas
    m = N.shape[1]
    Gp, hp = Gm[~implicit], h[~implicit]
    M = Gp @ N
    q = hp - Gp @ x0
    mn = np.linalg.norm(M, axis=1)
    live = mn > 1e-12
    M, q, mn = M[live], np.maximum(q[live], 0.0), mn[live]
    M, q = M / mn[:, None], q / mn
    if m == 0:
        return ReducedPolytope(x0, N, M.reshape(0, 0), q[:0], np.zeros(0), 0.0, True)
    # boundedness: the rows positively span R^m (rank m and a strictly positive dependence)
    bounded = False
    if M.shape[0] > m and np.linalg.matrix_rank(M) == m:
        res = solve_lp(np.zeros(M.shape[0]), A_eq=M.T, b_eq=np.zeros(m), bounds=[(1.0, None)] * M.shape[0])
        bounded = res.status == 0
    # Chebyshev center (rows normalized): max rho s.t. M t + rho <= q
    c = np.concatenate([np.zeros(m), [-1.0]])
    A = np.hstack([M, np.ones((M.shape[0], 1))])
    cap = 10.0 * scale if not bounded else None
    res = solve_lp(c, A_ub=A, b_ub=q, bounds=[(None, None)] * m + [(0.0, cap)])
    if res.status != 0:
        raise SolveError(f"{label}: the Chebyshev-center LP failed (status {res.status}: {res.message}).")
    center, rho = res.x[:m], float(res.x[m])
    if rho <= 1e-12 * scale:
        raise SolveError(f"{label}: the set has no interior in its affine hull after removing implicit "
                         f"equalities (Chebyshev radius {rho:.3g}); the data may be too ill-conditioned.")
    return ReducedPolytope(x0, N, M, q, center, rho, bounded)


def reduced(K):
    """The :class:`ReducedPolytope` of K (computed once per node), or None when K has no linear form
    without auxiliary variables.

    >>> import setkit
    >>> P = reduced(setkit.compile({"kind": "simplex", "dim": 3}))
    >>> P.m, P.bounded
    (2, True)
    """
    def build():
        form = K.linear_form()
        if form is None or form.n_aux != 0:
            return None
        return reduce_form(form, K.node.label)
    return memo(K.node, "measures: reduced polytope", build)


def _dedupe(V, tol):
    from scipy.spatial import cKDTree
    if V.shape[0] <= 1:
        return V
    tree = cKDTree(V)
    keep = np.ones(V.shape[0], bool)
    for i, j in sorted(tree.query_pairs(tol)):
        if keep[i] and keep[j]:
            keep[j] = False
    return V[keep]


def polytope_vertices(P: ReducedPolytope, label="set"):
    """Vertices (in t coordinates) of a reduced polytope of small dimension.

    Interval ends for m = 1; scipy.spatial.HalfspaceIntersection (Qhull) from the Chebyshev center
    for m >= 2, with coincident intersections merged. Not cached: see :func:`vertices_of`.
    """
    m = P.m
    if m == 0:
        V = np.zeros((1, 0))
    elif m == 1:
        a = P.M[:, 0]
        hi = np.min(P.q[a > 0] / a[a > 0])
        lo = np.max(P.q[a < 0] / a[a < 0])
        V = np.array([[lo], [hi]])
    else:
        from scipy.spatial import HalfspaceIntersection
        hs = np.hstack([P.M, -P.q[:, None]])
        V = HalfspaceIntersection(hs, P.center).intersections
        if not np.all(np.isfinite(V)):
            raise SolveError(f"{label}: vertex enumeration produced non-finite points.")
        V = _dedupe(V, 1e-9 * max(1.0, float(np.abs(V).max())))
    return V


def simplex_volume_centroid(V):
    """Exact volume centroid of the convex hull of points V (k x m), by coning the hull facets.

    Each facet simplex F of scipy.spatial.ConvexHull is joined to an interior
    point c; the cone simplices partition the polytope, so the centroid is the
    volume-weighted mean of their vertex means. O(#facets * m^3).
    """
    from scipy.spatial import ConvexHull
    k, m = V.shape
    if m == 0:
        return np.zeros(0)
    if m == 1:
        return np.array([(V.min() + V.max()) / 2.0])
    hull = ConvexHull(V)
    c = V[hull.vertices].mean(axis=0)
    F = V[hull.simplices]                      # (f, m, m)
    D = F - c
    vol = np.abs(np.linalg.det(D)) / math.factorial(m)
    cents = (F.sum(axis=1) + c) / (m + 1)
    return (vol[:, None] * cents).sum(axis=0) / vol.sum()


def normal_cone_weights(V):
    """P(lmo(g) = v) for a standard Gaussian g, for the vertices V (k x m) of a polytope with m <= 2.

    Only the component of g in the affine hull matters (orthonormal coordinates keep it standard
    Gaussian), and its direction is uniform on the circle, so a vertex is chosen with probability
    (exterior angle at v) / (2 pi), the angle of its normal cone; the two ends of a segment have 1/2
    each. Returns (weights, vertices in matching order). O(k log k).
    """
    k, m = V.shape
    if m == 0 or k == 1:
        return np.ones(1), V[:1]
    if m == 1:
        return np.array([0.5, 0.5]), np.array([[V.min()], [V.max()]])
    from scipy.spatial import ConvexHull
    W = V[ConvexHull(V).vertices]                  # counter-clockwise
    e_in = W - np.roll(W, 1, axis=0)               # edge arriving at each vertex
    e_out = np.roll(W, -1, axis=0) - W             # edge leaving it
    turn = np.arctan2(e_in[:, 0] * e_out[:, 1] - e_in[:, 1] * e_out[:, 0], np.einsum("ij,ij->i", e_in, e_out))
    return turn / turn.sum(), W


def vertices_of(K, P: ReducedPolytope):
    """The vertices (t coordinates) of K's reduced polytope P, enumerated once per node."""
    return memo(K.node, "measures: polytope vertices", lambda: polytope_vertices(P, K.node.label))


def enumerable(K, exact_max_dim: int = EXACT_MAX_DIM):
    """``(P, V)``: K's reduced polytope and its vertices when they can be enumerated, else None.

    Enumerable means: a bounded polytope given without auxiliary variables, with an affine hull of
    dimension m <= ``exact_max_dim``, at most 40 m + 200 inequality rows, and at most
    ``MAX_VERTICES`` vertices. Errors of the reduction (empty set, failed LP) propagate.

    >>> import setkit
    >>> P, V = enumerable(setkit.compile({"kind": "simplex", "dim": 3}))
    >>> V.shape, bool(np.allclose(sorted(P.to_x(V).tolist()), [[0, 0, 1], [0, 1, 0], [1, 0, 0]]))
    ((3, 2), True)
    """
    P = reduced(K)
    if P is None or not P.bounded or P.m > exact_max_dim or P.M.shape[0] > 40 * max(P.m, 1) + 200:
        return None
    V = vertices_of(K, P)
    if V.shape[0] > MAX_VERTICES:
        return None
    return P, V
