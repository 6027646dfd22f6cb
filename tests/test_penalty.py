"""The distance penalty G·dist(x, K) and its smoothings (setkit.penalty)."""
from __future__ import annotations

import numpy as np
import pytest

import setkit
from setkit.errors import InputError

SETS = [
    {"kind": "simplex", "dim": 4, "total": 2.0},
    {"kind": "simplex", "dim": 3, "mode": "at_most"},
    {"kind": "box", "lower": [0, -1, 2], "upper": [1, 1, 5]},
]


def _points(K, rng, scale):
    """Points far, near and inside K (a (9, dim) batch)."""
    far = scale * rng.standard_normal((3, K.dim))
    inside = K.sample(3, rng=rng)
    near = inside + 1e-2 * rng.standard_normal((3, K.dim))
    return np.concatenate([far, near, inside])


@pytest.mark.parametrize("spec", SETS)
@pytest.mark.parametrize("smoothing,width", [(None, None), ("moreau", 0.3)])
def test_zero_on_the_set(spec, smoothing, width, rng):
    K = setkit.compile(spec)
    X = K.sample(20, rng=rng)
    P = K.penalty(2.5, smoothing, width)
    np.testing.assert_allclose(P.value(X), 0.0, atol=1e-12)
    np.testing.assert_allclose(P.grad(X), 0.0, atol=1e-10)


@pytest.mark.parametrize("spec", SETS)
@pytest.mark.parametrize("scale", [1e-3, 1.0, 1e3, 1e6])
def test_unsmoothed_is_G_times_reference_distance(spec, scale, rng):
    # the cvxpy reference (Clarabel) computes the projection independently
    K = setkit.compile(spec)
    R = K.with_backends(project="reference")
    X = _points(K, rng, scale)
    G = 1.7
    ref_d = np.linalg.norm(X - R.project(X), axis=1)
    np.testing.assert_allclose(K.penalty(G).value(X), G * ref_d, rtol=1e-6, atol=1e-7 * max(1.0, scale))
    # subgradient outside: G times the unit vector from the reference projection
    out = ref_d > 1e-3 * max(1.0, scale)
    g = K.penalty(G).grad(X)
    expect = G * (X - R.project(X)) / np.maximum(ref_d, 1e-300)[:, None]
    # the reference projection is accurate to about 1e-6 * scale (measured), so the unit vector to about that / d
    err = np.abs(g - expect).max(axis=1)
    assert np.all(err[out] <= 1e-5 * max(1.0, scale) / ref_d[out] + 1e-9)
    assert out.sum() >= 2


def test_box_distance_by_hand():
    # distance to a box: the norm of the clipped-off part (common practice)
    K = setkit.compile({"kind": "box", "dim": 2, "lower": 0, "upper": 1})
    np.testing.assert_allclose(K.penalty(3.0).value([[4.0, 5.0], [0.5, -2.0]]), [15.0, 6.0])


@pytest.mark.parametrize("spec", SETS)
def test_moreau_value_is_closed_form_and_matches_cvxpy_envelope(spec, rng):
    # Moreau envelope of f = G*d_K with parameter mu = delta/G:
    #   min_y G*d_K(y) + ||x - y||^2 / (2 mu) = G*h(d_K(x)), h the Huber function
    # (Beck, First-Order Methods in Optimization, 2017, the Moreau envelope of a distance; from memory).
    # Checked by solving the envelope problem with cvxpy + Clarabel, independently of our projection.
    import cvxpy as cp
    K = setkit.compile(spec)
    G, delta = 2.0, 0.5
    mu = delta / G
    P = K.penalty(G, "moreau", delta)
    X = _points(K, rng, 2.0)[:6]
    y = cp.Variable(K.dim)
    z = cp.Variable(K.dim)
    xp = cp.Parameter(K.dim)
    prob = cp.Problem(cp.Minimize(G * cp.norm(y - z, 2) + cp.sum_squares(xp - y) / (2 * mu)), K.to_cvxpy(z))
    vals, grads = [], []
    for x in X:
        xp.value = x
        prob.solve(solver=cp.CLARABEL, tol_gap_abs=1e-11, tol_gap_rel=1e-11, tol_feas=1e-11)
        vals.append(prob.value)
        grads.append((x - y.value) / mu)        # gradient of an envelope: (x - prox(x)) / mu
    np.testing.assert_allclose(P.value(X), vals, rtol=1e-6, atol=1e-7)
    np.testing.assert_allclose(P.grad(X), np.array(grads), atol=1e-5)
    # and the closed form from the reference distance
    d = np.linalg.norm(X - K.with_backends(project="reference").project(X), axis=1)
    h = np.where(d <= delta, d ** 2 / (2 * delta), d - delta / 2)
    np.testing.assert_allclose(P.value(X), G * h, rtol=1e-6, atol=1e-8)


