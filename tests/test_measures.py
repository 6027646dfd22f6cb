"""Centroids and samplers (setkit.measures) against outside facts and closed forms."""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pytest
import scipy.stats
from scipy.spatial import ConvexHull, Delaunay

import setkit
from setkit import measures
from setkit.decision_set import DecisionSet
from setkit.errors import InputError, UnsupportedOperationError
from setkit.families import Family, kernel
from setkit.forms import LinearForm

from polygon_cases import shoelace_centroid, transport_2x3_polygon


# -- two unregistered test families: a polytope given by its inequalities (no exact knowledge, so the
#    generic triangulation / hit-and-run paths run) and a Euclidean ball without a linear form (so the
#    membership-chord hit-and-run runs) ------------------------------------------------------------------
@dataclass(frozen=True, eq=False, kw_only=True)
class HPoly(Family):
    A: np.ndarray
    b: np.ndarray
    C: np.ndarray | None = None
    d: np.ndarray | None = None
    kind = "test-hpolytope"
    traits = frozenset({"polyhedral"})

    @property
    def shape(self):
        return (self.A.shape[1],)

    def cvxpy_constraints(self, x):
        cons = [self.A @ x <= self.b]
        if self.C is not None:
            cons.append(self.C @ x == self.d)
        return cons

    def linear_form(self):
        return LinearForm.build(self.A.shape[1], A_ub=self.A, b_ub=self.b, A_eq=self.C, b_eq=self.d)


@dataclass(frozen=True, eq=False, kw_only=True)
class RoundBall(Family):
    n: int
    radius: float
    center: np.ndarray
    kind = "test-roundball"
    traits = frozenset({"bounded"})

    @property
    def shape(self):
        return (self.n,)

    def cvxpy_constraints(self, x):
        import cvxpy as cp
        return [cp.norm(x - self.center, 2) <= self.radius]

    @kernel("project")
    def project(self, Y):
        """Radial scaling, O(n)."""
        R = Y - self.center
        nr = np.linalg.norm(R, axis=1, keepdims=True)
        return self.center + R * np.minimum(1.0, self.radius / np.maximum(nr, 1e-300))

    @kernel("lmo")
    def lmo(self, C):
        """center - radius c/||c||, O(n)."""
        return self.center - self.radius * C / np.linalg.norm(C, axis=1, keepdims=True)


def hpoly_from_points(P):
    """H-representation of conv(P) from scipy.spatial.ConvexHull equations (a x + b <= 0)."""
    eq = ConvexHull(P).equations
    return DecisionSet(HPoly(A=eq[:, :-1], b=-eq[:, -1]))


def delaunay_centroid(P):
    """Volume centroid of conv(P) by scipy.spatial.Delaunay simplices (volume |det|/m!)."""
    tri = Delaunay(P)
    S = P[tri.simplices]
    vol = np.abs(np.linalg.det(S[:, 1:] - S[:, :1])) / math.factorial(P.shape[1])
    return (vol[:, None] * S.mean(axis=1)).sum(axis=0) / vol.sum()


# ------------------------------------------------------------------------------------------------------
# exact centroids
# ------------------------------------------------------------------------------------------------------
def test_simplex_centroid_closed_form():
    # The centroid of a simplex is the mean of its vertices (common practice; e.g. Coxeter, Regular
    # Polytopes, 1973, from memory): total/n for {x >= 0, sum x = total}, total/(n+1) with the origin.
    K = setkit.compile({"kind": "simplex", "dim": 5, "total": 2.0})
    r = K.centroid(details=True)
    assert r.exact and r.method == "closed form"
    np.testing.assert_allclose(r.point, np.full(5, 0.4), rtol=0, atol=1e-15)
    Ka = setkit.compile({"kind": "simplex", "dim": 4, "total": 3.0, "mode": "at_most"})
    np.testing.assert_allclose(Ka.centroid(), np.full(4, 3.0 / 5), atol=1e-15)
    np.testing.assert_allclose(Ka.centroid("vertices"), np.full(4, 3.0 / 5), atol=1e-15)
    # directions, at_most: lmo(g) is the origin iff min g >= 0 (probability 2^-n), else total e_argmin
    np.testing.assert_allclose(Ka.centroid("directions"), np.full(4, 3.0 * (1 - 2.0 ** -4) / 4), atol=1e-15)


