"""Native kernels at every magnitude: 10^k for k sampled in -300..300, ties, mixed scales, underflow.

Each answer is checked by conditions that do not use setkit's own code:

* exact references in rational arithmetic (``fractions.Fraction``: every float is an exact
  rational) for the simplex and the l1 ball (the sorted threshold of Held, Wolfe and Crowder,
  "Validation of subgradient optimization", 1974), the capped weighted simplex (the breakpoint
  search of the continuous quadratic knapsack; Kiwiel, "Breakpoint searching algorithms for the
  continuous quadratic knapsack problem", 2008) and the permutahedron (pool-adjacent-violators
  on y_sorted - w_sorted; the reduction is from memory, Negrinho and Martins, "Orbit regularization",
  2014); boxes and inf-balls by exact clipping; the l2 ball by Python's ``math.hypot``;
* hulls: in the hull by an LP (scipy.optimize.linprog, HiGHS) and the Frank-Wolfe gap over the
  listed points;
* network families: bounds exactly, node balances summed with ``math.fsum``, and at moderate
  magnitudes the Frank-Wolfe gap max_{z in K} <y - x, z - x> from an independent LP (linprog);
* batch equals one-by-one, idempotence, empty batches, and the issue-11 cases.
"""
from fractions import Fraction as Fr
import math

import numpy as np
import pytest
from scipy.optimize import linprog

import setkit
from setkit.errors import SolveError

RNG_SEED = 20260
# magnitudes: the edges and a seeded sample of the rest of -300..300
_r = np.random.default_rng(RNG_SEED)
MAGS = sorted({-300, -200, -17, 0, 17, 100, 300} | set(int(k) for k in _r.integers(-300, 301, 6)))


