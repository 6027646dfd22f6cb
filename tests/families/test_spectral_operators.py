"""Spectral sets (nuclear_ball, spectral_ball, spectraplex): Jacobian products, factored answers,
exact samplers and centroids, the KL refusal, and the Lanczos extreme pairs."""
import numpy as np
import pytest
from scipy.optimize import brentq

import setkit
import setkit.testing
from setkit.errors import SetkitError, UnsupportedOperationError
from setkit.kernels import spectral


def nuclear(m, n, r):
    return setkit.compile({"kind": "nuclear_ball", "rows": m, "cols": n, "radius": r})


def opball(m, n, r):
    return setkit.compile({"kind": "spectral_ball", "rows": m, "cols": n, "radius": r})


def plex(n, t=1.0, mode="equal"):
    return setkit.compile({"kind": "spectraplex", "n": n, "trace": t, "mode": mode})


# -- independent projections built from numpy / scipy routines only ------------------------------
def _capped_threshold(s, total, at_most=False):
    # (s - tau)_+ summing to total, tau by scipy.optimize.brentq (the simplex / l1-ball projection of
    # Held, Wolfe and Crowder 1974, Duchi et al. 2008; from memory)
    if at_most and np.maximum(s, 0).sum() <= total:
        return np.maximum(s, 0.0)
    lo, hi = s.min() - total - 1.0, s.max()
    tau = brentq(lambda t: np.maximum(s - t, 0).sum() - total, lo, hi, xtol=1e-15, rtol=1e-15)
    return np.maximum(s - tau, 0.0)


def numpy_nuclear(Y, r):
    U, s, Vt = np.linalg.svd(Y, full_matrices=False)
    if s.sum() <= r:
        return Y
    return (U * _capped_threshold(s, r)) @ Vt


def numpy_opball(Y, r):
    U, s, Vt = np.linalg.svd(Y, full_matrices=False)
    return (U * np.minimum(s, r)) @ Vt


def numpy_plex(Y, t, mode):
    lam, V = np.linalg.eigh((Y + Y.T) / 2)
    return (V * _capped_threshold(lam, t, at_most=mode == "at_most")) @ V.T


CASES = [
    ("nuclear 3x4", lambda: nuclear(3, 4, 1.2), lambda Y: numpy_nuclear(Y, 1.2)),
    ("nuclear 5x2", lambda: nuclear(5, 2, 0.8), lambda Y: numpy_nuclear(Y, 0.8)),
    ("opball 4x3", lambda: opball(4, 3, 0.9), lambda Y: numpy_opball(Y, 0.9)),
    ("opball 2x5", lambda: opball(2, 5, 1.1), lambda Y: numpy_opball(Y, 1.1)),
    ("plex equal", lambda: plex(4, 1.5), lambda Y: numpy_plex(Y, 1.5, "equal")),
    ("plex at_most", lambda: plex(4, 2.0, "at_most"), lambda Y: numpy_plex(Y, 2.0, "at_most")),
]


# -- derivatives -----------------------------------------------------------------------------------
@pytest.mark.parametrize("name, make, ref", CASES, ids=[c[0] for c in CASES])
def test_jvp_matches_differences_of_an_independent_numpy_projection(name, make, ref):
    """J v against central differences (h = 1e-6) of the projection rebuilt from numpy.linalg.svd /
    eigh and scipy's brentq: the spectral map is smooth away from ties and thresholds, so the
    difference error is O(h^2); Daleckii-Krein (1965) / Lewis (1996) for the formula, from memory."""
    K = make()
    rng = np.random.default_rng(11)
    checked = 0
    for _ in range(6):
        y = rng.standard_normal(K.shape) * 1.3
        v = rng.standard_normal(K.shape)
        h = 1e-6
        fd = (ref(y + h * v) - ref(y - h * v)) / (2 * h)
        fd2 = (ref(y + 2 * h * v) - ref(y - 2 * h * v)) / (4 * h)
        if np.abs(fd - fd2).max() > 1e-7 * np.linalg.norm(v):
            continue                     # a threshold crossed inside the step
        jv = K.project_jvp(y, v)
        np.testing.assert_allclose(jv, fd, atol=1e-6 * np.linalg.norm(v))
        u = rng.standard_normal(K.shape)
        # adjoint: <u, J v> = <J^T u, v> to 1e-10
        assert abs(np.sum(u * jv) - np.sum(K.project_vjp(y, u) * v)) <= 1e-10 * np.linalg.norm(u) * np.linalg.norm(v)
        checked += 1
    assert checked >= 3