def test_simplex_hooks_agree_with_generic_triangulation():
    # the same at_most simplex as an H-polytope has no family knowledge: triangulation must reproduce
    # the closed form total/(n+1)
    n, t = 4, 3.0
    A = np.vstack([np.ones((1, n)), -np.eye(n)])
    b = np.concatenate([[t], np.zeros(n)])
    K = DecisionSet(HPoly(A=A, b=b))
    r = K.centroid(details=True)
    assert r.exact and r.method == "triangulation"
    np.testing.assert_allclose(r.point, np.full(n, t / (n + 1)), atol=1e-12)
    v = K.centroid("vertices", details=True)
    assert v.method == "vertex enumeration"
    np.testing.assert_allclose(v.point, np.full(n, t / (n + 1)), atol=1e-12)


def test_polygon_centroid_matches_shoelace(rng):
    ang = np.sort(rng.uniform(0, 2 * np.pi, 9))
    V = np.c_[3 * np.cos(ang), np.sin(ang)] + [5.0, -2.0]
    K = hpoly_from_points(V)
    hull = ConvexHull(V)
    ordered = V[hull.vertices]                       # counter-clockwise for 2-d hulls
    np.testing.assert_allclose(K.centroid(), shoelace_centroid(ordered), rtol=0, atol=1e-10)
    np.testing.assert_allclose(K.centroid("vertices"), ordered.mean(axis=0), atol=1e-10)


@pytest.mark.parametrize("m,scale", [(3, 1.0), (4, 1e-3), (3, 1e5)])
def test_polytope_centroid_matches_delaunay(rng, m, scale):
    P = scale * (rng.standard_normal((25, m)) + 2.0)
    K = hpoly_from_points(P)
    np.testing.assert_allclose(K.centroid(), delaunay_centroid(P), rtol=1e-9, atol=1e-12 * scale)
    hv = P[ConvexHull(P).vertices]
    np.testing.assert_allclose(K.centroid("vertices"), hv.mean(axis=0), rtol=1e-9, atol=1e-12 * scale)


def test_centroid_in_affine_hull_of_2x3_transport_polytope():
    # {x in R^{2x3}: x >= 0, row sums r, column sums c}: free coordinates (x11, x12), the rest follow.
    r_, c_ = np.array([4.0, 5.0]), np.array([2.0, 3.0, 4.0])
    C = np.zeros((5, 6))
    for i in range(2):
        C[i, 3 * i:3 * i + 3] = 1
    for j in range(3):
        C[2 + j, [j, 3 + j]] = 1
    K = DecisionSet(HPoly(A=-np.eye(6), b=np.zeros(6), C=C, d=np.concatenate([r_, c_])))

    # independent: the polygon in (x11, x12) by brute-force vertex enumeration of its 6 inequalities
    def full(u):
        x11, x12 = u
        x13 = r_[0] - x11 - x12
        return np.array([x11, x12, x13, c_[0] - x11, c_[1] - x12, c_[2] - x13])
    ordered = transport_2x3_polygon(r_, c_)
    expect = full(shoelace_centroid(ordered))       # affine maps carry uniform laws to uniform laws
    r = K.centroid(details=True)
    assert r.exact and "dimension 2" in r.note
    np.testing.assert_allclose(r.point, expect, atol=1e-10)
    assert K.contains(r.point)


def test_degenerate_box_and_single_point():
    K = setkit.compile({"kind": "box", "lower": [0, 2, 1], "upper": [1, 2, 3]})
    np.testing.assert_allclose(K.centroid(), [0.5, 2, 2])
    X = K.sample(50, rng=0)
    assert np.all(X[:, 1] == 2) and K.contains(X).all()
    # a polytope that is a single point (implicit equalities x <= 1, -x <= -1, y = 0 pinned)
    A = np.array([[1.0, 0], [-1, 0], [0, 1], [0, -1]])
    K1 = DecisionSet(HPoly(A=A, b=np.array([1.0, -1, 0, 0])))
    np.testing.assert_allclose(K1.centroid(), [1.0, 0.0], atol=1e-12)
    np.testing.assert_allclose(K1.sample(3, rng=1), [[1.0, 0.0]] * 3, atol=1e-12)


