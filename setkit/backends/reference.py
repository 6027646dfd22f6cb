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

    # -- problem construction -------------------------------------------------
    def _variable(self):
        # z = sc * w: for projections of far points the solver can work on w = z / |y|, of order 1
        # when the answer is as large as y (with z itself as the variable Clarabel lost digits on
        # far points of sets with unbounded coordinates, status still optimal)
        cp = self.cp
        d, shape = self.node.dim, self.node.shape
        w = cp.Variable(d)
        sc = cp.Parameter(nonneg=True, value=1.0)
        z = sc * w
        x = z if shape == (d,) else cp.reshape(z, shape, order="C")
        cons = self.node.cvxpy_constraints(x)
        return z, w, sc, cons

    def _problem(self, op):
        if op in self._problems:
            return self._problems[op]
        cp = self.cp
        z, w, sc, cons = self._variable()
        p = cp.Parameter(self.node.dim)
        a = cp.Parameter(nonneg=True, value=1.0)
        if op == "project":
            # 0.5 ||z/s - y/s||^2 with z = sc w, a = sc / s: well conditioned for far points
            prob = cp.Problem(cp.Minimize(0.5 * cp.sum_squares(a * w - p)), cons)
        else:
            prob = cp.Problem(cp.Minimize(p @ w), cons)
        self._problems[op] = (prob, z, p, (sc, a), cons)
        return self._problems[op]

    def _solve(self, op, v):
        cp = self.cp
        prob, z, p, (sc, a), cons = self._problem(op)
        scale = max(1.0, float(np.abs(v).max(initial=0.0)))
        p.value = v / scale
        # variable scalings to try: the answer as large as y (far points of unbounded sets), then
        # the answer of order 1 (far points of bounded sets, where z / |y| would be tiny)
        tries = (scale, 1.0) if (op == "project" and scale > 1.0) else (1.0,)
        for k, sv in enumerate(tries):
            sc.value = sv
            a.value = sv / scale if op == "project" else 1.0
            try:
                with warnings.catch_warnings():
                    if k + 1 < len(tries):   # a first try that is not clean is retried silently
                        warnings.simplefilter("ignore", UserWarning)
                    prob.solve(solver=cp.CLARABEL, **CLARABEL_SETTINGS)
            except cp.error.SolverError as exc:
                if k + 1 < len(tries):
                    continue
                raise SolveError(f"reference ({self.node.label}): Clarabel failed on {op}: {exc}",
                                 status="solver_error") from None
            if prob.status == cp.OPTIMAL:
                break
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
