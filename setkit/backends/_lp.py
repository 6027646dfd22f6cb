"""A persistent LP workspace: one HiGHS model per set, only the costs change per call.

    minimize <c, z>  subject to  A_eq z = b_eq,  A_ub z <= b_ub,  lo <= z <= hi

The constraints are handed to HiGHS once (``highspy``, column-wise sparse, presolve
off so that the answer is a basic solution: a vertex); each call changes the
column costs and re-solves. Two ways to re-solve, chosen per call:

* warm: from the previous optimal basis. After a cost change that basis is still
  primal feasible, so HiGHS continues with primal simplex; when the new direction
  is close to the previous one (a Frank-Wolfe trajectory) this takes a few pivots.
* cold: the solver state is cleared and dual simplex starts from the slack basis.
  For unrelated directions this beats the warm start (measured on a 500-node,
  2,000-edge flow: cold dual 800 pivots / 10 ms, warm primal 2,500 / 190 ms, warm
  dual 1,300 / 28 ms); for a trajectory (each cost a 5% perturbation of the last)
  warm primal takes 83 pivots / 3-7 ms against cold dual's 780 / 9-12 ms. A
  primal pivot costs several dual ones here (HiGHS's dual simplex is its fast one).

A warm attempt runs under an iteration limit of a quarter of the last cold solve's
pivots (at least 25). When it hits the limit the call finishes cold and the next
``backoff`` calls go cold directly (1, 2, 4, ... up to 32 after repeated misses; a
successful warm attempt resets it), so random directions pay at most a small
probing overhead and trajectories keep their warm starts.

The model status is mapped to ``optimal`` / ``unbounded`` / ``infeasible``
(HiGHS's "unbounded or infeasible" is decided by a zero-cost solve), anything else
raises :class:`SolveError`. The constraint residual of every answer is measured
here; a warm answer that misses it is re-solved cold before giving up.

When highspy is not installed, :class:`LinprogWorkspace` gives the same interface
through ``scipy.optimize.linprog`` (a full model build per call).

Not thread-safe: one workspace per thread (backends are per thread already; family
kernels keep theirs in thread-local state).
"""
from __future__ import annotations

import os
import sys
import threading
from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

from ..errors import SolveError
from ..limits import check as _check_time
from ..limits import remaining as _remaining

FEASIBILITY_TOL = 1e-10      # HiGHS primal and dual feasibility tolerances
WARM_MIN_ITER = 25           # iteration limit of a warm attempt: max(this, last cold pivots // WARM_SHARE)
WARM_SHARE = 4
MAX_BACKOFF = 32             # longest run of cold calls after repeated warm misses
RESIDUAL_TOL = 1e-7          # relative to max(1, |z|_inf, |rhs|_inf)


@dataclass(frozen=True)
class LpAnswer:
    """Outcome of one minimization: status ``optimal`` (z set), ``unbounded`` or ``infeasible``."""

    status: str
    z: np.ndarray | None
    iterations: int
    text: str             # the solver's words: status, warm or cold, pivots
    residual: float = 0.0


def highspy_available() -> bool:
    try:
        import highspy  # noqa: F401
        return True
    except ImportError:
        return False


def lp_workspace(A_eq, b_eq, A_ub, b_ub, lo, hi, label="LP"):
    """The fastest available workspace for this LP (HiGHS model, else linprog)."""
    if highspy_available():
        return HighsWorkspace(A_eq, b_eq, A_ub, b_ub, lo, hi, label)
    return LinprogWorkspace(A_eq, b_eq, A_ub, b_ub, lo, hi, label)


def form_workspace(form, label="LP"):
    """A workspace over the variables z = (x, aux) of a :class:`~setkit.forms.LinearForm`."""
    return lp_workspace(form.A_eq, form.b_eq, form.A_ub, form.b_ub, form.lo, form.hi, label)


def power_of_two_above(v: float) -> float:
    """The power of two at or just above |v| (1 for 0 or non-finite): dividing by it is exact."""
    v = abs(float(v))
    if v == 0.0 or not np.isfinite(v):
        return 1.0
    return float(np.ldexp(1.0, int(np.frexp(v)[1])))


