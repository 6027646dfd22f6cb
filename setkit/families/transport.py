"""Transportation polytopes {X >= 0 : X 1 = rows, X^T 1 = cols}, points are m x n matrices."""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..description import MAX_SIZE
from ..errors import EmptySetError
from ..kernels.bregman import sinkhorn_kl, transport_kl_jvp
from . import kernel, memo, register
from ._network import Network, NetworkFamily


def bipartite_network(rows: np.ndarray, cols: np.ndarray) -> Network:
    """Edge i*n + j goes from row node i to column node m + j (C order of the m x n matrix)."""
    m, n = rows.size, cols.size
    tail = np.repeat(np.arange(m), n)
    head = m + np.tile(np.arange(n), m)
    return Network(tail, head, np.zeros(m * n), np.full(m * n, np.inf), np.concatenate([rows, -cols]))


def read_margins(r):
    """Read and check rows and cols; returns them with cols rescaled to the exact row total."""
    rows = r.array("rows", ndim=1)
    cols = r.array("cols", ndim=1)
    for key, v in (("rows", rows), ("cols", cols)):
        if v.size == 0:
            r.fail(key, f"{key} must list at least one sum; got an empty list.")
        neg = np.flatnonzero(v < 0)
        if neg.size:
            r.fail(key, f"{key} must be nonnegative (amounts shipped); entry {int(neg[0])} is {v[neg[0]]:g}.")
    if rows.size * cols.size > MAX_SIZE:
        r.fail("cols", f"a plan of {rows.size:,} x {cols.size:,} entries exceeds {MAX_SIZE:,} coordinates (the size "
                       f"limit of setkit).")
    tr, tc = float(rows.sum()), float(cols.sum())
    if abs(tr - tc) > 1e-9 * max(1.0, tr, tc):
        r.fail("cols", f"the row sums total {tr:.10g} but the column sums total {tc:.10g}; a transportation "
                       f"plan needs equal totals, so the set is empty.", EmptySetError)
    if tc > 0 and tc != tr:
        cols = cols * (tr / tc)   # remove the rounding-level mismatch so the balances are exactly consistent
    return rows, cols


@register("transport")
@dataclass(frozen=True, eq=False, kw_only=True)
class Transport(NetworkFamily):
    """K = {X in R^{m x n} : X >= 0, sum_j X_ij = rows_i, sum_i X_ij = cols_j}.

    >>> import setkit
    >>> K = setkit.compile({"kind": "transport", "rows": [1, 2], "cols": [2, 1]})
    >>> K.lmo([[0.0, 1.0], [1.0, 5.0]]).tolist()
    [[0.0, 1.0], [2.0, 0.0]]
    """

    rows: np.ndarray
    cols: np.ndarray
    traits = frozenset({"polyhedral", "bounded", "iterative_projection"})
    # KL projection: Sinkhorn scaling stops at a largest marginal residual of kl_accuracy * scale
    kl_accuracy = 1e-10
    kl_max_iterations = 20_000

    @classmethod
    def from_spec(cls, r):
        rows, cols = read_margins(r)
        return cls(rows=rows, cols=cols, name=r.name)

    @classmethod
    def examples(cls):
        """Small instances for the conformance checks (tests/test_conformance.py)."""
        return [{"kind": "transport", "rows": [1, 2, 4], "cols": [2, 1, 3, 1]},
                {"kind": "transport", "rows": [0, 3, 1], "cols": [0, 4]}]

    @classmethod
    def benchmark_example(cls, n, rng):
        """Random equal-total margins of an m x m plan, m = round(sqrt(n)) (benchmarks/run.py)."""
        m = max(2, int(round(np.sqrt(n))))
        rows = rng.uniform(1.0, 3.0, m)
        cols = rng.uniform(1.0, 3.0, m)
        cols *= rows.sum() / cols.sum()
        return {"kind": "transport", "about": "transport m x m, n = m^2 coordinates", "rows": rows, "cols": cols}

    @classmethod
    def random_example(cls, rng):
        """Random margins of a 2..4 x 2..4 plan with equal totals."""
        m, n = (int(v) for v in rng.integers(2, 5, 2))
        rows = rng.uniform(0, 3, m).round(3)
        cols = rng.dirichlet(np.ones(n)) * rows.sum()
        cols[-1] = rows.sum() - cols[:-1].sum()
        return {"kind": "transport", "rows": rows.tolist(), "cols": cols.tolist()}

    @property
    def shape(self):
        return (int(self.rows.size), int(self.cols.size))

    def network(self):
        return memo(self, "network", lambda: bipartite_network(self.rows, self.cols))

    def scale(self):
        return float(max(1.0, self.rows.max(initial=0.0), self.cols.max(initial=0.0)))

    def cvxpy_constraints(self, x):
        import cvxpy as cp
        return [x >= 0, cp.sum(x, axis=1) == self.rows, cp.sum(x, axis=0) == self.cols]

    def orthant_violation(self):
        """None: transportation plans are nonnegative."""
        return None

    @kernel("project_kl")
    def project_kl(self, T):
        """Sinkhorn-Knopp scaling with log-domain absorption, to marginal residual 1e-10 x scale, O(mn) per iteration."""
        return sinkhorn_kl(T, self.rows, self.cols, self.kl_accuracy, self.kl_max_iterations, self.label)

    @kernel("project_kl_jvp")
    def project_kl_jvp(self, T, V):
        """Implicit differentiation of the Sinkhorn fixed point: one Schur-complement solve on the smaller side, O(mn min(m, n) + min(m, n)^3).

        X = exp(t + f 1^T + 1 g^T); the marginal equations give the potentials' derivatives
        from a weighted-Laplacian system (null space: the constant shift of f against g).
        The Jacobian is symmetric; its accuracy is that of the projection (marginal residual).
        """
        X = sinkhorn_kl(T, self.rows, self.cols, self.kl_accuracy, self.kl_max_iterations, self.label)
        if isinstance(X, tuple):
            X = X[0]
        return transport_kl_jvp(X, V, self.shape)
