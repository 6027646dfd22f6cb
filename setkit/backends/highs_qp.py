"""Projection by the HiGHS active-set QP solver on the linear form (the fallback after OSQP).

    min_z (1/2)||x - y||^2  s.t.  A_eq z = b_eq, A_ub z <= b_ub, lo <= z <= hi,  z = (x, aux)

An active-set method finishes on the exact active face, so it serves the points
where ADMM (OSQP) stalls: vertices and highly degenerate faces. The model is
handed to HiGHS once per workspace; each point only changes the linear costs.
The feasibility residual is measured here, never taken from the solver's status.
"""
from __future__ import annotations

import warnings

import numpy as np
import scipy.sparse as sp

from ..errors import AccuracyWarning, SolveError
from ..limits import check as _check_time
from ..limits import remaining as _remaining
from . import Backend, register_backend

RESIDUAL_TOL = 1e-9


@register_backend("highs_qp")
class HighsQPBackend(Backend):
    operators = ("project",)
    requires = "linear_form"
    problem = "qp"
    priority = 30
    tolerance = 1e-9
    package = "highspy"
    about = "HiGHS active-set QP on the linear form (costs changed per call), residual measured"

    def __init__(self, node, loose=False):
        super().__init__(node, loose)
        import highspy
        from ._lp import _new_highs
        f = node.linear_form()
        self.form = f
        n = f.n
        inf = highspy.kHighsInf
        A = sp.vstack([sp.csr_matrix(f.A_eq), sp.csr_matrix(f.A_ub)], format="csc")
        A.sort_indices()
        lp = highspy.HighsLp()
        lp.num_col_ = n
        lp.num_row_ = int(A.shape[0])
        lp.col_cost_ = np.zeros(n)
        lp.col_lower_ = np.where(np.isfinite(f.lo), f.lo, -inf)
        lp.col_upper_ = np.where(np.isfinite(f.hi), f.hi, inf)
        lp.row_lower_ = np.concatenate([f.b_eq, np.full(f.A_ub.shape[0], -inf)])
        lp.row_upper_ = np.concatenate([f.b_eq, f.b_ub])
        lp.a_matrix_.format_ = highspy.MatrixFormat.kColwise
        lp.a_matrix_.num_col_ = n
        lp.a_matrix_.num_row_ = int(A.shape[0])
        lp.a_matrix_.start_ = A.indptr.astype(np.int32)
        lp.a_matrix_.index_ = A.indices.astype(np.int32)
        lp.a_matrix_.value_ = A.data.astype(float)
        hess = highspy.HighsHessian()
        hess.dim_ = n
        hess.format_ = highspy.HessianFormat.kTriangular
        nx = f.n_x
        # identity on x, zero on the auxiliaries (a column-wise lower triangle with only diagonals)
        hess.start_ = np.concatenate([np.arange(nx + 1), np.full(n - nx, nx)]).astype(np.int32)
        hess.index_ = np.arange(nx, dtype=np.int32)
        hess.value_ = np.ones(nx)
        model = highspy.HighsModel()
        model.lp_ = lp
        model.hessian_ = hess
        h = _new_highs()
        # an active-set method needs about one iteration per face change: a bound keeps it from cycling
        # on badly scaled costs (found by benchmarks/fuzz_operators.py: costs mixing 1e167 and 1e-275 ran
        # for minutes inside the solver with no way to interrupt it)
        self._iteration_limit = int(max(1000, 50 * (n + A.shape[0])))
        for key, val in (("primal_feasibility_tolerance", 1e-10), ("dual_feasibility_tolerance", 1e-10),
                         ("threads", 1), ("qp_iteration_limit", self._iteration_limit)):
            h.setOptionValue(key, val)
        h.passModel(model)
        self.h, self._hp = h, highspy
        self._idx = np.arange(n, dtype=np.int32)

    def _residual(self, z):
        return self.form.residual(z)

    def project(self, Y):
        """Project the rows of Y; coordinates far beyond their bounds are pulled in first (checked on the
        answer, exact when the check passes: :mod:`setkit.backends._far`)."""
        from ._far import project_pulled_in
        return project_pulled_in(self._project_rows, self.form, np.asarray(Y, float), self.node.scale())

    def _project_rows(self, Y):
        f = self.form
        out = np.empty_like(Y)
        stat, iters, bstat = [], [], []
        ok_status = self._hp.HighsModelStatus.kOptimal
        for i, y in enumerate(Y):
            _check_time(f"highs_qp projection of a batch of {len(Y)}", f"{i} of {len(Y)} rows solved")
            cost = np.concatenate([-y, np.zeros(f.n_aux)])
            self.h.changeColsCost(f.n, self._idx, cost)
            left = _remaining()       # inside setkit.time_limit: the solver stops by itself at the deadline
            self.h.setOptionValue("time_limit", float("inf") if left is None else max(1e-3, left))
            self.h.run()
            status = self.h.getModelStatus()
            z = np.array(self.h.getSolution().col_value, dtype=float)
            text = self.h.modelStatusToString(status)
            if z.size != f.n or not np.all(np.isfinite(z)):
                raise SolveError(f"highs_qp ({self.node.label}): projection failed ({text}); no point was returned.",
                                 status=text)
            resid = self._residual(z)
            tol = RESIDUAL_TOL * max(1.0, float(np.abs(z).max(initial=0.0)), self.node.scale())
            if status != ok_status or resid > tol:
                msg = (f"highs_qp ({self.node.label}): projection not solved cleanly (status {text!r}, measured "
                       f"constraint residual {resid:.3g}, allowed {tol:.3g}).")
                if not self.loose or resid > 1e3 * tol:
                    raise SolveError(msg, status=text)
                warnings.warn(msg, AccuracyWarning, stacklevel=3)
            out[i] = z[:f.n_x]
            stat.append("solved" if status == ok_status else text)
            iters.append(int(self.h.getInfo().qp_iteration_count))
            bstat.append(text)
        return out, {"status": stat, "iterations": iters, "backend_status": bstat}