def _unit_costs(c):
    """c divided by a power of two near max |c| (a positive scaling: the same minimizers)."""
    return c / power_of_two_above(np.abs(c).max(initial=0.0))


class _Arrays:
    """Shared by both workspaces: the constraint data and the residual measure."""

    def __init__(self, A_eq, b_eq, A_ub, b_ub, lo, hi, label):
        self.label = label
        self.A_eq = sp.csr_matrix(A_eq, dtype=float)
        self.A_ub = sp.csr_matrix(A_ub, dtype=float)
        self.n = int(self.A_eq.shape[1])
        self.b_eq = np.asarray(b_eq, dtype=float).reshape(-1)
        self.b_ub = np.asarray(b_ub, dtype=float).reshape(-1)
        self.lo = np.broadcast_to(np.asarray(lo, dtype=float), (self.n,)).copy()
        self.hi = np.broadcast_to(np.asarray(hi, dtype=float), (self.n,)).copy()
        rhs = np.concatenate([self.b_eq, self.b_ub, self.lo[np.isfinite(self.lo)], self.hi[np.isfinite(self.hi)]])
        self.scale = float(max(1.0, np.abs(rhs).max(initial=0.0)))
        # the solver sees z / unit (right-hand sides and bounds divided by a power of two near their
        # magnitude: exact, the same vertices), so its absolute tolerances (1e-10) mean the same for
        # data near 1e-6 and near 1e9; answers are multiplied back. Costs are scaled per call.
        self.unit = power_of_two_above(self.scale) if self.scale > 1.0 else 1.0

    def residual(self, z) -> float:
        r = 0.0
        if self.A_eq.shape[0]:
            r = max(r, float(np.abs(self.A_eq @ z - self.b_eq).max()))
        if self.A_ub.shape[0]:
            r = max(r, float((self.A_ub @ z - self.b_ub).max(initial=0.0)))
        return max(r, float((self.lo - z).max(initial=0.0)), float((z - self.hi).max(initial=0.0)))

    def residual_tol(self, z) -> float:
        return RESIDUAL_TOL * max(self.scale, float(np.abs(z).max(initial=0.0)))


_HIGHS_LOCK = threading.Lock()


def _new_highs():
    """A silent HiGHS object (the core class prints no banner; the public one does, once, on stdout)."""
    import highspy
    cls = getattr(highspy, "_Highs", None)
    if cls is not None:
        h = cls()
    else:  # pragma: no cover - older or newer highspy without the core class exported
        with _HIGHS_LOCK:
            h = _quietly(highspy.Highs)
    h.setOptionValue("output_flag", False)
    return h


def _quietly(make):  # pragma: no cover - see _new_highs
    """Run ``make()`` with file descriptor 1 sent to the null device (C-level prints)."""
    try:
        sys.stdout.flush()
        saved = os.dup(1)
    except (OSError, ValueError, AttributeError):
        return make()
    null = os.open(os.devnull, os.O_WRONLY)
    try:
        os.dup2(null, 1)
        return make()
    finally:
        os.dup2(saved, 1)
        os.close(saved)
        os.close(null)


