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
from ..limits import check as _check_time
from . import Backend, register_backend

CLARABEL_SETTINGS = dict(tol_gap_abs=1e-10, tol_gap_rel=1e-10, tol_feas=1e-10, max_iter=400)
# tried first: a duality gap of 1e-10 bounds a projection's error only by ~sqrt(gap) (1e-5 of the
# scale); when Clarabel cannot reach these, the standard settings above are used
CLARABEL_TIGHT = dict(tol_gap_abs=1e-13, tol_gap_rel=1e-13, tol_feas=1e-12, max_iter=400)
FAR = 1e4     # |y| beyond FAR x the set's scale: the reference certifies its projection by the Frank-Wolfe gap


@register_backend("reference")
class ReferenceBackend(Backend):
    operators = ("project", "lmo", "support", "project_kl")
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
        self._orthant = None      # None until checked; then "" (inside x >= 0) or why not

    # -- problem construction -------------------------------------------------
    def _variable(self, s=1.0):
        cp = self.cp
        d, shape = self.node.dim, self.node.shape
        z = cp.Variable(d)
        # x = s z: s = 1, or the set's data scale for the fallback projection formulation
        xz = z if s == 1.0 else s * z
        x = xz if shape == (d,) else cp.reshape(xz, shape, order="C")
        cons = self.node.cvxpy_constraints(x)
        return z, cons

    def _problem(self, op, s=1.0, classic=False):
        key = (op, s, classic)
        if key in self._problems:
            return self._problems[key]
        cp = self.cp
        z, cons = self._variable(s)
        p = cp.Parameter(self.node.dim)
        inv = cp.Parameter(nonneg=True, value=1.0)
        if op == "project" and classic:
            # 0.5 ||z/t - y/t||^2, t = max(1, |y|): the least accurate form, but it solves when
            # the others stop early (for instance tiny sets far from the origin)
            prob = cp.Problem(cp.Minimize(0.5 * cp.sum_squares(inv * z - p)), cons)
        elif op == "project":
            # expanded objective (0.5 ||x||^2 - <y, x>) / (s t) with x = s z and
            # t = max(1, s, |y|_inf): 0.5 (s/t) ||z||^2 - <y/t, z>. The constant ||y||^2 is dropped
            # and no auxiliary equality z/t - y/t is formed, which keeps Clarabel accurate to
            # ~1e-8 of the set's scale for far points (the form ||z/t - y/t||^2 lost ~1e-6 of |y|)
            prob = cp.Problem(cp.Minimize(0.5 * inv * cp.sum_squares(z) - p @ z), cons)
        else:
            prob = cp.Problem(cp.Minimize(p @ z), cons)
        self._problems[key] = (prob, z, p, inv, cons)
        return self._problems[key]

    def _attempt(self, op, v, s, settings=None, classic=False):
        cp = self.cp
        prob, z, p, inv, cons = self._problem(op, s, classic)
        scale = max(1.0, float(np.abs(v).max(initial=0.0)))
        if op == "project" and not classic:
            scale = max(scale, s, self._set_scale)
        p.value = v / scale
        inv.value = s / scale
        try:
            with warnings.catch_warnings():
                # cvxpy warns "Solution may be inaccurate"; the status is handled by the caller
                warnings.filterwarnings("ignore", message="Solution may be inaccurate")
                prob.solve(solver=cp.CLARABEL, **(settings or CLARABEL_SETTINGS))
        except cp.error.SolverError as exc:
            return prob, z, cons, s, exc
        return prob, z, cons, s, None

    def _solve(self, op, v):
        cp = self.cp
        # formulations in order of accuracy; the next one only when the previous did not solve:
        # tight then standard tolerances, on x and (large sets) on z = x / s, then the classic form
        attempts = [(1.0, CLARABEL_TIGHT, False), (1.0, None, False)]
        if self._set_scale > 1.0:
            attempts += [(self._set_scale, CLARABEL_TIGHT, False), (self._set_scale, None, False)]
        if op == "project":
            attempts.append((1.0, None, True))
        kept = None
        for s_, settings, classic in attempts:
            prob, z, cons, s, exc = self._attempt(op, v, s_, settings, classic)
            if exc is None and prob.status == cp.OPTIMAL:
                break
            if exc is None and op == "lmo" and prob.status == cp.UNBOUNDED:
                break
            if exc is None and prob.status == cp.OPTIMAL_INACCURATE and kept is None:
                kept = (prob.status, np.array(z.value, dtype=float), cons, s, prob.solver_stats, None, z)
        else:
            if kept is not None:
                # nothing solved cleanly: report the most accurate formulation's inaccurate answer
                # (an error below unless loose answers were asked for)
                return self._finish(op, *kept)
        return self._finish(op, prob.status if exc is None else None, None if exc is not None else
                            np.array(z.value, dtype=float) if z.value is not None else None, cons, s,
                            prob.solver_stats if exc is None else None, exc)

    def _finish(self, op, status, zval, cons, s, stats, exc=None, z=None):
        cp = self.cp
        if z is not None:
            z.value = zval      # the constraints' residual below reads the variable's value
        if exc is not None:
            raise SolveError(f"reference ({self.node.label}): Clarabel failed on {op}: {exc}",
                             status="solver_error") from None
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
        x = s * zval
        resid = max((float(np.max(c.violation(), initial=0.0)) for c in cons), default=0.0)
        xs = max(1.0, float(np.abs(x).max(initial=0.0)))
        if resid > 1e-6 * xs:
            msg = (f"reference ({self.node.label}): {op} answer violates the constraints by {resid:.3g} "
                   f"(allowed {1e-6 * xs:.3g}).")
            if not self.loose:
                raise SolveError(msg, status="infeasible_answer")
            warnings.warn(msg, AccuracyWarning, stacklevel=4)
        it = stats.num_iters if stats is not None else None
        return x, status, it

    def _loop(self, op, V):
        out = np.empty_like(V)
        stat, iters = [], []
        for i, v in enumerate(V):
            _check_time(f"reference (cvxpy, Clarabel) {op} of a batch of {len(V)}", f"{i} of {len(V)} rows solved")
            out[i], s, it = self._solve(op, v)
            stat.append(s)
            iters.append(it)
        return out, {"status": ["solved" if s == "optimal" else s for s in stat],
                     "backend_status": stat, "iterations": iters}

    def project(self, Y):
        far = [i for i, y in enumerate(Y) if float(np.abs(y).max(initial=0.0)) > FAR * max(1.0, self._set_scale)]
        if not far:
            return self._loop("project", Y)
        near = [i for i in range(len(Y)) if i not in set(far)]
        out = np.empty_like(Y)
        stat, iters = [None] * len(Y), [None] * len(Y)
        if near:
            P, info = self._loop("project", Y[near])
            out[near] = P
            for j, i in enumerate(near):
                stat[i], iters[i] = info["backend_status"][j], info["iterations"][j]
        for i in far:
            _check_time(f"reference (cvxpy, Clarabel) project of a batch of {len(Y)}", f"row {i} of {len(Y)}")
            out[i], stat[i], iters[i] = self._far(Y[i])
        return out, {"status": ["solved" if s == "optimal" else s for s in stat], "backend_status": stat,
                     "iterations": iters}

    def _fw_gap(self, y, p):
        """support(y - p) - <y - p, p> >= (1/2)||p - p*||^2 (inf when y - p is a recession direction)."""
        c = y - p
        if not c.any():
            return 0.0
        try:
            v = self._unit_lmo(-c[None, :])[0]
        except UnboundedDirectionError:
            return np.inf
        return float(c @ (v - p))

    def _kkt_residual(self, y, p):
        """Distance from y - p to the normal cone of the linear form at p (tight rows read at 1e-9 relative),
        an upper bound on ||p - P(y)|| for a feasible p (p = P(y - r) for the residual r, and P is
        nonexpansive); None when the set has no linear form without auxiliaries."""
        form = self.node.linear_form()
        if form is None or form.n_aux:
            return None
        from scipy.optimize import lsq_linear
        n = p.size
        scale = max(1.0, self._set_scale, float(np.abs(p).max(initial=0.0)))
        rows, free = [], []
        act = np.zeros(0, dtype=bool)
        if form.A_ub.shape[0]:
            A = form.A_ub.tocsr()
            nrm = np.maximum(np.asarray(abs(A).sum(axis=1)).ravel(), 1e-300)
            act = (form.b_ub - A @ p) <= 1e-9 * scale * nrm
        up = np.isfinite(form.hi) & (p >= form.hi - 1e-9 * scale)
        lo = np.isfinite(form.lo) & (p <= form.lo + 1e-9 * scale)
        if (form.A_eq.shape[0] + int(act.sum()) + int(up.sum()) + int(lo.sum())) * n > 4_000_000:
            return None          # too large for the dense check: the residual alone certifies (as for other sets)
        if form.A_eq.shape[0]:
            E = form.A_eq.toarray()
            rows.append(E)
            free += [True] * E.shape[0]
        if act.any():
            rows.append(A[np.flatnonzero(act)].toarray())
            free += [False] * int(act.sum())
        for mask, sign in ((up, 1.0), (lo, -1.0)):
            idx = np.flatnonzero(mask)
            B = np.zeros((idx.size, n))
            B[np.arange(idx.size), idx] = sign
            rows.append(B)
        free += [False] * int(up.sum() + lo.sum())
        M = np.vstack(rows) if rows else np.zeros((0, n))
        c = y - p
        if M.shape[0] == 0:
            return float(np.linalg.norm(c))
        m = float(np.abs(c).max(initial=0.0)) or 1.0
        lb = np.where(free, -np.inf, 0.0)
        try:
            res = lsq_linear(M.T, c / m, bounds=(lb, np.full(M.shape[0], np.inf)), method="bvls")
        except (ValueError, np.linalg.LinAlgError):
            return None          # the check itself failed: the residual alone certifies
        return float(np.linalg.norm(M.T @ res.x - c / m)) * m

    def _far(self, y):
        """The projection of a point far from the set (|y| > FAR x its scale).

        The default formulation's quadratic term is then tiny beside the linear one, and Clarabel can
        stop "optimal" far from the answer (a ray {x0 = x1 >= 0} and y = (-1e10, 3e10) gave (1.006,
        1.006) instead of (1e10, 1e10); a halfspace point of magnitude 1e8 inside the set moved by
        2e5). Solved first on z = x / |y|, then as before; on a bounded set each answer is certified
        by its Frank-Wolfe gap (<= (1/2)(1e-7 |y|)^2), on an unbounded one (where the gap is infinite
        at the slightest error) by the residual alone.
        """
        big = float(np.abs(y).max())
        tol = 1e-7 * max(big, self._set_scale)
        bounded = self.node.has_trait("bounded")
        tried = []
        for how in ("at |y|", "default"):
            try:
                x, st, it = self._solve_at(y, big) if how == "at |y|" else self._solve("project", y)
            except SolveError as e:
                tried.append(f"{how}: {e}")
                continue
            if x is None:
                tried.append(f"{how}: status {st}")
                continue
            if bounded:
                g = self._fw_gap(y, x)
                if not 0.5 * tol * tol < g:
                    return x, st, it
                tried.append(f"{how}: Frank-Wolfe gap {g:.3g}")
                continue
            r = self._kkt_residual(y, x)
            if r is None or r <= tol:
                return x, st, it
            tried.append(f"{how}: normal-cone residual {r:.3g}")
        raise SolveError(f"reference ({self.node.label}): the projection of a point of magnitude {big:.3g} was not "
                         f"certified (allowed Frank-Wolfe gap {0.5 * tol * tol:.3g}; {'; '.join(tried)}).",
                         status="uncertified")

    def _solve_at(self, v, s):
        prob, z, cons, s, exc = self._attempt("project", v, s, CLARABEL_TIGHT, False)
        if exc is not None or prob.status != self.cp.OPTIMAL:
            return None, prob.status if exc is None else "solver_error", None
        return self._finish("project", prob.status, np.array(z.value, dtype=float), cons, s, prob.solver_stats)

    # -- KL (relative entropy) projection ----------------------------------------------------------
    def _kl_problem(self, s):
        """min sum z log z - <p, z> over z = x / s in K / s, with p = t - log s + 1.

        (1/s) KL(s z || exp(t)) = sum z log z - z (t - log s + 1) + const: the objective never
        forms exp(t), so any finite log input is accepted; -entr is the exponential cone.
        """
        key = ("project_kl", s)
        if key not in self._problems:
            cp = self.cp
            z, cons = self._variable(s)
            p = cp.Parameter(self.node.dim)
            prob = cp.Problem(cp.Minimize(-cp.sum(cp.entr(z)) - p @ z), cons)
            self._problems[key] = (prob, z, p, cons)
        return self._problems[key]

    def _solve_kl(self, t, s):
        cp = self.cp
        prob, z, p, cons = self._kl_problem(s)
        p.value = t - np.log(s) + 1.0
        kept, exc = None, None
        for settings in (CLARABEL_TIGHT, CLARABEL_SETTINGS):
            exc = None
            try:
                with warnings.catch_warnings():
                    warnings.filterwarnings("ignore", message="Solution may be inaccurate")
                    prob.solve(solver=cp.CLARABEL, **settings)
            except cp.error.SolverError as e:
                exc = e
                continue
            if prob.status == cp.OPTIMAL:
                return self._finish("project_kl", prob.status, np.array(z.value, dtype=float), cons, s,
                                    prob.solver_stats)
            if prob.status == cp.OPTIMAL_INACCURATE and kept is None:
                kept = (prob.status, np.array(z.value, dtype=float), cons, s, prob.solver_stats, None, z)
        if kept is not None:
            return self._finish("project_kl", *kept)
        return self._finish("project_kl", prob.status if exc is None else None, None, cons, s, None, exc)

    def orthant_violation(self):
        """"" when the set lies in the nonnegative orthant, else why not (checked once per workspace).

        In order: the family's own hook ``orthant_violation()`` (None: inside), lower bounds >= 0
        on every point coordinate of the linear form, else one LP per coordinate (min x_i over
        the set by this backend's lmo).
        """
        if self._orthant is not None:
            return self._orthant
        node = self.node
        why = node.orthant_violation()
        if why is not NotImplemented:
            self._orthant = why or ""
            return self._orthant
        form = node.linear_form()
        if form is not None and bool(np.all(form.lo[:form.n_x] >= 0.0)):
            self._orthant = ""
            return ""
        d = node.dim
        why = ""
        for i in range(d):
            e = np.zeros(d)
            e[i] = 1.0
            try:
                x, _, _ = self._solve("lmo", e)
            except UnboundedDirectionError:
                why = f"coordinate {i} is unbounded below on the set"
                break
            if x[i] < -1e-9 * self._set_scale:
                why = f"the set holds points with x[{i}] = {x[i]:.6g} < 0"
                break
        self._orthant = why
        return why

    def project_kl(self, T):
        why = self.orthant_violation()
        if why:
            from ..kernels.bregman import outside_orthant_error
            raise outside_orthant_error(self.node.label, why)
        out = np.empty_like(T)
        stat, iters = [], []
        for i, t in enumerate(T):
            s = self._set_scale
            x, st, it = self._solve_kl(t, s)
            big = float(np.abs(x).max(initial=0.0))
            if big > 10.0 * s:
                # an unbounded direction of the set: solve again at the answer's own scale
                x, st, it = self._solve_kl(t, big)
            out[i] = self._polished(t, x)
            stat.append(st)
            iters.append(it)
        return out, {"status": ["solved" if s == "optimal" else s for s in stat],
                     "backend_status": stat, "iterations": iters}

    def _polished(self, t, x):
        """x, or its polish on the face it names (setkit.kernels.kl_polish) when that is feasible and has
        a smaller Bregman gap (interior-point answers stop near 1e-6; the polish reaches rounding level)."""
        from ..kernels.kl_polish import polish_kl_in_hull, polish_kl_on_face
        if getattr(self.node, "kind", None) == "hull":
            z = polish_kl_in_hull(t, x, self.node.points)       # a convex combination of the points by construction
            if z is None or not np.all(np.isfinite(z)):
                return x
        else:
            form = self.node.linear_form()
            if form is None or form.n_aux:
                return x
            z = polish_kl_on_face(t, x, form, self._set_scale)
            if z is None or not np.all(np.isfinite(z)) or np.any(z < 0):
                return x
            if float(form.violation_x(z[None, :])[0]) > 1e-9 * max(1.0, self._set_scale, float(np.abs(z).max())):
                return x

        from ..kernels.bregman import kl_gap_rows

        def gap(p):
            return float(kl_gap_rows(t[None, :], p[None, :], self._unit_lmo)[0][0])
        return z if gap(z) < gap(x) else x

    def _unit_lmo(self, G):
        """This backend's LMO of one direction (1, n), solved on the direction scaled to max |entry| 1."""
        m = float(np.abs(G).max(initial=0.0))
        v, _, _ = self._solve("lmo", G[0] / m if m > 0 else G[0])
        return v[None, :]

    def lmo(self, C):
        return self._loop("lmo", C)

    def support(self, C):
        X, info = self._loop("lmo", -C)   # max <c, x> = <c, argmin <-c, x>>
        return np.einsum("ij,ij->i", C, X), info
