"""Matroid base polytopes (uniform, partition, rank oracle): reference and outside facts."""
import itertools

import networkx as nx
import numpy as np
import pytest

import setkit
from setkit.errors import DescriptionError

from .helpers import check_against_reference, check_batch_shapes, check_inside_fixed, sample_points

PARTITION = {"kind": "matroid_bases", "form": "partition", "groups": [[0, 3, 5], [1, 4], [2, 6, 7]],
             "quotas": [2, 1, 0]}


def bases_brute_force(n, rank):
    """Every basis of a matroid on n elements: the subsets of size rank(V) with that rank."""
    r = rank(frozenset(range(n)))
    out = []
    for sub in itertools.combinations(range(n), int(r)):
        if rank(frozenset(sub)) == r:
            x = np.zeros(n)
            x[list(sub)] = 1.0
            out.append(x)
    return np.array(out)


@pytest.mark.parametrize("spec", [{"kind": "matroid_bases", "form": "uniform", "dim": 7, "k": 3}, PARTITION],
                         ids=["uniform", "partition"])
def test_every_operator_matches_the_reference(spec):
    rng = np.random.default_rng(0)
    K = setkit.compile(spec)
    Y = sample_points(K, rng, k=2)
    C = rng.standard_normal((5, K.dim))
    C[0] = np.round(C[0])
    C[1] = 1.0
    C[2] *= 1e6
    check_against_reference(K, Y, C)
    check_inside_fixed(K, K.lmo(rng.standard_normal((3, K.dim))))
    check_batch_shapes(K, rng)


def test_greedy_is_optimal_edmonds():
    # Edmonds (1971): the greedy algorithm finds a minimum-cost basis of any matroid; brute force over
    # all k-subsets (uniform) and all quota-respecting choices (partition)
    rng = np.random.default_rng(1)
    K = setkit.compile({"kind": "matroid_bases", "dim": 7, "k": 3})
    B = bases_brute_force(7, lambda S: min(len(S), 3))
    assert len(B) == 35
    C = rng.integers(-3, 4, (30, 7)).astype(float)    # many ties
    np.testing.assert_allclose(np.einsum("ij,ij->i", C, K.lmo(C)), (C @ B.T).min(axis=1))
    Kp = setkit.compile(PARTITION)
    groups = PARTITION["groups"]
    Bp = bases_brute_force(8, lambda S: sum(min(len(S & set(g)), q) for g, q in zip(groups, PARTITION["quotas"])))
    assert len(Bp) == 3 * 2 * 1
    C8 = rng.normal(size=(30, 8))
    np.testing.assert_allclose(np.einsum("ij,ij->i", C8, Kp.lmo(C8)), (C8 @ Bp.T).min(axis=1))


def test_uniform_matches_the_budget_family():
    # the capped simplex {0 <= x <= 1, sum x = k} is also a budget set
    rng = np.random.default_rng(2)
    K = setkit.compile({"kind": "matroid_bases", "dim": 9, "k": 4})
    Bud = setkit.compile({"kind": "budget", "dim": 9, "total": 4, "upper": 1.0})
    Y = 3 * rng.standard_normal((5, 9))
    np.testing.assert_allclose(K.project(Y), Bud.project(Y), atol=1e-12)
    np.testing.assert_allclose(K.support(Y), Bud.support(Y), atol=1e-12)


def test_rank_oracle_graphic_matroid_equals_spanning_trees():
    # the graphic matroid's bases are the spanning trees (rank = n - components, networkx)
    rng = np.random.default_rng(3)
    edges = [(0, 1), (1, 2), (2, 3), (3, 0), (0, 2), (1, 3), (3, 4), (4, 0)]

    def rank(S):
        H = nx.MultiGraph()
        H.add_nodes_from(range(5))
        H.add_edges_from(edges[i] for i in S)
        return 5 - nx.number_connected_components(H)
    K = setkit.build("matroid_bases", form="rank", rank=rank, dim=len(edges))
    T = setkit.compile({"kind": "spanning_trees", "nodes": 5, "edges": [list(e) for e in edges]})
    Y = rng.standard_normal((4, len(edges)))
    np.testing.assert_allclose(K.project(Y), T.project(Y), atol=1e-9)
    np.testing.assert_allclose(K.support(Y), T.support(Y), atol=1e-12)
    np.testing.assert_allclose(K.violation(Y), T.violation(Y), atol=1e-12)
    ref = K.with_backends(project="reference", lmo="reference")
    np.testing.assert_allclose(K.project(Y), ref.project(Y), atol=2e-5)


