"""Spectral building blocks: batched SVD / symmetric eigendecomposition and extreme pairs.

Pure functions on stacks of matrices (no set objects). Every stack is first
divided by a power of two per matrix (exact in floating point) so that entries
as large as 1e300 or as small as 1e-300 neither overflow nor underflow inside
LAPACK; callers scale their radii by the same factor.

Extreme singular or eigen pairs of large matrices come from ARPACK (implicitly
restarted Lanczos, ``scipy.sparse.linalg.svds`` / ``eigsh``) started from a
fixed seeded vector, so answers are reproducible. Their accuracy is measured,
not assumed: the residuals ``||C v - s u||`` and ``||C^T u - s v||`` (or
``||S v - l v||``) must be at most ``RESIDUAL_RTOL`` times the matrix's
Frobenius norm; otherwise the dense LAPACK routine answers instead. Lanczos
from a random start finds the extreme pair unless the start is orthogonal to
it, an event of probability zero; that is the one thing the residual cannot
certify.
"""
from __future__ import annotations

import numpy as np

from ..errors import SolveError

# matrices with min(rows, cols) up to this size are decomposed densely (LAPACK is faster there)
DENSE_MAX_SIDE = 120
# accuracy asked of ARPACK, and the residual (relative to ||C||_F) an iterative answer must meet
ARPACK_TOL = 1e-12
RESIDUAL_RTOL = 1e-9
_START_SEED = 20240607


def pow2_scales(X: np.ndarray) -> np.ndarray:
    """Per-row powers of two t with max |X_i| / t in [0.5, 1) (1 for zero rows), O(b n)."""
    m = np.abs(X).max(axis=1) if X.shape[1] else np.zeros(X.shape[0])
    _, e = np.frexp(m)
    t = np.ldexp(1.0, e)
    t[m == 0.0] = 1.0
    return t


def _start(n):
    return np.random.default_rng(_START_SEED).standard_normal(n)


def svd_stack(M: np.ndarray, compute_uv: bool = True):
    """Thin SVD of a stack (b, m, n) by LAPACK gesdd, falling back to gesvd per matrix; SolveError if both fail."""
    try:
        return np.linalg.svd(M, full_matrices=False, compute_uv=compute_uv)
    except np.linalg.LinAlgError:
        pass
    import scipy.linalg as sl
    outs = []
    for A in M:
        try:
            outs.append(sl.svd(A, full_matrices=False, compute_uv=compute_uv, lapack_driver="gesvd"))
        except (np.linalg.LinAlgError, ValueError) as exc:
            raise SolveError(f"singular value decomposition did not converge (LAPACK gesdd and gesvd): {exc}",
                             status="no_convergence") from None
    if not compute_uv:
        return np.stack(outs)
    return tuple(np.stack([o[i] for o in outs]) for i in range(3))


def eigh_stack(S: np.ndarray, compute_v: bool = True):
    """Eigendecomposition of a stack of symmetric matrices (ascending eigenvalues); SolveError on failure."""
    try:
        return np.linalg.eigh(S) if compute_v else np.linalg.eigvalsh(S)
    except np.linalg.LinAlgError as exc:
        raise SolveError(f"symmetric eigendecomposition did not converge (LAPACK): {exc}",
                         status="no_convergence") from None