def test_implicit_equalities_are_found():
    # x + y <= 1 and x + y >= 1 (an implicit equality), 0 <= x, y: the segment from (1,0) to (0,1)
    A = np.array([[1.0, 1], [-1, -1], [-1, 0], [0, -1]])
    K = DecisionSet(HPoly(A=A, b=np.array([1.0, -1, 0, 0])))
    r = K.centroid(details=True)
    np.testing.assert_allclose(r.point, [0.5, 0.5], atol=1e-12)
    assert "dimension 1" in r.note
    X = K.sample(200, rng=2)
    np.testing.assert_allclose(X.sum(axis=1), 1.0, atol=1e-10)
    assert X.min() >= -1e-12


# ------------------------------------------------------------------------------------------------------
# estimates: hit-and-run and Monte Carlo over the LMO
# ------------------------------------------------------------------------------------------------------
def _within(r, exact, k=4.5):
    z = np.abs(np.asarray(r.point) - exact) / np.maximum(np.asarray(r.std_error), 1e-300)
    assert np.all(z <= k), (r, z)
    return z


def test_hit_and_run_matches_exact_simplex_centroid():
    K = setkit.compile({"kind": "simplex", "dim": 6, "total": 2.0, "mode": "at_most"})
    r = K.centroid(exact=False, details=True, rng=7)
    assert not r.exact and r.method == "hit-and-run" and r.ess > 200
    assert np.all(r.std_error > 0) and np.all(r.std_error < 0.03)
    _within(r, np.full(6, 2.0 / 7))


def test_hit_and_run_matches_triangulated_polytope(rng):
    P = rng.standard_normal((30, 3)) * [4.0, 1.0, 0.2]       # elongated: exercises the rounding
    K = hpoly_from_points(P)
    r = K.centroid(exact=False, details=True, rng=3)
    _within(r, delaunay_centroid(P))


def test_hit_and_run_standard_errors_are_honest():
    # over independent seeds the z-scores of a correct estimate should be about N(0, 1):
    # a root mean square far above 1 would mean the reported errors are too small.
    K = setkit.compile({"kind": "simplex", "dim": 3, "mode": "at_most"})
    z = []
    for seed in range(8):
        r = K.centroid(exact=False, details=True, rng=seed, samples=800)
        z.extend((r.point - 0.25) / r.std_error)
    rms = float(np.sqrt(np.mean(np.square(z))))
    assert 0.3 < rms < 2.0, rms


def test_membership_hit_and_run_on_a_round_ball():
    n, rad, c = 4, 2.0, np.array([1.0, -1.0, 0.5, 3.0])
    K = DecisionSet(RoundBall(n=n, radius=rad, center=c))
    S = measures.hit_and_run(K, 3000, np.random.default_rng(5))
    assert S.shape == (8, 375, n)
    X = S.reshape(-1, n)
    assert np.all(np.linalg.norm(X - c, axis=1) <= rad * (1 + 1e-6))
    mean, se, ess = measures.batch_means(S)
    assert np.all(np.abs(mean - c) <= 4.5 * se)
    # E ||x - c||^2 = n/(n+2) r^2 for the uniform law on a ball in R^n (from memory; the radius of a
    # uniform point has density n s^{n-1}/r^n)
    q = np.sum((S - c) ** 2, axis=2)[..., None]
    qm, qse, _ = measures.batch_means(q)
    assert abs(qm[0] - n / (n + 2) * rad ** 2) <= 4.5 * qse[0]
    r = K.centroid(details=True, rng=1)
    assert r.method == "hit-and-run" and "membership" in r.note
    _within(r, c)
    # with an expensive support function (the cvxpy reference) the chord bracket comes from the
    # bounding box instead; the law is the same
    Kr = K.with_backends(support="reference")
    Sr = measures.hit_and_run(Kr, 2000, np.random.default_rng(6))
    assert np.all(np.linalg.norm(Sr.reshape(-1, n) - c, axis=1) <= rad * (1 + 1e-6))
    qr, qrse, _ = measures.batch_means(np.sum((Sr - c) ** 2, axis=2)[..., None])
    assert abs(qr[0] - n / (n + 2) * rad ** 2) <= 4.5 * qrse[0]
    mr, mrse, _ = measures.batch_means(Sr)
    assert np.all(np.abs(mr - c) <= 4.5 * mrse)


