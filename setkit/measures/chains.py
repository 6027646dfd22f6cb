"""Hit-and-run for the uniform (volume) distribution of a bounded convex set.

Chains start at dispersed points: half-way between the Chebyshev center (largest inscribed ball,
one LP) of the reduced polytope and vertices for random directions (one LP per chain), or half-way
between the mean of LMO answers and some of them for non-polyhedral sets, so that chains which have
not forgotten their starts disagree visibly (R-hat, see :mod:`setkit.measures.diagnostics`). Each
step draws a direction from a fixed centrally symmetric law N(0, S) and moves to a uniform point of
the chord (polytopes: chord ends from the constraints) or to a draw of Neal's shrinkage on the chord
(other sets: a membership oracle, the chord bracketed by the support function or the bounding box);
both leave the uniform distribution invariant. S rounds elongated sets: for polytopes the inverse
Dikin matrix of the constraints at the Chebyshev center, for other sets the covariance of the LMO
answers used to find the affine hull. Defaults: ``chains = 8``, ``burn_in = 200 + 50 * m`` steps,
``thin = max(1, m)`` steps between kept states, ``m`` the dimension of the affine hull.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..errors import InputError, UnboundedDirectionError, UnsupportedOperationError
from ..limits import check as _check_time
from .geometry import reduced, solve_lp


def unbounded_volume_error(asked: str, evidence: str = "") -> UnsupportedOperationError:
    """The refusal for the volume measure of an unbounded set: ``asked`` names the request and the
    set (``"centroid(measure='volume') on box"``), ``evidence`` how unboundedness showed."""
    because = f" ({evidence})" if evidence else ""
    return UnsupportedOperationError(
        f"{asked}: the set is unbounded{because}, so it has no uniform (volume) distribution; bound it "
        f"(e.g. intersect it with a box).")


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
    asked = f"hit-and-run ({C} chains, {burn_in} burn-in steps, {n_keep} kept states each thinned by {thin})"
    for i in range(burn_in):
        _check_time(asked, lambda: f"burn-in step {i} of {burn_in}: no state kept yet")
        T = step(T, L, rng)
    out = np.empty((C, n_keep, m))
    for j in range(n_keep):
        _check_time(asked, lambda: f"{j * C} of {n_keep * C} states kept (an estimate from them would have a "
                                   f"standard error of roughly 1/sqrt({max(j * C, 1)}) of the spread)")
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


def _polytope_step(P, K):
    """Hit-and-run step on a reduced polytope: a uniform point of the chord cut out by the rows."""
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
            raise unbounded_volume_error(f"hit-and-run on {K.node.label}", "a chord has an infinite end")
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
        raise unbounded_volume_error(f"hit-and-run on {K.node.label}", str(exc)) from None
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
            raise unbounded_volume_error(f"hit-and-run on {K.node.label}")

        def starts(C, g):
            # half-way from the Chebyshev center to vertices of random directions (one LP each)
            out = np.repeat(P.center[None, :], C, axis=0)
            for i in range(C):
                _check_time(f"hit-and-run starts ({C} LPs)", f"{i} of {C} starts found")
                res = solve_lp(g.standard_normal(P.m), A_ub=P.M, b_ub=P.q, bounds=[(None, None)] * P.m)
                if res.status == 0:
                    out[i] = 0.5 * (P.center + res.x)
            return out
        return _polytope_step(P, K), starts, P.to_x, P.m, _dikin_factor(P)
    frame = _membership_frame(K, rng)

    def starts(C, g):
        # half-way from the mean of the LMO answers (relative interior) to some of them
        if frame.T.shape[0] == 0:
            return np.zeros((C, frame.N.shape[1]))
        return 0.5 * frame.T[g.integers(0, frame.T.shape[0], size=C)]
    return (_membership_step(K, frame), starts, (lambda T: frame.x0 + T @ frame.N.T),
            frame.N.shape[1], frame.L)


def hit_and_run(K, n, rng, chains=None, burn_in=None, thin=None):
    """(C, n_per_chain, dim) hit-and-run states of the uniform distribution on K.

    ``n`` states in all (rounded up to a multiple of ``chains``), kept every ``thin`` steps after
    ``burn_in`` steps, from ``chains`` dispersed starts. O(chains (burn_in + n_per_chain thin) rows m)
    for polytopes; for other sets each step costs a support call (or none, with a bounding box) and
    a few membership tests.

    >>> import numpy as np, setkit
    >>> K = setkit.compile({"kind": "simplex", "dim": 3, "mode": "at_most"})
    >>> S = hit_and_run(K, 40, np.random.default_rng(0), chains=4)
    >>> S.shape, bool(K.contains(S.reshape(-1, 3)).all())
    ((4, 10, 3), True)
    """
    step, start, to_x, m, L = _volume_chain_setup(K, rng)
    chains, burn_in, thin = _defaults(m, chains, burn_in, thin)
    per = max(1, -(-n // chains))
    if m == 0:
        return np.broadcast_to(to_x(np.zeros((1, 0))), (chains, per, K.dim)).copy()
    T0 = start(chains, rng)
    S = _run_chains(step, T0, per, burn_in, thin, rng, L)
    C = S.shape[0]
    return to_x(S.reshape(-1, m)).reshape(C, per, K.dim)
