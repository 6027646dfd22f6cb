"""Exact centroids and samplers that the families declare (exact_centroid / exact_sample hooks),
checked against outside facts, generic triangulation and Monte Carlo over the families' own LMOs."""
from __future__ import annotations

import itertools

import numpy as np
import pytest
import scipy.stats
from scipy.spatial import ConvexHull, Delaunay

import setkit

from polygon_cases import shoelace_centroid, transport_2x3_polygon


def _within(point, exact, se, k=4.5):
    z = np.abs(np.asarray(point) - exact) / np.maximum(np.asarray(se), 1e-300)
    assert np.all(z <= k), z


def _delaunay_centroid(P):
    """Volume centroid of conv(P) by scipy.spatial.Delaunay simplices (volume |det|/m!)."""
    tri = Delaunay(P)
    S = P[tri.simplices]
    vol = np.abs(np.linalg.det(S[:, 1:] - S[:, :1]))
    return (vol[:, None] * S.mean(axis=1)).sum(axis=0) / vol.sum()


def _order_codes(X):
    """Index of the ordering (argsort) of each row among all permutations."""
    n = X.shape[1]
    table = {p: i for i, p in enumerate(itertools.permutations(range(n)))}
    return np.array([table[tuple(np.argsort(-x, kind="stable"))] for x in X])


# -- permutahedron --------------------------------------------------------------------------------------
def test_permutahedron_vertex_samples_are_uniform_permutations():
    # chi-square test (scipy.stats.chisquare) of the 4! orders of sampled vertices
    w = [4.0, 2.5, 1.0, 0.0]
    K = setkit.compile({"kind": "permutahedron", "weights": w})
    X = K.sample(4800, "vertices", rng=1)
    assert np.all(np.sort(X, axis=1) == np.sort(w))
    counts = np.bincount(_order_codes(X), minlength=24)
    assert scipy.stats.chisquare(counts).pvalue > 1e-3
    # the directions law is lmo(g) for Gaussian g: compare with the family's own LMO (contingency test)
    Y = K.sample(2400, "directions", rng=2)
    L = K.lmo(np.random.default_rng(3).standard_normal((2400, 4)))
    table = np.array([np.bincount(_order_codes(Y), minlength=24), np.bincount(_order_codes(L), minlength=24)])
    assert scipy.stats.chi2_contingency(table).pvalue > 1e-3


def test_permutahedron_centroid_matches_triangulated_hull_of_permutations():
    # independent: the hull of all 4! permutations, in coordinates of its 3-d affine hull, by Delaunay
    w = np.array([3.0, 1.0, 0.5, 0.0])
    K = setkit.compile({"kind": "permutahedron", "weights": w.tolist()})
    V = np.array(list(itertools.permutations(w)))
    x0 = V.mean(axis=0)
    U = np.linalg.svd((V - x0).T)[0][:, :3]
    c = x0 + _delaunay_centroid((V - x0) @ U) @ U.T
    np.testing.assert_allclose(K.centroid(), c, atol=1e-12)
    np.testing.assert_allclose(K.centroid("vertices"), V.mean(axis=0), atol=1e-12)
    r = K.centroid(exact=False, details=True, rng=4, samples=2000)
    assert not r.exact
    _within(r.point, c, r.std_error)


# -- birkhoff ---------------------------------------------------------------------------------------------
def test_birkhoff_vertex_samples_are_uniform_assignments():
    K = setkit.compile({"kind": "birkhoff", "n": 3})
    X = K.sample(3000, "vertices", rng=5)
    assert X.shape == (3000, 3, 3)
    assert np.all(X.sum(axis=1) == 1) and np.all(X.sum(axis=2) == 1) and set(np.unique(X)) == {0.0, 1.0}
    codes = (X.argmax(axis=2) * [9, 3, 1]).sum(axis=1)
    counts = np.array([np.sum(codes == c) for c in np.unique(codes)])
    assert counts.size == 6 and scipy.stats.chisquare(counts).pvalue > 1e-3
    # directions: the assignment solved by scipy.optimize.linear_sum_assignment for Gaussian costs
    from scipy.optimize import linear_sum_assignment
    g = np.random.default_rng(6).standard_normal((3000, 3, 3))
    ref = np.array([linear_sum_assignment(c)[1] @ [9, 3, 1] for c in g])
    mine = (K.sample(3000, "directions", rng=7).argmax(axis=2) * [9, 3, 1]).sum(axis=1)
    keys = np.unique(np.concatenate([ref, mine]))
    table = np.array([[np.sum(ref == k) for k in keys], [np.sum(mine == k) for k in keys]])
    assert scipy.stats.chi2_contingency(table).pvalue > 1e-3


