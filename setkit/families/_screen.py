"""Membership by a violation screen, shared by the vector families.

contains(x) means dist(x, K) <= tol. If every defining inequality a.x <= b of K
with ||a||_2 <= L is violated by at most v(x), then dist(x, K) >= v(x) / L: a
point with v = 0 is in K and a point with v > L tol is not; only the points in
between need the (more expensive) distance.
"""
from __future__ import annotations

import numpy as np


def screened_contains(X, tol, violation, distance, lipschitz, screen=None):
    """dist(X_i, K) <= tol_i for each row, computing distances only for borderline rows.

    ``screen(X, tol, lipschitz)``, if given, returns the violation of each row exactly where it is
    at most stop_i = tol_i * lipschitz, and some value > stop_i elsewhere (it may stop early there).
    """
    v = violation(X) if screen is None else screen(X, tol, float(lipschitz))
    if v.shape[0] == 1:                  # one point: scalar logic, no temporary arrays
        v0, t0 = float(v[0]), float(tol[0])
        if v0 == 0.0 or v0 > t0 * lipschitz:
            return np.array([v0 == 0.0])
        return distance(X) <= tol
    near = v <= tol * lipschitz
    if not near.any():                   # every row clearly outside
        return near
    res = v == 0.0
    unsure = ~res & near
    if unsure.any():
        res[unsure] = distance(X[unsure]) <= tol[unsure]
    return res
