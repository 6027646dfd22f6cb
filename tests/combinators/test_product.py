"""Products: block-wise operators, grouping of identical blocks into one batched call, nesting."""
import numpy as np
import pytest

import setkit
from setkit.combinators.product import Product
from setkit.kernels.simplex import project_simplex_rows

from .fixtures import ball, check_against_reference, halfspaces


def test_mixed_blocks_against_reference(rng):
    K = setkit.compile({"kind": "product", "of": [
        {"kind": "simplex", "dim": 3, "total": 2.0},
        {"kind": "box", "dim": 2, "lower": -1, "upper": [0.5, 3.0]},
        {"kind": "simplex", "dim": 3, "total": 2.0},
        {"kind": "simplex", "dim": 4, "mode": "at_most"}]})
    assert K.shape == (12,)
    assert len(K.node.blocks) == 3 and K.node.layout == (0, 1, 0, 2)   # the two equal simplices grouped
    check_against_reference(K, rng)


def test_identical_blocks_are_one_batched_call(rng, monkeypatch):
    # 500 per-user simplices: the simplex kernel must be called once per operator call, not 500 times
    K = setkit.compile({"kind": "product", "of": [{"kind": "simplex", "dim": 7}], "copies": 500})
    assert len(K.node.blocks) == 1 and K.dim == 3500
    from setkit.families.simplex import Simplex
    calls = []
    orig = Simplex.project

    def counting(self, Y):
        calls.append(Y.shape)
        return orig(self, Y)
    monkeypatch.setattr(Simplex, "project", counting)
    Y = rng.standard_normal((4, K.dim))
    P = K.project(Y)
    assert calls == [(2000, 7)]
    # same answer as the row-wise closed form (Held, Wolfe and Crowder 1974 sort-and-threshold)
    assert np.allclose(P, project_simplex_rows(Y.reshape(-1, 7), 1.0).reshape(4, -1), atol=1e-12)


def test_block_projection_identity(rng):
    # projection onto a Cartesian product is the product of the projections
    # (Bauschke and Combettes, Convex Analysis and Monotone Operator Theory in Hilbert Spaces, 2011,
    #  Prop. 29.3, from memory); checked with independent per-block calls
    blocks = [{"kind": "simplex", "dim": 4}, {"kind": "box", "dim": 3, "lower": 0, "upper": 1},
              {"kind": "simplex", "dim": 2, "total": 3.0}]
    K = setkit.compile({"kind": "product", "of": blocks})
    y = rng.standard_normal(9) * 3
    parts = [setkit.compile(b) for b in blocks]
    expect = np.concatenate([parts[0].project(y[:4]), parts[1].project(y[4:7]), parts[2].project(y[7:])])
    assert np.allclose(K.project(y), expect, atol=1e-12)
    c = rng.standard_normal(9)
    assert K.support(c) == pytest.approx(parts[0].support(c[:4]) + parts[1].support(c[4:7]) + parts[2].support(c[7:]))
    d = np.sqrt(parts[0].distance(y[:4]) ** 2 + parts[1].distance(y[4:7]) ** 2 + parts[2].distance(y[7:]) ** 2)
    assert K.distance(y) == pytest.approx(d)


def test_intersection_inside_a_product(rng):
    n = 4
    cut = {"kind": "intersection", "of": [ball(np.zeros(n), 1.0), halfspaces(np.ones((1, n)), [0.5])]}
    capped = {"kind": "intersection", "of": [{"kind": "simplex", "dim": 3},
                                             {"kind": "box", "dim": 3, "lower": 0, "upper": 0.6}]}
    K = setkit.compile({"kind": "product", "of": [cut, capped, cut]})
    assert K.shape == (11,)
    assert len(K.node.blocks) == 2
    check_against_reference(K, rng, n=2)


def test_product_inside_an_intersection(rng):
    # (simplex x simplex) ∩ {x_0 + x_3 <= 0.8}: a coupling cut across the blocks
    prod = {"kind": "product", "of": [{"kind": "simplex", "dim": 3}], "copies": 2}
    A = np.zeros((1, 6))
    A[0, [0, 3]] = 1.0
    K = setkit.compile({"kind": "intersection", "of": [prod, halfspaces(A, [0.8])]})
    check_against_reference(K, rng, n=2)


