"""A new family is one module: dropped outside the project, it is picked up by the conformance
checks and by the quick benchmarks, with no file of the project touched.

The module below is written to a temporary directory together with the packaging metadata that
declares its kinds as entry points of the group ``setkit.families``, as an installed
third-party package would. A fresh interpreter (so that the registry of this test session stays
as it was) then names the kinds and nothing else: ``setkit.testing.check_family`` runs on the
family's ``examples()`` and ``random_example(rng)``, and ``python -m benchmarks.run --quick
--kinds ...`` benchmarks the instance of its ``benchmark_example(n, rng)`` hook, or, for the
family that declares none, its first example. The closed forms of the segment's operators
(clamped coordinate along the segment; smallest end point) are textbook facts (common practice).
"""
import json
import os
import subprocess
import sys
import textwrap

import pytest

from setkit.errors import DescriptionError
from setkit.families import lookup

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))

FAMILY_MODULE = '''
"""Line segments [start, end] in R^n: a set family written as one module outside setkit.

K = {start + t (end - start) : 0 <= t <= 1}. Projection clamps the coordinate of
y along the segment, t* = clip(<y - start, d> / <d, d>, 0, 1) with d = end - start;
a linear function is smallest at an end point. Both O(n) per point.
"""
from dataclasses import dataclass

import numpy as np

import setkit
from setkit.forms import LinearForm


@setkit.register("line_segment")
@dataclass(frozen=True, eq=False, kw_only=True)
class LineSegment(setkit.Family):
    start: np.ndarray
    end: np.ndarray

    traits = frozenset({"polyhedral", "bounded"})

    @classmethod
    def from_spec(cls, r):
        a = r.array("start", ndim=1)
        b = r.array("end", ndim=1)
        if a.size == 0 or a.size != b.size:
            r.fail("end", f"end must have as many coordinates as start, {a.size} (at least 1); got {b.size}.")
        return cls(start=np.asarray(a, float), end=np.asarray(b, float), name=r.name)

    @classmethod
    def examples(cls):
        return [{"start": [0.0, 0.0, 1.0], "end": [2.0, -1.0, 1.0]},
                {"start": [1.0, 1.0], "end": [1.0, 1.0]}]          # one point: start = end

    @classmethod
    def random_example(cls, rng):
        n = int(rng.integers(2, 6))
        return {"start": rng.normal(size=n).round(3).tolist(), "end": rng.normal(size=n).round(3).tolist()}

    @classmethod
    def benchmark_example(cls, n, rng):
        return {"kind": cls.kind, "about": "segment between two Gaussian points in R^n",
                "start": rng.standard_normal(n), "end": rng.standard_normal(n)}

    @property
    def shape(self):
        return (self.start.size,)

    def scale(self):
        return float(max(1.0, np.abs(self.start).max(), np.abs(self.end).max()))

    def cvxpy_constraints(self, x):
        import cvxpy as cp
        t = cp.Variable()
        return [x == self.start + t * (self.end - self.start), t >= 0, t <= 1]

    def linear_form(self):
        # z = (x, t): x - t (end - start) = start, 0 <= t <= 1
        n = self.start.size
        A = np.hstack([np.eye(n), -(self.end - self.start)[:, None]])
        return LinearForm.build(n, 1, A_eq=A, b_eq=self.start, lo=np.r_[np.full(n, -np.inf), 0.0],
                                hi=np.r_[np.full(n, np.inf), 1.0])

    @setkit.kernel("project")
    def project(self, Y):
        """Clamp the coordinate along the segment, O(n)."""
        d = self.end - self.start
        dd = float(d @ d)
        t = np.clip(((Y - self.start) @ d) / dd, 0.0, 1.0) if dd > 0 else np.zeros(Y.shape[0])
        return self.start + t[:, None] * d

    @setkit.kernel("lmo")
    def lmo(self, C):
        """The end point with the smaller <c, .> (start on ties), O(n)."""
        return np.where((C @ self.end < C @ self.start)[:, None], self.end, self.start)

    @setkit.kernel("support")
    def support(self, C):
        """max(<c, start>, <c, end>), O(n)."""
        return np.maximum(C @ self.start, C @ self.end)


@setkit.register("fixed_segment")
class FixedSegment(LineSegment):
    """The same sets, declaring no benchmark instance: benchmarked on their first example."""

    @classmethod
    def benchmark_example(cls, n, rng):
        return None
'''

