"""Far points for the generic QP backends: coordinates far beyond their bounds are pulled in first.

For K = {x : A_eq z = b_eq, A_ub z <= b_ub, lo <= z <= hi} (z = (x, aux)) the projection of y
satisfies x = clip(y - A^T lam, lo, hi) for the multipliers lam of the rows. If y_j < lo_j - L and
the answer x' for the point y' with y'_j = lo_j - L has x'_j = lo_j, then (x', lam') also meets
the KKT conditions at y (the bound's multiplier lo_j - y_j + (A^T lam')_j only grows as y_j moves
further down), so x' is the projection of y; likewise above hi_j. Solvers then see a point at the
data's scale times about 1e6 instead of one whose entries span hundreds of orders of magnitude
(an active-set QP was measured cycling 2.2 million iterations on such a point; ADMM and
interior-point methods return answers that are feasible but far from the projection).

The check is made on every answer: a pulled-in coordinate that left its bound (beyond 1e-9 of the
data's scale) sends its row back with L multiplied by 2^20, and past max|y| the row is solved as
given.
"""
from __future__ import annotations

import numpy as np

from ..errors import SolveError

PULL = 1e6          # L = the smallest power of two >= PULL x max(1, the data's scale)


def project_pulled_in(solve_rows, form, Y, scale):
    """``solve_rows(Y) -> (X, info)`` on the rows of Y with far coordinates pulled in (checked)."""
    nx = form.n_x
    lo, hi = np.asarray(form.lo[:nx], float), np.asarray(form.hi[:nx], float)
    data = max(1.0, float(scale), float(np.abs(lo[np.isfinite(lo)]).max(initial=0.0)),
               float(np.abs(hi[np.isfinite(hi)]).max(initial=0.0)))
    L0 = float(np.ldexp(1.0, int(np.ceil(np.log2(PULL * data)))))
    mags = np.abs(Y).max(axis=1, initial=0.0)
    far = np.flatnonzero(mags > 2.0 * L0)
    if far.size == 0 or not (np.isfinite(lo).any() or np.isfinite(hi).any()):
        return solve_rows(Y)
    Y = np.asarray(Y, float)
    L = np.full(Y.shape[0], L0)
    Yc = Y.copy()
    with np.errstate(invalid="ignore"):
        Yc[far] = np.clip(Y[far], lo - L0, hi + L0)
    try:
        X, info = solve_rows(Yc)
    except SolveError:
        return solve_rows(Y)
    X = np.array(X, float)
    tol = 1e-9 * data
    for i in far:
        while True:
            below = Y[i] < Yc[i]
            above = Y[i] > Yc[i]
            if np.all(X[i, below] <= lo[below] + tol) and np.all(X[i, above] >= hi[above] - tol):
                break
            L[i] *= 2.0 ** 20
            if L[i] >= mags[i]:
                Yc[i] = Y[i]
            else:
                with np.errstate(invalid="ignore"):
                    Yc[i] = np.clip(Y[i], lo - L[i], hi + L[i])
            Xi, info_i = solve_rows(Yc[i:i + 1])
            X[i] = Xi[0]
            for key, vals in info_i.items():
                if isinstance(info.get(key), list) and isinstance(vals, list) and len(vals) == 1:
                    info[key][i] = vals[0]
            if L[i] >= mags[i]:
                break
    return X, info
