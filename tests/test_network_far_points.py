"""Network projections (transport, birkhoff, flow) at magnitudes up to 1e300, certified exactly.

A point y of magnitude 1e300 has node potentials of that size while the answer sits at the data's
scale, so no float64 residual can certify it. The certificate here is exact: the KKT conditions
of min 0.5 ||x - y||^2 s.t. B x = s, lo <= x <= hi (x_e = clip(y_e - (p_tail - p_head), lo_e, hi_e)
with B x = s; sufficient for this strictly convex problem — common practice, e.g. Boyd and
Vandenberghe, Convex Optimization, 2004, sec. 5.5.3) are solved and checked in rational arithmetic
(Python's ``fractions``): from the edges the answer leaves strictly inside their bounds, the
potentials solve a Laplacian system exactly; then every free edge must land inside its bounds and
every edge at a bound must have its reduced value beyond that bound. The exact projection obtained
this way is compared with setkit's answer.
"""
from fractions import Fraction

import numpy as np
import pytest

import setkit
from setkit.errors import SolveError


def _solve_exact(A, b):
    """One solution of A z = b in rationals (Gauss-Jordan; free variables 0), or None if inconsistent."""
    A = [row[:] + [bi] for row, bi in zip(A, b)]
    n = len(A[0]) - 1
    piv_cols, r = [], 0
    for c in range(n):
        k = next((i for i in range(r, len(A)) if A[i][c] != 0), None)
        if k is None:
            continue
        A[r], A[k] = A[k], A[r]
        inv = 1 / A[r][c]
        A[r] = [v * inv for v in A[r]]
        for i in range(len(A)):
            if i != r and A[i][c] != 0:
                f = A[i][c]
                A[i] = [vi - f * vr for vi, vr in zip(A[i], A[r])]
        piv_cols.append(c)
        r += 1
    if any(all(v == 0 for v in row[:-1]) and row[-1] != 0 for row in A[r:]):
        return None
    z = [Fraction(0)] * n
    for i, c in enumerate(piv_cols):
        z[c] = A[i][-1]
    return z


def exact_projection_from_guess(g, y, x):
    """The exact projection of y onto the network g, from the free set of the float answer x
    (edges with lo + tol < x < hi - tol), or None when that free set does not satisfy the KKT
    conditions exactly."""
    F = lambda v: Fraction(float(v))      # noqa: E731 - exact value of a float64
    m, nn = g.n_edges, g.n_nodes
    tol = 1e-9 * g.scale()
    at_lo = x <= g.lo + tol
    at_hi = (x >= g.hi - tol) & ~at_lo
    free = ~at_lo & ~at_hi
    # balances: sum_out x - sum_in x = s, with x_e = y_e - p_t + p_h on free edges
    L = [[Fraction(0)] * nn for _ in range(nn)]
    rhs = [F(v) for v in g.supply]
    for e in range(m):
        t, h = int(g.tail[e]), int(g.head[e])
        if free[e]:
            ye = F(y[e])
            rhs[t] -= ye
            rhs[h] += ye
            # -(p_t - p_h) at t, +(p_t - p_h) at h
            L[t][t] -= 1
            L[t][h] += 1
            L[h][t] += 1
            L[h][h] -= 1
        else:
            xe = F(g.lo[e] if at_lo[e] else g.hi[e])
            rhs[t] -= xe
            rhs[h] += xe
    p = _solve_exact(L, rhs)
    if p is None:
        return None
    # p is fixed up to one constant per component of the free edges; the edges at a bound between
    # two components give difference constraints on those constants (o_u - o_v <= c), solved
    # exactly by Bellman-Ford from a virtual source (a negative cycle: no KKT point on this free set)
    comp = list(range(nn))

    def root(v):
        while comp[v] != v:
            v = comp[v]
        return v
    for e in np.flatnonzero(free):
        comp[root(int(g.tail[e]))] = root(int(g.head[e]))
    cons = []                                   # (u, v, c): o_u - o_v <= c
    for e in np.flatnonzero(~free):
        t, h = int(g.tail[e]), int(g.head[e])
        ct, ch = root(t), root(h)
        base = F(y[e]) - (p[t] - p[h])          # reduced value before the offsets: base - (o_ct - o_ch)
        if ct == ch:
            continue
        if at_lo[e]:
            cons.append((ch, ct, F(g.lo[e]) - base))      # base - o_ct + o_ch <= lo
        else:
            cons.append((ct, ch, base - F(g.hi[e])))      # base - o_ct + o_ch >= hi
    roots = sorted({root(v) for v in range(nn)})
    off = {r: Fraction(0) for r in roots}
    for _ in range(len(roots) + 1):
        changed = False
        for u, v, c in cons:
            if off[v] + c < off[u]:
                off[u] = off[v] + c
                changed = True
        if not changed:
            break
    else:
        return None
    p = [p[v] + off[root(v)] for v in range(nn)]
    out = []
    for e in range(m):
        t, h = int(g.tail[e]), int(g.head[e])
        red = F(y[e]) - (p[t] - p[h])
        lo, hi = g.lo[e], g.hi[e]
        if free[e]:
            if (np.isfinite(lo) and red < F(lo)) or (np.isfinite(hi) and red > F(hi)):
                return None
            out.append(red)
        elif at_lo[e]:
            if red > F(lo):
                return None
            out.append(F(lo))
        else:
            if red < F(hi):
                return None
            out.append(F(hi))
    return np.array([float(v) for v in out])


SETS = [
    {"kind": "transport", "rows": [1, 2, 4], "cols": [2, 1, 3, 1]},
    {"kind": "transport", "rows": [0, 3, 1], "cols": [0, 4]},
    {"kind": "birkhoff", "n": 4},
    {"kind": "flow", "nodes": 4, "edges": [[0, 1, 2], [1, 2, 2], [0, 2], [2, 3, 5, 1], [3, 0, 1]],
     "supply": {0: 2, 3: -2}},
]


