import numpy as np
import pytest

import setkit
import setkit.families.hull as hull_module
from setkit.errors import DescriptionError, SolveError
from setkit.kernels.hull import nearest_in_hull

from .setcheck import check_against_reference


@pytest.mark.parametrize("k, d", [(6, 3), (12, 4), (3, 5)])
def test_every_operator_matches_reference(k, d):
    rng = np.random.default_rng(k * d)
    K = setkit.compile({"kind": "hull", "points": rng.standard_normal((k, d)).tolist()})
    check_against_reference(K, rng)


def test_square_corners_give_the_box_projection():
    # conv{0,1}^2 is the unit square; its projection is the clip (common practice)
    K = setkit.compile({"kind": "hull", "points": [[0, 0], [1, 0], [0, 1], [1, 1], [0.5, 0.5]]})
    rng = np.random.default_rng(1)
    Y = 3 * rng.standard_normal((8, 2))
    np.testing.assert_allclose(K.project(Y), np.clip(Y, 0, 1), atol=1e-12)


def test_weights_reproduce_the_point_and_the_gap_certifies_it():
    rng = np.random.default_rng(2)
    V = rng.standard_normal((20, 6))
    y = 4 * rng.standard_normal(6)
    x, w, gap, cycles, ok = nearest_in_hull(V, y)
    assert ok and w.min() >= 0 and w.sum() == pytest.approx(1.0)
    np.testing.assert_allclose(w @ V, x, atol=1e-12)
    # optimality: <y - x, v - x> <= gap for every point v (variational inequality of the projection)
    assert np.max((V - x) @ (y - x)) <= gap + 1e-12


def test_lmo_and_support_scan_the_points():
    rng = np.random.default_rng(3)
    V = rng.standard_normal((9, 4))
    K = setkit.compile({"kind": "hull", "points": V})
    C = rng.standard_normal((5, 4))
    L = K.lmo(C)
    for c, x in zip(C, L):
        assert any(np.array_equal(x, v) for v in V)
        assert c @ x == pytest.approx(min(V @ c))
    np.testing.assert_allclose(K.support(C), (C @ V.T).max(axis=1))


def test_failed_convergence_raises(monkeypatch):
    real = nearest_in_hull
    monkeypatch.setattr(hull_module, "nearest_in_hull", lambda V, y: real(V, y, max_cycles=1))
    rng = np.random.default_rng(4)
    V = rng.standard_normal((10, 3))
    K = setkit.compile({"kind": "hull", "points": V})
    with pytest.raises(SolveError, match="did not converge"):
        K.project(V.mean(axis=0))      # inside: the answer is no vertex, so one cycle cannot finish


@pytest.mark.parametrize("points, where, match", [
    ([], "points", "at least one point"),
    ([[1, 2], [3]], "points", "numeric"),
    ([[[1, 2]]], "points", "matrix"),
])
def test_bad_points_are_located(points, where, match):
    with pytest.raises(DescriptionError, match=match) as exc:
        setkit.compile({"kind": "hull", "points": points})
    assert exc.value.location.key_path() == where
