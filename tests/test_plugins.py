"""Third-party families: registered by the decorator or by a 'setkit.families' entry point.

A family implementing only some operators natively gets the others derived
(distance from projection, support from the LMO, membership from the distance)
or from a generic backend, and description files can use its kind.
"""
import importlib
import sys
import textwrap

import numpy as np
import pytest

import setkit
import setkit.testing as T
from setkit import cli
from setkit.families import _FAMILIES

PLUGIN_SOURCE = textwrap.dedent('''
    """An invented third-party family: the round room {x : ||x - center|| <= radius}."""
    from dataclasses import dataclass

    import numpy as np

    from setkit.families import Family, kernel


    @dataclass(frozen=True, eq=False, kw_only=True)
    class RoundRoom(Family):
        center: np.ndarray
        radius: float

        @classmethod
        def from_spec(cls, r):
            c = r.array("center", ndim=1)
            return cls(center=c, radius=r.number("radius", min=0.0), name=r.name)

        @classmethod
        def examples(cls):
            return [{"center": [1.0, -2.0, 0.5], "radius": 2.0}, {"center": [0.0, 0.0], "radius": 0.1}]

        @property
        def shape(self):
            return (self.center.size,)

        def scale(self):
            return max(1.0, self.radius, float(np.abs(self.center).max()))

        def cvxpy_constraints(self, x):
            import cvxpy as cp
            return [cp.norm(x - self.center, 2) <= self.radius]

        @kernel("project")
        def project(self, Y):
            """Radial shrink toward the center, O(n)."""
            D = Y - self.center
            n = np.linalg.norm(D, axis=1, keepdims=True)
            return self.center + D * np.minimum(1.0, self.radius / np.maximum(n, 1e-300))

        @kernel("lmo")
        def lmo(self, C):
            """center - radius * c / ||c||, O(n)."""
            n = np.linalg.norm(C, axis=1, keepdims=True)
            return self.center - self.radius * np.divide(C, n, out=np.zeros_like(C), where=n > 0)
''')


@pytest.fixture
def plugin(tmp_path, monkeypatch):
    """A temporary installed distribution declaring the entry point round_room = roundroom:RoundRoom."""
    (tmp_path / "roundroom.py").write_text(PLUGIN_SOURCE)
    dist = tmp_path / "roundroom-0.1.dist-info"
    dist.mkdir()
    (dist / "METADATA").write_text("Metadata-Version: 2.1\nName: roundroom\nVersion: 0.1\n")
    (dist / "entry_points.txt").write_text("[setkit.families]\nround_room = roundroom:RoundRoom\n")
    monkeypatch.syspath_prepend(str(tmp_path))
    importlib.invalidate_caches()
    yield tmp_path
    _FAMILIES.pop("round_room", None)
    sys.modules.pop("roundroom", None)


def test_entry_point_family_is_found_by_kind(plugin):
    assert "round_room" not in _FAMILIES
    K = setkit.compile({"kind": "round_room", "center": [1.0, -2.0, 0.5], "radius": 2.0})
    assert K.kind == "round_room"
    # closed form (common practice): projection onto a ball shrinks radially toward the center
    np.testing.assert_allclose(K.project([5.0, -2.0, 0.5]), [3.0, -2.0, 0.5])
    r = K.routes()
    assert r["project"].provider == "native" and r["lmo"].provider == "native"
    assert r["distance"].provider == "derived" and r["support"].provider == "derived"
    assert r["contains"].provider == "derived"
    # support of a ball: <c, center> + radius ||c|| (common practice)
    c = np.array([1.0, 2.0, -2.0])
    assert abs(K.support(c) - (c @ [1.0, -2.0, 0.5] + 2.0 * 3.0)) < 1e-12
    assert abs(K.distance([5.0, -2.0, 0.5]) - 2.0) < 1e-12


def test_entry_point_family_in_a_description_file_and_the_cli(plugin, capsys):
    f = plugin / "room.yaml"
    f.write_text("# a round reading room of an invented library\nset:\n  kind: round_room\n"
                 "  name: reading\n  center: [0.0, 1.0]\n  radius: 3.0\n")
    K = setkit.load(f)
    assert K.shape == (2,)
    assert cli.main(["verify", str(f)]) == 0
    assert "round_room 'reading'" in capsys.readouterr().out


def test_entry_point_family_meets_the_conformance_bar(plugin):
    cls = setkit.families.lookup("round_room")
    out = T.check_family(cls, seed=2, count=0)
    assert len(out) == 2 * len(T.CHECKS)


def test_entry_point_family_errors_are_located(plugin, tmp_path):
    f = tmp_path / "bad-room.yaml"
    f.write_text("set:\n  kind: round_room\n  center: [0, 1]\n  radius: -1\n")
    with pytest.raises(setkit.DescriptionError, match=r"bad-room.yaml: set.radius.*at least 0"):
        setkit.load(f)


def test_decorator_registration_with_derived_operators():
    ns = {}
    exec(compile(PLUGIN_SOURCE, "<plugin>", "exec"), ns)
    Room = setkit.register("round_room_direct")(ns["RoundRoom"])
    try:
        K = setkit.compile({"kind": "round_room_direct", "center": [0.0, 0.0, 0.0, 0.0], "radius": 1.0})
        assert K.explain().startswith("round_room_direct")
        T.check_set(K, seed=9)
        assert setkit.families.lookup("round_room_direct") is Room
    finally:
        _FAMILIES.pop("round_room_direct", None)


def test_unknown_kind_lists_the_known_ones():
    with pytest.raises(setkit.DescriptionError, match="unknown kind 'no_such_room'.*simplex"):
        setkit.compile({"kind": "no_such_room"})


def test_missing_measures_and_penalty_are_derived_for_a_plugin(plugin):
    K = setkit.compile({"kind": "round_room", "center": [1.0, -2.0, 0.5], "radius": 2.0})
    # no centroid hook: the volume centroid is estimated by sampling (hit-and-run), honestly
    r = K.centroid(measure="volume", details=True, samples=1000, rng=3)
    assert not r.exact and r.method == "hit-and-run"
    # by symmetry (common practice) the centroid of a ball is its center
    assert np.all(np.abs(r.point - [1.0, -2.0, 0.5]) <= 6 * r.std_error + 1e-3)
    S = K.sample(50, rng=4)
    assert S.shape == (50, 3) and K.contains(S).all()
    # the penalty comes from the projection: G * dist, and the Moreau gradient G (x - p) / max(d, delta)
    x = np.array([5.0, -2.0, 0.5])
    assert K.penalty(3.0).value(x) == pytest.approx(6.0)
    g = K.penalty(3.0, smoothing="moreau", width=0.5).grad(x)
    np.testing.assert_allclose(g, 3.0 * (x - K.project(x)) / 2.0)
