import numpy as np
import pytest
from scipy.optimize import linprog

import setkit
from setkit.errors import DescriptionError, EmptySetError, InputError

from .setcheck import check_against_reference


@pytest.mark.parametrize("rows, cols", [([1, 2, 4], [2, 1, 3, 1]), ([0.5, 0.25], [0.125, 0.5, 0.125]),
                                        ([0, 3, 1], [0, 4])])
def test_every_operator_matches_reference(rows, cols):
    rng = np.random.default_rng(len(rows) * 10 + len(cols))
    K = setkit.compile({"kind": "transport", "rows": rows, "cols": cols})
    assert K.shape == (len(rows), len(cols))
    P, _ = check_against_reference(K, rng)
    np.testing.assert_allclose(P.sum(axis=2), np.broadcast_to(rows, P.shape[:2]), atol=1e-7 * 1e6)
    assert P.min() >= 0


def test_lmo_matches_scipy_linprog():
    # outside reference: scipy.optimize.linprog on the transportation LP written out densely here
    rng = np.random.default_rng(1)
    rows, cols = np.array([3.0, 1.0, 2.0]), np.array([1.5, 1.5, 2.0, 1.0])
    K = setkit.compile({"kind": "transport", "rows": rows.tolist(), "cols": cols.tolist()})
    m, n = 3, 4
    A = np.vstack([np.kron(np.eye(m), np.ones(n)), np.kron(np.ones(m), np.eye(n))])
    for _ in range(4):
        c = rng.standard_normal((m, n))
        res = linprog(c.ravel(), A_eq=A, b_eq=np.concatenate([rows, cols]), bounds=(0, None), method="highs-ipm")
        X = K.lmo(c)
        assert X.shape == (m, n)
        assert float((c * X).sum()) == pytest.approx(res.fun, abs=1e-8)


def test_integral_margins_give_integral_vertices():
    # a transportation polytope with integral margins has integral vertices (total unimodularity,
    # common practice); the LMO returns such a vertex
    rng = np.random.default_rng(2)
    K = setkit.compile({"kind": "transport", "rows": [4, 2, 5], "cols": [3, 3, 3, 2]})
    for _ in range(3):
        X = K.lmo(rng.standard_normal((3, 4)))
        assert np.array_equal(X, np.round(X))


def test_batches_of_matrices():
    rng = np.random.default_rng(3)
    K = setkit.compile({"kind": "transport", "rows": [1, 1], "cols": [0.5, 1.5]})
    Y = rng.standard_normal((2, 3, 2, 2))
    P = K.project(Y)
    assert P.shape == (2, 3, 2, 2)
    np.testing.assert_allclose(P[1, 2], K.project(Y[1, 2]), atol=1e-12)
    assert K.distance(Y).shape == (2, 3)
    with pytest.raises(InputError, match=r"trailing shape \(2, 2\)"):
        K.project(np.zeros(4))


def test_closed_form_two_by_two():
    # 2x2 transport with rows (1, 1), cols (1, 1) is the segment {[[t, 1-t], [1-t, t]] : 0 <= t <= 1};
    # projecting Y gives t = clip((Y11 + Y22 - Y12 - Y21 + 2) / 4, 0, 1) (worked by hand)
    K = setkit.compile({"kind": "transport", "rows": [1, 1], "cols": [1, 1]})
    rng = np.random.default_rng(4)
    for Y in rng.standard_normal((5, 2, 2)):
        t = np.clip((Y[0, 0] + Y[1, 1] - Y[0, 1] - Y[1, 0] + 2) / 4, 0, 1)
        np.testing.assert_allclose(K.project(Y), [[t, 1 - t], [1 - t, t]], atol=1e-12)


def test_unequal_totals_are_empty():
    with pytest.raises(EmptySetError, match="row sums total 3 but the column sums total 4") as exc:
        setkit.compile({"kind": "transport", "rows": [1, 2], "cols": [2, 2]})
    assert exc.value.location.key_path() == "cols"


def test_negative_margins_are_rejected():
    with pytest.raises(DescriptionError, match="nonnegative.*entry 1 is -1") as exc:
        setkit.compile({"kind": "transport", "rows": [2, -1], "cols": [1]})
    assert exc.value.location.key_path() == "rows"


def test_margins_from_npy_file(tmp_path):
    np.save(tmp_path / "stock.npy", np.array([2.0, 3.0]))
    (tmp_path / "depots.yaml").write_text("set:\n  kind: transport\n  rows: stock.npy\n  cols: [1, 1, 3]\n")
    K = setkit.load(tmp_path / "depots.yaml")
    assert K.shape == (2, 3)
