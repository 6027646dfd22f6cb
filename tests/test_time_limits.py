"""Time limits and progress for long calls (issue 11: calls with no limit)."""
import time

import numpy as np
import pytest

import setkit
from setkit.errors import InputError, SolveError, TimeLimitError

# simplex ∩ l2 ball: its volume centroid runs hit-and-run on a membership oracle whose frame needs
# LMOs by column generation (measured: several minutes without a limit on the shared machine)
SLOW = {"kind": "intersection", "of": [{"kind": "simplex", "dim": 4},
                                       {"kind": "ball", "dim": 4, "norm": 2, "radius": 0.6,
                                        "center": [0.25, 0.25, 0.25, 0.25]}]}


def test_centroid_stops_at_its_time_limit_and_says_what_and_how_far():
    K = setkit.compile(SLOW)
    seen = []
    t0 = time.perf_counter()
    with pytest.raises(TimeLimitError) as info:
        K.centroid(time_limit=1.5, progress=lambda asked, elapsed, acc: seen.append((asked, elapsed, acc)))
    took = time.perf_counter() - t0
    exc = info.value
    assert isinstance(exc, SolveError) and isinstance(exc, RuntimeError) and exc.status == "time_limit"
    assert 1.5 <= exc.elapsed <= took and took < 1.5 + 20      # stops at the next check after the deadline
    msg = str(exc)
    assert "centroid(measure='volume') of intersection" in msg and "time limit of 1.5 s" in msg
    assert "best accuracy reached" in msg and exc.accuracy
    assert seen and all(isinstance(a, str) and e >= 0 for a, e, _ in seen)


def test_a_block_bounds_iterative_projections_and_is_lifted_after_it():
    K = setkit.compile({"kind": "intersection", "of": [{"kind": "simplex", "dim": 5},
                                                      {"kind": "ball", "dim": 5, "norm": 2, "radius": 0.8}]})
    D = K.with_backends(project="dykstra")
    y = np.array([2.0, -1.0, 0.5, 0.3, 0.1])
    with setkit.time_limit(1e-9):
        with pytest.raises(TimeLimitError, match="Dykstra's method.*time limit of 1e-09 s.*feasibility residual"):
            D.project(y)
        # native kernels are finite algorithms and are never interrupted
        assert np.allclose(setkit.simplex(dim=3).project([1.0, 0.0, 0.0]), [1.0, 0.0, 0.0])
    x = D.project(y)                                    # no limit outside the block
    ref = K.with_backends(project="reference").project(y)
    assert np.abs(x - ref).max() <= 2e-5 * 2


def test_linear_image_of_an_intersection_is_bounded():
    inner = {"kind": "intersection", "of": [{"kind": "simplex", "dim": 3},
                                            {"kind": "box", "dim": 3, "lower": 0, "upper": 0.6}]}
    K = setkit.compile({"kind": "affine", "set": inner, "matrix": [[1.0, 2.0, 0.0], [0.0, 1.0, 3.0]]})
    with setkit.time_limit(1e-9):
        with pytest.raises(TimeLimitError) as info:
            K.project([5.0, -2.0])
    assert "stopped by the time limit" in str(info.value)
    assert K.contains(K.project([5.0, -2.0]))


def test_nested_limits_keep_the_earlier_deadline_and_bad_limits_are_refused():
    with setkit.time_limit(100) as outer:
        with setkit.time_limit(1000) as inner:
            assert inner.deadline == outer.deadline
    for bad in (0, -1, float("nan"), float("inf"), "5", True):
        with pytest.raises(InputError, match="positive finite number of seconds"):
            with setkit.time_limit(bad):
                pass
    with pytest.raises(InputError, match="time limit"):
        setkit.compile(SLOW).centroid(time_limit=-3)


def test_sample_takes_a_time_limit():
    K = setkit.compile(SLOW)
    with pytest.raises(TimeLimitError, match=r"sample\(50, measure='volume'\)"):
        K.sample(50, time_limit=0.5)
    # exact samplers finish well within a limit
    assert setkit.simplex(dim=3).sample(5, time_limit=5, rng=0).shape == (5, 3)
