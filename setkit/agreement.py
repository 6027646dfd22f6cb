"""Agreement with the cvxpy reference: the one module that compares a set's operators with it.

``setkit.verify``, ``setkit verify``, ``setkit compare``, :mod:`setkit.testing` and the project's
own tests all take from here:

* the reference routes: :data:`REFERENCE_ROUTES` and :func:`reference` make a set whose
  projection, LMO and support are solved by the cvxpy reference backend (Clarabel); the other
  operators keep their routes, so reference distances are always measured from the reference
  projection, ``||x - p_ref||`` (:meth:`ReferenceComparison.ref_distances`);
* the seeded inputs: :func:`seeded_points` (inside, near, at the set's scale, far, tiny 1e-3,
  huge 1e6) and :func:`seeded_directions` (Gaussian, rounded so that ties occur, all-ones,
  tiny, huge);
* the error measures. With ``s = max(1, data scale)`` (:func:`data_scale`) an answer for the
  point y may be off by ``rtol * max(1, ||y||_inf) * s`` (:func:`point_scale`), a value for
  the direction c by ``rtol * ||c|| * s`` (:func:`direction_scale`); ``rtol = 2e-5``
  (:data:`DEFAULT_RTOL`) unless a caller asks for less. Gaps are measured by
  :func:`point_gaps`, :func:`value_gaps` and :func:`objective_gaps`;
* :class:`ReferenceComparison`: the seeded inputs of one set and its cached reference answers;
* :func:`verify`, one report row per operator, and :func:`compare_backends`, every provider
  of each operator timed and measured against the same reference answers.
"""
from __future__ import annotations

import time
from dataclasses import dataclass, field

import numpy as np

from .errors import SetkitError, UnboundedDirectionError

__all__ = ["REFERENCE_ROUTES", "DEFAULT_RTOL", "COMPARED_OPERATORS", "reference", "data_scale", "point_scale",
           "direction_scale", "point_gaps", "value_gaps", "objective_gaps", "seeded_points",
           "seeded_directions", "lmo_rows", "support_rows", "ReferenceComparison", "CheckRow", "Report",
           "verify", "verify_large", "reference_pilot", "DIRECT_DIM", "providers", "compare_backends"]

REFERENCE_ROUTES = {"project": "reference", "lmo": "reference", "support": "reference"}
# the interior-point reference stops at a relative duality gap of about 1e-10, which bounds its
# point error only by about sqrt(gap) relative to the scale near degenerate faces
DEFAULT_RTOL = 2e-5
COMPARED_OPERATORS = ("project", "distance", "lmo", "support")


# -- the reference and the error measures ---------------------------------------------------------
def reference(K, loose: bool = False):
    """``K`` with projection, LMO and support served by the cvxpy reference backend.

    ``loose=True`` keeps an answer the solver flags as inaccurate (with an AccuracyWarning)
    instead of raising; comparisons at ``rtol`` then show whether it was accurate enough.

    >>> import setkit
    >>> R = reference(setkit.compile({"kind": "simplex", "dim": 3}))
    >>> R.routes()["project"].provider, R.routes()["lmo"].provider
    ('reference', 'reference')
    """
    return K.with_backends(**REFERENCE_ROUTES, loose=True) if loose else K.with_backends(**REFERENCE_ROUTES)


def data_scale(K) -> float:
    """``s = max(1, K.node.scale())``, the size of the set's data that tolerances are relative to."""
    return max(1.0, float(K.node.scale()))


def point_scale(X, s: float) -> np.ndarray:
    """``max(1, ||x||_inf) * s`` for each row x of the flat batch ``X``; O(b dim).

    >>> point_scale(np.array([[0.5, -3.0], [0.0, 0.0]]), 2.0).tolist()
    [6.0, 2.0]
    """
    X = np.asarray(X, dtype=float)
    return np.maximum(1.0, np.abs(X).max(axis=1)) * s


def direction_scale(C, s: float) -> np.ndarray:
    """``||c||_2 * s`` for each row c of the flat batch ``C`` (at least 1e-300); O(b dim).

    >>> direction_scale(np.array([[3.0, 4.0]]), 2.0).tolist()
    [10.0]
    """
    C = np.asarray(C, dtype=float)
    return np.maximum(np.linalg.norm(C, axis=1), 1e-300) * s


def point_gaps(P, Q) -> np.ndarray:
    """``||p - q||_2`` row by row for two flat batches of points; O(b dim).

    >>> point_gaps(np.array([[0.0, 0.0]]), np.array([[3.0, 4.0]])).tolist()
    [5.0]
    """
    return np.linalg.norm(np.asarray(P, float) - np.asarray(Q, float), axis=1)


def value_gaps(v, w) -> np.ndarray:
    """``|v - w|`` entry by entry; equal infinities count 0, any other NaN counts as +inf.

    >>> value_gaps([1.0, np.inf, np.inf, np.nan], [1.5, np.inf, 2.0, 0.0]).tolist()
    [0.5, 0.0, inf, inf]
    """
    v = np.asarray(v, dtype=float).reshape(-1)
    w = np.asarray(w, dtype=float).reshape(-1)
    same_inf = np.isinf(v) & np.isinf(w) & (np.sign(v) == np.sign(w))
    with np.errstate(invalid="ignore"):
        gaps = np.where(same_inf, 0.0, np.abs(v - w))
    return np.nan_to_num(gaps, nan=np.inf, posinf=np.inf)


