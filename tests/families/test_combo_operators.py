"""Jacobian products and KL projections of the structured balls and combinatorial polytopes.

Families: owl_ball, group_ball, elastic_ball, ksupport_ball (Euclidean Jacobians; KL refused:
not inside the nonnegative orthant), matroid_bases, submodular_base, spanning_trees, paths
(Euclidean Jacobians and KL projections). Derivatives are checked by setkit.testing.check_derivatives
(central differences to 1e-6 relative at random points away from kinks, adjointness to 1e-10,
batches) and against closed forms; KL projections against the exponential-cone reference
(cvxpy + Clarabel, loose: Clarabel stops at "optimal_inaccurate" on some wide inputs) and the
capped-simplex capping rule.
"""
import warnings

import numpy as np
import pytest

import setkit
from setkit.derivatives import face_projector_rows
from setkit.errors import UnsupportedOperationError
from setkit.kernels.bregman import kl_certificate, kl_divergence
from setkit.testing import check_derivatives

BALLS = {
    "owl": {"kind": "owl_ball", "weights": [3.0, 2.0, 2.0, 1.0, 0.5, 0.5], "radius": 1.0},
    "owl_zero_weights": {"kind": "owl_ball", "weights": [1.0, 1.0, 0.0, 0.0], "radius": 2.5},
    "group": {"kind": "group_ball", "groups": [[0, 3], [1, 2, 4], [5]], "radius": 1.0, "weights": [1.0, 0.5, 2.0]},
    "elastic": {"kind": "elastic_ball", "dim": 6, "radius": 2.0, "mix": 0.5},
    "elastic_l2": {"kind": "elastic_ball", "dim": 4, "radius": 0.5, "mix": 0.0},
    "ksupport": {"kind": "ksupport_ball", "dim": 7, "k": 3, "radius": 1.0},
    "ksupport_l1": {"kind": "ksupport_ball", "dim": 5, "k": 1, "radius": 2.0},
}
POLYTOPES = {
    "matroid_uniform": {"kind": "matroid_bases", "form": "uniform", "dim": 6, "k": 2},
    "matroid_partition": {"kind": "matroid_bases", "form": "partition", "groups": [[0, 2, 4], [1, 3], [5, 6]],
                          "quotas": [2, 1, 0]},
    "submodular_concave": {"kind": "submodular_base", "function": "concave_cardinality", "values": [0, 4, 7, 9, 10, 10]},
    "submodular_coverage": {"kind": "submodular_base", "function": "coverage", "sets": [[0, 1], [1, 2, 3], [3], [0, 4]],
                            "item_weights": [1.0, 2.0, 0.5, 1.5, 1.0]},
    "spanning_trees": {"kind": "spanning_trees", "nodes": 5,
                       "edges": [[0, 1], [1, 2], [2, 3], [3, 4], [4, 0], [0, 2], [1, 3]]},
    "paths": {"kind": "paths", "edges": [["dock", "yard"], ["dock", "lane"], ["yard", "lane"], ["yard", "shed"],
                                         ["lane", "shed"]], "source": "dock", "target": "shed"},
}


def rank_matroid():
    # the graphic matroid of a triangle plus a pendant edge, by its rank oracle
    edges = [(0, 1), (1, 2), (0, 2), (2, 3)]

    def rank(S):
        parent = list(range(4))

        def find(a):
            while parent[a] != a:
                a = parent[a]
            return a
        r = 0
        for e in S:
            a, b = find(edges[e][0]), find(edges[e][1])
            if a != b:
                parent[a] = b
                r += 1
        return r
    return setkit.build("matroid_bases", form="rank", rank=rank, dim=4)


# -- Euclidean Jacobians ---------------------------------------------------------------------------
@pytest.mark.parametrize("name", sorted(BALLS) + sorted(POLYTOPES))
def test_jacobian_products_native_and_checked(name):
    K = setkit.compile({**BALLS, **POLYTOPES}[name])
    assert K.routes()["project_jvp"].category == "native"
    out = check_derivatives(K, seed=1, points=4)
    assert all(o.worst <= 1 for o in out)
    assert K.project_jvp(np.zeros((0, K.dim)), np.zeros((0, K.dim))).shape == (0, K.dim)


def test_rank_oracle_matroid_derivatives():
    K = rank_matroid()
    assert all(o.worst <= 1 for o in check_derivatives(K, seed=2, points=3))
    assert all(o.worst <= 1 for o in check_derivatives(K, seed=2, points=3, geometry="kl"))


