"""Large batches split over threads (setkit.parallel): the same answers and the same errors as one call.

The split layer is checked against the serial call of the same kernel (bit for bit), against a plain
NumPy formula where the kernel is one (clipping, row-wise scaling), and on its failure paths: a
non-finite entry in any chunk (checked by the threads, or by a kernel in its own pass), a kernel that
raises in one chunk, a kernel that ignores ``out=``, concurrent callers, and a forked child.
"""
import multiprocessing
import threading

import numpy as np
import pytest

import setkit
from setkit import parallel
from setkit.errors import InputError, NonFiniteRows

SPECS = [
    {"kind": "simplex", "dim": 100},
    {"kind": "simplex", "dim": 100, "total": 2.5, "mode": "at_most"},
    {"kind": "box", "dim": 100, "lower": -0.5, "upper": 0.7},
    {"kind": "box", "dim": 100, "lower": 0.0},
    {"kind": "ball", "dim": 100, "norm": 2, "radius": 1.5},
    {"kind": "ball", "dim": 100, "norm": 1, "radius": 2.0},
    {"kind": "ball", "dim": 100, "norm": "inf", "radius": 0.5},
    {"kind": "budget", "dim": 100, "total": 30.0, "upper": 1.0, "weights": list(np.linspace(0.5, 2.0, 100))},
    {"kind": "budget", "dim": 100, "total": 3.0, "upper": 2.0, "mode": "at_most"},
    {"kind": "permutahedron", "weights": list(np.linspace(0.0, 1.0, 100))},
]
IDS = [f"{s['kind']}-{s.get('norm', s.get('mode', ''))}" for s in SPECS]


def _batch(rng, rows=2500, n=100):
    Y = rng.normal(size=(rows, n)) * 3.0
    Y[::7] = np.round(Y[::7])                 # ties
    Y[1::11] *= 1e6
    Y[2::13] *= 1e-6
    return Y


@pytest.mark.parametrize("spec", SPECS, ids=IDS)
def test_split_answers_equal_one_serial_call_as_the_shares_move(spec, monkeypatch):
    """Repeated calls move the calling thread's share of the rows (setkit.parallel._Balance); every
    call still equals the serial one bit for bit (rows are independent in every native kernel)."""
    K = setkit.compile(spec)
    Y = _batch(np.random.default_rng(3))
    C = _batch(np.random.default_rng(4))
    if spec.get("lower") == 0.0 and "upper" not in spec:
        C = np.abs(C) + 0.5                   # the unbounded box has an LMO only for c > 0
    monkeypatch.setenv("SETKIT_THREADS", "1")
    want = {"project": K.project(Y), "lmo": K.lmo(C), "distance": K.distance(Y), "support": K.support(-C)}
    for threads in ("2", "3"):
        monkeypatch.setenv("SETKIT_THREADS", threads)
        for _ in range(6):
            got = {"project": K.project(Y), "lmo": K.lmo(C), "distance": K.distance(Y), "support": K.support(-C)}
            for op in want:
                np.testing.assert_array_equal(got[op], want[op], err_msg=f"{op} with {threads} threads")


def test_split_box_and_ball_against_numpy_formulas(monkeypatch):
    """Outside check: clipping is numpy.clip; the l2-ball projection is y * min(1, r / ||y||) (common practice)."""
    monkeypatch.setenv("SETKIT_THREADS", "2")
    Y = np.random.default_rng(5).normal(size=(4000, 100))
    B = setkit.compile({"kind": "box", "dim": 100, "lower": -0.5, "upper": 0.7})
    np.testing.assert_array_equal(B.project(Y), np.clip(Y, -0.5, 0.7))
    L = setkit.compile({"kind": "ball", "dim": 100, "norm": 2, "radius": 1.5})
    nrm = np.linalg.norm(Y, axis=1, keepdims=True)
    np.testing.assert_allclose(L.project(Y), Y * np.minimum(1.0, 1.5 / nrm), rtol=1e-15, atol=0)


@pytest.mark.parametrize("spec", [SPECS[0], SPECS[2], SPECS[4], SPECS[6], SPECS[7], SPECS[9]],
                         ids=[IDS[0], IDS[2], IDS[4], IDS[6], IDS[7], IDS[9]])
@pytest.mark.parametrize("threads", ["1", "2", "3"])
def test_non_finite_entry_in_any_chunk_is_named(spec, threads, monkeypatch):
    """The threads check their own rows (box and l2 ball in the kernel's own pass); a NaN or inf
    anywhere (first entry, a chunk's edge, the last entry) still raises setkit's InputError naming
    its index, as the serial validation does."""
    monkeypatch.setenv("SETKIT_THREADS", threads)
    K = setkit.compile(spec)
    Y = np.random.default_rng(6).normal(size=(2500, 100))
    for (i, j), bad in [((0, 0), np.nan), ((1250, 0), np.inf), ((1249, 99), -np.inf), ((833, 50), np.nan),
                        ((2499, 99), np.inf)]:
        Z = Y.copy()
        Z[i, j] = bad
        for op in ("project", "lmo", "distance"):
            with pytest.raises(InputError, match=rf"finite; got {bad} at index \({i}, {j}\)") as e:
                getattr(K, op)(Z)
            assert not isinstance(e.value, NonFiniteRows), "the internal signal escaped"