def test_directions_monte_carlo_matches_closed_form():
    K = setkit.compile({"kind": "simplex", "dim": 5, "mode": "at_most"})
    exact = np.full(5, (1 - 2.0 ** -5) / 5)
    r = K.centroid("directions", exact=False, details=True, rng=11, exact_max_dim=0)
    assert r.method == "Monte Carlo over LMO" and r.ess == r.samples == 1000
    _within(r, exact)
    # small polytope: lmo(g) by scanning the enumerated vertices, many cheap draws
    rv = K.centroid("directions", exact=False, details=True, rng=11)
    assert rv.method == "Monte Carlo over enumerated vertices" and rv.samples == 100_000
    assert np.all(rv.std_error < 0.25 * r.std_error)
    _within(rv, exact)
    B = setkit.compile({"kind": "box", "lower": [0, -1, 2], "upper": [1, 3, 2.5]})
    rb = B.centroid("directions", exact=False, details=True, rng=12)
    _within(rb, [0.5, 1.0, 2.25])


def test_directions_draws_agree_with_reference_lmo():
    # the answers behind measure='directions' (a scan of the enumerated vertices, or the set's LMO)
    # agree with the cvxpy reference LMO on the same Gaussian directions
    ang = np.linspace(0, 2 * np.pi, 7)[:-1]
    K = hpoly_from_points(np.c_[np.cos(ang), 2 * np.sin(ang)])
    a = K.sample(6, "directions", rng=4)
    G = np.random.default_rng(4).standard_normal((6, 2))
    ref = K.with_backends(lmo="reference").lmo(G)
    np.testing.assert_allclose(a, ref, atol=1e-6)
    b = K.sample(6, "directions", rng=4, exact_max_dim=0)          # through K.lmo (HiGHS)
    np.testing.assert_allclose(b, ref, atol=1e-6)


# ------------------------------------------------------------------------------------------------------
# exact samplers
# ------------------------------------------------------------------------------------------------------
def test_simplex_volume_samples_have_beta_marginals():
    # a uniform point of the n-simplex has x_1 ~ Beta(1, n-1) (Devroye, Non-Uniform Random Variate
    # Generation, 1986, from memory); test with scipy.stats.kstest
    n = 5
    K = setkit.compile({"kind": "simplex", "dim": n})
    X = K.sample(4000, rng=21)
    assert K.contains(X).all()
    assert scipy.stats.kstest(X[:, 0], scipy.stats.beta(1, n - 1).cdf).pvalue > 1e-3
    # the at_most simplex: sum of coordinates ~ Beta(n, 1) (volume of t*simplex grows like t^n)
    Ka = setkit.compile({"kind": "simplex", "dim": n, "mode": "at_most", "total": 2.0})
    S = Ka.sample(4000, rng=22).sum(axis=1) / 2.0
    assert scipy.stats.kstest(S, scipy.stats.beta(n, 1).cdf).pvalue > 1e-3


def test_hit_and_run_samples_have_beta_marginals():
    n = 4
    A = np.vstack([np.ones((1, n)), -np.eye(n)])
    K = DecisionSet(HPoly(A=A, b=np.concatenate([[1.0], np.zeros(n)])))
    X = K.sample(1500, rng=8, thin=20)
    assert K.contains(X).all()
    assert scipy.stats.kstest(X.sum(axis=1), scipy.stats.beta(n, 1).cdf).pvalue > 1e-3


def test_vertex_samplers_are_uniform_chi_square():
    # scipy.stats.chisquare on the counts of each corner / vertex
    B = setkit.compile({"kind": "box", "dim": 3, "lower": -1, "upper": 2})
    X = B.sample(4000, "vertices", rng=31)
    codes = ((X > 0) * [1, 2, 4]).sum(axis=1)
    counts = np.bincount(codes, minlength=8)
    assert scipy.stats.chisquare(counts).pvalue > 1e-3
    S = setkit.compile({"kind": "simplex", "dim": 4, "mode": "at_most"})
    Y = S.sample(4000, "vertices", rng=32)
    idx = np.where(Y.sum(axis=1) > 0, Y.argmax(axis=1), 4)
    assert scipy.stats.chisquare(np.bincount(idx, minlength=5)).pvalue > 1e-3
    # enumerated vertices of an H-polytope (no family knowledge)
    ang = np.linspace(0, 2 * np.pi, 8)[:-1]
    V = np.c_[np.cos(ang), np.sin(ang)]
    K = hpoly_from_points(V)
    Z = K.sample(3500, "vertices", rng=33)
    which = np.argmin(np.linalg.norm(Z[:, None, :] - V[None], axis=2), axis=1)
    assert np.abs(Z - V[which]).max() < 1e-9
    assert scipy.stats.chisquare(np.bincount(which, minlength=7)).pvalue > 1e-3


