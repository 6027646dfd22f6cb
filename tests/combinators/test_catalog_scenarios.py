"""The bundled combinator scenarios in catalog/: load, compare with the reference, check their facts."""
import os

import numpy as np
import pytest

import setkit
from setkit.description import read_file
from setkit.families import known_kinds

from .fixtures import PermutahedronFixture, check_against_reference, halfspaces

ROOT = os.path.join(os.path.dirname(__file__), "..", "..", "catalog")


def load_scenario(name):
    """Compile a catalog file; kinds other branches provide are replaced by the private fixtures
    (same data) until those families are merged."""
    path = os.path.join(ROOT, name)
    kinds = set(known_kinds())
    if {"permutahedron", "polyhedron"} <= kinds:
        return setkit.load(path)
    data = read_file(path)

    def swap(spec):
        if isinstance(spec, dict):
            if spec.get("kind") == "permutahedron" and "permutahedron" not in kinds:
                return PermutahedronFixture(weights=np.asarray(spec["weights"], float))
            if spec.get("kind") == "polyhedron" and "polyhedron" not in kinds:
                return halfspaces(spec["A"], spec["b"])
            return {k: swap(v) for k, v in spec.items()}
        if isinstance(spec, list):
            return [swap(v) for v in spec]
        return spec
    return setkit.compile(swap(data))


def test_fair_exposure_ranking(rng):
    K = load_scenario("fair-exposure-ranking.yaml")
    assert K.shape == (8,)
    check_against_reference(K, rng, n=2, scales=(1e-3, 1.0, 30.0))
    # every point keeps the total exposure and meets both floors
    X = K.project(rng.standard_normal((5, 8)))
    w = np.array([1.0, 0.6309, 0.5, 0.4307, 0.3869, 0.3562, 0.3333, 0.3155])
    assert np.allclose(X.sum(axis=1), w.sum(), atol=1e-8)
    assert np.all(X[:, [0, 2, 5]].sum(axis=1) >= 1.38 - 1e-8)
    assert np.all(X[:, [3, 6]].sum(axis=1) >= 0.79 - 1e-8)
    # the LMO is one LP on the Birkhoff extended formulation: 8 + 64 variables
    assert K.node.linear_form().n_aux == 64
    # rearrangement inequality (Hardy, Littlewood and Polya, Inequalities, 1934): without the floors
    # the best ranking for scores s puts the largest weight on the largest score; the floors can only lower it
    s = rng.standard_normal(8)
    assert K.support(s) <= np.sort(s) @ np.sort(w) + 1e-9


def test_sector_capped_portfolio(rng):
    K = load_scenario("sector-capped-portfolio.yaml")
    check_against_reference(K, rng, n=2)
    X = K.project(rng.standard_normal((6, 10)) * 2)
    assert np.allclose(X.sum(axis=1), 1.0, atol=1e-8)
    assert X.min() >= -1e-9 and X.max() <= 0.2 + 1e-9
    sectors = [X[:, :4].sum(axis=1), X[:, 4:7].sum(axis=1), X[:, 7:].sum(axis=1)]
    assert np.all(sectors[0] <= 0.4 + 1e-8) and np.all(sectors[1] <= 0.3 + 1e-8) and np.all(sectors[2] <= 0.35 + 1e-8)
    # LMO against scipy.optimize.linprog on the same constraints
    from scipy.optimize import linprog
    c = rng.standard_normal(10)
    A = np.zeros((3, 10))
    A[0, :4], A[1, 4:7], A[2, 7:] = 1, 1, 1
    lp = linprog(c, A_ub=A, b_ub=[0.4, 0.3, 0.35], A_eq=np.ones((1, 10)), b_eq=[1.0], bounds=[(0, 0.2)] * 10,
                 method="highs")
    assert c @ K.lmo(c) == pytest.approx(lp.fun, abs=1e-9)


def test_per_learner_minutes(rng):
    K = setkit.load(os.path.join(ROOT, "per-learner-minutes.yaml"))
    assert K.shape == (6000,) and len(K.node.blocks) == 1
    Y = rng.standard_normal((3, 6000)) * 20
    P = K.project(Y)
    assert np.allclose(P.reshape(3, 1000, 6).sum(axis=2), 30.0)
    # a few blocks against the reference projection onto one simplex
    ref = setkit.compile({"kind": "simplex", "dim": 6, "total": 30}).with_backends(project="reference")
    for j in (0, 517, 999):
        assert np.allclose(P[:, 6 * j:6 * j + 6], ref.project(Y[:, 6 * j:6 * j + 6]), atol=2e-5 * 30)
    # support of the product = sum of block supports = 30 * sum of the block maxima
    c = rng.standard_normal(6000)
    assert K.support(c) == pytest.approx(30 * c.reshape(1000, 6).max(axis=1).sum())