def test_birkhoff_centroid_agrees_with_generic_triangulation():
    # the same polytope as a polyhedron has no family knowledge: vertex enumeration and triangulation
    # in its 4-d affine hull must give J/3
    n = 3
    C = np.zeros((2 * n, n * n))
    for i in range(n):
        C[i, i * n:(i + 1) * n] = 1
        C[n + i, i::n] = 1
    P = setkit.compile({"kind": "polyhedron", "C": C.tolist(), "d": [1.0] * (2 * n), "lower": 0.0})
    for measure in ("volume", "vertices"):
        r = P.centroid(measure, details=True)
        assert r.exact and r.method in ("triangulation", "vertex enumeration")
        np.testing.assert_allclose(r.point, np.full(n * n, 1 / 3), atol=1e-10)
    K = setkit.compile({"kind": "birkhoff", "n": n})
    np.testing.assert_allclose(K.centroid(), np.full((n, n), 1 / 3), atol=1e-15)


# -- ball -------------------------------------------------------------------------------------------------
@pytest.mark.parametrize("norm", [1, 2, "inf"])
def test_ball_volume_samples(norm):
    n, r, c = 4, 1.5, np.array([1.0, -2.0, 0.0, 3.0])
    K = setkit.compile({"kind": "ball", "dim": n, "norm": norm, "radius": r, "center": c.tolist()})
    X = K.sample(3000, rng=8)
    assert K.contains(X).all()
    Z = (X - c) / r
    p = {1: 1, 2: 2, "inf": np.inf}[norm]
    # a uniform point of the unit ball of any norm has ||z||^n ~ U(0, 1): the volume of t*B is t^n vol(B)
    # (common practice); tested with scipy.stats.kstest
    rad = np.linalg.norm(Z, ord=p, axis=1)
    assert scipy.stats.kstest(rad ** n, "uniform").pvalue > 1e-3
    # the direction z/||z|| is independent of the radius; check sign symmetry of each coordinate
    assert np.all(np.abs((Z > 0).mean(axis=0) - 0.5) < 0.04)
    if norm == "inf":
        assert scipy.stats.kstest(Z[:, 0], "uniform", args=(-1, 2)).pvalue > 1e-3
    np.testing.assert_array_equal(K.centroid(measure="volume"), c)


@pytest.mark.parametrize("norm", [1, 2, "inf"])
def test_ball_vertex_and_direction_samples(norm):
    n, r = 3, 2.0
    K = setkit.compile({"kind": "ball", "dim": n, "norm": norm, "radius": r})
    X = K.sample(2400, "vertices", rng=9)
    p = {1: 1, 2: 2, "inf": np.inf}[norm]
    np.testing.assert_allclose(np.linalg.norm(X, ord=p, axis=1), r, rtol=1e-12)
    # directions: same law as lmo(g); compare the sign patterns (and the active axis for norm 1)
    L = K.lmo(np.random.default_rng(10).standard_normal((2400, n)))
    D = K.sample(2400, "directions", rng=11)

    def code(Y):
        if norm == 1:
            j = np.argmax(np.abs(Y), axis=1)
            return 2 * j + (Y[np.arange(len(Y)), j] > 0)
        return ((Y > 0) * (2 ** np.arange(n))).sum(axis=1)
    cells = 2 * n if norm == 1 else 2 ** n
    for S in (X, D):
        assert scipy.stats.chisquare(np.bincount(code(S), minlength=cells)).pvalue > 1e-3
    table = np.array([np.bincount(code(L), minlength=cells), np.bincount(code(D), minlength=cells)])
    assert scipy.stats.chi2_contingency(table).pvalue > 1e-3


@pytest.mark.parametrize("norm", [1, 2, "inf"])
def test_ball_estimated_centroid_near_center(norm):
    c = np.array([0.5, -1.0, 2.0])
    K = setkit.compile({"kind": "ball", "dim": 3, "norm": norm, "radius": 1.0, "center": c.tolist()})
    r = K.centroid(exact=False, details=True, rng=12, samples=1600)
    assert not r.exact
    _within(r.point, c, r.std_error)


# -- budget -------------------------------------------------------------------------------------------------
def _budget_twin(n, total, up, mode):
    A = [list(row) for row in np.vstack([np.eye(n), -np.eye(n)])]
    b = [up] * n + [0.0] * n
    spec = {"kind": "polyhedron", "A": A, "b": b}
    if mode == "equal":
        spec.update(C=[[1.0] * n], d=[total])
    else:
        spec["A"] = A + [[1.0] * n]
        spec["b"] = b + [total]
    return setkit.compile(spec)


@pytest.mark.parametrize("mode,total,up", [("equal", 8.0, 4.0), ("equal", 2.5, 1.0), ("at_most", 10.0, 4.0),
                                           ("at_most", 8.0, 4.0), ("at_most", 2.5, 1.0)])
