import numpy as np
import pytest
import scipy.sparse as sp
from scipy.optimize import linprog

import setkit
from setkit.errors import DescriptionError, EmptySetError, SolveError, UnboundedDirectionError

from .setcheck import check_against_reference


def random_polytope(rng, n=4, m=8):
    """{A x <= b, C x = d, lower <= x <= upper} containing the point x0."""
    A = rng.standard_normal((m, n))
    x0 = rng.uniform(-0.5, 0.5, n)
    b = A @ x0 + rng.uniform(0.1, 1.0, m)
    C = rng.standard_normal((1, n))
    d = C @ x0
    return {"kind": "polyhedron", "A": A.tolist(), "b": b.tolist(), "C": C.tolist(), "d": d.tolist(),
            "lower": -2.0, "upper": 2.0}, x0


@pytest.mark.parametrize("seed", [0, 1])
def test_every_operator_matches_reference(seed):
    rng = np.random.default_rng(seed)
    spec, _ = random_polytope(rng)
    K = setkit.compile(spec)
    assert K.routes()["project"].provider == "osqp" and K.routes()["lmo"].provider == "highs"
    check_against_reference(K, rng, osqp=False)


def test_lmo_matches_scipy_linprog_interior_point():
    # outside reference: scipy.optimize.linprog with the interior-point method (explicit bounds)
    rng = np.random.default_rng(2)
    spec, _ = random_polytope(rng, n=5, m=10)
    K = setkit.compile(spec)
    for _ in range(3):
        c = rng.standard_normal(5)
        res = linprog(c, A_ub=spec["A"], b_ub=spec["b"], A_eq=spec["C"], b_eq=spec["d"], bounds=(-2, 2),
                      method="highs-ipm")
        assert float(c @ K.lmo(c)) == pytest.approx(res.fun, abs=1e-7)


def test_sparse_matrices_and_array_files(tmp_path):
    rng = np.random.default_rng(3)
    spec, x0 = random_polytope(rng)
    A = np.array(spec["A"])
    sp.save_npz(tmp_path / "A.npz", sp.csr_matrix(A))
    np.save(tmp_path / "b.npy", np.array(spec["b"]))
    np.savetxt(tmp_path / "C.csv", np.array(spec["C"]), delimiter=",")
    (tmp_path / "shelf.yaml").write_text(
        f"set:\n  kind: polyhedron\n  A: A.npz\n  b: b.npy\n  C: C.csv\n  d: {spec['d']}\n  lower: -2\n  upper: 2\n")
    K_file = setkit.load(tmp_path / "shelf.yaml")
    K_dense = setkit.compile(spec)
    K_sparse = setkit.compile({**spec, "A": sp.csr_matrix(A)})
    y = rng.standard_normal(4) * 3
    p = K_dense.project(y)
    np.testing.assert_allclose(K_file.project(y), p, atol=1e-9)
    np.testing.assert_allclose(K_sparse.project(y), p, atol=1e-9)


def test_box_as_polyhedron_projects_by_clipping():
    # {lower <= x <= upper} alone: the projection is the clip (common practice)
    K = setkit.compile({"kind": "polyhedron", "lower": [0, -1, 2], "upper": [1, 1, 3]})
    y = np.array([[5.0, -7.0, 2.5], [-1.0, 0.5, 10.0]])
    np.testing.assert_allclose(K.project(y), np.clip(y, [0, -1, 2], [1, 1, 3]), atol=1e-9)


def test_halfspace_closed_form():
    # projection onto {a.x <= b}: y - max(0, a.y - b) a / |a|^2 (common practice)
    rng = np.random.default_rng(4)
    a = rng.standard_normal(5)
    K = setkit.compile({"kind": "polyhedron", "A": [a.tolist()], "b": [0.5]})
    for y in 3 * rng.standard_normal((4, 5)):
        expect = y - max(0.0, a @ y - 0.5) * a / (a @ a)
        np.testing.assert_allclose(K.project(y), expect, atol=1e-9)


