"""Linear minimization by HiGHS on the linear form, in a persistent LP workspace.

The LP {A_eq z = b_eq, A_ub z <= b_ub, lo <= z <= hi} is handed to HiGHS once per
workspace (see :mod:`setkit.backends._lp`); each direction only changes the costs
and re-solves from the previous basis or cold, whichever the recent calls favour.
Without highspy the same workspace runs through scipy.optimize.linprog.
"""
from __future__ import annotations

import numpy as np

from ..errors import EmptySetError, UnboundedDirectionError
from ..limits import check as _check_time
from . import Backend, register_backend
from ._lp import form_workspace, highspy_available, lp_workspace


@register_backend("highs")
class HighsBackend(Backend):
    operators = ("lmo", "support")
    requires = "linear_form"
    problem = "lp"
    priority = 20
    tolerance = 1e-9
    package = "scipy"
    about = ("HiGHS simplex on a persistent model of the linear form (costs changed per call, warm or cold "
             "re-solve), residual measured")

    def __init__(self, node, loose=False):
        super().__init__(node, loose)
        f = node.linear_form()
        self.form = f
        self.ws = form_workspace(f, node.label)
        self._ray_ws = None

    def lmo(self, C):
        f = self.form
        out = np.empty_like(C)
        stat, iters, bstat = [], [], []
        for i, c in enumerate(C):
            _check_time(f"highs LMO of a batch of {len(C)}", f"{i} of {len(C)} rows solved")
            cz = np.concatenate([c, np.zeros(f.n_aux)])
            ans = self.ws.minimize(cz)
            if ans.status == "unbounded":
                d = self.node.unbounded_ray(c)
                if d is not None:
                    used = np.flatnonzero(d)
                    shown = ", ".join(str(int(e)) for e in used[:12]) + (", ..." if used.size > 12 else "")
                    raise UnboundedDirectionError(
                        f"{self.node.label}: lmo(c) has no minimizer: the set is unbounded along the direction d "
                        f"(a cycle through the coordinates [{shown}]) with <c, d> = {float(c @ d):.6g} < 0 "
                        f"(batch row {i}); bound those coordinates.",
                        ray=d)
                ray = self._descent_ray(cz)
                if ray is not None:
                    d = ray[:f.n_x]
                    shown = ", ".join(f"{v:.4g}" for v in d[:8]) + (", ..." if d.size > 8 else "")
                    raise UnboundedDirectionError(
                        f"{self.node.label}: lmo(c) has no minimizer: the set is unbounded along the direction "
                        f"d = [{shown}] (a recession direction with <c, d> = {float(cz @ ray):.6g} < 0; batch row "
                        f"{i}).", ray=d)
                raise UnboundedDirectionError(
                    f"{self.node.label}: the set is unbounded along the direction -c, so lmo(c) has no "
                    f"minimizer (HiGHS: {ans.text}; batch row {i}).")
            if ans.status == "infeasible":
                raise EmptySetError(f"{self.node.label}: the set is empty (HiGHS: {ans.text}).")
            out[i] = self.node.vertex_cleanup(ans.z[:f.n_x])
            stat.append("solved")
            iters.append(ans.iterations)
            bstat.append(ans.text)
        return out, {"status": stat, "iterations": iters, "backend_status": bstat}

    def _descent_ray(self, cz):
        """A recession direction d of the form with <c, d> < 0 (normalized to max |d| = 1), or None.

        Solves min <c, d> over {A_eq d = 0, A_ub d <= 0, d_i >= 0 where lo_i is finite,
        d_i <= 0 where hi_i is finite, -1 <= d <= 1} (a second workspace, built on first need).
        """
        f = self.form
        if self._ray_ws is None:
            lo = np.where(np.isfinite(f.lo), 0.0, -1.0)
            hi = np.where(np.isfinite(f.hi), 0.0, 1.0)
            self._ray_ws = lp_workspace(f.A_eq, np.zeros(f.A_eq.shape[0]), f.A_ub, np.zeros(f.A_ub.shape[0]),
                                        lo, hi, self.node.label + " (recession cone)")
        ans = self._ray_ws.minimize(cz)
        if ans.status != "optimal" or not float(cz @ ans.z) < -1e-9 * max(1.0, float(np.abs(cz).max())):
            return None
        d = ans.z
        return d / max(1e-300, float(np.abs(d).max()))

    def support(self, C):
        X, info = self.lmo(-C)   # max <c, x> = <c, argmin <-c, x>>
        return np.einsum("ij,ij->i", C, X), info

    @staticmethod
    def engine() -> str:
        """Which LP engine the workspaces use: 'highspy' (persistent model) or 'linprog' (fallback)."""
        return "highspy" if highspy_available() else "linprog"
