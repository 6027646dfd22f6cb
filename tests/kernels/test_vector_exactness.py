"""The allocation-free and batch kernels of the vector families against the kernels they replaced.

Issue 12 rewrote the multiplier searches for long vectors and batches:

* simplex and l1 ball: Condat's lists kept in the output row (``simplex_tau_inplace``) instead of
  three work buffers -- compared with the buffered kernels kept beside them;
* capped / weighted budget: a sampled bracket and one settling pass for rows of at least
  ``LONG_ROW`` coordinates (``capped_project_long``), safeguarded Newton steps for rows up to
  ``NEWTON_ROW`` (``capped_newton``) -- compared with the randomized breakpoint search
  (``_capped_lambda``) and with the sorting breakpoint search ``capped_threshold_rows``;
* permutahedron projection and LMO: packed (value, index) keys sorted as integers -- compared with
  the merge-sort kernels (stable argsort, ties by index).

Outside references: the cvxpy reference (Clarabel) on small cases; the KKT conditions of the
continuous quadratic knapsack (x = clip(y - lam w, lo, hi) with <w, x> = total; Kiwiel,
"Breakpoint searching algorithms for the continuous quadratic knapsack problem", 2008) checked
in exact rational arithmetic; the sorted threshold of the simplex projection (Held, Wolfe and
Crowder, "Validation of subgradient optimization", 1974).
"""
from fractions import Fraction as Fr

import numpy as np
import pytest

import setkit
from setkit.agreement import reference
from setkit.kernels.isotonic import (permutahedron_lmo, permutahedron_lmo_rows, permutahedron_rows_packed,
                                     permutahedron_rows_sorted_inside, project_permutahedron)
from setkit.kernels.simplex import (LONG_ROW, NEWTON_ROW, SCAN_BLOCK_MIN, _capped_lambda, _capped_rows_nb,
                                    _simplex_rows_nb, capped_newton, capped_project_long, capped_project_threads,
                                    capped_threshold_rows,
                                    knapsack_lmo_rows, knapsack_lmo_rows_reference, project_capped,
                                    simplex_rows_buffered, uniform_or_array)
from setkit.kernels.vector_ops import l1_ball_project, l1_ball_project_buffered

SCALES = (1e-300, 1e-150, 1e-3, 1.0, 1e6, 1e17, 1e150, 1e300)