def test_rank_oracle_linear_matroid_against_brute_force():
    # a linear matroid: independent columns of a matrix (numpy.linalg.matrix_rank)
    rng = np.random.default_rng(4)
    A = rng.integers(-1, 2, (3, 7)).astype(float)
    A[:, 6] = A[:, 0] + A[:, 1]

    def rank(S):
        return int(np.linalg.matrix_rank(A[:, sorted(S)])) if S else 0
    K = setkit.build("matroid_bases", form="rank", rank=rank, dim=7)
    B = bases_brute_force(7, rank)
    C = rng.normal(size=(15, 7))
    np.testing.assert_allclose(np.einsum("ij,ij->i", C, K.lmo(C)), (C @ B.T).min(axis=1), atol=1e-12)
    Y = rng.normal(size=(3, 7))
    det = K.project(Y[0], details=True)
    assert det.status == "solved" and det.certificate <= 1e-12
    check_against_reference(K, Y, C[:3])


def test_centroid_and_samples():
    K = setkit.compile(PARTITION)
    np.testing.assert_allclose(K.centroid(measure="vertices"), [2 / 3, 1 / 2, 0, 2 / 3, 1 / 2, 2 / 3, 0, 0])
    S = K.sample(3000, measure="vertices", rng=np.random.default_rng(5))
    assert np.all(K.violation(S) == 0)
    np.testing.assert_allclose(S.mean(axis=0), K.centroid(measure="vertices"), atol=0.05)


def test_extreme_magnitudes_and_degenerate_quotas():
    K = setkit.compile({"kind": "matroid_bases", "form": "partition", "groups": [[0, 1], [2, 3]], "quotas": [0, 2]})
    rng = np.random.default_rng(6)
    for s in (1e-300, 1.0, 1e300):
        P = K.project(s * rng.standard_normal((3, 4)))
        np.testing.assert_array_equal(P, np.tile([0.0, 0.0, 1.0, 1.0], (3, 1)))


def test_located_errors():
    with pytest.raises(DescriptionError, match=r"k\).*at most dim = 3"):
        setkit.compile({"kind": "matroid_bases", "dim": 3, "k": 4})
    with pytest.raises(DescriptionError, match=r"quotas\).*quotas\[1\].*between 0 and the size of groups\[1\], 1"):
        setkit.compile({"kind": "matroid_bases", "groups": [[0, 1], [2]], "quotas": [1, 2]})
    with pytest.raises(DescriptionError, match=r"groups\[1\]\).*element 1 is in groups\[0\] and groups\[1\]"):
        setkit.compile({"kind": "matroid_bases", "groups": [[0, 1], [1, 2]], "quotas": [1, 1]})
    with pytest.raises(DescriptionError, match=r"element 1 is in no group"):
        setkit.compile({"kind": "matroid_bases", "groups": [[0], [2]], "quotas": [1, 1]})
    with pytest.raises(DescriptionError, match=r"rank\).*Python function.*builder only"):
        setkit.compile({"kind": "matroid_bases", "form": "rank", "rank": "rank.py", "dim": 3})
    with pytest.raises(DescriptionError, match=r"rank of a single element must be 0 or 1"):
        setkit.build("matroid_bases", form="rank", rank=lambda S: 2 * len(S), dim=3)
    with pytest.raises(DescriptionError, match=r"not submodular"):
        setkit.build("matroid_bases", form="rank", rank=lambda S: min(len(S), 1) if len(S) < 3 else 3, dim=3)
