"""Compile-time flow feasibility by a scaled integer max flow, against an LP; the LMO at large data."""
import numpy as np
import pytest
from scipy.optimize import linprog

import setkit
from benchmarks.bench_flow import make_instance
from setkit.families._network import Network, feasibility_by_max_flow


def _lp_feasible(g):
    # reference: scipy.optimize.linprog (HiGHS) on {B x = s, lo <= x <= hi} with a zero objective
    res = linprog(np.zeros(g.n_edges), A_eq=g.incidence(), b_eq=g.supply, bounds=np.column_stack([g.lo, g.hi]),
                  method="highs")
    assert res.status in (0, 2)
    return res.status == 0


@pytest.mark.parametrize("integral", [True, False])
def test_max_flow_verdict_matches_the_lp_on_random_networks(integral):
    rng = np.random.default_rng(17 + integral)
    seen = {True: 0, False: 0}
    for _ in range(150):
        n, m = int(rng.integers(2, 8)), int(rng.integers(1, 14))
        t, h = rng.integers(0, n, m), rng.integers(0, n, m)
        lo = np.where(rng.random(m) < 0.25, -np.inf, np.where(rng.random(m) < 0.5, 0.0, rng.uniform(-2, 2, m)))
        hi = np.where(rng.random(m) < 0.25, np.inf, np.where(np.isfinite(lo), lo, 0.0) + rng.uniform(0, 3, m))
        s = rng.uniform(-3, 3, n)
        if integral:
            lo = np.where(np.isfinite(lo), np.floor(lo), lo)
            hi = np.where(np.isfinite(hi), np.ceil(hi), hi)
            s = np.round(s)
            s[-1] -= s.sum()
        else:
            s -= s.mean()
        g = Network(t, h, lo, hi, s)
        verdict, blocking = feasibility_by_max_flow(g)
        ref = _lp_feasible(g)
        if verdict is not None:
            assert verdict == ref
            seen[ref] += 1
        if verdict is False and blocking is not None:
            # the blocking set really cannot ship its supply (Hoffman's condition, by hand)
            inS = np.zeros(n, bool)
            inS[blocking] = True
            out_e, in_e = inS[t] & ~inS[h], ~inS[t] & inS[h]
            assert s[inS].sum() > hi[out_e].sum() - lo[in_e].sum() - 1e-9
    assert seen[True] >= 20 and seen[False] >= 20


def test_flow_lmo_with_data_near_1e6():
    # issue 11: the LMO said "no flow meets the supplies" on feasible 9-node flows with data near 1e6
    rng = np.random.default_rng(3)
    for _ in range(6):
        spec, _, x0 = make_instance(9, 20, rng)
        f = 10.0 ** rng.uniform(5.5, 6.5)
        for e in spec["edges"]:
            e["capacity"] *= f
            e["lower"] *= f
        spec["supply"] = {k: v * f for k, v in spec["supply"].items()}
        K = setkit.compile(spec)
        lf = K.linear_form()
        for c in rng.standard_normal((4, 20)) * 10.0 ** rng.uniform(-3, 6):
            x = K.lmo(c)
            ref = linprog(c, A_eq=lf.A_eq, b_eq=lf.b_eq, bounds=np.column_stack([lf.lo, lf.hi]), method="highs")
            assert ref.status == 0
            assert float(c @ x) <= ref.fun + 1e-7 * np.abs(c).max() * f * 20
            assert K.contains(x)
