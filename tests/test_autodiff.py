"""The PyTorch and JAX layers: gradient checks on every kind of set, batches, dtypes, devices, kinks, errors.

The layers' gradients are compared with the frameworks' own finite-difference checkers
(torch.autograd.gradcheck; jax.test_util.check_grads), and at a kink with the documented
one-sided limit. Each framework's tests skip when it is not installed.
"""
from __future__ import annotations

import sys

import numpy as np
import pytest

import setkit
from setkit.errors import BackendUnavailableError, InputError, UnsupportedOperationError

# (name, description, scale of the random points): one per kind the brief names, seeded points
# at this scale have active and inactive constraints alike
SETS = [
    ("simplex", {"kind": "simplex", "dim": 5}, 1.0),
    ("permutahedron", {"kind": "permutahedron", "weights": [3.0, 1.5, 0.5, 0.0]}, 2.0),
    ("box", {"kind": "box", "dim": 4, "lower": -0.5, "upper": 0.5}, 1.0),
    ("l2 ball", {"kind": "ball", "dim": 3, "norm": 2, "radius": 1.5, "center": [0.2, -0.1, 0.0]}, 1.5),
    ("budget with caps", {"kind": "budget", "dim": 4, "total": 2.0, "upper": [0.8, 1.0, 0.6, 1.2]}, 1.0),
    ("birkhoff", {"kind": "birkhoff", "n": 3}, 0.6),
    ("transport", {"kind": "transport", "rows": [1.0, 2.0], "cols": [0.5, 1.5, 1.0]}, 1.0),
    ("simplex and caps", {"kind": "intersection", "of": [{"kind": "simplex", "dim": 4},
                                                         {"kind": "box", "dim": 4, "lower": 0, "upper": 0.35}]}, 0.5),
    ("simplex and l2 ball", {"kind": "intersection", "of": [{"kind": "simplex", "dim": 4},
                                                            {"kind": "ball", "dim": 4, "norm": 2, "radius": 0.6}]}, 0.5),
    ("product", {"kind": "product", "of": [{"kind": "simplex", "dim": 3},
                                           {"kind": "ball", "dim": 2, "norm": 2, "radius": 1.0}]}, 1.0),
]
KL_SIMPLEX = {"kind": "simplex", "dim": 4, "total": 2.0}


def _point(K, scale, seed, batch=(2,)):
    """A seeded Gaussian batch of points (at these seeds away from kinks: the finite differences agree)."""
    rng = np.random.default_rng(seed)
    return scale * rng.standard_normal(batch + tuple(K.shape))


@pytest.fixture(scope="module")
def compiled():
    return {name: setkit.compile(spec) for name, spec, _ in SETS}


# ---------------------------------------------------------------------------------------- PyTorch
@pytest.fixture(scope="module")
def torch():
    return pytest.importorskip("torch")


@pytest.fixture(scope="module")
def torch_project(torch):
    from setkit.autodiff import torch_project
    return torch_project


@pytest.mark.parametrize("name", [s[0] for s in SETS])
def test_torch_gradcheck(name, compiled, torch, torch_project):
    """torch.autograd.gradcheck (central differences, eps 1e-6, float64) on a batch of two points."""
    K, scale = compiled[name], dict((s[0], s[2]) for s in SETS)[name]
    y = torch.tensor(_point(K, scale, seed=len(name)), dtype=torch.float64, requires_grad=True)
    assert torch.autograd.gradcheck(lambda t: torch_project(K, t), (y,), eps=1e-6, atol=1e-6, rtol=1e-4)
    # the points exercise a proper face: the Jacobian (a projector on polyhedra, whose trace is the face
    # dimension) is neither zero (vertices only) nor the identity (interior points only)
    J = torch.autograd.functional.jacobian(lambda t: torch_project(K, t), y).reshape(y.numel(), y.numel())
    assert 0.5 <= float(torch.trace(J)) <= y.numel() - 0.5
    # the forward pass is the set's projection, unchanged
    np.testing.assert_array_equal(torch_project(K, y).detach().numpy(), K.project(y.detach().numpy()))


