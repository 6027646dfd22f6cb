"""`verify` on large sets (issue 11): one point at a time, reference work bounded by a measured pilot,
what is skipped stated in the report and the JSON; checks that need no reference still catch bugs."""
import json

import numpy as np
import pytest

import setkit
from setkit import agreement, cli
from setkit.families.simplex import Simplex


def _no_pilot(K, y, seconds=None, memory_bytes=None):
    return {"ok": False, "first": None, "second": None, "peak_bytes": None,
            "why": "did not finish within its time limit of 30 s"}


@pytest.fixture
def small_direct(monkeypatch):
    monkeypatch.setattr(agreement, "DIRECT_DIM", 8)
    monkeypatch.setattr(cli, "DIRECT_DIM", 8)


def test_large_path_without_reference_states_what_it_skipped(small_direct, monkeypatch):
    monkeypatch.setattr(agreement, "reference_pilot", _no_pilot)
    K = setkit.compile({"kind": "permutahedron", "weights": list(np.linspace(2.0, 0.0, 40))})
    steps = []
    rep = setkit.agreement.verify(K, n_points=1, progress=steps.append)
    assert rep.ok, rep.text()
    assert [r.operator for r in rep.rows] == ["project", "distance", "contains", "lmo", "support", "certificate"]
    ref = rep.as_dict()["reference"]
    assert ref["mode"] == "skipped" and ref["compared"] == 0 and ref["skipped"] == ref["inputs"] == 6 + 5
    assert "did not finish within its time limit" in ref["reason"] and "40 coordinates" in ref["reason"]
    assert "reference: skipped" in rep.text()
    assert steps[0].startswith("pilot reference solve") and any("point 6/6" in s for s in steps)


def test_large_path_runs_the_pilot_and_samples_the_reference(small_direct):
    K = setkit.compile({"kind": "simplex", "dim": 30})
    rep = agreement.verify_large(K, n_points=1, reference_seconds=0.6)
    ref = rep.reference
    assert rep.ok, rep.text()
    # the pilot (a subprocess) timed two reference projections; only what fits in 0.6 s was compared
    assert ref["pilot_seconds"][1] > 0 and ref["pilot_peak_bytes"] > 0
    assert ref["mode"] in ("sampled", "full") and ref["compared"] + ref["skipped"] == ref["inputs"]
    assert ref["compared"] <= max(1, int(0.6 / ref["pilot_seconds"][1]) + 1)


def test_reference_free_checks_catch_a_wrong_projection(small_direct, monkeypatch):
    monkeypatch.setattr(agreement, "reference_pilot", _no_pilot)

    def first_vertex(self, Y):          # in the set, but not the nearest point: only the certificate sees it
        out = np.zeros_like(Y)
        out[:, 0] = self.total
        return out
    monkeypatch.setattr(Simplex, "project", first_vertex)
    K = setkit.compile({"kind": "simplex", "dim": 20})
    rep = agreement.verify(K, n_points=1)
    rows = {r.operator: r for r in rep.rows}
    assert not rep.ok and not rows["project"].ok and not rows["certificate"].ok


def test_cli_verify_of_a_large_set_streams_and_reports_json(small_direct, monkeypatch, tmp_path, capsys):
    monkeypatch.setattr(agreement, "reference_pilot", _no_pilot)
    f = tmp_path / "big.yaml"
    f.write_text("kind: simplex\ndim: 50\n")
    code = cli.main(["--quiet", "--json", "verify", str(f), "--points", "1"])
    out = capsys.readouterr().out
    assert code == 0
    entry = json.loads(out)[0]
    assert entry["ok"] and entry["reference"]["mode"] == "skipped" and entry["backends"] is None
    code = cli.main(["--quiet", "verify", str(f), "--points", "1"])
    text = capsys.readouterr().out
    assert code == 0 and "backend timings skipped" in text and "reference: skipped" in text
