"""Conformance checks for your own sets and families, for use in your test suite.

One call proves every operator of a set against the cvxpy reference and
against certificates that need no reference, on seeded random inputs (points
inside, near, far, at scales 1e-3 .. 1e6, vertices; directions with ties,
zeros and extreme scales; batches)::

    import setkit, setkit.testing
    K = setkit.compile({"kind": "simplex", "dim": 4})
    setkit.testing.check_set(K, seed=0)          # raises AssertionError on any failure

A failure shows the check, the input, setkit's answer, the reference answer
and the gap against the allowed tolerance. To get one pytest case per check::

    @setkit.testing.parametrize(K)
    def test_my_set(check):
        check()

Families are checked over their small example instances (the optional
classmethods ``examples()`` -> list of spec dicts and ``random_example(rng)``
-> one spec dict) with :func:`check_family`. Hypothesis strategies for points
and directions of a set are :func:`points` and :func:`directions`.

The bar (tolerances are relative to the size of the input and of the set's
data, ``s = max(1, K.node.scale())``):

* projection within ``rtol * max(1, |y|_inf) * s`` of the reference, in the set,
  a fixed point on points of the set, and a Frank-Wolfe certificate (computed
  with the reference support function) below the same bound;
* distance within the same bound of ``||y - reference projection||``;
* LMO objective within ``rtol * |c| * s`` of the reference minimum, answer in the set;
  unbounded directions raise :class:`~setkit.errors.UnboundedDirectionError`;
* support within ``rtol * |c| * s`` of the reference, positively homogeneous, 0 at c = 0;
* membership accepts points of the set and rejects points far from it;
* batched calls equal one-by-one calls and have the documented shapes;
* bad inputs (wrong shape, NaN) raise :class:`~setkit.errors.InputError`;
* when available, the penalty equals ``G * distance``, the Moreau penalty's value and gradient
  match their definitions with the reference projection, and the vertex centroid lies in the set.
"""
from __future__ import annotations

import math
import time
from dataclasses import dataclass
from typing import Callable

import numpy as np

from .agreement import (DEFAULT_RTOL, REFERENCE_ROUTES, ReferenceComparison, data_scale, lmo_rows, objective_gaps,
                        point_gaps, support_rows, value_gaps)
from .errors import InputError, SetkitError, SolveError, UnboundedDirectionError, UnsupportedOperationError

__all__ = ["check_set", "check_derivatives", "check_kl_projection", "check_family", "checks", "family_checks", "parametrize", "points", "directions",
           "CheckOutcome", "REFERENCE_ROUTES"]


@dataclass(frozen=True)
class CheckOutcome:
    """The result of one passing check: its name, how many cases it ran, and ``worst``, the
    largest gap divided by its allowed value (at most 1 for a pass; 0 for yes/no checks)."""

    name: str
    cases: int
    worst: float
    allowed: float
    seconds: float
    note: str = ""


class _Skip(Exception):
    """A check that does not apply to this set (for example no centroid module)."""


def _fmt(v, width=6) -> str:
    if v is None:
        return "(none: the set is unbounded in this direction)"
    a = np.asarray(v, dtype=float)
    if a.ndim == 0:
        return f"{float(a):.{width + 3}g}"
    return np.array2string(a, precision=width, max_line_width=100, threshold=40, separator=", ")


def _raise_worst(name, K, what, gaps, allowed, X, labels, got, want, note=""):
    """Raise an AssertionError for the case with the largest gap/allowed ratio."""
    ratio = np.asarray(gaps, float) / np.maximum(np.asarray(allowed, float), 1e-300)
    bad = np.flatnonzero(~(ratio <= 1.0))
    if bad.size == 0:
        return
    i = int(bad[np.argmax(np.nan_to_num(ratio[bad], nan=np.inf))])
    al = np.broadcast_to(np.asarray(allowed, float), ratio.shape)
    shape = K.shape
    def show(v):
        if v is None:
            return _fmt(None)
        a = np.asarray(v, dtype=float)
        return _fmt(a.reshape(shape) if a.size == K.dim and a.ndim >= 1 else a)

    raise AssertionError(
        f"setkit conformance: {name} failed on {K.node.label} (shape {shape}): {what}\n"
        f"  {bad.size} of {len(ratio)} cases fail; the worst is case {i} ({labels[i]})\n"
        f"  input:     {show(X[i])}\n"
        f"  setkit:    {show(None if got is None else got[i])}\n"
        f"  reference: {show(None if want is None else want[i])}\n"
        f"  gap:       {float(np.asarray(gaps)[i]):.3e} (allowed {float(al[i]):.3e})"
        + (f"\n  note: {note}" if note else ""))


# -- the checks ---------------------------------------------------------------------------------
def _project_reference(ctx):
    K = ctx.K
    X, labels = ctx.inputs()
    P = ctx.flat(K.project(ctx.shaped(X)), len(X))
    Pr = ctx.ref_projection()
    allowed = ctx.point_tolerance(X)
    gaps = point_gaps(P, Pr)
    _raise_worst("project/reference", K, "the projection differs from the reference projection",
                 gaps, allowed, X, labels, P, Pr, "gap = ||setkit - reference||")
    return len(X), float((gaps / allowed).max()), ctx.rtol


def _project_certificate(ctx):
    """p must lie in K and its Frank-Wolfe gap (with the reference support) must be small."""
    K = ctx.K
    X, labels = ctx.inputs()
    P = ctx.flat(K.project(ctx.shaped(X)), len(X))
    allowed = ctx.point_tolerance(X)
    dist_in = ctx.ref_distance_rows(P)
    _raise_worst("project/feasible", K, "the projection is not a point of the set",
                 dist_in, allowed, X, labels, P, ctx.ref_projection(),
                 "gap = distance of setkit's answer to the set (by the reference)")
    R = X - P
    sup = ctx.ref_support_rows(R)
    gap = sup - np.einsum("ij,ij->i", R, P)
    # (1/2)||p - p*||^2 <= gap for p in K, and ||p - p*|| <= ||y - p|| + ||y - p*|| <= 2 ||y - p||
    bound = np.minimum(np.sqrt(2.0 * np.maximum(gap, 0.0)), 2.0 * np.linalg.norm(R, axis=1))
    _raise_worst("project/certificate", K,
                 "the Frank-Wolfe certificate min(sqrt(2 (support(y-p) - <y-p, p>)), 2 ||y-p||) is too large",
                 bound, allowed, X, labels, P, ctx.ref_projection(),
                 "the certificate bounds ||p - p*||; the reference support function was used")
    return 2 * len(X), float(max((dist_in / allowed).max(), (bound / allowed).max())), ctx.rtol


