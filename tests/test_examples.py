"""The examples run in their quick mode and achieve what they print."""
from __future__ import annotations

import os
import re
import subprocess
import sys

import pytest

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))


def run_example(name, *args):
    env = dict(os.environ)
    env["PYTHONPATH"] = ROOT + (os.pathsep + env["PYTHONPATH"] if env.get("PYTHONPATH") else "")
    out = subprocess.run([sys.executable, os.path.join(ROOT, "examples", name), "--quick", *args],
                         capture_output=True, text=True, env=env, timeout=300, cwd=ROOT)
    assert out.returncode == 0, out.stderr
    return out.stdout


def number(text, label):
    m = re.search(re.escape(label) + r"\s*:?\s*([-+0-9.eE]+)", text)
    assert m, f"{label!r} not in output:\n{text}"
    return float(m.group(1))


def test_online_ranking():
    out = run_example("online_ranking.py")
    regret, bound = number(out, "regret:"), number(out, "regret bound D*G*sqrt(T):")
    assert 0.0 <= regret <= bound           # online gradient descent meets its regret bound (Zinkevich, 2003)
    assert regret <= 0.5 * bound            # the worst-case bound is loose on these stochastic losses
    assert abs(number(out, "average regret per round:") - regret / number(out, "rounds:")) < 1e-5
    learned = re.search(r"final ranking of stops: ([^,\n]+)", out).group(1)
    hidden = re.search(r"stops by hidden interest: ([^,\n]+)", out).group(1)
    assert learned == hidden                # the top stop is the one with the highest hidden interest
    assert "all decisions inside the set: yes" in out


def test_frank_wolfe_flow():
    from setkit.families import known_kinds
    if "flow" not in known_kinds():
        pytest.skip("the flow family is not installed in this tree")
    out = run_example("frank_wolfe_flow.py")
    gap = number(out, "Frank-Wolfe gap:")
    assert gap <= 1e-6
    fx, opt = number(out, "total courier minutes:"), number(out, "cvxpy optimum:")
    assert fx - opt <= gap + 1e-7 * abs(opt)          # the Frank-Wolfe gap bounds the excess over f*
    assert abs(fx - opt) <= 1e-5 * abs(opt)
    assert "routing inside the flow polytope: yes" in out


def test_ensemble_budget():
    out = run_example("ensemble_budget.py")
    m = re.search(r"training loss with penalty: ([0-9.]+) -> ([0-9.]+)", out)
    assert m and float(m.group(2)) < 0.8 * float(m.group(1))
    assert number(out, "test squared error, ensemble:") < 0.8 * number(out, "test squared error, centroid only:")
    assert number(out, "share of decisions within 0.25 of the set:") >= 0.9
    with_pen = number(out, "largest distance of a combined decision from the set:")
    without = number(out, "without the penalty: largest distance")
    assert with_pen <= without + 1e-9


def test_jitted_learner():
    out = run_example("jitted_learner.py")
    assert "identical iterates: True" in out
    assert "in the set: True" in out


def test_train_scorer(tmp_path):
    """Gradient descent through the torch layer: both losses fall, the learned ranking and slots hold up out of sample."""
    pytest.importorskip("torch")
    pytest.importorskip("matplotlib")
    png = tmp_path / "loss.png"
    out = run_example("train_scorer.py", "--plot", str(png))
    m = re.search(r"ranking: training loss: ([0-9.]+) -> ([0-9.]+)", out)
    assert m and float(m.group(2)) < 0.2 * float(m.group(1))
    m = re.search(r"ranking: held-out loss: ([0-9.]+) -> ([0-9.]+)", out)
    assert m and float(m.group(2)) < 0.2 * float(m.group(1))
    # Spearman's rho of the learned order against the observed one (scipy.stats.spearmanr), out of sample
    rho0, rho = number(out, "held-out Spearman rho before training:"), number(out, "held-out Spearman rho after training:")
    assert rho >= 0.9 and rho > rho0 + 0.3
    m = re.search(r"slots: held-out loss: ([0-9.]+) -> ([0-9.]+)", out)
    assert m and float(m.group(2)) < 0.2 * float(m.group(1))
    assert number(out, "slots: held-out accuracy:") >= 0.9
    assert number(out, "mean number of nonzero probabilities:") < 2.5          # sparse: most slots get exactly 0
    assert "soft ranks inside the permutahedron: yes" in out and "probabilities inside the simplex: yes" in out
    assert png.is_file() and png.stat().st_size > 10_000


def test_mirror_descent(tmp_path):
    png = tmp_path / "regret.png"
    out = run_example("mirror_descent.py", "--out", str(png))
    blocks = out.split("assignment:")
    assert len(blocks) == 2
    for block in blocks:
        rounds = number(block, "rounds:")
        for learner in ("EG", "OGD"):
            regret, bound = number(block, f"{learner} regret:"), number(block, f"{learner} bound:")
            # the fixed-horizon regret bounds of online mirror descent (entropy regularizer, Pinsker) and of
            # projected gradient descent (Zinkevich, 2003) hold on every loss sequence
            assert regret <= bound
            assert regret >= -bound / rounds
        assert number(block, "largest violation of a decision:") <= 1e-8
    assert "all decisions inside the sets: yes" in out
    order = re.search(r"EG final airtime order: (.+)", out).group(1).split(", ")
    assert len(order) == 8 and len(set(order)) == 8
    try:
        import matplotlib  # noqa: F401
    except ImportError:
        return
    assert png.exists() and png.stat().st_size > 10_000
