"""The single-point fast path of DecisionSet gives exactly what the general (batched) path gives.

One float64 C-contiguous point of exact shape skips the batch reshaping; these checks compare it
bit for bit with the same point sent as a batch of one, as a strided view and as a list (all of
which take the general path), and check the early-exit membership screens against the definition
dist(x, K) <= tol computed from the projection.
"""
from __future__ import annotations

import numpy as np
import pytest

import setkit
from setkit.errors import InputError

N = 40


def _sets():
    rng = np.random.default_rng(7)
    return {
        "box": setkit.box(dim=N, lower=-1.0, upper=np.linspace(0.0, 2.0, N)),
        "simplex": setkit.simplex(dim=N),
        "simplex at_most": setkit.compile({"kind": "simplex", "dim": N, "total": 2.5, "mode": "at_most"}),
        "budget": setkit.budget(dim=N, total=1.0, upper=0.05, weights=rng.uniform(0.5, 2.0, N)),
        "ball 1": setkit.ball(dim=N, norm=1, radius=1.0),
        "ball 2": setkit.ball(dim=N, norm=2, radius=1.0),
        "ball inf": setkit.ball(dim=N, norm="inf", radius=1.0),
        "product": setkit.compile({"kind": "product", "of": [{"kind": "simplex", "dim": 8}], "copies": 5}),
    }


SETS = _sets()
OPS = ("project", "distance", "lmo", "support", "contains")


def _points(K, rng):
    """Points far outside, inside (projections), and just outside / inside by about the tolerance."""
    out = [rng.standard_normal(N) * s for s in (1e-3, 1.0, 1e3)]
    for y in list(out):
        p = K.project(y)
        out.append(p)
        d = y - p
        nd = np.linalg.norm(d)
        if nd > 0:
            tol = 1e-7 * max(1.0, np.abs(p).max())
            out.append(p + d / nd * tol * 0.5)     # inside by the tolerance
            out.append(p + d / nd * tol * 3.0)     # outside by a few tolerances
    return out


@pytest.mark.parametrize("name", sorted(SETS))
def test_fast_path_equals_general_path(name):
    K = SETS[name]
    rng = np.random.default_rng(11)
    for y in _points(K, rng):
        strided = np.empty(2 * N)
        strided[::2] = y
        view = strided[::2]                          # not C-contiguous: general path
        for op in OPS:
            f = getattr(K, op)
            fast = f(np.ascontiguousarray(y))
            batch = f(y[None, :])
            assert np.shape(fast) == np.shape(batch[0]), (name, op)
            np.testing.assert_array_equal(fast, batch[0], err_msg=f"{name} {op}")
            np.testing.assert_array_equal(fast, f(view), err_msg=f"{name} {op} strided")
            np.testing.assert_array_equal(fast, f(y.tolist()), err_msg=f"{name} {op} list")
            assert type(fast) is type(batch[0]), (name, op)


@pytest.mark.parametrize("name", sorted(SETS))
def test_screened_membership_matches_the_definition(name):
    # contains(x) is defined as dist(x, K) <= tol; the screens may only skip the distance where
    # the answer is certain. Points sit on both sides of the tolerance.
    K = SETS[name]
    rng = np.random.default_rng(3)
    for x in _points(K, rng):
        tol = 1e-7 * max(1.0, np.abs(x).max(), 1.0)
        d = np.linalg.norm(x - K.project(x))
        if abs(d - tol) > 1e-9 * tol:                # away from the knife edge
            assert bool(K.contains(x)) == (d <= tol), name


@pytest.mark.parametrize("bad", [np.nan, np.inf, -np.inf])
def test_fast_path_reports_non_finite_input_like_the_general_path(bad):
    arg = {"project": "y", "distance": "y", "lmo": "c", "support": "c", "contains": "x"}
    for name, K in SETS.items():
        y = np.full(N, 0.01)
        y[N - 3] = bad
        for op in OPS:
            with pytest.raises(InputError) as fast:
                getattr(K, op)(y)
            assert str(fast.value) == (f"{op} on {K.node.label}: argument {arg[op]} must be finite; "
                                       f"got {bad} at index ({N - 3},)."), (name, op)
            with pytest.raises(InputError) as general:       # the same point in a batch of one
                getattr(K, op)(y[None, :])
            assert f"index (0, {N - 3})" in str(general.value)