def test_torch_gradcheck_catches_a_wrong_backward(monkeypatch, torch, torch_project):
    """The check above can fail: a backward returning the identity (the gradient of y itself) is caught."""
    K = setkit.compile({"kind": "simplex", "dim": 4})
    y = torch.tensor(_point(K, 1.0, seed=3), dtype=torch.float64, requires_grad=True)
    monkeypatch.setattr(setkit.DecisionSet, "project_vjp", lambda self, y, u, **kw: np.array(u, dtype=float))
    assert not torch.autograd.gradcheck(lambda t: torch_project(K, t), (y,), eps=1e-6, raise_exception=False)


def test_torch_kl_simplex_gradcheck_and_softmax(torch, torch_project):
    """KL geometry: gradcheck from y > 0; from log-input t it is total * softmax(t), whose gradient torch knows."""
    K = setkit.compile(KL_SIMPLEX)
    rng = np.random.default_rng(7)
    y = torch.tensor(rng.uniform(0.1, 3.0, (3, 4)), dtype=torch.float64, requires_grad=True)
    assert torch.autograd.gradcheck(lambda t: torch_project(K, t, "kl"), (y,), eps=1e-6, atol=1e-6, rtol=1e-4)
    t = torch.tensor(rng.standard_normal((3, 4)), dtype=torch.float64, requires_grad=True)
    assert torch.autograd.gradcheck(lambda s: torch_project(K, s, "kl", log_input=True), (t,), eps=1e-6)
    # KL projection onto {x >= 0, sum x = c} from log y is c * softmax(log y) (normalization; common practice)
    w = torch.tensor(rng.standard_normal((3, 4)), dtype=torch.float64)
    (torch_project(K, t, "kl", log_input=True) * w).sum().backward()
    t2 = t.detach().clone().requires_grad_(True)
    (2.0 * torch.softmax(t2, dim=-1) * w).sum().backward()
    np.testing.assert_allclose(t.grad.numpy(), t2.grad.numpy(), atol=1e-14)


def test_torch_batches_follow_the_projection_rule(torch, torch_project):
    """Leading axes are a batch: shape (2, 3, 4) gives 6 projections, each row's gradient that of its own point."""
    K = setkit.compile({"kind": "permutahedron", "weights": [4.0, 2.0, 1.0, 0.0]})
    Y = _point(K, 3.0, seed=11, batch=(2, 3))
    W = np.random.default_rng(12).standard_normal(Y.shape)
    y = torch.tensor(Y, requires_grad=True)
    p = torch_project(K, y)
    assert p.shape == (2, 3, 4) and p.dtype == torch.float64
    (p * torch.tensor(W)).sum().backward()
    for i in range(2):
        for j in range(3):
            yi = torch.tensor(Y[i, j], requires_grad=True)
            (torch_project(K, yi) * torch.tensor(W[i, j])).sum().backward()
            np.testing.assert_allclose(y.grad[i, j].numpy(), yi.grad.numpy(), atol=1e-14)
            np.testing.assert_allclose(p[i, j].detach().numpy(), K.project(Y[i, j]), atol=1e-14)
    # an empty batch goes through both passes
    e = torch.zeros((0, 4), dtype=torch.float64, requires_grad=True)
    pe = torch_project(K, e)
    pe.sum().backward()
    assert pe.shape == (0, 4) and e.grad.shape == (0, 4)


def test_torch_float32_is_preserved(torch, torch_project):
    """float32 in, float32 out (values and gradients rounded once from the float64 computation)."""
    K = setkit.compile({"kind": "simplex", "dim": 6})
    Y = _point(K, 1.0, seed=5, batch=(4,))
    W = np.random.default_rng(6).standard_normal(Y.shape)
    y32 = torch.tensor(Y, dtype=torch.float32, requires_grad=True)
    p32 = torch_project(K, y32)
    (p32 * torch.tensor(W, dtype=torch.float32)).sum().backward()
    assert p32.dtype == torch.float32 and y32.grad.dtype == torch.float32
    Y32 = y32.detach().numpy().astype(np.float64)           # the float32 points, exactly
    np.testing.assert_allclose(p32.detach().numpy(), K.project(Y32), atol=1e-7)
    np.testing.assert_allclose(y32.grad.numpy(), K.project_vjp(Y32, W.astype(np.float32).astype(np.float64)), atol=1e-6)


