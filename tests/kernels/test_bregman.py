"""KL (relative entropy) projections: the pure kernels of setkit.kernels.bregman against outside facts.

Every check names its source. The comparisons with the exponential-cone reference
are in tests/families/test_kl_families.py.
"""
import itertools

import numpy as np
import pytest
from scipy.optimize import minimize
from scipy.special import kl_div, softmax

from setkit.errors import InputError, SolveError
from setkit.kernels.bregman import (box_kl, budget_kl, kl_certificate, kl_divergence, permutahedron_kl,
                                    simplex_kl, sinkhorn_kl)

EXTREME = (700.0, 1e4)


def simplex_lmo(G, total=1.0):
    return total * np.eye(G.shape[1])[np.argmin(G, axis=1)]


def test_kl_divergence_matches_scipy_kl_div(rng):
    # scipy.special.kl_div(x, y) = x log(x / y) - x + y elementwise (the generalized relative entropy)
    T = rng.uniform(-5, 5, (4, 7))
    X = rng.uniform(0, 3, (4, 7))
    X[0, :3] = 0.0                                      # 0 log 0 = 0
    np.testing.assert_allclose(kl_divergence(T, X), kl_div(X, np.exp(T)).sum(axis=1), rtol=1e-13)
    assert np.all(kl_divergence(T, np.exp(T)) == 0.0)


# -- simplex ----------------------------------------------------------------------------------------
@pytest.mark.parametrize("spread", [1.0, 14.0, 700.0, 1e4])
def test_simplex_is_softmax(rng, spread):
    # closed form (common practice): the KL projection onto {x >= 0, sum x = s} is s * softmax(t);
    # scipy.special.softmax is the outside routine
    T = rng.uniform(-spread, spread, (5, 9))
    T[1] += 1e4                                          # a shift changes nothing
    for total in (1.0, 3.5, 1e-6):
        X = simplex_kl(T, total)
        np.testing.assert_allclose(X, total * softmax(T, axis=1), rtol=1e-12, atol=1e-300)
        np.testing.assert_allclose(X.sum(axis=1), total, rtol=1e-14)
        assert np.all(kl_certificate(T, X, lambda G: simplex_lmo(G, total)) <= 1e-12 * total * (1 + spread))


def test_simplex_at_most_keeps_small_inputs(rng):
    # {x >= 0, sum x <= s}: y itself when sum y <= s (y is then feasible and KL(y || y) = 0),
    # otherwise the normalization to sum s (the constraint is active)
    T = np.log(np.array([[0.1, 0.2, 0.3], [1.0, 2.0, 3.0]]))
    X = simplex_kl(T, 1.0, at_most=True)
    np.testing.assert_allclose(X[0], [0.1, 0.2, 0.3], rtol=1e-15)
    np.testing.assert_allclose(X[1], np.array([1.0, 2.0, 3.0]) / 6.0, rtol=1e-15)
    assert np.all(simplex_kl(np.full((2, 3), -1e4), 1.0, at_most=True) == 0.0)
    assert simplex_kl(np.zeros((0, 3)), 1.0).shape == (0, 3)   # empty batch
    assert np.all(simplex_kl(T, 0.0) == 0.0)                   # total 0: the set {0}


# -- box --------------------------------------------------------------------------------------------
def test_box_clips_and_refuses_overflow(rng):
    # separable: each coordinate minimizes x log(x/y) - x on [l, u], i.e. x = clip(y, l, u)
    lo = np.array([0.0, 0.5, 0.0, 2.0])
    hi = np.array([1.0, 0.5, np.inf, 3.0])
    T = np.array([[1e4, -1e4, 5.0, -700.0], [-1e4, 1e4, -1e4, 700.0]])
    X = box_kl(T, lo, hi)
    assert X.tolist() == [[1.0, 0.5, np.exp(5.0), 2.0], [0.0, 0.5, 0.0, 3.0]]
    with pytest.raises(InputError, match="coordinate 2 has no upper bound"):
        box_kl(np.array([[0.0, 0.0, 710.0, 0.0]]), lo, hi)