def _project_fixed_points(ctx):
    K = ctx.K
    X, _ = ctx.inputs()
    pts = [ctx.ref_projection()[: ctx.n]]
    labels = ["a point of the set (reference projection)"] * ctx.n
    V = ctx.vertices()
    if len(V):
        pts.append(V)
        labels += ["an extreme point of the set (reference LMO)"] * len(V)
    Z = np.concatenate(pts)
    P = ctx.flat(K.project(ctx.shaped(Z)), len(Z))
    allowed = ctx.point_tolerance(Z)
    gaps = point_gaps(P, Z)
    _raise_worst("project/fixed-points", K, "projecting a point of the set moved it",
                 gaps, allowed, Z, labels, P, Z, "the reference answer is the input itself")
    return len(Z), float((gaps / allowed).max()), ctx.rtol


def _distance_reference(ctx):
    K = ctx.K
    X, labels = ctx.inputs()
    D = np.asarray(K.distance(ctx.shaped(X)), float).reshape(-1)
    Dr = ctx.ref_distances()
    allowed = ctx.point_tolerance(X)
    gaps = value_gaps(D, Dr)
    _raise_worst("distance/reference", K, "the distance differs from ||y - reference projection||",
                 gaps, allowed, X, labels, D, Dr)
    return len(X), float((gaps / allowed).max()), ctx.rtol


def _lmo_reference(ctx):
    K = ctx.K
    C, labels = ctx.directions()
    L = lmo_rows(K, C)
    Lr = ctx.ref_lmo()
    allowed = ctx.direction_tolerance(C)
    # where the reference finds the set unbounded, setkit must say so, not return a point
    gaps, got, want = objective_gaps(C, L, Lr)
    _raise_worst("lmo/reference", K, "the LMO objective <c, lmo(c)> differs from the reference minimum "
                 "(or boundedness disagrees)", gaps, allowed, C, labels, got, want,
                 "values shown are objectives <c, x>")
    ok = [i for i, x in enumerate(L) if x is not None]
    if ok:
        A = np.array([L[i] for i in ok])
        din = ctx.ref_distance_rows(A)
        al = ctx.point_tolerance(A)
        _raise_worst("lmo/feasible", K, "the LMO answer is not a point of the set", din, al,
                     C[ok], [labels[i] for i in ok], A, [Lr[i] for i in ok],
                     "gap = distance of setkit's answer to the set (by the reference)")
    return len(C), float(np.nanmax(np.where(np.isfinite(gaps), gaps / allowed, 0.0))), ctx.rtol


def _support_reference(ctx):
    K = ctx.K
    C, labels = ctx.directions()
    S = support_rows(K, C)
    Sr = ctx.ref_support()
    allowed = ctx.direction_tolerance(C)
    gaps = value_gaps(S, Sr)
    _raise_worst("support/reference", K, "the support function differs from the reference max <c, x>",
                 gaps, allowed, C, labels, S, Sr)
    return len(C), float(np.max(np.where(np.isfinite(gaps), gaps / allowed, 0.0))), ctx.rtol


def _support_homogeneity(ctx):
    """support(t c) = t support(c) for t > 0, and support(0) = 0 (positive homogeneity)."""
    K = ctx.K
    C, labels = ctx.directions()
    S = support_rows(K, C)
    fin = np.flatnonzero(np.isfinite(S))
    if fin.size == 0:
        raise _Skip("the set is unbounded along every tested direction")
    gaps, allowed, got, want, lab, inp = [], [], [], [], [], []
    for t in (1e-3, 7.0, 1e5):
        St = support_rows(K, t * C[fin])
        gaps.append(value_gaps(St, t * S[fin]))
        allowed.append(t * ctx.direction_tolerance(C[fin]))
        got.append(St)
        want.append(t * S[fin])
        lab += [f"{labels[i]}, scaled by {t:g}" for i in fin]
        inp.append(t * C[fin])
    zero = np.zeros((1, K.dim))
    z = float(np.asarray(K.support(zero.reshape(K.shape))))
    gaps.append(np.array([abs(z)]))
    allowed.append(np.array([ctx.rtol * ctx.s]))
    got.append(np.array([z]))
    want.append(np.array([0.0]))
    lab.append("the zero direction")
    inp.append(zero)
    g = np.concatenate(gaps)
    a = np.concatenate(allowed)
    _raise_worst("support/homogeneity", K, "support(t c) != t support(c) (or support(0) != 0)", g, a,
                 np.concatenate(inp), lab, np.concatenate(got), np.concatenate(want),
                 "the reference column shows t * support(c)")
    return len(g), float((g / a).max()), ctx.rtol


def _lmo_zero_direction(ctx):
    """lmo(0) may be any point of the set, but it must be one."""
    K = ctx.K
    zero = np.zeros(K.shape)
    try:
        x = ctx.flat(K.lmo(zero), 1)
    except UnboundedDirectionError as exc:
        raise AssertionError(f"setkit conformance: lmo/zero-direction failed on {K.node.label}: lmo(0) raised "
                             f"UnboundedDirectionError ({exc}); every point of a nonempty set minimizes <0, x>.")
    d = ctx.ref_distance_rows(x)
    al = ctx.point_tolerance(x)
    _raise_worst("lmo/zero-direction", K, "lmo(0) is not a point of the set", d, al, zero.reshape(1, -1),
                 ["the zero direction"], x, None)
    return 1, float((d / al).max()), ctx.rtol


def _contains(ctx):
    K = ctx.K
    X, labels = ctx.inputs()
    Pr = ctx.ref_projection()
    inside = np.asarray(K.contains(ctx.shaped(Pr), tol=ctx.membership_tolerance()), bool).reshape(-1)
    bad_in = (~inside).astype(float)
    _raise_worst("contains/points-of-the-set", K, "contains() rejects a point of the set "
                 "(tol = 1e-5 * scale)", bad_in, np.zeros(len(Pr)) + 0.5, Pr, ["the reference projection of " + lab
                                                                               for lab in labels],
                 inside.astype(float), np.ones(len(Pr)), "values: 1 = contained, 0 = not")
    far = ctx.far_from_the_set()
    got = np.asarray(K.contains(ctx.shaped(X)), bool).reshape(-1)
    wrong = (got & far).astype(float)
    _raise_worst("contains/points-outside", K, "contains() accepts a point far from the set "
                 "(reference distance > 1e-2 * scale)", wrong, np.zeros(len(X)) + 0.5, X, labels,
                 got.astype(float), (~far).astype(float), "values: 1 = contained, 0 = not")
    return len(Pr) + int(far.sum()), 0.0, 0.0


