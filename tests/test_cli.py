"""The command line: every subcommand on catalog files, outputs and exit codes."""
import io
import json
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pytest

from setkit import cli
from setkit.families import _FAMILIES, kernel, register
from setkit.families.simplex import Simplex

CATALOG = Path(__file__).resolve().parent.parent / "catalog"
SIMPLEX = str(CATALOG / "starter-simplex.yaml")      # simplex, dim 5
DEPOTS = str(CATALOG / "two-depots.yaml")            # product of simplex(3) and box(4)


def run(argv, capsys):
    code = cli.main(["--quiet"] + argv)
    out = capsys.readouterr()
    return code, out.out, out.err


@pytest.fixture
def broken_kind(tmp_path):
    """A description whose family has a projection shifted by 1e-3 (a deliberate bug)."""
    @dataclass(frozen=True, eq=False, kw_only=True)
    class Shifted(Simplex):
        @kernel("project")
        def project(self, Y):
            """Simplex projection moved by 1e-3 (a deliberate bug)."""
            return super().project(Y) + 1e-3
    register("shifted_simplex_for_cli_tests")(Shifted)
    f = tmp_path / "broken.yaml"
    f.write_text("# broken on purpose\nset:\n  kind: shifted_simplex_for_cli_tests\n  dim: 3\n")
    yield str(f)
    _FAMILIES.pop("shifted_simplex_for_cli_tests", None)


# -- inspect ---------------------------------------------------------------------------------------
def test_inspect_shows_tree_shape_dimension_and_plan(capsys):
    code, out, _ = run(["inspect", DEPOTS], capsys)
    assert code == 0
    assert "shape:     (7,)" in out and "dimension: 7" in out
    assert "- product 'depots'" in out and "  - simplex 'lending'" in out and "  - box 'hours'" in out
    assert "plan:" in out and "project" in out and "lmo" in out


def test_inspect_json_and_catalog_names(capsys):
    code, out, _ = run(["inspect", "starter-simplex", "--json"], capsys)
    assert code == 0
    data = json.loads(out)
    assert data["shape"] == [5] and data["dim"] == 5
    assert data["tree"]["kind"] == "simplex" and data["tree"]["parameters"]["total"] == 1.0
    assert data["plan"]["project"]["provider"] == "native"
    assert data["about"].endswith("(invented)")


# -- verify ----------------------------------------------------------------------------------------
def test_verify_ok_with_timings_and_json_report(tmp_path, capsys):
    code, out, _ = run(["verify", SIMPLEX, DEPOTS, "--points", "2"], capsys)
    assert code == 0
    assert "all operators agree with the reference" in out
    assert "timings and agreement of every backend" in out and "osqp" in out and "highs" in out
    assert "first calls in this process, including compilation" in out and "warm ms/pt" in out
    # --json: one JSON document on stdout and nothing else, whatever the position of the option
    code, out, _ = run(["verify", SIMPLEX, DEPOTS, "--points", "2", "--json"], capsys)
    assert code == 0
    data = json.loads(out)
    assert [d["file"] for d in data] == [SIMPLEX, DEPOTS]
    assert all(d["ok"] for d in data)
    providers = {(r["operator"], r["provider"]) for r in data[0]["backends"]}
    assert {("project", "native"), ("project", "osqp"), ("project", "reference"), ("lmo", "highs")} <= providers
    assert all(r["ms_per_call"] > 0 for r in data[0]["backends"])
    assert set(data[0]["first_call_ms"]) == {"project", "distance", "contains", "lmo", "support"}
    assert all(isinstance(r["ms_per_point"], float) for r in data[0]["rows"])
    code, out2, _ = run(["--json", "verify", SIMPLEX, "--points", "2", "--no-timings"], capsys)
    assert code == 0 and json.loads(out2)[0]["file"] == SIMPLEX