def objective_gaps(C, L, Lr):
    """Objective gaps ``|<c, x> - <c, x_ref>|`` of two LMO answers per direction.

    ``L`` and ``Lr`` are sequences of flat points or None (the set is unbounded along -c).
    Returns ``(gaps, values, reference_values)``; a disagreement on boundedness is an
    infinite gap, agreement on unboundedness a zero gap; values are None where unbounded.

    >>> g, v, vr = objective_gaps(np.array([[1.0, 0.0], [0.0, 1.0]]), [np.array([2.0, 0.0]), None],
    ...                           [np.array([1.5, 9.0]), None])
    >>> g.tolist(), v, vr
    ([0.5, 0.0], [2.0, None], [1.5, None])
    """
    gaps, got, want = [], [], []
    for c, x, xr in zip(np.asarray(C, float), L, Lr):
        v = None if x is None else float(c @ x)
        vr = None if xr is None else float(c @ xr)
        if v is None or vr is None:
            gaps.append(0.0 if v is None and vr is None else np.inf)
        else:
            gaps.append(abs(v - vr))
        got.append(v)
        want.append(vr)
    return np.array(gaps, dtype=float), got, want


# -- seeded inputs ----------------------------------------------------------------------------------
def _flat(K, A, b):
    return np.asarray(A, dtype=float).reshape(b, K.dim)


def seeded_points(K, n: int, rng, inside_by=None):
    """Seeded test points of ``K`` as ``(X, labels)``: a flat ``(4 n + 2, dim)`` batch.

    In order: n points of the set (the projections of the next group by ``inside_by``, a
    DecisionSet, by default the reference), n points near the set (noise 1e-3 s), n Gaussian
    points at the set's scale s, n far points (scale 1e3 s), one tiny point (scale 1e-3) and
    one huge point (scale 1e6 s). Draws from ``rng`` in that order: Gaussian, noise, far, tiny,
    huge, so the first 4 n rows do not depend on the last two.
    """
    d, s = K.dim, data_scale(K)
    by = reference(K) if inside_by is None else inside_by
    raw = rng.standard_normal((n, d)) * s
    inside = _flat(K, by.project(raw.reshape((n,) + K.shape)), n)
    groups = [
        (inside, "a point of the set"),
        (inside + 1e-3 * s * rng.standard_normal((n, d)), "near the set (noise 1e-3)"),
        (raw, "a Gaussian point at the set's scale"),
        (1e3 * s * rng.standard_normal((n, d)), "far from the set (scale 1e3)"),
        (1e-3 * rng.standard_normal((1, d)), "a tiny point (scale 1e-3)"),
        (1e6 * s * rng.standard_normal((1, d)), "a huge point (scale 1e6)"),
    ]
    X = np.concatenate([g for g, _ in groups])
    return X, [lab for g, lab in groups for _ in range(len(g))]


def seeded_directions(K, n: int, rng):
    """Seeded test directions of ``K`` as ``(C, labels)``: a flat ``(2 n + 3, dim)`` batch.

    n Gaussian directions, n rounded Gaussian ones (ties likely), the all-ones direction (a full
    tie), one tiny (scale 1e-3) and one huge (scale 1e6). A row rounded to zero gets c_0 = 1
    (the zero direction has checks of its own).
    """
    d = K.dim
    groups = [
        (rng.standard_normal((n, d)), "a Gaussian direction"),
        (np.round(rng.standard_normal((n, d))), "a rounded direction (ties likely)"),
        (np.ones((1, d)), "the all-ones direction (a full tie)"),
        (1e-3 * rng.standard_normal((1, d)), "a tiny direction (scale 1e-3)"),
        (1e6 * rng.standard_normal((1, d)), "a huge direction (scale 1e6)"),
    ]
    C = np.concatenate([g for g, _ in groups])
    C[~np.any(C != 0, axis=1), 0] = 1.0
    return C, [lab for g, lab in groups for _ in range(len(g))]


def lmo_rows(K, C) -> list:
    """``K.lmo`` of each row of the flat batch ``C`` (batched first), None where unbounded."""
    try:
        return list(_flat(K, K.lmo(C.reshape((-1,) + K.shape)), len(C)))
    except UnboundedDirectionError:
        out = []
        for c in C:
            try:
                out.append(_flat(K, K.lmo(c.reshape(K.shape)), 1)[0])
            except UnboundedDirectionError:
                out.append(None)
        return out


def support_rows(K, C) -> np.ndarray:
    """``K.support`` of each row of the flat batch ``C`` (batched first), +inf where unbounded."""
    try:
        return np.asarray(K.support(C.reshape((-1,) + K.shape)), float).reshape(-1)
    except UnboundedDirectionError:
        out = []
        for c in C:
            try:
                out.append(float(K.support(c.reshape(K.shape))))
            except UnboundedDirectionError:
                out.append(np.inf)
        return np.array(out)