def test_torch_kink_returns_the_smallest_face_jacobian(torch, torch_project):
    """At a kink every constraint tight at the projection counts as active (setkit.derivatives).

    Simplex: y = (1, 0.5, 0.25) projects to (0.75, 0.25, 0) with threshold 0.25 = y_3, so the
    third coordinate sits exactly at the kink. The gradient is the projector onto the face
    {x_3 = 0, x_1 + x_2 = 1}: the Jacobian at y - eps e_3, the one-sided limit from the side
    where x_3 stays 0 (differences at 1e-7 there agree). Box: at y_i = upper exactly, the
    coordinate counts as fixed (gradient 0), the limit from outside the box.
    """
    K = setkit.compile({"kind": "simplex", "dim": 3})
    y = torch.tensor([1.0, 0.5, 0.25], dtype=torch.float64, requires_grad=True)
    J = torch.autograd.functional.jacobian(lambda t: torch_project(K, t), y)
    want = np.array([[0.5, -0.5, 0.0], [-0.5, 0.5, 0.0], [0.0, 0.0, 0.0]])
    np.testing.assert_allclose(J.numpy(), want, atol=1e-15)
    side = np.array([1.0, 0.5, 0.25 - 1e-3])
    fd = np.stack([(K.project(side + 1e-7 * e) - K.project(side - 1e-7 * e)) / 2e-7 for e in np.eye(3)], axis=1)
    np.testing.assert_allclose(fd, want, atol=1e-6)
    B = setkit.compile({"kind": "box", "dim": 2, "lower": 0.0, "upper": 1.0})
    x = torch.tensor([1.0, 0.5], dtype=torch.float64, requires_grad=True)
    torch_project(B, x).sum().backward()
    assert x.grad.tolist() == [0.0, 1.0]


def test_torch_refuses_other_devices_and_bad_input(torch, torch_project):
    K = setkit.compile({"kind": "simplex", "dim": 3})
    with pytest.raises(InputError, match="device 'meta'.*CPU tensors only.*y.cpu()"):
        torch_project(K, torch.empty(3, device="meta"))
    with pytest.raises(InputError, match="must be a torch.Tensor; got list"):
        torch_project(K, [0.1, 0.2, 0.3])
    with pytest.raises(InputError, match="floating-point.*torch.int64"):
        torch_project(K, torch.tensor([1, 2, 3]))
    with pytest.raises(InputError, match="dense"):
        torch_project(K, torch.tensor([[0.5, 0.0, 0.5]]).to_sparse())
    with pytest.raises(InputError, match="shape"):
        torch_project(K, torch.zeros(4, dtype=torch.float64))
    with pytest.raises(InputError, match="finite"):
        torch_project(K, torch.tensor([np.nan, 0.0, 0.0], dtype=torch.float64))
    with pytest.raises(InputError, match="Did you mean 'kl'"):
        torch_project(K, torch.zeros(3, dtype=torch.float64), geometry="kll")
    with pytest.raises(InputError, match="y > 0"):
        torch_project(K, torch.tensor([1.0, 0.0, 2.0], dtype=torch.float64), geometry="kl")
    with pytest.raises(InputError, match="compiled set.*dict"):
        torch_project({"kind": "simplex", "dim": 3}, torch.zeros(3))


def test_torch_set_without_jacobian_products(torch, torch_project):
    """A set without the needed product (here: the KL Jacobian of a hull) projects without gradients and
    refuses, by name, when one is needed."""
    from setkit.families import lookup
    K = setkit.compile(lookup("hull").examples()[0])
    assert K.routes()["project_kl_vjp"].provider == "none"
    y = torch.ones((1,) + tuple(K.shape), dtype=torch.float64)
    np.testing.assert_allclose(torch_project(K, y, geometry="kl").numpy(), K.project(y.numpy(), geometry="kl"))
    with pytest.raises(UnsupportedOperationError, match="project_kl_vjp"):
        torch_project(K, y.clone().requires_grad_(True), geometry="kl")


