"""centered(measure): the set shifted so that its centroid is the origin."""
import numpy as np
import pytest

import setkit


def test_centered_box_is_symmetric(rng):
    K = setkit.compile({"kind": "box", "dim": 3, "lower": [0, -1, 2], "upper": [2, 3, 2.5]})
    C = K.centered("volume")
    assert C.node.is_scaled and C.routes()["project"].provider == "change_of_variables"
    # the uniform law on a box has the midpoint as its mean (common practice)
    mid = np.array([1.0, 1.0, 2.25])
    assert np.allclose(C.node.shift, -mid)
    c = rng.standard_normal((5, 3))
    assert np.allclose(C.support(c), C.support(-c))           # a centred box is symmetric
    assert np.allclose(C.centroid("volume"), 0.0, atol=1e-12)
    y = rng.standard_normal((4, 3)) * 3
    assert np.allclose(C.project(y), K.project(y + mid) - mid)


@pytest.mark.parametrize("measure", ["volume", "vertices"])
def test_centered_simplex(measure):
    K = setkit.compile({"kind": "simplex", "dim": 4, "total": 2.0})
    C = K.centered(measure)
    # by symmetry the centroid of {x >= 0, sum x = 2} is (1/2, ..., 1/2) for both measures
    assert np.allclose(C.node.shift, -0.5)
    c = [1.0, 0.0, 0.3, 0.2]
    assert np.allclose(C.lmo(c), [-0.5, 1.5, -0.5, -0.5])        # vertex 2 e_2, shifted
    assert C.contains(np.zeros(4))
    assert np.allclose(C.centroid(measure), 0.0, atol=1e-12)


def test_random_decision_of_a_centered_set_has_zero_linear_loss():
    # E <c, x> = <c, centroid> = 0 for x uniform on the centred set; checked on exact samples
    K = setkit.compile({"kind": "simplex", "dim": 5, "mode": "at_most"}).centered("volume")
    X = K.sample(40_000, measure="volume", rng=7)
    c = np.array([1.0, -2.0, 0.5, 3.0, 0.0])
    loss = X @ c
    assert abs(loss.mean()) <= 4 * loss.std() / np.sqrt(loss.size)
    # the at_most simplex centroid is total/(n+1) per coordinate (uniform Dirichlet, common practice)
    assert np.allclose(K.node.shift, -1.0 / 6.0)


def test_centroid_hooks_of_products_and_images():
    P = setkit.compile({"kind": "product", "of": [{"kind": "simplex", "dim": 2},
                                                  {"kind": "box", "dim": 1, "lower": 1, "upper": 3}]})
    assert np.allclose(P.centroid("volume"), [0.5, 0.5, 2.0])
    A = setkit.compile({"kind": "affine", "set": {"kind": "simplex", "dim": 2}, "scale": -2.0, "shift": 1.0})
    assert np.allclose(A.centroid("vertices"), [0.0, 0.0])
    C = P.centered()
    assert np.allclose(C.centroid(), 0.0, atol=1e-12)


def test_centered_capped_simplex_uses_the_measures_module():
    # a small polytope: setkit.measures computes its volume centroid exactly (triangulation);
    # the centred set then has centroid 0 and the same shape of support function, shifted
    K = setkit.compile({"kind": "intersection", "of": [{"kind": "simplex", "dim": 3},
                                                       {"kind": "box", "dim": 3, "lower": 0, "upper": 0.6}]})
    c = K.centroid("volume")
    # the set is symmetric under permutations of the coordinates, so its centroid is (1/3, 1/3, 1/3)
    assert np.allclose(c, 1.0 / 3.0, atol=1e-9)
    C = K.centered("volume")
    d = np.array([0.3, -1.0, 2.0])
    assert C.support(d) == pytest.approx(K.support(d) - d @ c)
    assert np.allclose(C.centroid("volume"), 0.0, atol=1e-9)
