"""Centroids and samples of a decision set under three measures.

Measures
--------
``"volume"``
    The uniform distribution over the set within its affine hull (Lebesgue
    measure of the affine hull restricted to the set). Needs a bounded set.
``"vertices"``
    The uniform distribution over the extreme points: permutations for a
    permutahedron, assignments for the Birkhoff polytope, corners of a box or a
    simplex. For a Euclidean ball the extreme points are the sphere and the
    measure is the uniform one on it.
``"directions"``
    The law of ``lmo(g)`` for a standard Gaussian direction ``g`` in R^dim: what
    a random linear weak learner picks. Defined for every bounded set with an
    LMO (ties have probability zero).

How answers are obtained
------------------------
One ordered table of methods, :data:`~setkit.measures.methods.LADDER`, walked
once per call by :func:`centroid` and :func:`sample` (see
:mod:`setkit.measures.methods`): the family's exact knowledge, then exact
answers from the enumerated vertices of small polytopes
(:mod:`setkit.measures.geometry`), then refusals with reasons, then estimates
(Monte Carlo over the LMO, hit-and-run in :mod:`setkit.measures.chains`).
The method that ran is recorded: ``centroid(..., details=True)`` returns a
:class:`MeasureResult`, ``sample(..., details=True)`` a :class:`SampleResult`,
both naming it. Estimates carry a standard error per coordinate, an effective
sample size and the Gelman-Rubin R-hat (:mod:`setkit.measures.diagnostics`);
slowly mixing chains (R-hat > 1.05 or effective sample size < 50) raise an
:class:`~setkit.errors.AccuracyWarning`.

Layout: ``geometry`` (affine hull, vertices, exact centroids), ``chains``
(hit-and-run), ``diagnostics`` (standard errors, ESS, R-hat), ``methods`` (the
table and its walk). Geometry derived from a node is kept beside it
(:func:`setkit.families.memo`).

All randomness comes from ``rng`` (a numpy Generator or an int seed). For
:func:`sample`, ``rng=None`` means fresh entropy; for :func:`centroid` estimates
``rng=None`` means the fixed seed 0, so that ``K.centroid()`` is reproducible.
"""
from __future__ import annotations

import difflib
import time
import warnings
from dataclasses import dataclass
from typing import Any

import numpy as np

from ..errors import AccuracyWarning, InputError
from .chains import hit_and_run
from .diagnostics import ESS_WARN, RHAT_WARN, batch_means, chain_summary
from .geometry import (EXACT_MAX_DIM, MAX_VERTICES, ReducedPolytope, enumerable, normal_cone_weights,
                       polytope_vertices, reduce_form, reduced, simplex_volume_centroid)
from .methods import LADDER, MEASURES, Method, Request, as_generator, choose

__all__ = ["MEASURES", "MeasureResult", "SampleResult", "centroid", "sample", "as_generator", "LADDER", "Method",
           "hit_and_run", "chain_summary", "batch_means", "reduce_form", "reduced", "ReducedPolytope",
           "polytope_vertices", "simplex_volume_centroid", "normal_cone_weights", "enumerable",
           "EXACT_MAX_DIM", "MAX_VERTICES", "RHAT_WARN", "ESS_WARN"]


@dataclass(frozen=True)
class MeasureResult:
    """A centroid with how it was obtained and how accurate it is.

    ``point`` has the set's point shape; ``std_error`` too (zeros when exact);
    ``ess`` is the effective sample size (``inf`` when exact; for hit-and-run
    the smallest over coordinates); ``samples`` the number of points used;
    ``rhat`` the largest Gelman-Rubin R-hat of the hit-and-run chains (NaN otherwise).
    """

    point: Any
    measure: str
    method: str
    exact: bool
    std_error: Any
    ess: float
    samples: int
    seconds: float
    note: str = ""
    rhat: float = float("nan")


@dataclass(frozen=True)
class SampleResult:
    """Draws with the method that produced them.

    ``points`` has shape ``(k, *K.shape)``; ``exact`` is True when the draws follow the measure
    exactly (independent draws of the law) and False for Markov-chain states (hit-and-run).
    """

    points: Any
    measure: str
    method: str
    exact: bool
    seconds: float
    note: str = ""


# ---------------------------------------------------------------------------------------------
# argument handling
# ---------------------------------------------------------------------------------------------
def _check_measure(K, measure, op):
    if measure not in MEASURES:
        close = difflib.get_close_matches(str(measure), MEASURES, n=1)
        hint = f" (closest: {close[0]!r})" if close else ""
        raise InputError(f"{op} on {K.node.label}: measure must be one of {', '.join(MEASURES)}; "
                         f"got {measure!r}{hint}.")


def _limited(run, seconds, progress, asked):
    """run() under a time limit; a TimeLimitError from inside is re-raised naming ``asked``."""
    from ..errors import TimeLimitError
    from ..limits import time_limit as _time_limit
    with _time_limit(seconds, progress):
        try:
            return run()
        except TimeLimitError as exc:
            if exc.asked.startswith(asked):
                raise
            raise TimeLimitError(f"{asked}: {exc}", asked=f"{asked}: {exc.asked}", elapsed=exc.elapsed,
                                 limit=exc.limit, accuracy=exc.accuracy) from None


