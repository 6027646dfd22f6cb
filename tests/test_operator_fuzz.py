"""The operator fuzzer (benchmarks/fuzz_operators.py) at CI size, its checks on planted wrong answers, and
regression tests for the defects it found, each naming the fuzzed case."""
import numpy as np
import pytest

import setkit
from benchmarks import fuzz_operators as fz

CATALOG = fz.CATALOG


# -- the CI slice -------------------------------------------------------------------------------------
FAST = ("simplex.examples", "box.examples[0]", "ball.examples", "budget.examples[0]", "permutahedron.examples",
        "birkhoff.examples[0]", "transport.examples[0]", "group_ball.examples[0]", "owl_ball.examples[0]",
        "ksupport_ball.examples[0]", "elastic_ball.examples", "nuclear_ball.examples[0]", "spectraplex.examples[0]",
        "spectral_ball.examples[0]", "product.examples[0]", "affine.examples[0]", "intersection.examples[3]",
        "centered:box", "catalog/synth-patch-edits", "catalog/garden-bed-valves", "matroid_bases.examples[0]",
        "submodular_base.examples[0]", ".scaled[0]", ".scaled[9]", ".scaled[27]")


def test_fuzz_slice_finds_no_foreign_exception_and_no_silent_wrong_answer():
    t = fz.run(calls=2000, seed=0, time_limit=10.0, randoms_per_kind=0, combos=0, only=FAST)
    report = fz.summary(t)
    assert t.total >= 2000, report                       # the slice did real work
    assert len(t.kinds) >= 15, report                    # over most kinds
    assert t.count("correct") >= 0.9 * t.total, report
    assert t.count("foreign") == 0, report
    assert t.count("silent wrong") == 0, report
    bands = {b for (b, oc) in t.by_band}
    assert {"1e-300", "1e300", "mixed", "degenerate"} <= bands, report


def _fuzz_one(K, label="planted", bands=("1", "1e8", "degenerate")):
    t = fz.Tally()
    f = fz.SetFuzzer(label, K, t, np.random.default_rng(0), time_limit=10.0)
    f.round(bands)
    return t


def test_a_projection_off_the_set_is_reported_as_a_silent_wrong_answer(monkeypatch):
    from setkit.families.simplex import Simplex
    monkeypatch.setattr(Simplex, "project", lambda self, Y: np.clip(Y, 0.0, None))   # forgets the sum
    t = _fuzz_one(setkit.simplex(dim=4))
    assert t.count("silent wrong") > 0
    assert any("infeasible" in d["what"] or "not a member" in d["what"] for d in t.defects)


def test_a_feasible_but_not_nearest_point_fails_the_first_order_check(monkeypatch):
    from setkit.families.simplex import Simplex
    monkeypatch.setattr(Simplex, "project", lambda self, Y: np.full_like(Y, 1.0 / Y.shape[1]))  # the centre
    t = _fuzz_one(setkit.simplex(dim=4))
    assert any("first-order gap" in d["what"] for d in t.defects)


def test_a_wrong_vertex_fails_the_lmo_checks(monkeypatch):
    from setkit.families.simplex import Simplex

    def worst(self, C):
        out = np.zeros_like(C)
        out[np.arange(C.shape[0]), np.argmax(C, axis=1)] = 1.0     # the maximizer, not the minimizer
        return out
    monkeypatch.setattr(Simplex, "lmo", worst)
    t = _fuzz_one(setkit.simplex(dim=4))
    assert any("<c, lmo(c)>" in d["what"] or "support" in d["what"] for d in t.defects)


def test_a_foreign_exception_is_a_defect_with_its_input(monkeypatch):
    from setkit.families.box import Box

    def boom(self, Y):
        raise ZeroDivisionError("planted")
    monkeypatch.setattr(Box, "project", boom)
    t = _fuzz_one(setkit.compile({"kind": "box", "dim": 3, "lower": 0, "upper": 1}))
    assert t.count("foreign") > 0 and any("ZeroDivisionError: planted" in d["what"] for d in t.defects)