def top_singular_triplet(C: np.ndarray):
    """(u, s, v, residual, method) with s = ||C||_2 = u^T C v, for one matrix C (m, n).

    Dense LAPACK SVD when min(m, n) <= DENSE_MAX_SIDE; otherwise ARPACK on the
    top triplet (``svds(k=1)``), accepted when its measured residual
    max(||C v - s u||, ||C^T u - s v||) is at most RESIDUAL_RTOL ||C||_F, else
    the dense SVD. C must be finite and scaled (entries at most 1 in size).
    """
    m, n = C.shape
    fro = float(np.linalg.norm(C))
    if fro == 0.0:
        u = np.zeros(m)
        v = np.zeros(n)
        u[0], v[0] = 1.0, 1.0
        return u, 0.0, v, 0.0, "zero matrix"
    if min(m, n) > DENSE_MAX_SIDE:
        from scipy.sparse.linalg import svds, ArpackError, ArpackNoConvergence
        try:
            U, s, Vt = svds(C, k=1, tol=ARPACK_TOL, v0=_start(min(m, n)), which="LM", solver="arpack")
            u, v = U[:, 0], Vt[0]
            u = u / np.linalg.norm(u)
            v = v / np.linalg.norm(v)
            sv = float(u @ (C @ v))
            if sv < 0:
                u, sv = -u, -sv
            res = max(float(np.linalg.norm(C @ v - sv * u)), float(np.linalg.norm(C.T @ u - sv * v)))
            if res <= RESIDUAL_RTOL * fro:
                return u, sv, v, res, "arpack"
        except (ArpackError, ArpackNoConvergence, np.linalg.LinAlgError, ValueError):
            pass
    U, s, Vt = svd_stack(C[None])
    u, v = U[0, :, 0], Vt[0, 0]
    sv = float(s[0, 0])
    res = max(float(np.linalg.norm(C @ v - sv * u)), float(np.linalg.norm(C.T @ u - sv * v)))
    return u, sv, v, res, "lapack"


def extreme_eigenpair(S: np.ndarray, largest: bool):
    """(l, v, residual, method): the largest (or smallest) eigenvalue of the symmetric S and a unit eigenvector.

    Dense LAPACK (eigh) when n <= DENSE_MAX_SIDE; otherwise ARPACK (``eigsh(k=1)``, which 'LA' or 'SA'),
    accepted when ||S v - l v|| <= RESIDUAL_RTOL ||S||_F, else dense. S must be finite and scaled.
    """
    n = S.shape[0]
    fro = float(np.linalg.norm(S))
    if fro == 0.0:
        v = np.zeros(n)
        v[0] = 1.0
        return 0.0, v, 0.0, "zero matrix"
    if n > DENSE_MAX_SIDE:
        from scipy.sparse.linalg import eigsh, ArpackError, ArpackNoConvergence
        try:
            w, V = eigsh(S, k=1, which="LA" if largest else "SA", tol=ARPACK_TOL, v0=_start(n))
            v = V[:, 0] / np.linalg.norm(V[:, 0])
            lam = float(v @ (S @ v))
            res = float(np.linalg.norm(S @ v - lam * v))
            if res <= RESIDUAL_RTOL * fro:
                return lam, v, res, "arpack"
        except (ArpackError, ArpackNoConvergence, np.linalg.LinAlgError, ValueError):
            pass
    w, V = eigh_stack(S[None])
    j = -1 if largest else 0
    lam, v = float(w[0, j]), V[0, :, j]
    return lam, v, float(np.linalg.norm(S @ v - lam * v)), "lapack"


def simplex_sorted(v: np.ndarray, total: float) -> np.ndarray:
    """Projection of v (sorted nonincreasingly) onto {x >= 0, sum x = total}, accurate for any total.

    The support j is the sorted-prefix rule (Held, Wolfe and Crowder 1974); the kept entries are
    x_i = (total + sum_{l <= j} (v_i - v_l)) / j, summing differences instead of subtracting a
    threshold, so that a total far below the entries (say 1e-303 against 1) is not lost to
    rounding; a final rescale makes the sum exact to rounding. O(k + j^2), j the support size.
    """
    k = v.size
    out = np.zeros(k)
    if total <= 0.0 or k == 0:
        return out
    css = np.cumsum(v)
    idx = np.arange(1, k + 1)
    cond = v * idx > css - total
    j = int(np.flatnonzero(cond)[-1]) + 1 if cond.any() else 1
    head = v[:j]
    x = (total + (head[:, None] - head[None, :]).sum(axis=1)) / j
    x = np.maximum(x, 0.0)
    s = x.sum()
    if s > 0.0:
        x *= total / s
    out[:j] = x
    return out


def row_norms(V: np.ndarray) -> np.ndarray:
    """Euclidean norm of each row without overflow or underflow in the squares (power-of-two scaling), O(b n)."""
    if V.shape[0] == 0:
        return np.zeros(0)
    t = pow2_scales(V)
    return t * np.linalg.norm(V / t[:, None], axis=1)
