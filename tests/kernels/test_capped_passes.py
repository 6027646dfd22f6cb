"""The capped-simplex KL path (cap-set passes) agrees with the selection path and with the capping rule."""
import numpy as np
import pytest

import setkit
from setkit.kernels.bregman import budget_kl


def _general(K, T):
    """The selection-based path for the same set (structure flags say 'bounds differ per coordinate')."""
    node = K.node
    return budget_kl(T, node.lower, node.upper, node.weights, node.total, node.mode == "at_most", "check", None,
                     (True, False, True))


@pytest.mark.parametrize("mode", ["equal", "at_most"])
@pytest.mark.parametrize("w0", [1.0, 0.25, 4.0])
def test_passes_agree_with_selection_on_random_rows(mode, w0):
    rng = np.random.default_rng(int(w0 * 10) + (mode == "equal"))
    for _ in range(40):
        n = int(rng.integers(1, 80))
        cap = float(rng.uniform(0.01, 2.0))
        total = float(rng.uniform(0.01, 1.05 * n * cap * w0))
        try:
            K = setkit.compile({"kind": "budget", "dim": n, "total": total, "upper": cap, "weights": [w0] * n,
                                "mode": mode})
        except setkit.SetkitError:
            continue                          # total beyond n * cap * w0: an empty set, refused at compile
        T = rng.choice([1e-3, 1.0, 30.0]) * rng.standard_normal((4, n)) + rng.choice([-300.0, 0.0, 300.0])
        T[1, : n // 2] = T[1, 0]              # ties
        X = K.run("project_kl", T)[0]
        np.testing.assert_allclose(X, _general(K, T), rtol=0, atol=1e-12 * max(1.0, cap))


def test_capping_rule_worked_example():
    # capped simplex, cap 0.5, y = (4, 1, 1): the largest is capped at 0.5, the rest share 0.5 in proportion
    # to y (the capping rule of the capped simplex; worked by hand)
    K = setkit.compile({"kind": "budget", "dim": 3, "total": 1.0, "upper": 0.5})
    np.testing.assert_allclose(K.project([4.0, 1.0, 1.0], geometry="kl"), [0.5, 0.25, 0.25], atol=1e-15)


def test_slow_geometric_rows_fall_back_exactly():
    # e_i = 2^-i: each pass caps about one more coordinate, so a near-full budget needs more than the 64
    # passes allowed and the row is finished by selection; both paths must agree
    n = 865                                   # spread 865 log 2 = 600 < 700: the passes serve the row
    t = np.log(0.5) * np.arange(n)
    for total in (1.0, 200.0, 432.5, 862.0):    # the last two need about 68 and 117 passes
        K = setkit.compile({"kind": "budget", "dim": n, "total": total, "upper": 1.0})
        X = K.run("project_kl", t[None, :])[0]
        np.testing.assert_allclose(X, _general(K, t[None, :]), rtol=0, atol=1e-12)
        assert abs(X.sum() - total) <= 1e-10 * total and X.max() <= 1.0


def test_large_spread_rows_take_the_log_domain_path():
    # log inputs spanning more than 700 are not served by the passes (exp(t - max t) underflows)
    n = 50
    t = np.linspace(-900.0, 0.0, n)
    K = setkit.compile({"kind": "budget", "dim": n, "total": 2.0, "upper": 0.9})
    X = K.run("project_kl", t[None, :])[0]
    assert abs(X.sum() - 2.0) <= 1e-12 and X.max() <= 0.9
    np.testing.assert_allclose(X, _general(K, t[None, :]), rtol=0, atol=1e-13)