def test_independent_feasibility_checks_agree_with_closed_forms():
    # permutahedron of (3, 2, 1): (2, 2, 2) is its centre, (3, 3, 0) violates the top-1 partial sum by
    # 0 and the top-2 one by 1 (majorization, Rado 1952, from memory)
    K = setkit.permutahedron(weights=[3, 2, 1])
    check, src = fz.feasibility_checker(K)
    r = check(np.array([[2.0, 2.0, 2.0], [3.0, 3.0, 0.0], [4.0, 1.0, 1.0]]))
    assert src == "majorization" and r[0] == 0.0 and r[1] > 0.5 and r[2] > 0.5
    # the l2 ball of radius 1: (3, 4) is 4 outside; no overflow at 1e300
    B = setkit.compile({"kind": "ball", "dim": 2, "norm": 2, "radius": 1.0})
    check, _ = fz.feasibility_checker(B)
    assert np.allclose(check(np.array([[3.0, 4.0], [0.6, 0.8], [3e300, 4e300]])), [4.0, 0.0, 5e300])
    # a product splits the coordinates: (0.5, 0.5 | 2, 0) violates the second simplex by 1 / sqrt(2)
    P = setkit.compile({"kind": "product", "of": [{"kind": "simplex", "dim": 2}, {"kind": "simplex", "dim": 2}]})
    check, _ = fz.feasibility_checker(P)
    assert np.allclose(check(np.array([[0.5, 0.5, 2.0, 0.0]])), [1 / np.sqrt(2)])


# -- regressions for the defects the fuzzer found ------------------------------------------------------
def test_ksupport_projection_of_a_row_spanning_hundreds_of_decades():
    """fuzz_operators seed 1, catalog/synth-patch-edits.yaml, band "mixed": ZeroDivisionError in the level
    search (nu * tau underflowed to 0)."""
    K = setkit.load(CATALOG / "synth-patch-edits.yaml")
    y = np.array([-1.0578441517908695e+82, -9.424611512602624e-139, -2.3921791158756764e-276,
                  3.4103933393032626e-292, -2.1309449273483993e+188, -9.848659841002944e+246,
                  -1.1938574176140067e+64, -3.6526348937969647e+137])
    p = K.project(y)
    # one entry dominates by 1e58: the k-support norm is then the l2 norm to 1e-58 relative, and the
    # projection the radial one, radius * y / ||y|| (closed form of the l2-ball projection)
    m = np.abs(y).max()
    radial = 0.5 * (y / m) / np.linalg.norm(y / m)
    assert np.allclose(p, radial, rtol=1e-12, atol=1e-15)   # entries below 1e-15 are thresholded to 0
    assert K.contains(p) and K.violation(p) == 0.0
    assert K.contains(y * 1e-300 * 1e-10) and np.isfinite(K.distance(y))


def test_group_ball_projection_far_outside_stays_in_the_ball():
    """fuzz_operators seed 2, catalog/garden-bed-valves.yaml at |y| ~ 1e16: the answer was 0.8 outside
    the ball (radius 1.2) and its own contains() rejected it."""
    K = setkit.load(CATALOG / "garden-bed-valves.yaml")
    rng = np.random.default_rng(0)
    for s in (1e8, 1e16, 1e100, 1e300):
        y = rng.normal(size=K.shape) * s
        p = K.project(y)
        assert K.contains(p), s
        # group norms: [0, 1, 2], [3, 4], [5, 6] with weights 1, 2, 1; sum of weighted norms <= 1.2
        groups, w = [[0, 1, 2], [3, 4], [5, 6]], [1.0, 2.0, 1.0]
        val = sum(wi * np.linalg.norm(p[g]) for wi, g in zip(w, groups))
        assert val <= 1.2 * (1 + 1e-12), (s, val)
        # first-order condition of the projection (Frank-Wolfe gap), normalized by |y - p|
        r = (y - p) / np.abs(y - p).max()
        assert r @ K.lmo(-r) - r @ p <= 1e-9 * 1.2


def test_elastic_ball_violation_is_finite_when_the_square_overflows():
    """fuzz_operators seed 2, elastic_ball.examples[1] (mix 1: the l1 ball) at 1e300: violation NaN
    (0 times an overflowed square)."""
    K = setkit.compile({"kind": "elastic_ball", "dim": 4, "radius": 2.5, "mix": 1.0})
    x = np.array([1e300, -2e300, 3e300, 0.0])
    assert K.violation(x) == pytest.approx(6e300 - 2.5, rel=1e-15)
    assert not K.contains(x)


def test_product_distance_beyond_1e154_does_not_overflow():
    """fuzz_operators seed 1, catalog/per-learner-minutes.yaml and two-depots.yaml at 1e300: distance
    inf while |y - project(y)| is about 2.3e303 (the squares of block distances overflowed)."""
    K = setkit.compile({"kind": "product", "of": [{"kind": "simplex", "dim": 3}, {"kind": "box", "dim": 2,
                                                                                "lower": 0, "upper": 1}]})
    y = np.array([1e300, -1e300, 5e299, 3e300, -4e300])
    d = K.distance(y)
    p = K.project(y)
    m = np.abs(y - p).max()
    assert np.isfinite(d) and d == pytest.approx(m * np.linalg.norm((y - p) / m), rel=1e-14)