def test_symmetric_budget_closed_forms(mode, total, up):
    n = 5
    K = setkit.compile({"kind": "budget", "dim": n, "total": total, "upper": up, "mode": mode})
    twin = _budget_twin(n, total, up, mode)
    for measure in ("volume", "vertices"):
        r = K.centroid(measure, details=True)
        t = twin.centroid(measure, details=True)
        assert t.exact
        np.testing.assert_allclose(r.point, t.point, atol=1e-9)
    # directions: against Monte Carlo over the budget's own LMO
    d = K.centroid("directions", details=True)
    assert d.exact
    mc = K.centroid("directions", exact=False, details=True, rng=13, samples=6000)
    _within(mc.point, d.point, mc.std_error)


def test_symmetric_budget_vertex_sampler_is_uniform():
    n = 5
    K = setkit.compile({"kind": "budget", "dim": n, "total": 10.0, "upper": 4.0, "mode": "at_most"})
    V = _budget_twin(n, 10.0, 4.0, "at_most")
    # the distinct vertices: all-at-bounds points with at most 2 coordinates at 4 (1 + 5 + 10), and
    # points with 2 coordinates at 4 and one at 2 (5 * 6 = 30): 46 vertices (counted by hand)
    X = K.sample(46 * 150, "vertices", rng=14)
    assert V.contains(X).all()
    keys, counts = np.unique(np.round(X, 9), axis=0, return_counts=True)
    assert keys.shape[0] == 46
    assert scipy.stats.chisquare(counts).pvalue > 1e-3


def test_asymmetric_budget_falls_back_to_generic():
    K = setkit.compile({"kind": "budget", "dim": 3, "total": 2.0, "upper": [1.0, 1.5, 2.0]})
    r = K.centroid(details=True)
    assert r.method == "triangulation"
    assert K.contains(r.point)


# -- hull ---------------------------------------------------------------------------------------------------
def test_hull_centroids_against_scipy(rng):
    P = rng.standard_normal((30, 3))
    K = setkit.compile({"kind": "hull", "points": P.tolist()})
    np.testing.assert_allclose(K.centroid(), _delaunay_centroid(P), atol=1e-12)
    np.testing.assert_allclose(K.centroid("vertices"), P[ConvexHull(P).vertices].mean(axis=0), atol=1e-12)
    S = K.sample(400, "vertices", rng=15)
    ext = P[ConvexHull(P).vertices]
    assert np.all(np.min(np.abs(S[:, None, :] - ext[None]).max(axis=2), axis=1) == 0)


def test_hull_of_a_planar_point_set_in_space():
    # a square in the plane z = 1 with an interior point: 4 extreme points, centroid (0.5, 0.5, 1)
    K = setkit.compile({"kind": "hull", "points": [[0, 0, 1], [1, 0, 1], [1, 1, 1], [0, 1, 1], [0.3, 0.6, 1]]})
    np.testing.assert_allclose(K.centroid(), [0.5, 0.5, 1.0], atol=1e-12)
    np.testing.assert_allclose(K.centroid("vertices"), [0.5, 0.5, 1.0], atol=1e-12)
    X = K.sample(200, rng=16)                   # volume: hit-and-run on the membership oracle
    assert np.allclose(X[:, 2], 1.0, atol=1e-6) and K.contains(X, tol=1e-6).all()


# -- transport and flow: generic paths on the real families ---------------------------------------------------
def test_transport_centroid_matches_shoelace():
    # 2 x 3 transport polytope, free coordinates (x11, x12); the polygon's centroid by the shoelace-type
    # formula (Bourke, Calculating the area and centroid of a polygon, 1988; from memory)
    r_, c_ = [4.0, 5.0], [2.0, 3.0, 4.0]
    K = setkit.compile({"kind": "transport", "rows": r_, "cols": c_})
    u = shoelace_centroid(transport_2x3_polygon(r_, c_))
    x13 = r_[0] - u.sum()
    expect = np.array([[u[0], u[1], x13], [c_[0] - u[0], c_[1] - u[1], c_[2] - x13]])
    np.testing.assert_allclose(K.centroid(), expect, atol=1e-10)
    X = K.sample(300, rng=17)
    assert X.shape == (300, 2, 3) and K.contains(X).all()


def test_flow_polytope_centroid_and_samples():
    K = setkit.compile({"kind": "flow", "nodes": ["s", "a", "b", "t"],
                        "edges": [{"from": "s", "to": "a", "capacity": 3}, {"from": "s", "to": "b", "capacity": 3},
                                  {"from": "a", "to": "b", "capacity": 2}, {"from": "a", "to": "t", "capacity": 3},
                                  {"from": "b", "to": "t", "capacity": 3}],
                        "supply": {"s": 4, "t": -4}})
    r = K.centroid(details=True)
    assert r.exact and K.contains(r.point)
    est = K.centroid(exact=False, details=True, rng=18, samples=2000)
    _within(est.point, r.point, est.std_error)
    assert K.contains(K.sample(200, rng=19)).all()