def test_verify_table_columns_line_up(capsys):
    code, out, _ = run(["verify", SIMPLEX, "--points", "1", "--no-timings"], capsys)
    lines = out.splitlines()
    head = next(i for i, line in enumerate(lines) if "operator" in line and "route" in line)
    table = lines[head:head + 7]
    assert table[-1].split()[0] == "certificate"
    # every right-aligned number column ends at the same character as its header
    end = table[0].index("ref ms/pt") + len("ref ms/pt")
    for line in table[1:]:
        assert line[end - 1] != " " and line[end] == " ", line


def test_bad_arguments_exit_2_with_one_line(tmp_path, capsys):
    for argv in (["verify", SIMPLEX, "--points", "0"], ["verify", SIMPLEX, "--points", "-3"],
                 ["run", "project", SIMPLEX, "--at", "[1,0,0,0,0]", "--out", str(tmp_path / "no" / "o.json")],
                 ["compare", SIMPLEX, "--repeat", "0"], ["verify"], ["run", "nosuchop", SIMPLEX],
                 ["verify", SIMPLEX, "--points", "two"]):
        code, out, err = run(argv, capsys)
        assert code == 2, argv
        assert out == "" and err.startswith("setkit: ") and err.count("\n") == 1, (argv, err)


def test_penalty_option_has_the_python_name_and_the_old_alias(capsys):
    code, out, _ = run(["run", "penalty", SIMPLEX, "--at", "[3, 0, 0, 0, 0]", "--G", "2"], capsys)
    new = json.loads(out)
    code2, out2, _ = run(["run", "penalty", SIMPLEX, "--at", "[3, 0, 0, 0, 0]", "--weight", "2"], capsys)
    assert code == code2 == 0 and new["result"] == json.loads(out2)["result"] and new["G"] == 2.0
    # the simplex vertex (1, 0, 0, 0, 0) is the nearest point: G * dist = 2 * 2 (closed form)
    assert new["result"] == pytest.approx(4.0)


def test_json_outputs_are_typed_and_public(capsys):
    for name in [p.stem for p in sorted(CATALOG.glob("*.yaml"))]:
        code, out, _ = run(["inspect", name, "--json"], capsys)
        assert code == 0
        text = out

        def walk(node):
            assert isinstance(node["shape"], list)
            for key, value in node["parameters"].items():
                assert not key.startswith("_") and key not in ("cut_matrix", "n_eq"), (name, key)
                assert not (isinstance(value, str) and value.startswith("array of shape")), (name, key)
            for part in node["parts"]:
                walk(part)
        walk(json.loads(text)["tree"])
    code, out, _ = run(["catalog", "--json"], capsys)
    assert all(isinstance(e["shape"], list) for e in json.loads(out) if e["shape"] is not None)


def test_support_on_an_unbounded_set_speaks_of_support(capsys):
    import setkit
    from setkit.errors import UnboundedDirectionError
    K = setkit.box(lower=[0, 0], upper=[np.inf, 1])
    with pytest.raises(UnboundedDirectionError) as info:
        K.support([1.0, -2.0])
    msg = str(info.value)
    assert "support(c)" in msg and "lmo" not in msg and "c[0] = 1.0" in msg
    # the derived rule (support from the LMO) speaks of support too, with the user's c
    Kd = K.with_backends(support="derived")
    with pytest.raises(UnboundedDirectionError) as info:
        Kd.support([1.0, -2.0])
    assert "support(c)" in str(info.value) and "[ 1. -2.]" in str(info.value)
    assert K.support([-1.0, 2.0]) == pytest.approx(2.0)   # max over [0, inf) x [0, 1] of -x0 + 2 x1


def test_verify_disagreement_exits_1(broken_kind, capsys):
    code, out, _ = run(["verify", broken_kind, "--no-timings"], capsys)
    assert code == 1
    assert "DISAGREEMENT" in out and "FAIL" in out


