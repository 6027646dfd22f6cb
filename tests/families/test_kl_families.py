"""project_kl on every family: native kernels against the exponential-cone reference (cvxpy + Clarabel).

Inputs are log-domain batches t = log y with y from 1e-6 to 1e6 (t in [-14, 14]). The
reference solves min sum z log z - <t - log s + 1, z> over z = x / s (the exponential cone),
accurate to about 1e-6 of the scale; the native answers must lie in the set, be at least
as good in KL value, agree within the reference's accuracy, and carry a Bregman
Frank-Wolfe gap at rounding level.
"""
import numpy as np
import pytest
from scipy.special import softmax

import setkit
from setkit.errors import AccuracyWarning, SolveError, UnsupportedOperationError
from setkit.kernels.bregman import kl_certificate, kl_divergence

SPECS = {
    "simplex": {"kind": "simplex", "dim": 6, "total": 2.5},
    "simplex_at_most": {"kind": "simplex", "dim": 5, "total": 4.0, "mode": "at_most"},
    "box": {"kind": "box", "lower": [0.0, 0.1, 0.0, 1.0, 0.5], "upper": [1.0, 2.0, "inf", 3.0, 0.5]},
    "capped_simplex": {"kind": "budget", "dim": 7, "total": 1.0, "upper": 0.2},
    "budget_weighted": {"kind": "budget", "dim": 6, "total": 2.0, "lower": [0, 0.1, 0, 0, 0.05, 0],
                        "upper": [0.6, 1, 1, 2, 0.3, "inf"], "weights": [1, 2, 0.5, 1, 3, 1.5]},
    "budget_at_most": {"kind": "budget", "dim": 6, "total": 1.0, "mode": "at_most", "upper": [0.5, 0.2, 1, 1, 1, 1],
                       "weights": [1, 2, 0.5, 1, 3, 1.5]},
    "permutahedron": {"kind": "permutahedron", "weights": [3.0, 2.0, 2.0, 0.5, 0.0, 0.0]},
    "birkhoff": {"kind": "birkhoff", "n": 4},
    "transport": {"kind": "transport", "rows": [1.0, 2.0, 0.0, 4.0], "cols": [2.0, 1.0, 3.0, 1.0]},
    "product": {"kind": "product", "of": [{"kind": "simplex", "dim": 3, "total": 2.0},
                                          {"kind": "box", "dim": 2, "lower": 0.5, "upper": 1.0},
                                          {"kind": "simplex", "dim": 3, "total": 0.5},
                                          {"kind": "birkhoff", "n": 2}]},
}


def reference(K):
    return K.with_backends(project_kl="reference", loose=True)


def gap_scale(T, X):
    """Size of the terms of the Bregman gap: 1 + sum |log x - t| x (rounding is eps times this)."""
    G = np.log(np.maximum(X, 2.3e-308)) - T
    return 1.0 + np.abs(G * X).sum(axis=1)


