"""The spectraplex {X symmetric PSD n x n, trace X = t} (mode equal) or trace X <= t (mode at_most).

With t = 1 and mode equal these are the density matrices of online PCA and
matrix experts; its extreme points are t v v^T for unit vectors v.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..kernels.spectral import (DENSE_MAX_SIDE, eigen_map_jvp, eigh_stack, extreme_eigenpair, pow2_scales, row_norms,
                                simplex_sorted, support_block_jvp)
from . import Family, kernel, register


@register("spectraplex")
@dataclass(frozen=True, eq=False, kw_only=True)
class Spectraplex(Family):
    """K = {X in R^{n x n} : X = X^T, X PSD, trace X = t} (equal) or trace X <= t (at_most).

    Projection: the set lies in the symmetric subspace, so the projection first
    takes sym(Y) = (Y + Y^T)/2 (the skew part is orthogonal to every point), then
    one eigendecomposition sym(Y) = V diag(l) V^T and the simplex projection of
    l (total t; at_most: onto {l >= 0, sum l <= t}); O(n^3). LMO: t v v^T for
    a unit eigenvector of the smallest eigenvalue of sym(C) (at_most: the zero
    matrix when that eigenvalue is >= 0); dense eigh up to n = 120, Lanczos above
    (measured residual, value within 1e-9 of the spectral scale; setkit.kernels.spectral). Support: t lambda_max(sym C) (at_most: its
    positive part).

    >>> import setkit
    >>> K = setkit.compile({"kind": "spectraplex", "n": 2})
    >>> K.project([[2.0, 0.0], [0.0, 0.0]]).round(12).tolist()
    [[1.0, 0.0], [0.0, 0.0]]
    >>> round(float(K.support([[0.0, 1.0], [1.0, 0.0]])), 12)
    1.0
    """

    n: int
    trace: float = 1.0
    mode: str = "equal"
    traits = frozenset({"bounded"})

    @classmethod
    def from_spec(cls, r):
        n = r.integer("n", min=1)
        t = r.number("trace", 1.0, min=0.0)
        mode = r.choice("mode", ("equal", "at_most"), "equal")
        return cls(n=n, trace=t, mode=mode, name=r.name)

    @classmethod
    def benchmark_example(cls, n, rng):
        """The spectraplex of m x m matrices (trace 1), n = m^2 (up to m = 320: one eigendecomposition per point)."""
        if n > 102_400:
            return None
        return {"kind": "spectraplex", "about": "spectraplex, m x m", "n": max(2, int(round(n ** 0.5))), "trace": 1.0}

    @classmethod
    def examples(cls):
        """Small instances for the conformance checks (tests/test_conformance.py)."""
        return [{"kind": "spectraplex", "n": 3},
                {"kind": "spectraplex", "n": 4, "trace": 2.5, "mode": "at_most"},
                {"kind": "spectraplex", "n": 1, "trace": 2.0}]

    @classmethod
    def random_example(cls, rng):
        """A random spectraplex of size 2..4, either mode."""
        return {"kind": "spectraplex", "n": int(rng.integers(2, 5)), "trace": float(np.round(rng.uniform(0.2, 4), 3)),
                "mode": str(rng.choice(["equal", "at_most"]))}

    @property
    def shape(self):
        return (self.n, self.n)

    def scale(self):
        return max(1.0, self.trace)

    def cvxpy_constraints(self, x):
        import cvxpy as cp
        if self.trace == 0.0:
            return [x == 0]
        # in units of the trace (better conditioned cones for large or small t)
        z = x / self.trace
        tr = cp.trace(z)
        return [z == z.T, z >> 0, tr == 1.0 if self.mode == "equal" else tr <= 1.0]

    # -- helpers ----------------------------------------------------------------------------------
    def _sym(self, Y):
        """(t, sym(Y)/t as (b, n, n), skew(Y)/t) with per-row powers of two t."""
        t = pow2_scales(Y)
        M = (Y / t[:, None]).reshape(Y.shape[0], self.n, self.n)
        Mt = np.swapaxes(M, 1, 2)
        return t, 0.5 * (M + Mt), 0.5 * (M - Mt)

    def _project_eigenvalues(self, lam, tt):
        """Rows of lam onto {l >= 0, sum l = tt_i} (equal) or sum <= tt_i (at_most)."""
        out = np.maximum(lam, 0.0)
        for i in range(lam.shape[0]):
            if self.mode == "equal" or out[i].sum() > tt[i]:
                # eigenvalues come ascending; the sorted simplex projection wants them descending
                out[i] = simplex_sorted(lam[i, ::-1], float(tt[i]))[::-1]
        return out

    # -- native kernels ---------------------------------------------------------------------------
    @kernel("project")
    def project(self, Y):
        """Symmetrize, one eigendecomposition, simplex projection of the eigenvalues, O(n^3)."""
        b = Y.shape[0]
        out = np.empty_like(Y)
        if b == 0:
            return out
        t, S, _ = self._sym(Y)
        lam, V = eigh_stack(S)
        lp = self._project_eigenvalues(lam, self.trace / t)
        for i in range(b):
            keep = lp[i] > 0.0
            X = (V[i][:, keep] * lp[i][keep]) @ V[i][:, keep].T
            out[i] = (t[i] * 0.5 * (X + X.T)).reshape(-1)
        return out

    @kernel("distance")
    def distance(self, Y):
        """sqrt(||skew Y||^2 + ||l - P(l)||^2) from the eigenvalues l of sym(Y), O(n^3)."""
        if Y.shape[0] == 0:
            return np.zeros(0)
        t, S, K = self._sym(Y)
        lam = eigh_stack(S, compute_v=False)
        lp = self._project_eigenvalues(lam, self.trace / t)
        # both parts by overflow-free norms (lam - lp is huge when the trace dwarfs the scaled Y)
        return t * np.hypot(row_norms(lam - lp), row_norms(K.reshape(K.shape[0], -1)))

    @kernel("contains")
    def contains(self, X, tol):
        """distance(X) <= tol from the eigenvalues, O(n^3)."""
        return self.distance(X) <= tol

    @kernel("violation")
    def violation(self, X):
        """Largest of |X - X^T|/2, -lambda_min(sym X) and the trace violation, O(n^3)."""
        if X.shape[0] == 0:
            return np.zeros(0)
        t, S, K = self._sym(X)
        lam = eigh_stack(S, compute_v=False)
        tr = t * lam.sum(axis=1)
        dtr = np.abs(tr - self.trace) if self.mode == "equal" else np.maximum(tr - self.trace, 0.0)
        asym = t * np.abs(K.reshape(K.shape[0], -1)).max(axis=1, initial=0.0)
        return np.maximum.reduce([asym, np.maximum(-t * lam[:, 0], 0.0), dtr])

    def _extreme(self, C, largest):
        """(lambda, v, method) per row for sym(C): the largest or the smallest eigenpair (unscaled lambda)."""
        b = C.shape[0]
        t, S, _ = self._sym(C)
        if self.n <= DENSE_MAX_SIDE:
            lam, V = eigh_stack(S)
            j = -1 if largest else 0
            return t * lam[:, j], V[:, :, j], ["lapack eigh"] * b
        lams, vs, how = np.empty(b), np.empty((b, self.n)), []
        for i in range(b):
            lam, v, res, m = extreme_eigenpair(S[i], largest)
            lams[i], vs[i] = t[i] * lam, v
            how.append(f"{m}; extreme eigenpair residual {res * t[i]:.2e}")
        return lams, vs, how

    @kernel("lmo")
    def lmo(self, C):
        """t v v^T for the smallest eigenpair of sym(C) (at_most: 0 if it is >= 0): dense eigh up to n = 120, else block Lanczos."""
        b = C.shape[0]
        out = np.zeros_like(C)
        if b == 0:
            return out, {"status": [], "backend_status": [], "iterations": []}
        lam, V, how = self._extreme(C, largest=False)
        for i in range(b):
            if self.mode == "equal" or lam[i] < 0.0:
                out[i] = self.trace * np.outer(V[i], V[i]).reshape(-1)
        return out, {"status": ["solved"] * b, "backend_status": how, "iterations": [0] * b}

    @kernel("support")
    def support(self, C):
        """t lambda_max(sym C) (at_most: its positive part), O(n^3) dense or block Lanczos above n = 120."""
        if C.shape[0] == 0:
            return np.zeros(0)
        lam, _, _ = self._extreme(C, largest=True)
        return self.trace * (lam if self.mode == "equal" else np.maximum(lam, 0.0))

    # -- derivatives ------------------------------------------------------------------------------
    def _jacobian_product(self, Y, D):
        b = Y.shape[0]
        out = np.zeros_like(Y)
        if b == 0:
            return out
        t, S, _ = self._sym(Y)
        tt = self.trace / t
        lam, V = eigh_stack(S)
        lp = self._project_eigenvalues(lam, tt)
        td = pow2_scales(D)
        Dm = (D / td[:, None]).reshape(b, self.n, self.n)
        for i in range(b):
            free = lp[i] > 0.0
            active = self.mode == "equal" or np.maximum(lam[i], 0.0).sum() >= tt[i]
            dS = 0.5 * (Dm[i] + Dm[i].T)
            J = eigen_map_jvp(V[i], lam[i], lp[i], free, support_block_jvp(free, active), dS)
            out[i] = td[i] * J.reshape(-1)
        return out

    @kernel("project_jvp")
    def project_jvp(self, Y, D):
        """Eigendecomposition of sym(y), the simplex projection's Jacobian on the eigenvalues, Daleckii-Krein off them, O(n^3).

        P(Y) = V diag(f(l)) V^T with f the projection of the eigenvalues l of sym(Y) onto
        {f >= 0, sum f = t} (at_most: sum <= t); J D = V (G o V^T sym(D) V) V^T with
        G_ij = (f_i - f_j)/(l_i - l_j) and J_f on the diagonal (a - mean(a) on the kept
        eigenvalues while the trace constraint is tight; a on them otherwise). At kinks tight
        constraints count as active: an eigenvalue at the threshold is dropped, and at_most
        keeps the trace constraint when the positive part sums exactly to t.
        """
        return self._jacobian_product(Y, D)

    @kernel("project_vjp")
    def project_vjp(self, Y, U):
        """The JVP formula applied to u (the Jacobian of a Euclidean projection is symmetric), O(n^3)."""
        return self._jacobian_product(Y, U)

    # -- factored answers -------------------------------------------------------------------------
    def factored(self, op, X):
        """project: (V, l, V^T) with the kept eigenvalues only, largest first (padded with zero values to the
        batch's largest rank); lmo: (v, [t], v^T) for the extreme eigenvector (a zero value when at_most
        answers 0). O(n^3), or the Lanczos cost of the LMO."""
        b, n = X.shape[0], self.n
        if op == "lmo":
            if b == 0:
                return np.zeros((0, n, 1)), np.zeros((0, 1)), np.zeros((0, 1, n))
            lam, V, _ = self._extreme(X, largest=False)
            keep = (lam < 0.0) if self.mode == "at_most" else np.ones(b, dtype=bool)
            return V[:, :, None], np.where(keep, self.trace, 0.0)[:, None], V[:, None, :]
        if op != "project":
            return None
        if b == 0:
            return np.zeros((0, n, 0)), np.zeros((0, 0)), np.zeros((0, 0, n))
        t, S, _ = self._sym(X)
        lam, V = eigh_stack(S)
        lp = self._project_eigenvalues(lam, self.trace / t)
        q = min(n, max(1, int(np.count_nonzero(lp > 0.0, axis=1).max(initial=0))))
        Vq = V[:, :, ::-1][:, :, :q]
        return Vq, t[:, None] * lp[:, ::-1][:, :q], np.swapaxes(Vq, 1, 2)

    # -- the KL geometry --------------------------------------------------------------------------
    def orthant_violation(self):
        """Why the set is not inside the nonnegative orthant (n >= 2 and trace > 0), else None."""
        if self.n == 1 or self.trace == 0.0:
            return None
        return (f"off-diagonal entries of its points can be negative: (t/2)(e1 - e2)(e1 - e2)^T is in the "
                f"spectraplex with entry [0, 1] = {-self.trace / 2:.6g}")

    # -- exact knowledge for setkit.measures ------------------------------------------------------
    def exact_centroid(self, measure):
        """Closed forms by orthogonal invariance (X -> Q X Q^T keeps the set and each measure, so the
        centroid is c I): equal mode, (t/n) I for every measure; at_most, volume: the trace of a uniform
        point has density D s^(D-1) / t^D on [0, t] (the set scales as s^D, D = n(n+1)/2), so
        c = t D / ((D + 1) n). Unknown (None) for at_most with vertices or directions."""
        n, t = self.n, self.trace
        if self.mode == "equal":
            return np.eye(n) * (t / n)
        if measure == "volume":
            D = n * (n + 1) / 2
            return np.eye(n) * (t * D / ((D + 1) * n))
        return None

    def exact_sample(self, k, measure, rng):
        """mode equal, vertices and directions: t v v^T with v uniform on the unit sphere. The extreme
        points are t v v^T; lmo(g) = t v v^T for the eigenvector v of the smallest eigenvalue of
        sym(g), whose law is invariant under v -> Q v for a Gaussian g, hence uniform. n = 1: the set is
        {t} (equal) or [0, t] (at_most, volume: uniform). None otherwise: at_most with vertices (the
        extreme points mix the atom 0 with the sphere) or directions (the generic route draws lmo(g)
        exactly), and volume for n >= 2 (no exact sampler is known to us: hit-and-run)."""
        n, t = self.n, self.trace
        if n == 1:
            if self.mode == "equal":
                return np.full((k, 1), t)
            if measure == "volume":
                return t * rng.random((k, 1))
            return None
        if self.mode == "equal" and measure in ("vertices", "directions"):
            v = rng.standard_normal((k, n))
            v /= np.linalg.norm(v, axis=1, keepdims=True)
            return t * np.einsum("bi,bj->bij", v, v).reshape(k, n * n)
        return None