@pytest.mark.parametrize("spec", SETS)
def test_moreau_gradient_matches_finite_differences(spec, rng):
    K = setkit.compile(spec)
    P = K.penalty(1.3, "moreau", 0.4)
    X = _points(K, rng, 1.5)
    eps = 1e-6
    E = np.eye(K.dim)
    for x in X:
        fd = np.array([(P.value(x + eps * e) - P.value(x - eps * e)) / (2 * eps) for e in E])
        np.testing.assert_allclose(P.grad(x), fd, atol=1e-5)


@pytest.mark.parametrize("smoothing,width", [(None, None), ("moreau", 0.2), ("ball", 0.2)])
def test_extended_loss_is_2G_lipschitz(smoothing, width, rng):
    # f(x) = G*||x - a||_2 is G-Lipschitz, so f + P must be 2G-Lipschitz (triangle inequality)
    K = setkit.compile({"kind": "simplex", "dim": 5})
    G = 3.0
    a = 4.0 * rng.standard_normal(5)
    F = K.penalty(G, smoothing, width).extend(lambda x: G * np.linalg.norm(x - a),
                                              lambda x: G * (x - a) / np.linalg.norm(x - a))
    X = 2.0 * rng.standard_normal((200, 5))
    Y = X + rng.standard_normal((200, 5)) * np.geomspace(1e-4, 2.0, 200)[:, None]
    ratio = np.abs(F.value(X) - F.value(Y)) / np.linalg.norm(X - Y, axis=1)
    assert ratio.max() <= 2 * G * (1 + 1e-9)
    assert ratio.max() > 1.0 * G            # the check is not vacuous: the penalty does contribute
    gn = np.linalg.norm(F.grad(X), axis=1)
    assert gn.max() <= 2 * G * (1 + 1e-9)
    assert F.lipschitz(G) == 2 * G


def test_ball_smoothing_is_at_least_unsmoothed_within_error(rng):
    # Jensen: E[d(x + delta u)] >= d(E[x + delta u]) = d(x) because d is convex
    for spec in SETS:
        K = setkit.compile(spec)
        X = _points(K, rng, 1.0)
        P = K.penalty(2.0, "ball", 0.5, samples=64, rng=1)
        est = P.value(X, details=True)
        assert np.all(est.std_error >= 0)
        exact = K.penalty(2.0).value(X)
        assert np.all(est.estimate >= exact - 3 * est.std_error - 1e-12)
        # the estimate is honest: a 16x larger independent sample lands within a few standard errors
        big = K.penalty(2.0, "ball", 0.5, samples=1024, rng=2).value(X, details=True)
        tol = 4.5 * np.hypot(est.std_error, big.std_error) + 1e-12
        assert np.all(np.abs(est.estimate - big.estimate) <= tol)


def test_ball_smoothing_one_dimensional_closed_form():
    # K = [0, 1] in R^1, delta = 1, x = 1: E[max(u, 0)] = 1/4 for u uniform on [-1, 1] (calculus)
    K = setkit.compile({"kind": "box", "dim": 1, "lower": 0, "upper": 1})
    est = K.penalty(1.0, "ball", 1.0, samples=4000, rng=3).value([1.0], details=True)
    assert abs(est.estimate - 0.25) <= 4 * est.std_error and est.std_error < 0.01
    # a ball entirely outside: d(x + u) = x - 1 + u is affine there, so antithetic pairs are exact
    far = K.penalty(2.0, "ball", 1.0, samples=8, rng=3).value([5.0], details=True)
    assert abs(far.estimate - 8.0) < 1e-12 and far.std_error < 1e-12