def _points(n, k, rng):
    """Rows at 10^k: Gaussian, ties, mixed scales, and differences that underflow."""
    s = 10.0 ** k
    rows = [s * rng.standard_normal(n), np.full(n, s), s * rng.standard_normal(n)]
    mixed = s * rng.standard_normal(n)
    mixed[: n // 2] *= 1e-12
    rows.append(mixed)
    rows.append(s * (1.0 + 1e-16 * np.arange(n)))          # differences near one ulp
    if k <= -290:
        rows.append(np.array([5e-324 * (j % 3) for j in range(n)]))   # subnormals
    return np.array(rows)


# -- exact references --------------------------------------------------------------------------

def _simplex_exact(y, total):
    """max(y - tau, 0) with sum = total, tau from the sorted prefix sums, in exact arithmetic."""
    yf = [Fr(v) for v in y]
    u = sorted(yf, reverse=True)
    t = Fr(total)
    cs = Fr(0)
    tau = None
    for k, v in enumerate(u, 1):
        cs += v
        cand = (cs - t) / k
        if v > cand:
            tau = cand
    return [max(v - tau, Fr(0)) for v in yf]


def _capped_exact(y, lo, hi, w, total):
    """clip(y - lam w, lo, hi) with <w, x> = total, lam by exact breakpoint search (finite lo, hi)."""
    Y, L, H, W, T = ([Fr(v) for v in a] for a in (y, lo, hi, w)), None, None, None, Fr(total)
    Y, L, H, W = list(Y[0]) if False else [Fr(v) for v in y], [Fr(v) for v in lo], [Fr(v) for v in hi], \
        [Fr(v) for v in w]

    def g(lam):
        return sum(wi * min(max(yi - lam * wi, li), hi_) for yi, li, hi_, wi in zip(Y, L, H, W))

    bps = sorted({(yi - hi_) / wi for yi, hi_, wi in zip(Y, H, W)} | {(yi - li) / wi for yi, li, wi in zip(Y, L, W)})
    vals = [g(b) for b in bps]
    # g is non-increasing; find consecutive breakpoints with g(a) >= T >= g(b), solve linearly
    for a, b, ga, gb in zip(bps, bps[1:], vals, vals[1:]):
        if ga >= T >= gb:
            lam = a if ga == gb else a + (ga - T) * (b - a) / (ga - gb)
            break
    else:
        lam = bps[0] if vals[0] <= T else bps[-1]
    return [min(max(yi - lam * wi, li), hi_) for yi, li, hi_, wi in zip(Y, L, H, W)]


def _permutahedron_exact(y, w):
    order = sorted(range(len(y)), key=lambda i: -y[i])
    wd = sorted((Fr(v) for v in w), reverse=True)
    s = [Fr(y[i]) - wd[j] for j, i in enumerate(order)]
    blocks = []                                 # (sum, count), non-increasing means
    for v in s:
        blocks.append([v, 1])
        while len(blocks) > 1 and blocks[-2][0] * blocks[-1][1] < blocks[-1][0] * blocks[-2][1]:
            a = blocks.pop()
            blocks[-1][0] += a[0]
            blocks[-1][1] += a[1]
    out = [None] * len(y)
    j = 0
    for sm, c in blocks:
        for _ in range(c):
            out[order[j]] = Fr(y[order[j]]) - sm / c
            j += 1
    return out


def _l1_exact(y, c, r):
    v = [Fr(a) - Fr(b) for a, b in zip(y, c)]
    if sum(abs(t) for t in v) <= Fr(r):
        return [Fr(a) for a in y]
    a = [abs(t) for t in v]
    u = sorted(a, reverse=True)
    cs, tau = Fr(0), None
    for k, val in enumerate(u, 1):
        cs += val
        cand = (cs - Fr(r)) / k
        if val > cand:
            tau = cand
    return [Fr(cc) + (1 if t > 0 else -1) * max(abs(t) - tau, Fr(0)) for cc, t in zip(c, v)]


def _err(x, exact):
    return max(abs(Fr(float(a)) - b) for a, b in zip(x, exact))


def _batch_and_idempotence(K, Y, X, tol):
    single = np.array([K.project(y) for y in Y])
    assert np.abs(single - X).max(initial=0.0) <= tol, "batch differs from one-by-one"
    again = K.project(X)
    assert np.abs(again - X).max(initial=0.0) <= tol, "projection is not idempotent"
    assert K.project(np.zeros((0,) + K.shape)).shape == (0,) + K.shape


# -- vector families ---------------------------------------------------------------------------

@pytest.mark.parametrize("mode", ["equal", "at_most"])
@pytest.mark.parametrize("total", [1e-6, 1.0, 3.5e6])
def test_simplex_exact_at_every_magnitude(mode, total):
    K = setkit.compile({"kind": "simplex", "dim": 5, "total": total, "mode": mode})
    rng = np.random.default_rng(1)
    for k in MAGS:
        Y = _points(5, k, rng)
        X = K.project(Y)
        for y, x in zip(Y, X):
            if mode == "at_most" and math.fsum(max(v, 0.0) for v in y) <= total:
                exact = [max(Fr(v), Fr(0)) for v in y]
            else:
                exact = _simplex_exact(y, total)
            assert _err(x, exact) <= 16 * 5 * 2.3e-16 * total, (k, y, x)
        assert K.contains(X).all()
        D = K.distance(Y)
        ref = [math.hypot(*(a - b for a, b in zip(y, x))) for y, x in zip(Y, X)]
        assert np.allclose(D, ref, rtol=1e-12, atol=1e-300)
        _batch_and_idempotence(K, Y, X, 1e-12 * total)


def test_issue_cases_simplex_and_l1_ball():
    # from issue 11: ZeroDivisionError at max|y| / total > 1e16; projection outside the set at total 1e-6
    K = setkit.compile({"kind": "simplex", "dim": 5})
    assert K.project([1e16, 0, 0, 0, 0.5]).tolist() == [1.0, 0.0, 0.0, 0.0, 0.0]
    K = setkit.compile({"kind": "simplex", "dim": 2, "total": 1e-6})
    x = K.project([1e10, 0.0])
    assert x.tolist() == [1e-6, 0.0] and K.contains(x)
    B = setkit.compile({"kind": "ball", "dim": 3, "norm": 1, "radius": 1e-12})
    assert B.project([1e6, 0, 0]).tolist() == [1e-12, 0.0, 0.0]
    assert B.distance([1e17, 0, 0]) == pytest.approx(1e17)


@pytest.mark.parametrize("mode", ["equal", "at_most"])
def test_budget_exact_at_every_magnitude(mode):
    lo, hi, w = [0.0, -1.0, 0.5, 0.0], [0.6, 1.0, 2.0, 3.0], [1.0, 2.0, 0.5, 3.0]
    total = 2.5
    K = setkit.compile({"kind": "budget", "dim": 4, "total": total, "lower": lo, "upper": hi, "weights": w,
                        "mode": mode})
    rng = np.random.default_rng(2)
    for k in MAGS:
        Y = _points(4, k, rng)
        X = K.project(Y)
        for y, x in zip(Y, X):
            clipped = np.clip(y, lo, hi)
            if mode == "at_most" and math.fsum(clipped * w) <= total:
                exact = [Fr(v) for v in clipped]
            else:
                exact = _capped_exact(y, lo, hi, w, total)
            assert _err(x, exact) <= 1e-9, (k, y, x, [float(e) for e in exact])
        assert K.contains(X).all()
        _batch_and_idempotence(K, Y, X, 1e-9)


def test_issue_case_budget_caps_at_1e17():
    K = setkit.compile({"kind": "budget", "dim": 3, "total": 1, "upper": 0.6})
    x = K.project([1e17, 1e17, -1e17])
    assert np.allclose(x, [0.5, 0.5, 0.0], atol=1e-15) and K.contains(x)


def test_permutahedron_exact_at_every_magnitude():
    w = [3.0, 2.0, 1.0, -0.5, 2.0]
    K = setkit.compile({"kind": "permutahedron", "weights": w})
    rng = np.random.default_rng(3)
    for k in MAGS:
        Y = _points(5, k, rng)
        X = K.project(Y)
        for y, x in zip(Y, X):
            assert _err(x, _permutahedron_exact(y, w)) <= 1e-13, (k, y, x)
        assert K.contains(X).all()
        _batch_and_idempotence(K, Y, X, 1e-13)
    # issue 11: [1e17, -1e17, 1e17] returned [0, 0, 0] (not in the set) marked solved
    P = setkit.compile({"kind": "permutahedron", "weights": [3, 2, 1]})
    assert P.project([1e17, -1e17, 1e17]).tolist() == [2.5, 1.0, 2.5]
    assert P.project([1e308, -1e308, 1e308]).tolist() == [2.5, 1.0, 2.5]


def test_box_and_balls_at_every_magnitude():
    c = np.array([0.5, -2.0, 0.0])
    boxes = [setkit.compile({"kind": "box", "lower": [-1.0, 0.0, -np.inf], "upper": [1.0, 1e300, 2.0]}),
             setkit.compile({"kind": "ball", "dim": 3, "norm": "inf", "radius": 1.5, "center": c.tolist()})]
    l1 = setkit.compile({"kind": "ball", "dim": 3, "norm": 1, "radius": 2.0, "center": c.tolist()})
    l2 = setkit.compile({"kind": "ball", "dim": 3, "norm": 2, "radius": 2.0, "center": c.tolist()})
    rng = np.random.default_rng(4)
    for k in MAGS:
        Y = _points(3, k, rng)
        for K, lo, hi in ((boxes[0], [-1.0, 0.0, -np.inf], [1.0, 1e300, 2.0]), (boxes[1], c - 1.5, c + 1.5)):
            X = K.project(Y)
            assert np.array_equal(X, np.clip(Y, lo, hi))                       # clipping is exact
            assert np.allclose(K.distance(Y), [math.hypot(*(Y[i] - X[i])) for i in range(len(Y))], rtol=1e-13)
            _batch_and_idempotence(K, Y, X, 0.0)
        X = l1.project(Y)
        for y, x in zip(Y, X):
            assert _err(x, _l1_exact(y, c, 2.0)) <= 1e-14 * 8, (k, y, x)
        _batch_and_idempotence(l1, Y, X, 1e-14)
        X = l2.project(Y)
        for y, x in zip(Y, X):
            v = y - c
            nv = math.hypot(*v)
            ref = y if nv <= 2.0 else c + v * (2.0 / nv)
            assert np.allclose(x, ref, rtol=1e-14, atol=1e-14), (k, y, x)
            assert l2.contains(x)
        assert np.allclose(l2.distance(Y), [max(math.hypot(*(y - c)) - 2.0, 0.0) for y in Y], rtol=1e-13)
        _batch_and_idempotence(l2, Y, X, 1e-14)


def test_hull_in_the_set_with_a_small_gap_at_every_magnitude():
    V = np.array([[0.0, 0.0, 1.0], [2.0, 0.0, 0.0], [0.0, 2.0, 0.5], [1.0, 1.0, 2.0], [0.5, 0.2, 0.1]])
    K = setkit.compile({"kind": "hull", "points": V.tolist()})
    rng = np.random.default_rng(5)
    for k in MAGS:
        Y = _points(3, k, rng)
        X = K.project(Y)
        for y, x in zip(Y, X):
            # in the hull: an LP finds convex weights reproducing x (scipy.optimize.linprog, HiGHS)
            res = linprog(np.zeros(5), A_eq=np.vstack([V.T, np.ones(5)]), b_eq=np.append(x, 1.0),
                          bounds=[(0, None)] * 5, method="highs")
            assert res.status == 0, (k, x)
            r = y - x
            gap = float(np.max((V - x) @ r))           # Frank-Wolfe gap over the listed points
            far = float(np.max(np.linalg.norm((V - y) / max(np.abs(V - y).max(), 1e-300), axis=1))) * \
                max(np.abs(V - y).max(), 1e-300)
            assert gap / far <= 1e-12 * far + 1e-300, (k, gap, far)
        _batch_and_idempotence(K, Y, X, 1e-12 * max(1.0, 10.0 ** k))


# -- network families --------------------------------------------------------------------------

NETWORKS = {
    "transport": {"kind": "transport", "rows": [1, 1, 1, 1, 1, 1], "cols": [2, 2, 2]},
    "birkhoff": {"kind": "birkhoff", "n": 3},
    "flow": {"kind": "flow", "nodes": 4, "edges": [[0, 1, 2], [1, 2, 2], [0, 2, 3], [2, 3, 5, 1], [3, 0, 1]],
             "supply": {0: 2, 3: -2}},
}


def _check_network_answer(K, spec, y, x, moderate):
    lf = K.linear_form()
    B = lf.A_eq.toarray() if hasattr(lf.A_eq, "toarray") else np.asarray(lf.A_eq)
    s = np.asarray(lf.b_eq, float)
    lo, hi = np.asarray(lf.lo, float)[: x.size], np.asarray(lf.hi, float)[: x.size]
    xf = x.ravel()
    assert np.all(xf >= lo) and np.all(xf <= hi)
    scale = max(1.0, float(np.abs(s).max()), float(np.abs(hi[np.isfinite(hi)]).max(initial=0.0)))
    for row, rhs in zip(B, s):
        bal = math.fsum(float(a) * float(b) for a, b in zip(row, xf) if a != 0.0)
        assert abs(bal - rhs) <= 1e-9 * scale, (bal, rhs)
    if moderate:
        # Frank-Wolfe gap from an independent LP: max_z <y - x, z> over the set, minus <y - x, x>
        r = y.ravel() - xf
        u = max(float(np.abs(r).max()), 1e-300)
        res = linprog(-r / u, A_eq=B, b_eq=s, bounds=np.column_stack([lo, hi]), method="highs")
        assert res.status == 0
        gap = (-res.fun - float(r @ xf) / u) * u
        assert gap <= 1e-7 * scale * (u + scale), gap


@pytest.mark.parametrize("name", sorted(NETWORKS))
def test_network_families_at_every_magnitude(name):
    spec = NETWORKS[name]
    K = setkit.compile(spec)
    rng = np.random.default_rng(6)
    solved = 0
    for k in MAGS:
        Y = _points(K.dim, k, rng).reshape((-1,) + K.shape)
        try:
            X = K.project(Y)
        except SolveError:
            # beyond the range the kernel reaches (measured: flows with irregular bounds solve every
            # point up to 1e16 and most beyond; transport and birkhoff up to 1e150) a clear error is
            # the contract; within it, every point must solve
            assert k > (16 if name == "flow" else 150), (name, k)
            continue
        solved += 1
        for y, x in zip(Y, X):
            _check_network_answer(K, spec, y, x, moderate=abs(k) <= 8 or k < 0)
        assert K.contains(X).all()
        _batch_and_idempotence(K, Y, X, 1e-9 * max(1.0, 10.0 ** min(k, 0)) + 1e-9)
    assert solved >= len([k for k in MAGS if k <= 16])


def test_one_far_row_does_not_change_the_other_rows():
    # issue 11: a batch [y0, 1e12-scale point] changed row 0 of a transport set by 1
    rng = np.random.default_rng(7)
    T = setkit.compile(NETWORKS["transport"])
    y0 = rng.standard_normal((6, 3))
    X = T.project(np.array([y0, 1e12 * rng.standard_normal((6, 3))]))
    assert np.abs(X[0] - T.project(y0)).max() <= 1e-12
    assert T.contains(X).all()
    B = setkit.compile({"kind": "birkhoff", "n": 2})
    far = np.array([[1e12, 3.0], [5.0, -1e12]])
    X = B.project(np.array([np.zeros((2, 2)), far]))
    assert np.allclose(X[0], 0.5, atol=1e-12)                   # J/2 is the projection of 0
    assert B.contains(X).all()


def test_birkhoff_far_point_closed_form():
    # X = [[a, 1 - a], [1 - a, a]] on the 2 x 2 Birkhoff polytope; for y = [[t, 0], [0, -t]] the squared
    # distance is (a - t)^2 + 2 (1 - a)^2 + (a + t)^2 = 4 a^2 - 4 a + const: a = 1/2 for every t (hand-derived)
    B = setkit.compile({"kind": "birkhoff", "n": 2})
    for t in (1e3, 1e12, 1e16):
        x = B.project(np.array([[t, 0.0], [0.0, -t]]))
        assert np.allclose(x, 0.5, atol=1e-12), (t, x)


def test_three_node_flow_projects_for_every_y0_cold():
    # issue 11: rounding at the last breakpoint was taken as emptiness (44 of 201 cold calls failed)
    spec = {"kind": "flow", "nodes": ["A", "B", "C"],
            "edges": [{"from": "A", "to": "B", "capacity": 2}, {"from": "C", "to": "A", "capacity": 2},
                      {"from": "B", "to": "C", "capacity": 2}], "supply": {"A": 2, "B": -2}}
    for y0 in np.linspace(-3.0, -2.5, 201):
        K = setkit.compile(spec)                                  # cold: no warm start
        x = K.project([y0, -0.014, 0.3])
        # the only feasible flows are (2 + t, t, t) for t in [0, 0] (capacity 2 on A->B): x = (2, 0, 0)
        assert np.allclose(x, [2.0, 0.0, 0.0], atol=1e-12), (y0, x)