@pytest.mark.parametrize("name", sorted(SPECS))
def test_native_kl_projection_against_reference(rng, name):
    K = setkit.compile(SPECS[name])
    assert K.routes()["project_kl"].provider == "native"
    n = K.dim
    # y from 1e-6 to 1e6: three moderate rows, one wide, one with ties
    T = np.concatenate([rng.uniform(-1, 1, (1, n)), rng.uniform(-5, 5, (1, n)), rng.uniform(-14, 14, (1, n)),
                        np.round(rng.uniform(-2, 2, (1, n)))])
    X, info = K.run("project_kl", T)
    R, _ = reference(K).run("project_kl", T)
    sc = np.maximum(1.0, np.abs(R).max(axis=1))
    # in the set (Sinkhorn: within its stated marginal residual 1e-10 x scale)
    assert np.all(X >= 0)
    assert np.all(K.violation(X.reshape((-1,) + K.shape)) <= 2e-10 * sc)
    # agrees with the reference within the reference's accuracy, and is at least as good
    err = np.abs(X - R).max(axis=1) / sc
    assert err.max() <= 2e-5, f"{name}: differs from the reference by {err.max():.3g}"
    kx, kr = kl_divergence(T, X), kl_divergence(T, R)
    assert np.all(kx <= kr + 1e-8 * (1 + np.abs(kr)))
    # Bregman Frank-Wolfe gap at rounding level (Sinkhorn: at its marginal residual)
    gap = kl_certificate(T, X, lambda G: K.run("lmo", G)[0])
    iterative = name in ("birkhoff", "transport", "product")
    bound = (1e-8 if iterative else 1e-13 * n) * gap_scale(T, X)
    assert np.all(np.abs(gap) <= bound), f"{name}: gap {gap} above {bound}"
    # batches: the empty batch, and rows answered one at a time equal the batch answer
    assert K.run("project_kl", np.zeros((0, n)))[0].shape == (0, n)
    np.testing.assert_allclose(K.run("project_kl", T[2:3])[0], X[2:3], rtol=1e-12, atol=1e-15)


def test_reference_serves_families_without_native_kernel():
    # a polyhedron and a hull that are the probability simplex: the answer is softmax
    # (closed form, common practice; scipy.special.softmax as the outside routine)
    t = np.array([[0.3, -1.0, 2.0], [5.0, 5.0, -5.0]])
    P = setkit.compile({"kind": "polyhedron", "C": [[1, 1, 1]], "d": [1], "lower": 0})
    H = setkit.compile({"kind": "hull", "points": [[1, 0, 0], [0, 1, 0], [0, 0, 1]]})
    for K in (P, H):
        assert K.routes()["project_kl"].provider == "reference"
        X, info = K.run("project_kl", t)
        np.testing.assert_allclose(X, softmax(t, axis=1), rtol=1e-9)   # polished on the face
        assert info["status"] == ["solved", "solved"]


@pytest.mark.parametrize("spec, where", [
    ({"kind": "ball", "dim": 3, "radius": 1.0}, "x\\[0\\] = -1"),
    ({"kind": "box", "lower": [0.0, -1.0], "upper": [1.0, 1.0]}, "lower\\[1\\] = -1"),
    ({"kind": "budget", "dim": 3, "total": 1.0, "lower": [0.0, -0.5, 0.0]}, "lower\\[1\\] = -0.5"),
    ({"kind": "permutahedron", "weights": [2.0, 1.0, -1.0]}, "smallest weight is -1"),
    ({"kind": "polyhedron", "A": [[1, 1]], "b": [1]}, "unbounded below"),
])
def test_sets_outside_the_orthant_are_refused(spec, where):
    K = setkit.compile(spec)
    with pytest.raises(UnsupportedOperationError, match=f"project_kl on {spec['kind']}.*nonnegative orthant.*{where}"):
        K.run("project_kl", np.zeros((1, K.dim)))
    if K.routes()["project_kl"].provider == "native":
        with pytest.raises(UnsupportedOperationError, match="nonnegative orthant"):
            reference(K).run("project_kl", np.zeros((1, K.dim)))


def test_ball_inside_the_orthant_uses_the_reference():
    # a ball around (2, 2, 2) of radius 1 lies in x >= 0: the reference serves it; at the answer the
    # KL gradient log x - t is an outer normal, i.e. parallel to x - center (the ball's KKT condition)
    K = setkit.compile({"kind": "ball", "dim": 3, "radius": 1.0, "center": [2.0, 2.0, 2.0]})
    t = np.array([[3.0, 0.0, -2.0]])
    X, _ = K.run("project_kl", t)
    g = np.log(X[0]) - t[0]
    d = X[0] - 2.0
    assert abs(np.linalg.norm(d) - 1.0) <= 1e-6
    cos = -(g @ d) / (np.linalg.norm(g) * np.linalg.norm(d))
    assert cos >= 1 - 1e-6


