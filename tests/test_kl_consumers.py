"""The KL geometry in the consumers: the penalty with geometry="kl", centered sets, the orthant domain check."""
import math

import numpy as np
import pytest

import setkit
from setkit.errors import InputError, SetkitError, UnsupportedOperationError


# -- penalty ------------------------------------------------------------------------------------
def test_kl_penalty_on_the_simplex_matches_the_closed_form():
    # min over {z >= 0, sum z = tau} of KL(z || x) = tau log(tau / S) - tau + S with S = sum x, attained at
    # z = tau x / S (the Lagrange condition log(z/x) = const; derived by hand, common practice)
    tau, G = 2.0, 3.0
    K = setkit.compile({"kind": "simplex", "dim": 4, "total": tau})
    rng = np.random.default_rng(0)
    for scale in (1e-6, 1.0, 1e6):
        x = scale * rng.uniform(0.1, 2.0, 4)
        S = x.sum()
        want = G * (tau * math.log(tau / S) - tau + S)
        P = K.penalty(G, geometry="kl")
        assert abs(float(P.value(x)) - want) <= 1e-12 * max(1.0, abs(want), S)
        np.testing.assert_allclose(P.grad(x), G * (1.0 - tau / S) * np.ones(4), rtol=1e-12, atol=1e-15)


@pytest.mark.parametrize("spec", [
    {"kind": "permutahedron", "weights": [3.0, 2.0, 1.0, 0.5]},
    {"kind": "birkhoff", "n": 3},
    {"kind": "budget", "dim": 5, "total": 1.0, "upper": 0.3},
    {"kind": "box", "dim": 3, "lower": [0.0, 0.2, 1.0], "upper": [1.0, 0.5, 4.0]},
], ids=lambda s: s["kind"])
def test_kl_penalty_gradient_matches_finite_differences(spec):
    K = setkit.compile(spec)
    P = K.penalty(1.5, geometry="kl")
    rng = np.random.default_rng(3)
    x = np.exp(rng.standard_normal(K.shape))
    g = P.grad(x)
    v = rng.standard_normal(K.shape)
    h = 1e-6 * float(x.min())
    fd = (float(P.value(x + h * v)) - float(P.value(x - h * v))) / (2 * h)
    assert abs(fd - float(np.sum(g * v))) <= 1e-5 * max(1.0, float(np.abs(g).sum()))
    # value = G * KL distance; 0 and zero gradient at positive points of the set
    assert float(P.value(x)) == pytest.approx(1.5 * float(K.distance(x, geometry="kl")), rel=1e-14)
    q = K.project(x, geometry="kl")
    if (q > 0).all():
        assert abs(float(P.value(q))) <= 1e-9 * max(1.0, float(q.sum()))
        assert np.abs(P.grad(q)).max() <= 1e-8
    # batches equal single calls
    X = np.stack([x, 2.0 * x])
    np.testing.assert_allclose(P.value(X), [float(P.value(x)), float(P.value(2.0 * x))], rtol=1e-13)


def test_kl_penalty_refuses_what_does_not_apply():
    K = setkit.compile({"kind": "simplex", "dim": 3})
    for smoothing in ("moreau", "ball"):
        with pytest.raises(UnsupportedOperationError, match="does not apply to geometry='kl'"):
            K.penalty(1.0, smoothing, width=0.1, geometry="kl")
    with pytest.raises(InputError, match="geometry must be"):
        K.penalty(1.0, geometry="hellinger")
    P = K.penalty(1.0, geometry="kl")
    with pytest.raises(InputError, match=r"needs x > 0.*coordinate 1"):
        P.value([0.5, 0.0, 1.0])
    with pytest.raises(UnsupportedOperationError, match="no Lipschitz constant"):
        P.lipschitz
    with pytest.raises(UnsupportedOperationError, match="no Lipschitz constant"):
        P.extend(lambda x: 0.0).lipschitz(1.0)
    assert K.penalty(2.0).lipschitz == 2.0          # the Euclidean penalty is unchanged