def l1_face(y, p, v):
    """J v of the l1-ball projection at an outside point: on the support S, v - s <s, v>/|S| (sign pattern s)."""
    S = p != 0
    s = np.sign(p) * S
    return np.where(S, v - s * (s @ v) / S.sum(), 0.0)


def l2_face(y, r, v):
    """J v of the l2-ball projection r y/||y|| outside: (r/||y||)(v - e <e, v>), e = y/||y|| (calculus)."""
    e = y / np.linalg.norm(y)
    return r / np.linalg.norm(y) * (v - e * (e @ v))


def test_closed_forms_l1_and_l2_special_cases(rng):
    # owl with unit weights and k-support with k = 1 are l1 balls; elastic with mix 1 too (radius r/mix);
    # a single group, elastic with mix 0 (radius sqrt(2 r)) and k-support with k = n are l2 balls.
    # Closed forms: the l1 face projector (Duchi, Shalev-Shwartz, Singer, Chandra 2008 for the projection;
    # the face rule of Martins & Astudillo 2016 for its derivative, from memory) and the l2 radial map.
    n = 6
    y = 3.0 * rng.standard_normal(n)
    v = rng.standard_normal(n)
    for spec in ({"kind": "owl_ball", "weights": [1.0] * n, "radius": 1.5},
                 {"kind": "ksupport_ball", "dim": n, "k": 1, "radius": 1.5},
                 {"kind": "elastic_ball", "dim": n, "mix": 1.0, "radius": 1.5}):
        K = setkit.compile(spec)
        p = K.project(y)
        np.testing.assert_allclose(K.project_jvp(y, v), l1_face(y, p, v), atol=1e-12)
    for spec, r in (({"kind": "group_ball", "groups": [list(range(n))], "radius": 1.5}, 1.5),
                    ({"kind": "elastic_ball", "dim": n, "mix": 0.0, "radius": 1.125}, 1.5),
                    ({"kind": "ksupport_ball", "dim": n, "k": n, "radius": 1.5}, 1.5),
                    ({"kind": "owl_ball", "weights": [1.0] + [0.0] * (n - 1), "radius": 1.5}, None)):
        K = setkit.compile(spec)
        if r is None:      # w = e_1: the l-infinity ball; J = I off the clipped coordinates, 0 on them
            p = K.project(y)
            clipped = np.abs(np.abs(p) - 1.5) < 1e-12
            np.testing.assert_allclose(K.project_jvp(y, v), np.where(clipped, 0.0, v), atol=1e-12)
            continue
        np.testing.assert_allclose(K.project_jvp(y, v), l2_face(y, r, v), atol=1e-12)


def test_group_ball_jacobian_is_a_symmetric_contraction():
    # two active groups: the Jacobian of a Euclidean projection is symmetric with eigenvalues in [0, 1]
    # (the projection is the gradient of a convex function and is firmly nonexpansive; common practice)
    K = setkit.compile({"kind": "group_ball", "groups": [[0, 1], [2, 3, 4]], "radius": 1.0, "weights": [1.0, 2.0]})
    y = np.array([2.0, 1.0, 0.7, -0.4, 0.3])
    J = K.project_jvp(np.repeat(y[None], 5, 0), np.eye(5))
    np.testing.assert_allclose(J, J.T, atol=1e-14)                     # symmetric (a gradient map)
    assert np.all(np.linalg.eigvalsh(J) >= -1e-12) and np.all(np.linalg.eigvalsh(J) <= 1 + 1e-12)


def test_kinks_follow_the_smallest_face_rule():
    # inside: identity; exactly on the boundary: the constraint stays active
    K = setkit.compile({"kind": "group_ball", "groups": [[0, 1], [2]], "radius": 1.0})
    v = np.array([1.0, 2.0, 3.0])
    np.testing.assert_allclose(K.project_jvp([0.1, 0.1, 0.1], v), v)
    on = np.array([0.6, 0.8, 0.0])           # ||x_0|| = 1: on the boundary, group 1 at 0 (inactive)
    Jv = K.project_jvp(on, v)
    assert Jv[2] == 0.0
    assert abs(Jv[:2] @ on[:2]) <= 1e-12     # tangent to the sphere of the active group
    # OWL: equal magnitudes of the answer are one block (a tie keeps the pooling)
    O = setkit.compile({"kind": "owl_ball", "weights": [2.0, 1.0, 0.5], "radius": 1.0})
    y = np.array([3.0, -3.0, 0.1])
    Jv = O.project_jvp(y, np.array([1.0, 0.0, 0.0]))
    p = O.project(y)
    assert p[0] == -p[1] and Jv[0] == -Jv[1]
    # matroid: a coordinate exactly at a bound is fixed
    M = setkit.compile(POLYTOPES["matroid_uniform"])
    assert M.project_jvp([5.0, 0.5, 0.4, 0.3, -5.0, 0.2], np.ones(6))[[0, 4]].tolist() == [0.0, 0.0]


