import itertools

import numpy as np
import pytest
from scipy.optimize import linear_sum_assignment

import setkit
from setkit.errors import DescriptionError

from .setcheck import check_against_reference


@pytest.mark.parametrize("n", [2, 4])
def test_every_operator_matches_reference(n):
    rng = np.random.default_rng(n)
    K = setkit.compile({"kind": "birkhoff", "n": n})
    P, _ = check_against_reference(K, rng)
    np.testing.assert_allclose(P.sum(axis=-1), 1.0, atol=1e-9)
    np.testing.assert_allclose(P.sum(axis=-2), 1.0, atol=1e-9)


def test_lmo_answers_are_permutation_matrices_with_the_assignment_cost():
    # Birkhoff-von Neumann theorem (Birkhoff 1946; von Neumann 1953): the vertices of the set of
    # doubly-stochastic matrices are the permutation matrices, so a vertex LMO returns one.
    # Outside reference for the optimal cost: scipy.optimize.linear_sum_assignment.
    rng = np.random.default_rng(0)
    K = setkit.compile({"kind": "birkhoff", "n": 6})
    C = rng.standard_normal((5, 6, 6))
    C[0] = np.round(C[0])           # ties
    X = K.lmo(C)
    for c, x in zip(C, X):
        assert set(np.unique(x)) <= {0.0, 1.0}
        np.testing.assert_array_equal(x.sum(axis=0), 1)
        np.testing.assert_array_equal(x.sum(axis=1), 1)
        r, k = linear_sum_assignment(c)
        assert float((c * x).sum()) == pytest.approx(float(c[r, k].sum()), abs=1e-12)


def test_support_is_the_best_permutation_by_brute_force():
    # max over the n! permutations, enumerated (itertools) for n = 4
    rng = np.random.default_rng(1)
    K = setkit.compile({"kind": "birkhoff", "n": 4})
    C = rng.standard_normal((3, 4, 4))
    for c, s in zip(C, K.support(C)):
        best = max(sum(c[i, p[i]] for i in range(4)) for p in itertools.permutations(range(4)))
        assert s == pytest.approx(best, abs=1e-12)


@pytest.mark.parametrize("n", [2, 3, 5])
def test_dimension_is_n_minus_one_squared(n):
    # the Birkhoff polytope has dimension (n-1)^2 (e.g. Brualdi, Combinatorial Matrix Classes, 2006; from memory)
    K = setkit.compile({"kind": "birkhoff", "n": n})
    f = K.node.linear_form()
    rank = np.linalg.matrix_rank(f.A_eq.toarray())
    assert n * n - rank == (n - 1) ** 2
    # independently: the affine span of vertices found by the LMO
    rng = np.random.default_rng(n)
    V = K.lmo(rng.standard_normal((60, n, n))).reshape(60, -1)
    assert np.linalg.matrix_rank(V[1:] - V[0], tol=1e-9) == (n - 1) ** 2


def test_doubly_stochastic_points_are_fixed_and_the_centre_is_uniform():
    rng = np.random.default_rng(2)
    K = setkit.compile({"kind": "birkhoff", "n": 4})
    perms = [np.eye(4)[rng.permutation(4)] for _ in range(5)]
    w = rng.dirichlet(np.ones(5))
    X = sum(wi * p for wi, p in zip(w, perms))
    np.testing.assert_allclose(K.project(X), X, atol=1e-12)
    # a constant matrix projects onto J/n (the set is symmetric under row/column permutations)
    np.testing.assert_allclose(K.project(np.full((4, 4), 7.0)), np.full((4, 4), 0.25), atol=1e-12)


def test_bad_n_is_located():
    with pytest.raises(DescriptionError, match="n must be at least 1") as exc:
        setkit.compile({"kind": "birkhoff", "n": 0})
    assert exc.value.location.key_path() == "n"