# -- one set's inputs and reference answers ----------------------------------------------------------
class ReferenceComparison:
    """Seeded inputs of one set and its reference answers, each computed once.

    ``points`` is the number of random inputs per group (:func:`seeded_points`,
    :func:`seeded_directions`); inputs are drawn from generators seeded by ``[seed, 1]``
    (points) and ``[seed, 2]`` (directions). ``seconds`` holds the time each cached
    reference answer took ("project", "lmo", "lmo_neg").
    """

    def __init__(self, K, seed: int = 0, points: int = 3, rtol: float = DEFAULT_RTOL):
        self.K = K
        self.seed = seed
        self.n = max(1, int(points))
        self.rtol = rtol
        self.ref = reference(K)
        self.s = data_scale(K)
        self.seconds = {}
        self._cache = {}

    def _get(self, key, make):
        if key not in self._cache:
            t0 = time.perf_counter()
            self._cache[key] = make()
            self.seconds[key] = time.perf_counter() - t0
        return self._cache[key]

    # inputs: (flat array (b, dim), list of labels)
    def inputs(self):
        return self._get("inputs", lambda: seeded_points(self.K, self.n, np.random.default_rng([self.seed, 1]),
                                                         self.ref))

    def directions(self):
        return self._get("directions", lambda: seeded_directions(self.K, self.n,
                                                                 np.random.default_rng([self.seed, 2])))

    def shaped(self, X):
        return X.reshape((-1,) + self.K.shape)

    def flat(self, A, b):
        return _flat(self.K, A, b)

    def point_scale(self, X):
        return point_scale(X, self.s)

    def dir_scale(self, C):
        return direction_scale(C, self.s)

    def point_tolerance(self, X):
        """``rtol * max(1, ||x||_inf) * s`` per row."""
        return self.rtol * self.point_scale(X)

    def direction_tolerance(self, C):
        """``rtol * ||c|| * s`` per row."""
        return self.rtol * self.dir_scale(C)

    # reference answers
    def ref_project_rows(self, X):
        return self.flat(self.ref.project(self.shaped(X)), len(X))

    def ref_projection(self):
        X, _ = self.inputs()
        return self._get("project", lambda: self.ref_project_rows(X))

    def ref_distances(self):
        """``||x - reference projection||`` for the seeded inputs."""
        X, _ = self.inputs()
        return point_gaps(X, self.ref_projection())

    def ref_distance_rows(self, X):
        """Distance of each row to the set, by the reference projection."""
        return point_gaps(X, self.ref_project_rows(X))

    def ref_lmo_rows(self, C):
        """Reference LMO per row; None where the set is unbounded along -c."""
        return lmo_rows(self.ref, C)

    def ref_lmo(self):
        C, _ = self.directions()
        return self._get("lmo", lambda: self.ref_lmo_rows(C))

    def ref_lmo_neg(self):
        C, _ = self.directions()
        return self._get("lmo_neg", lambda: self.ref_lmo_rows(-C))

    def ref_support(self):
        """Reference ``max <c, x>`` for the seeded directions (+inf where unbounded)."""
        C, _ = self.directions()
        return np.array([np.inf if x is None else float(c @ x) for c, x in zip(C, self.ref_lmo_neg())])

    def ref_support_rows(self, C):
        """Reference support per row, computed on unit directions (the support function is
        positively homogeneous; tiny directions such as y - p for y near K confuse the solver)."""
        norms = np.linalg.norm(C, axis=1)
        U = C / np.where(norms > 0, norms, 1.0)[:, None]
        return np.array([np.inf if x is None else float(nrm * (u @ x))
                         for u, nrm, x in zip(U, norms, self.ref_lmo_rows(-U))])

    def vertices(self):
        """A few extreme points of the set (reference LMO answers), where bounded."""
        L = [x for x in self.ref_lmo() if x is not None]
        return np.array(L[: self.n]) if L else np.zeros((0, self.K.dim))

    # membership: what must be accepted and what must be rejected
    def membership_tolerance(self):
        """``1e-5 * max(1, ||p||_inf) * s`` for each reference projection p."""
        return 1e-5 * self.point_scale(self.ref_projection())

    def far_from_the_set(self):
        """Which seeded inputs lie farther than ``1e-2 * max(1, ||x||_inf) * s`` from the set."""
        X, _ = self.inputs()
        return self.ref_distances() > 1e-2 * self.point_scale(X)


# -- verify: one row per operator ----------------------------------------------------------------
@dataclass(frozen=True)
class CheckRow:
    """One operator in a :class:`Report`: the largest relative error against what is allowed."""

    operator: str
    route: str
    cases: int
    max_error: float
    allowed: float
    ok: bool
    seconds: float
    reference_seconds: float
    note: str = ""


