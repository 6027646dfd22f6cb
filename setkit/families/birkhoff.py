"""The Birkhoff polytope: doubly-stochastic n x n matrices."""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from . import kernel, register
from .transport import Transport

MAX_SIDE = 10_000        # n^2 coordinates (edges of the bipartite network) within description.MAX_SIZE


@register("birkhoff")
@dataclass(frozen=True, eq=False, kw_only=True)
class Birkhoff(Transport):
    """K = {X in R^{n x n} : X >= 0, X 1 = 1, X^T 1 = 1}, the convex hull of the n! permutation matrices.

    >>> import setkit
    >>> setkit.compile({"kind": "birkhoff", "n": 3}).lmo([[0, 1, 1], [1, 1, 0], [1, 0, 1.0]]).tolist()
    [[1.0, 0.0, 0.0], [0.0, 0.0, 1.0], [0.0, 1.0, 0.0]]
    """

    traits = frozenset({"polyhedral", "bounded", "permutation_invariant", "iterative_projection"})

    @classmethod
    def from_spec(cls, r):
        n = r.integer("n", min=1, max=MAX_SIDE)
        return cls(rows=np.ones(n), cols=np.ones(n), name=r.name)

    @classmethod
    def examples(cls):
        """Small instances for the conformance checks (tests/test_conformance.py)."""
        return [{"kind": "birkhoff", "n": 2}, {"kind": "birkhoff", "n": 4}]

    @classmethod
    def benchmark_example(cls, n, rng):
        """The m x m Birkhoff polytope, m = round(sqrt(n)) (benchmarks/run.py)."""
        return {"kind": "birkhoff", "about": "birkhoff m x m, n = m^2 coordinates", "n": max(2, int(round(np.sqrt(n))))}

    @classmethod
    def random_example(cls, rng):
        return {"kind": "birkhoff", "n": int(rng.integers(2, 5))}

    @property
    def n(self) -> int:
        return int(self.rows.size)

    def scale(self):
        return 1.0

    @kernel("lmo")
    def lmo(self, C):
        """The assignment problem by scipy.optimize.linear_sum_assignment; answers are permutation matrices, O(n^3)."""
        from scipy.optimize import linear_sum_assignment
        n = self.n
        X = np.zeros_like(C)
        for i, c in enumerate(C):
            rr, cc = linear_sum_assignment(c.reshape(n, n))
            X[i, rr * n + cc] = 1.0
        return X

    @kernel("support")
    def support(self, C):
        """max over permutations of sum_i c[i, pi(i)] by linear_sum_assignment(maximize=True), O(n^3)."""
        from scipy.optimize import linear_sum_assignment
        n = self.n
        out = np.empty(C.shape[0])
        for i, c in enumerate(C):
            M = c.reshape(n, n)
            rr, cc = linear_sum_assignment(M, maximize=True)
            out[i] = M[rr, cc].sum()
        return out

    # -- exact knowledge for setkit.measures ------------------------------------------------------
    def exact_centroid(self, measure):
        """J/n for every measure: each is invariant under permuting rows and columns, and J/n is the
        only doubly-stochastic matrix fixed by all those permutations."""
        n = self.n
        return np.full((n, n), 1.0 / n)

    def exact_sample(self, k, measure, rng):
        """vertices and directions: uniformly random permutation matrices (the assignment minimizing
        <g, X> for a Gaussian g is uniform, since permuting the rows of g permutes the answer);
        volume: None (hit-and-run)."""
        if measure == "volume":
            return None
        n = self.n
        perms = rng.permuted(np.broadcast_to(np.arange(n), (k, n)), axis=1)
        X = np.zeros((k, n, n))
        X[np.arange(k)[:, None], np.arange(n)[None, :], perms] = 1.0
        return X.reshape(k, n * n)
