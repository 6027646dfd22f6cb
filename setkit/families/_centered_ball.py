"""Operators shared by the norm balls centred at the origin (group, ordered weighted l1, k-support,
elastic net): distance and membership through the projection, the refused KL geometry, the centroid.
"""
from __future__ import annotations

import numpy as np

from ..kernels.bregman import outside_orthant_error
from ..kernels.spectral import row_norms
from . import kernel


class CenteredBall:
    """Mixin of a family whose set is a ball {x : gauge(x) <= radius} of a norm, centred at 0.

    The family provides ``project``, ``violation``, ``radius`` and ``axis_reach()``: the
    largest t with t e_1 in the set (named in the orthant message as a point with a negative
    coordinate).
    """

    def axis_reach(self) -> float:
        raise NotImplementedError

    @kernel("distance")
    def distance(self, Y):
        """||y - project(y)||, one projection."""
        return row_norms(Y - self.project(Y))

    @kernel("contains")
    def contains(self, X, tol):
        """violation 0, or distance <= tol (a projection for the rows outside)."""
        v = self.violation(X)
        res = v == 0.0
        if not res.all():
            rest = ~res
            res[rest] = self.distance(X[rest]) <= tol[rest]
        return res

    @kernel("project_kl")
    def project_kl(self, T):
        """No KL projection: the set is not inside the nonnegative orthant (raises; radius 0: the origin)."""
        why = self.orthant_violation()
        if why:
            raise outside_orthant_error(self.label, why)
        return np.zeros_like(T)

    def orthant_violation(self):
        """Why the set is not inside the nonnegative orthant (None for radius 0: the set is {0})."""
        if self.radius == 0.0:
            return None
        return (f"the set is centred at the origin, so it holds points with a negative coordinate "
                f"(e.g. x = -{float(self.axis_reach()):.6g} e_1)")

    def exact_centroid(self, measure):
        """The origin for every measure (the set is symmetric under x -> -x)."""
        return np.zeros(self.shape)
