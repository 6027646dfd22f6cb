"""budget: every operator against the cvxpy reference, outside LP solver, bad input."""
import numpy as np
import pytest
from scipy.optimize import linprog

import setkit
from setkit.errors import DescriptionError
from setkit.kernels.simplex import capped_threshold, capped_threshold_rows, project_capped

from .helpers import check_against_reference, check_batch_shapes, check_inside_fixed, sample_points


def _budget(rng, n, scale, weighted, mode, infinite_caps):
    lo = scale * np.round(rng.uniform(-0.5, 0.5, n), 1) * (rng.random(n) < 0.6)
    hi = lo + scale * np.round(rng.uniform(0.0, 1.0, n), 1)          # some lo == hi
    if infinite_caps:
        hi[::3] = np.inf
    w = np.round(rng.uniform(0.5, 3.0, n), 1) if weighted else np.ones(n)
    smin = w @ lo
    smax = w @ np.where(np.isfinite(hi), hi, lo + scale)
    total = float(smin + 0.6 * (smax - smin))
    spec = {"kind": "budget", "dim": n, "total": total, "lower": lo.tolist(),
            "upper": [float(h) if np.isfinite(h) else "inf" for h in hi], "mode": mode}
    if weighted:
        spec["weights"] = w.tolist()
    return setkit.compile(spec)


@pytest.mark.parametrize("scale", [1e-3, 1.0, 1e6])
@pytest.mark.parametrize("weighted, mode, infinite_caps", [
    (False, "equal", False), (True, "equal", True), (True, "at_most", False), (False, "at_most", True)])
def test_budget_against_reference(rng, scale, weighted, mode, infinite_caps):
    K = _budget(rng, 8, scale, weighted, mode, infinite_caps)
    Y = sample_points(K, rng)
    C = np.concatenate([rng.standard_normal((4, 8)), np.round(rng.standard_normal((2, 8)))])
    check_against_reference(K, Y, C)
    check_batch_shapes(K, rng)


def test_budget_inside_points_are_fixed(rng):
    K = _budget(rng, 6, 1.0, True, "equal", False)
    X = K.lmo(rng.standard_normal((12, 6)))
    lam = rng.dirichlet(np.ones(3), size=4)
    check_inside_fixed(K, np.einsum("kj,kjn->kn", lam, X.reshape(4, 3, 6)))


def test_budget_lmo_matches_highs_linprog(rng):
    # outside solver: scipy.optimize.linprog (HiGHS) on the same continuous knapsack
    for mode in ("equal", "at_most"):
        K = _budget(rng, 12, 1.0, True, mode, True)
        node = K.node
        bounds = list(zip(node.lower, [None if not np.isfinite(h) else h for h in node.upper]))
        for c in rng.standard_normal((6, 12)):
            kw = dict(A_eq=[node.weights], b_eq=[node.total]) if mode == "equal" else \
                dict(A_ub=[node.weights], b_ub=[node.total])
            res = linprog(c, bounds=bounds, method="highs", **kw)
            assert res.status == 0
            assert abs(c @ K.lmo(c) - res.fun) <= 1e-9 * max(1.0, abs(res.fun))


def test_budget_greedy_by_ratio_hand_solved():
    # continuous knapsack greedy (Dantzig 1957, "Discrete-variable extremum problems", from memory):
    # fill by increasing c_i / w_i. Ratios 1/2, 3/1, -1/4: coordinate 2 first, then 0.
    K = setkit.budget(dim=3, total=5.0, upper=[2.0, 2.0, 0.5], weights=[2.0, 1.0, 4.0])
    np.testing.assert_allclose(K.lmo([1.0, 3.0, -1.0]), [1.5, 0.0, 0.5])
    Ka = setkit.budget(dim=3, total=5.0, upper=[2.0, 2.0, 0.5], weights=[2.0, 1.0, 4.0], mode="at_most")
    np.testing.assert_allclose(Ka.lmo([1.0, 3.0, -1.0]), [0.0, 0.0, 0.5])


def test_budget_projection_hand_solved():
    # y = (1, 1, -1), caps 0.5, total 1: both first coordinates hit the cap (common practice, KKT)
    K = setkit.budget(dim=3, total=1.0, upper=0.5)
    np.testing.assert_allclose(K.project([1.0, 1.0, -1.0]), [0.5, 0.5, 0.0], atol=1e-15)
    # no caps and unit weights: the budget is the simplex
    Kb = setkit.budget(dim=5, total=2.0)
    Ks = setkit.simplex(dim=5, total=2.0)
    Y = np.random.default_rng(3).standard_normal((20, 5)) * 3
    np.testing.assert_allclose(Kb.project(Y), Ks.project(Y), atol=1e-13)