def _violation(ctx):
    K = ctx.K
    X, labels = ctx.inputs()
    v = np.asarray(K.violation(ctx.shaped(X)), float).reshape(-1)
    if np.all(np.isnan(v)):
        raise _Skip("the set offers no violation measure")
    Pr = ctx.ref_projection()
    vin = np.asarray(K.violation(ctx.shaped(Pr)), float).reshape(-1)
    al = ctx.membership_tolerance()
    _raise_worst("violation/points-of-the-set", K, "violation() is positive at a point of the set", vin, al, Pr,
                 labels, vin, np.zeros(len(vin)))
    Dr = ctx.ref_distances()
    far = ctx.far_from_the_set()
    wrong = (far & ~(v > 0)).astype(float)
    _raise_worst("violation/points-outside", K, "violation() is 0 at a point far from the set", wrong,
                 np.zeros(len(X)) + 0.5, X, labels, v, Dr, "the reference column shows the distance")
    return len(X) + len(Pr), 0.0, 0.0


def _batches(ctx):
    """A (2, 3, *shape) batch equals the same inputs one by one, with the documented shapes."""
    K = ctx.K
    X, labels = ctx.inputs()
    C, _ = ctx.directions()
    rng = np.random.default_rng([ctx.seed, 3])
    Y = X[rng.integers(0, len(X), 6)]
    Yb = Y.reshape((2, 3) + K.shape)
    problems = []

    def same(a, b, tol):
        a, b = np.asarray(a, float), np.asarray(b, float)
        return a.shape == b.shape and np.all(np.abs(a - b) <= tol)

    P = K.project(Yb)
    if P.shape != (2, 3) + K.shape:
        problems.append(f"project of a batch of shape {Yb.shape} returned shape {P.shape}")
    else:
        one = np.stack([K.project(y.reshape(K.shape)) for y in Y]).reshape(P.shape)
        tol = 1e-9 * ctx.point_scale(Y).max()
        if not same(P, one, tol):
            err = float(np.abs(P - one).max())
            problems.append(f"project: batched and one-by-one answers differ by {err:.3e} (allowed {tol:.1e})")
    D = K.distance(Yb)
    if np.shape(D) != (2, 3):
        problems.append(f"distance of a batch of shape {Yb.shape} returned shape {np.shape(D)}; expected (2, 3)")
    d0 = K.distance(Y[0].reshape(K.shape))
    if np.ndim(d0) != 0:
        problems.append(f"distance of one point returned shape {np.shape(d0)}; expected a scalar")
    Cb = C[:6] if len(C) >= 6 else np.resize(C, (6, K.dim))
    try:
        L = K.lmo(Cb.reshape((2, 3) + K.shape))
        if L.shape != (2, 3) + K.shape:
            problems.append(f"lmo of a batch returned shape {L.shape}; expected {(2, 3) + K.shape}")
        else:
            vals = np.einsum("ij,ij->i", Cb, L.reshape(6, -1))
            one = np.array([c @ K.lmo(c.reshape(K.shape)).reshape(-1) for c in Cb])
            tol = 1e-9 * ctx.dir_scale(Cb).max() * 10
            if not same(vals, one, tol):
                problems.append(f"lmo: batched and one-by-one objectives differ by {np.abs(vals - one).max():.3e}")
        S = K.support(Cb.reshape((2, 3) + K.shape))
        if np.shape(S) != (2, 3):
            problems.append(f"support of a batch returned shape {np.shape(S)}; expected (2, 3)")
        s0 = K.support(Cb[0].reshape(K.shape))
        if np.ndim(s0) != 0:
            problems.append(f"support of one direction returned shape {np.shape(s0)}; expected a scalar")
    except UnboundedDirectionError:
        pass
    M = K.contains(Yb)
    if np.shape(M) != (2, 3):
        problems.append(f"contains of a batch returned shape {np.shape(M)}; expected (2, 3)")
    if problems:
        raise AssertionError(f"setkit conformance: batch/shapes failed on {K.node.label} (shape {K.shape}):\n  "
                             + "\n  ".join(problems) + f"\n  batch input (flat rows):\n{_fmt(Y)}")
    return 6, 0.0, 0.0


def _bad_inputs(ctx):
    K = ctx.K
    wrong = np.zeros(K.dim + 1)
    nan = np.zeros(K.shape)
    nan.reshape(-1)[0] = np.nan
    problems = []
    for op in ("project", "distance", "lmo", "support", "contains"):
        for arg, what in ((wrong, f"an array of shape {wrong.shape}"), (nan, "an array holding NaN")):
            try:
                getattr(K, op)(arg)
            except InputError:
                continue
            except Exception as exc:  # noqa: BLE001 - reported as a failure
                problems.append(f"{op}({what}) raised {type(exc).__name__} instead of InputError: {exc}")
                continue
            problems.append(f"{op}({what}) returned an answer instead of raising InputError")
    if problems:
        raise AssertionError(f"setkit conformance: inputs/rejected failed on {K.node.label}:\n  "
                             + "\n  ".join(problems))
    return 10, 0.0, 0.0


def _penalty(ctx):
    K = ctx.K
    G = 2.5
    try:
        pen = K.penalty(G)
    except (ImportError, UnsupportedOperationError, AttributeError, NotImplementedError) as exc:
        raise _Skip(f"no penalty available: {exc}")
    X, labels = ctx.inputs()
    Dr = ctx.ref_distances()
    v = np.array([float(pen.value(x.reshape(K.shape))) for x in X])
    allowed = G * ctx.point_tolerance(X)
    gaps = value_gaps(v, G * Dr)
    _raise_worst("penalty/value", K, "penalty(G).value(x) differs from G * reference distance", gaps, allowed,
                 X, labels, v, G * Dr)
    # the Moreau envelope (exact definition in the design): value G h(d), gradient G (x - p) / max(d, delta)
    delta = 0.1 * ctx.s
    pm = K.penalty(G, smoothing="moreau", width=delta)
    Pr = ctx.ref_projection()
    h = np.where(Dr <= delta, Dr ** 2 / (2 * delta), Dr - delta / 2)
    vm = np.array([float(pm.value(x.reshape(K.shape))) for x in X])
    gm = np.stack([np.asarray(pm.grad(x.reshape(K.shape)), float).reshape(-1) for x in X])
    gr = G * (X - Pr) / np.maximum(Dr, delta)[:, None]
    gv = value_gaps(vm, G * h)
    _raise_worst("penalty/moreau-value", K, "the Moreau penalty value differs from G h(reference distance)",
                 gv, allowed, X, labels, vm, G * h)
    gg = point_gaps(gm, gr)
    # the gradient divides the projection error by max(d, delta)
    gallowed = G * ctx.point_tolerance(X) / delta
    _raise_worst("penalty/moreau-gradient", K, "the Moreau penalty gradient differs from "
                 "G (x - p) / max(d, delta) with the reference projection", gg, gallowed, X, labels, gm, gr)
    return 3 * len(X), float(max((gaps / allowed).max(), (gv / allowed).max(), (gg / gallowed).max())), ctx.rtol