@dataclass(frozen=True)
class Report:
    """What :func:`verify` found: one :class:`CheckRow` per operator; ``ok`` if every row is.

    ``reference`` says how much reference work ran (``{"mode", "compared", "inputs", "skipped",
    "estimate_seconds", "reason"}``; see :func:`reference_plan`) and ``peak`` nothing but
    what the caller measured; both are in :meth:`as_dict` and :meth:`text`.
    """

    label: str
    shape: tuple
    rows: tuple = field(default_factory=tuple)
    reference: dict = field(default_factory=dict)

    @property
    def ok(self) -> bool:
        return all(r.ok for r in self.rows)

    def text(self) -> str:
        head = f"{self.label}, shape {self.shape}: " + ("all operators agree with the reference"
                                                         if self.ok else "DISAGREEMENT with the reference")
        lines = [head, f"  {'operator':<10} {'route':<10} {'cases':>5} {'max error':>11} {'allowed':>9} "
                       f"{'ms/call':>9} {'ref ms':>9}  verdict"]
        for r in self.rows:
            lines.append(f"  {r.operator:<10} {r.route:<10} {r.cases:>5} {r.max_error:>11.2e} {r.allowed:>9.1e} "
                         f"{1e3 * r.seconds / max(r.cases, 1):>9.3f} {1e3 * r.reference_seconds / max(r.cases, 1):>9.3f}"
                         f"  {'ok' if r.ok else 'FAIL'}{'  ' + r.note if r.note else ''}")
        if self.reference.get("mode") not in (None, "full"):
            lines.append(f"  reference: {self.reference.get('reason', '')}")
        return "\n".join(lines)

    def as_dict(self) -> dict:
        out = {"set": self.label, "shape": list(self.shape), "ok": self.ok,
               "rows": [r.__dict__.copy() for r in self.rows]}
        if self.reference:
            out["reference"] = dict(self.reference)
        return out


def _timed(fn, *a):
    t0 = time.perf_counter()
    out = fn(*a)
    return out, time.perf_counter() - t0


def _worst(errors) -> float:
    e = np.asarray(errors, dtype=float)
    return float(e.max()) if e.size else 0.0


# -- verify at scale: bounded reference work, reference-free checks, one point at a time -------------
DIRECT_DIM = 1000
"""Sets with more coordinates than this are verified by :func:`verify_large`."""
REFERENCE_BUDGET_SECONDS = 60.0
"""Default wall-clock budget of the reference solves of :func:`verify_large`."""
PILOT_SECONDS = 30.0
"""Time limit of the pilot reference solve (a subprocess)."""
PILOT_MEMORY_BYTES = 8 * 2 ** 30
"""Address-space limit of the pilot reference solve (a subprocess)."""

_PILOT = r"""
import json, pickle, resource, sys, time
import numpy as np
from setkit.agreement import reference
K, y = pickle.load(sys.stdin.buffer)
R = reference(K)
t0 = time.perf_counter()
R.project(y)
first = time.perf_counter() - t0
t0 = time.perf_counter()
R.project(1.5 * y)
second = time.perf_counter() - t0
print(json.dumps({"first": first, "second": second,
                  "peak_bytes": 1024 * resource.getrusage(resource.RUSAGE_SELF).ru_maxrss}))
"""


def reference_pilot(K, y, seconds: float = PILOT_SECONDS, memory_bytes: int = PILOT_MEMORY_BYTES) -> dict:
    """Time two reference projections of ``y`` (cold, then warm) in a subprocess with limits.

    The subprocess gets ``K`` and ``y`` pickled, an address-space limit of ``memory_bytes`` and a
    wall-clock limit of ``seconds``. Returns ``{"ok", "first", "second", "peak_bytes", "why"}``;
    ``ok`` is False (with ``why``) when it ran out of time or memory or failed.
    """
    import os
    import pickle
    import subprocess
    import sys
    from pathlib import Path

    def limit():  # pragma: no cover - runs in the child
        import resource
        resource.setrlimit(resource.RLIMIT_AS, (memory_bytes, memory_bytes))

    env = dict(os.environ)
    root = str(Path(__file__).resolve().parent.parent)
    env["PYTHONPATH"] = root + (os.pathsep + env["PYTHONPATH"] if env.get("PYTHONPATH") else "")
    env["SETKIT_QUIET_COMPILE"] = "1"
    out = {"ok": False, "first": None, "second": None, "peak_bytes": None, "why": ""}
    try:
        run = subprocess.run([sys.executable, "-c", _PILOT], input=pickle.dumps((K, y)), capture_output=True,
                             timeout=seconds, env=env, preexec_fn=limit if os.name == "posix" else None)
    except subprocess.TimeoutExpired:
        out["why"] = f"did not finish within its time limit of {seconds:g} s"
        return out
    if run.returncode != 0:
        err = run.stderr.decode(errors="replace").strip().splitlines()
        last = err[-1] if err else f"exit status {run.returncode}"
        if "MemoryError" in last or run.returncode in (-9, 137):
            ask = last[last.find("Unable to allocate"):].split(" for ")[0] if "Unable to allocate" in last else ""
            out["why"] = (f"ran out of its memory limit of {memory_bytes / 2 ** 30:.1f} GB"
                          + (f" (cvxpy's problem set-up: {ask.lower()})" if ask else ""))
        else:
            out["why"] = f"failed: {last[:160]}"
        return out
    import json
    try:
        got = json.loads(run.stdout.decode().strip().splitlines()[-1])
    except (ValueError, IndexError):
        out["why"] = "gave no timing"
        return out
    out.update(got, ok=True)
    return out


def _seeded_point(K, s, seed, group, i):
    """Input ``i`` of ``group`` for :func:`verify_large`, drawn from its own seeded generator."""
    d = K.dim
    rng = np.random.default_rng([seed, 1, group, i])
    if group == 0:   # a point of the set: K's own projection of a Gaussian point (the reference is too costly)
        return np.asarray(K.project(rng.standard_normal(d).reshape(K.shape) * s), float).reshape(d)
    if group == 1:   # near the set
        base = _seeded_point(K, s, seed, 0, i)
        return base + 1e-3 * s * rng.standard_normal(d)
    factor = {2: s, 3: 1e3 * s, 4: 1e-3, 5: 1e6 * s}[group]
    return factor * rng.standard_normal(d)


