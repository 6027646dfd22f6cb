"""Spectral building blocks: batched SVD / symmetric eigendecomposition and extreme pairs.

Pure functions on stacks of matrices (no set objects). Every stack is first
divided by a power of two per matrix (exact in floating point) so that entries
as large as 1e300 or as small as 1e-300 neither overflow nor underflow inside
LAPACK; callers scale their radii by the same factor.

Extreme singular or eigen pairs of large matrices come from a block Lanczos method
(block 2, compiled, one thread: one fused pass over the matrix per step, Ritz pairs
from LAPACK's banded eigensolver) with full reorthogonalization (:func:`lanczos_top`), run first in single
precision (half the memory traffic per pass over the matrix; the answer's value
error is quadratic in its vector error, so a vector accurate to ~1e-6 already
gives a value accurate to ~1e-10 and better), started from a fixed seeded
vector so that answers are reproducible. Their accuracy is measured, not
assumed, in double precision on the returned pair:

* residual ``r = ||C^T u - s v||`` (with ``C v = s u`` by construction), or
  ``r = ||S v - l v||`` for a symmetric S;
* value error bound ``min(r, r^2 / (s - s2 - r2))``: the returned value s = u^T C v
  is at most sigma_1 (unit u, v) and at least sigma_1 minus this bound by the
  Kato-Temple inequality (Kato 1949, Temple 1928; from memory) applied to the
  Jordan-Wielandt matrix [[0, C], [C^T, 0]], where s2 and r2 are the second Ritz
  value and its residual, so that s2 + r2 bounds sigma_2 from above.

An answer is accepted when that bound is at most ``VALUE_RTOL`` times the
value scale (s, or the largest |Ritz value| for symmetric S); otherwise a
double-precision Lanczos run continues from the single-precision vectors, and
when that also fails the dense LAPACK routine answers. The one thing the
residuals cannot certify is that the Krylov space caught the top two singular
values (it does unless the start is orthogonal to them, an event of probability
zero): the bound is stated under that condition.
"""
from __future__ import annotations

import numpy as np
from numba import njit

from ..errors import SolveError

# matrices with min(rows, cols) up to this size are decomposed densely (LAPACK is faster there)
DENSE_MAX_SIDE = 120
# the bound on (sigma_1 - returned value) / value an iterative answer must meet (see the module notes)
VALUE_RTOL = 1e-9
# single-precision Lanczos stops at this residual relative to the value (about 10x float32's rounding)
SINGLE_RTOL = 1e-6
# largest Krylov basis before giving up (then double precision, then dense LAPACK)
KRYLOV_MAX_DIM = 400
# Krylov block size: two vectors per pass over the matrix cost barely more than one (the pass is
# memory-bound) and cut the passes a nearly tied top pair needs (62 -> 44 on 2000 x 2000 noise)
BLOCK = 2
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


@njit(cache=True, fastmath=True)
def _gram_rows(A, X, out, s):
    """out[k] = A^T (A X[k]) for every row k of X (b, n), in one pass over the rows of A (m, n).

    Each row a_i of A is read once and used twice while it sits in cache (s_k = a_i . x_k, then
    out_k += s_k a_i): half the memory traffic of A @ X followed by A^T @ (...), and one thread
    (no BLAS thread hand-offs, which cost a scheduler quantum each on a loaded machine). O(b m n)."""
    m, n = A.shape
    b = X.shape[0]
    out[:, :] = 0.0
    for i in range(m):
        for k in range(b):
            acc = A[i, 0] - A[i, 0]          # a zero of A's dtype (A is finite)
            for j in range(n):
                acc += A[i, j] * X[k, j]
            s[k] = acc
        for k in range(b):
            sk = s[k]
            for j in range(n):
                out[k, j] += sk * A[i, j]


@njit(cache=True, fastmath=True)
def _sym_rows(S, X, out, s):
    """out[k] = S X[k] for every row k of X (b, n), S symmetric (n, n), in one pass over S. O(b n^2)."""
    n = S.shape[0]
    b = X.shape[0]
    for i in range(n):
        for k in range(b):
            acc = S[i, 0] - S[i, 0]
            for j in range(n):
                acc += S[i, j] * X[k, j]
            out[k, i] = acc