def test_intersection_by_bregman_dykstra_matches_capped_simplex(rng):
    # simplex ∩ box [0, 0.3] is the capped simplex: cyclic KL projections with Dykstra corrections
    # (Censor & Reich 1998; Bauschke & Lewis 2000) must land on the budget kernel's exact answer
    K = setkit.compile({"kind": "intersection", "of": [{"kind": "simplex", "dim": 6},
                                                       {"kind": "box", "dim": 6, "lower": 0, "upper": 0.3}]})
    B = setkit.compile({"kind": "budget", "dim": 6, "total": 1.0, "upper": 0.3})
    assert K.routes()["project_kl"].provider == "bregman_dykstra"
    T = rng.uniform(-5, 5, (3, 6))
    X, info = K.run("project_kl", T)
    assert info["status"] == ["solved"] * 3
    np.testing.assert_allclose(X, B.run("project_kl", T)[0], atol=1e-7)
    R, _ = reference(K).run("project_kl", T)
    np.testing.assert_allclose(X, R, atol=2e-5)


def test_intersection_with_a_halfspace_uses_the_reference():
    # simplex ∩ {x_0 <= 0.2}: the halfspace has no KL projection of its own, so the whole
    # intersection goes to the reference; capping rule (Warmuth & Kuzmin 2008): x_0 = 0.2 when the
    # softmax exceeds it, the rest proportional to y with the remaining mass
    K = setkit.compile({"kind": "intersection", "of": [{"kind": "simplex", "dim": 4},
                                                       {"kind": "polyhedron", "A": [[1, 0, 0, 0]], "b": [0.2]}]})
    t = np.array([[2.0, 0.0, -1.0, 0.5]])
    X, _ = K.run("project_kl", t)
    y = np.exp(t[0])
    expected = np.concatenate([[0.2], 0.8 * y[1:] / y[1:].sum()])
    np.testing.assert_allclose(X[0], expected, atol=2e-6)


def test_reference_kl_answers_are_polished_to_rounding_level():
    """Interior-point KL answers stop near 1e-6; the polish on their face (dual Newton for a polyhedron,
    Newton on the weights for a hull) reaches rounding level. Outside check: softmax (closed form, common
    practice; scipy.special.softmax), on the seeds where the unpolished answer was ~2e-6 off."""
    rng = np.random.default_rng(4)
    P = setkit.compile({"kind": "polyhedron", "C": [[1.0] * 4], "d": [1.0], "lower": 0.0})
    H = setkit.compile({"kind": "hull", "points": np.eye(4).tolist()})
    for _ in range(4):
        t = 2.0 * rng.normal(size=(1, 4))
        for K in (P, H):
            X, info = K.run("project_kl", t)
            np.testing.assert_allclose(X, softmax(t, axis=1), rtol=1e-9)
            assert info["status"] == ["solved"]


def test_reference_kl_answer_above_the_accepted_gap_is_refused_or_flagged(monkeypatch):
    """The KL contract on generic routes: an answer whose Bregman gap is above the accepted level raises
    SolveError, or with loose=True is kept with an AccuracyWarning and status "inaccurate"."""
    from setkit.backends import reference as ref
    monkeypatch.setattr(ref.ReferenceBackend, "_polished", lambda self, t, x: np.array([0.5, 0.3, 0.2]))
    t = np.array([[0.0, 0.0, 0.0]])                  # the answer is (1/3, 1/3, 1/3)
    spec = {"kind": "polyhedron", "C": [[1.0, 1.0, 1.0]], "d": [1.0], "lower": 0.0}
    with pytest.raises(SolveError, match="Bregman gap"):
        setkit.compile(spec).run("project_kl", t)
    with pytest.warns(AccuracyWarning, match="Bregman gap"):
        X, info = setkit.compile(spec, loose=True).run("project_kl", t)
    assert info["status"] == ["inaccurate"]
