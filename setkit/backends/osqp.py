"""Compiled OSQP projection for every set with a linear form.

The KKT system is set up and factorized once per workspace; each call updates
only the linear term and warm-starts from the previous answer. Each solve runs
at eps 1e-8 and is polished (a successful polish solves the KKT system of the
identified active set, so the answer is exact up to rounding); when polishing
does not succeed, the point is re-solved warm at eps 1e-10 (the first answer is
kept if that re-solve does not finish); a solve that stalls from its warm start
is restarted cold on a second solver with rho fixed (adaptive rho is what stalls
there, and OSQP cannot switch it off after setup). The status is
checked and the feasibility residual measured by us before an answer is returned.

OSQP fixes its cost scaling at setup from P and q; set up with q = 0, a point far
from a small set (|y| ~ 4e3 against a set of diameter 2) leaves the scaled linear
term thousands of times larger than the quadratic one, adaptive rho runs to its
upper limit and ADMM stalls (maximum iterations, residual 2.5e-4, even from a
cold start). So a workspace keeps one solver per decade of max(1, |y|_inf), up
to 1e5 (OSQP clamps its cost scaling at 1e-4), each set up with a linear term of
that decade so that its cost scaling fits the points it serves; solvers are
built on first use and each keeps its own warm start.
"""
from __future__ import annotations

import warnings

import numpy as np
import scipy.sparse as sp

from ..errors import AccuracyWarning, BackendUnavailableError, SolveError
from ..limits import check as _check_time
from . import Backend, register_backend

SETTINGS = dict(verbose=False, eps_abs=1e-8, eps_rel=1e-8, eps_prim_inf=1e-10, eps_dual_inf=1e-10,
                polishing=True, polish_refine_iter=10, max_iter=10_000, warm_starting=True,
                adaptive_rho=True, check_termination=10)
# when polishing does not succeed the answer is only eps-accurate: re-solve (warm) at these tolerances
TIGHT = dict(eps_abs=1e-10, eps_rel=1e-10)
TIGHT_MAX_ITER = 20_000
# a warm-started solve that does not finish in SETTINGS["max_iter"] iterations is restarted cold, with
# the step size rho reset (its adapted value from points of another scale can stall ADMM), for up to
# rho held fixed: adaptive rho is what stalls (it runs to its upper limit on the far points of a small
# set, and cycles on the degenerate auxiliaries of extended formulations). OSQP ignores a change of
# adaptive_rho after setup, so the restart runs on a second solver (per decade, built on first need).
RESTART = dict(rho=0.1, max_iter=100_000, adaptive_rho=False)
# solvers per decade of max(1, |y|_inf): 1, 10, ..., 1e5 (OSQP's cost scaling is clamped at 1e-4 anyway)
MAX_DECADE = 5