class HighsWorkspace(_Arrays):
    """The LP held in one HiGHS model; :meth:`minimize` changes the costs and re-solves."""

    engine = "highspy"

    def __init__(self, A_eq, b_eq, A_ub, b_ub, lo, hi, label="LP"):
        super().__init__(A_eq, b_eq, A_ub, b_ub, lo, hi, label)
        import highspy
        self._hp = highspy
        inf = highspy.kHighsInf
        A = sp.vstack([self.A_eq, self.A_ub], format="csc")
        A.sort_indices()
        lp = highspy.HighsLp()
        lp.num_col_ = self.n
        lp.num_row_ = int(A.shape[0])
        u = self.unit
        lp.col_cost_ = np.zeros(self.n)
        lp.col_lower_ = np.where(np.isfinite(self.lo), self.lo / u, -inf)
        lp.col_upper_ = np.where(np.isfinite(self.hi), self.hi / u, inf)
        lp.row_lower_ = np.concatenate([self.b_eq / u, np.full(self.A_ub.shape[0], -inf)])
        lp.row_upper_ = np.concatenate([self.b_eq / u, self.b_ub / u])
        lp.a_matrix_.format_ = highspy.MatrixFormat.kColwise
        lp.a_matrix_.num_col_ = self.n
        lp.a_matrix_.num_row_ = int(A.shape[0])
        lp.a_matrix_.start_ = A.indptr.astype(np.int32)
        lp.a_matrix_.index_ = A.indices.astype(np.int32)
        lp.a_matrix_.value_ = A.data.astype(float)
        h = _new_highs()
        for key, val in (("presolve", "off"), ("primal_feasibility_tolerance", FEASIBILITY_TOL),
                         ("dual_feasibility_tolerance", FEASIBILITY_TOL), ("threads", 1)):
            h.setOptionValue(key, val)
        st = h.passModel(lp)
        if st == highspy.HighsStatus.kError:
            raise SolveError(f"highs ({label}): HiGHS rejected the LP ({h.modelStatusToString(h.getModelStatus())}).",
                             status="model_error")
        self.h = h
        self._idx = np.arange(self.n, dtype=np.int32)
        self._MS = highspy.HighsModelStatus
        self._has_basis = False
        self._feasible = None          # known once an answer was optimal (constraints never change)
        self._cold_iters = None
        self._backoff = 0              # length of the current run of cold calls
        self._skip = 0                 # cold calls left before the next warm attempt
        self.stats = {"warm": 0, "cold": 0, "warm_missed": 0}

    # -- one solve ------------------------------------------------------------------------------
    def _run(self, warm: bool, limit: int | None):
        h = self.h
        if not warm:
            h.clearSolver()
        h.setOptionValue("simplex_strategy", 4 if warm else 1)     # primal from a basis, else dual
        h.setOptionValue("simplex_iteration_limit", int(limit) if limit is not None else 2**31 - 1)
        left = _remaining()           # inside setkit.time_limit: HiGHS stops by itself at the deadline
        h.setOptionValue("time_limit", float("inf") if left is None else max(1e-3, left))
        h.run()
        return h.getModelStatus(), int(h.getInfo().simplex_iteration_count)

    def _solution(self):
        return np.array(self.h.getSolution().col_value, dtype=float) * self.unit

    def minimize(self, c) -> LpAnswer:
        """Minimize <c, z>: an :class:`LpAnswer` (vertex for ``optimal``)."""
        c = _unit_costs(np.asarray(c, dtype=float))
        self.h.changeColsCost(self.n, self._idx, c)
        MS = self._MS
        iters = 0
        how = "cold dual simplex"
        warm = self._has_basis and self._skip == 0
        if self._has_basis and self._skip > 0:
            self._skip -= 1
        if warm:
            limit = max(WARM_MIN_ITER, (self._cold_iters or 0) // WARM_SHARE)
            status, it = self._run(True, limit)
            iters += it
            if status == MS.kOptimal:
                z = self._solution()
                r = self.residual(z)
                if r <= self.residual_tol(z):
                    self.stats["warm"] += 1
                    self._backoff = 0
                    return LpAnswer("optimal", z, iters, f"optimal; warm primal simplex, {iters} pivots", r)
            # missed the limit, or an answer to distrust: finish cold, skip warm starts for a while
            self.stats["warm_missed"] += 1
            self._backoff = min(MAX_BACKOFF, max(1, 2 * self._backoff))
            self._skip = self._backoff
            how = f"cold dual simplex after a warm attempt stopped ({self.h.modelStatusToString(status)}, {it} pivots)"
        status, it = self._run(False, None)
        iters += it
        self._cold_iters = it
        self.stats["cold"] += 1
        if status == MS.kOptimal:
            self._has_basis = True
            self._feasible = True
            z = self._solution()
            r = self.residual(z)
            if r > self.residual_tol(z):
                raise SolveError(f"highs ({self.label}): the LP answer violates the constraints by {r:.3g} "
                                 f"(allowed {self.residual_tol(z):.3g}).", status="infeasible_answer")
            return LpAnswer("optimal", z, iters, f"optimal; {how}, {iters} pivots", r)
        self._has_basis = False
        if status == MS.kUnboundedOrInfeasible:
            status = MS.kUnbounded if self._is_feasible() else MS.kInfeasible
        if status == MS.kUnbounded:
            self._feasible = True
            return LpAnswer("unbounded", None, iters, f"unbounded; {how}")
        if status == MS.kInfeasible:
            self._feasible = False
            return LpAnswer("infeasible", None, iters, f"infeasible; {how}")
        text = self.h.modelStatusToString(status)
        if status == MS.kTimeLimit:
            _check_time(f"highs LP ({self.label})")       # the caller's deadline passed: TimeLimitError
        raise SolveError(f"highs ({self.label}): the LP did not solve (HiGHS model status {text!r} after "
                         f"{iters} pivots).", status=text)

    def _is_feasible(self) -> bool:
        """Whether the constraints have a solution (a zero-cost solve; cached, they never change)."""
        if self._feasible is None:
            self.h.changeColsCost(self.n, self._idx, np.zeros(self.n))
            status, _ = self._run(False, None)
            self._has_basis = False
            if status not in (self._MS.kOptimal, self._MS.kInfeasible):
                # stopped before deciding (the caller's time limit): decide again next time
                _check_time(f"highs LP feasibility check ({self.label})")
                raise SolveError(f"highs ({self.label}): the feasibility check did not finish (HiGHS model status "
                                 f"{self.h.modelStatusToString(status)!r}).", status="undecided")
            self._feasible = status == self._MS.kOptimal
        return self._feasible


class LinprogWorkspace(_Arrays):
    """The same interface through scipy.optimize.linprog (HiGHS dual simplex, model rebuilt per call)."""

    engine = "linprog"

    def __init__(self, A_eq, b_eq, A_ub, b_ub, lo, hi, label="LP"):
        super().__init__(A_eq, b_eq, A_ub, b_ub, lo, hi, label)
        # linprog defaults every variable to >= 0: always pass explicit bounds
        self.bounds = np.column_stack([self.lo, self.hi]) / self.unit
        self._feasible = None

    def _linprog(self, c):
        from scipy.optimize import linprog
        me, mu = self.A_eq.shape[0], self.A_ub.shape[0]
        u = self.unit
        return linprog(_unit_costs(c), A_ub=self.A_ub if mu else None, b_ub=self.b_ub / u if mu else None,
                       A_eq=self.A_eq if me else None, b_eq=self.b_eq / u if me else None, bounds=self.bounds,
                       method="highs-ds", options=dict(primal_feasibility_tolerance=FEASIBILITY_TOL,
                                                       dual_feasibility_tolerance=FEASIBILITY_TOL))

    def minimize(self, c) -> LpAnswer:
        res = self._linprog(np.asarray(c, dtype=float))
        it = int(getattr(res, "nit", 0) or 0)
        if res.status == 0 and res.x is not None:
            z = np.asarray(res.x, dtype=float) * self.unit
            r = self.residual(z)
            if r > self.residual_tol(z):
                raise SolveError(f"highs ({self.label}): the LP answer violates the constraints by {r:.3g} "
                                 f"(allowed {self.residual_tol(z):.3g}).", status="infeasible_answer")
            self._feasible = True
            return LpAnswer("optimal", z, it, f"optimal; linprog highs-ds, {it} pivots", r)
        if res.status in (2, 3):
            # linprog may say 'infeasible' for 'infeasible or unbounded': decide with a zero-cost solve
            if self._feasible is None:
                self._feasible = self._linprog(np.zeros(self.n)).status == 0
            kind = "unbounded" if self._feasible else "infeasible"
            return LpAnswer(kind, None, it, f"{kind}; linprog: {res.message}")
        raise SolveError(f"highs ({self.label}): the LP did not solve (linprog status {res.status}: "
                         f"{res.message}).", status=str(res.status))
