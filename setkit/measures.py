"""Centroids and samples of a decision set under three measures.

Measures
--------
``"volume"``
    The uniform distribution over the set within its affine hull (Lebesgue
    measure of the affine hull restricted to the set). Needs a bounded set.
``"vertices"``
    The uniform distribution over the extreme points: permutations for a
    permutahedron, assignments for the Birkhoff polytope, corners of a box or a
    simplex. For a Euclidean ball the extreme points are the sphere and the
    measure is the uniform one on it.
``"directions"``
    The law of ``lmo(g)`` for a standard Gaussian direction ``g`` in R^dim: what
    a random linear weak learner picks. Defined for every bounded set with an
    LMO (ties have probability zero).

How answers are obtained (first that applies)
---------------------------------------------
1. The family's own exact knowledge: a family may define the optional methods
   ``exact_centroid(measure)`` (returns the centroid, or None when not known)
   and ``exact_sample(k, measure, rng)`` (returns ``(k, dim)`` points, or None).
   Nothing here lists families.
2. For polytopes given by a linear form without auxiliary variables: the set
   is reduced to its affine hull (explicit and implicit equalities, null-space
   parametrization ``x = x0 + N t`` with orthonormal ``N``); when the reduced
   dimension is at most ``exact_max_dim`` (default 8) the vertices are
   enumerated (scipy.spatial.HalfspaceIntersection) and the volume centroid is
   computed exactly by a triangulation (scipy.spatial.ConvexHull facets coned
   from an interior point); the vertex centroid is the mean of the vertices;
   when the reduced dimension is at most 2 the directions centroid is exact
   too (normal-cone angles of the polygon).
3. Otherwise an estimate: ``directions`` by Monte Carlo over the LMO (iid, so
   the effective sample size is the number of draws); ``volume`` by hit-and-run
   (chord endpoints from the constraints for polytopes, or a membership chord
   bracketed by the support function or the bounding box, with Neal's
   shrinkage, for other sets). Estimates carry a standard error per coordinate
   (the largest of batch means, Geyer's autocorrelation time and the spread of
   chain means), an effective sample size and the Gelman-Rubin R-hat, all
   available with ``details=True``; slowly mixing chains (R-hat > 1.05 or
   effective sample size < 50) raise an AccuracyWarning.
4. Where no honest estimate exists (uniform over the extreme points of a large
   polytope, or of a non-polyhedral set without family knowledge; volume of an
   unbounded set) an :class:`~setkit.errors.UnsupportedOperationError` says why
   and which measure would work.

Hit-and-run
-----------
Chains start at dispersed points: half-way between the Chebyshev center
(largest inscribed ball, one LP) of the reduced polytope and vertices for random
directions (one LP per chain), or half-way between the mean of LMO answers and
some of them for non-polyhedral sets, so that chains which have not forgotten
their starts disagree visibly (R-hat). Each step draws a direction from a
fixed centrally symmetric law N(0, S) and moves
to a uniform point of the chord (polytopes) or to a shrinkage draw on the chord
(membership sets); both leave the uniform distribution invariant. S rounds
elongated sets: for polytopes the inverse Dikin matrix of the constraints at
the Chebyshev center, for other sets the covariance of the LMO answers used to
find the affine hull. Defaults: ``chains = 8``,
``burn_in = 200 + 50 * m`` steps, ``thin = max(1, m)`` steps between kept
states, ``m`` the dimension of the affine hull.

All randomness comes from ``rng`` (a numpy Generator or an int seed). For
:func:`sample`, ``rng=None`` means fresh entropy; for :func:`centroid` estimates
``rng=None`` means the fixed seed 0, so that ``K.centroid()`` is reproducible.
"""
from __future__ import annotations

import math
import time
import warnings
import weakref
from dataclasses import dataclass
from typing import Any

import numpy as np

from .errors import (AccuracyWarning, EmptySetError, InputError, SolveError, UnboundedDirectionError,
                     UnsupportedOperationError)