def test_missing_framework_names_the_extra(monkeypatch):
    from setkit.autodiff import jax_project, torch_project
    K = setkit.compile({"kind": "simplex", "dim": 3})
    monkeypatch.setitem(sys.modules, "torch", None)       # `import torch` now raises ImportError
    monkeypatch.setitem(sys.modules, "jax", None)
    with pytest.raises(BackendUnavailableError, match=r'pip install "setkit\[torch\]"'):
        torch_project(K, np.zeros(3))
    with pytest.raises(BackendUnavailableError, match=r'pip install "setkit\[jax\]"'):
        jax_project(K, np.zeros(3))
    with pytest.raises(ImportError):          # BackendUnavailableError is also an ImportError
        torch_project(K, np.zeros(3))


# -------------------------------------------------------------------------------------------- JAX
@pytest.fixture(scope="module")
def jx():
    """jax with float64 enabled for this module (restored afterwards), and the layer."""
    jax = pytest.importorskip("jax")
    from jax.test_util import check_grads

    from setkit.autodiff import jax_project
    before = jax.config.jax_enable_x64
    jax.config.update("jax_enable_x64", True)
    yield jax, jax.numpy, check_grads, jax_project
    jax.config.update("jax_enable_x64", before)


def test_jax_check_grads_on_every_set(compiled, jx):
    """jax.test_util.check_grads, reverse mode, first order (numerical directional derivatives), float64."""
    jax, jnp, check_grads, jax_project = jx
    for name, _, scale in SETS:
        K = compiled[name]
        y = jnp.asarray(_point(K, scale, seed=len(name) + 1))
        assert y.dtype == jnp.float64
        check_grads(lambda t, K=K: jax_project(K, t), (y,), order=1, modes=["rev"], eps=1e-6, atol=1e-6, rtol=1e-5)
        np.testing.assert_array_equal(np.asarray(jax_project(K, y)), K.project(np.asarray(y)))
    Kkl = setkit.compile(KL_SIMPLEX)
    y = jnp.asarray(np.random.default_rng(8).uniform(0.1, 3.0, (3, 4)))
    check_grads(lambda t: jax_project(Kkl, t, "kl"), (y,), order=1, modes=["rev"], eps=1e-6, atol=1e-6, rtol=1e-5)
    # from log-input t: total * softmax(t) (normalization; common practice), gradients included
    t = jnp.asarray(np.random.default_rng(9).standard_normal(4))
    w = jnp.asarray(np.random.default_rng(10).standard_normal(4))
    g = jax.grad(lambda s: jnp.dot(jax_project(Kkl, s, "kl", log_input=True), w))(t)
    g_ref = jax.grad(lambda s: jnp.dot(2.0 * jax.nn.softmax(s), w))(t)
    np.testing.assert_allclose(np.asarray(g), np.asarray(g_ref), atol=1e-14)


def test_jax_check_grads_catches_a_wrong_backward(monkeypatch, jx):
    jax, jnp, check_grads, jax_project = jx
    K = setkit.compile({"kind": "simplex", "dim": 4})
    monkeypatch.setattr(setkit.DecisionSet, "project_vjp", lambda self, y, u, **kw: np.array(u, dtype=float))
    with pytest.raises(AssertionError):
        check_grads(lambda t: jax_project(K, t), (jnp.asarray(_point(K, 1.0, seed=3)),), order=1, modes=["rev"],
                    eps=1e-6)