# -- budget (capped and weighted simplex) -------------------------------------------------------------
def capped_simplex_by_capping_rule(y, cap, total):
    """The capping loop of Warmuth & Kuzmin 2008 (Randomized online PCA algorithms with regret bounds
    that are logarithmic in the dimension, JMLR; from memory): rescale the uncapped entries to the
    remaining total, cap those that exceed the cap, repeat. Direct arithmetic on y (moderate y only)."""
    x = np.asarray(y, float).copy()
    capped = np.zeros(x.size, bool)
    while True:
        free = ~capped
        x[free] = y[free] * (total - cap * capped.sum()) / y[free].sum()
        over = free & (x > cap)
        if not over.any():
            break
        capped |= over
        x[capped] = cap
    return x


@pytest.mark.parametrize("n, cap", [(6, 0.3), (50, 0.05), (3, 0.4), (8, 1.0)])
def test_capped_simplex_matches_capping_rule(rng, n, cap):
    T = rng.uniform(-14, 14, (6, n))
    T[0, :3] = T[0, 0]                                   # ties
    X = budget_kl(T, np.zeros(n), np.full(n, cap), np.ones(n), 1.0)
    for t, x in zip(T, X):
        np.testing.assert_allclose(x, capped_simplex_by_capping_rule(np.exp(t), cap, 1.0), rtol=1e-12,
                                   atol=1e-15)
    # Bregman Frank-Wolfe gap: tiny at the exact answer
    def lmo(G):
        return np.array([capped_lmo(g, cap) for g in G])

    assert np.all(kl_certificate(T, X, lmo) <= 1e-12 * 15)


def capped_lmo(g, cap, total=1.0):
    """Greedy minimizer of <g, v> over {0 <= v <= cap, sum v = total}: fill the smallest g first."""
    v = np.zeros(g.size)
    left = total
    for i in np.argsort(g, kind="stable"):
        v[i] = min(cap, left)
        left -= v[i]
    return v


@pytest.mark.parametrize("spread", EXTREME)
def test_capped_simplex_rule_in_log_domain_at_extreme_inputs(rng, spread):
    # Warmuth & Kuzmin 2008 capping rule, read in the log domain: capped entries equal the cap, the
    # uncapped ones are proportional to y (log x - t is one constant) and not above the cap
    n, cap = 40, 0.04
    T = rng.uniform(-spread, spread, (5, n))
    T[1] = np.round(T[1] / spread * 3) * spread / 3      # many ties
    X = budget_kl(T, np.zeros(n), np.full(n, cap), np.ones(n), 1.0)
    np.testing.assert_allclose(X.sum(axis=1), 1.0, rtol=1e-13)
    for t, x in zip(T, X):
        capped = x >= cap * (1 - 1e-14)
        free = (~capped) & (x > 1e-290)
        if free.any():
            c = np.log(x[free]) - t[free]
            assert np.ptp(c) <= 1e-12 * spread
            # an uncapped coordinate would exceed the cap only if y_i e^c > cap
            assert np.all(t[capped] + c.mean() >= np.log(cap) - 1e-12 * spread)
        assert np.all(x <= cap * (1 + 1e-15))
    # shift invariance: y -> e^a y leaves the projection onto {sum x = 1} unchanged
    # (to rounding of the total: when the capped entries use up the total to the last ulp, the
    # rounding-level remainder may land on different tiny entries)
    np.testing.assert_allclose(budget_kl(T + 5e3, np.zeros(n), np.full(n, cap), np.ones(n), 1.0), X,
                               rtol=1e-9, atol=4e-16)