MEASURES = ("volume", "vertices", "directions")
EXACT_MAX_DIM = 8
MAX_VERTICES = 200_000
RHAT_WARN = 1.05      # hit-and-run estimates warn above this R-hat ...
ESS_WARN = 50.0       # ... or below this effective sample size


@dataclass(frozen=True)
class MeasureResult:
    """A centroid with how it was obtained and how accurate it is.

    ``point`` has the set's point shape; ``std_error`` too (zeros when exact);
    ``ess`` is the effective sample size (``inf`` when exact; for hit-and-run
    the smallest over coordinates); ``samples`` the number of points used;
    ``rhat`` the largest Gelman-Rubin R-hat of the hit-and-run chains (NaN otherwise).
    """

    point: Any
    measure: str
    method: str
    exact: bool
    std_error: Any
    ess: float
    samples: int
    seconds: float
    note: str = ""
    rhat: float = float("nan")


# ---------------------------------------------------------------------------------------------
# argument handling
# ---------------------------------------------------------------------------------------------
def _check_measure(K, measure, op):
    if measure not in MEASURES:
        raise InputError(f"{op} on {K.node.label}: measure must be one of {', '.join(MEASURES)}; "
                         f"got {measure!r}.")


def as_generator(rng, default_seed=None) -> np.random.Generator:
    """A numpy Generator from a Generator, an int seed or None."""
    if isinstance(rng, np.random.Generator):
        return rng
    if rng is None:
        return np.random.default_rng(default_seed)
    if isinstance(rng, (int, np.integer)) and not isinstance(rng, bool):
        return np.random.default_rng(int(rng))
    raise InputError(f"rng must be a numpy.random.Generator, an int seed or None; got {type(rng).__name__}.")


def _hook(node, name):
    fn = getattr(node, name, None)
    return fn if callable(fn) else None


# ---------------------------------------------------------------------------------------------
# the reduced polytope {x0 + N t : M t <= q}
# ---------------------------------------------------------------------------------------------
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


_REDUCED = weakref.WeakKeyDictionary()
_VERTICES = weakref.WeakKeyDictionary()