def test_polytope_faces_against_outside_closed_forms(rng):
    # parallel s-t edges: the path polytope is the simplex, whose projection's Jacobian is
    # I_S - 1 1^T/|S| on the support (Martins & Astudillo 2016, sparsemax; from memory)
    P = setkit.compile({"kind": "paths", "nodes": 2, "edges": [[0, 1]] * 5, "source": 0, "target": 1})
    y = np.array([0.9, 0.7, 0.1, -0.5, 0.8])
    v = rng.standard_normal(5)
    p = P.project(y)
    S = p > 0
    np.testing.assert_allclose(P.project_jvp(y, v), np.where(S, v - v[S].mean(), 0.0), atol=1e-12)
    # a cycle C_5: the spanning trees drop one edge, so the polytope is {0 <= x <= 1, sum x = 4}, a capped
    # simplex: J v = v_F - mean(v_F) on the free edges (the same face rule)
    T = setkit.compile({"kind": "spanning_trees", "nodes": 5, "edges": [[0, 1], [1, 2], [2, 3], [3, 4], [4, 0]]})
    y = np.array([0.9, 0.6, 0.3, 1.4, 0.2])       # p = clip(y + 0.3, 0, 1) = (1, 0.9, 0.6, 1, 0.5)
    p = T.project(y)
    F = (p > 1e-9) & (p < 1 - 1e-9)
    np.testing.assert_allclose(T.project_jvp(y, v), np.where(F, v - v[F].mean(), 0.0), atol=1e-8)
    # concave of cardinality = the permutahedron of the marginals: same Jacobian as that family
    C = setkit.compile(POLYTOPES["submodular_concave"])
    W = setkit.compile({"kind": "permutahedron", "weights": [4.0, 3.0, 2.0, 1.0, 0.0]})
    Y, V = rng.standard_normal((4, 5)) * 3, rng.standard_normal((4, 5))
    np.testing.assert_allclose(C.project_jvp(Y, V), W.project_jvp(Y, V), atol=1e-12)
    # paths: the sparse Laplacian route equals the dense active-set route on the linear form
    K = setkit.compile(POLYTOPES["paths"])
    Y = rng.standard_normal((4, K.dim))
    np.testing.assert_allclose(K.project_jvp(Y, V[:, :K.dim]),
                               face_projector_rows(K.linear_form(), K.project(Y), V[:, :K.dim]), atol=1e-12)


# -- KL projections --------------------------------------------------------------------------------
KL_SETS = ["matroid_uniform", "matroid_partition", "submodular_concave", "submodular_coverage", "spanning_trees"]


def wide_inputs(rng, n):
    # y from 1e-6 to 1e6 (t in [-14, 14]), moderate rows and one with ties
    return np.concatenate([rng.uniform(-1, 1, (1, n)), rng.uniform(-5, 5, (1, n)), rng.uniform(-14, 14, (1, n)),
                           np.round(rng.uniform(-2, 2, (1, n)))])


@pytest.mark.parametrize("name", KL_SETS)
def test_kl_projection_against_reference(rng, name):
    K = setkit.compile(POLYTOPES[name])
    assert K.routes()["project_kl"].provider == "native"
    T = wide_inputs(rng, K.dim)
    X, _ = K.run("project_kl", T)
    with warnings.catch_warnings():          # the loose reference may warn about an inaccurate stop
        warnings.simplefilter("ignore")
        R, _ = K.with_backends(project_kl="reference", loose=True).run("project_kl", T)
    assert np.all(X >= 0) and np.all(K.violation(X) <= 1e-9)
    assert np.abs(X - R).max() <= 2e-5 * max(1.0, np.abs(R).max())
    kx, kr = kl_divergence(T, X), kl_divergence(T, R)
    assert np.all(kx <= kr + 1e-8 * (1 + np.abs(kr)))
    gap = kl_certificate(T, X, lambda G: K.run("lmo", G)[0])
    assert np.all(np.abs(gap) <= 1e-12 * (1 + np.abs(kx)) * K.dim)
    d = K.project(T, geometry="kl", log_input=True, details=True)
    assert np.all(np.abs(np.asarray(d.certificate)) <= 1e-10)
    np.testing.assert_allclose(K.run("project_kl", T[2:3])[0], X[2:3], rtol=1e-12, atol=1e-15)
    assert K.run("project_kl", np.zeros((0, K.dim)))[0].shape == (0, K.dim)