def _rows(n, scale, rng):
    """Gaussian rows at one scale, plus ties, a constant row, signed zeros and mixed scales."""
    Y = scale * rng.standard_normal((6, n))
    Y[1] = scale                                   # all tied
    Y[2, : max(1, n // 2)] = Y[2, 0]               # half tied
    Y[3] = np.round(rng.standard_normal(n)) * scale
    Y[4, : n // 3] *= 1e-12                        # mixed scales
    Y[5] = 0.0
    if n > 2:
        Y[5, 1] = -0.0
    return Y


@pytest.mark.parametrize("n", [1, 2, 3, 17, 200, 5000, SCAN_BLOCK_MIN + 31])
def test_simplex_in_place_equals_buffered(n):
    rng = np.random.default_rng(n)
    for scale in SCALES:
        for total in (1e-300, 1e-3, 1.0, 1e3, 1e300 / max(n, 1)):
            Y = _rows(n, scale, rng)
            a, b = np.empty_like(Y), np.empty_like(Y)
            assert _simplex_rows_nb(Y, total, a) == simplex_rows_buffered(Y, total, b)
            np.testing.assert_allclose(a, b, rtol=0, atol=1e-12 * total)
            assert np.array_equal(a, b)            # the same threshold: the list order does not matter here


@pytest.mark.parametrize("n", [1, 2, 5, 100, 3000, 5003])
def test_l1_ball_in_place_equals_buffered(n):
    rng = np.random.default_rng(100 + n)
    for scale in SCALES:
        for radius in (1e-300, 1.0, 1e300):
            Y = _rows(n, scale, rng)
            c = rng.standard_normal(n) * min(scale, 1e300)
            for center in (c, np.zeros(n)):
                a = l1_ball_project(Y, center, radius)
                b = l1_ball_project_buffered(Y, center, radius)
                np.testing.assert_allclose(a, b, rtol=0, atol=1e-12 * radius + 1e-12 * np.abs(center).max(initial=0))
            # the empty center means the origin, bit for bit
            assert np.array_equal(l1_ball_project(Y, np.empty(0), radius), l1_ball_project(Y, np.zeros(n), radius))


def _budget_case(n, rng, caps=True, weights=True):
    w = rng.uniform(0.5, 2.0, n) if weights else np.ones(n)
    lo = -rng.uniform(0.0, 1.0, n)
    hi = lo + rng.uniform(0.1, 2.0, n) if caps else np.full(n, np.inf)
    fin = np.where(np.isfinite(hi), hi, lo + 3.0)
    total = float(w @ lo + 0.4 * (w @ fin - w @ lo))
    return lo, hi, w, total


def _kkt_exact(w, total, x):
    """|<w, x> - total| summed exactly in rationals (the budget condition of the KKT system; the clip
    condition x = clip(y - lam w, lo, hi) is checked bit for bit by the caller)."""
    s = sum(Fr(float(wi)) * Fr(float(xi)) for wi, xi in zip(w, x))
    return abs(float(s - Fr(total)))


@pytest.mark.parametrize("n", [1, 2, 7, 100, 1000, NEWTON_ROW])
def test_capped_newton_equals_search(n):
    rng = np.random.default_rng(200 + n)
    for trial in range(12):
        lo, hi, w, total = _budget_case(n, rng, caps=trial % 3 != 0, weights=trial % 2 == 0)
        y = rng.standard_normal(n) * 10.0 ** rng.uniform(-3, 6)
        if trial % 4 == 0:
            y = np.round(y)                        # ties
        lam_n = capped_newton(y, lo, hi, w, total)
        lam_s = _capped_lambda(y, lo, hi, w, total, np.empty(n, np.int64))
        if np.isnan(lam_n):
            continue                               # Newton gave up: the row takes the search (checked below)
        xn, xs = np.clip(y - lam_n * w, lo, hi), np.clip(y - lam_s * w, lo, hi)
        np.testing.assert_allclose(xn, xs, rtol=0, atol=1e-12 * max(1.0, np.abs(y).max()))
        assert abs(xn @ w - total) <= 1e-12 * max(1.0, np.abs(w * y).sum())


@pytest.mark.parametrize("caps,weights", [(True, True), (True, False), (False, True)])
def test_capped_long_equals_search(caps, weights):
    rng = np.random.default_rng(7 + 2 * caps + weights)
    n = LONG_ROW + 1234
    lo, hi, w, total = _budget_case(n, rng, caps, weights)
    for scale, tie in ((1e-3, False), (1e6, False), (1.0, True)):
        y = rng.standard_normal(n) * scale
        if tie:
            y = np.round(y)
        out = np.empty(n)
        lam = capped_project_long(y, lo, hi, w, total, out)
        lam_s = _capped_lambda(y, lo, hi, w, total, np.empty(n, np.int64))
        xs = np.clip(y - lam_s * w, lo, hi)
        np.testing.assert_allclose(out, xs, rtol=0, atol=1e-12 * max(1.0, scale))
        np.testing.assert_array_equal(out, np.clip(y - lam * w, lo, hi))
        assert _kkt_exact(w, total, out) <= 1e-9 * max(1.0, abs(total))
    # a constant vector (every breakpoint tied: no bracket from the sample) takes the full search
    y = np.full(n, 0.25)
    out = np.empty(n)
    lam = capped_project_long(y, lo, hi, w, total, out)
    lam_s = _capped_lambda(y, lo, hi, w, total, np.empty(n, np.int64))
    np.testing.assert_allclose(out, np.clip(y - lam_s * w, lo, hi), rtol=0, atol=1e-12)


def test_capped_rows_against_sorting_search():
    """All row kernels (Newton, search, long) against the sorting breakpoint search, at the edges."""
    rng = np.random.default_rng(11)
    for n in (1, 3, 60, NEWTON_ROW + 5):
        lo, hi, w, total = _budget_case(n, rng)
        Y = _rows(n, 1.0, rng)
        X = project_capped(Y, lo, hi, w, total)
        lam = capped_threshold_rows(Y, lo, hi, w, total)
        ref = np.clip(Y - lam[:, None] * w, lo, hi)
        np.testing.assert_allclose(X, ref, rtol=0, atol=1e-11)
        # far points (the shifted re-solve) and tiny ones
        for s in ((1e-300, 1e300) if n < 100 else ()):
            Z = rng.standard_normal((3, n)) * s
            XZ = project_capped(Z, lo, hi, w, total)
            assert np.all(XZ >= lo) and np.all(XZ <= hi)
            assert np.all(np.abs(XZ @ w - total) <= 1e-9 * max(1.0, abs(total)))


def test_budget_long_vector_through_the_set_matches_reference_conditions():
    """A long vector through K.project (routing, fast path) meets the exact KKT conditions."""
    rng = np.random.default_rng(3)
    n = LONG_ROW * 2
    K = setkit.compile({"kind": "budget", "dim": n, "upper": 0.01, "total": 1.0})
    y = rng.standard_normal(n)
    x = K.project(y)
    assert np.all(x >= 0.0) and np.all(x <= 0.01)
    assert abs(float(sum(Fr(float(v)) for v in x)) - 1.0) <= 1e-12 * n
    # x = clip(y - lam, 0, 0.01) with one lam: the free coordinates share y - x
    free = (x > 0) & (x < 0.01)
    shift = y[free] - x[free]
    assert np.ptp(shift) <= 1e-12


def test_empty_batches_and_n1():
    lo, hi, w = np.zeros(1), np.ones(1), np.ones(1)
    assert project_capped(np.empty((0, 1)), lo, hi, w, 0.5).shape == (0, 1)
    np.testing.assert_array_equal(project_capped(np.array([[7.0]]), lo, hi, w, 0.5), [[0.5]])
    out = np.empty((0, 5))
    _capped_rows_nb(np.empty((0, 5)), np.zeros(5), np.ones(5), np.ones(5), 1.0, np.empty(0, np.int64), out, np.empty(0))
    wd = np.array([1.0])
    assert permutahedron_rows_packed(np.empty((0, 1)), wd).shape == (0, 1)
    assert project_permutahedron(np.empty((0, 4)), np.arange(4.0)[::-1].copy()).shape == (0, 4)
    assert permutahedron_lmo(np.empty((0, 4)), np.arange(4.0)[::-1].copy()).shape == (0, 4)
    np.testing.assert_array_equal(project_permutahedron(np.array([[5.0]]), wd), [[1.0]])
    for kind in ({"kind": "budget", "dim": 3, "upper": 1.0, "total": 1.0},
                 {"kind": "permutahedron", "weights": [3.0, 1.0, 0.0]}):
        K = setkit.compile(kind)
        assert K.project(np.empty((0, 3))).shape == (0, 3)
        assert K.lmo(np.empty((0, 3))).shape == (0, 3)


@pytest.mark.parametrize("n", [1, 2, 5, 64, 100, 700])
def test_permutahedron_packed_keys_equal_merge_sort(n):
    rng = np.random.default_rng(300 + n)
    for scale in SCALES:
        wd = np.sort(rng.standard_normal(n))[::-1].copy()
        for b in (1, 3, 80):                       # small batches: numba's sort; 80 rows: NumPy's
            Y = np.concatenate([_rows(n, scale, rng), scale * rng.standard_normal((b, n))])
            new = project_permutahedron(Y, wd)
            assert np.array_equal(new, permutahedron_rows_packed(Y, wd))    # one order: bit for bit
            old = permutahedron_rows_sorted_inside(Y, wd)
            np.testing.assert_allclose(new, old, rtol=0, atol=1e-12 * max(1.0, np.abs(wd).max()))
            L_new, L_old = permutahedron_lmo(Y, wd), permutahedron_lmo_rows(Y, wd)
            # ties go by index in both; only a tie between -0.0 and +0.0 may be ordered differently
            plain = ~(Y == 0.0).any(axis=1)
            assert np.array_equal(L_new[plain], L_old[plain])
            np.testing.assert_allclose((L_new * Y).sum(1), (L_old * Y).sum(1), rtol=1e-12, atol=0)


def test_permutahedron_lmo_ties_by_index():
    """Ties in c: the larger weight goes to the smaller index (the stable order)."""
    K = setkit.compile({"kind": "permutahedron", "weights": [3.0, 2.0, 1.0, 0.0]})
    np.testing.assert_array_equal(K.lmo([1.0, 0.5, 0.5, 1.0]), [1.0, 3.0, 2.0, 0.0])
    np.testing.assert_array_equal(K.lmo(np.array([[1.0, 0.5, 0.5, 1.0]] * 70))[0], [1.0, 3.0, 2.0, 0.0])


@pytest.mark.parametrize("spec", [
    {"kind": "budget", "dim": 6, "upper": [0.5, 1.0, 0.2, 2.0, 1.0, 0.3], "weights": [1, 2, 0.5, 1, 3, 1],
     "total": 2.0},
    {"kind": "budget", "dim": 5, "lower": -1.0, "upper": 1.0, "total": 0.5},
    {"kind": "ball", "dim": 5, "norm": 1, "radius": 0.7},
    {"kind": "simplex", "dim": 6, "total": 2.0},
    {"kind": "permutahedron", "weights": [4.0, 2.5, 1.0, 0.0, -1.0]},
])
def test_small_cases_against_cvxpy_reference(spec):
    """The rewritten kernels on small sets against the cvxpy reference (Clarabel), single points and batches."""
    K = setkit.compile(spec)
    R = reference(K)
    rng = np.random.default_rng(5)
    Y = 3.0 * rng.standard_normal((4, K.dim))
    Y[0] = np.round(Y[0])                          # ties
    for y in Y:
        np.testing.assert_allclose(K.project(y), R.project(y), atol=2e-5 * max(1.0, np.abs(y).max()))
    np.testing.assert_allclose(K.project(Y), np.array([K.project(y) for y in Y]), rtol=0, atol=0)
    big = np.repeat(Y, 20, axis=0)                 # past NUMPY_SORT_ROWS: the NumPy-sort path
    np.testing.assert_array_equal(K.project(big)[::20], K.project(Y))
    np.testing.assert_array_equal(K.lmo(big)[::20], K.lmo(Y))


def test_budget_jit_kernel_bit_identical_on_a_long_vector():
    """K.jit_kernels().project runs the same long-row kernel as K.project (n >= LONG_ROW)."""
    n = LONG_ROW + 10
    rng = np.random.default_rng(9)
    K = setkit.compile({"kind": "budget", "dim": n, "upper": rng.uniform(0.5, 2.0, n), "total": 0.3 * n})
    y = rng.standard_normal(n)
    assert np.array_equal(K.jit_kernels().project(y), K.project(y))


def test_long_budget_with_uniform_data_as_numbers():
    """Bounds or weights equal at every coordinate, passed as numbers (a separate compiled
    specialization reading fewer arrays), give the same x as the arrays up to rounding;
    also on sorted input, where the narrow sampled bracket fails and the wide one (or the full
    search) takes over, and on a constant vector; x meets the exact KKT budget condition."""
    rng = np.random.default_rng(21)
    n = LONG_ROW + 777
    cases = [(np.zeros(n), rng.uniform(0.5, 2.0, n), np.ones(n)),            # caps, unit weights
             (np.zeros(n), np.full(n, np.inf), rng.uniform(0.5, 2.0, n)),    # weights, no caps
             (np.full(n, -0.5), np.full(n, 1.5), np.full(n, 2.0))]           # everything uniform
    for lo, hi, w in cases:
        fin = np.where(np.isfinite(hi), hi, lo + 3.0)
        total = float(w @ lo + 0.3 * (w @ fin - w @ lo))
        nums = tuple(uniform_or_array(v) for v in (lo, hi, w))
        assert any(isinstance(v, float) for v in nums)
        for y in (rng.standard_normal(n), np.sort(rng.standard_normal(n)), np.round(rng.standard_normal(n)),
                  np.full(n, 0.25), rng.standard_normal(n) * 1e6):
            a, b = np.empty(n), np.empty(n)
            lam_a = capped_project_long(y, lo, hi, w, total, a)
            lam_b = capped_project_long(y, *nums, total, b)
            # the compiler may order the vectorized sums differently in the two specializations:
            # equal up to rounding, each exactly of the form clip(y - lam w) and on the budget
            np.testing.assert_allclose(a, b, rtol=0, atol=1e-12 * max(1.0, np.abs(y).max()))
            for lam, x in ((lam_a, a), (lam_b, b)):
                np.testing.assert_array_equal(x, np.clip(y - lam * w, lo, hi))
                assert _kkt_exact(w, total, x) <= 1e-9 * max(1.0, abs(total))
            lam_s = _capped_lambda(y, lo, hi, w, total, np.empty(n, np.int64))
            np.testing.assert_allclose(a, np.clip(y - lam_s * w, lo, hi), rtol=0,
                                       atol=1e-12 * max(1.0, np.abs(y).max()))


def _knapsack_case(n, rng, trial):
    lo = rng.uniform(-1.0, 1.0, n) * (trial % 2)
    cap = lo + rng.uniform(0.0, 2.0, n) * (rng.random(n) > 0.1)      # some coordinates fixed (cap == lo)
    w = rng.uniform(0.5, 2.0, n) if trial % 3 else np.ones(n)
    room = float(rng.uniform(0.0, 1.2) * (w * (cap - lo)).sum())      # sometimes more room than caps
    return lo, cap, w, room


def test_budget_lmo_branch_free_kernel_equals_reference():
    """The branch-free knapsack LMO against the kernel it replaced, bit for bit (the same pivots,
    sums and tie order), on random rows, integer rows (ties), magnitudes 1e-300..1e300, both modes,
    empty batches and n = 1; and against the sorted greedy of the continuous knapsack (Dantzig 1957,
    "Discrete-variable extremum problems"; from memory), written here with NumPy's stable argsort, in
    objective."""
    rng = np.random.default_rng(31)
    for trial in range(120):
        n = int(rng.integers(1, 90))
        lo, cap, w, room = _knapsack_case(n, rng, trial)
        C = rng.standard_normal((int(rng.integers(0, 12)), n))
        if trial % 4 == 0:
            C = np.round(C)
        if trial % 5 == 0:
            C = C * 10.0 ** float(rng.integers(-300, 301))
        for at_most in (False, True):
            a, b = np.empty_like(C), np.empty_like(C)
            knapsack_lmo_rows(C, lo, cap, w, room, at_most, a)
            knapsack_lmo_rows_reference(C, lo, cap, w, room, at_most, b)
            assert np.array_equal(a, b)
            if C.shape[0] and not at_most and trial % 5:
                order = np.argsort(C / w, axis=1, kind="stable")
                ref = np.broadcast_to(lo, C.shape).copy()
                for r in range(C.shape[0]):
                    left = room
                    for j in order[r]:
                        if cap[j] <= lo[j] or left <= 0.0:
                            continue
                        step = min(w[j] * (cap[j] - lo[j]), left)
                        ref[r, j] = lo[j] + step / w[j]
                        left -= step
                sc = np.abs(C).sum(axis=1) * max(1.0, np.abs(cap).max(), np.abs(lo).max())
                assert np.all(np.abs(np.einsum("ij,ij->i", C, a - ref)) <= 1e-12 * sc)


def test_budget_lmo_batch_rows_equal_single_calls():
    """A batch through K.lmo (split over threads when large) equals row-by-row single calls bit for bit."""
    rng = np.random.default_rng(41)
    n = 100
    K = setkit.compile({"kind": "budget", "dim": n, "weights": rng.uniform(0.5, 2.0, n).tolist(), "upper": 1.0,
                        "total": 20.0})
    C = rng.standard_normal((3000, n))
    C[::7] = np.round(C[::7])
    X = K.lmo(C)
    for r in range(0, 3000, 97):
        assert np.array_equal(X[r], K.lmo(C[r]))


def test_long_budget_threaded_passes_bit_identical():
    """The settling and writing passes split over 2..4 threads give the serial kernel's multiplier and
    x bit for bit (sums added in chunk order, undecided coordinates gathered in index order), with
    arrays and with numbers, on random, sorted (the wide bracket), tied and constant (the full
    search) inputs."""
    from setkit import parallel
    with parallel.held_crew(4) as pool:
        assert pool is not None
        _long_budget_threaded_cases(pool)


def _long_budget_threaded_cases(pool):
    rng = np.random.default_rng(51)
    n = 2 * LONG_ROW + 1001
    for lo, hi, w in ((np.zeros(n), rng.uniform(0.5, 2.0, n), np.ones(n)),
                      (-rng.uniform(0, 1, n), np.full(n, np.inf), rng.uniform(0.5, 2.0, n))):
        fin = np.where(np.isfinite(hi), hi, lo + 3.0)
        total = float(w @ lo + 0.3 * (w @ fin - w @ lo))
        nums = tuple(uniform_or_array(v) for v in (lo, hi, w))
        bunched = rng.standard_normal(n)
        bunched[: n // 5] = np.sort(bunched[: n // 5])        # undecided coordinates bunched in one thread's part
        for y in (rng.standard_normal(n), np.sort(rng.standard_normal(n)), np.round(3 * rng.standard_normal(n)),
                  np.full(n, 0.25), bunched):
            for data in ((lo, hi, w), nums):
                a = np.empty(n)
                lam = capped_project_long(y, *data, total, a)
                for k in (2, 3, 4):
                    b = np.empty(n)
                    assert capped_project_threads(y, *data, total, b, k, pool) == lam
                    assert np.array_equal(a, b)
            np.testing.assert_array_equal(a, np.clip(y - lam * w, lo, hi))
            assert abs(float(np.sum(w * a)) - total) <= 1e-9 * max(1.0, abs(total))


@pytest.mark.parametrize("n", [1, 2, 5, 100, 1000])
def test_pav_row_equals_reference(n):
    """Pool-adjacent-violators with the stack top in locals against the kernel it replaced, bit for
    bit, on the rows of every scale (ties, clusters split at gaps wider than the weights' spread)."""
    from setkit.kernels.isotonic import _pav_row, _pav_row_reference
    rng = np.random.default_rng(400 + n)
    for scale in SCALES:
        wd = np.sort(rng.standard_normal(n))[::-1].copy()
        Y = _rows(n, scale, rng)
        for y in Y:
            order = np.argsort(-y, kind="stable")
            outs = [np.empty(n), np.empty(n)]
            _pav_row(y, order, wd, outs[0], np.empty(n), np.empty(n), np.empty(n), np.empty(n), np.empty(n, np.int64))
            _pav_row_reference(y, order, wd, outs[1], np.empty(n), np.empty(n), np.empty(n), np.empty(n))
            assert np.array_equal(outs[0], outs[1])


def test_large_batch_finiteness_check_split_over_threads(monkeypatch):
    """The finiteness check of a large batch (2^19+ entries) runs in parts over threads; a NaN or inf in any part,
    including the last entry, is still rejected with setkit's error."""
    from setkit.errors import InputError
    from setkit.kernels.checks import all_finite
    monkeypatch.setenv("SETKIT_THREADS", "3")
    K = setkit.compile({"kind": "simplex", "dim": 100})
    Y = np.random.default_rng(61).normal(size=(6000, 100))
    assert all_finite(Y)
    for pos, bad in (((0, 0), np.nan), ((3000, 50), np.inf), ((5999, 99), -np.inf)):
        Z = Y.copy()
        Z[pos] = bad
        assert not all_finite(Z)
        with pytest.raises(InputError, match="finite"):
            K.project(Z)


def test_budget_jit_kernel_bit_identical_past_the_thread_split(monkeypatch):
    """Past THREAD_ROW, K.project splits the long-row passes over threads; the jitted kernel (serial)
    gives the same bits (per-coordinate weights: an array; lower and upper bounds: numbers). One set
    only: each jitted kernel is a closure compiled afresh (tens of seconds)."""
    from setkit.kernels.simplex import THREAD_ROW
    monkeypatch.setenv("SETKIT_THREADS", "2")
    n = THREAD_ROW + 5
    rng = np.random.default_rng(71)
    for spec in ({"kind": "budget", "dim": n, "weights": rng.uniform(0.5, 2.0, n), "lower": -0.5, "total": 0.3 * n},):
        K = setkit.compile(spec)
        y = rng.standard_normal(n)
        x = K.project(y)
        assert np.array_equal(K.jit_kernels().project(y), x)
        assert abs(float(np.sum(K.node.weights * x)) - K.node.total) <= 1e-9 * n


@pytest.mark.parametrize("mode", ["equal", "at_most"])
def test_budget_lmo_against_linprog_and_cvxpy(mode):
    """The budget LMO's optimal value against scipy.optimize.linprog (HiGHS) and the cvxpy reference
    on small sets with caps hit, ties and a fractional coordinate."""
    from scipy.optimize import linprog
    rng = np.random.default_rng(81)
    for trial in range(6):
        n = int(rng.integers(2, 9))
        w = rng.uniform(0.5, 2.0, n).round(2)
        hi = rng.uniform(0.3, 1.5, n).round(2)
        total = float(np.round(0.45 * w @ hi, 3))
        K = setkit.compile({"kind": "budget", "dim": n, "weights": w.tolist(), "upper": hi.tolist(), "total": total,
                            "mode": mode})
        R = reference(K)
        for c in (rng.standard_normal(n), np.round(rng.standard_normal(n)), -w * 1.5):
            x = K.lmo(c)
            kw = {"A_eq": w[None], "b_eq": [total]} if mode == "equal" else {"A_ub": w[None], "b_ub": [total]}
            lp = linprog(c, bounds=list(zip(np.zeros(n), hi)), method="highs", **kw)
            assert lp.status == 0
            sc = max(1.0, np.abs(c).sum())
            assert abs(c @ x - lp.fun) <= 1e-9 * sc
            assert abs(c @ x - c @ R.lmo(c)) <= 1e-6 * sc
            assert K.violation(x) <= 1e-12 * n