def test_directions_sampler_of_simplex_matches_lmo_law():
    # exact_sample(directions) must have the law of lmo(g): compare the vertex frequencies with those
    # of the generic path (the family's own LMO on Gaussian directions) by a two-sample chi-square
    K = setkit.compile({"kind": "simplex", "dim": 3, "mode": "at_most"})
    X = K.sample(3000, "directions", rng=41)
    G = np.random.default_rng(42).standard_normal((3000, 3))
    Y = K.lmo(G)

    def code(Z):
        return np.where(Z.sum(axis=1) > 0, Z.argmax(axis=1), 3)
    table = np.array([np.bincount(code(X), minlength=4), np.bincount(code(Y), minlength=4)])
    assert scipy.stats.chi2_contingency(table).pvalue > 1e-3
    assert abs(table[0, 3] / 3000 - 1 / 8) < 0.03          # P(g >= 0) = 2^-3


def test_seeded_and_reproducible():
    K = setkit.compile({"kind": "simplex", "dim": 4, "mode": "at_most"})
    a = K.sample(10, rng=5)
    b = K.sample(10, rng=np.random.default_rng(5))
    np.testing.assert_array_equal(a, b)
    P = hpoly_from_points(np.random.default_rng(0).standard_normal((12, 3)))
    np.testing.assert_array_equal(P.sample(7, rng=9), P.sample(7, rng=9))
    assert not np.array_equal(P.sample(7, rng=9), P.sample(7, rng=10))
    np.testing.assert_array_equal(P.centroid(exact=False), P.centroid(exact=False))   # default seed 0
    assert P.sample(0).shape == (0, 3) and P.sample(5, rng=1).shape == (5, 3)


# ------------------------------------------------------------------------------------------------------
# refusals with reasons
# ------------------------------------------------------------------------------------------------------
def test_unsupported_cases_say_why_and_what_works():
    n = 12
    A = np.vstack([np.ones((1, n)), np.eye(n), -np.eye(n)])
    K = DecisionSet(HPoly(A=A, b=np.concatenate([[3.0], np.ones(n), np.zeros(n)])))
    with pytest.raises(UnsupportedOperationError, match="directions"):
        K.centroid("vertices")
    with pytest.raises(UnsupportedOperationError, match="no exact method"):
        K.centroid(exact=True)
    U = setkit.compile({"kind": "box", "dim": 2, "lower": 0})
    with pytest.raises(UnsupportedOperationError, match="unbounded"):
        U.centroid()
    with pytest.raises(UnsupportedOperationError, match="unbounded"):
        U.centroid("directions")
    with pytest.raises(UnsupportedOperationError, match="unbounded"):
        U.sample(3, rng=0)
    ball = DecisionSet(RoundBall(n=2, radius=1.0, center=np.zeros(2)))
    with pytest.raises(UnsupportedOperationError, match="extreme points"):
        ball.centroid("vertices")
    with pytest.raises(InputError, match="volume, vertices, directions"):
        K.centroid("mass")
    with pytest.raises(InputError, match="k must be"):
        K.sample(-1)
    with pytest.raises(InputError, match="rng"):
        K.sample(2, rng="seed")


def test_large_polytope_estimate_stays_inside(rng):
    # 12-dimensional capped simplex: beyond triangulation; hit-and-run samples stay feasible and the
    # estimate respects the symmetry of the set (every coordinate has the same mean)
    n = 12
    A = np.vstack([np.ones((1, n)), np.eye(n), -np.eye(n)])
    K = DecisionSet(HPoly(A=A, b=np.concatenate([[3.0], np.ones(n), np.zeros(n)])))
    X = K.sample(300, rng=1)
    assert K.contains(X).all()
    r = K.centroid(details=True, rng=2, samples=3000)
    assert not r.exact
    m = r.point.mean()
    assert np.all(np.abs(r.point - m) <= 5 * r.std_error + 1e-12)


