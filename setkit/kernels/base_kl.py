"""KL (relative entropy) projection onto the base polytope of a submodular function, from its greedy LMO.

For F submodular with B(F) inside the nonnegative orthant and y > 0, the minimizer of
sum_i y_i g(x_i / y_i) over B(F) is the same point for every strictly convex g: it is the
lexicographically optimal base of B(F) with respect to the weights y (Fujishige 1980,
"Lexicographically optimal base of a polymatroid with respect to a weight vector"; from
memory). The reason is the optimality condition: x is optimal iff x is in B(F) and every
sublevel set {i : x_i / y_i <= c} is tight (x(S) = F(S)), a condition that does not involve g.
KL(x || y) = sum_i y_i g(x_i / y_i) with g(s) = s log s - s + 1, and g(s) = s^2 gives
sum_i x_i^2 / y_i. So

    argmin_{x in B(F)} KL(x || y)  =  sqrt(y) * (minimum-norm point of B(F) / sqrt(y)),

the minimum-norm point of a scaled copy of B(F), whose LMO is the greedy LMO on c / sqrt(y).
Wolfe's minimum-norm-point method (:mod:`setkit.kernels.minnorm`) finds it with a gap
certificate. Then the answer is polished on its ordered partition: the level sets A_1, A_2, ...
of log x - t (increasing) are the tight blocks, their masses F(S_j) - F(S_{j-1}) come from one
greedy call with costs constant on the blocks, and inside a block x = mass * softmax(t_A)
(computed from t itself, so log inputs of any size keep full relative accuracy). The polished
point replaces the minimum-norm point when the two agree (to 1e-6 relative) and its
KL certificate (the Bregman Frank-Wolfe gap, :func:`setkit.kernels.bregman.kl_certificate`)
is no larger. Rows whose certificate stays above ``1e-9 * max(1, F(V))`` raise SolveError.

Cost per row: the minimum-norm point (one LMO call and O(n k^2) work per major cycle, k the
corral size), then one sort and two LMO calls.
"""
from __future__ import annotations

import numpy as np

from ..errors import SolveError
from .bregman import NORMAL, kl_certificate
from .minnorm import project_by_min_norm_point

# log inputs are compressed to a spread of at most this (y ratios e^30 ~ 1e13) for the
# minimum-norm point; the polish and the certificate use the true inputs
KL_SPREAD = 30.0
BLOCK_RTOL = 1e-6            # level sets of log x - t closer than this are one block
CERT_RTOL = 1e-9             # accepted KL certificate, relative to max(1, F(V))


def _polish(t, x0, lmo_rows, tol):
    """The point with x0's ordered partition: blocks of log x0 - t, masses from one greedy call."""
    n = t.size
    g = np.log(np.maximum(x0, NORMAL)) - t
    order = np.argsort(g, kind="stable")
    gs = g[order]
    cut = np.flatnonzero(np.diff(gs) > tol) + 1
    label = np.empty(n)
    starts = np.r_[0, cut]
    ends = np.r_[cut, n]
    for j, (a, b) in enumerate(zip(starts, ends)):
        label[order[a:b]] = j
    greedy = lmo_rows(label[None, :])[0]             # vertex of the chain S_1 < S_2 < ... (blocks by cost)
    x = np.empty(n)
    for a, b in zip(starts, ends):
        idx = order[a:b]
        mass = float(greedy[idx].sum())
        tb = t[idx]
        e = np.exp(tb - tb.max())
        x[idx] = max(mass, 0.0) * e / e.sum()
    return x


def base_polytope_kl(T, lmo_rows, *, total, bound, label="set"):
    """KL projections of exp(T) onto a base polytope inside the nonnegative orthant, from its greedy LMO.

    Parameters
    ----------
    T : (b, n) log inputs t = log y.
    lmo_rows : callable, (b, n) directions -> (b, n) minimizing vertices (the greedy algorithm).
    total : F(V), the sum of every point of the set.
    bound : an upper bound on the coordinates of the vertices (the scale of the set).
    label : the set's label, for errors.

    Returns
    -------
    X, info : the projections and per-row status, iterations and backend text.

    Examples
    --------
    >>> import numpy as np
    >>> simplex_lmo = lambda C: np.eye(3)[np.argmin(C, axis=1)]        # B(F) for F(S) = min(|S|, 1)
    >>> X, _ = base_polytope_kl(np.log([[1.0, 2.0, 5.0]]), simplex_lmo, total=1.0, bound=1.0)
    >>> X.round(12).tolist()
    [[0.125, 0.25, 0.625]]
    """
    T = np.ascontiguousarray(T, dtype=float)
    b, n = T.shape
    X = np.empty_like(T)
    iters, texts = [], []
    accept = CERT_RTOL * max(1.0, abs(float(total)))
    for r in range(b):
        t = T[r]
        tc = np.maximum(t - t.max(), -KL_SPREAD)
        s = np.sqrt(np.exp(tc))

        def lmo_z(c, s=s):
            return lmo_rows((c / s)[None, :])[0] / s

        z, info = project_by_min_norm_point(np.zeros(n), lmo_z, scale=float(bound) / float(s.min()), label=label)
        x0 = np.maximum(s * z, 0.0)
        x1 = _polish(t, x0, lmo_rows, BLOCK_RTOL)
        c0, c1 = kl_certificate(np.stack([t, t]), np.stack([x0, x1]), lmo_rows)
        agree = np.abs(x1 - x0).max(initial=0.0) <= 1e-6 * max(1.0, float(bound))
        if agree and c1 <= max(c0, accept):
            x, c, how = x1, c1, "polished on its ordered partition"
        else:
            x, c, how = x0, c0, "minimum-norm point"
        if not c <= accept:
            raise SolveError(f"project_kl on {label}: the KL certificate of the answer is {c:.3g}, above the accepted "
                             f"{accept:.3g} (minimum-norm point: {info['iterations']} major cycles); the answer is "
                             f"not returned.", status="not_converged")
        X[r] = x
        iters.append(info["iterations"])
        texts.append(f"weighted min-norm point ({info['iterations']} major cycles), {how}; KL certificate {c:.3g}")
    return X, {"status": ["solved"] * b, "iterations": iters, "backend_status": texts}


def partition_kl_jvp(T, X, V, rel=BLOCK_RTOL):
    """Jacobian products (in log coordinates) of a KL projection onto a base polytope, from its partition.

    On each block A of the ordered partition (level sets of log x - t, values within ``rel``
    counting as equal) x_A = mass_A softmax(t_A) with a mass fixed by the block's tight sets, so
    dx_A = x_A * (v_A - <x_A, v_A> / mass_A): the softmax Jacobian per block (a symmetric
    matrix). Blocks of mass 0 have derivative 0. O(n log n) per row.

    >>> import numpy as np
    >>> partition_kl_jvp(np.log([[1.0, 3.0]]), np.array([[0.25, 0.75]]), np.array([[1.0, 0.0]])).tolist()
    [[0.1875, -0.1875]]
    """
    T = np.asarray(T, dtype=float)
    X = np.asarray(X, dtype=float)
    V = np.asarray(V, dtype=float)
    out = np.zeros_like(V)
    for r in range(T.shape[0]):
        x = X[r]
        g = np.log(np.maximum(x, NORMAL)) - T[r]
        order = np.argsort(g, kind="stable")
        cut = np.flatnonzero(np.diff(g[order]) > rel) + 1
        for idx in np.split(order, cut):
            mass = float(x[idx].sum())
            if mass > 0.0:
                xv = x[idx] * V[r, idx]
                out[r, idx] = xv - x[idx] * (xv.sum() / mass)
    return out