@njit(cache=True, fastmath=True)
def _sweep(Q, k, W, r, col, first):
    """w_r -= sum_j (q_j . w_r) q_j over the rows j < k of Q; the coefficients go to col[:, r] when first."""
    n = W.shape[1]
    for j in range(k):
        c = 0.0
        for t in range(n):
            c += np.float64(Q[j, t]) * np.float64(W[r, t])
        if first:
            col[j, r] = c
        for t in range(n):
            W[r, t] -= c * Q[j, t]


@njit(cache=True, fastmath=True)
def _row_norm(W, r):
    acc = 0.0
    for t in range(W.shape[1]):
        acc += np.float64(W[r, t]) * np.float64(W[r, t])
    return np.sqrt(acc)


@njit(cache=True, fastmath=True)
def _extend_basis(Q, k, W, col, R):
    """Turn the new block W (b, n) into b rows orthonormal to Q[:k] and to each other, in place.

    Gram-Schmidt against Q[:k] twice (col[j, r] = the first sweep's q_j . w_r: the new block column
    of T), then modified Gram-Schmidt within the block, twice, with w_r = sum_{l <= r} R[l, r] q_l.
    A row that lost more than half its length is orthogonalized again after normalizing (its
    rounding error is then no longer small next to it); a row that vanishes (the Krylov space is
    invariant) is replaced by a coordinate vector orthogonalized the same way, R[r, r] staying its
    true tiny length, so that the block Lanczos relation keeps its residual term. O((k + b) b n).
    """
    b, n = W.shape
    for r in range(b):
        before = _row_norm(W, r)
        _sweep(Q, k, W, r, col, True)
        _sweep(Q, k, W, r, col, False)
        for sweep in range(2):
            for j in range(r):
                c = 0.0
                for t in range(n):
                    c += np.float64(W[j, t]) * np.float64(W[r, t])
                R[j, r] += c
                for t in range(n):
                    W[r, t] -= c * W[j, t]
        nrm = _row_norm(W, r)
        R[r, r] = nrm
        if nrm > 0.0:
            for t in range(n):
                W[r, t] = W[r, t] / nrm
        if nrm > 0.5 * before:
            continue
        for attempt in range(n):
            for sweep in range(2):
                _sweep(Q, k, W, r, col, False)
                _sweep(W, r, W, r, col, False)
            nn = _row_norm(W, r)
            if nn > 0.5:
                for t in range(n):
                    W[r, t] = W[r, t] / nn
                break
            for t in range(n):
                W[r, t] = 0.0
            W[r, (k + r + attempt) % n] = 1.0


def _off_band(T, b):
    """T with its band (entries at most b from the diagonal) zeroed."""
    return np.tril(T, -(b + 1)) + np.triu(T, b + 1)


def _band_top(T, b):
    """(two largest eigenvalues descending, their eigenvectors (k, 2), max |eigenvalue|) of the band of T.

    Block Lanczos makes T = Q^T M Q banded (half-bandwidth b) up to rounding; LAPACK's banded
    solver (dsbevx via scipy.linalg.eig_banded) needs no multithreaded BLAS call, so a loaded
    machine does not stall it, unlike the dense eigh. The caller's residuals include the entries
    outside the band exactly: for a Ritz pair (l, g) of the band, ||M Q g - l Q g||^2 =
    ||(T - band(T)) g||^2 + ||R g_last||^2. O(k^2 b)."""
    import scipy.linalg as sl
    k = T.shape[0]
    top = min(2, k)
    if k <= 2 * b + 2:
        lam, G = np.linalg.eigh(T)
        return lam[::-1][:top], G[:, ::-1][:, :top], float(max(abs(lam[0]), abs(lam[-1])))
    ab = np.zeros((b + 1, k))
    for d in range(b + 1):
        ab[d, :k - d] = np.diagonal(T, -d)
    lam, G = sl.eig_banded(ab, lower=True, select="i", select_range=(k - top, k - 1))
    low = sl.eig_banded(ab, lower=True, select="i", select_range=(0, 0), eigvals_only=True)
    return lam[::-1], G[:, ::-1], float(max(abs(low[0]), abs(lam[-1])))


