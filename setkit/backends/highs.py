"""Linear minimization by HiGHS (through scipy.optimize.linprog) on the linear form."""
from __future__ import annotations

import numpy as np

from ..errors import EmptySetError, SolveError, UnboundedDirectionError
from . import Backend, register_backend


@register_backend("highs")
class HighsBackend(Backend):
    operators = ("lmo", "support")
    requires = "linear_form"
    problem = "lp"
    priority = 20
    tolerance = 1e-9
    package = "scipy"
    about = "HiGHS dual simplex through scipy.optimize.linprog, explicit bounds, residual measured"

    def __init__(self, node, loose=False):
        super().__init__(node, loose)
        f = node.linear_form()
        self.form = f
        # linprog defaults every variable to >= 0: always pass explicit bounds
        self.bounds = np.column_stack([f.lo, f.hi])

    def lmo(self, C):
        from scipy.optimize import linprog
        f = self.form
        out = np.empty_like(C)
        stat, iters = [], []
        for i, c in enumerate(C):
            cz = np.concatenate([c, np.zeros(f.n_aux)])
            res = linprog(cz, A_ub=f.A_ub if f.A_ub.shape[0] else None, b_ub=f.b_ub if f.A_ub.shape[0] else None,
                          A_eq=f.A_eq if f.A_eq.shape[0] else None, b_eq=f.b_eq if f.A_eq.shape[0] else None,
                          bounds=self.bounds, method="highs",
                          options=dict(primal_feasibility_tolerance=1e-10, dual_feasibility_tolerance=1e-10))
            if res.status == 3:
                raise UnboundedDirectionError(
                    f"{self.node.label}: the set is unbounded along the direction -c, so lmo(c) has no "
                    f"minimizer (HiGHS: {res.message}).")
            if res.status == 2:
                raise EmptySetError(f"{self.node.label}: the set is empty (HiGHS: {res.message}).")
            if res.status != 0 or res.x is None:
                raise SolveError(f"highs ({self.node.label}): the LP did not solve (status {res.status}: "
                                 f"{res.message}).", status=str(res.status))
            z = res.x
            resid = 0.0
            if f.A_eq.shape[0]:
                resid = max(resid, float(np.abs(f.A_eq @ z - f.b_eq).max()))
            if f.A_ub.shape[0]:
                resid = max(resid, float((f.A_ub @ z - f.b_ub).max(initial=0.0)))
            if resid > 1e-7 * max(1.0, float(np.abs(z).max())):
                raise SolveError(f"highs ({self.node.label}): LP answer violates constraints by {resid:.3g}.",
                                 status="infeasible_answer")
            out[i] = z[:f.n_x]
            stat.append("solved")
            iters.append(int(getattr(res, "nit", 0)))
        return out, {"status": stat, "iterations": iters, "backend_status": [ "optimal" ] * len(stat)}

    def support(self, C):
        X, info = self.lmo(-C)   # max <c, x> = <c, argmin <-c, x>>
        return np.einsum("ij,ij->i", C, X), info