def _centroid(ctx):
    K = ctx.K
    try:
        c = K.centroid(measure="vertices")
    except (ImportError, UnsupportedOperationError, AttributeError, NotImplementedError, SetkitError) as exc:
        raise _Skip(f"no vertex centroid available: {type(exc).__name__}: {exc}"[:200])
    c = np.asarray(getattr(c, "point", c), float).reshape(1, -1)
    d = ctx.ref_distance_rows(c)
    al = 1e-4 * ctx.point_scale(c)
    _raise_worst("centroid/feasible", K, "the vertex centroid is not a point of the set", d, al, c,
                 ["the vertex centroid"], c, None)
    return 1, float((d / al).max()), 1e-4


CHECKS: tuple[tuple[str, Callable], ...] = (
    ("project/reference", _project_reference),
    ("project/certificate", _project_certificate),
    ("project/fixed-points", _project_fixed_points),
    ("distance/reference", _distance_reference),
    ("lmo/reference", _lmo_reference),
    ("lmo/zero-direction", _lmo_zero_direction),
    ("support/reference", _support_reference),
    ("support/homogeneity", _support_homogeneity),
    ("contains", _contains),
    ("violation", _violation),
    ("batch/shapes", _batches),
    ("inputs/rejected", _bad_inputs),
    ("penalty/value", _penalty),
    ("centroid/feasible", _centroid),
)


def _as_set(target):
    from .decision_set import DecisionSet
    if isinstance(target, DecisionSet):
        return target
    from . import compile as _compile, load
    import os
    if isinstance(target, (str, os.PathLike)):
        return load(target)
    return _compile(target)


def checks(K, seed: int = 0, points: int = 3, rtol: float = DEFAULT_RTOL, only=None) -> list:
    """The conformance checks of one set as a list of ``(name, callable)`` pairs, not yet run.

    Each callable takes no argument, raises AssertionError on failure and
    returns a :class:`CheckOutcome` (``note`` says why a check was skipped).
    The checks share one cache of inputs and reference answers. The bar each
    check applies is stated in the module docstring.

    Parameters
    ----------
    K : DecisionSet, mapping, str or os.PathLike
        The set, a description or a description file.
    seed : int, default 0
        Seed of the random inputs.
    points : int, default 3
        Random inputs per category (inside, near, at the set's scale, far,
        tiny, huge).
    rtol : float, default 2e-5
        Relative tolerance of the comparisons with the reference.
    only : list of str, optional
        Keep the checks whose names start with one of these prefixes.

    Returns
    -------
    list of (str, callable)

    Notes
    -----
    Building the list is cheap; running a check costs a few reference
    (interior-point) solves per input.

    Examples
    --------
    >>> import setkit, setkit.testing
    >>> pairs = setkit.testing.checks(setkit.simplex(dim=3), only=["project"])
    >>> [name for name, _ in pairs]
    ['project/reference', 'project/certificate', 'project/fixed-points']
    >>> outcome = pairs[0][1]()
    >>> outcome.name, outcome.worst <= 1
    ('project/reference', True)
    """
    K = _as_set(K)
    ctx = ReferenceComparison(K, seed, points, rtol)
    out = []
    for name, fn in CHECKS:
        if only is not None and not any(name.startswith(o) for o in only):
            continue

        def run(fn=fn, name=name):
            t0 = time.perf_counter()
            try:
                cases, worst, allowed = fn(ctx)
                note = ""
            except _Skip as sk:
                cases, worst, allowed, note = 0, 0.0, 0.0, f"skipped: {sk}"
            return CheckOutcome(name, cases, worst, allowed, time.perf_counter() - t0, note)
        run.__name__ = "check_" + name.replace("/", "_").replace("-", "_")
        out.append((name, run))
    return out


def check_set(K, seed: int = 0, points: int = 3, rtol: float = DEFAULT_RTOL, only=None) -> list:
    """Run every conformance check on ``K``; raise one AssertionError listing every failure.

    Every operator is compared with the cvxpy reference and with certificates
    that need no reference, on seeded inputs (the bar is stated in the module
    docstring).

    Parameters
    ----------
    K : DecisionSet, mapping, str or os.PathLike
        The set, a description or a description file.
    seed : int, default 0
        Seed of the random inputs.
    points : int, default 3
        Random inputs per category (inside, near, at the set's scale, far;
        plus tiny and huge ones).
    rtol : float, default 2e-5
        Relative tolerance of the comparisons with the reference.
    only : list of str, optional
        Run only the checks whose names start with one of these prefixes.

    Returns
    -------
    list of CheckOutcome
        When every check passes; ``worst`` is the largest gap over its allowed value.

    Raises
    ------
    AssertionError
        Listing every failed check with its input, setkit's answer, the
        reference answer and the allowed gap.

    Notes
    -----
    Cost: a few reference (interior-point) solves per input and operator,
    about a second for a small set.

    Examples
    --------
    >>> import setkit, setkit.testing
    >>> out = setkit.testing.check_set(setkit.compile({"kind": "box", "dim": 2, "lower": 0, "upper": 1}))
    >>> all(o.worst <= 1 for o in out)
    True
    """
    outcomes, failures = [], []
    for name, run in checks(K, seed=seed, points=points, rtol=rtol, only=only):
        try:
            outcomes.append(run())
        except AssertionError as exc:
            failures.append(str(exc))
        except SetkitError as exc:
            failures.append(f"setkit conformance: {name} raised {type(exc).__name__}: {exc}")
    if failures:
        head = f"{len(failures)} conformance check(s) failed (seed {seed}):\n"
        raise AssertionError(head + "\n\n".join(failures))
    return outcomes


