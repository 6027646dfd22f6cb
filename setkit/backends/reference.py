"""The cvxpy reference: every operator of every family, solved by Clarabel.

Problems are built once per workspace with cvxpy Parameters and re-solved per
point. The status is checked and the feasibility residual measured by us;
anything but a clean solve raises :class:`~setkit.errors.SolveError` (or warns
with :class:`~setkit.errors.AccuracyWarning` when loose answers were asked for).
"""
from __future__ import annotations

import warnings

import numpy as np

from ..errors import AccuracyWarning, BackendUnavailableError, SolveError, UnboundedDirectionError
from . import Backend, register_backend

CLARABEL_SETTINGS = dict(tol_gap_abs=1e-10, tol_gap_rel=1e-10, tol_feas=1e-10, max_iter=400)


@register_backend("reference")
class ReferenceBackend(Backend):
    operators = ("project", "lmo", "support")
    requires = "cvxpy"
    problem = "conic"
    priority = 1000
    tolerance = 1e-8
    package = "cvxpy"
    about = "cvxpy with the Clarabel interior-point solver, problem built once with Parameters"

    def __init__(self, node, loose=False):
        super().__init__(node, loose)
        try:
            import cvxpy as cp
        except ImportError as exc:  # pragma: no cover - cvxpy is a base dependency
            raise BackendUnavailableError("backend 'reference' needs cvxpy: pip install cvxpy.") from exc
        self.cp = cp
        self._problems = {}
        self._set_scale = max(1.0, float(node.scale()))

    # -- problem construction -------------------------------------------------
    def _variable(self, s=1.0):
        cp = self.cp
        d, shape = self.node.dim, self.node.shape
        z = cp.Variable(d)
        # projections work on z = x / s with s the set's data scale, so that z = O(1)
        # (linear minimization stays unscaled: Clarabel failed on some degenerate scaled LPs)
        xz = z if s == 1.0 else s * z
        x = xz if shape == (d,) else cp.reshape(xz, shape, order="C")
        cons = self.node.cvxpy_constraints(x)
        return z, cons

    def _problem(self, op):
        if op in self._problems:
            return self._problems[op]
        cp = self.cp
        z, cons = self._variable(self._set_scale if op == "project" else 1.0)
        p = cp.Parameter(self.node.dim)
        inv = cp.Parameter(nonneg=True, value=1.0)
        if op == "project":
            # expanded objective (0.5 ||x||^2 - <y, x>) / (s t) with x = s z and
            # t = max(1, s, |y|_inf): 0.5 (s/t) ||z||^2 - <y/t, z>. The constant ||y||^2 is dropped
            # and no auxiliary equality z/t - y/t is formed, which keeps Clarabel accurate to
            # ~1e-8 of the set's scale for far points (the form ||z/t - y/t||^2 lost ~1e-6 of |y|)
            prob = cp.Problem(cp.Minimize(0.5 * inv * cp.sum_squares(z) - p @ z), cons)
        else:
            prob = cp.Problem(cp.Minimize(p @ z), cons)
        self._problems[op] = (prob, z, p, inv, cons)
        return self._problems[op]

    def _solve(self, op, v):
        cp = self.cp
        prob, z, p, inv, cons = self._problem(op)
        scale = max(1.0, float(np.abs(v).max(initial=0.0)))
        if op == "project":
            scale = max(scale, self._set_scale)
        p.value = v / scale
        inv.value = self._set_scale / scale
        try:
            prob.solve(solver=cp.CLARABEL, **CLARABEL_SETTINGS)
        except cp.error.SolverError as exc:
            raise SolveError(f"reference ({self.node.label}): Clarabel failed on {op}: {exc}",
                             status="solver_error") from None
        status = prob.status
        if status in (cp.UNBOUNDED, cp.UNBOUNDED_INACCURATE):
            raise UnboundedDirectionError(
                f"{self.node.label}: the set is unbounded along the direction -c, so lmo(c) has no "
                f"minimizer (reference solver status {status!r}).")
        if status in (cp.INFEASIBLE, cp.INFEASIBLE_INACCURATE):
            raise SolveError(f"reference ({self.node.label}): the solver reports the set as empty "
                             f"(status {status!r}).", status=status)
        if status != cp.OPTIMAL:
            if status == cp.OPTIMAL_INACCURATE and self.loose:
                warnings.warn(f"reference ({self.node.label}): {op} solved inaccurately.", AccuracyWarning,
                              stacklevel=4)
            else:
                raise SolveError(f"reference ({self.node.label}): {op} did not solve cleanly "
                                 f"(status {status!r}).", status=status)
        x = np.array(z.value, dtype=float)
        if op == "project":
            x *= self._set_scale
        resid = max((float(np.max(c.violation(), initial=0.0)) for c in cons), default=0.0)
        xs = max(1.0, float(np.abs(x).max(initial=0.0)))
        if resid > 1e-6 * xs:
            msg = (f"reference ({self.node.label}): {op} answer violates the constraints by {resid:.3g} "
                   f"(allowed {1e-6 * xs:.3g}).")
            if not self.loose:
                raise SolveError(msg, status="infeasible_answer")
            warnings.warn(msg, AccuracyWarning, stacklevel=4)
        it = prob.solver_stats.num_iters if prob.solver_stats is not None else None
        return x, status, it

    def _loop(self, op, V):
        out = np.empty_like(V)
        stat, iters = [], []
        for i, v in enumerate(V):
            out[i], s, it = self._solve(op, v)
            stat.append(s)
            iters.append(it)
        return out, {"status": ["solved" if s == "optimal" else s for s in stat],
                     "backend_status": stat, "iterations": iters}

    def project(self, Y):
        return self._loop("project", Y)

    def lmo(self, C):
        return self._loop("lmo", C)

    def support(self, C):
        X, info = self._loop("lmo", -C)   # max <c, x> = <c, argmin <-c, x>>
        return np.einsum("ij,ij->i", C, X), info
