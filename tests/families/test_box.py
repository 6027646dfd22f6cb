"""box: every operator against the cvxpy reference, closed forms, bad input."""
import numpy as np
import pytest

import setkit
from setkit.errors import DescriptionError, UnboundedDirectionError

from .helpers import check_against_reference, check_batch_shapes, check_inside_fixed, sample_points


@pytest.mark.parametrize("scale", [1e-3, 1.0, 1e6])
def test_box_against_reference(rng, scale):
    lo = scale * np.array([-1.0, 0.0, 0.5, -2.0, 0.0, 1.0])
    hi = scale * np.array([1.0, 0.0, 2.0, -1.0, 3.0, 1.5])     # one degenerate coordinate
    K = setkit.compile({"kind": "box", "lower": lo.tolist(), "upper": hi.tolist()})
    Y = sample_points(K, rng)
    C = np.concatenate([rng.standard_normal((4, 6)), np.round(rng.standard_normal((2, 6)))])
    check_against_reference(K, Y, C)
    check_batch_shapes(K, rng)
    X = lo + rng.random((5, 6)) * (hi - lo)
    check_inside_fixed(K, X)


def test_box_closed_forms(rng):
    # closed forms (common practice): projection = median(lower, y, upper) coordinatewise;
    # support(c) = sum_i max(c_i lower_i, c_i upper_i)
    lo = np.array([-1.0, 0.0, 2.0, -5.0])
    hi = np.array([1.0, 0.5, 2.0, 5.0])
    K = setkit.box(lower=lo.tolist(), upper=hi.tolist())
    Y = rng.standard_normal((10, 4)) * 4
    np.testing.assert_array_equal(K.project(Y), np.median(np.stack([np.broadcast_to(lo, Y.shape), Y,
                                                                     np.broadcast_to(hi, Y.shape)]), axis=0))
    C = rng.standard_normal((10, 4))
    np.testing.assert_allclose(K.support(C), np.maximum(C * lo, C * hi).sum(axis=1), rtol=1e-14)
    np.testing.assert_allclose(K.distance(Y), np.sqrt((np.maximum(lo - Y, 0) ** 2 + np.maximum(Y - hi, 0) ** 2)
                                                      .sum(axis=1)), rtol=1e-14)


def test_box_unbounded_lmo_is_reported():
    K = setkit.box(dim=3, lower=0.0)
    np.testing.assert_array_equal(K.lmo([1.0, 2.0, 0.0]), [0.0, 0.0, 0.0])
    with pytest.raises(UnboundedDirectionError, match="coordinate 1 is unbounded"):
        K.lmo([1.0, -2.0, 0.0])
    np.testing.assert_array_equal(K.project([-1.0, 5.0, 2.0]), [0.0, 5.0, 2.0])


@pytest.mark.parametrize("spec, key, words", [
    ({"kind": "box", "lower": 0, "upper": 1}, "dim", "dim is required"),
    ({"kind": "box", "lower": [0, 2], "upper": [1, 1]}, "lower", "at index 1 lower is 2.0 and upper 1.0"),
    ({"kind": "box", "dim": 3, "lower": [0, 0], "upper": 1}, "lower", "length 3; got length 2"),
    ({"kind": "box", "dim": 2, "lower": "zero"}, "lower", "lower must be a number; got 'zero'."),
    ({"kind": "box", "dim": 2, "lower": [0, float("nan")]}, "lower", "NaN"),
])
def test_box_bad_descriptions(spec, key, words):
    with pytest.raises(DescriptionError) as e:
        setkit.compile(spec)
    msg = str(e.value)
    assert msg.startswith(f"box (<dict>: {key})"), msg
    assert words in msg, msg
