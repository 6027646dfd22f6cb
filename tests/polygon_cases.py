"""Hand-checkable polygons shared by the measure tests (no setkit code here)."""
from __future__ import annotations

import itertools

import numpy as np
from scipy.spatial import ConvexHull


def shoelace_centroid(V):
    """Centroid of a simple polygon with vertices V in order: the shoelace-type formula
    (Bourke, Calculating the area and centroid of a polygon, 1988; from memory)."""
    x, y = V[:, 0], V[:, 1]
    x1, y1 = np.roll(x, -1), np.roll(y, -1)
    cr = x * y1 - x1 * y
    area = cr.sum() / 2
    return np.array([((x + x1) * cr).sum(), ((y + y1) * cr).sum()]) / (6 * area)


def transport_2x3_polygon(r_, c_):
    """Vertices, in hull order, of the 2 x 3 transport polytope in its free coordinates (x11, x12).

    Brute-force vertex enumeration of its 6 inequalities x >= 0 written as G u <= h.
    """
    Gu = np.array([[-1, 0], [0, -1], [1, 1], [1, 0], [0, 1], [-1, -1]], float)
    hu = np.array([0, 0, r_[0], c_[0], c_[1], c_[2] - r_[0]])
    pts = []
    for i, j in itertools.combinations(range(6), 2):
        M = Gu[[i, j]]
        if abs(np.linalg.det(M)) > 1e-12:
            u = np.linalg.solve(M, hu[[i, j]])
            if np.all(Gu @ u <= hu + 1e-9):
                pts.append(u)
    V = np.unique(np.round(np.array(pts), 12), axis=0)
    return V[ConvexHull(V).vertices]