@pytest.mark.parametrize("spread", [1.0, 14.0, 700.0, 1e4])
@pytest.mark.parametrize("at_most", [False, True])
def test_weighted_budget_first_order_conditions(rng, spread, at_most):
    # KKT of min KL(x || y) s.t. lo <= x <= hi, <w, x> = total (<= total with lam >= 0):
    # x_i = clip(y_i exp(-lam w_i), lo_i, hi_i), i.e. (t_i - log x_i) / w_i = lam on free coordinates,
    # >= lam where x_i = hi_i and <= lam where x_i = lo_i (derivation: Boyd & Vandenberghe,
    # Convex Optimization, 2004, Sec. 5.5.3, KKT conditions)
    n = 30
    w = rng.uniform(0.2, 3.0, n)
    lo = np.where(rng.random(n) < 0.3, rng.uniform(0, 0.02, n), 0.0)
    hi = np.where(rng.random(n) < 0.6, rng.uniform(0.05, 0.3, n), np.inf)
    total = 1.5
    T = rng.uniform(-spread, spread, (4, n))
    X = budget_kl(T, lo, hi, w, total, at_most=at_most)
    s = X @ w
    if at_most:
        assert np.all(s <= total * (1 + 1e-12))
    else:
        np.testing.assert_allclose(s, total, rtol=1e-12)
    for t, x, sx in zip(T, X, s):
        assert np.all((x >= lo) & (x <= hi))
        free = (x > lo * (1 + 1e-12)) & (x < hi * (1 - 1e-12)) & (x > 1e-290)
        lam = (t[free] - np.log(x[free])) / w[free]
        if free.sum() >= 1:
            assert np.ptp(lam) <= 1e-11 * spread / w.min()
            L = lam.mean()
            atlo = (x <= lo) & ~free & (lo > 0)
            athi = (x >= hi) & ~free
            tolL = 1e-10 * spread / w.min()
            assert np.all((t[athi] - np.log(hi[athi])) / w[athi] >= L - tolL)
            assert np.all((t[atlo] - np.log(lo[atlo])) / w[atlo] <= L + tolL)
            if at_most:
                assert L >= -tolL
                if sx < total * (1 - 1e-12):
                    assert abs(L) <= tolL


def test_budget_edge_cases():
    n = 4
    lo = np.array([0.125, 0.0, 0.25, 0.0])              # dyadic: the sums below are exact
    hi = np.array([0.5, 0.375, 0.25, 1.0])
    T = np.array([[0.0, 1.0, 2.0, 3.0], [1e4, -1e4, 0.0, 700.0]])
    # total at the sum of lower bounds: the lower bounds; at the sum of upper bounds: the upper bounds
    np.testing.assert_array_equal(budget_kl(T, lo, hi, np.ones(n), lo.sum()), np.tile(lo, (2, 1)))
    np.testing.assert_array_equal(budget_kl(T, lo, hi, np.ones(n), hi.sum()), np.tile(hi, (2, 1)))
    assert budget_kl(np.zeros((0, n)), lo, hi, np.ones(n), 1.0).shape == (0, n)
    # at_most with small inputs: the clipped input is feasible and optimal
    X = budget_kl(np.log([[0.2, 0.1, 0.3, 0.1]]), lo, hi, np.ones(n), 2.0, at_most=True)
    np.testing.assert_allclose(X, [[0.2, 0.1, 0.25, 0.1]], rtol=1e-15)
    # a total rounding-close to the sum of lower bounds: the rest is split by the rule, no error
    X = budget_kl(T, lo, hi, np.ones(n), lo.sum() * (1 + 1e-16) + 1e-17)
    np.testing.assert_allclose(X, np.tile(lo, (2, 1)), atol=1e-16)
    # an unbounded coordinate whose answer overflows float64 is refused
    with pytest.raises(InputError, match="overflows"):
        budget_kl(np.array([[800.0, 0.0]]), np.zeros(2), np.full(2, np.inf), np.array([1e-10, 1.0]), 1e300,
                  at_most=True)