def test_jax_jit_vmap_batches_and_float32(jx):
    """jit and vmap give the batched answers; float32 stays float32; empty batches pass."""
    jax, jnp, _, jax_project = jx
    K = setkit.compile({"kind": "permutahedron", "weights": [4.0, 2.0, 1.0, 0.0]})
    Y = _point(K, 3.0, seed=21, batch=(2, 3))
    W = np.random.default_rng(22).standard_normal(Y.shape)

    def loss(y, w):
        return jnp.sum(jax_project(K, y) * w)
    P = jax.jit(lambda y: jax_project(K, y))(jnp.asarray(Y))
    np.testing.assert_allclose(np.asarray(P), K.project(Y), atol=1e-14)
    per_row = jax.vmap(jax.vmap(jax.grad(loss)))(jnp.asarray(Y), jnp.asarray(W))
    whole = jax.jit(jax.grad(loss))(jnp.asarray(Y), jnp.asarray(W))
    np.testing.assert_allclose(np.asarray(per_row), K.project_vjp(Y, W), atol=1e-14)
    np.testing.assert_allclose(np.asarray(whole), K.project_vjp(Y, W), atol=1e-14)
    # vmap of the gradient with a cotangent shared by every row (unbatched argument)
    shared = jax.vmap(jax.grad(loss), in_axes=(0, None))(jnp.asarray(Y[0]), jnp.asarray(W[0, 0]))
    np.testing.assert_allclose(np.asarray(shared), K.project_vjp(Y[0], np.broadcast_to(W[0, 0], Y[0].shape)), atol=1e-14)
    y32 = jnp.asarray(Y, dtype=jnp.float32)
    p32 = jax_project(K, y32)
    g32 = jax.grad(loss)(y32, jnp.asarray(W, dtype=jnp.float32))
    assert p32.dtype == jnp.float32 and g32.dtype == jnp.float32
    np.testing.assert_allclose(np.asarray(p32), K.project(np.asarray(y32, dtype=np.float64)), atol=1e-6)
    assert jax_project(K, jnp.zeros((0, 4))).shape == (0, 4)


def test_jax_kink_matches_the_torch_convention(jx):
    jax, jnp, _, jax_project = jx
    K = setkit.compile({"kind": "simplex", "dim": 3})
    J = jax.jacrev(lambda t: jax_project(K, t))(jnp.asarray([1.0, 0.5, 0.25]))
    np.testing.assert_allclose(np.asarray(J), [[0.5, -0.5, 0.0], [-0.5, 0.5, 0.0], [0.0, 0.0, 0.0]], atol=1e-15)


def test_jax_errors(jx):
    jax, jnp, _, jax_project = jx
    K = setkit.compile({"kind": "simplex", "dim": 3})
    with pytest.raises(InputError, match="shape"):
        jax_project(K, jnp.zeros(4))
    with pytest.raises(InputError, match="floating-point"):
        jax_project(K, jnp.asarray([1, 2, 3]))
    with pytest.raises(InputError, match="Did you mean 'kl'"):
        jax_project(K, jnp.zeros(3), geometry="kll")
    with pytest.raises(InputError, match="finite"):         # raised in the host callback, re-raised as setkit's
        jax_project(K, jnp.asarray([np.nan, 0.0, 0.0]))
    with pytest.raises(InputError, match="y > 0"):
        jax_project(K, jnp.asarray([1.0, 0.0, 2.0]), "kl")
    with pytest.raises(Exception, match="must be finite"):  # under jit: JAX's runtime error carries the message
        jax.jit(lambda y: jax_project(K, y))(jnp.asarray([np.nan, 0.0, 0.0]))
    from setkit.families import lookup
    N = setkit.compile(lookup("hull").examples()[0])        # no KL Jacobian products
    y = jnp.ones(N.shape)
    np.testing.assert_allclose(np.asarray(jax_project(N, y, "kl")), N.project(np.ones(N.shape), geometry="kl"))
    with pytest.raises(UnsupportedOperationError, match="project_kl_vjp"):
        jax.grad(lambda t: jax_project(N, t, "kl").sum())(y)


def test_jax_refuses_arrays_on_other_devices(jx):
    """No accelerator here: a stand-in array placed on a GPU is refused before any data moves."""
    _, _, _, jax_project = jx

    class Device:
        platform = "gpu"

    class OnGpu:
        def devices(self):
            return {Device()}
    K = setkit.compile({"kind": "simplex", "dim": 3})
    with pytest.raises(InputError, match="placed on gpu.*CPU arrays only.*device_put"):
        jax_project(K, OnGpu())


def test_jax_layer_cache_lets_sets_go(jx):
    """The per-set cache of compiled layers does not keep a set alive once the caller drops it."""
    import gc
    import weakref
    jax, jnp, _, jax_project = jx

    def use_a_set():
        K = setkit.compile({"kind": "simplex", "dim": 3})
        jax.grad(lambda t: jax_project(K, t)[0])(jnp.asarray([0.9, 0.4, -0.2]))
        return weakref.ref(K)
    ref = use_a_set()
    gc.collect()
    assert ref() is None
