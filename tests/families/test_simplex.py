"""simplex: every operator against the cvxpy reference, closed forms, bad input."""
import numpy as np
import pytest

import setkit
from setkit.errors import DescriptionError
from setkit.kernels.simplex import project_simplex_rows, project_simplex_sorted

from .helpers import check_against_reference, check_batch_shapes, check_inside_fixed, sample_points


@pytest.mark.parametrize("mode", ["equal", "at_most"])
@pytest.mark.parametrize("total", [1e-3, 1.0, 1e6])
def test_simplex_against_reference(rng, mode, total):
    K = setkit.compile({"kind": "simplex", "dim": 7, "total": total, "mode": mode})
    Y = sample_points(K, rng)
    C = np.concatenate([rng.standard_normal((4, 7)), np.round(rng.standard_normal((2, 7)))])
    check_against_reference(K, Y, C)
    check_batch_shapes(K, rng)


def test_simplex_inside_points_are_fixed(rng):
    K = setkit.simplex(dim=5, total=2.0)
    X = 2.0 * rng.dirichlet(np.ones(5), size=6)
    check_inside_fixed(K, X)
    Ka = setkit.simplex(dim=5, total=2.0, mode="at_most")
    check_inside_fixed(Ka, 0.5 * X)


def test_simplex_projection_hand_solved():
    # hand-solved (common practice): tau = (1 + 0.5 - 1) / 2 = 0.25 for y = (1, 0.5, -1)
    K = setkit.simplex(dim=3)
    np.testing.assert_allclose(K.project([1.0, 0.5, -1.0]), [0.75, 0.25, 0.0], atol=1e-15)
    np.testing.assert_allclose(K.project([0.5, 0.5, 0.5]), [1 / 3] * 3, atol=1e-15)
    # two coordinates: x1 = clip((1 + y1 - y2) / 2, 0, 1) (common practice, from the KKT conditions)
    for y1, y2 in [(0.3, 0.1), (5.0, -2.0), (-1.0, 0.2), (0.0, 0.0)]:
        x1 = min(max((1 + y1 - y2) / 2, 0.0), 1.0)
        np.testing.assert_allclose(K.project([y1, y2, -50.0])[:2], [x1, 1 - x1], atol=1e-14)


def _wang_carreira_perpinan(y):
    # Wang and Carreira-Perpinan, "Projection onto the probability simplex: an efficient algorithm
    # with a simple proof, and an application", 2013, Algorithm 1 (from memory):
    # u = sort(y) decreasing; rho = max{j : u_j + (1 - sum_{i<=j} u_i) / j > 0};
    # lambda = (1 - sum_{i<=rho} u_i) / rho; x = max(y + lambda, 0).
    u = np.sort(y)[::-1]
    rho = max(j for j in range(1, len(u) + 1) if u[j - 1] + (1 - u[:j].sum()) / j > 0)
    lam = (1 - u[:rho].sum()) / rho
    return np.maximum(y + lam, 0)


def test_simplex_projection_published_closed_form(rng):
    K = setkit.simplex(dim=40)
    Y = np.concatenate([rng.standard_normal((20, 40)) * 10 ** rng.uniform(-3, 6, (20, 1)),
                        np.round(rng.standard_normal((5, 40)))])
    P = K.project(Y)
    for y, p in zip(Y, P):
        np.testing.assert_allclose(p, _wang_carreira_perpinan(y), atol=1e-12 * max(1, np.abs(y).max()))


def test_simplex_kernel_paths_agree(rng):
    # the compiled fixed point, its sort fallback and the long-vector path give the same points
    for shape in [(50, 3), (20, 200), (1, 100_000)]:
        Y = rng.standard_normal(shape) * 3
        Y[:, : shape[1] // 3] = Y[:, :1]           # ties
        a = project_simplex_rows(Y, 1.5)
        b = project_simplex_sorted(Y, 1.5)
        assert np.abs(a - b).max() <= 1e-12 * np.abs(Y).max()
        np.testing.assert_allclose(a.sum(axis=1), 1.5, rtol=1e-12)
        assert (a >= 0).all()
    # orders that stress the one-pass candidate list: increasing, decreasing, geometric, constant
    n = 300
    hard = np.stack([np.arange(n, dtype=float), -np.arange(n, dtype=float), 0.5 ** np.arange(n),
                     2.0 ** -np.arange(n)[::-1], np.full(n, 3.0), np.linspace(0, 1e-9, n)])
    for total in (1e-6, 1.0, 1e3):
        np.testing.assert_allclose(project_simplex_rows(hard, total), project_simplex_sorted(hard, total),
                                   atol=1e-12 * max(1.0, total) * n)


def test_simplex_lmo_vertex_and_support():
    K = setkit.simplex(dim=4, total=3.0)
    np.testing.assert_array_equal(K.lmo([1.0, -2.0, 0.5, 4.0]), [0.0, 3.0, 0.0, 0.0])
    assert K.support([1.0, -2.0, 0.5, 4.0]) == 12.0
    Ka = setkit.simplex(dim=4, total=3.0, mode="at_most")
    np.testing.assert_array_equal(Ka.lmo([1.0, 2.0, 0.5, 4.0]), [0.0, 0.0, 0.0, 0.0])
    assert Ka.support([-1.0, -2.0, -0.5, -4.0]) == 0.0


def test_simplex_total_zero_is_the_origin():
    K = setkit.simplex(dim=3, total=0.0)
    np.testing.assert_array_equal(K.project([[1.0, 2.0, -3.0]]), [[0.0, 0.0, 0.0]])


@pytest.mark.parametrize("spec, key, words", [
    ({"kind": "simplex"}, "dim", "required"),
    ({"kind": "simplex", "dim": "three"}, "dim", "whole number"),
    ({"kind": "simplex", "dim": 0}, "dim", "at least 1"),
    ({"kind": "simplex", "dim": 3, "total": -1}, "total", "at least 0"),
    ({"kind": "simplex", "dim": 3, "mode": "exactly"}, "mode", "equal, at_most"),
    ({"kind": "simplex", "dim": 3, "totl": 1}, "totl", "unknown parameter"),
])
def test_simplex_bad_descriptions(spec, key, words):
    with pytest.raises(DescriptionError) as e:
        setkit.compile(spec)
    msg = str(e.value)
    assert msg.startswith("simplex (<dict>: " + key + ")"), msg
    assert words in msg


def test_projection_at_huge_magnitudes_lands_on_the_set():
    """|y| >> total: the threshold search once divided by zero (all candidates looked removable);
    now the largest entry takes the whole total (the exact projection when the gap between the
    two largest entries exceeds total; shift invariance along 1 of the simplex projection)."""
    import numpy as np
    import setkit
    K = setkit.compile({"kind": "simplex", "dim": 4})
    rng = np.random.default_rng(0)
    for mag in (1e17, 1e150, 1e300):
        Y = rng.standard_normal((3, 4)) * mag
        P = K.project(Y)
        want = np.zeros_like(Y)
        want[np.arange(3), Y.argmax(axis=1)] = 1.0
        np.testing.assert_array_equal(P, want)
        np.testing.assert_array_equal(K.project(Y[0]), want[0])
