"""setkit.testing.check_kl_projection: passes correct KL projections, catches wrong ones."""
from dataclasses import dataclass

import numpy as np
import pytest

import setkit.testing as T
from setkit.decision_set import DecisionSet
from setkit.families import kernel
from setkit.families.box import Box
from setkit.families.simplex import Simplex


@dataclass(frozen=True, eq=False, kw_only=True)
class EuclideanInsteadOfKL(Simplex):
    @kernel("project_kl")
    def project_kl(self, T):
        """The Euclidean projection of exp(t): a point of the set, not the KL projection (a bug)."""
        return self.project(np.exp(T))


@dataclass(frozen=True, eq=False, kw_only=True)
class SlightlyOutside(Simplex):
    @kernel("project_kl")
    def project_kl(self, T):
        """total * softmax(t), scaled by 1 + 1e-6: just outside the set (a bug)."""
        E = np.exp(T - T.max(axis=1, keepdims=True))
        return (1 + 1e-6) * self.total * E / E.sum(axis=1, keepdims=True)


@dataclass(frozen=True, eq=False, kw_only=True)
class FlatteningKL(Simplex):
    @kernel("project_kl")
    def project_kl(self, T):
        """softmax(t / 2): in the set, the right answer only when t is constant (a bug: halved temperature)."""
        S = T / 2.0
        E = np.exp(S - S.max(axis=1, keepdims=True))
        return self.total * E / E.sum(axis=1, keepdims=True)


@dataclass(frozen=True, eq=False, kw_only=True)
class OwnClipBox(Box):
    @kernel("project_kl")
    def project_kl(self, T):
        """The user's own KL projection onto a box: x = clip(y, lower, upper) (separable), O(n)."""
        return np.clip(np.exp(T), self.lower, self.upper)


def _fails(K, *words):
    with pytest.raises(AssertionError) as info:
        T.check_kl_projection(K, seed=1, reference_points=2)
    msg = str(info.value)
    for w in words:
        assert w in msg, msg
    return msg


def test_euclidean_projection_in_place_of_kl_is_caught():
    msg = _fails(DecisionSet(EuclideanInsteadOfKL(n=4, total=1.0)), "certificate:", "reference:")
    assert "it is not the KL projection" in msg


def test_point_just_outside_the_set_is_caught():
    _fails(DecisionSet(SlightlyOutside(n=5, total=2.0)), "feasibility:")


def test_wrong_temperature_is_caught():
    _fails(DecisionSet(FlatteningKL(n=4, total=1.0)), "certificate:")


def test_users_own_correct_projection_passes():
    K = DecisionSet(OwnClipBox(lower=np.array([0.0, 0.1, 0.5]), upper=np.array([1.0, 2.0, 0.75])))
    out = T.check_kl_projection(K, reference_points=2)
    assert all(o.worst <= 1.0 for o in out)
    assert [o.name for o in out] == ["kl/feasibility", "kl/certificate", "kl/reference", "kl/fixed-points",
                                     "kl/batch"]


@pytest.mark.parametrize("spec", [
    {"kind": "simplex", "dim": 5, "total": 3.0},
    {"kind": "budget", "dim": 6, "total": 1.0, "upper": 0.3},
    {"kind": "permutahedron", "weights": [3.0, 2.0, 1.0, 0.5]},
    {"kind": "birkhoff", "n": 3},
    {"kind": "transport", "rows": [1.0, 2.0], "cols": [1.5, 0.5, 1.0]},
    {"kind": "product", "of": [{"kind": "simplex", "dim": 2}, {"kind": "permutahedron", "weights": [1.0, 2.0]}]},
    {"kind": "intersection", "of": [{"kind": "simplex", "dim": 3}, {"kind": "box", "dim": 3, "lower": 0,
                                                                    "upper": 0.5}]},
], ids=lambda s: s["kind"])
def test_built_in_projections_pass(spec):
    out = T.check_kl_projection(spec, reference_points=2)
    assert all(o.worst <= 1.0 for o in out)
    assert out[2].cases == 2


def test_set_outside_the_orthant_is_reported():
    with pytest.raises(AssertionError, match="nonnegative orthant"):
        T.check_kl_projection({"kind": "ball", "dim": 3, "norm": 2, "radius": 1.0})
