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
is no larger. Rows whose log inputs spread over more than 30, or whose certificate is above
``1e-9 * max(1, F(V))`` (plus the rounding level of its terms, 1e-13 n sum |log x - t| x),
are solved by the decomposition algorithm (Fujishige 1980; Groenevelt 1991, from memory)
in the log domain, with the Euclidean minimum-norm point as its submodular minimization step;
a row still above the accepted certificate raises SolveError.

Cost per row: the minimum-norm point (one LMO call and O(n k^2) work per major cycle, k the
corral size), then one sort and two LMO calls; the decomposition: up to n - 1 minimum-norm
points on shrinking blocks.
"""
from __future__ import annotations

import numpy as np

from ..errors import SolveError
from .bregman import NORMAL, kl_certificate
from .minnorm import project_by_min_norm_point

# the weighted minimum-norm point serves log inputs spread over at most this (y ratios e^30 ~ 1e13);
# wider ones go to the decomposition algorithm
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


def kl_by_decomposition(t, lmo_rows, bound, label):
    """The KL projection by Fujishige's decomposition algorithm, every step in the log domain.

    A block A (with the elements ``before`` it already placed) gets the mass
    m = F(before + A) - F(before) and the candidate x_A = m softmax(t_A), the KL minimizer on the
    block's hyperplane. If x_A lies in the base polytope of the minor F_A(S) = F(before + S) -
    F(before), it is the answer on A; otherwise a minimizer S of F_A(S) - x_A(S) is tight at the
    optimum (the decomposition theorem), and A splits into S (first) and A - S. The minimizer is
    read from the Euclidean projection p of x_A onto B(F_A) (Fujishige's theorem: {p - x_A < 0}
    minimizes F_A - x_A), among the prefixes of the order of p - x_A, whose values are computed
    exactly by one greedy call. Every candidate lives on the scale of the masses, so log inputs of
    any spread keep their relative accuracy. At most n - 1 splits, one minimum-norm point each.
    """
    n = t.size
    x = np.empty(n)
    before = np.zeros(n, bool)
    stack = [(np.arange(n), before)]
    splits = 0
    while stack:
        A, before = stack.pop()
        c = np.where(before, 0.0, 2.0)
        c[A] = 1.0
        mass = max(float(lmo_rows(c[None, :])[0][A].sum()), 0.0)
        if A.size == 1 or mass == 0.0:
            x[A] = mass if A.size == 1 else 0.0
            continue
        tA = t[A]
        e = np.exp(tA - tA.max())
        xA = mass * e / e.sum()

        def lmo_A(cA, A=A, before=before):
            lo, hi = float(cA.min()), float(cA.max())
            full = np.where(before, lo - 1.0, hi + 1.0)
            full[A] = cA
            return lmo_rows(full[None, :])[0][A]

        try:
            pA, _ = project_by_min_norm_point(xA, lmo_A, scale=max(float(bound), mass), label=label)
        except SolveError:
            pA = lmo_A(-xA)          # still a useful order to scan; the prefix values below are exact
        u = pA - xA
        g = lmo_A(u)                 # greedy along increasing u: prefix sums are F_A(prefix)
        order = np.argsort(u, kind="stable")
        vals = np.cumsum(g[order] - xA[order])[:-1]
        k = int(np.argmin(vals)) if vals.size else 0
        if vals.size == 0 or vals[k] >= -1e-13 * max(1.0, mass) * A.size:
            x[A] = xA
            continue
        S = A[order[:k + 1]]
        R = A[order[k + 1:]]
        after = before.copy()
        after[S] = True
        stack.append((R, after))
        stack.append((S, before))
        splits += 1
    return x, splits


def _rounding_floor(t, x):
    """The rounding level of the KL certificate's terms: n eps-sized shares of sum |log x - t| x."""
    g = np.log(np.maximum(x, NORMAL)) - t
    return 1e-13 * t.size * float(np.abs(g * x).sum())


def base_polytope_kl(T, lmo_rows, *, total, bound, label="set"):
    """KL projections of exp(T) onto a base polytope inside the nonnegative orthant, from its greedy LMO.

    First the weighted minimum-norm point (log inputs spread over at most 30, else compressed)
    polished on its partition; when its KL certificate is above the accepted value, the
    decomposition algorithm (:func:`kl_by_decomposition`) in the log domain.

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
        c, x, how, it = np.inf, None, "", 0
        if t.max() - t.min() <= KL_SPREAD:
            s = np.sqrt(np.exp(t - t.max()))

            def lmo_z(cz, s=s):
                return lmo_rows((cz / s)[None, :])[0] / s

            try:
                z, info = project_by_min_norm_point(np.zeros(n), lmo_z, scale=float(bound) / float(s.min()), label=label)
                it = info["iterations"]
                x0 = np.maximum(s * z, 0.0)
                x1 = _polish(t, x0, lmo_rows, BLOCK_RTOL)
                c0, c1 = kl_certificate(np.stack([t, t]), np.stack([x0, x1]), lmo_rows)
                agree = np.abs(x1 - x0).max(initial=0.0) <= 1e-6 * max(1.0, float(bound))
                if agree and c1 <= max(c0, accept):
                    x, c, how = x1, c1, f"weighted min-norm point ({it} major cycles) polished on its ordered partition"
                else:
                    x, c, how = x0, c0, f"weighted min-norm point ({it} major cycles)"
            except SolveError:
                pass
        if x is not None and not c <= accept:
            c_ok = accept + _rounding_floor(t, x)
            if c <= c_ok:
                accept = c_ok
        if not c <= accept:
            x, splits = kl_by_decomposition(t, lmo_rows, bound, label)
            c = float(kl_certificate(t[None, :], x[None, :], lmo_rows)[0])
            how = f"decomposition algorithm ({splits} splits)"
            it = splits
            accept = max(accept, CERT_RTOL * max(1.0, abs(float(total))) + _rounding_floor(t, x))
        if not c <= accept:
            raise SolveError(f"project_kl on {label}: the KL certificate of the answer is {c:.3g}, above the accepted "
                             f"{accept:.3g} ({how}); the answer is not returned.", status="not_converged")
        X[r] = x
        accept = CERT_RTOL * max(1.0, abs(float(total)))
        iters.append(it)
        texts.append(f"{how}; KL certificate {c:.3g}")
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