def lanczos_top(apply, n, start, rtol, max_dim=None):
    """Two largest eigenpairs of a symmetric operator by block Lanczos with full reorthogonalization.

    ``apply(X, out)`` writes M x_k into out[k] for the rows x_k of a (b, n) block, in the dtype of
    ``start`` (n, b), whose columns span the first block. The basis is kept as rows; each step
    orthogonalizes the new block twice against the whole basis (compiled Gram-Schmidt, one thread),
    so the projected matrix T = Q^T M Q is exact to rounding; the residual of a Ritz pair
    (l, Q g) is ||R g_last|| with R from the QR factor of the next block (the block Lanczos
    relation M Q = Q T + W E^T). Stops when the top residual is at most ``rtol`` times
    max|Ritz value| or the basis reaches ``max_dim`` (or n) vectors.

    Returns (ritz values (2,) descending, Ritz vectors (n, 2), residuals (2,), basis size).
    O(dim / b passes of M + n dim^2).
    """
    dtype = start.dtype
    max_dim = min(n, max_dim or KRYLOV_MAX_DIM)
    b = start.shape[1]
    Q = np.zeros((max_dim + b, n), dtype=dtype)
    Q[:b] = start.T
    _extend_basis(Q, 0, Q[:b], np.zeros((0, b)), np.zeros((b, b)))
    Z = np.empty((b, n), dtype=dtype)
    s = np.empty(b, dtype=dtype)
    T = np.zeros((0, 0))
    k = b
    while True:
        apply(Q[k - b:k], Z, s)
        col = np.zeros((k, b))
        R = np.zeros((b, b))
        _extend_basis(Q, k, Z, col, R)
        Tn = np.zeros((k, k))
        Tn[:k - b, :k - b] = T
        Tn[:, k - b:] = col
        Tn[k - b:, :] = col.T
        Tn[k - b:, k - b:] = 0.5 * (col[k - b:] + col[k - b:].T)
        T = Tn
        lam2, G2, scale = _band_top(T, b)
        top = lam2.size
        # residual of (l, Q g) for M: ||Q (T g - l g)|| and ||W E^T g|| = ||R g_last|| are orthogonal parts;
        # T g - l g = (T - band(T)) g, the rounding-level entries the banded solver left out
        r = np.hypot(np.linalg.norm(R @ G2[k - b:], axis=0), np.linalg.norm(_off_band(T, b) @ G2, axis=0))
        if (k >= 2 and r[0] <= rtol * scale) or k + b > max_dim:
            if top < 2:
                lam2, r = np.append(lam2, -np.inf), np.append(r, np.inf)
                G2 = np.hstack([G2, G2])
            return lam2, Q[:k].T @ G2.astype(dtype), r, k
        Q[k:k + b] = Z
        k += b


def _value_bound(r, th, th2, r2):
    """min(r, r^2 / gap) with gap = th - th2 - r2 (Kato-Temple; r alone when the gap is not resolved)."""
    gap = th - th2 - r2
    return min(r, r * r / gap) if gap > 0.0 else r


