"""Descriptions: YAML and JSON files, dicts and builders give the same node; errors are located."""
import json

import numpy as np
import pytest

import setkit
from setkit.description import parse
from setkit.errors import DescriptionError

BUDGET = {"kind": "budget", "name": "weekly", "dim": 3, "total": 1.0, "lower": [0.0, 0.1, 0.0],
          "upper": [0.5, 0.5, 0.6], "weights": [1.0, 2.0, 1.0]}


def _same_budget(K):
    n = K.node
    assert K.kind == "budget" and K.shape == (3,) and n.name == "weekly"
    np.testing.assert_array_equal(n.lower, [0.0, 0.1, 0.0])
    np.testing.assert_array_equal(n.upper, [0.5, 0.5, 0.6])
    np.testing.assert_array_equal(n.weights, [1.0, 2.0, 1.0])
    assert n.total == 1.0 and n.mode == "equal"


def test_yaml_json_dict_and_builder_agree(tmp_path):
    y = tmp_path / "plan.yaml"
    y.write_text("about: an invented plan\nset:\n  kind: budget\n  name: weekly\n  dim: 3\n  total: 1.0\n"
                 "  lower: [0.0, 0.1, 0.0]\n  upper: [0.5, 0.5, 0.6]\n  weights: [1, 2, 1]\n")
    j = tmp_path / "plan.json"
    j.write_text(json.dumps({"set": BUDGET}))
    for K in (setkit.load(y), setkit.load(j), setkit.compile(BUDGET), setkit.compile({"set": BUDGET}),
              setkit.budget(**{k: v for k, v in BUDGET.items() if k != "kind"}),
              setkit.build("budget", **{k: v for k, v in BUDGET.items() if k != "kind"})):
        _same_budget(K)
    # the same set answers the same
    Y = np.random.default_rng(0).standard_normal((4, 3))
    np.testing.assert_array_equal(setkit.load(y).project(Y), setkit.compile(BUDGET).project(Y))


def test_builders_for_every_vector_family():
    assert setkit.simplex(dim=3).shape == (3,)
    assert setkit.box(dim=2, lower=0, upper=1).shape == (2,)
    assert setkit.ball(dim=4, norm=1, radius=2).shape == (4,)
    assert setkit.permutahedron(weights=[3, 2, 1]).shape == (3,)
    assert setkit.budget(dim=2, total=1).shape == (2,)
    with pytest.raises(AttributeError, match="no attribute 'simplx'"):
        setkit.simplx(dim=3)


def test_arrays_from_files_next_to_the_description(tmp_path):
    np.save(tmp_path / "caps.npy", np.array([0.5, 0.5, 0.6]))
    (tmp_path / "w.csv").write_text("1,2,1\n")
    p = tmp_path / "sub" / "plan.yaml"
    p.parent.mkdir()
    p.write_text("set:\n  kind: budget\n  name: weekly\n  dim: 3\n  total: 1.0\n  lower: [0.0, 0.1, 0.0]\n"
                 "  upper: ../caps.npy\n  weights: ../w.csv\n")
    _same_budget(setkit.load(p))
    p.write_text("set:\n  kind: budget\n  dim: 3\n  total: 1.0\n  upper: ../missing.npy\n")
    with pytest.raises(DescriptionError, match=r"set\.upper\): the array file '../missing.npy' does not exist"):
        setkit.load(p)


def test_yaml_spellings_of_infinity_and_norm(tmp_path):
    p = tmp_path / "b.yaml"
    p.write_text("set:\n  kind: budget\n  dim: 2\n  total: 3\n  upper: [.inf, 1]\n")
    assert np.isinf(setkit.load(p).node.upper[0])
    p.write_text("set:\n  kind: ball\n  dim: 2\n  radius: 1\n  norm: inf\n")
    assert setkit.load(p).node.norm == "inf"
    p.write_text("set:\n  kind: ball\n  dim: 2\n  radius: 1\n  norm: .inf\n")
    assert setkit.load(p).node.norm == "inf"


@pytest.mark.parametrize("text, words", [
    ("set:\n  kind: simplx\n  dim: 3\n", "set.kind): unknown kind 'simplx'; the known kinds are"),
    ("set:\n  dim: 3\n", "set): the key 'kind' is missing"),
    ("set:\n  kind: simplex\n  dim: 3\nextra: 1\n", "extra): unknown top-level key 'extra'"),
    ("set: [1, 2]\n", "set): a set description must be a mapping with a 'kind' key"),
    ("set:\n  kind: simplex\n  dim: [3\n", "not valid YAML at line"),
    ("set:\n  kind: ball\n  dim: 3\n  radius: -0.5\n", "ball (FILE: set.radius): radius must be at least 0.0; got -0.5."),
    ("set:\n  kind: permutahedron\n  weights: [1, 2]\n  dim: 4\n", "set.dim): dim must equal the number of weights"),
    ("set:\n  kind: budget\n  name: weekly\n  dim: 2\n  total: 3.0\n  upper: [1.0, 1.0]\n",
     "budget 'weekly' (FILE: set.total): total must be at most the sum of upper bounds, 2.0; got 3.0."),
])
def test_yaml_errors_name_file_and_key_path(tmp_path, text, words):
    p = tmp_path / "bad.yaml"
    p.write_text(text)
    with pytest.raises(DescriptionError) as e:
        setkit.load(p)
    msg = str(e.value)
    assert words.replace("FILE", str(p)) in msg, msg
    assert str(p) in msg


def test_json_errors(tmp_path):
    p = tmp_path / "bad.json"
    p.write_text('{"set": {"kind": "simplex", "dim": 3,}}')
    with pytest.raises(DescriptionError, match=r"not valid JSON at line 1"):
        setkit.load(p)
    p.write_text('{"set": {"kind": "ball", "dim": 3, "radius": "1", "norm": 7}}')
    with pytest.raises(DescriptionError, match=r"bad\.json: set\.norm\): norm must be one of 1, 2, inf; got 7\."):
        setkit.load(p)


def test_missing_file_and_error_classes(tmp_path):
    with pytest.raises(DescriptionError, match="the file does not exist"):
        setkit.load(tmp_path / "nope.yaml")
    with pytest.raises(ValueError):                 # a DescriptionError is also a ValueError
        setkit.compile({"kind": "budget", "dim": 2, "total": 5, "upper": 1})


def test_error_location_object():
    with pytest.raises(DescriptionError) as e:
        parse({"kind": "budget", "dim": 2, "total": 5, "upper": 1}, source="mem")
    assert e.value.location.source == "mem"
    assert e.value.location.path == ("total",)


def test_nodes_are_immutable():
    K = setkit.simplex(dim=3)
    with pytest.raises(Exception):
        K.node.total = 2.0