def test_capped_kernel_paths_agree(rng):
    # compiled breakpoint search vs the sorted-breakpoint batch method vs the median-pivot search
    for trial in range(60):
        n = int(rng.integers(1, 40)) if trial % 4 else int(rng.integers(200, 6000))   # both pivot paths
        Y = rng.standard_normal((3, n)) * 10 ** rng.uniform(-3, 6)
        if trial % 3 == 0:
            Y = np.round(Y)                                           # ties
        lo = rng.uniform(-1, 0, n) * (rng.random() < 0.5)
        hi = lo + rng.uniform(0, 2, n)
        hi[rng.random(n) < 0.3] = np.inf
        if trial % 7 == 0:
            hi = lo.copy()                                            # a single point
        w = rng.uniform(0.1, 3, n)
        smax = w @ np.where(np.isfinite(hi), hi, 1e3)
        total = w @ lo + (smax - w @ lo) * rng.random()
        X = project_capped(Y, lo, hi, w, total)
        lam = capped_threshold_rows(Y, lo, hi, w, total)
        X2 = np.clip(Y - lam[:, None] * w, lo, hi)
        X3 = np.array([np.clip(y - capped_threshold(y, lo, hi, w, total) * w, lo, hi) for y in Y])
        sc = max(1.0, np.abs(Y).max())
        assert np.abs(X - X2).max() <= 1e-10 * sc
        assert np.abs(X - X3).max() <= 1e-10 * sc
        assert np.abs(X @ w - total).max() <= 1e-10 * sc * n


def test_capped_long_vector(rng):
    # the sampled-pivot path (n > 4096) against the sorted-breakpoint method
    n = 20_000
    y = rng.standard_normal((1, n))
    lo, hi, w = np.zeros(n), np.full(n, 0.01), rng.uniform(0.5, 2.0, n)
    for total in (1.0, 0.001, float(w @ hi) * 0.999, float(w @ hi)):
        X = project_capped(y, lo, hi, w, total)
        lam = capped_threshold_rows(y, lo, hi, w, total)
        np.testing.assert_allclose(X, np.clip(y - lam[:, None] * w, lo, hi), atol=1e-12)
        assert abs(X[0] @ w - total) <= 1e-9


def _yaml(tmp_path, body):
    p = tmp_path / "ads.yaml"
    p.write_text("set:\n  kind: budget\n  name: weekly\n" + body)
    return p


@pytest.mark.parametrize("body, key, words", [
    ("  dim: 3\n  total: 3.0\n  upper: [1.0, 0.5, 0.5]\n", "total",
     "total must be at most the sum of upper bounds, 2.0; got 3.0."),
    ("  dim: 2\n  total: 3.0\n  upper: 1.0\n  weights: [1, 0.5]\n", "total",
     "total must be at most the weighted sum of upper bounds, 1.5; got 3.0."),
    ("  dim: 2\n  total: 0.5\n  lower: [0.5, 0.5]\n", "total",
     "total must be at least the sum of lower bounds, 1.0; got 0.5."),
    ("  dim: 2\n  total: 0.5\n  lower: [0.5, 0.5]\n  mode: at_most\n", "total",
     "total must be at least the sum of lower bounds, 1.0; got 0.5."),
    ("  dim: 2\n", "total", "the parameter 'total' is required"),
    ("  dim: 2\n  total: lots\n", "total", "total must be a number; got 'lots'."),
    ("  dim: 3\n  total: 1\n  upper: [1, 1]\n", "upper", "upper must have length 3; got length 2."),
    ("  dim: 2\n  total: 1\n  weights: [1, -2]\n", "weights", "weights must be positive; got -2.0 at index 1."),
    ("  dim: 2\n  total: 1\n  lower: [0, 2]\n  upper: [1, 1]\n", "upper", "at index 1 lower is 2.0 and upper 1.0"),
    ("  dim: 2\n  total: 1\n  mode: maybe\n", "mode", "mode must be one of equal, at_most; got 'maybe'."),
    ("  dim: 2\n  total: 1\n  lower: -inf\n", "lower", "finite"),
    ("  dim: 2\n  total: 1\n  cap: 3\n", "cap", "unknown parameter 'cap'"),
])
def test_budget_bad_descriptions_are_located(tmp_path, body, key, words):
    p = _yaml(tmp_path, body)
    with pytest.raises(DescriptionError) as e:
        setkit.load(p)
    msg = str(e.value)
    assert msg.startswith(f"budget 'weekly' ({p}: set.{key}): "), msg
    assert words in msg, msg


def test_budget_catalog_entry_verifies():
    from setkit.checks import verify
    rep = verify(setkit.load("catalog/weekly-channels.yaml"))
    assert rep.ok, rep.text()


def test_lmo_selection_matches_sorted_greedy(rng):
    # the randomized-selection greedy and the sorted greedy give the same optimal values
    for mode in ("equal", "at_most"):
        for trial in range(8):
            K = _budget(rng, int(rng.integers(1, 60)), 10 ** rng.uniform(-3, 6), trial % 2 == 0, mode, trial % 3 == 0)
            n = K.dim
            C = np.concatenate([rng.standard_normal((5, n)), np.round(rng.standard_normal((3, n)))])
            a, b = K.lmo(C), K.node.lmo_sorted(C)
            sc = K.node.scale() * np.abs(C).sum(axis=1)
            assert np.all(np.abs(np.einsum("ij,ij->i", C, a - b)) <= 1e-12 * sc)
            assert np.all(K.violation(a) <= 1e-12 * K.node.scale() * n)