@register_backend("osqp")
class OsqpBackend(Backend):
    operators = ("project",)
    requires = "linear_form"
    problem = "qp"
    priority = 20
    tolerance = 1e-8
    package = "osqp"
    about = "OSQP on the linear form, factorized once, warm-started, polished, residual measured"

    def __init__(self, node, loose=False):
        super().__init__(node, loose)
        try:
            import osqp
        except ImportError as exc:  # pragma: no cover
            raise BackendUnavailableError("backend 'osqp' needs the osqp package: pip install osqp.") from exc
        f = node.linear_form()
        self.form = f
        n = f.n
        diag = np.concatenate([np.ones(f.n_x), np.zeros(f.n_aux)])
        P = sp.triu(sp.diags(diag), format="csc")
        A = sp.vstack([f.A_eq, f.A_ub, sp.eye(n)], format="csc")
        lo = np.concatenate([f.b_eq, np.full(f.A_ub.shape[0], -np.inf), f.lo])
        hi = np.concatenate([f.b_eq, f.b_ub, f.hi])
        self.A, self.l, self.u = A, lo, hi
        self.P = P
        self._osqp = osqp
        self._solvers = {}
        self.solver = self._solver_for(0)     # the solver of points with |y|_inf <= 10
        status_enum = getattr(osqp, "SolverStatus", None)   # osqp >= 1.0; older: the named constant
        self._solved = int(status_enum.OSQP_SOLVED) if status_enum is not None else osqp.constant("OSQP_SOLVED")

    @staticmethod
    def decade(y) -> int:
        """Which solver serves the point y: floor(log10(max(1, |y|_inf))), at most MAX_DECADE."""
        m = float(np.abs(y).max(initial=0.0))
        return 0 if m < 10.0 else min(MAX_DECADE, int(np.floor(np.log10(m))))

    def _solver_for(self, k, fixed=False):
        """The solver of decade k, set up (factorized) on first use with a linear term of size 10^k.

        ``fixed=True``: the restart solver of that decade (rho fixed, more iterations).
        """
        s = self._solvers.get((k, fixed))
        if s is None:
            f = self.form
            q_rep = np.concatenate([np.full(f.n_x, -(10.0 ** k)), np.zeros(f.n_aux)])
            s = self._osqp.OSQP()
            s.setup(self.P, q_rep, self.A, self.l, self.u, **(dict(SETTINGS, **RESTART) if fixed else SETTINGS))
            s.warm_start(x=np.zeros(f.n), y=np.zeros(self.A.shape[0]))
            self._solvers[(k, fixed)] = s
        return s

    def _inside(self, y):
        """y meets every constraint up to rounding (rows normalized; 1e-13 relative): its own projection."""
        return bool(self.form.membership_screen(y[None, :], np.full(1, np.inf))[0] == 1) or self._residual(y) == 0.0

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
        for i, y in enumerate(Y):
            _check_time(f"osqp projection of a batch of {len(Y)}", f"{i} of {len(Y)} rows solved")
            if f.n_aux == 0 and self._inside(y):
                # y is in the set: it is its own projection (and OSQP, finding no active constraint to
                # polish on, would print a note on stdout)
                out[i] = y
                stat.append("solved")
                iters.append(0)
                bstat.append("the point satisfies every constraint: its own projection")
                continue
            q = np.concatenate([-y, np.zeros(f.n_aux)])
            self.solver = self._solver_for(self.decade(y))
            self.solver.update(q=q)
            res = self.solver.solve(raise_error=False)
            ok = res.info.status_val == self._solved
            note = ""
            max_iter = SETTINGS["max_iter"]
            if not ok:
                # a warm start (and rho adapted) at a point of another scale can stall ADMM: restart cold
                self.solver = self._solver_for(self.decade(y), fixed=True)
                self.solver.update(q=q)
                self.solver.warm_start(x=np.zeros(f.n), y=np.zeros(self.A.shape[0]))
                res = self.solver.solve(raise_error=False)
                ok = res.info.status_val == self._solved
                note = "; restarted cold with rho fixed"
                max_iter = RESTART["max_iter"]
            if not (ok and res.info.status_polish == 1):
                # polishing did not identify the active set: the answer is only eps-accurate, so
                # re-solve warm at tighter tolerances (absolute one relative to the point's size)
                first = (np.array(res.x, dtype=float) if res.x is not None else None, res.info.status,
                         int(res.info.iter), res.info.status_polish)
                yscale = max(1.0, float(np.abs(y).max(initial=0.0)))
                self.solver.update_settings(eps_abs=TIGHT["eps_abs"] * yscale, eps_rel=TIGHT["eps_rel"],
                                            max_iter=TIGHT_MAX_ITER)
                res = self.solver.solve(raise_error=False)
                self.solver.update_settings(eps_abs=SETTINGS["eps_abs"], eps_rel=SETTINGS["eps_rel"],
                                            max_iter=max_iter)
                tight_ok = res.info.status_val == self._solved
                if tight_ok:
                    note += "; re-solved at eps 1e-10"
                elif ok and first[0] is not None:
                    # keep the clean eps 1e-8 answer of the first solve
                    note += f"; tight re-solve stopped ({res.info.status}), eps 1e-8 answer kept"
                    res = None
                ok = ok if res is None else tight_ok
            if res is None:
                z, status, n_it, polish = first
            else:
                z, status, n_it, polish = res.x, res.info.status, int(res.info.iter), res.info.status_polish
            if z is None or not np.all(np.isfinite(z)):
                raise SolveError(f"osqp ({self.node.label}): projection failed with status {status!r}; "
                                 f"no point was returned.", status=status)
            resid = self._residual(z)
            tol = 1e-7 * max(1.0, float(np.abs(z).max()))
            if not ok or resid > tol:
                msg = (f"osqp ({self.node.label}): projection not solved cleanly (status {status!r}, "
                       f"measured constraint residual {resid:.3g}, allowed {tol:.3g}).")
                if not self.loose or resid > 1e3 * tol:
                    raise SolveError(msg, status=status)
                warnings.warn(msg, AccuracyWarning, stacklevel=3)
            out[i] = z[:f.n_x]
            stat.append("solved" if ok else status)
            iters.append(n_it)
            bstat.append(f"{status}; polish={polish}{note}")
        return out, {"status": stat, "iterations": iters, "backend_status": bstat}