def test_split_rows_with_a_kernel_that_ignores_out_or_raises(monkeypatch):
    """Direct checks of the split layer with NumPy kernels: a kernel declared ``into`` that answers
    elsewhere is copied in; one that raises in one chunk makes the whole batch run once, so the
    error is the serial call's; the finiteness check of ``check_finite`` runs in every chunk."""
    monkeypatch.setenv("SETKIT_THREADS", "2")
    X = np.random.default_rng(8).normal(size=(3000, 100))

    def fresh(Y, out=None):              # ignores out
        return 2.0 * Y
    f = parallel.split_rows(fresh, "project", into=True)
    for _ in range(3):
        np.testing.assert_array_equal(f(X), 2.0 * X)

    calls = []

    def picky(Y, out=None):
        calls.append(Y.shape[0])
        if (Y[:, 0] == 12345.0).any():
            raise ValueError(f"rows {Y.shape[0]}")
        if out is None:
            return Y.copy()
        np.copyto(out, Y)
        return out
    g = parallel.split_rows(picky, "lmo", into=True)
    np.testing.assert_array_equal(g(X), X)
    Xr = X.copy()
    Xr[2000, 0] = 12345.0
    with pytest.raises(ValueError, match=f"rows {X.shape[0]}"):   # the serial re-run's error
        g(Xr)
    assert calls[-1] == X.shape[0] and len(calls) >= 3

    h = parallel.split_rows(lambda Y: Y.sum(axis=1), "distance")
    np.testing.assert_array_equal(h(X, check_finite=True), X.sum(axis=1))
    Xn = X.copy()
    Xn[2999, 99] = np.nan
    with pytest.raises(NonFiniteRows):
        h(Xn, check_finite=True)


def test_concurrent_callers_share_the_crew(monkeypatch):
    """Several Python threads calling split batches at once: one holds the crew, the others run in
    their own thread; every answer equals the serial one."""
    monkeypatch.setenv("SETKIT_THREADS", "2")
    K = setkit.compile(SPECS[9])
    rng = np.random.default_rng(9)
    Ys = [rng.normal(size=(2500, 100)) for _ in range(4)]
    want = [K.project(Y) for Y in Ys]
    got = [None] * 4
    errors = []

    def worker(t):
        try:
            for _ in range(5):
                got[t] = K.project(Ys[t])
        except Exception as e:   # noqa: BLE001 - reported below
            errors.append(e)
    ts = [threading.Thread(target=worker, args=(t,)) for t in range(4)]
    for t in ts:
        t.start()
    for t in ts:
        t.join(120)
    assert not errors
    for a, b in zip(got, want):
        np.testing.assert_array_equal(a, b)


def test_balance_shares_stay_in_bounds():
    """The calling thread's share moves toward the measured lag and stays in [1/k, 1/k + 0.25]; the
    cuts cover every row once, each chunk at least one row."""
    bal = parallel._Balance()
    assert bal.cuts(10, 2) == [0, 5, 10]
    for _ in range(50):                    # workers always late: the share rises to its cap
        bal.update(1000, 2, 500, 0.0, 1e-3, 2e-3)
    assert bal.share == pytest.approx(0.75)
    for _ in range(200):                   # workers always far early: back to equal shares
        bal.update(1000, 2, 500, 0.0, 1e-3, 1e-4)
    assert bal.share == pytest.approx(0.5)
    bal.share = 0.75
    for b, k in [(4, 2), (5, 3), (7, 4), (1000, 3)]:
        c = bal.cuts(b, k)
        assert c[0] == 0 and c[-1] == b and len(c) == k + 1
        assert all(c[i + 1] - c[i] >= 1 for i in range(k))


def _child(q):
    import os
    os.environ["SETKIT_THREADS"] = "2"
    K = setkit.compile(SPECS[2])
    Y = np.random.default_rng(10).normal(size=(2500, 100))
    q.put(bool(np.array_equal(K.project(Y), np.clip(Y, -0.5, 0.7))))


def test_a_forked_child_gets_its_own_crew(monkeypatch):
    """After the parent has used its crew, a forked child (which has none of its threads) splits
    its own batches correctly instead of waiting on the parent's threads."""
    if "fork" not in multiprocessing.get_all_start_methods():
        pytest.skip("no fork on this platform")
    monkeypatch.setenv("SETKIT_THREADS", "2")
    K = setkit.compile(SPECS[2])
    K.project(np.random.default_rng(11).normal(size=(2500, 100)))    # the parent's crew exists
    ctx = multiprocessing.get_context("fork")
    q = ctx.Queue()
    p = ctx.Process(target=_child, args=(q,))
    p.start()
    p.join(120)
    if p.is_alive():
        p.kill()
        pytest.fail("the forked child hung")
    assert p.exitcode == 0 and q.get(timeout=5) is True


@pytest.mark.parametrize("threads", ["1", "2"])
def test_one_long_point_with_a_non_finite_entry_is_named(threads, monkeypatch):
    """A single point of 2^19 + 1 coordinates is checked over the threads (kernels.checks.all_finite);
    a NaN or inf at its first, middle or last coordinate is still the located InputError."""
    monkeypatch.setenv("SETKIT_THREADS", threads)
    n = (1 << 19) + 1
    K = setkit.compile({"kind": "simplex", "dim": n})
    y = np.random.default_rng(12).normal(size=n)
    np.testing.assert_allclose(K.project(y).sum(), 1.0, rtol=1e-12)
    for j, bad in ((0, np.nan), (n // 2, np.inf), (n - 1, -np.inf)):
        z = y.copy()
        z[j] = bad
        with pytest.raises(InputError, match=rf"finite; got {bad} at index \({j},\)"):
            K.project(z)