def test_chebyshev_center_matches_cvxpy_reference(rng):
    # the start of hit-and-run: the largest inscribed ball, compared with the same LP solved by cvxpy
    import cvxpy as cp
    P = rng.standard_normal((20, 3)) * [3.0, 1.0, 0.5]
    K = hpoly_from_points(P)
    red = measures.reduced(K)
    A, b = K.node.A, K.node.b
    x, r = cp.Variable(3), cp.Variable()
    cp.Problem(cp.Maximize(r), [A @ x + r * np.linalg.norm(A, axis=1) <= b]).solve(solver=cp.CLARABEL)
    assert abs(red.radius - r.value) <= 1e-7 * max(1.0, r.value)
    # the center itself may not be unique; its inscribed radius must be the optimal one
    c = red.to_x(red.center[None, :])[0]
    slack = (b - A @ c) / np.linalg.norm(A, axis=1)
    assert abs(slack.min() - r.value) <= 1e-7


def test_intersection_of_simplex_and_box_is_triangulated():
    # {x >= 0, sum x = 2} with x <= 0.9: a triangle with vertices the permutations of (0.9, 0.9, 0.2);
    # the volume centroid of a triangle is its vertex mean (common practice): (2/3, 2/3, 2/3)
    K = setkit.compile({"kind": "intersection", "of": [{"kind": "simplex", "dim": 3, "total": 2.0},
                                                       {"kind": "box", "dim": 3, "lower": 0, "upper": 0.9}]})
    r = K.centroid(details=True)
    assert r.exact
    np.testing.assert_allclose(r.point, [2 / 3] * 3, atol=1e-12)
    X = K.sample(400, rng=3)
    assert K.contains(X).all() and X.max() <= 0.9 + 1e-12


def test_slow_mixing_is_reported():
    # far too short chains on a 40-dimensional simplex: dispersed starts have not been forgotten,
    # so R-hat is large and the estimate warns instead of posing as accurate
    from setkit.errors import AccuracyWarning
    K = setkit.compile({"kind": "simplex", "dim": 40, "mode": "at_most"})
    with pytest.warns(AccuracyWarning, match="R-hat"):
        r = K.centroid(exact=False, details=True, rng=0, samples=400, burn_in=20, thin=1)
    assert r.rhat > 1.05
    # well-mixed chains: R-hat close to 1
    K3 = setkit.compile({"kind": "simplex", "dim": 3, "mode": "at_most"})
    assert K3.centroid(exact=False, details=True, rng=0).rhat < 1.02


def test_directions_centroid_of_a_polygon_by_normal_cones(rng):
    # independent: draw Gaussian directions and take the best of the polygon's scipy ConvexHull
    # vertices by a plain scan (no set operator involved)
    ang = np.sort(rng.uniform(0, 2 * np.pi, 8))
    V = np.c_[2 * np.cos(ang), np.sin(ang)] + [1.0, 4.0]
    K = hpoly_from_points(V)
    r = K.centroid("directions", details=True)
    assert r.exact and r.method == "normal-cone angles"
    ext = V[ConvexHull(V).vertices]
    Gd = np.random.default_rng(1).standard_normal((200000, 2))
    picks = ext[np.argmin(Gd @ ext.T, axis=1)]
    mc, se = picks.mean(axis=0), picks.std(axis=0) / np.sqrt(len(picks))
    assert np.all(np.abs(r.point - mc) <= 4.5 * se)
    # a segment in R^3 (x + y = 1, z = 0, 0 <= x, y): the two ends with probability 1/2 each
    A = np.array([[1.0, 1, 0], [-1, -1, 0], [-1, 0, 0], [0, -1, 0], [0, 0, 1], [0, 0, -1]])
    S = DecisionSet(HPoly(A=A, b=np.array([1.0, -1, 0, 0, 0, 0])))
    np.testing.assert_allclose(S.centroid("directions"), [0.5, 0.5, 0.0], atol=1e-12)