@pytest.mark.parametrize("kind", ["nuclear_ball", "spectral_ball", "spectraplex"])
def test_check_derivatives_and_native_routes(kind):
    spec = setkit.families.lookup(kind).examples()[0]
    K = setkit.compile(spec)
    out = setkit.testing.check_derivatives(K, seed=3, points=6)
    assert all(o.worst <= 1.0 and o.cases >= 3 for o in out)
    routes = K.routes()
    assert routes["project_jvp"].provider == "native" and routes["project_vjp"].provider == "native"
    text = K.explain()
    assert "project_jvp    native" in text and "project_vjp    native" in text


@pytest.mark.parametrize("spec", [
    {"kind": "nuclear_ball", "rows": 2, "cols": 2, "radius": 1.0},
    {"kind": "spectral_ball", "rows": 2, "cols": 2, "radius": 1.0},
    {"kind": "spectraplex", "n": 2, "trace": 1.0},
], ids=lambda s: s["kind"])
def test_jacobian_matches_differences_of_the_cvxpy_reference(spec):
    """J v against central differences (h = 1e-3) of the cvxpy reference (Clarabel on the PSD cone):
    second-order difference error ~1e-6 plus the reference's ~1e-8 accuracy over h."""
    K = setkit.compile(spec)
    R = K.with_backends(project="reference")
    rng = np.random.default_rng(5)
    y = np.array([[1.9, 0.4], [-0.3, 0.7]])
    v = rng.standard_normal((2, 2))
    h = 1e-3
    fd = (R.project(y + h * v) - R.project(y - h * v)) / (2 * h)
    np.testing.assert_allclose(K.project_jvp(y, v), fd, atol=1e-4 * np.linalg.norm(v))


def test_worked_jacobians_and_kinks():
    # nuclear ball, Y = diag(3, 1), r = 1: f = (1, 0); off-diagonal divided differences
    # (f1 - f2)/(s1 - s2) = 1/2 on the symmetric part and (f1 + f2)/(s1 + s2) = 1/4 on the skew part,
    # so E_12 maps to 3/8 E_12 + 1/8 E_21; E_11 (the kept value) to 0 (a - mean(a) on one kept value)
    K = nuclear(2, 2, 1.0)
    Y = np.diag([3.0, 1.0])
    np.testing.assert_allclose(K.project_jvp(Y, [[0.0, 1.0], [0.0, 0.0]]), [[0.0, 0.375], [0.125, 0.0]], atol=1e-15)
    np.testing.assert_allclose(K.project_jvp(Y, [[1.0, 0.0], [0.0, 0.0]]), np.zeros((2, 2)), atol=1e-15)
    # on the boundary ||Y||_* = r the norm constraint counts as active: diag(a, b) -> diag(a - m, b - m)
    Yb = np.diag([0.75, 0.25])
    np.testing.assert_allclose(K.project_jvp(Yb, np.diag([1.0, 0.0])), np.diag([0.5, -0.5]), atol=1e-15)
    # strictly inside: the identity
    V = np.array([[0.3, -1.0], [2.0, 0.5]])
    np.testing.assert_array_equal(K.project_jvp(np.diag([0.5, 0.25]), V), V)
    # operator-norm ball: a singular value at the radius counts as clipped
    B = opball(2, 2, 1.0)
    np.testing.assert_allclose(B.project_jvp(np.diag([1.0, 0.5]), np.diag([1.0, 1.0])), np.diag([0.0, 1.0]), atol=1e-15)
    # spectraplex: the skew part of a direction is invisible (points are symmetric)
    P = plex(3, 1.0)
    S = np.diag([0.9, 0.3, -0.2])
    W = np.array([[0.0, 1.0, 0.0], [-1.0, 0.0, 0.0], [0.0, 0.0, 0.0]])
    np.testing.assert_allclose(P.project_jvp(S, W), np.zeros((3, 3)), atol=1e-15)
    # f = (0.8, 0.2, 0): a trace-preserving direction within the kept block passes unchanged
    D = np.diag([1.0, -1.0, 0.0])
    np.testing.assert_allclose(P.project_jvp(S, D), D, atol=1e-15)