def check_derivatives(K, seed: int = 0, points: int = 6, rtol: float = 1e-6, adjoint_tol: float = 1e-10,
                      geometry: str = "euclidean") -> list:
    """Check the Jacobian products of K's projection: finite differences, adjointness, batches.

    At seeded random points y away from kinks, ``K.project_jvp(y, v)`` must match the central
    difference (P(y + h v) - P(y - h v)) / (2 h), h = 1e-4 max(1, |y|_inf), within
    ``rtol * ||v||`` (times 10 when the projection is served by an iterative solver, whose
    answers carry its stopping tolerance). A point counts as away from kinks when the
    differences at steps h and h/2 agree within 1e-7 ||v|| (a kink crossed inside the
    step changes them); points that fail that test are replaced (up to 20 draws per point).
    Adjointness: |<u, J v> - <J^T u, v>| <= ``adjoint_tol`` ||u|| ||v||. Batches: a batched
    call equals the row-by-row calls (to 1e-12 relative).

    Parameters
    ----------
    K : DecisionSet, mapping, str or os.PathLike
        The set, a description or a description file.
    seed : int, default 0
        Seed of the random points and directions.
    points : int, default 6
        How many points away from kinks to check (half near the set, half at its scale).
    rtol : float, default 1e-6
        Relative tolerance of the finite-difference comparison.
    adjoint_tol : float, default 1e-10
        Relative tolerance of the adjointness test.
    geometry : str, default "euclidean"
        Passed to the Jacobian products and the projection.

    Returns
    -------
    list of CheckOutcome
        "derivatives/finite-differences", "derivatives/adjoint", "derivatives/batch".

    Raises
    ------
    AssertionError
        Listing the failures with the point, the direction and the gap.

    Notes
    -----
    Cost: about 5 projections and 2 Jacobian products per point (plus redraws near kinks).

    Examples
    --------
    >>> import setkit, setkit.testing
    >>> out = setkit.testing.check_derivatives(setkit.compile({"kind": "simplex", "dim": 4}))
    >>> [o.name for o in out], all(o.worst <= 1 for o in out)
    (['derivatives/finite-differences', 'derivatives/adjoint', 'derivatives/batch'], True)
    """
    K = _as_set(K)
    rng = np.random.default_rng(seed)
    n, shp = K.dim, tuple(K.shape)
    s = data_scale(K)
    iterative = K.routes()["project"].category != "native"
    fd_tol = rtol * (10.0 if iterative else 1.0)

    def proj(Y):
        return np.asarray(K.project(Y.reshape((-1,) + shp), geometry=geometry), dtype=float).reshape(-1, n)

    def jvp(Y, V, op="project_jvp"):
        return np.asarray(getattr(K, op)(Y.reshape((-1,) + shp), V.reshape((-1,) + shp), geometry=geometry),
                          dtype=float).reshape(-1, n)

    t0 = time.perf_counter()
    failures, kept, worst_fd, worst_adj, worst_batch = [], [], 0.0, 0.0, 0.0
    for i in range(points):
        for _ in range(20):
            raw = rng.standard_normal(n) * s
            if geometry == "kl":
                raw = np.exp(rng.standard_normal(n))
            elif i % 2 == 0:
                raw = proj(raw[None])[0] + 0.3 * s * rng.standard_normal(n)
            v = rng.standard_normal(n)
            h = 1e-4 * max(1.0, float(np.abs(raw).max()))
            if geometry == "kl":
                h = 1e-4 * float(raw.min())
            try:
                Pm = proj(np.stack([raw + h * v, raw - h * v, raw + 0.5 * h * v, raw - 0.5 * h * v]))
            except SolveError:       # the projection's own solver gave up on this point: draw another
                continue
            fd, fd2 = (Pm[0] - Pm[1]) / (2 * h), (Pm[2] - Pm[3]) / h
            nv = float(np.linalg.norm(v))
            if np.linalg.norm(fd - fd2) <= 1e-7 * nv * (100.0 if iterative else 1.0):
                kept.append((raw, v, fd))
                break
    if not kept:
        raise AssertionError(f"check_derivatives on {K.node.label}: no point away from kinks was found in "
                             f"{20 * points} draws (seed {seed}).")
    Y = np.stack([k[0] for k in kept])
    Vs = np.stack([k[1] for k in kept])
    FD = np.stack([k[2] for k in kept])
    JV = jvp(Y, Vs)
    U = rng.standard_normal(Y.shape)
    JU = jvp(Y, U, "project_vjp")
    for r in range(Y.shape[0]):
        nv = float(np.linalg.norm(Vs[r]))
        gap = float(np.linalg.norm(JV[r] - FD[r]))
        worst_fd = max(worst_fd, gap / (fd_tol * nv))
        if gap > fd_tol * nv:
            failures.append(f"finite differences: at y = {Y[r].tolist()}, v = {Vs[r].tolist()}: project_jvp gave "
                            f"{JV[r].tolist()}, the central difference {FD[r].tolist()}; gap {gap:.3g} > "
                            f"{fd_tol:.1g} ||v||.")
        a, b = float(U[r] @ JV[r]), float(JU[r] @ Vs[r])
        allowed = adjoint_tol * float(np.linalg.norm(U[r])) * nv
        worst_adj = max(worst_adj, abs(a - b) / allowed)
        if abs(a - b) > allowed:
            failures.append(f"adjoint: at y = {Y[r].tolist()}: <u, J v> = {a!r} but <J^T u, v> = {b!r} "
                            f"(gap {abs(a - b):.3g} > {allowed:.3g}).")
        one = jvp(Y[r:r + 1], Vs[r:r + 1])[0]
        gb = float(np.linalg.norm(one - JV[r]))
        worst_batch = max(worst_batch, gb / (1e-12 * max(1.0, nv)))
        if gb > 1e-12 * max(1.0, nv):
            failures.append(f"batch: row {r} of a batched project_jvp differs from the single call by {gb:.3g}.")
    if failures:
        raise AssertionError(f"{len(failures)} derivative check(s) failed on {K.node.label} (seed {seed}):\n"
                             + "\n".join(failures))
    secs = time.perf_counter() - t0
    m = Y.shape[0]
    return [CheckOutcome("derivatives/finite-differences", m, worst_fd, fd_tol, secs),
            CheckOutcome("derivatives/adjoint", m, worst_adj, adjoint_tol, 0.0),
            CheckOutcome("derivatives/batch", m, worst_batch, 1e-12, 0.0)]


def _kl_inputs(K, rng, points):
    """Seeded log-domain inputs t = log y: around the set, spread, uniform (all ties), and shifted by
    log(1e-6) and log(1e6) (inputs from 1e-6 to 1e6 times the set's scale)."""
    n = K.dim
    shp = tuple(K.shape)
    x0 = np.asarray(K.project(np.zeros(shp), geometry="kl", log_input=True), dtype=float).reshape(n)
    base = np.log(np.maximum(x0, 1e-300))
    rows, labels = [], []
    for i in range(points):
        rows.append(base + 0.5 * rng.standard_normal(n))
        labels.append("near the set")
        rows.append(2.0 * rng.standard_normal(n))
        labels.append("spread, log y ~ N(0, 4)")
    rows.append(np.zeros(n))
    labels.append("y = 1 (all ties)")
    for scale in (1e-6, 1e6):
        rows.append(math.log(scale) + rng.standard_normal(n))
        labels.append(f"y about {scale:g}")
    return np.stack(rows), labels