@pytest.mark.parametrize("spec", SETS, ids=lambda s: s["kind"])
@pytest.mark.parametrize("mag", [1e100, 1e160, 1e250, 1e300])
def test_far_points_project_to_the_exact_kkt_point(spec, mag):
    # Before the overflow-safe kernel these raised "iteration limit" at every magnitude past ~1e154,
    # and points whose entries mix exponents were answered on the wrong face (cycles of y summing to
    # 1e189 taken as balanced). Every answer must be the exact projection; a point the method cannot
    # finish must raise SolveError (measured: none in 13 of the 16 cases; one Gaussian transport point
    # at 1e250 and the flow's points with mixed exponents at 1e160..1e300), never return another point.
    K = setkit.compile(spec)
    g = K.node.network()
    rng = np.random.default_rng(int(np.log10(mag)))
    answered = 0
    for k in range(6):
        y = rng.standard_normal(K.dim) * mag
        if k % 3 == 1:
            y *= 10.0 ** rng.integers(-300, 1, K.dim)        # entries of mixed exponents
        if k % 3 == 2:
            y *= rng.random(K.dim) < 0.5                      # exact zeros beside huge entries
        try:
            x = K.project(y.reshape(K.shape)).ravel()
        except SolveError as e:
            assert "did not converge" in str(e)
            continue
        answered += 1
        exact = exact_projection_from_guess(g, y, x)
        assert exact is not None, f"the answer's free set does not satisfy the KKT conditions (y = {y.tolist()})"
        assert np.abs(x - exact).max() <= 1e-9 * g.scale()
        assert K.contains(x.reshape(K.shape))
    assert answered >= 4


def test_birkhoff_two_by_two_closed_form_at_1e300():
    # B_2 = {[[t, 1 - t], [1 - t, t]] : 0 <= t <= 1}; the projection has
    # t = clip(1/2 + (y00 + y11 - y01 - y10) / 4, 0, 1) (a one-dimensional projection, worked by hand)
    K = setkit.birkhoff(n=2)
    for y in ([[1e300, 0.0], [0.0, -1e300]], [[1e300, 1e300], [1e300, 1e300 + 2 ** 948]],
              [[3e299, 3e299 + 2 ** 944], [1.0, 2.5]]):
        y = np.array(y)
        t = float(Fraction(1, 2) + (sum(Fraction(v) for v in (y[0, 0], y[1, 1]))
                                    - sum(Fraction(v) for v in (y[0, 1], y[1, 0]))) / 4)
        t = min(1.0, max(0.0, t))
        assert np.allclose(K.project(y), [[t, 1 - t], [1 - t, t]], rtol=0, atol=1e-12)


def test_shift_invariance_of_transport_projection():
    # The projection onto {X >= 0, X 1 = r, X^T 1 = c} is unchanged by y -> y - a 1^T - 1 b^T, since
    # <X, a 1^T + 1 b^T> = a.r + b.c is constant on the set (so the objective changes by a constant);
    # shifts by integers keep the points exact in float64, compared with the cvxpy reference
    spec = {"kind": "transport", "rows": [1, 2, 4], "cols": [2, 1, 3, 1]}
    K = setkit.compile(spec)
    rng = np.random.default_rng(5)
    y0 = np.round(rng.standard_normal((3, 4)) * 4) / 4
    a = rng.integers(-2 ** 40, 2 ** 40, 3).astype(float)
    b = rng.integers(-2 ** 40, 2 ** 40, 4).astype(float)
    y = y0 + a[:, None] + b[None, :]
    assert np.array_equal(y - a[:, None] - b[None, :], y0)       # the shift is exact
    ref = K.with_backends(project="reference").project(y0)
    assert np.abs(K.project(y) - ref).max() <= 1e-6
    assert np.abs(K.project(y) - K.project(y0)).max() <= 1e-9


@pytest.mark.parametrize("spec", SETS + [
    # an uncapacitated cycle 0 -> 1 -> 2 -> 0: the LP max <y, x> is unbounded for some y (then no LP start)
    {"kind": "flow", "nodes": 3, "edges": [[0, 1], [1, 2], [2, 0], [0, 2, 3]], "supply": {0: 1, 2: -1}}],
    ids=lambda s: s["kind"])
def test_far_rows_started_from_lp_potentials_give_the_same_answers(spec, monkeypatch):
    # large networks start far rows from the duals of the LP max <y, x> (HiGHS through
    # scipy.optimize.linprog); forced here on small sets, the answers must be those of the plain start
    from setkit.kernels.network import NetworkProjector
    K = setkit.compile(spec)
    g = K.node.network()
    rng = np.random.default_rng(7)
    Y = np.concatenate([rng.standard_normal((2, K.dim)) * s for s in (1e6, 1e12, 1e16)])
    plain = NetworkProjector(g.tail, g.head, g.lo, g.hi, g.supply)
    X0, info0 = plain.project(Y, warm=False)
    monkeypatch.setattr(NetworkProjector, "lp_edges", 0)
    lp = NetworkProjector(g.tail, g.head, g.lo, g.hi, g.supply)
    X1, info1 = lp.project(Y, warm=False)
    assert np.array_equal(info0["status"] == 0, info1["status"] == 0)
    ok = info1["status"] == 0
    assert ok.sum() >= 5
    assert np.abs(X0[ok] - X1[ok]).max(initial=0.0) <= 1e-9 * g.scale()
    for y, x in zip(Y[ok], X1[ok]):
        exact = exact_projection_from_guess(g, y, x)
        assert exact is not None and np.abs(x - exact).max() <= 1e-9 * g.scale()