@pytest.mark.parametrize("make", [lambda: nuclear(3, 2, 1.0), lambda: opball(2, 3, 1.0), lambda: plex(3, 1.0)])
def test_jacobian_products_at_extreme_magnitudes_and_empty_batches(make):
    K = make()
    rng = np.random.default_rng(2)
    y = rng.standard_normal(K.shape) * 2
    v = rng.standard_normal(K.shape)
    J = K.project_jvp(y, v)
    node = K.node
    # P_{c r}(c y) = c P_r(y), so J_{c r}(c y) = J_r(y): checked with powers of two (exact scaling)
    for c in (2.0 ** -900, 2.0 ** 900):
        field = {"nuclear_ball": "radius", "spectral_ball": "radius", "spectraplex": "trace"}[node.kind]
        spec = {"kind": node.kind, **{k: getattr(node, k) for k in ("rows", "cols", "n", "mode")
                                      if hasattr(node, k)}, field: getattr(node, field) * c}
        Kc = setkit.compile(spec)
        np.testing.assert_allclose(Kc.project_jvp(c * y, v), J, rtol=1e-9, atol=1e-12)
        big = Kc.project_jvp(c * y, 1e300 * v)
        assert np.all(np.isfinite(big))
        np.testing.assert_allclose(big / 1e300, J, rtol=1e-9, atol=1e-12)
    empty = np.zeros((0,) + K.shape)
    assert K.project_jvp(empty, empty).shape == empty.shape
    assert K.project_vjp(empty, empty).shape == empty.shape


# -- factored answers ------------------------------------------------------------------------------
def _rebuild(U, s, Vt):
    return np.einsum("...iq,...q,...qj->...ij", U, s, Vt)


@pytest.mark.parametrize("make", [lambda: nuclear(4, 3, 1.5), lambda: nuclear(2, 5, 0.4), lambda: opball(3, 4, 0.7),
                                  lambda: plex(4, 2.0), lambda: plex(3, 1.0, "at_most")])
def test_factors_rebuild_the_dense_answers(make):
    K = make()
    rng = np.random.default_rng(4)
    Y = rng.standard_normal((2, 3) + K.shape) * np.array([0.1, 1.0, 10.0])[:, None, None]
    U, s, Vt = K.project_factors(Y)
    assert U.shape[:2] == s.shape[:2] == Vt.shape[:2] == (2, 3)
    np.testing.assert_allclose(_rebuild(U, s, Vt), K.project(Y), atol=1e-12 * max(1.0, np.abs(Y).max()))
    assert np.all(s >= 0)
    # orthonormal factors (numpy.linalg.svd / eigh columns)
    q = s.shape[-1]
    np.testing.assert_allclose(np.swapaxes(U, -1, -2) @ U, np.broadcast_to(np.eye(q), U.shape[:2] + (q, q)), atol=1e-12)
    if K.kind == "nuclear_ball":
        ranks = np.linalg.matrix_rank(K.project(Y).reshape((-1,) + K.shape), tol=1e-10)
        assert q == max(1, ranks.max())        # only the kept singular values
    Lu, Ls, Lvt = K.lmo_factors(Y)
    np.testing.assert_allclose(_rebuild(Lu, Ls, Lvt), K.lmo(Y), atol=1e-12)
    u1, s1, v1 = K.project_factors(Y[0, 0])       # a single point: no batch axes
    assert u1.ndim == 2 and s1.ndim == 1 and v1.ndim == 2


def test_factors_of_large_lmo_and_unsupported_sets(rng):
    K = nuclear(130, 150, 2.0)
    C = rng.standard_normal((130, 150))
    U, s, Vt = K.lmo_factors(C)
    assert U.shape == (130, 1) and s.tolist() == [2.0] and Vt.shape == (1, 150)
    np.testing.assert_allclose(U * s @ Vt, K.lmo(C), atol=1e-15)
    with pytest.raises(UnsupportedOperationError, match="project_factors on simplex"):
        setkit.compile({"kind": "simplex", "dim": 3}).project_factors([1.0, 2.0, 3.0])
    # zero direction: the LMO answer 0 is a zero singular value
    U, s, Vt = K.lmo_factors(np.zeros((130, 150)))
    assert s.tolist() == [0.0]
    U, s, Vt = plex(3, 1.0, "at_most").lmo_factors(np.eye(3))
    assert s.tolist() == [0.0]