def test_contains_and_violation_blockwise():
    K = setkit.compile({"kind": "product", "of": [{"kind": "simplex", "dim": 2},
                                                  {"kind": "box", "dim": 1, "lower": 0, "upper": 1}]})
    X = np.array([[0.5, 0.5, 0.5], [0.5, 0.5, 1.5], [0.9, 0.5, 0.0]])
    assert K.contains(X).tolist() == [True, False, False]
    assert np.allclose(K.violation(X), [0.0, 0.5, 0.4])


def test_empty_of_is_an_error():
    with pytest.raises(setkit.DescriptionError, match="at least 1"):
        setkit.compile({"kind": "product", "of": []})
    with pytest.raises(setkit.DescriptionError, match="copies must be at least 1"):
        setkit.compile({"kind": "product", "of": [{"kind": "simplex", "dim": 2}], "copies": 0})


def test_linear_form_is_block_diagonal(rng):
    K = setkit.compile({"kind": "product", "of": [{"kind": "simplex", "dim": 3}], "copies": 3})
    f = K.node.linear_form()
    assert f.n_x == 9 and f.A_eq.shape == (3, 9)
    # the OSQP backend on the stacked form agrees with the batched native kernel
    y = rng.standard_normal(9)
    assert np.allclose(K.with_backends(project="osqp").project(y), K.project(y), atol=1e-7)
    assert isinstance(K.node, Product)


def test_simplices_with_different_totals_are_one_stacked_call(rng, monkeypatch):
    # per-user budgets differ: {x >= 0, sum x = t} = t {x >= 0, sum x = 1} lets one call serve them all
    totals = np.round(rng.uniform(0.5, 5.0, 300), 3)
    K = setkit.compile({"kind": "product", "of": [{"kind": "simplex", "dim": 5, "total": float(t)} for t in totals]})
    assert len(K.node.blocks) == len(set(totals.tolist())) > 250
    from setkit.families.simplex import Simplex
    calls = []
    orig = Simplex.project

    def counting(self, Y):
        calls.append(Y.shape)
        return orig(self, Y)
    monkeypatch.setattr(Simplex, "project", counting)
    Y = rng.standard_normal((2, K.dim)) * 3
    P = K.project(Y)
    assert calls == [(600, 5)]
    for j in (0, 123, 299):
        blk = Y[:, 5 * j:5 * j + 5]
        assert np.allclose(P[:, 5 * j:5 * j + 5], project_simplex_rows(blk, totals[j]), atol=1e-12)
    c = rng.standard_normal(K.dim)
    assert K.support(c) == pytest.approx(float(np.sum(totals * c.reshape(300, 5).max(axis=1))))
    L = K.lmo(c).reshape(300, 5)
    assert np.allclose(L.sum(axis=1), totals)
    assert np.allclose(K.violation(P), 0.0, atol=1e-12) and K.contains(P).all()


def test_stacked_blocks_against_reference(rng):
    K = setkit.compile({"kind": "product", "of": [
        {"kind": "simplex", "dim": 3, "total": 2.0}, {"kind": "simplex", "dim": 3, "total": 0.5},
        {"kind": "box", "dim": 2, "lower": 0, "upper": 1}, {"kind": "simplex", "dim": 3, "total": 7.0, "mode": "at_most"},
        {"kind": "simplex", "dim": 3, "total": 1.5, "mode": "at_most"}]})
    kinds = [e[0] for e in K.node._groups()]
    assert kinds.count("stack") == 2 and kinds.count("block") == 1
    check_against_reference(K, rng)


def test_nested_intersections_and_images(rng):
    # (simplex ∩ box) ∩ halfspace, and an affine image of that, against the reference
    inner = {"kind": "intersection", "of": [{"kind": "simplex", "dim": 4},
                                            {"kind": "box", "dim": 4, "lower": 0, "upper": 0.6}]}
    K = setkit.compile({"kind": "intersection", "of": [inner, halfspaces([[1.0, -1.0, 0.0, 0.0]], [0.1])]})
    check_against_reference(K, rng, n=2)
    A = setkit.compile({"kind": "affine", "set": inner, "scale": -3.0, "shift": [1.0, 2.0, 3.0, 4.0]})
    check_against_reference(A, rng, n=2)
