"""The compiled single-point entries (setkit.kernels.point) give exactly what the batch kernels give.

``K.project(y)`` / ``K.lmo(c)`` on one float64 C-contiguous point call one compiled function
(finiteness check and kernel); every other input, and every point that entry leaves alone
(TakeGeneralPath), takes the general path. These checks compare the entry bit for bit (values
and signs of zeros) with the batch of one, on edges: ties, signed zeros, vertices, sums within
rounding of an at_most total, budget points far above the data, unbounded box directions, long
permutahedra (NumPy's sort), and check that non-finite points still raise setkit's InputError,
that a subclass overriding a kernel does not inherit the entry, and that explain() names the
native kernel the entry runs.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pytest

import setkit
from setkit.errors import InputError, TakeGeneralPath
from setkit.families import kernel
from setkit.families.box import Box


def _specs():
    rng = np.random.default_rng(5)
    n = 12
    w = rng.uniform(0.5, 2.0, n)
    lo = -rng.uniform(0.5, 1.5, n)
    return {
        "simplex": {"kind": "simplex", "dim": n},
        "simplex total 0": {"kind": "simplex", "dim": n, "total": 0.0},
        "simplex at_most": {"kind": "simplex", "dim": n, "total": 2.0, "mode": "at_most"},
        "budget": {"kind": "budget", "dim": n, "weights": w.tolist(), "upper": 1.0, "total": 0.3 * float(w.sum())},
        "budget at_most": {"kind": "budget", "dim": n, "upper": rng.uniform(0.5, 2.0, n).tolist(), "total": 3.0,
                           "mode": "at_most", "lower": -0.5},
        "budget no caps": {"kind": "budget", "dim": n, "weights": w.tolist(), "total": 2.0},
        "box": {"kind": "box", "dim": n, "lower": lo.tolist(), "upper": (lo + rng.uniform(0.0, 3.0, n)).tolist()},
        "box unbounded": {"kind": "box", "dim": 4, "lower": [0.0, "-inf", -1.0, "-inf"], "upper": ["inf", 2.0, 1.0, "inf"]},
        "l2 ball": {"kind": "ball", "dim": n, "norm": 2, "radius": 1.5},
        "l2 ball centered": {"kind": "ball", "dim": n, "norm": 2, "radius": 0.5, "center": rng.normal(size=n).tolist()},
        "l1 ball": {"kind": "ball", "dim": n, "norm": 1, "radius": 1.0},
        "l1 ball centered": {"kind": "ball", "dim": n, "norm": 1, "radius": 1.0, "center": rng.normal(size=n).tolist()},
        "linf ball": {"kind": "ball", "dim": n, "norm": "inf", "radius": 0.5},
        "permutahedron": {"kind": "permutahedron", "weights": np.linspace(0.0, 1.0, n).tolist()},
        "permutahedron ties": {"kind": "permutahedron", "weights": [1.0, 1.0, 0.0, 0.0, 2.0]},
        "permutahedron 600": {"kind": "permutahedron", "weights": np.linspace(-1.0, 3.0, 600).tolist()},
        "permutahedron 1": {"kind": "permutahedron", "weights": [2.5]},
    }


SPECS = _specs()


def _points(K, rng):
    n = K.dim
    pts = [rng.standard_normal(n) * s for s in (1e-300, 1e-8, 1.0, 1e3, 1e17, 1e300)]
    pts += [np.zeros(n), -np.zeros(n), np.full(n, 0.25), np.full(n, -3.0)]
    t = np.round(rng.standard_normal(n))             # ties
    pts.append(t)
    z = rng.standard_normal(n)
    z[::2] = -0.0                                    # signed zeros among values
    pts.append(z)
    p = K.project(rng.standard_normal(n) * 2.0)      # on the set (a face or a vertex)
    pts += [p, p + 1e-12]
    try:
        pts.append(K.lmo(rng.standard_normal(n)))     # a vertex
    except setkit.UnboundedDirectionError:
        pts.append(K.lmo(np.zeros(n)))
    return [np.ascontiguousarray(q, dtype=float) for q in pts]


def _same(a, b):
    return a.shape == b.shape and np.array_equal(a, b) and np.array_equal(np.signbit(a), np.signbit(b))


@pytest.mark.parametrize("name", sorted(SPECS))
def test_entries_are_bit_identical_to_the_batch_kernels(name):
    K = setkit.compile(SPECS[name])
    want = {"project", "lmo"} | ({"distance"} if K.kind in ("simplex", "box", "ball") else set()) | \
        ({"support"} if K.kind == "simplex" or (K.kind == "box" and name != "box unbounded") else set())
    assert set(K.plan.point) == want, name
    rng = np.random.default_rng(17)
    for y in _points(K, rng):
        for op in sorted(want):
            try:
                batch = getattr(K, op)(y[None, :])[0]
            except setkit.UnboundedDirectionError:
                with pytest.raises(setkit.UnboundedDirectionError):
                    getattr(K, op)(y)
                continue
            one = getattr(K, op)(y)
            assert type(one) is type(batch) and _same(one, batch), (name, op, y[:4])
            assert _same(getattr(K.unchecked, op)(y), batch), (name, op, "unchecked")


@pytest.mark.parametrize("name", sorted(SPECS))
def test_entries_answer_without_the_general_path_on_ordinary_points(name):
    # the fast path must actually serve ordinary points (else the measured speed is not this code)
    K = setkit.compile(SPECS[name])
    y = np.random.default_rng(3).standard_normal(K.dim)
    from setkit.routing import bind_point
    for op in K.plan.point:
        f = bind_point(K.plan.point[op][0])
        try:
            out = f(y)
        except TakeGeneralPath:
            assert name == "box unbounded" and op == "lmo", (name, op)   # an unbounded direction is left over
            continue
        if op in ("distance", "support"):
            out = out[0]
        assert _same(out, getattr(K, op)(y[None, :])[0]), (name, op)


@pytest.mark.parametrize("bad", [np.nan, np.inf, -np.inf])
@pytest.mark.parametrize("name", sorted(SPECS))
def test_non_finite_points_still_raise_the_located_input_error(name, bad):
    K = setkit.compile(SPECS[name])
    arg = {"project": "y", "lmo": "c", "distance": "y", "support": "c"}
    for i in (0, K.dim - 1):
        y = np.full(K.dim, 0.1)
        y[i] = bad
        for op in arg:
            with pytest.raises(InputError) as exc:
                getattr(K, op)(y)
            assert str(exc.value) == (f"{op} on {K.node.label}: argument {arg[op]} must be finite; got {bad} at "
                                      f"index ({i},)."), (name, op)


def test_sums_within_rounding_of_an_at_most_total_take_the_general_path():
    # x = max(y, 0) summing to the total up to rounding: NumPy's pairwise sum decides, as in the batch
    n = 10
    K = setkit.compile({"kind": "simplex", "dim": n, "total": 1.0, "mode": "at_most"})
    y = np.full(n, 0.1)                                  # sums to 1 up to rounding
    from setkit.routing import bind_point
    with pytest.raises(TakeGeneralPath):
        bind_point(K.plan.point["project"][0])(y)
    assert _same(K.project(y), K.project(y[None])[0])
    B = setkit.compile({"kind": "budget", "dim": n, "upper": 1.0, "total": 1.0, "mode": "at_most"})
    with pytest.raises(TakeGeneralPath):
        bind_point(B.plan.point["project"][0])(y)
    assert _same(B.project(y), B.project(y[None])[0])


def test_far_budget_points_are_solved_after_shifts_on_the_general_path():
    K = setkit.compile({"kind": "budget", "dim": 6, "upper": 1.0, "total": 2.0})
    y = np.array([1e20, 1e20 + 2.0**14, -1e20, 3.0, 1e20 + 2.0**15, 0.5])
    from setkit.routing import bind_point
    with pytest.raises(TakeGeneralPath):
        bind_point(K.plan.point["project"][0])(y)
    x = K.project(y)
    assert _same(x, K.project(y[None])[0])
    # feasibility of the answer (the set's own definition): bounds and the sum
    assert np.all(x >= 0.0) and np.all(x <= 1.0) and abs(x.sum() - 2.0) <= 1e-12


def test_simplex_lmo_picks_the_first_smallest_coordinate():
    # the rule of the row kernel: total e_j at the first index of the minimum (-0.0 and 0.0 tie)
    K = setkit.compile({"kind": "simplex", "dim": 9, "total": 2.0})
    for c, j in [([3.0, 1.0, 1.0, 2.0, 5.0, 1.0, 7.0, 8.0, 9.0], 1),
                 ([0.0, -0.0, 1.0, 1.0, 1.0, 1.0, 1.0, 1.0, 1.0], 0),
                 ([1.0] * 8 + [-1e-300], 8)]:
        x = K.lmo(np.array(c))
        assert x.tolist() == [2.0 if i == j else 0.0 for i in range(9)], c


def test_long_permutahedron_vertex_matches_the_rearrangement_inequality():
    # lmo of a permutahedron: the k-th largest weight at the k-th smallest c (Hardy, Littlewood and
    # Polya, Inequalities, 1934, the rearrangement inequality; from memory); checked with argsort
    n = 700
    w = np.random.default_rng(2).uniform(-1.0, 1.0, n)
    K = setkit.compile({"kind": "permutahedron", "weights": w.tolist()})
    c = np.random.default_rng(4).standard_normal(n)
    x = np.empty(n)
    x[np.argsort(c, kind="stable")] = np.sort(w)[::-1]
    assert np.array_equal(K.lmo(c), x)


def test_subclass_overriding_a_kernel_does_not_inherit_the_entry():
    @dataclass(frozen=True, eq=False, kw_only=True)
    class ShiftedBox(Box):
        """A box whose projection is overridden (to check that the inherited entry is not used for it)."""

        @kernel("project")
        def project(self, Y):
            """Clipping, then a marker offset of zero (same answers, another method)."""
            return np.clip(Y, self.lower, self.upper) + 0.0

    node = ShiftedBox(lower=np.zeros(3), upper=np.ones(3))
    from setkit.decision_set import DecisionSet
    K = DecisionSet(node)
    assert "project" not in K.plan.point          # its own kernel serves single points
    assert "lmo" in K.plan.point                  # not overridden: the box's entry still serves it
    calls = []
    orig = ShiftedBox.project

    def spy(self, Y):
        calls.append(Y.shape)
        return orig(self, Y)
    ShiftedBox.project = spy
    try:
        K = DecisionSet(node)
        assert K.project(np.array([2.0, -1.0, 0.5])).tolist() == [1.0, 0.0, 0.5]
    finally:
        ShiftedBox.project = orig
    assert calls == [(1, 3)]


def test_explain_names_the_native_kernel_the_entry_runs():
    K = setkit.compile({"kind": "budget", "dim": 5, "total": 1.0, "upper": 0.5})
    r = K.routes()
    assert r["project"].provider == "native" and r["lmo"].provider == "native"
    assert "breakpoint search" in r["project"].reason


def test_other_arrays_take_the_general_path_with_equal_answers():
    K = setkit.compile(SPECS["budget"])
    y = np.random.default_rng(8).standard_normal(K.dim)
    ref = K.project(y)
    ro = y.copy()
    ro.flags.writeable = False
    big_endian = y.astype(">f8")
    strided = np.repeat(y, 2)[::2]
    for arg in (ro, big_endian, strided, y.tolist(), y[None, :][0]):
        assert _same(K.project(arg), ref)
    with pytest.raises(InputError):
        K.unchecked.project(strided)
    with pytest.raises(InputError):
        K.unchecked.project(big_endian)


def test_unaligned_and_read_only_points_give_the_same_answers():
    # the compiled entry trusts its argument's layout: only aligned, writeable, C-contiguous points reach it
    n = 50
    buf = bytearray(8 * n + 1)
    y = np.ndarray((n,), np.float64, buffer=buf, offset=1)
    y[:] = np.random.default_rng(6).standard_normal(n)
    assert not y.flags.aligned
    ro = np.array(y)
    ro.flags.writeable = False
    for spec in (SPECS["budget"], SPECS["permutahedron"], SPECS["simplex"]):
        spec = dict(spec)
        if spec["kind"] == "permutahedron":
            spec["weights"] = np.linspace(0.0, 1.0, n).tolist()
        else:
            spec["dim"] = n
            spec.pop("weights", None)
        K = setkit.compile(spec)
        for op in ("project", "lmo"):
            ref = getattr(K, op)(np.array(y))
            assert _same(getattr(K, op)(y), ref) and _same(getattr(K, op)(ro), ref), (spec["kind"], op)
            assert _same(getattr(K.unchecked, op)(y), ref) and _same(getattr(K.unchecked, op)(ro), ref)


def test_other_routes_do_not_get_the_entry():
    K = setkit.compile(SPECS["simplex"])
    H = K.with_backends(project="osqp", lmo="highs")
    assert "project" not in H.plan.point and "lmo" not in H.plan.point and H.routes()["project"].provider == "osqp"
    assert set(H.plan.point) == {"distance", "support"}           # still native
    y = np.random.default_rng(9).standard_normal(K.dim)
    assert np.abs(H.project(y) - K.project(y)).max() < 1e-5      # the QP answer, within its tolerance
    P = setkit.compile({"kind": "product", "of": [SPECS["box"]], "copies": 2})
    assert P.plan.point == {}


def test_support_overflow_is_rescaled_on_the_general_path():
    # sigma(c) = total * max(c) for the simplex; 1e308 * 4 overflows in the kernel, and the general
    # path's power-of-two rescaling answers inf only where the value exceeds the float range
    K = setkit.compile({"kind": "simplex", "dim": 3, "total": 4.0})
    assert K.support(np.array([1e308, 0.0, -1.0])) == np.inf
    B = setkit.compile({"kind": "box", "dim": 2, "lower": 0.0, "upper": 1e300})
    assert np.isinf(B.support(np.array([1e10, 1e10])))               # 2e310: above the float range
    v = B.support(np.array([1.0, 2.0]))                                # 1 * 1e300 + 2 * 1e300
    assert abs(v - 3e300) <= 1e-15 * 3e300 and v == B.support(np.array([[1.0, 2.0]]))[0]
    assert K.support(np.array([1e300, 0.0, -1.0])) == 4e300          # total * max(c), below the range


@pytest.mark.parametrize("n", [1, 7, 8, 9, 16, 1003])
def test_simplex_lmo_minimum_in_every_lane_and_tail(n):
    # the entry's minimum runs on eight running minima and a tail: put the smallest value (once, or
    # tied, or as -0.0 against 0.0) at every position and compare with the row kernel
    K = setkit.compile({"kind": "simplex", "dim": n, "total": 3.0, "mode": "at_most"})
    E = setkit.compile({"kind": "simplex", "dim": n, "total": 3.0})
    rng = np.random.default_rng(n)
    base = rng.uniform(1.0, 2.0, n)
    for j in sorted({0, n - 1, n // 2, min(7, n - 1), min(8, n - 1)}):
        for low in (-1.0, 0.0, -0.0):
            c = base.copy()
            c[j] = low
            c[(j + 5) % n] = min(c[(j + 5) % n], low if low != 0.0 else 0.0)   # a tie after j (or j itself)
            for S in (K, E):
                one, batch = S.lmo(c), S.lmo(c[None, :])[0]
                assert _same(one, batch), (n, j, low)
                k = int(np.flatnonzero(c == c.min())[0])
                if S is E or c.min() < 0.0:
                    assert one[k] == 3.0 and np.count_nonzero(one) == 1, (n, j, low)
                else:
                    assert not one.any()