# -- samples and centroids -------------------------------------------------------------------------
def _mean_with_error(x):
    return float(np.mean(x)), float(np.std(x) / np.sqrt(x.size))


@pytest.mark.parametrize("measure", ["vertices", "directions"])
def test_exact_vertex_samples_are_extreme_points_with_sphere_moments(measure):
    # second moments of the uniform law on the unit sphere of R^d: E[u_1^2] = 1/d and
    # E[u_1^4] = 3/(d(d+2)) (common practice)
    m, n, r = 3, 4, 1.5
    X = nuclear(m, n, r).sample(4000, measure=measure, rng=7)
    s = np.linalg.svd(X, compute_uv=False)
    np.testing.assert_allclose(s[:, 0], r, rtol=1e-12)
    assert np.all(s[:, 1:] <= 1e-12)                            # rank one, nuclear norm r: extreme
    mu, se = _mean_with_error(X[:, 0, 0] ** 2)
    assert abs(mu - r * r / (m * n)) <= 5 * se
    X = opball(2, 5, 0.7).sample(4000, measure=measure, rng=8)
    np.testing.assert_allclose(np.linalg.svd(X, compute_uv=False), 0.7, rtol=1e-12)   # all values at the radius
    mu, se = _mean_with_error(X[:, 0, 0] ** 2)                   # a row of a Haar 2 x 5 is uniform on S^4
    assert abs(mu - 0.49 / 5) <= 5 * se
    t, d = 2.0, 4
    X = plex(d, t).sample(4000, measure=measure, rng=9)
    lam = np.linalg.eigvalsh(X)
    np.testing.assert_allclose(lam[:, -1], t, rtol=1e-12)
    assert np.all(np.abs(lam[:, :-1]) <= 1e-12)
    mu, se = _mean_with_error(X[:, 0, 0] ** 2)
    assert abs(mu - t * t * 3 / (d * (d + 2))) <= 5 * se
    # the centroid t/n I (orthogonal invariance) against the sample mean
    mean = X.mean(axis=0)
    assert np.abs(mean - t / d * np.eye(d)).max() <= 5 * X.std(axis=0).max() / np.sqrt(4000)
    np.testing.assert_allclose(plex(d, t).centroid(measure=measure), t / d * np.eye(d), atol=1e-15)


def test_direction_samples_follow_the_law_of_the_lmo_of_a_gaussian():
    # the generic Monte Carlo route: lmo(g) for Gaussian g, compared on a second moment with the exact sampler
    K = nuclear(2, 3, 1.0)
    rng = np.random.default_rng(3)
    L = K.lmo(rng.standard_normal((3000, 2, 3)))
    X = K.sample(3000, measure="directions", rng=4)
    a, sa = _mean_with_error(L[:, 1, 2] ** 2)
    b, sb = _mean_with_error(X[:, 1, 2] ** 2)
    assert abs(a - b) <= 5 * np.hypot(sa, sb)


def test_volume_samples_where_exact_and_the_at_most_volume_centroid():
    # a single-row nuclear ball is the l2 ball: ||x|| / r has density d rho^(d-1), mean d/(d+1)
    X = nuclear(1, 4, 2.0).sample(4000, measure="volume", rng=1)
    norms = np.linalg.norm(X.reshape(4000, -1), axis=1) / 2.0
    assert norms.max() <= 1.0
    mu, se = _mean_with_error(norms)
    assert abs(mu - 4 / 5) <= 5 * se
    # spectraplex {X PSD, tr X <= t}, n = 2: centroid t D/((D+1) n) I with D = 3, i.e. 3t/8 I, against
    # rejection sampling from the box a, c in [0, t], b in [-t/2, t/2] (common practice)
    t = 2.0
    rng = np.random.default_rng(0)
    a, b, c = rng.uniform(0, t, 200_000), rng.uniform(-t / 2, t / 2, 200_000), rng.uniform(0, t, 200_000)
    keep = (a + c <= t) & (a * c >= b * b)
    mu, se = _mean_with_error(a[keep])
    exact = plex(2, t, "at_most").centroid(measure="volume")
    np.testing.assert_allclose(exact, 3 * t / 8 * np.eye(2), rtol=1e-15)
    assert abs(mu - exact[0, 0]) <= 5 * se
    # n = 1 at_most is [0, t]: exact uniform draws
    Z = plex(1, 3.0, "at_most").sample(1000, measure="volume", rng=2)
    assert Z.min() >= 0 and Z.max() <= 3.0 and abs(Z.mean() - 1.5) <= 5 * Z.std() / np.sqrt(1000)