def check_kl_projection(K, seed: int = 0, points: int = 3, rtol: float = DEFAULT_RTOL, gap_rtol: float = 1e-8,
                        reference_points: int = 4) -> list:
    """Check the KL (Bregman) projection of ``K``: feasibility, the Bregman gap, the reference, batches.

    The projection checked is ``K.project(t, geometry="kl", log_input=True)``, the
    minimizer over K of ``KL(x || y) = sum x log(x/y) - x + y`` with ``y = exp(t)``. On seeded
    log-domain inputs (near the set, spread, all ties, and y about 1e-6 and 1e6), with
    ``s = max(1, data scale)`` and ``scale(x) = max(1, max_i abs(x_i))``:

    * feasibility: ``K.violation(x)`` (or the Euclidean distance when the set has no
      violation measure) at most ``gap_rtol * scale(x) * s`` for native routes, ``rtol * ...``
      for solver routes;
    * KL first-order optimality: the Bregman gap ``<g, x - lmo(g)>`` with ``g = log x - t`` (an
      upper bound on ``KL(x || y) - min_K KL(. || y)``, computed with the set's LMO) at most
      ``tol * (1 + sum_i abs(g_i) (x_i + abs(v_i)))``, v = lmo(g), tol = gap_rtol (native) or
      rtol (solver routes);
    * agreement with the exponential-cone reference (cvxpy + Clarabel) on the first
      ``reference_points`` inputs: ``max_i abs(x_i - x_ref_i) <= rtol * scale(x_ref) * s``; a
      larger difference is accepted only when ``KL(x || y) <= KL(x_ref || y)`` and x passed the
      gap check (the reference's own accuracy floor near faces);
    * fixed points: a positive answer x is its own projection (within the feasibility tolerance);
    * batches and input forms: a batched call equals the one-by-one calls (1e-12 relative for
      native kernels, ``rtol`` for solver routes and strategies, which may stop a batch at
      another iterate), and ``K.project(exp(t), geometry="kl")`` equals the log-input call
      where exp(t) is representable (within the feasibility tolerance: log(exp(t)) is t only
      up to rounding, and an iterative kernel may then stop at another iterate).

    Parameters
    ----------
    K : DecisionSet, mapping, str or os.PathLike
        The set (inside the nonnegative orthant), a description or a description file.
    seed : int, default 0
        Seed of the random inputs.
    points : int, default 3
        Inputs near the set and spread inputs (each); three fixed inputs are added.
    rtol : float, default 2e-5
        Relative tolerance against the reference (and of solver-served answers).
    gap_rtol : float, default 1e-8
        Relative tolerance of the Bregman gap and of feasibility for native kernels.
    reference_points : int, default 4
        How many inputs are also solved by the reference (about 0.1-1 s each).

    Returns
    -------
    list of CheckOutcome
        "kl/feasibility", "kl/certificate", "kl/reference", "kl/fixed-points", "kl/batch".

    Raises
    ------
    AssertionError
        Listing every failed check with the input, the answer and the gap; a setkit error
        raised by the projection (for example a set outside the orthant) is listed too.

    Notes
    -----
    Cost: about ``2 points + 3`` projections, as many LMO calls, and ``reference_points``
    exponential-cone solves.

    Examples
    --------
    >>> import setkit, setkit.testing
    >>> out = setkit.testing.check_kl_projection({"kind": "simplex", "dim": 4}, reference_points=1)
    >>> [o.name for o in out][:2], all(o.worst <= 1 for o in out)
    (['kl/feasibility', 'kl/certificate'], True)
    """
    from .kernels.bregman import kl_certificate, kl_divergence
    K = _as_set(K)
    t_start = time.perf_counter()
    rng = np.random.default_rng([seed, 13])
    n, shp = K.dim, tuple(K.shape)
    s = data_scale(K)
    label = K.node.label
    native = K.routes()["project_kl"].category == "native"
    tol = gap_rtol if native else rtol
    failures, outcomes = [], []

    def proj(T):
        return np.asarray(K.project(T.reshape((-1,) + shp), geometry="kl", log_input=True),
                          dtype=float).reshape(-1, n)

    def show(v):
        return _fmt(np.asarray(v, dtype=float).reshape(shp))

    try:
        T, labels = _kl_inputs(K, rng, points)
        X = proj(T)
    except SetkitError as exc:
        raise AssertionError(f"check_kl_projection on {label}: the KL projection raised "
                             f"{type(exc).__name__}: {exc}") from exc
    m = T.shape[0]
    xs = np.maximum(1.0, np.abs(X).max(axis=1))

    # feasibility
    viol = np.asarray(K.violation(X.reshape((-1,) + shp)), dtype=float).reshape(m)
    if np.isnan(viol).any():
        viol = np.asarray(K.distance(X.reshape((-1,) + shp)), dtype=float).reshape(m)
    neg = np.maximum(0.0, -X.min(axis=1))
    viol = np.maximum(viol, neg)
    allowed = tol * xs * s
    worst = float(np.max(viol / allowed))
    for i in np.flatnonzero(~(viol <= allowed)):
        failures.append(f"feasibility: input {i} ({labels[i]}), t = {show(T[i])}: the answer {show(X[i])} violates "
                        f"the set by {viol[i]:.3e} (allowed {allowed[i]:.3e}).")
    outcomes.append(CheckOutcome("kl/feasibility", m, worst, tol, 0.0))

    # Bregman gap (KL first-order optimality)
    def lmo(G):
        return np.asarray(K.lmo(G.reshape((-1,) + shp)), dtype=float).reshape(-1, n)
    Xp = np.maximum(X, np.finfo(float).tiny)
    Gr = np.log(Xp) - T
    V = lmo(Gr)
    gap = kl_certificate(T, X, lambda G: V)
    allowed_gap = tol * (1.0 + np.einsum("ij,ij->i", np.abs(Gr), Xp + np.abs(V)))
    worst = float(np.max(np.maximum(gap, 0.0) / allowed_gap))
    gap_ok = gap <= allowed_gap
    for i in np.flatnonzero(~gap_ok):
        failures.append(f"certificate: input {i} ({labels[i]}), t = {show(T[i])}: the answer {show(X[i])} has "
                        f"Bregman gap <log x - t, x - lmo(log x - t)> = {gap[i]:.3e} (allowed {allowed_gap[i]:.3e}); "
                        f"it is not the KL projection.")
    outcomes.append(CheckOutcome("kl/certificate", m, worst, tol, 0.0))

    # the exponential-cone reference
    k = min(reference_points, m)
    worst = 0.0
    if k:
        R = K.with_backends(project_kl="reference", loose=True)
        Xr = np.asarray(R.project(T[:k].reshape((-1,) + shp), geometry="kl", log_input=True),
                        dtype=float).reshape(-1, n)
        diff = np.abs(X[:k] - Xr).max(axis=1)
        allowed_ref = rtol * np.maximum(1.0, np.abs(Xr).max(axis=1)) * s
        kl_ours, kl_ref = kl_divergence(T[:k], X[:k]), kl_divergence(T[:k], Xr)
        slack = 1e-12 * np.maximum(1.0, np.abs(kl_ref))
        for i in range(k):
            if diff[i] <= allowed_ref[i]:
                worst = max(worst, float(diff[i] / allowed_ref[i]))
            elif gap_ok[i] and viol[i] <= allowed[i] and kl_ours[i] <= kl_ref[i] + slack[i]:
                worst = max(worst, 1.0)      # certified, and at least as good as the reference
            else:
                worst = max(worst, float(diff[i] / allowed_ref[i]))
                failures.append(f"reference: input {i} ({labels[i]}), t = {show(T[i])}: setkit {show(X[i])}, "
                                f"reference {show(Xr[i])}; difference {diff[i]:.3e} (allowed {allowed_ref[i]:.3e}), "
                                f"KL {kl_ours[i]:.12g} vs the reference's {kl_ref[i]:.12g}.")
    outcomes.append(CheckOutcome("kl/reference", k, worst, rtol, 0.0))

    # fixed points: positive points of K are their own KL projections
    pos = np.flatnonzero((X > 1e-300).all(axis=1) & (viol <= allowed))
    worst = 0.0
    if pos.size:
        F = proj(np.log(X[pos]))
        d = np.abs(F - X[pos]).max(axis=1)
        al = tol * xs[pos] * s
        worst = float(np.max(d / al))
        for r in np.flatnonzero(~(d <= al)):
            i = int(pos[r])
            failures.append(f"fixed points: the point {show(X[i])} of the set is projected to {show(F[r])} "
                            f"(moved by {d[r]:.3e}, allowed {al[r]:.3e}).")
    outcomes.append(CheckOutcome("kl/fixed-points", int(pos.size), worst, tol, 0.0))

    # batches and the y-input form (solvers and strategies may stop a batch at another iterate)
    btol = 1e-12 if native else tol
    worst = 0.0
    for i in range(m):
        one = proj(T[i:i + 1])[0]
        g = float(np.abs(one - X[i]).max()) / (btol * xs[i])
        worst = max(worst, g)
        if g > 1.0:
            failures.append(f"batch: row {i} of a batched call differs from the single call by "
                            f"{g * btol * xs[i]:.3e} (allowed {btol * xs[i]:.3e}).")
    ok_rows = np.flatnonzero(np.abs(T).max(axis=1) < 700.0)
    if ok_rows.size:
        Xy = np.asarray(K.project(np.exp(T[ok_rows]).reshape((-1,) + shp), geometry="kl"),
                        dtype=float).reshape(-1, n)
        # log(exp(t)) differs from t by rounding, so an iterative kernel may stop at another iterate: its own
        # accuracy (the feasibility tolerance) is the bar here
        ftol = tol * s
        gy = np.abs(Xy - X[ok_rows]).max(axis=1) / (ftol * xs[ok_rows])
        worst = max(worst, float(gy.max()))
        for r in np.flatnonzero(gy > 1.0):
            failures.append(f"input forms: K.project(y, geometry='kl') differs from the log_input call at input "
                            f"{int(ok_rows[r])} by {gy[r] * ftol * xs[ok_rows[r]]:.3e}.")
    outcomes.append(CheckOutcome("kl/batch", m, worst, btol, time.perf_counter() - t_start))
    if failures:
        raise AssertionError(f"{len(failures)} KL projection check(s) failed on {label} (seed {seed}):\n"
                             + "\n".join(failures))
    return outcomes