def top_singular_triplet(C: np.ndarray):
    """(u, s, v, residual, method) with s = u^T C v, sigma_1(C) - s <= VALUE_RTOL s, for one matrix C (m, n).

    Dense LAPACK SVD when min(m, n) <= DENSE_MAX_SIDE (then s = sigma_1 to rounding); otherwise
    Lanczos on C^T C (or C C^T, the smaller side) in single precision, then measured in double
    precision: v unit, u = C v / ||C v||, s = ||C v||, residual ||C^T u - s v||, value error
    bound as in the module notes; if the bound exceeds VALUE_RTOL s, a double-precision Lanczos
    run from those vectors, then the dense SVD. ``method`` says which answered and the bound.
    C must be finite and scaled (entries at most 1 in size). O(passes m n) iterative.
    """
    m, n = C.shape
    fro = float(np.linalg.norm(C))
    if fro == 0.0:
        u = np.zeros(m)
        v = np.zeros(n)
        u[0], v[0] = 1.0, 1.0
        return u, 0.0, v, 0.0, "zero matrix"
    if min(m, n) > DENSE_MAX_SIDE:
        A = np.ascontiguousarray(C if n <= m else C.T)     # Krylov vectors on the smaller side
        side = A.shape[1]
        x0 = np.random.default_rng(_START_SEED).standard_normal((side, BLOCK))
        A32 = A.astype(np.float32)
        runs = (("single-precision Lanczos", lambda X, out, s: _gram_rows(A32, X, out, s), x0.astype(np.float32),
                 SINGLE_RTOL),
                ("double-precision Lanczos", lambda X, out, s: _gram_rows(A, X, out, s), None, VALUE_RTOL))
        for how, apply, start, rtol in runs:
            if start is None:
                start = V.astype(np.float64)   # noqa: F821 - the vectors of the single-precision run
            lam, V, r, dim = lanczos_top(apply, side, start, rtol)
            v = V[:, 0].astype(np.float64)
            v /= np.linalg.norm(v)
            Av = A @ v
            sv = float(np.linalg.norm(Av))
            if sv == 0.0:
                continue
            u = Av / sv
            res = float(np.linalg.norm(A.T @ u - sv * v))
            th2 = float(np.sqrt(max(lam[1], 0.0))) if np.isfinite(lam[1]) else 0.0
            # r2 is the eigen-residual of C^T C; /th2 turns it into the pair's; plus single-precision rounding
            r2 = (float(r[1]) / th2 if th2 > 0.0 else 0.0) + 1e-6 * sv
            bound = _value_bound(res, sv, th2, r2)
            if bound <= VALUE_RTOL * sv:
                if A is not C:
                    u, v = v, u
                return u, sv, v, res, f"{how} (basis {dim}), value error <= {bound / sv:.1e} relative"
    U, s, Vt = svd_stack(C[None])
    u, v = U[0, :, 0], Vt[0, 0]
    sv = float(s[0, 0])
    res = max(float(np.linalg.norm(C @ v - sv * u)), float(np.linalg.norm(C.T @ u - sv * v)))
    return u, sv, v, res, "lapack"


def extreme_eigenpair(S: np.ndarray, largest: bool):
    """(l, v, residual, method): the largest (or smallest) eigenvalue of the symmetric S and a unit eigenvector.

    Dense LAPACK (eigh) when n <= DENSE_MAX_SIDE; otherwise Lanczos on S (or -S) in single
    precision, measured in double precision: l = v^T S v, residual ||S v - l v||, accepted when
    the Kato-Temple bound min(r, r^2 / (|l - l2| - r2)) is at most VALUE_RTOL max|Ritz value|;
    else a double-precision Lanczos run, then dense. S must be finite and scaled. O(passes n^2).
    """
    n = S.shape[0]
    fro = float(np.linalg.norm(S))
    if fro == 0.0:
        v = np.zeros(n)
        v[0] = 1.0
        return 0.0, v, 0.0, "zero matrix"
    if n > DENSE_MAX_SIDE:
        sign = 1.0 if largest else -1.0
        M = np.ascontiguousarray(sign * S)
        M32 = M.astype(np.float32)
        x0 = np.random.default_rng(_START_SEED).standard_normal((n, BLOCK))
        runs = (("single-precision Lanczos", lambda X, out, s: _sym_rows(M32, X, out, s), x0.astype(np.float32),
                 SINGLE_RTOL),
                ("double-precision Lanczos", lambda X, out, s: _sym_rows(M, X, out, s), None, VALUE_RTOL))
        for how, apply, start, rtol in runs:
            if start is None:
                start = V.astype(np.float64)   # noqa: F821 - the vectors of the single-precision run
            lam, V, r, dim = lanczos_top(apply, n, start, rtol)
            v = V[:, 0].astype(np.float64)
            v /= np.linalg.norm(v)
            Mv = M @ v
            th = float(v @ Mv)
            res = float(np.linalg.norm(Mv - th * v))
            scale = max(abs(th), abs(float(lam[1])) if np.isfinite(lam[1]) else 0.0, res)
            th2 = float(lam[1]) if np.isfinite(lam[1]) else -np.inf
            bound = _value_bound(res, th, th2, float(r[1]) + 1e-6 * scale)
            if bound <= VALUE_RTOL * scale:
                return sign * th, v, res, f"{how} (basis {dim}), value error <= {bound / scale:.1e} of the spectral scale"
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