def capping_rule(y, k):
    """KL projection onto {0 <= x <= 1, sum x = k} by capping (Warmuth & Kuzmin 2008, from memory):
    cap the largest entries at 1 one by one and rescale the rest to the remaining mass."""
    order = np.argsort(-y)
    x = np.zeros_like(y)
    for c in range(k + 1):
        rest = order[c:]
        scaled = y[rest] * (k - c) / y[rest].sum()
        if scaled.max(initial=0.0) <= 1.0 + 1e-15:
            x[order[:c]] = 1.0
            x[rest] = scaled
            return x
    raise AssertionError("no capping level")


def test_kl_uniform_matroid_and_cycle_trees_equal_the_capping_rule(rng):
    U = setkit.compile({"kind": "matroid_bases", "form": "uniform", "dim": 8, "k": 3})
    T = setkit.compile({"kind": "spanning_trees", "nodes": 6, "edges": [[i, (i + 1) % 6] for i in range(6)]})
    for _ in range(5):
        y = np.exp(rng.uniform(-4, 4, 8))
        np.testing.assert_allclose(U.project(y, geometry="kl"), capping_rule(y, 3), rtol=1e-12)
        y6 = np.exp(rng.uniform(-4, 4, 6))
        np.testing.assert_allclose(T.project(y6, geometry="kl"), capping_rule(y6, 5), rtol=1e-9, atol=1e-12)


def test_kl_rank_oracle_matroid_against_reference(rng):
    K = rank_matroid()
    T = rng.uniform(-3, 3, (3, 4))
    X = K.project(T, geometry="kl", log_input=True)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        R = K.with_backends(project_kl="reference", loose=True).project(T, geometry="kl", log_input=True)
    assert np.abs(X - R).max() <= 2e-5
    # the pendant edge is a bridge: in every base
    np.testing.assert_allclose(X[:, 3], 1.0, atol=1e-12)


@pytest.mark.parametrize("name", ["matroid_partition", "submodular_coverage", "spanning_trees"])
def test_kl_jacobians(name):
    K = setkit.compile(POLYTOPES[name])
    assert K.routes()["project_kl_jvp"].category == "native"
    assert all(o.worst <= 1 for o in check_derivatives(K, seed=3, points=3, geometry="kl"))


@pytest.mark.parametrize("spec", list(BALLS.values()) + [
    {"kind": "submodular_base", "function": "cut", "edges": [[0, 1, 2.0], [1, 2, 1.0]]}])
def test_kl_refused_outside_the_orthant(spec):
    K = setkit.compile(spec)
    with pytest.raises(UnsupportedOperationError, match="nonnegative orthant"):
        K.project(np.ones(K.dim), geometry="kl")


def test_kl_of_a_zero_radius_ball_is_the_origin():
    K = setkit.compile({"kind": "owl_ball", "weights": [1.0, 0.5], "radius": 0.0})
    assert K.project([1.0, 2.0], geometry="kl").tolist() == [0.0, 0.0]


def test_paths_kl(rng):
    # paths projects in KL natively with the flow family's dual Newton (unit supply, capacities 1);
    # the answer is in the set with a tiny KL certificate and agrees with the exponential-cone reference
    K = setkit.compile(POLYTOPES["paths"])
    assert K.routes()["project_kl"].provider == "native"
    t = rng.uniform(-1, 1, (2, K.dim))
    X = K.project(t, geometry="kl", log_input=True)
    assert np.all(K.violation(X) <= 1e-9) and np.all(X >= 0.0)
    gap = kl_certificate(t, X, lambda G: K.run("lmo", G)[0])
    assert np.all(gap <= 1e-9)
    R = K.with_backends(project_kl="reference").project(t, geometry="kl", log_input=True)
    assert np.abs(X - R).max() <= 1e-5
