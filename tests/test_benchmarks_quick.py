"""The benchmark runner in quick mode: every row runs and agrees with the cvxpy reference.

No timing is asserted here (the machine is shared; speed targets are read from the
full run's report, never from a test).
"""
import os

import pytest

from setkit.families import known_kinds

run_mod = pytest.importorskip("benchmarks.run")


@pytest.fixture(scope="module")
def quick(tmp_path_factory):
    out = tmp_path_factory.mktemp("bench")
    res = run_mod.run("quick", out_dir=str(out), log=lambda *a: None)
    return res, out


def test_every_registered_kind_has_rows(quick):
    res, _ = quick
    assert {r.kind for r in res.rows} == set(known_kinds())


def test_every_row_ran(quick):
    res, _ = quick
    # an instance built from kinds that are not registered says so (and only then may skip)
    kinds = set(known_kinds())
    needs = "not available: needs the kind(s) "

    def excused(r):
        named = r.status[len(needs):].partition(", not registered yet")[0].split(", ")
        return r.status.startswith(needs) and not set(named) & kinds
    failed = [f"{r.workload} {r.op} {r.backend} n={r.n}: {r.status}" for r in res.rows
              if not r.ran and not excused(r)]
    assert not failed, "\n".join(failed)


def test_every_row_agrees_with_the_reference(quick):
    res, _ = quick
    for r in (r for r in res.rows if r.ran):
        # in quick mode the reference runs at every size, so every row has a verdict
        assert r.agrees is True, f"{r.workload} {r.op} {r.backend} n={r.n}: error {r.error_ref:.2e} vs reference"
    ops = {(r.workload, r.op) for r in res.rows if r.ran}
    for wl, op in ops:
        assert any(r.backend.startswith("reference") for r in res.rows if (r.workload, r.op) == (wl, op)), (wl, op)


def test_targets_run_or_say_why_not(quick):
    res, _ = quick
    assert res.targets
    for t in res.targets:
        assert t.verdict == "met" or t.verdict.startswith("missed") or t.verdict.startswith("not available"), t
        if t.verdict.startswith("not available"):
            # only a family that is not registered yet excuses a target; a crash is a defect
            assert "not registered yet" in t.verdict or "did not run" in t.verdict, t


def test_report_written(quick):
    res, out = quick
    text = (out / "RESULTS.md").read_text()
    assert "## Targets" in text and "## Every operator, every backend" in text
    assert res.machine["cpu"] in text
    for r in res.rows:
        assert f"### {r.workload}" in text
    assert any(f.endswith(".png") for f in os.listdir(out / "plots"))


def test_growth_exponent_is_the_log_log_slope():
    from benchmarks.report import growth_exponent
    # t = 3 n^1.5 exactly: the least-squares slope in log-log is 1.5 (common practice)
    ns = [10, 100, 1000, 10000]
    assert growth_exponent(ns, [3 * n ** 1.5 for n in ns]) == pytest.approx(1.5)
    assert growth_exponent([10], [1.0]) is None