def test_unbounded_set_projects_but_its_lmo_reports_the_direction():
    K = setkit.compile({"kind": "polyhedron", "A": [[1, -1], [-1, -1]], "b": [1, 1]})   # a cone-like wedge
    y = np.array([3.0, -4.0])
    # worked by hand: y violates x1 - x2 <= 1 and sits on -x1 - x2 = 1; the nearest point is the apex (0, -1)
    np.testing.assert_allclose(K.project(y), [0.0, -1.0], atol=1e-12)
    # the interior-point reference is less accurate on this unbounded set
    np.testing.assert_allclose(K.project(y), K.with_backends(project="reference").project(y), atol=1e-4)
    c = np.array([0.2, -1.0])      # the wedge opens along +x2, so -x2 decreases without bound
    with pytest.raises(UnboundedDirectionError, match="unbounded along the direction") as exc:
        K.lmo(c)
    d = exc.value.ray
    A = np.array([[1, -1], [-1, -1]])
    assert np.all(A @ d <= 1e-12) and c @ d < 0
    # a direction with a minimizer on the same set
    np.testing.assert_allclose(K.lmo([0.0, 1.0]), [0.0, -1.0], atol=1e-9)
    assert K.support([0.0, -1.0]) == pytest.approx(1.0)


def test_contradictory_constraints_name_the_conflict():
    with pytest.raises(EmptySetError, match=r"rows 0, 1 of A x <= b cannot hold at once") as exc:
        setkit.compile({"kind": "polyhedron", "A": [[1, 1], [-1, -1], [1, 0]], "b": [1, -2, 5]})
    assert exc.value.location.key_path() == "A"
    with pytest.raises(EmptySetError, match=r"row 0 of C x = d.*bounds"):
        setkit.compile({"kind": "polyhedron", "C": [[1, 1]], "d": [5], "upper": [1, 1]})


@pytest.mark.parametrize("spec, where, match", [
    ({"A": [[1, 2]], "b": [1, 2]}, "b", "length 1"),
    ({"A": [[1, 2]]}, "b", "b .* is required"),
    ({"A": [[1, 2]], "b": [1], "C": [[1, 2, 3]], "d": [0]}, "C", "2 columns"),
    ({"b": [1]}, "b", "A is missing"),
    ({"lower": 0}, "dim", "dimension is unknown"),
    ({"dim": 2, "lower": [0, 3], "upper": [1, 1]}, "lower", "exceeds upper"),
    ({"A": [[1, "x"]], "b": [1]}, "A", "numeric"),
])
def test_bad_input_is_located(spec, where, match):
    with pytest.raises(DescriptionError, match=match) as exc:
        setkit.compile({"kind": "polyhedron", **spec})
    assert exc.value.location.key_path() == where


def test_osqp_failure_is_reported_not_returned(monkeypatch):
    import setkit.backends.osqp as osqp_backend
    monkeypatch.setitem(osqp_backend.SETTINGS, "max_iter", 1)
    monkeypatch.setitem(osqp_backend.SETTINGS, "polishing", False)
    monkeypatch.setattr(osqp_backend, "TIGHT_MAX_ITER", 1)
    monkeypatch.setattr(osqp_backend, "RESTART", dict(rho=0.1, max_iter=1))
    rng = np.random.default_rng(5)
    spec, _ = random_polytope(rng)
    K = setkit.compile(spec)
    y = 10 * rng.standard_normal(4)
    # chosen by the caller: no fallback, the failure is raised
    with pytest.raises(SolveError, match="not solved cleanly"):
        K.with_backends(project="osqp").project(y)
    # the default route: the failure is named and the next backend of the chain answers
    d = K.project(y, details=True)
    assert "not solved cleanly" in d.backend_status and "answered by highs_qp" in d.backend_status
