"""The catalog: ready descriptions in invented scenarios, each compiled and verified."""
from pathlib import Path

import pytest
import yaml

import setkit
from setkit.checks import verify
from setkit.families import known_kinds

CATALOG = Path(__file__).resolve().parent.parent / "catalog"
ENTRIES = sorted(p for p in CATALOG.iterdir() if p.suffix in (".yaml", ".yml", ".json"))
CONTRACT_KINDS = {"box", "simplex", "budget", "ball", "permutahedron", "transport", "birkhoff", "flow",
                  "polyhedron", "hull", "intersection", "product", "affine"}
# scenarios that allocate scarce resources or people's time, or order people's work
SENSITIVE = {"bakery-deliveries", "tutor-pairing", "market-stall-exposure", "garden-rota"}


def _kinds(spec):
    if isinstance(spec, dict):
        out = {spec["kind"]} if "kind" in spec else set()
        for v in spec.values():
            out |= _kinds(v)
        return out
    if isinstance(spec, list):
        return set().union(*map(_kinds, spec)) if spec else set()
    return set()


def test_at_least_twelve_entries_cover_every_family_and_combinator():
    assert len(ENTRIES) >= 12
    covered = set().union(*(_kinds(yaml.safe_load(p.read_text())["set"]) for p in ENTRIES))
    assert CONTRACT_KINDS <= covered, CONTRACT_KINDS - covered


@pytest.mark.parametrize("path", ENTRIES, ids=[p.stem for p in ENTRIES])
def test_entry_has_a_comment_block_and_an_about_line(path):
    text = path.read_text()
    lead = []
    for line in text.splitlines():
        if not line.startswith("#"):
            break
        lead.append(line)
    assert len(lead) >= 2, f"{path.name}: start with a comment block saying what it models"
    data = yaml.safe_load(text)
    assert set(data) <= {"about", "set", "name"} and "invented" in data["about"]
    if path.stem in SENSITIVE:
        block = " ".join(lead)
        assert "responsible person" in block and "tolerances" in block and "local rules" in block


@pytest.mark.parametrize("path", ENTRIES, ids=[p.stem for p in ENTRIES])
def test_entry_compiles_and_agrees_with_the_reference(path):
    missing = _kinds(yaml.safe_load(path.read_text())["set"]) - set(known_kinds())
    if missing:
        pytest.skip(f"kinds not in this build yet: {', '.join(sorted(missing))}")
    K = setkit.load(path)
    # few points on the large entries, so the reference stays fast
    rep = verify(K, n_points=2 if K.dim <= 100 else 1, seed=1)
    assert rep.ok, rep.text()