def test_ball_gradient_matches_finite_differences_of_its_value(rng):
    # with fixed samples (common random numbers) the value is a deterministic function whose gradient
    # is the average of G*(y - proj(y))/d(y): the estimator used by grad
    K = setkit.compile({"kind": "simplex", "dim": 3, "mode": "at_most"})
    P = K.penalty(1.5, "ball", 0.3, samples=32, rng=5)
    eps = 1e-7
    for x in [np.array([1.0, 1.0, 0.5]), np.array([-0.5, 0.2, 0.1]), np.array([0.3, 0.3, 0.3])]:
        fd = np.array([(P.value(x + eps * e) - P.value(x - eps * e)) / (2 * eps) for e in np.eye(3)])
        np.testing.assert_allclose(P.grad(x), fd, atol=1e-5)
    g = P.grad(np.array([[1.0, 1.0, 0.5]]), details=True)
    assert g.std_error.shape == (1, 3) and "antithetic" in g.estimator


def test_ball_resample_and_seeds():
    K = setkit.compile({"kind": "simplex", "dim": 3})
    x = [0.9, 0.9, 0.1]
    a = K.penalty(1.0, "ball", 0.5, rng=7).value(x)
    assert a == K.penalty(1.0, "ball", 0.5, rng=7).value(x)
    P = K.penalty(1.0, "ball", 0.5, rng=7, resample=True)
    assert P.value(x) != P.value(x)


def test_batched_shapes_and_extension_agree():
    K = setkit.compile({"kind": "box", "dim": 2, "lower": 0, "upper": 1})
    P = K.penalty(2.0, "moreau", 0.5)
    X = np.arange(12.0).reshape(3, 2, 2) / 4
    assert P.value(X).shape == (3, 2) and P.grad(X).shape == (3, 2, 2)
    assert isinstance(P.value([3.0, 0.5]), float)
    v, g = P.value_and_grad(X)
    np.testing.assert_array_equal(v, P.value(X))
    np.testing.assert_array_equal(g, P.grad(X))
    def f(x):
        return float(np.sum(x ** 2))

    def gf(x):
        return 2 * x
    E1 = P.extend(f, gf)
    E2 = P.extend(lambda Z: np.sum(Z ** 2, axis=-1), lambda Z: 2 * Z, batched=True)
    np.testing.assert_allclose(E1.value(X), E2.value(X))
    np.testing.assert_allclose(E1.grad(X), E2.grad(X))
    np.testing.assert_allclose(E1.value(X), np.sum(X ** 2, axis=-1) + P.value(X))
    with pytest.raises(InputError, match="grad_f"):
        P.extend(f).grad(X)


def test_bad_arguments():
    K = setkit.compile({"kind": "simplex", "dim": 3})
    with pytest.raises(InputError, match="smoothing"):
        K.penalty(1.0, "huber")
    with pytest.raises(InputError, match="G must be"):
        K.penalty(-1.0)
    with pytest.raises(InputError, match="width"):
        K.penalty(1.0, "moreau")
    with pytest.raises(InputError, match="width"):
        K.penalty(1.0, None, 0.5)
    with pytest.raises(InputError, match="even"):
        K.penalty(1.0, "ball", 0.5, samples=7)
    with pytest.raises(InputError, match="trailing shape"):
        K.penalty(1.0).value([1.0, 2.0])


@pytest.mark.parametrize("spec", [{"kind": "birkhoff", "n": 3},
                                  {"kind": "permutahedron", "weights": [3.0, 1.0, 0.0, -1.0]},
                                  {"kind": "ball", "dim": 3, "norm": 1, "radius": 2.0},
                                  {"kind": "budget", "dim": 4, "total": 3.0, "upper": 1.0}])
def test_moreau_gradient_against_reference_projection(spec, rng):
    # grad = G (x - proj(x)) / max(d, delta), with proj from the cvxpy reference, on sets with
    # matrix points and with iterative or sorting-based projections
    K = setkit.compile(spec)
    R = K.with_backends(project="reference")
    G, delta = 1.5, 0.3
    X = 2.0 * rng.standard_normal((5,) + K.shape)
    P = R.project(X)
    ax = tuple(range(1, 1 + len(K.shape)))
    d = np.sqrt(np.sum((X - P) ** 2, axis=ax))
    expect = G * (X - P) / np.maximum(d, delta).reshape((5,) + (1,) * len(K.shape))
    pen = K.penalty(G, "moreau", delta)
    assert pen.grad(X).shape == X.shape
    np.testing.assert_allclose(pen.grad(X), expect, atol=1e-5)
    np.testing.assert_allclose(pen.value(X), G * np.where(d <= delta, d * d / (2 * delta), d - delta / 2),
                               rtol=1e-6, atol=1e-7)