def _family_specs(family, seed: int, count: int) -> list:
    from .families import Family, lookup
    cls = lookup(family) if isinstance(family, str) else family
    if not (isinstance(cls, type) and issubclass(cls, Family)):
        raise TypeError(f"check_family: expected a kind name or a Family subclass; got {family!r}.")
    specs = [dict(s) for s in (getattr(cls, "examples", lambda: [])() or [])]
    maker = getattr(cls, "random_example", None)
    if maker is not None:
        rng = np.random.default_rng([seed, 4])
        for _ in range(count):
            spec = maker(rng)
            if spec is not None:
                specs.append(dict(spec))
    for s in specs:
        s.setdefault("kind", cls.kind)
    if not specs:
        raise AssertionError(f"setkit conformance: the family {cls.kind!r} ({cls.__module__}.{cls.__qualname__}) "
                             f"provides no example instances; add a classmethod examples() returning small "
                             f"spec dicts (and optionally random_example(rng)).")
    return specs


def family_checks(family, seed: int = 0, count: int = 2, points: int = 2, rtol: float = DEFAULT_RTOL) -> list:
    """``(name, callable)`` pairs: every check on every example instance of a family, not yet run.

    Names look like ``simplex[0]:project/reference``; a failure message starts
    with the spec of the instance. Instances are built on the first run of one
    of their checks.

    Parameters
    ----------
    family : str or type
        A kind name or a Family class.
    seed : int, default 0
        Seed of the random instances and inputs.
    count : int, default 2
        Calls of the family's ``random_example(rng)``.
    points : int, default 2
        Random inputs per category, as in :func:`check_set`.
    rtol : float, default 2e-5
        Relative tolerance of the comparisons with the reference.

    Returns
    -------
    list of (str, callable)

    Notes
    -----
    As :func:`checks`, per instance.

    Examples
    --------
    >>> import setkit.testing
    >>> names = [name for name, _ in setkit.testing.family_checks("simplex", count=0)]
    >>> names[0]
    'simplex[0]:project/reference'
    """
    out = []
    for i, spec in enumerate(_family_specs(family, seed, count)):
        kind = spec["kind"]
        for name, run in _lazy_checks(spec, seed, points, rtol):
            out.append((f"{kind}[{i}]:{name}", run))
    return out


def _lazy_checks(spec, seed, points, rtol):
    holder = {}

    def get():
        if "c" not in holder:
            holder["c"] = dict(checks(spec, seed=seed, points=points, rtol=rtol))
        return holder["c"]

    out = []
    for name, _ in CHECKS:
        def run(name=name):
            try:
                return get()[name]()
            except AssertionError as exc:
                raise AssertionError(f"instance {spec!r}:\n{exc}") from None
        out.append((name, run))
    return out