# -- permutahedron ------------------------------------------------------------------------------------
def brute_force_permutahedron_kl(t, w):
    """min KL(x || e^t) over conv{permutations of w} with SLSQP on barycentric weights (scipy.optimize.minimize)."""
    P = np.unique(np.array(list(itertools.permutations(w))), axis=0)     # the distinct vertices
    y = np.exp(t)
    k = P.shape[0]

    def f(lam):
        x = np.maximum(lam @ P, 1e-300)
        return float(np.sum(x * np.log(x / y) - x + y))

    def grad(lam):
        x = np.maximum(lam @ P, 1e-300)
        return P @ np.log(x / y)

    res = minimize(f, np.full(k, 1.0 / k), jac=grad, method="SLSQP", bounds=[(0, 1)] * k,
                   constraints=[{"type": "eq", "fun": lambda lam: lam.sum() - 1.0, "jac": lambda lam: np.ones(k)}],
                   options={"ftol": 1e-13, "maxiter": 500})
    return res.x @ P


@pytest.mark.parametrize("w", [[3.0, 2.0, 1.0], [4.0, 1.0, 1.0, 0.5], [2.0, 2.0, 0.0, 0.0], [1.0, 0.5]])
def test_small_permutahedra_by_brute_force(rng, w):
    w = np.array(w)
    n = w.size
    T = np.concatenate([rng.uniform(-3, 3, (2, n)), [np.zeros(n)], [np.log(np.sort(w)[::-1] + 1.0)]])
    X = permutahedron_kl(T, np.sort(w)[::-1])
    for t, x in zip(T, X):
        xb = brute_force_permutahedron_kl(t, w)
        kx, kb = kl_divergence(t[None], x[None])[0], kl_divergence(t[None], xb[None])[0]
        assert kx <= kb + 1e-9                     # at least as good as the brute force
        np.testing.assert_allclose(x, xb, atol=2e-4 * w.max())


def perm_lmo(G, w):
    order = np.argsort(G, axis=1, kind="stable")
    V = np.empty_like(G)
    np.put_along_axis(V, order, np.broadcast_to(np.sort(w)[::-1], G.shape), axis=1)
    return V


@pytest.mark.parametrize("spread", [1.0, 14.0, 700.0, 1e4])
def test_permutahedron_optimality_and_extremes(rng, spread):
    n = 60
    w = np.sort(rng.uniform(0, 2, n))[::-1]
    w[5:9] = w[5]
    w[-3:] = 0.0
    T = rng.uniform(-spread, spread, (4, n))
    T[1, :10] = T[1, 0]                               # tied inputs
    X = permutahedron_kl(T, w)
    # in P(w): sum equal and sorted partial sums majorized (Rado 1952; common practice)
    np.testing.assert_allclose(X.sum(axis=1), w.sum(), rtol=1e-13)
    ps = np.cumsum(-np.sort(-X, axis=1), axis=1)
    assert np.all(ps <= np.cumsum(w) * (1 + 1e-13) + 1e-300)
    g = np.log(np.maximum(X, 1e-320)) - T
    gs = np.abs(g * X).sum(axis=1) + 1.0
    assert np.all(kl_certificate(T, X, lambda G: perm_lmo(G, w)) <= 1e-13 * gs * n)
    # a shift of t leaves the answer unchanged (sum x is fixed on P(w))
    np.testing.assert_allclose(permutahedron_kl(T - 3e3, w), X, rtol=1e-9, atol=1e-300)


def test_permutahedron_far_apart_inputs_give_the_vertex():
    # gaps of 1e4 between sorted log inputs: every block is a singleton and x sorts w like y
    w = np.array([5.0, 3.0, 2.0, 0.5])
    t = np.array([[2e4, -1e4, 0.0, 1e4]])
    np.testing.assert_allclose(permutahedron_kl(t, w), [[5.0, 0.5, 2.0, 3.0]], rtol=1e-15)
    # only zero weights: the set {0}
    assert np.all(permutahedron_kl(np.zeros((2, 3)), np.zeros(3)) == 0.0)
    assert permutahedron_kl(np.zeros((0, 3)), np.ones(3)).shape == (0, 3)