def test_verify_bad_files_exit_2(tmp_path, capsys):
    code, _, err = run(["verify", str(tmp_path / "missing.yaml")], capsys)
    assert code == 2 and "no such file" in err and "starter-simplex" in err
    bad = tmp_path / "bad.yaml"
    bad.write_text("set:\n  kind: simplex\n  dim: [3\n")
    code, _, err = run(["verify", str(bad)], capsys)
    assert code == 2 and "not valid YAML at line" in err
    wrong = tmp_path / "wrong.yaml"
    wrong.write_text("set:\n  kind: simplex\n  dim: 3\n  totl: 2\n")
    code, _, err = run(["verify", str(wrong)], capsys)
    assert code == 2 and "wrong.yaml: set.totl" in err and "unknown parameter 'totl'" in err
    neg = tmp_path / "neg.json"
    neg.write_text('{"set": {"kind": "simplex", "dim": -2}}')
    code, _, err = run(["verify", str(neg)], capsys)
    assert code == 2 and "neg.json: set.dim" in err and "at least 1" in err
    code, _, err = run(["verify", str(tmp_path)], capsys)
    assert code == 2 and "folder" in err


# -- run -------------------------------------------------------------------------------------------
def test_run_project_inline_and_files(tmp_path, capsys):
    code, out, _ = run(["run", "project", SIMPLEX, "--at", "[1, 2, 3, 4, 5]"], capsys)
    assert code == 0
    data = json.loads(out)
    # by hand: projecting (1..5) onto the unit simplex keeps only the largest coordinate
    assert data["result"] == pytest.approx([0, 0, 0, 0, 1]) and data["count"] == 1
    Y = np.array([[0.5, 0.5, 0.0, 0.0, 0.0], [0.1, 0.1, 0.1, 0.1, 0.1]])
    np.save(tmp_path / "y.npy", Y)
    np.savetxt(tmp_path / "y.csv", Y, delimiter=",")
    (tmp_path / "y.json").write_text(json.dumps({"points": Y.tolist()}))
    for src in ("y.npy", "y.csv", "y.json"):
        for dst in ("o.npy", "o.csv", "o.json"):
            code, _, err = run(["run", "project", SIMPLEX, str(tmp_path / src), "--out", str(tmp_path / dst)],
                               capsys)
            assert code == 0 and "wrote project of 2 point(s)" in err
            if dst == "o.npy":
                P = np.load(tmp_path / dst)
            elif dst == "o.csv":
                P = np.loadtxt(tmp_path / dst, delimiter=",")
            else:
                P = np.array(json.loads((tmp_path / dst).read_text())["result"])
            # (0.5, 0.5, 0, 0, 0) is in the set; (0.1, ...) moves up to the barycenter 0.2
            np.testing.assert_allclose(P, [[0.5, 0.5, 0, 0, 0], [0.2] * 5], atol=1e-12)


def test_run_every_point_operator(capsys, monkeypatch):
    pts = "[[0.2, 0.2, 0.2, 0.2, 0.2], [3, 0, 0, 0, 0]]"
    expect = {"distance": [0.0, np.sqrt(4 + 0)], "support": [0.2, 3.0], "violation": [0.0, 2.0],
              "contains": [True, False]}
    for op, want in expect.items():
        code, out, _ = run(["run", op, SIMPLEX, "--at", pts], capsys)
        assert code == 0, op
        assert json.loads(out)["result"] == pytest.approx(want), op
    code, out, _ = run(["run", "lmo", SIMPLEX, "--at", "[3, 1, 2, 5, 4]", "--details"], capsys)
    data = json.loads(out)
    assert data["result"] == [0, 1, 0, 0, 0] and data["route"] == "native"
    monkeypatch.setattr("sys.stdin", io.StringIO("[0, 0, 0, 0, 2]"))
    code, out, _ = run(["run", "project", SIMPLEX, "-"], capsys)
    assert code == 0 and json.loads(out)["result"] == pytest.approx([0, 0, 0, 0, 1])
    code, out, _ = run(["run", "project", SIMPLEX, "--at", "[0, 0, 0, 0, 2]", "--backend", "osqp"], capsys)
    assert code == 0 and json.loads(out)["result"] == pytest.approx([0, 0, 0, 0, 1], abs=1e-7)