def check_family(family, seed: int = 0, count: int = 2, points: int = 2, rtol: float = DEFAULT_RTOL) -> list:
    """Run :func:`check_set` on every example instance of a family.

    Instances come from the family's classmethods ``examples()`` (fixed small
    spec dicts) and ``random_example(rng)`` (called ``count`` times with a
    generator seeded by ``seed``).

    Parameters
    ----------
    family : str or type
        A kind name or a Family class.
    seed : int, default 0
        Seed of the random instances and inputs.
    count : int, default 2
        Calls of the family's ``random_example(rng)``.
    points : int, default 2
        Random inputs per category, as in :func:`check_set`.
    rtol : float, default 2e-5
        Relative tolerance of the comparisons with the reference.

    Returns
    -------
    list of CheckOutcome
        Of every check on every instance, when all pass.

    Raises
    ------
    AssertionError
        Listing every failure, each headed by the spec of its instance.

    Notes
    -----
    Cost: :func:`check_set` per instance, about a second each for small sets.

    Examples
    --------
    >>> import setkit.testing
    >>> out = setkit.testing.check_family("simplex", count=0, points=1)
    >>> all(o.worst <= 1 for o in out)
    True
    """
    outcomes, failures = [], []
    for spec in _family_specs(family, seed, count):
        try:
            outcomes.extend(check_set(spec, seed=seed, points=points, rtol=rtol))
        except AssertionError as exc:
            failures.append(f"instance {spec!r}:\n{exc}")
    if failures:
        raise AssertionError("\n\n".join(failures))
    return outcomes


def parametrize(target, argname: str = "check", seed: int = 0, points: int = 3, rtol: float = DEFAULT_RTOL,
                family: bool = False):
    """A ``pytest.mark.parametrize`` over the conformance checks of a set or a family.

    One test case per check, named after it::

        @setkit.testing.parametrize(K)
        def test_conformance(check):
            check()

    Parameters
    ----------
    target : DecisionSet, mapping, str, os.PathLike or type
        The set (or description, or description file); with ``family=True``
        a kind name or a Family class.
    argname : str, default "check"
        The name of the test function's argument.
    seed : int, default 0
        Seed of the random inputs (and instances).
    points : int, default 3
        Random inputs per category, as in :func:`check_set`.
    rtol : float, default 2e-5
        Relative tolerance of the comparisons with the reference.
    family : bool, default False
        Parametrize over :func:`family_checks` of ``target`` instead of
        :func:`checks`.

    Returns
    -------
    pytest.MarkDecorator

    Notes
    -----
    Nothing runs until pytest calls the cases.

    Examples
    --------
    >>> import setkit, setkit.testing
    >>> mark = setkit.testing.parametrize(setkit.simplex(dim=3))
    >>> mark.args[0], [case.id for case in mark.args[1]][:2]
    ('check', ['project/reference', 'project/certificate'])
    """
    import pytest
    pairs = (family_checks(target, seed=seed, points=points, rtol=rtol) if family
             else checks(target, seed=seed, points=points, rtol=rtol))
    return pytest.mark.parametrize(argname, [pytest.param(fn, id=name) for name, fn in pairs])


# -- hypothesis strategies ------------------------------------------------------------------------
def points(K, where: str = "anywhere", scale: float = 10.0):
    """A hypothesis strategy of points of shape ``K.shape``.

    With s = max(1, data scale of K): entries within ±scale·s (``"anywhere"``),
    their projections onto K (``"inside"``), or those plus a perturbation of
    entries within ±1e-3·s (``"near"``).

    Parameters
    ----------
    K : DecisionSet, mapping, str or os.PathLike
        The set, a description or a description file.
    where : {"anywhere", "inside", "near"}, default "anywhere"
        Where the points lie.
    scale : float, default 10.0
        The half-width of the entries, in units of s.

    Returns
    -------
    hypothesis strategy
        Of float64 arrays of shape ``K.shape`` (needs the ``hypothesis`` package).

    Notes
    -----
    One projection per drawn point for ``"inside"`` and ``"near"``.

    Examples
    --------
    >>> import setkit, setkit.testing
    >>> from hypothesis import given, settings
    >>> K = setkit.simplex(dim=3)
    >>> @settings(max_examples=25, deadline=None)
    ... @given(setkit.testing.points(K, "inside"))
    ... def test_points_inside_are_in_the_set(x):
    ...     assert K.contains(x, tol=1e-9)
    >>> test_points_inside_are_in_the_set()
    """
    from hypothesis import strategies as st
    from hypothesis.extra.numpy import arrays
    K = _as_set(K)
    s = data_scale(K)
    bound = float(scale) * s
    elems = st.floats(-bound, bound, allow_nan=False, allow_infinity=False, width=64)
    base = arrays(np.float64, K.shape, elements=elems)
    if where == "anywhere":
        return base
    if where == "inside":
        return base.map(lambda y: K.project(y))
    if where == "near":
        small = arrays(np.float64, K.shape, elements=st.floats(-1e-3 * s, 1e-3 * s, allow_nan=False, width=64))
        return st.tuples(base, small).map(lambda t: K.project(t[0]) + t[1])
    raise ValueError(f"points: where must be anywhere, inside or near; got {where!r}.")


def directions(K, scale: float = 1.0, nonzero: bool = True):
    """A hypothesis strategy of directions of shape ``K.shape``, entries within ±scale.

    Parameters
    ----------
    K : DecisionSet, mapping, str or os.PathLike
        The set, a description or a description file.
    scale : float, default 1.0
        The largest magnitude of an entry.
    nonzero : bool, default True
        Leave out directions whose entries are all below 1e-9·scale in magnitude.

    Returns
    -------
    hypothesis strategy
        Of float64 arrays of shape ``K.shape`` (needs the ``hypothesis`` package).

    Notes
    -----
    O(dim) per drawn direction.

    Examples
    --------
    >>> import numpy as np, setkit, setkit.testing
    >>> from hypothesis import given, settings
    >>> K = setkit.simplex(dim=3)
    >>> @settings(max_examples=25, deadline=None)
    ... @given(setkit.testing.directions(K))
    ... def test_support_is_attained_by_the_lmo(c):
    ...     assert np.isclose(K.support(c), np.dot(c, K.lmo(-c)))   # max <c, x> = <c, argmin <-c, x>>
    >>> test_support_is_attained_by_the_lmo()
    """
    from hypothesis import strategies as st
    from hypothesis.extra.numpy import arrays
    K = _as_set(K)
    elems = st.floats(-float(scale), float(scale), allow_nan=False, allow_infinity=False, width=64)
    strat = arrays(np.float64, K.shape, elements=elems)
    if nonzero:
        strat = strat.filter(lambda c: bool(np.any(np.abs(c) > 1e-9 * scale)))
    return strat