def _linprog(c, A_ub=None, b_ub=None, A_eq=None, b_eq=None, bounds=None):
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
        res = _linprog(c, A_ub=A, b_ub=h if r else None, A_eq=Aeq, b_eq=f if E.shape[0] else None,
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
        res = _linprog(np.zeros(M.shape[0]), A_eq=M.T, b_eq=np.zeros(m), bounds=[(1.0, None)] * M.shape[0])
        bounded = res.status == 0
    # Chebyshev center (rows normalized): max rho s.t. M t + rho <= q
    c = np.concatenate([np.zeros(m), [-1.0]])
    A = np.hstack([M, np.ones((M.shape[0], 1))])
    cap = 10.0 * scale if not bounded else None
    res = _linprog(c, A_ub=A, b_ub=q, bounds=[(None, None)] * m + [(0.0, cap)])
    if res.status != 0:
        raise SolveError(f"{label}: the Chebyshev-center LP failed (status {res.status}: {res.message}).")
    center, rho = res.x[:m], float(res.x[m])
    if rho <= 1e-12 * scale:
        raise SolveError(f"{label}: the set has no interior in its affine hull after removing implicit "
                         f"equalities (Chebyshev radius {rho:.3g}); the data may be too ill-conditioned.")
    return ReducedPolytope(x0, N, M, q, center, rho, bounded)


def reduced(K):
    """The cached :class:`ReducedPolytope` of K, or None when K has no linear form without auxiliaries."""
    node = K.node
    if node in _REDUCED:
        return _REDUCED[node]
    form = K.linear_form()
    P = None
    if form is not None and form.n_aux == 0:
        P = reduce_form(form, node.label)
    _REDUCED[node] = P
    return P


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
    """Vertices (in t coordinates) of a reduced polytope of small dimension."""
    if P in _VERTICES:
        return _VERTICES[P]
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
    _VERTICES[P] = V
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


def _reduced_dim_ok(P, exact_max_dim):
    return P is not None and P.bounded and P.m <= exact_max_dim and P.M.shape[0] <= 40 * max(P.m, 1) + 200


# ---------------------------------------------------------------------------------------------
# hit-and-run
# ---------------------------------------------------------------------------------------------
def _defaults(m, chains, burn_in, thin):
    chains = 8 if chains is None else int(chains)
    burn_in = 200 + 50 * m if burn_in is None else int(burn_in)
    thin = max(1, m) if thin is None else int(thin)
    if chains < 1 or burn_in < 0 or thin < 1:
        raise InputError(f"hit-and-run: chains must be >= 1, burn_in >= 0 and thin >= 1; got chains={chains}, "
                         f"burn_in={burn_in}, thin={thin}.")
    return chains, burn_in, thin


def _run_chains(step, T0, n_keep, burn_in, thin, rng, L):
    """Drive batched chains: ``step(T, L, rng)`` advances all chains one step; returns (C, n_keep, m).

    ``L`` shapes the direction law N(0, L L^T); it is fixed for the whole run (the chain stays reversible).
    """
    C, m = T0.shape
    T = T0.copy()
    for _ in range(burn_in):
        T = step(T, L, rng)
    out = np.empty((C, n_keep, m))
    for j in range(n_keep):
        for _ in range(thin):
            T = step(T, L, rng)
        out[:, j] = T
    return out


def _dikin_factor(P):
    """Cholesky factor of the inverse Dikin matrix (sum m_i m_i^T / s_i^2)^-1 at the Chebyshev center."""
    m = P.m
    s = np.maximum(P.q - P.M @ P.center, 1e-300)
    H = (P.M / s[:, None] ** 2).T @ P.M
    try:
        L = np.linalg.cholesky(np.linalg.inv(H))
        if np.all(np.isfinite(L)):
            return L
    except np.linalg.LinAlgError:
        pass
    return np.eye(m)


def _polytope_step(P, label):
    M, q = P.M, P.q

    def step(T, L, rng):
        C, m = T.shape
        D = rng.standard_normal((C, m)) @ L.T
        MD = D @ M.T                                  # (C, rows)
        slack = np.maximum(q - T @ M.T, 0.0)
        with np.errstate(divide="ignore", invalid="ignore"):
            ratio = slack / MD
        hi = np.where(MD > 0, ratio, np.inf).min(axis=1)
        lo = np.where(MD < 0, ratio, -np.inf).max(axis=1)
        if not (np.all(np.isfinite(hi)) and np.all(np.isfinite(lo))):
            raise UnsupportedOperationError(
                f"sample on {label}: the set is unbounded, so it has no uniform (volume) distribution; "
                f"measure='directions' needs a bounded set too - bound the set, e.g. intersect it with a box.")
        lam = lo + (hi - lo) * rng.random(C)
        return T + lam[:, None] * D
    return step


@dataclass(frozen=True, eq=False)
class _MembershipFrame:
    x0: np.ndarray
    N: np.ndarray
    L: np.ndarray
    T: np.ndarray          # the LMO answers in affine-hull coordinates


def _membership_frame(K, rng):
    """Affine hull of a general set from LMO answers on random directions (x0 in the relative interior)."""
    d = K.dim
    nd = 2 * d + 8
    Gd = rng.standard_normal((nd, d))
    try:
        Pts = K.lmo(Gd.reshape((nd,) + K.shape)).reshape(nd, d)
    except UnboundedDirectionError as exc:
        raise UnsupportedOperationError(
            f"centroid/sample on {K.node.label}: the set is unbounded ({exc}), so it has no uniform (volume) "
            f"distribution; bound the set, e.g. intersect it with a box.") from None
    x0 = Pts.mean(axis=0)
    U, s, _ = np.linalg.svd((Pts - x0).T, full_matrices=False)
    if s.size == 0 or s[0] == 0:
        return _MembershipFrame(x0, np.zeros((d, 0)), np.zeros((0, 0)), np.zeros((0, 0)))
    r = int(np.sum(s > 1e-9 * s[0]))
    N = U[:, :r]
    T = (Pts - x0) @ N
    S = T.T @ T / max(1, nd - 1)
    try:
        L = np.linalg.cholesky(S + 1e-9 * float(np.trace(S)) / r * np.eye(r))
    except np.linalg.LinAlgError:
        L = np.eye(r)
    return _MembershipFrame(x0, N, L, T)


def _membership_step(K, frame, max_shrink=60):
    """Hit-and-run step on a membership oracle: a line-dependent bracket (support function when it is
    cheap, else the bounding box), then Neal's shrinkage toward the current point until contains()."""
    N, x0 = frame.N, frame.x0
    shape = K.shape
    routes = K.routes()
    cheap_support = routes["support"].provider == "native" or (
        routes["support"].provider == "derived" and routes["lmo"].provider == "native")
    if not cheap_support:
        E = np.eye(K.dim)
        sup = K.support(np.concatenate([E, -E]).reshape((2 * K.dim,) + shape)).reshape(2 * K.dim)
        box_hi, box_lo = sup[:K.dim], -sup[K.dim:]
        pad = 1e-9 * max(1.0, float(np.abs(sup).max()))
        box_hi, box_lo = box_hi + pad, box_lo - pad

    def step(T, L, rng):
        C, m = T.shape
        D = rng.standard_normal((C, m)) @ L.T
        X = x0 + T @ N.T
        Dx = D @ N.T
        if cheap_support:
            # bracket from the two supporting hyperplanes orthogonal to the line
            nn = np.einsum("ij,ij->i", Dx, Dx)
            both = K.support(np.concatenate([Dx, -Dx]).reshape((2 * C,) + shape)).reshape(2 * C)
            xd = np.einsum("ij,ij->i", Dx, X)
            hi = np.maximum((both[:C] - xd) / nn, 0.0)
            lo = -np.maximum((both[C:] + xd) / nn, 0.0)
        else:
            # bracket from the bounding box of the set (computed once): no LP per step
            tiny = 1e-300
            with np.errstate(divide="ignore", invalid="ignore"):
                r1 = (box_hi - X) / Dx
                r2 = (box_lo - X) / Dx
            live = np.abs(Dx) > tiny
            hi = np.where(live, np.maximum(r1, r2), np.inf).min(axis=1).clip(min=0.0)
            lo = np.where(live, np.minimum(r1, r2), -np.inf).max(axis=1).clip(max=0.0)
        lam = np.zeros(C)
        todo = np.ones(C, bool)
        for _ in range(max_shrink):
            idx = np.flatnonzero(todo)
            if idx.size == 0:
                break
            cand = lo[idx] + (hi[idx] - lo[idx]) * rng.random(idx.size)
            Y = X[idx] + cand[:, None] * Dx[idx]
            ok = np.asarray(K.contains(Y.reshape((idx.size,) + shape))).reshape(idx.size)
            lam[idx[ok]] = cand[ok]
            todo[idx[ok]] = False
            bad = idx[~ok]
            cb = cand[~ok]
            pos = cb > 0
            hi[bad[pos]] = cb[pos]
            lo[bad[~pos]] = cb[~pos]
        return T + lam[:, None] * D
    return step


def _volume_chain_setup(K, rng):
    """(step, starts(C, rng) -> (C, m), to_x, m, direction factor L) for hit-and-run in K's affine hull."""
    P = reduced(K)
    if P is not None:
        if not P.bounded:
            raise UnsupportedOperationError(
                f"volume measure on {K.node.label}: the set is unbounded, so it has no uniform distribution; "
                f"bound it (e.g. intersect it with a box).")

        def starts(C, g):
            # half-way from the Chebyshev center to vertices of random directions (one LP each)
            out = np.repeat(P.center[None, :], C, axis=0)
            for i in range(C):
                res = _linprog(g.standard_normal(P.m), A_ub=P.M, b_ub=P.q, bounds=[(None, None)] * P.m)
                if res.status == 0:
                    out[i] = 0.5 * (P.center + res.x)
            return out
        return _polytope_step(P, K.node.label), starts, P.to_x, P.m, _dikin_factor(P)
    frame = _membership_frame(K, rng)

    def starts(C, g):
        # half-way from the mean of the LMO answers (relative interior) to some of them
        if frame.T.shape[0] == 0:
            return np.zeros((C, frame.N.shape[1]))
        return 0.5 * frame.T[g.integers(0, frame.T.shape[0], size=C)]
    return (_membership_step(K, frame), starts, (lambda T: frame.x0 + T @ frame.N.T),
            frame.N.shape[1], frame.L)


def hit_and_run(K, n, rng, chains=None, burn_in=None, thin=None):
    """(C, n_per_chain, dim) hit-and-run states of the uniform distribution on K."""
    step, start, to_x, m, L = _volume_chain_setup(K, rng)
    chains, burn_in, thin = _defaults(m, chains, burn_in, thin)
    per = max(1, -(-n // chains))
    if m == 0:
        return np.broadcast_to(to_x(np.zeros((1, 0))), (chains, per, K.dim)).copy()
    T0 = start(chains, rng)
    S = _run_chains(step, T0, per, burn_in, thin, rng, L)
    C = S.shape[0]
    return to_x(S.reshape(-1, m)).reshape(C, per, K.dim)


def _ips_tau(S):
    """Integrated autocorrelation time per coordinate of chains S (C, n, d): Geyer's initial positive
    sequence estimator on the chain-averaged autocovariance (centered at the pooled mean). O(C n log n d)."""
    C, n, d = S.shape
    Z = S - S.reshape(-1, d).mean(axis=0)
    L = 1 << int(math.ceil(math.log2(2 * n)))
    F = np.fft.rfft(Z, n=L, axis=1)
    acov = np.fft.irfft(F * np.conj(F), n=L, axis=1)[:, :n].mean(axis=0) / n     # (n, d)
    tau = np.ones(d)
    for j in range(d):
        g0 = acov[0, j]
        if g0 <= 0:
            continue
        rho = acov[:, j] / g0
        total = -1.0
        for k in range(0, n - 1, 2):
            pair = rho[k] + rho[k + 1]
            if pair <= 0:
                break
            total += 2.0 * pair
        tau[j] = max(total, 1.0 / (C * n))
    return tau


def chain_summary(S):
    """Mean, per-coordinate standard error, smallest effective sample size and largest R-hat of chains
    S (C, n, d).

    The standard error is the largest of three estimates, because each can understate the error of
    slowly mixing chains: batch means (5 batches per chain), the initial-positive-sequence
    autocorrelation time (Geyer, 1992) and the spread of the chain means (chains start dispersed).
    R-hat is the potential scale reduction of Gelman and Rubin (1992); values well above 1 mean the
    chains have not mixed.
    """
    C, n, d = S.shape
    flat = S.reshape(-1, d)
    mean = flat.mean(axis=0)
    if C * n < 2:
        return mean, np.full(d, np.nan), float("nan"), float("nan")
    var = flat.var(axis=0, ddof=1)
    B = max(1, min(n, 5))
    size = n // B
    bm = S[:, :B * size].reshape(C, B, size, d).mean(axis=2).reshape(C * B, d)
    se_b = bm.std(axis=0, ddof=1) / math.sqrt(C * B) if C * B > 1 else np.zeros(d)
    se_t = np.sqrt(var * _ips_tau(S) / (C * n)) if n > 1 else np.zeros(d)
    cm = S.mean(axis=1)
    se_c = cm.std(axis=0, ddof=1) / math.sqrt(C) if C > 1 else np.zeros(d)
    se = np.maximum(np.maximum(se_b, se_t), se_c)
    live = se > 1e-14 * max(1.0, float(np.abs(mean).max()))
    ess = float(np.min(var[live] / se[live] ** 2)) if live.any() else float(C * n)
    rhat = float("nan")
    if C > 1 and n > 1:
        W = S.var(axis=1, ddof=1).mean(axis=0)
        Bv = n * cm.var(axis=0, ddof=1)
        ok = W > 1e-300
        if ok.any():
            rhat = float(np.sqrt(((n - 1) / n * W[ok] + Bv[ok] / n) / W[ok]).max())
        else:
            rhat = 1.0
    return mean, se, min(ess, float(C * n)), rhat


def batch_means(S):
    """Mean, per-coordinate standard error and smallest effective sample size of chains S (see chain_summary)."""
    mean, se, ess, _ = chain_summary(S)
    return mean, se, ess


# ---------------------------------------------------------------------------------------------
# public functions
# ---------------------------------------------------------------------------------------------
def _exact_result(K, x, measure, method, t0, note=""):
    x = np.asarray(x, dtype=float).reshape(K.shape)
    return MeasureResult(point=x, measure=measure, method=method, exact=True, std_error=np.zeros(K.shape),
                         ess=float("inf"), samples=0, seconds=time.perf_counter() - t0, note=note)


def centroid(K, measure: str = "volume", *, details: bool = False, rng=None, samples: int | None = None,
             exact: bool | None = None, exact_max_dim: int = EXACT_MAX_DIM, chains=None, burn_in=None, thin=None):
    """Centroid of K under ``measure``: exact where known, else estimated.

    Parameters
    ----------
    measure : "volume" | "vertices" | "directions"
    details : return a :class:`MeasureResult` (point, method, exact, std_error, ess, ...)
    rng : Generator or int seed for estimates (None: seed 0, reproducible)
    samples : number of draws for an estimate (default: 4000 for volume; for directions 100000 when the
        vertices are enumerated (each draw is then a scan), else 1000 with a native LMO and 400 with a
        generic one, since each draw is then an LP or conic solve)
    exact : True to refuse estimates (raise instead), False to force an estimate, None for the best available
    exact_max_dim : largest affine-hull dimension for vertex enumeration / triangulation
    chains, burn_in, thin : hit-and-run settings (see the module docstring)

    Complexity: O(1) closed forms; O(#facets m^3) triangulation; estimates
    O(samples * thin * rows * m) for polytopes.

    >>> import setkit
    >>> setkit.compile({"kind": "simplex", "dim": 4}).centroid().tolist()
    [0.25, 0.25, 0.25, 0.25]
    >>> r = setkit.compile({"kind": "box", "dim": 2, "lower": 0, "upper": 1}).centroid(details=True)
    >>> r.method, r.exact, r.point.tolist()
    ('closed form', True, [0.5, 0.5])
    """
    _check_measure(K, measure, "centroid")
    t0 = time.perf_counter()
    node = K.node
    if exact is not False:
        hook = _hook(node, "exact_centroid")
        x = hook(measure) if hook is not None else None
        if x is not None:
            r = _exact_result(K, x, measure, "closed form", t0)
            return r if details else r.point
        if measure in ("volume", "vertices"):
            P = reduced(K)
            if P is not None and not P.bounded and measure == "volume":
                raise UnsupportedOperationError(
                    f"centroid(measure='volume') on {node.label}: the set is unbounded, so it has no uniform "
                    f"distribution; bound it (e.g. intersect it with a box).")
            if _reduced_dim_ok(P, exact_max_dim):
                V = polytope_vertices(P, node.label)
                if V.shape[0] <= MAX_VERTICES:
                    if measure == "vertices":
                        x = P.to_x(V).mean(axis=0)
                        r = _exact_result(K, x, measure, "vertex enumeration", t0,
                                          f"{V.shape[0]} vertices in an affine hull of dimension {P.m}")
                    else:
                        x = P.to_x(simplex_volume_centroid(V)[None, :])[0]
                        r = _exact_result(K, x, measure, "triangulation", t0,
                                          f"{V.shape[0]} vertices, affine hull of dimension {P.m}")
                    return r if details else r.point
        if measure == "directions":
            P = reduced(K)
            if P is not None and P.bounded and P.m <= 2:
                w, V = normal_cone_weights(polytope_vertices(P, node.label))
                x = P.to_x((w @ V)[None, :])[0]
                r = _exact_result(K, x, measure, "normal-cone angles", t0,
                                  f"{V.shape[0]} vertices, affine hull of dimension {P.m}")
                return r if details else r.point
    if measure == "vertices":
        raise UnsupportedOperationError(_no_vertex_reason(K, exact_max_dim))
    if exact:
        raise UnsupportedOperationError(
            f"centroid(measure={measure!r}) on {node.label}: no exact method is known for this set "
            f"(no closed form, and it is not a polytope of affine dimension <= {exact_max_dim}); "
            f"call it with exact=None to get an estimate with its standard error.")
    g = as_generator(rng, 0)
    samples_given = samples
    if samples is None:
        samples = 4000 if measure == "volume" else (1000 if K.routes()["lmo"].provider == "native" else 400)
    samples = int(samples)
    if samples < 2:
        raise InputError(f"centroid on {node.label}: samples must be at least 2; got {samples}.")
    if measure == "directions":
        Vx = _enumerated_vertices(K, exact_max_dim)
        if Vx is not None:
            if samples_given is None:
                samples = 100_000
            X = _vertex_scan_draws(Vx, samples, g)
            method, note = "Monte Carlo over enumerated vertices", (
                f"iid Gaussian directions, best of {Vx.shape[0]} enumerated vertices by a scan")
        else:
            X = _direction_draws(K, samples, g)
            method, note = "Monte Carlo over LMO", "iid Gaussian directions"
        mean = X.mean(axis=0)
        se = X.std(axis=0, ddof=1) / math.sqrt(samples)
        r = MeasureResult(point=mean.reshape(K.shape), measure=measure, method=method,
                          exact=False, std_error=se.reshape(K.shape), ess=float(samples), samples=samples,
                          seconds=time.perf_counter() - t0, note=note)
        return r if details else r.point
    S = hit_and_run(K, samples, g, chains=chains, burn_in=burn_in, thin=thin)
    mean, se, ess, rhat = chain_summary(S)
    how = "chord from the constraints" if reduced(K) is not None else "membership chord with shrinkage"
    if not rhat <= RHAT_WARN or ess < ESS_WARN:
        warnings.warn(AccuracyWarning(
            f"centroid(measure='volume') on {node.label}: the hit-and-run chains mix slowly (R-hat {rhat:.3f}, "
            f"effective sample size {ess:.0f} of {S.shape[0] * S.shape[1]}); the standard error may be "
            f"understated - pass a larger burn_in, thin or samples."), stacklevel=3)
    r = MeasureResult(point=mean.reshape(K.shape), measure=measure, method="hit-and-run", exact=False,
                      std_error=se.reshape(K.shape), ess=ess, samples=S.shape[0] * S.shape[1],
                      seconds=time.perf_counter() - t0, rhat=rhat,
                      note=f"{S.shape[0]} chains, {how}; standard error: the largest of batch means, "
                           f"autocorrelation time and spread of chain means")
    return r if details else r.point


def _no_vertex_reason(K, exact_max_dim):
    node = K.node
    P = None
    try:
        P = reduced(K)
    except Exception:  # pragma: no cover - reported below
        P = None
    if P is None:
        why = ("the set is not given as a polytope without auxiliary variables and its family does not "
               "describe its extreme points")
    elif not P.bounded:
        why = "the set is unbounded"
    else:
        why = (f"its affine hull has dimension {P.m} > {exact_max_dim}, too many vertices to enumerate, and no "
               f"random walk gives an unbiased uniform draw over extreme points")
    return (f"centroid/sample(measure='vertices') on {node.label}: no exact answer and no honest estimate, "
            f"because {why}. measure='directions' (LMO of a Gaussian direction, also a law on extreme "
            f"points) or measure='volume' can be estimated with a standard error.")


def _enumerated_vertices(K, exact_max_dim):
    """The vertices (in x) of a small polytope whose vertices can be enumerated, else None."""
    try:
        P = reduced(K)
    except SolveError:
        return None
    if not _reduced_dim_ok(P, exact_max_dim):
        return None
    V = polytope_vertices(P, K.node.label)
    if V.shape[0] > MAX_VERTICES:
        return None
    return P.to_x(V)


def _vertex_scan_draws(Vx, k, g, chunk=20_000):
    """lmo(g) for k Gaussian directions g by scanning the vertex list Vx (exact law of lmo(g))."""
    d = Vx.shape[1]
    out = np.empty((k, d))
    for a in range(0, k, chunk):
        b = min(k, a + chunk)
        Gd = g.standard_normal((b - a, d))
        out[a:b] = Vx[np.argmin(Gd @ Vx.T, axis=1)]
    return out


def _direction_draws(K, k, g):
    Gd = g.standard_normal((k, K.dim))
    try:
        X = K.lmo(Gd.reshape((k,) + K.shape))
    except UnboundedDirectionError as exc:
        raise UnsupportedOperationError(
            f"measure='directions' on {K.node.label}: the set is unbounded along some Gaussian directions "
            f"({exc}); bound the set (e.g. intersect it with a box).") from None
    return np.asarray(X, dtype=float).reshape(k, K.dim)


def sample(K, k: int, measure: str = "volume", rng=None, *, chains=None, burn_in=None, thin=None,
           exact_max_dim: int = EXACT_MAX_DIM):
    """k points of K drawn from ``measure``; shape (k, *K.shape).

    Exact samplers come from the family (``exact_sample``) or, for
    ``vertices`` of small polytopes, a uniform choice among the enumerated
    vertices; ``directions`` draws lmo(g) for iid Gaussian g (exact by
    definition); ``volume`` otherwise runs hit-and-run (approximate: states of a
    Markov chain after ``burn_in`` steps, one kept every ``thin`` steps, chains
    interleaved so that consecutive rows come from different chains).

    >>> import setkit
    >>> X = setkit.compile({"kind": "simplex", "dim": 3}).sample(5, rng=1)
    >>> X.shape, bool(abs(X.sum(axis=1) - 1).max() < 1e-12)
    ((5, 3), True)
    """
    _check_measure(K, measure, "sample")
    if isinstance(k, bool) or not isinstance(k, (int, np.integer)) or k < 0:
        raise InputError(f"sample on {K.node.label}: k must be an int >= 0; got {k!r}.")
    k = int(k)
    g = as_generator(rng)
    out_shape = (k,) + K.shape
    if k == 0:
        return np.zeros(out_shape)
    hook = _hook(K.node, "exact_sample")
    X = hook(k, measure, g) if hook is not None else None
    if X is not None:
        return np.asarray(X, dtype=float).reshape(out_shape)
    if measure == "directions":
        Vx = _enumerated_vertices(K, exact_max_dim)
        if Vx is not None:
            return _vertex_scan_draws(Vx, k, g).reshape(out_shape)
        return _direction_draws(K, k, g).reshape(out_shape)
    if measure == "vertices":
        P = reduced(K)
        if _reduced_dim_ok(P, exact_max_dim):
            V = polytope_vertices(P, K.node.label)
            return P.to_x(V[g.integers(0, V.shape[0], size=k)]).reshape(out_shape)
        raise UnsupportedOperationError(_no_vertex_reason(K, exact_max_dim))
    S = hit_and_run(K, k, g, chains=chains, burn_in=burn_in, thin=thin)
    C, per, d = S.shape
    return S.transpose(1, 0, 2).reshape(C * per, d)[:k].reshape(out_shape)