def test_run_penalty_centroid_and_sample(capsys):
    code, out, _ = run(["run", "penalty", SIMPLEX, "--at", "[3, 0, 0, 0, 0]", "--weight", "2"], capsys)
    assert code == 0
    data = json.loads(out)
    assert data["result"] == pytest.approx(4.0)     # G * dist = 2 * 2
    assert len(data["gradient"]) == 5
    code, out, _ = run(["run", "centroid", SIMPLEX], capsys)
    assert code == 0
    # the volume centroid of the standard simplex is its barycenter (common practice)
    assert json.loads(out)["result"] == pytest.approx([0.2] * 5)
    code, out, _ = run(["run", "sample", SIMPLEX, "--count", "4", "--seed", "3"], capsys)
    S = np.array(json.loads(out)["result"])
    assert code == 0 and S.shape == (4, 5) and np.allclose(S.sum(axis=1), 1.0) and (S >= -1e-12).all()


@pytest.mark.parametrize("args, words", [
    (["--at", "[1, 2, 3]"], "must have shape (5,)"),
    (["--at", "[1, 2, 3, 4, NaN]"], "finite"),
    (["--at", "[1, 2, 3, 4, \"x\"]"], "could not read numbers"),
    (["--at", "[1, 2"], "not valid JSON"),
    (["nowhere.npy"], "does not exist"),
    (["points.txt"], "expected a .npy, .csv or .json file"),
    ([], "needs points"),
    (["--at", "[1, 2, 3, 4, 5]", "--out", "result.txt"], "must end in .npy, .csv or .json"),
])
def test_run_bad_points_exit_2(args, words, capsys, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    code, _, err = run(["run", "project", SIMPLEX] + args, capsys)
    assert code == 2
    assert words in err


def test_run_bad_point_files_exit_2(tmp_path, capsys):
    (tmp_path / "obj.json").write_text('{"pts": [1, 2]}')
    code, _, err = run(["run", "distance", SIMPLEX, str(tmp_path / "obj.json")], capsys)
    assert code == 2 and "under the key 'points'" in err
    (tmp_path / "bad.csv").write_text("1,2,3,4,5\n1,2,x,4,5\n")
    code, _, err = run(["run", "distance", SIMPLEX, str(tmp_path / "bad.csv")], capsys)
    assert code == 2 and "could not read numbers" in err
    (tmp_path / "bad.npy").write_bytes(b"not an array")
    code, _, err = run(["run", "distance", SIMPLEX, str(tmp_path / "bad.npy")], capsys)
    assert code == 2 and "bad.npy" in err
    code, _, err = run(["run", "centroid", SIMPLEX, "--at", "[1, 2, 3, 4, 5]"], capsys)
    assert code == 2 and "takes no points" in err
    code, _, err = run(["run", "project", SIMPLEX, "--at", "[1, 2, 3, 4, 5]", "--backend", "nosuch"], capsys)
    assert code == 2 and "unknown" in err


# -- compare ---------------------------------------------------------------------------------------
def test_compare_table_and_json(tmp_path, capsys):
    code, out, _ = run(["compare", DEPOTS, "--points", "2", "--repeat", "2"], capsys)
    assert code == 0
    assert "median of 2 run(s)" in out and "fastest agreeing:" in out and "first calls" in out
    code, out, _ = run(["compare", DEPOTS, "--points", "2", "--repeat", "2", "--json"], capsys)
    rows = json.loads(out)["rows"]
    assert {r["operator"] for r in rows} == {"project", "distance", "lmo", "support"}
    assert all(r["agrees"] for r in rows if r["ms_per_call"] is not None)


def test_compare_disagreement_exits_1(broken_kind, capsys):
    code, out, _ = run(["compare", broken_kind, "--points", "2", "--repeat", "1"], capsys)
    assert code == 1 and "DISAGREES" in out


# -- catalog ---------------------------------------------------------------------------------------
def test_catalog_list_and_show(capsys):
    code, out, _ = run(["catalog"], capsys)
    assert code == 0
    for name in ("starter-simplex", "weekly-channels", "two-depots", "canal-network"):
        assert name in out
    code, out, _ = run(["catalog", "two-depots"], capsys)
    assert code == 0 and "# Two invented tool-library depots" in out and "compiles to product 'depots'" in out
    code, out, _ = run(["catalog", "--json"], capsys)
    assert code == 0 and len(json.loads(out)) >= 12
    code, _, err = run(["catalog", "no-such-entry"], capsys)
    assert code == 2 and "catalog entries are" in err
    code, _, err = run(["--dir", "/nonexistent-folder", "catalog"], capsys)
    assert code == 2 and "no .yaml" in err


# -- progress, help, usage -------------------------------------------------------------------------
def test_progress_line_after_the_threshold(capsys, monkeypatch):
    monkeypatch.setenv("SETKIT_PROGRESS_AFTER", "0")
    code = cli.main(["verify", SIMPLEX, "--points", "2"])
    err = capsys.readouterr().err
    assert code == 0 and "setkit: verify" in err


def test_no_progress_line_for_quick_work(capsys):
    code = cli.main(["run", "project", SIMPLEX, "--at", "[1, 0, 0, 0, 0]"])
    assert code == 0 and "setkit:" not in capsys.readouterr().err


def test_help_and_usage_errors(capsys):
    assert cli.main(["--help"]) == 0
    assert "inspect" in capsys.readouterr().out
    assert cli.main(["frobnicate"]) == 2
    assert cli.main(["run", "rotate", SIMPLEX]) == 2


def test_run_lmo_on_an_unbounded_direction_exits_2(tmp_path, capsys):
    f = tmp_path / "half.yaml"
    f.write_text("set:\n  kind: box\n  lower: [0, 0]\n  upper: [inf, 1]\n")
    code, _, err = run(["run", "lmo", str(f), "--at", "[-1, 1]"], capsys)
    assert code == 2 and "no minimizer" in err
    code, out, _ = run(["run", "lmo", str(f), "--at", "[1, -1]"], capsys)
    assert code == 0 and json.loads(out)["result"] == [0, 1]


@pytest.fixture
def failing_backend(monkeypatch):
    """A generic backend that always reports a failed solve (an honest failure, not a wrong answer)."""
    from setkit.backends import Backend, _BACKENDS, all_backends
    from setkit.errors import SolveError
    all_backends()

    class Failing(Backend):
        name = "always_fails"
        operators = ("project",)
        requires = "cvxpy"
        priority = 10_000
        about = "fails on purpose (tests)"

        def project(self, Y):
            raise SolveError("always_fails: did not converge (on purpose)", status="max_iter")
    monkeypatch.setitem(_BACKENDS, "always_fails", Failing)
    return Failing


def test_a_failing_alternative_backend(failing_backend, capsys):
    # verify: the default plan agrees, the failing backend shows in the informational table
    code, out, _ = run(["verify", SIMPLEX, "--points", "2"], capsys)
    assert code == 0 and "always_fails" in out and "FAILED" in out
    # compare: its purpose is to judge every backend, so a failure exits 1
    code, out, _ = run(["compare", SIMPLEX, "--points", "2", "--repeat", "1"], capsys)
    assert code == 1 and "not agreeing or failing: project always_fails" in out
    # run with that backend: the failed solve is reported, exit 1
    code, _, err = run(["run", "project", SIMPLEX, "--at", "[1, 0, 0, 0, 0]", "--backend", "always_fails"], capsys)
    assert code == 1 and "did not converge" in err


def test_progress_line_is_cleared_on_a_terminal_and_keeps_its_total(monkeypatch):
    import time as _time

    class FakeTerminal(io.StringIO):
        def isatty(self):
            return True

    monkeypatch.setenv("SETKIT_PROGRESS_AFTER", "0")
    stream = FakeTerminal()
    with cli.Progress("verify", total=3, stream=stream) as prog:
        steps = cli.StepsOnly(prog)
        steps.total = 50                      # inner work may announce its own count: ignored
        steps.advance("lmo by highs")
        prog.advance("first file")
        _time.sleep(0.7)
        prog.clear()
    text = stream.getvalue()
    assert text.endswith(cli.CLEAR_LINE)
    shown = [chunk for chunk in text.split(cli.CLEAR_LINE) if chunk]
    assert shown and all("/3" in chunk for chunk in shown) and not any("/50" in c for c in shown)
    assert "\n" not in text