@pytest.mark.parametrize("magnitude", [1e-12, 1e-150, 1e-300, 1e300])
def test_cut_dual_lmo_does_not_read_tiny_costs_as_zero(magnitude):
    """fuzz_operators seeds 1 and 2, catalog/fair-exposure-ranking.yaml and market-stall-exposure.yaml
    (a permutahedron with cut rows, LMO by column generation): at |c| <= 1e-12 the master LP returned
    a vertex 1.1 worse than the minimizer. The LMO is invariant under positive scaling of c."""
    for name in ("fair-exposure-ranking.yaml", "market-stall-exposure.yaml"):
        K = setkit.load(CATALOG / name)
        rng = np.random.default_rng(1)
        for _ in range(3):
            c = rng.normal(size=K.shape)
            best = float(c.reshape(-1) @ K.lmo(c).reshape(-1))
            got = float(c.reshape(-1) @ K.lmo(c * magnitude).reshape(-1))
            assert got <= best + 1e-9 * max(1.0, abs(best)), (name, got, best)
            assert -K.support(-c * magnitude) / magnitude == pytest.approx(best, rel=1e-9, abs=1e-12)


def test_partition_matroid_with_a_far_element_index_is_refused_fast():
    """fuzz_descriptions seed 11, matroid_bases-example-1 with an index 2**31 in a group: building the set
    of the missing elements of 0..2**31 took 22 GB (the process was killed by the kernel) or 55-82 s."""
    import time
    for groups in ([[0, 2, 4], [1, 3], [2147483648]], [[0, 2147483648, 4], [1, 3], [5]]):
        t0 = time.process_time()
        # refused by the size limit of element indices (since seed 21 of the same fuzzer); before, by
        # the first element missing from the groups
        with pytest.raises(setkit.errors.DescriptionError, match=r"groups\[\d\].*indices must be below 100,000,000"):
            setkit.compile({"kind": "matroid_bases", "form": "partition", "groups": groups, "quotas": [1, 1, 0]})
        assert time.process_time() - t0 < 5.0


def test_lmo_on_solver_routes_is_scale_free_and_support_does_not_turn_nan():
    """fuzz_operators seed 1 (100,047 calls): intersection.examples[2] (LMO by the Clarabel reference) returned
    a vertex up to 1.1 worse than the minimizer at |c| <= 1e-12; permutahedron.scaled[25], ball.scaled[21],
    budget.scaled[24] returned support NaN at |c| ~ 1e306 (inf - inf in the sum)."""
    from setkit.families import lookup
    K = setkit.compile(lookup("intersection").examples()[2])
    rng = np.random.default_rng(1)
    for _ in range(3):
        c = rng.normal(size=K.shape)
        best = float(c @ K.lmo(c))
        for s in (1e-300, 1e-12, 1e300):
            assert float(c @ K.lmo(c * s)) <= best + 1e-9, s
    P = setkit.compile({"kind": "permutahedron", "weights": [3e6, 2e6, 1e6, 0.0]})
    c = np.array([[1e307, -1e307, 5e306, 0.0], [1e307, 1e307, 1e307, 1e307], [-1e307, -1e307, -1e307, -1e307]])
    v = P.support(c)
    # sorted c against sorted weights (rearrangement inequality, Hardy-Littlewood-Polya 1934, from memory):
    # row 0: 3e6 * 1e307 + 2e6 * 5e306 + ... overflows to +inf; rows 1-2: 6e6 * (+-1e307) = +-inf
    assert np.array_equal(v, [np.inf, np.inf, -np.inf])
    assert P.support(c[0] * 1e-10) == pytest.approx(3e6 * 1e297 + 2e6 * 5e296, rel=1e-12)


def test_affine_image_lmo_at_1e300_is_a_finite_vertex():
    """fuzz_operators seed 1, affine.combined[1:21] (a group ball scaled by 1e4): lmo(c) at |c| ~ 1e300 gave
    non-finite vertices (c times the scale overflowed inside the change of variables)."""
    K = setkit.compile({"kind": "affine", "set": {"kind": "group_ball", "dim": 6, "group_size": 3, "radius": 2.5,
                                                  "weights": [1.0, 0.5]},
                        "scale": 1e4, "shift": [0.25, 0.589, 0.883, -1.868, 1.194, 1.443]})
    rng = np.random.default_rng(0)
    C = rng.normal(size=(3, 6))
    assert np.isfinite(K.lmo(C * 1e300)).all()
    assert np.allclose(K.lmo(C * 1e300), K.lmo(C), rtol=1e-12)