SCRIPT = textwrap.dedent('''
    import json, sys
    from setkit.families import lookup
    from setkit.testing import check_family
    from benchmarks.run import main

    out = sys.argv[1]
    found = {k: lookup(k).__module__ for k in ("line_segment", "fixed_segment")}
    outcomes = check_family("line_segment", seed=3, count=1, points=2)
    code = main(["--quick", "--kinds", "line_segment,fixed_segment", "--no-targets", "--no-plots", "--out", out])
    print(json.dumps({"found": found, "checks": len(outcomes),
                      "worst": max(o.worst for o in outcomes if o.allowed > 0), "exit": code}))
''')


@pytest.fixture(scope="module")
def outside_family(tmp_path_factory):
    """Run the conformance checks and the quick benchmarks on a family the project does not contain."""
    where = tmp_path_factory.mktemp("plugin")
    (where / "line_segment_family.py").write_text(FAMILY_MODULE)
    meta = where / "line_segment_family-0.1.dist-info"
    meta.mkdir()
    (meta / "METADATA").write_text("Metadata-Version: 2.1\nName: line-segment-family\nVersion: 0.1\n")
    (meta / "entry_points.txt").write_text("[setkit.families]\nline_segment = line_segment_family:LineSegment\n"
                                           "fixed_segment = line_segment_family:FixedSegment\n")
    out = where / "bench"
    env = dict(os.environ, PYTHONPATH=os.pathsep.join([str(where), ROOT]))
    proc = subprocess.run([sys.executable, "-c", SCRIPT, str(out)], cwd=ROOT, env=env, capture_output=True,
                          text=True, timeout=600)
    assert proc.returncode == 0, proc.stderr[-3000:]
    summary = json.loads(proc.stdout.strip().splitlines()[-1])
    with open(out / "results.json") as fh:
        rows = json.load(fh)["rows"]
    return summary, rows, (out / "RESULTS.md").read_text()


def test_the_project_does_not_know_the_kinds():
    for kind in ("line_segment", "fixed_segment"):
        with pytest.raises(DescriptionError, match="unknown kind"):
            lookup(kind)


def test_found_through_its_entry_points(outside_family):
    summary, _, _ = outside_family
    assert summary["found"] == {"line_segment": "line_segment_family", "fixed_segment": "line_segment_family"}


def test_conformance_checks_run_on_its_examples(outside_family):
    summary, _, _ = outside_family
    # two examples and one random instance, each through every check of setkit.testing
    from setkit.testing import CHECKS
    assert summary["checks"] == 3 * len(CHECKS)
    assert summary["worst"] <= 1.0


def test_quick_benchmarks_use_its_hook(outside_family):
    summary, rows, report = outside_family
    assert summary["exit"] == 0   # no row failed or disagreed with the reference
    mine = [r for r in rows if r["kind"] == "line_segment"]
    assert {r["workload"] for r in mine} == {"segment between two Gaussian points in R^n"}
    assert {r["n"] for r in mine} == {24} and {r["dim"] for r in mine} == {24}
    served = {(r["op"], r["backend"]) for r in mine}
    # its own kernels, the derived operators, and the backends found by discovery
    for op in ("project", "lmo", "support"):
        assert (op, "native") in served and (op, "reference") in served
    assert ("distance", "native (via project)") in served and ("project", "osqp") in served
    assert ("lmo", "highs") in served
    assert all(r["status"] == "ok" and r["agrees"] is True for r in mine)
    assert "### segment between two Gaussian points in R^n" in report


def test_a_family_without_the_hook_runs_its_first_example(outside_family):
    _, rows, _ = outside_family
    mine = [r for r in rows if r["kind"] == "fixed_segment"]
    assert mine and {r["workload"] for r in mine} == {"fixed_segment: its first declared example"}
    assert {r["n"] for r in mine} == {3}      # the example's own size: start and end in R^3
    assert {r["op"] for r in mine} == {"project", "distance", "lmo", "support", "contains"}
    assert all(r["status"] == "ok" and r["agrees"] is True for r in mine)