# -- derivatives of spectral maps -------------------------------------------------------------------
def _divided_differences(s, f, free, plus):
    """Matrix of (f_i - f_j)/(s_i - s_j) (plus=False) or (f_i + f_j)/(s_i + s_j) (plus=True), i != j.

    ``free`` marks the entries where f has slope 1 (f_i = s_i - c on the free block, or f_i = s_i):
    pairs of free entries get 1, pairs of fixed entries 0 (f constant there), so ties inside a
    block never divide by zero; mixed pairs are separated by the block's threshold and divide
    safely. For the plus form a zero denominator (two zero values) gets the mean slope.
    """
    d = free.astype(float)
    both = np.add.outer(d, d) / 2.0
    with np.errstate(divide="ignore", invalid="ignore"):
        if plus:
            den = np.add.outer(s, s)
            G = np.where(den > 0.0, np.add.outer(f, f) / np.where(den > 0.0, den, 1.0), both)
        else:
            den = np.subtract.outer(s, s)
            mixed = free[:, None] != free[None, :]
            G = np.where(mixed, np.subtract.outer(f, f) / np.where(mixed, den, 1.0), both)
    return G


def singular_map_jvp(U, s, Vt, f, free, diag_jvp, D):
    """Directional derivative of F(Y) = U diag(f(s)) V^T (a unitarily invariant map) along D.

    Y = U diag(s) V^T is a thin SVD (U m x k, Vt k x n, k = min(m, n)) and f acts on the
    vector of singular values with Jacobian ``diag_jvp`` (a -> J_f(s) a). With A = U^T D V,
    U^T dF V = Gm o sym(A) + Gp o skew(A) off the diagonal and J_f(s) diag(A) on it, where
    Gm_ij = (f_i - f_j)/(s_i - s_j) and Gp_ij = (f_i + f_j)/(s_i + s_j); the parts of D outside
    span(U) (m > n) or span(V) (m < n) are scaled by f_j / s_j. (The singular-value analogue of
    the Daleckii-Krein formula: Lewis and Sendov, "Nonsmooth analysis of singular values", 2005,
    and Candes, Sing-Long and Trzasko, "Unbiased risk estimates for singular value thresholding",
    2013; from memory.) The map is self-adjoint, so it is also the VJP. O(m n k).
    """
    m, n = D.shape
    V = Vt.T
    DV = D @ V
    A = U.T @ DV
    Gm = _divided_differences(s, f, free, plus=False)
    Gp = _divided_differences(s, f, free, plus=True)
    B = Gm * (0.5 * (A + A.T)) + Gp * (0.5 * (A - A.T))
    B[np.diag_indices_from(B)] = diag_jvp(np.diag(A).copy())
    out = (U @ B) @ Vt
    if m != n:
        with np.errstate(divide="ignore", invalid="ignore"):
            g = np.where(s > 0.0, f / np.where(s > 0.0, s, 1.0), free.astype(float))
        if m > n:
            out += ((DV - U @ A) * g) @ Vt
        else:
            out += (U * g) @ (U.T @ D - A @ Vt)
    return out


def eigen_map_jvp(V, lam, f, free, diag_jvp, dS):
    """Directional derivative of F(S) = V diag(f(lam)) V^T for symmetric S = V diag(lam) V^T along the symmetric dS.

    Daleckii-Krein: V^T dF V = G o (V^T dS V) off the diagonal, G_ij = (f_i - f_j)/(lam_i - lam_j),
    and J_f(lam) diag(V^T dS V) on it (Daleckii and Krein 1965; Lewis, "Derivatives of spectral
    functions", 1996; from memory). Self-adjoint. O(n^3).
    """
    B = V.T @ dS @ V
    G = _divided_differences(lam, f, free, plus=False)
    C = G * (0.5 * (B + B.T))
    C[np.diag_indices_from(C)] = diag_jvp(np.diag(B).copy())
    out = V @ C @ V.T
    return 0.5 * (out + out.T)


def support_block_jvp(free, active):
    """a -> J a for the projection onto {x >= 0, sum x = total} (or its l1-ball form) at its answer.

    With ``active`` the sum constraint is tight: J a = a - mean(a over the free block) on the free
    block and 0 elsewhere (the projector onto the face's tangent space); otherwise J a = a on the
    free block. O(k).
    """
    def jvp(a):
        out = np.where(free, a, 0.0)
        q = int(np.count_nonzero(free))
        if active and q:
            out[free] -= out[free].sum() / q
        return out
    return jvp