# -- Sinkhorn ----------------------------------------------------------------------------------------
def is_diagonal_scaling(T, X, m, n, tol):
    """Sinkhorn 1964 (A relationship between arbitrary positive matrices and doubly stochastic
    matrices, Ann. Math. Statist.): the answer is D1 A D2, i.e. log X - log A = a_i + b_j."""
    M = (np.log(X) - T).reshape(m, n)
    R = M - M[:, :1] - M[:1, :] + M[0, 0]
    return np.abs(R).max() <= tol


def plain_sinkhorn(A, r, c, iters=20000):
    """A hand-written Sinkhorn-Knopp scaling on A itself (not the log domain), for moderate A."""
    u = np.ones(A.shape[0])
    v = np.ones(A.shape[1])
    for _ in range(iters):
        u = r / (A @ v)
        v = c / (A.T @ u)
    return u[:, None] * A * v[None, :]


@pytest.mark.parametrize("spread", [1.0, 5.0, 14.0])
def test_birkhoff_is_diagonal_scaling(rng, spread):
    n = 5
    T = rng.uniform(-spread, spread, (3, n * n))
    X, info = sinkhorn_kl(T, np.ones(n), np.ones(n))
    assert info["status"] == ["solved"] * 3
    for t, x in zip(T, X):
        assert is_diagonal_scaling(t, x, n, n, 1e-9 * max(1.0, spread))
        M = x.reshape(n, n)
        assert np.abs(M.sum(axis=0) - 1).max() <= 1e-10 and np.abs(M.sum(axis=1) - 1).max() <= 1e-10
    assert np.all(info["residual"] <= 1e-10)
    if spread <= 5:
        for t, x in zip(T, X):
            np.testing.assert_allclose(x.reshape(n, n), plain_sinkhorn(np.exp(t).reshape(n, n), np.ones(n),
                                                                        np.ones(n)), atol=1e-9)


def test_transport_extreme_row_and_column_shifts(rng):
    # log X - t = a_i + b_j is invariant: adding huge row and column shifts to t changes nothing
    m, n = 4, 6
    rows = np.array([1.0, 2.0, 0.0, 4.0])
    cols = np.array([2.0, 1.0, 0.5, 1.5, 0.0, 2.0])
    base = rng.uniform(-5, 5, (2, m * n))
    X0, _ = sinkhorn_kl(base, rows, cols)
    shift = (rng.uniform(-1e4, 1e4, m)[:, None] + rng.uniform(-1e4, 1e4, n)[None, :]).ravel()
    X1, _ = sinkhorn_kl(base + shift, rows, cols)
    np.testing.assert_allclose(X1, X0, atol=1e-8)
    Z = X0.reshape(2, m, n)
    assert np.all(Z[:, 2, :] == 0) and np.all(Z[:, :, 4] == 0)      # zero margins, zero lines


def test_sinkhorn_reports_non_convergence():
    # a nearly decomposable matrix with too few iterations and no Newton finish: a SolveError, never
    # a silent answer
    t = np.array([[0.0, -30.0, -30.0, 0.0]])
    with pytest.raises(SolveError, match="marginal residual"):
        sinkhorn_kl(t * 10, np.array([1.0, 1.0]), np.array([1.5, 0.5]), max_iterations=3, newton_after=3,
                    newton_size=0)


def test_sinkhorn_newton_finish_on_nearly_decomposable_matrix(rng):
    n = 6
    T = rng.uniform(-14, 14, (2, n * n))
    X, info = sinkhorn_kl(T, np.ones(n), np.ones(n), newton_after=20)
    for t, x in zip(T, X):
        assert is_diagonal_scaling(t, x, n, n, 1e-8)
    assert np.all(info["residual"] <= 1e-10)