def test_kl_penalty_on_a_set_outside_the_orthant_says_why():
    B = setkit.compile({"kind": "ball", "dim": 2, "norm": 2, "radius": 1.0})
    with pytest.raises(UnsupportedOperationError, match="nonnegative orthant"):
        B.penalty(1.0, geometry="kl").value([0.5, 0.5])


# -- centered sets ------------------------------------------------------------------------------
@pytest.mark.parametrize("spec", [
    {"kind": "simplex", "dim": 3},
    {"kind": "permutahedron", "weights": [3.0, 2.0, 1.0]},
    {"kind": "birkhoff", "n": 3},
], ids=lambda s: s["kind"])
def test_centered_set_refuses_the_kl_geometry_and_says_why(spec):
    C = setkit.compile(spec).centered(measure="vertices")
    y = np.ones(C.shape)
    for call in (lambda: C.project(y, geometry="kl"), lambda: C.distance(y, geometry="kl"),
                 lambda: C.penalty(1.0, geometry="kl").value(y)):
        with pytest.raises(UnsupportedOperationError) as info:
            call()
        msg = str(info.value)
        assert "centered set" in msg and "subtract the centroid afterwards" in msg and "< 0" not in msg
    # the Euclidean operators of the centered set keep working
    K = setkit.compile(spec)
    c = K.centroid(measure="vertices")
    np.testing.assert_allclose(C.project(y), K.project(y + c) - c, atol=1e-9)


def test_centered_one_point_set_stays_in_the_orthant():
    # {(1, 1)} - its centroid = {0}: inside the orthant, and its KL projection is the origin
    C = setkit.compile({"kind": "box", "dim": 2, "lower": 1.0, "upper": 1.0}).centered()
    assert np.abs(C.project(np.ones(2), geometry="kl")).max() <= 1e-6


# -- the orthant domain check over every family's examples ---------------------------------------
def _example_specs():
    from setkit.families import known_kinds, lookup
    out = []
    for kind in sorted(known_kinds()):
        cls = lookup(kind)
        for i, spec in enumerate(cls.examples() or []):
            out.append(pytest.param(dict(spec), id=f"{kind}[{i}]"))
    return out


@pytest.mark.parametrize("spec", _example_specs())
def test_every_family_answers_in_the_orthant_or_says_why(spec):
    """Each example either gets a KL projection that lies in the set and in x >= 0 or raises setkit's
    UnsupportedOperationError naming the orthant; points of K with a negative coordinate must refuse."""
    try:
        K = setkit.compile(spec)
    except SetkitError:
        pytest.skip("the example needs data files or options this test does not give")
    if K.dim > 60:
        pytest.skip("large example: the reference route would dominate the test time")
    rng = np.random.default_rng(1)
    t = rng.standard_normal(K.shape)
    # does K hold a point with a negative coordinate? (min of each coordinate by the LMO)
    try:
        lows = np.array([K.lmo(np.eye(K.dim)[i].reshape(K.shape)).reshape(-1)[i] for i in range(K.dim)])
        negative = bool((lows < -1e-9 * max(1.0, float(K.node.scale()))).any())
    except setkit.UnboundedDirectionError:
        negative = True
    try:
        x = K.project(t, geometry="kl", log_input=True)
    except UnsupportedOperationError as exc:
        assert negative, f"refused a set inside the orthant: {exc}"
        assert "nonnegative orthant" in str(exc)
        return
    except setkit.SolveError as exc:
        # the exponential-cone reference may stop inaccurate on degenerate sets (a coordinate fixed at 0,
        # unbounded paths with cycles): it then says so rather than answer; native routes must answer
        assert K.routes()["project_kl"].category == "backend", exc
        assert "did not solve cleanly" in str(exc)
        return
    assert not negative, "a set with negative points answered a KL projection"
    assert x.min() >= -1e-9 * max(1.0, float(np.abs(x).max()))
    viol = float(K.violation(x))
    if math.isnan(viol):                   # no violation measure (hull): the Euclidean distance instead
        viol = float(K.distance(x))
    assert viol <= 1e-6 * max(1.0, float(K.node.scale()))