def test_no_exact_sampler_where_none_is_known():
    # volume of a 2x2 nuclear ball and of the spectraplex with n >= 2: no exact sampler (hit-and-run serves it)
    assert nuclear(2, 2, 1.0).node.exact_sample(3, "volume", np.random.default_rng(0)) is None
    assert plex(3).node.exact_sample(3, "volume", np.random.default_rng(0)) is None
    assert plex(3, 1.0, "at_most").node.exact_sample(3, "vertices", np.random.default_rng(0)) is None


# -- the KL geometry -------------------------------------------------------------------------------
@pytest.mark.parametrize("make, words", [(lambda: nuclear(2, 3, 1.0), "can be negative"),
                                         (lambda: opball(2, 2, 1.0), "can be negative"),
                                         (lambda: plex(3, 1.0), "off-diagonal entries")])
def test_kl_projection_is_refused_with_the_reason(make, words):
    K = make()
    y = np.full(K.shape, 0.5)
    for call in (lambda: K.project(y, geometry="kl"), lambda: K.distance(y, geometry="kl")):
        with pytest.raises(SetkitError) as e:
            call()
        assert isinstance(e.value, UnsupportedOperationError)
        assert "nonnegative orthant" in str(e.value) and words in str(e.value)
    # a one-entry spectraplex is inside the orthant: {t} or [0, t]
    np.testing.assert_allclose(plex(1, 2.0).project([[5.0]], geometry="kl"), [[2.0]], rtol=1e-6)


# -- Lanczos extreme pairs -------------------------------------------------------------------------
def test_lanczos_on_noise_meets_its_stated_value_bound():
    rng = np.random.default_rng(21)
    C = rng.standard_normal((400, 300))
    C /= 2 * np.abs(C).max()
    s1 = np.linalg.svd(C, compute_uv=False)[0]          # numpy.linalg.svd as the yardstick
    u, sv, v, res, how = spectral.top_singular_triplet(C)
    assert "Lanczos" in how and "value error <=" in how
    assert s1 * (1 - spectral.VALUE_RTOL) <= u @ C @ v <= s1 * (1 + 1e-14)
    np.testing.assert_allclose([np.linalg.norm(u), np.linalg.norm(v)], 1.0, rtol=1e-14)
    S = C[:300] + C[:300].T
    w = np.linalg.eigvalsh(S)
    scale = np.abs(w).max()
    for largest, want in ((True, w[-1]), (False, w[0])):
        lam, x, r, how = spectral.extreme_eigenpair(S, largest)
        assert abs(lam - want) <= spectral.VALUE_RTOL * scale
        np.testing.assert_allclose(r, np.linalg.norm(S @ x - lam * x), rtol=1e-6, atol=1e-15)


def test_lanczos_on_rank_one_and_tied_matrices(rng):
    a, b = rng.standard_normal(200), rng.standard_normal(150)
    R1 = np.outer(a, b) / np.abs(np.outer(a, b)).max()
    u, sv, v, res, how = spectral.top_singular_triplet(R1)
    # the stated accuracy (VALUE_RTOL relative, from below); the block Krylov run measures about 2e-11 here
    # (numpy.linalg.norm(., 2), a LAPACK SVD, as the yardstick)
    s1 = np.linalg.norm(R1, 2)
    assert s1 * (1 - spectral.VALUE_RTOL) <= sv <= s1 * (1 + 1e-13)
    Q, _ = np.linalg.qr(rng.standard_normal((200, 200)))     # every singular value tied at 1/2
    u, sv, v, res, how = spectral.top_singular_triplet(0.5 * Q)
    np.testing.assert_allclose(sv, 0.5, rtol=1e-12)


