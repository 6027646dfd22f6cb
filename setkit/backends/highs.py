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
            if res.status in (2, 3):
                # HiGHS may report 'infeasible or unbounded'; a recession direction decides which
                ray = self._descent_ray(cz)
                if ray is not None:
                    d = ray[:f.n_x]
                    shown = ", ".join(f"{v:.4g}" for v in d[:8]) + (", ..." if d.size > 8 else "")
                    raise UnboundedDirectionError(
                        f"{self.node.label}: lmo(c) has no minimizer: the set is unbounded along the direction "
                        f"d = [{shown}] (a recession direction with <c, d> = {float(cz @ ray):.6g} < 0; batch row "
                        f"{i}).", ray=d)
                if res.status == 3:
                    raise UnboundedDirectionError(
                        f"{self.node.label}: the set is unbounded along the direction -c, so lmo(c) has no "
                        f"minimizer (HiGHS: {res.message}).")
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

    def _descent_ray(self, cz):
        """A recession direction d of the form with <c, d> < 0 (normalized to max |d| = 1), or None.

        Solves min <c, d> over {A_eq d = 0, A_ub d <= 0, d_i >= 0 where lo_i is finite,
        d_i <= 0 where hi_i is finite, -1 <= d <= 1}.
        """
        from scipy.optimize import linprog
        f = self.form
        lo = np.where(np.isfinite(f.lo), 0.0, -1.0)
        hi = np.where(np.isfinite(f.hi), 0.0, 1.0)
        res = linprog(cz, A_ub=f.A_ub if f.A_ub.shape[0] else None,
                      b_ub=np.zeros(f.A_ub.shape[0]) if f.A_ub.shape[0] else None,
                      A_eq=f.A_eq if f.A_eq.shape[0] else None,
                      b_eq=np.zeros(f.A_eq.shape[0]) if f.A_eq.shape[0] else None,
                      bounds=np.column_stack([lo, hi]), method="highs")
        if res.status != 0 or res.x is None or not res.fun < -1e-9 * max(1.0, float(np.abs(cz).max())):
            return None
        d = res.x
        return d / max(1e-300, float(np.abs(d).max()))

    def support(self, C):
        X, info = self.lmo(-C)   # max <c, x> = <c, argmin <-c, x>>
        return np.einsum("ij,ij->i", C, X), info