# ---------------------------------------------------------------------------------------------
# public functions
# ---------------------------------------------------------------------------------------------
def centroid(K, measure: str = "volume", *, details: bool = False, rng=None, samples: int | None = None,
             exact: bool | None = None, exact_max_dim: int = EXACT_MAX_DIM, chains=None, burn_in=None, thin=None,
             time_limit: float | None = None, progress=None):
    """Centroid of K under ``measure``: exact where known, else estimated.

    The mean of the measure, ``E[X]`` for X uniform on K (volume), uniform on its extreme points
    (vertices) or ``X = lmo(g)`` with g standard Gaussian (directions).

    Parameters
    ----------
    measure : "volume" | "vertices" | "directions"
    details : return a :class:`MeasureResult` (point, method, exact, std_error, ess, ...)
    rng : Generator or int seed for estimates (None: seed 0, reproducible)
    samples : number of draws for an estimate (default: 4000 for volume; for directions 100000 when the
        vertices are enumerated (each draw is then a scan), else 1000 with a native LMO and 400 with a
        generic one, since each draw is then an LP or conic solve)
    exact : True to refuse estimates (raise instead), False to force an estimate, None for the best available
    exact_max_dim : largest affine-hull dimension for vertex enumeration / triangulation
    chains, burn_in, thin : hit-and-run settings (see :mod:`setkit.measures.chains`)
    time_limit : seconds; past it a ``TimeLimitError`` says what was computed, the time spent and the
        accuracy reached (see :func:`setkit.time_limit`)
    progress : called about once a second as ``progress(asked, elapsed, accuracy)``

    Complexity: O(1) closed forms; O(#facets m^3) triangulation; estimates
    O(samples * thin * rows * m) for polytopes.

    >>> import setkit
    >>> setkit.compile({"kind": "simplex", "dim": 4}).centroid().tolist()
    [0.25, 0.25, 0.25, 0.25]
    >>> r = setkit.compile({"kind": "box", "dim": 2, "lower": 0, "upper": 1}).centroid(details=True)
    >>> r.method, r.exact, r.point.tolist()
    ('closed form', True, [0.5, 0.5])
    """
    _check_measure(K, measure, "centroid")
    t0 = time.perf_counter()
    req = Request(K, measure, "centroid", rng, default_seed=0, exact=exact, exact_max_dim=exact_max_dim,
                  samples=samples, chains=chains, burn_in=burn_in, thin=thin)
    method, out = _limited(lambda: choose(req), time_limit, progress, f"centroid(measure={measure!r}) of {K.node.label}")
    if out.warning:
        warnings.warn(AccuracyWarning(f"{req.asked}: {out.warning}"), stacklevel=3)
    if not details:
        return out.value.reshape(K.shape)
    exact_answer = method.kind == "exact"
    return MeasureResult(point=out.value.reshape(K.shape), measure=measure, method=method.name,
                         exact=exact_answer,
                         std_error=np.zeros(K.shape) if exact_answer else out.std_error.reshape(K.shape),
                         ess=out.ess, samples=out.samples, seconds=time.perf_counter() - t0, note=out.note,
                         rhat=out.rhat)


def sample(K, k: int, measure: str = "volume", rng=None, *, details: bool = False, chains=None, burn_in=None,
           thin=None, exact_max_dim: int = EXACT_MAX_DIM, time_limit: float | None = None, progress=None):
    """k points of K drawn from ``measure``; shape (k, *K.shape).

    Exact samplers come from the family (``exact_sample``) or, for
    ``vertices`` of small polytopes, a uniform choice among the enumerated
    vertices; ``directions`` draws lmo(g) for iid Gaussian g (exact by
    definition); ``volume`` otherwise runs hit-and-run (approximate: states of a
    Markov chain after ``burn_in`` steps, one kept every ``thin`` steps, chains
    interleaved so that consecutive rows come from different chains).
    ``details=True`` returns a :class:`SampleResult` naming the method. ``time_limit`` (seconds)
    and ``progress`` bound and report long draws as in :func:`centroid`.

    Complexity: O(k dim) for closed-form samplers; O(k #vertices dim) for a vertex scan; one LMO
    call per draw for directions; O(k thin rows m) plus the burn-in for hit-and-run on polytopes.

    >>> import setkit
    >>> X = setkit.compile({"kind": "simplex", "dim": 3}).sample(5, rng=1)
    >>> X.shape, bool(abs(X.sum(axis=1) - 1).max() < 1e-12)
    ((5, 3), True)
    """
    _check_measure(K, measure, "sample")
    if isinstance(k, bool) or not isinstance(k, (int, np.integer)) or k < 0:
        raise InputError(f"sample on {K.node.label}: k must be an int >= 0; got {k!r}.")
    k = int(k)
    t0 = time.perf_counter() if details else 0.0
    out_shape = (k,) + K.shape
    req = Request(K, measure, "sample", rng, k=k, exact_max_dim=exact_max_dim, chains=chains, burn_in=burn_in,
                  thin=thin)                    # checks rng even when nothing is drawn
    if k == 0:
        points, name, exact_draws, note = np.zeros(out_shape), "none", True, "k = 0: nothing drawn"
    else:
        method, out = _limited(lambda: choose(req), time_limit, progress,
                               f"sample({k}, measure={measure!r}) of {K.node.label}")
        points, name, exact_draws, note = out.value.reshape(out_shape), method.name, method.exact_draws, out.note
    if not details:
        return points
    return SampleResult(points=points, measure=measure, method=name, exact=exact_draws,
                        seconds=time.perf_counter() - t0, note=note)