def test_compiled_krylov_passes_match_numpy(rng):
    # the one-pass Gram product A^T (A x) and the symmetric product S x of the compiled Lanczos,
    # in both precisions, against numpy's matrix products (numpy.matmul)
    A = rng.standard_normal((37, 23))
    X = rng.standard_normal((2, 23))
    S = A.T @ A - 3.0 * np.eye(23)
    for dt, tol in ((np.float64, 1e-12), (np.float32, 1e-5)):
        out, s = np.empty((2, 23), dtype=dt), np.empty(2, dtype=dt)
        spectral._gram_rows(A.astype(dt), X.astype(dt), out, s)
        want = (A.T @ (A @ X.T)).T
        np.testing.assert_allclose(out, want, rtol=0, atol=tol * np.abs(want).max())
        spectral._sym_rows(S.astype(dt), X.astype(dt), out, s)
        want = (S @ X.T).T
        np.testing.assert_allclose(out, want, rtol=0, atol=tol * np.abs(want).max())
    # the basis extension: rows orthonormal to the basis and to each other, W = Q_basis^T col + R^T Q_new;
    # a row dependent on the others (2 x row 0) is replaced by a unit row orthogonal to the rest,
    # its R entry keeping its true (rounding-level) length
    Qb = np.zeros((2, 23))
    Qb[0] = X[1] / np.linalg.norm(X[1])
    W = np.vstack([X[0], 2.0 * X[0], X[1] + X[0], Qb[0]])
    Wq, col, R = W.copy(), np.zeros((1, 4)), np.zeros((4, 4))
    spectral._extend_basis(Qb, 1, Wq, col, R)
    np.testing.assert_allclose((Qb[:1].T @ col).T + R.T @ Wq, W,
                               atol=1e-12)
    assert R[1, 1] <= 1e-14 * np.linalg.norm(W) and R[3, 3] <= 1e-14 and R[2, 2] <= 1e-14
    full = np.vstack([Qb[:1], Wq])
    np.testing.assert_allclose(full @ full.T, np.eye(5), atol=1e-12)


@pytest.mark.parametrize("m, n", [(700, 500), (300, 640)])
def test_block_lanczos_on_noise_against_lapack(m, n):
    # pure Gaussian noise: the hardest case (the top singular values nearly tied); the stated bound
    # holds against numpy.linalg.svd and numpy.linalg.eigvalsh, and the reported residual is measured
    rng = np.random.default_rng(m + n)
    C = rng.standard_normal((m, n))
    C /= 2.0 * np.abs(C).max()
    s1 = np.linalg.svd(C, compute_uv=False)[0]
    u, sv, v, res, how = spectral.top_singular_triplet(C)
    assert "Lanczos" in how
    assert s1 * (1 - spectral.VALUE_RTOL) <= u @ C @ v <= s1 * (1 + 1e-13)
    np.testing.assert_allclose(res, max(np.linalg.norm(C @ v - sv * u), np.linalg.norm(C.T @ u - sv * v)),
                               rtol=1e-6)
    k = min(m, n)
    S = C[:k, :k] + C[:k, :k].T
    w = np.linalg.eigvalsh(S)
    for largest, want in ((True, w[-1]), (False, w[0])):
        lam, x, r, how = spectral.extreme_eigenpair(S, largest)
        assert abs(lam - want) <= spectral.VALUE_RTOL * np.abs(w).max()


def test_block_lanczos_on_invariant_subspaces_and_negative_spectra():
    # few distinct eigenvalues: the Krylov space becomes invariant after a step or two (the breakdown
    # path replaces vanished basis rows by fresh orthogonal ones); a negative definite matrix checks
    # that no spurious zero Ritz value is reported as the largest. Yardstick: numpy.linalg.eigvalsh
    rng = np.random.default_rng(8)
    B, _ = np.linalg.qr(rng.standard_normal((200, 3)))
    P = B @ B.T                                       # eigenvalues 1 (x3) and 0 (x197)
    for S in (0.5 * P, -0.25 * np.eye(200) - 0.5 * P, 0.5 * P - 0.75 * (np.eye(200) - P)):
        w = np.linalg.eigvalsh(S)
        for largest, want in ((True, w[-1]), (False, w[0])):
            lam, x, r, how = spectral.extreme_eigenpair(S, largest)
            assert abs(lam - want) <= spectral.VALUE_RTOL * np.abs(w).max() + 1e-15
            np.testing.assert_allclose(np.linalg.norm(x), 1.0, rtol=1e-12)
            assert np.linalg.norm(S @ x - lam * x) <= 1e-6 * np.abs(w).max()
    u, sv, v, res, how = spectral.top_singular_triplet(0.5 * P[:, :150])
    np.testing.assert_allclose(sv, np.linalg.norm(0.5 * P[:, :150], 2), rtol=1e-9)
