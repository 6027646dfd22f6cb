"""The permutahedron of a weight vector: the convex hull of all its permutations.

Outputs are numerical answers within the stated tolerances; where a ranking affects
people it is to be reviewed by a responsible person and checked against local rules.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..kernels.bregman import outside_orthant_error, permutahedron_kl, permutahedron_kl_jvp
from ..kernels.face import permutahedron_face
from ..kernels.isotonic import permutahedron_lmo, project_permutahedron
from ..kernels.vector_ops import rows_dot
from . import Family, kernel, register


@register("permutahedron")
@dataclass(frozen=True, eq=False, kw_only=True)
class Permutahedron(Family):
    """K = P(w) = conv{(w_pi(1), ..., w_pi(n)) : pi a permutation}; ties in w allowed.

    Equivalently (majorization): sum x = sum w and, for every k, the sum of the
    k largest entries of x is at most the sum of the k largest entries of w.
    Projection: one sort and pool-adjacent-violators, O(n log n). LMO: the
    largest weight goes where c is smallest (rearrangement inequality),
    O(n log n). Membership by sorted partial sums, O(n log n).

    >>> import setkit
    >>> K = setkit.compile({"kind": "permutahedron", "weights": [3, 2, 1]})
    >>> K.lmo([0.5, -1.0, 2.0]).tolist()
    [2.0, 3.0, 1.0]
    >>> K.project([10.0, 0.0, 0.0]).round(6).tolist()
    [3.0, 1.5, 1.5]
    """

    weights: np.ndarray
    traits = frozenset({"polyhedral", "bounded", "permutation_invariant"})

    @classmethod
    def from_spec(cls, r):
        w = r.array("weights", ndim=1)
        if w.size == 0:
            r.fail("weights", "weights must list at least one number; got an empty list.")
        if r.has("dim"):
            n = r.integer("dim", min=1)
            if n != w.size:
                r.fail("dim", f"dim must equal the number of weights, {w.size}; got {n}.")
        return cls(weights=np.asarray(w, float), name=r.name)

    @classmethod
    def examples(cls):
        """Small instances for the conformance checks (tests/test_conformance.py)."""
        return [{"kind": "permutahedron", "weights": [3.0, 1.0, 0.5, 0.0]},
                {"kind": "permutahedron", "weights": [1.0, 1.0, 0.25, 0.25, 0.1]}]

    @classmethod
    def random_example(cls, rng):
        """2..6 random decreasing weights in [0, 2]."""
        return {"kind": "permutahedron",
                "weights": np.sort(rng.uniform(0, 2, int(rng.integers(2, 7))).round(3))[::-1].tolist()}

    @classmethod
    def benchmark_example(cls, n, rng):
        """n random weights in [0, 10] (benchmarks/run.py)."""
        return {"kind": "permutahedron", "about": "permutahedron of n weights",
                "weights": np.round(rng.uniform(0.0, 10.0, n), 3)}

    # -- description -----------------------------------------------------------------------
    @property
    def shape(self):
        return (self.weights.size,)

    def scale(self):
        return float(max(1.0, np.abs(self.weights).max()))

    def __post_init__(self):
        # sorted once: every projection, LMO and membership test uses the weights in decreasing order
        object.__setattr__(self, "_wd", np.ascontiguousarray(np.sort(self.weights)[::-1]))
        object.__setattr__(self, "_wa", np.sort(self.weights))
        object.__setattr__(self, "_ps", np.cumsum(self._wd))
        with np.errstate(divide="ignore", invalid="ignore"):    # the KL projection's block values use log w
            object.__setattr__(self, "_log_wd", np.log(self._wd))

    @property
    def _wdesc(self):
        return self._wd

    def cvxpy_constraints(self, x):
        import cvxpy as cp
        wd = self._wdesc
        ps = np.cumsum(wd)
        n = wd.size
        cons = [cp.sum(x) == ps[-1]]
        for k in range(1, n):
            cons.append(cp.sum_largest(x, k) <= ps[k - 1])
        return cons

    # linear_form: none. The majorization inequalities are 2^n - 2 facets; the compact
    # extended formulations (Birkhoff, O(n^2) variables; sorting networks) are not worth
    # it next to the native kernels, so generic LP/QP backends do not serve this family alone.

    def extended_form(self):
        """The Birkhoff extended formulation {x = W w, W doubly stochastic}, n^2 auxiliaries.

        Built only on request (by combinators that need one LP for an intersection).
        """
        from ..combinators.extended import permutahedron_form
        return permutahedron_form(self.weights)

    # -- native kernels ----------------------------------------------------------------------
    def bound_kernels(self):
        """project and lmo with this set's data bound, as numba functions of one point (K.jit_kernels())."""
        from ..kernels.bound import permutahedron_kernels
        return permutahedron_kernels(self._wdesc)

    def point_kernels(self, check=True):
        """Compiled single-point project / lmo (setkit.kernels.point), bit-identical to the batch kernels.

        Not for 50,000 coordinates and more (the projection sorts those another way)."""
        from ..kernels import point
        from ..kernels.isotonic import order_bits
        n = self.dim
        if n >= 50_000:
            return {}
        if n > point.SORT_IN_NUMPY:
            wd = np.ascontiguousarray(self._wdesc, dtype=float)
            f = point.permutahedron_point_sorted
            return {"project": (f, (wd, order_bits(n), check, True)), "lmo": (f, (wd, order_bits(n), check, False))}
        D = point.pack([self._wdesc], [float(check)])
        return {"project": (point.permutahedron_project_point, (D,)), "lmo": (point.permutahedron_lmo_point, (D,))}

    @kernel("project", into=True)
    def project(self, Y, out=None):
        """Sort, then pool-adjacent-violators on y_sorted - w_sorted, O(n log n)."""
        return project_permutahedron(Y, self._wdesc, out)

    @kernel("project_jvp")
    def project_jvp(self, Y, V):
        """v minus its mean over each isotonic block of the projection (the blocks of pool-adjacent-violators), O(n log n).

        x_sigma = y_sigma - iso(y_sigma - w) with iso the isotonic fit, constant on blocks; so
        dx = dy - (block mean of dy). A block is a face of the majorization constraints; at a
        kink (two adjacent block means equal, so pooling is optional) blocks are pooled only
        when strictly violating, i.e. the finer partition: the adjacent constraint is treated as
        active (the smallest face). Ties in y take the stable sort order.
        """
        return permutahedron_face(Y, self._wdesc, V, mode=0)

    @kernel("lmo", into=True)
    def lmo(self, C, out=None):
        """Rearrangement: the k-th largest weight at the k-th smallest c (ties by index), O(n log n)."""
        return permutahedron_lmo(C, self._wdesc, out)

    @kernel("support")
    def support(self, C):
        """Sorted c against sorted w (both increasing), O(n log n)."""
        return rows_dot(np.sort(C, axis=1), self._wa)

    def orthant_violation(self):
        """None when every weight is >= 0 (the vertices are then nonnegative), else the smallest weight."""
        if self._wa[0] < 0.0:
            return f"the smallest weight is {self._wa[0]:.6g} < 0 (every weight must be >= 0)"
        return None

    @kernel("project_kl")
    def project_kl(self, T):
        """Sort, then pool-adjacent-violators on the KL dual (block value logsumexp(t_B) - log sum w_B), exact, O(n log n)."""
        why = self.orthant_violation()
        if why:
            raise outside_orthant_error(self.label, why)
        return permutahedron_kl(T, self._wdesc, self._log_wd)

    @kernel("project_kl_jvp")
    def project_kl_jvp(self, T, V):
        """Block-wise softmax Jacobian on the KL pooling blocks: x_B (v_B - <x_B, v_B> / sum_B w), O(n log n).

        Inside a block B of the pooling x_B = (sum_B w) softmax(t_B), so the Jacobian in log
        coordinates is diag(x_B) - x_B x_B^T / sum_B w per block (symmetric). At a kink (adjacent
        blocks of equal value) the finer partition is used (the smallest face).
        """
        why = self.orthant_violation()
        if why:
            raise outside_orthant_error(self.label, why)
        return permutahedron_kl_jvp(T, self._wdesc, V, None, self._log_wd)

    def _majorization_gap(self, X):
        ps_w = self._ps
        ps_x = np.cumsum(-np.sort(-X, axis=1), axis=1)
        over = (ps_x[:, :-1] - ps_w[:-1]).max(axis=1, initial=0.0)
        return np.maximum(over.clip(min=0.0), np.abs(ps_x[:, -1] - ps_w[-1]))

    @kernel("violation")
    def violation(self, X):
        """Largest violated majorization inequality (sorted partial sums), O(n log n)."""
        return self._majorization_gap(X)

    @kernel("contains")
    def contains(self, X, tol):
        """Majorization screen (sorted partial sums), projection only for borderline points, O(n log n)."""
        v = self._majorization_gap(X)
        n = X.shape[1]
        inside = v == 0.0
        # a violated facet a.x <= b with ||a|| <= sqrt(n) puts x at distance >= v / sqrt(n)
        outside = v > tol * np.sqrt(n)
        res = inside.copy()
        unsure = ~(inside | outside)
        if unsure.any():
            Xu = X[unsure]
            res[unsure] = np.linalg.norm(Xu - self.project(Xu), axis=1) <= tol[unsure]
        return res

    # -- exact knowledge for setkit.measures ------------------------------------------------------
    def exact_centroid(self, measure):
        """mean(w) * 1 for every measure: each measure is invariant under permuting coordinates, and
        the only permutation-invariant point of the set is its center."""
        return np.full(self.weights.size, float(self.weights.mean()))

    def exact_sample(self, k, measure, rng):
        """vertices and directions: the weights in a uniformly random order (lmo(g) puts the weights in
        the order of g, and the order of a Gaussian vector is uniform); volume: None (hit-and-run)."""
        if measure == "volume":
            return None
        return rng.permuted(np.broadcast_to(self.weights, (k, self.weights.size)), axis=1)