def _seeded_direction(K, seed, group, i):
    d = K.dim
    rng = np.random.default_rng([seed, 2, group, i])
    if group == 2:
        return np.ones(d)
    c = rng.standard_normal(d)
    if group == 1:
        c = np.round(c)
    elif group == 3:
        c = 1e-3 * c
    elif group == 4:
        c = 1e6 * c
    if not np.any(c != 0):
        c[0] = 1.0
    return c


POINT_GROUPS = ("a point of the set", "near the set (noise 1e-3)", "a Gaussian point at the set's scale",
                "far from the set (scale 1e3)", "a tiny point (scale 1e-3)", "a huge point (scale 1e6)")
DIRECTION_GROUPS = ("a Gaussian direction", "a rounded direction (ties likely)", "the all-ones direction",
                    "a tiny direction (scale 1e-3)", "a huge direction (scale 1e6)")


def verify_large(K, n_points: int = 4, seed: int = 0, rtol: float = DEFAULT_RTOL, *, progress=None,
                 reference_seconds: float = REFERENCE_BUDGET_SECONDS, pilot_seconds: float = PILOT_SECONDS,
                 pilot_memory_bytes: int = PILOT_MEMORY_BYTES) -> Report:
    """:func:`verify` for large sets: one point at a time, bounded reference work.

    Inputs: the groups of :func:`seeded_points` (``n_points`` per group, one tiny and one huge;
    the points of the set are K's own projections) and of :func:`seeded_directions`, each drawn
    from its own seeded generator, so only a few points are held at once (memory: a small
    multiple of one point). Checks that need no reference run on every input: the projection is
    accepted by ``contains`` and its Frank-Wolfe certificate bounds its error
    (``sqrt(2 gap) / (max(1, ||y||_inf) s)``), the distance equals ``||y - p||``, LMO answers are
    in K, no worse than the points of K already seen and consistent with the support function.
    The reference runs on as many inputs as fit in ``reference_seconds``, as measured by
    :func:`reference_pilot` (a subprocess with time and memory limits); the report's
    ``reference`` entry says how many inputs were compared and what was skipped.
    """
    say = progress if progress is not None else (lambda text: None)
    d, s = K.dim, data_scale(K)
    n = max(1, int(n_points))
    routes = K.routes()
    point_plan = [(g, i) for i in range(n) for g in range(4)] + [(4, 0), (5, 0)]
    dir_plan = [(g, i) for i in range(n) for g in range(2)] + [(2, 0), (3, 0), (4, 0)]
    ref_solves = len(point_plan) + 2 * len(dir_plan)
    # -- how much reference work fits
    say(f"pilot reference solve in a subprocess (limits {pilot_seconds:g} s, {pilot_memory_bytes / 2 ** 30:.0f} GB)")
    pilot = reference_pilot(K, _seeded_point(K, s, seed, 2, 0).reshape(K.shape), pilot_seconds, pilot_memory_bytes)
    if pilot["ok"]:
        per = max(float(pilot["second"]), 1e-6)
        budget_solves = int(reference_seconds // per)
        r_points = min(len(point_plan), (budget_solves + 1) // 2)
        r_dirs = min(len(dir_plan), max(0, (budget_solves - r_points) // 2))
        compared = r_points + r_dirs
        skipped = len(point_plan) + len(dir_plan) - compared
        ref = {"mode": "sampled" if skipped else "full", "compared": compared,
               "inputs": len(point_plan) + len(dir_plan), "skipped": skipped,
               "estimate_seconds": per * ref_solves, "pilot_seconds": [pilot["first"], pilot["second"]],
               "pilot_peak_bytes": pilot["peak_bytes"],
               "reason": (f"a reference projection took {per:.3g} s (pilot, warm; peak memory "
                          f"{pilot['peak_bytes'] / 2 ** 20:.0f} MB); {compared} of {len(point_plan) + len(dir_plan)} "
                          f"inputs compared within the {reference_seconds:g} s budget, {skipped} skipped "
                          f"(all of them would take about {per * ref_solves:.3g} s); every input has the "
                          f"reference-free checks")}
    else:
        r_points = r_dirs = 0
        ref = {"mode": "skipped", "compared": 0, "inputs": len(point_plan) + len(dir_plan),
               "skipped": len(point_plan) + len(dir_plan), "estimate_seconds": None,
               "pilot_seconds": None, "pilot_peak_bytes": None,
               "reason": (f"skipped: a pilot reference projection (cvxpy, Clarabel) {pilot['why']} at {d} "
                          f"coordinates; every input has the reference-free checks only")}
    R = reference(K) if (r_points or r_dirs) else None
    # sampled rows: spread over the groups (the plans are ordered round-robin over groups)
    err = {op: [] for op in ("project", "distance", "lmo", "support", "certificate")}
    secs = {op: 0.0 for op in ("project", "distance", "contains", "lmo", "support")}
    ref_secs = {"project": 0.0, "lmo": 0.0}
    wrong_members, member_cases = 0, 0
    pool = []              # a few points of K (projections) to check LMO answers against
    for idx, (g, i) in enumerate(point_plan):
        say(f"point {idx + 1}/{len(point_plan)}: {POINT_GROUPS[g]}")
        y = _seeded_point(K, s, seed, g, i)
        ys = y.reshape(K.shape)
        sc = float(point_scale(y[None, :], s)[0])
        p, t = _timed(K.project, ys)
        secs["project"] += t
        p = np.asarray(p, float).reshape(d)
        gap = float(np.asarray(K.certificate(ys, p.reshape(K.shape))).reshape(-1)[0])
        e_cert = float(np.sqrt(2 * max(gap, 0.0)) / sc) if np.isfinite(gap) else np.inf
        err["certificate"].append(e_cert)
        e = e_cert
        if idx < r_points:
            t0 = time.perf_counter()
            pr = np.asarray(R.project(ys), float).reshape(d)
            ref_secs["project"] += time.perf_counter() - t0
            e = max(e, float(np.linalg.norm(p - pr)) / sc)
        dist, t = _timed(K.distance, ys)
        secs["distance"] += t
        err["distance"].append(abs(float(dist) - float(np.linalg.norm(y - p))) / sc)
        accepted, t = _timed(K.contains, p.reshape(K.shape), 1e-5 * float(point_scale(p[None, :], s)[0]))
        secs["contains"] += t
        member_cases += 1
        if not bool(accepted):
            wrong_members += 1
            e = max(e, np.inf)
        if float(dist) > 1e-2 * sc:                 # far by K's own (certified) distance: must be rejected
            member_cases += 1
            wrong_members += int(bool(K.contains(ys)))
        err["project"].append(e)
        if len(pool) < 3 and g in (0, 2):
            pool.append(p)
        del y, ys, p
    unbounded = 0
    for idx, (g, i) in enumerate(dir_plan):
        say(f"direction {idx + 1}/{len(dir_plan)}: {DIRECTION_GROUPS[g]}")
        c = _seeded_direction(K, seed, g, i)
        cs = float(direction_scale(c[None, :], s)[0])
        try:
            x, t = _timed(K.lmo, c.reshape(K.shape))
        except UnboundedDirectionError:
            unbounded += 1
            continue
        secs["lmo"] += t
        x = np.asarray(x, float).reshape(d)
        v = float(c @ x)
        e = max(0.0, v - min((float(c @ z) for z in pool), default=v)) / cs
        member_cases += 1
        if not bool(K.contains(x.reshape(K.shape), 1e-5 * float(point_scale(x[None, :], s)[0]))):
            wrong_members += 1
            e = np.inf
        sup, t = _timed(K.support, (-c).reshape(K.shape))
        secs["support"] += t
        err["support"].append(abs(float(sup) + v) / cs)
        if idx < r_dirs:
            t0 = time.perf_counter()
            xr = np.asarray(R.lmo(c.reshape(K.shape)), float).reshape(d)
            ref_secs["lmo"] += time.perf_counter() - t0
            e = max(e, abs(v - float(c @ xr)) / cs)
        err["lmo"].append(e)
        del c, x
    rows = []
    notes = {"project": "certificate, membership" + (f"; reference on {r_points} of {len(point_plan)}"
                                                     if r_points else "; no reference"),
             "distance": "equals ||y - project(y)||",
             "lmo": "in K, no worse than seen points of K" + (f"; reference on {r_dirs} of {len(dir_plan)}"
                                                              if r_dirs else "; no reference")
                    + (f"; {unbounded} directions unbounded (not checked)" if unbounded else ""),
             "support": "support(-c) = -<c, lmo(c)>",
             "certificate": "sqrt(2 * Frank-Wolfe gap), bounds the projection error"}
    for op, cases in (("project", len(point_plan)), ("distance", len(point_plan))):
        w = _worst(err[op])
        rows.append(CheckRow(op, routes[op].provider, cases, w, rtol, w <= rtol, secs[op],
                             ref_secs["project"] if op == "project" else 0.0, notes[op]))
    rows.append(CheckRow("contains", routes["contains"].provider, member_cases, float(wrong_members), 0.0,
                         wrong_members == 0, secs["contains"], 0.0, "counts misclassified points"))
    if err["lmo"]:
        w = _worst(err["lmo"])
        rows.append(CheckRow("lmo", routes["lmo"].provider, len(err["lmo"]), w, rtol, w <= rtol, secs["lmo"],
                             ref_secs["lmo"], notes["lmo"]))
        w = _worst(err["support"])
        rows.append(CheckRow("support", routes["support"].provider, len(err["support"]), w, rtol, w <= rtol,
                             secs["support"], 0.0, notes["support"]))
    else:
        rows.append(CheckRow("lmo", routes["lmo"].provider, 0, 0.0, 0.0, True, 0.0, 0.0,
                             "set unbounded along every tested direction"))
    w = _worst(err["certificate"])
    rows.append(CheckRow("certificate", routes["project"].provider, len(point_plan), w, rtol, w <= rtol, 0.0, 0.0,
                         notes["certificate"]))
    return Report(K.node.label, K.shape, tuple(rows), ref)


def verify(K, n_points: int = 4, seed: int = 0, rtol: float = DEFAULT_RTOL, *, progress=None,
           reference_seconds: float = REFERENCE_BUDGET_SECONDS) -> Report:
    """Compare every operator of ``K`` with the cvxpy reference on seeded inputs.

    Sets of at most :data:`DIRECT_DIM` coordinates run the full comparison below. Larger sets
    take :func:`verify_large`: the same operators checked one point at a time by conditions that
    need no reference (constraints, the Frank-Wolfe certificate, LMO/support consistency), and the
    reference only on as many inputs as a measured pilot solve says fit in ``reference_seconds``
    (what it skips is stated in the report). ``progress``, if given, is called with a short text
    before each step.

    Points and directions are those of :class:`ReferenceComparison` (``n_points`` per
    group). Errors are relative, each row must stay within ``rtol``: projection
    ``||p - p_ref|| / (max(1, ||y||_inf) s)``, distance likewise, LMO objective gap
    ``|<c, x> - <c, x_ref>| / (||c|| s)`` together with the distance of the answer to K,
    support likewise; membership counts misclassified points (points of K rejected, points
    far from K accepted); the certificate row is ``sqrt(2 gap) / (max(1, ||y||_inf) s)`` with
    K's own Frank-Wolfe gap. Cost: about 11 n_points + 11 reference solves.

    >>> import setkit
    >>> verify(setkit.compile({"kind": "simplex", "dim": 3}), n_points=1).ok
    True
    """
    if K.dim > DIRECT_DIM:
        return verify_large(K, n_points=n_points, seed=seed, rtol=rtol, progress=progress,
                            reference_seconds=reference_seconds)
    say = progress if progress is not None else (lambda text: None)
    cmp = ReferenceComparison(K, seed=seed, points=n_points, rtol=rtol)
    routes = K.routes()
    say("reference projections of the seeded points")
    X, _ = cmp.inputs()
    b = len(X)
    scale = cmp.point_scale(X)
    rows = []
    say("project, distance, contains")

    P, t = _timed(K.project, cmp.shaped(X))
    P = cmp.flat(P, b)
    Pr = cmp.ref_projection()
    err = point_gaps(P, Pr) / scale
    rows.append(CheckRow("project", routes["project"].provider, b, _worst(err), rtol, bool(_worst(err) <= rtol),
                         t, cmp.seconds["project"]))
    D, t = _timed(K.distance, cmp.shaped(X))
    err = value_gaps(D, cmp.ref_distances()) / scale
    rows.append(CheckRow("distance", routes["distance"].provider, b, _worst(err), rtol,
                         bool(_worst(err) <= rtol), t, cmp.seconds["project"]))
    accepted, t = _timed(K.contains, cmp.shaped(Pr), cmp.membership_tolerance())
    far = cmp.far_from_the_set()
    wrong = int((~np.asarray(accepted, bool).reshape(-1)).sum())
    wrong += int(np.asarray(K.contains(cmp.shaped(X[far])), bool).sum()) if far.any() else 0
    rows.append(CheckRow("contains", routes["contains"].provider, b + int(far.sum()), float(wrong), 0.0,
                         wrong == 0, t, 0.0, "counts misclassified points"))

    say("lmo and support")
    C, _ = cmp.directions()
    cs = cmp.dir_scale(C)
    L, t = _timed(lmo_rows, K, C)
    Lr = cmp.ref_lmo()
    if all(x is None for x in L) and all(x is None for x in Lr):
        rows.append(CheckRow("lmo", routes["lmo"].provider, 0, 0.0, 0.0, True, 0.0, 0.0,
                             "set unbounded along every tested direction"))
    else:
        gaps, _, _ = objective_gaps(C, L, Lr)
        bounded = [x for x in L if x is not None]
        A = np.array(bounded) if bounded else np.zeros((0, K.dim))
        feasible = cmp.ref_distance_rows(A) / cmp.point_scale(A) if len(A) else np.zeros(0)
        e = max(_worst(gaps / cs), _worst(feasible))
        rows.append(CheckRow("lmo", routes["lmo"].provider, len(C), e, rtol, e <= rtol, t, cmp.seconds["lmo"],
                             "objective gap and distance of the answer to K"))
    S, t = _timed(support_rows, K, C)
    err = value_gaps(S, cmp.ref_support()) / cs
    rows.append(CheckRow("support", routes["support"].provider, len(C), _worst(err), rtol,
                         bool(_worst(err) <= rtol), t, cmp.seconds["lmo_neg"]))
    try:
        cert = np.asarray(K.certificate(cmp.shaped(X), cmp.shaped(P)), float).reshape(-1)
        e = _worst(np.sqrt(2 * np.maximum(cert, 0)) / scale)
        rows.append(CheckRow("certificate", routes["project"].provider, b, e, rtol, e <= rtol, 0.0, 0.0,
                             "sqrt(2 * Frank-Wolfe gap), bounds the projection error"))
    except SetkitError as exc:
        rows.append(CheckRow("certificate", "-", 0, 0.0, 0.0, True, 0.0, 0.0, f"not available: {exc}"[:120]))
    return Report(K.node.label, K.shape, tuple(rows),
                  {"mode": "full", "compared": b, "inputs": b, "skipped": 0, "estimate_seconds": 0.0,
                   "reason": "every seeded input compared with the reference"})


# -- backend comparison ------------------------------------------------------------------------------
def providers(K, op: str) -> list[str]:
    """Every provider that can serve ``op`` on ``K``, as the registries declare them, in the
    order routing prefers them.

    "native" when the family has a kernel for ``op``; each combinator strategy declared for the
    set's kind that serves ``op`` and accepts the set (by priority); "derived" when routing has
    a rule deriving ``op`` from another operator; then each registered backend (by priority)
    that serves ``op``, is installed and accepts the set. Each name is a valid
    ``K.with_backends(op=name)``.

    >>> import setkit
    >>> providers(setkit.compile({"kind": "simplex", "dim": 3}), "distance")[:2]
    ['native', 'derived']
    """
    from .backends import all_backends
    from .routing import DERIVED_RULES
    from .strategies import strategies_for
    out = []
    if op in K.node.kernels:
        out.append("native")
    out.extend(cls.name for cls in strategies_for(K.node.kind) if op in cls.operators and cls.accepts(K.node)[0])
    if op in DERIVED_RULES:
        out.append("derived")
    for name, cls in sorted(all_backends().items(), key=lambda kv: kv[1].priority):
        if op in cls.operators and cls.available() and cls.accepts(K.node)[0]:
            out.append(name)
    return out


def _median_time(fn, arg, repeat):
    times, out = [], None
    for _ in range(max(1, repeat)):
        t0 = time.perf_counter()
        out = fn(arg)
        times.append(time.perf_counter() - t0)
    return out, float(np.median(times))


def _answered_elsewhere(Kp, op, prov, X) -> list:
    """Notes of the rows that ``prov`` failed and the next backend of its fallback chain answered.

    Routing lets a failed generic solve fall back to the next backend (``routing.CHAINED``);
    judging a provider means judging its own answers, so such rows count as failures.
    """
    from .routing import CHAINED
    route = Kp.routes()[op]
    if op not in CHAINED or route.category != "backend":
        return []
    _, info = Kp.run(op, X)
    notes = [str(n) for n in (info.get("backend_status") or [])]
    return [n for n in notes if "answered by " in n and not n.endswith("answered by " + prov)]


def _reference_answers(cmp):
    """Reference answer per compared operator (an exception where the reference failed)."""
    out = {}
    try:
        out["project"] = cmp.ref_projection()
        out["distance"] = cmp.ref_distances()
    except SetkitError as exc:
        out["project"] = out["distance"] = exc
    try:
        out["lmo"] = cmp.ref_lmo()
        out["support"] = cmp.ref_support()
    except SetkitError as exc:
        out["lmo"] = out["support"] = exc
    return out


def compare_backends(K, n_points=4, seed=0, repeat=3, rtol=DEFAULT_RTOL, progress=None) -> list[dict]:
    """Time every provider of project, distance, lmo and support on the same seeded inputs and
    measure its largest relative gap to the reference (the measures of :func:`verify`).

    Returns one dict per (operator, provider) with the keys operator, provider, cases,
    ms_per_call (median of ``repeat`` calls), max_gap, allowed, agrees (None when not
    measured), failed (the provider raised a SetkitError) and note. ``progress``, if given,
    is an object with a ``total`` attribute and ``set_step(text)`` and ``advance(text)``.
    """
    cmp = ReferenceComparison(K, seed=seed, points=n_points, rtol=rtol)
    X, _ = cmp.inputs()
    C, _ = cmp.directions()
    Y, Cb = cmp.shaped(X), cmp.shaped(C)
    yscale, cscale = cmp.point_scale(X), cmp.dir_scale(C)
    plan = {op: providers(K, op) for op in COMPARED_OPERATORS}
    if progress is not None:
        progress.total = (progress.total or 0) + sum(map(len, plan.values()))
        progress.set_step("reference answers")
    baseline = _reference_answers(cmp)
    rows = []
    for op in COMPARED_OPERATORS:
        points = op in ("project", "distance")
        inp = Y if points else Cb
        for prov in plan[op]:
            if progress is not None:
                progress.set_step(f"{op} by {prov}")
            row = {"operator": op, "provider": prov, "cases": len(inp), "ms_per_call": None,
                   "max_gap": None, "allowed": rtol, "agrees": None, "failed": False, "note": ""}
            try:
                Kp = K.with_backends(**{op: prov})
                out, t = _median_time(getattr(Kp, op), inp, repeat)
                row["ms_per_call"] = 1e3 * t / len(inp)
                want = baseline[op]
                elsewhere = _answered_elsewhere(Kp, op, prov, X if points else C)
                if elsewhere:
                    row["failed"] = True
                    row["note"] = (f"{len(elsewhere)} of {len(inp)} rows failed and were answered by the "
                                   f"fallback: {elsewhere[0]}")[:200]
                elif isinstance(want, Exception):
                    row["note"] = f"no reference answer: {want}"[:100]
                else:
                    if op == "project":
                        gaps = point_gaps(cmp.flat(out, len(X)), want) / yscale
                    elif op == "lmo":
                        gaps = objective_gaps(C, list(cmp.flat(out, len(C))), want)[0] / cscale
                    else:
                        gaps = value_gaps(out, want) / (yscale if points else cscale)
                    row["max_gap"] = _worst(gaps)
                    row["agrees"] = bool(row["max_gap"] <= rtol)
            except UnboundedDirectionError as exc:
                row["note"] = f"unbounded: {exc}"[:160]
            except SetkitError as exc:
                row["note"] = f"{type(exc).__name__}: {exc}"[:200]
                row["failed"] = True
            rows.append(row)
            if progress is not None:
                progress.advance(f"{op} by {prov}")
    return rows
