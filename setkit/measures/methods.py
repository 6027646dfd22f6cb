"""The choice of method for centroids and samples, written once as an ordered table.

Each row of :data:`LADDER` is a :class:`Method`: its name, the measures it serves, whether its
centroid is exact, an estimate or a refusal, and how it answers a centroid request and a sample
request. An answer function returns None when the method does not apply to the set, so the first
row that answers is the method that ran; refusals are rows too and raise an
:class:`~setkit.errors.UnsupportedOperationError` with the reason and the measure that would work.
:func:`setkit.measures.centroid` and :func:`setkit.measures.sample` both walk this one table, once,
through :func:`choose`, and report the name of the row that answered.

Order (first that applies):

1. the family's own exact knowledge (the hooks ``exact_centroid(measure)`` and
   ``exact_sample(k, measure, rng)`` that every Family declares, None when unknown; nothing here
   lists families);
2. refusal of the volume measure of an unbounded polytope;
3. exact answers from the enumerated vertices of a small polytope (see
   :func:`~setkit.measures.geometry.enumerable`): triangulation (volume centroid), vertex
   enumeration (vertices: mean, uniform draws), normal-cone angles (directions centroid, affine
   dimension <= 2);
4. refusal of the vertices measure where no exact answer exists (no random walk gives an unbiased
   uniform draw over the extreme points of a large polytope), and of estimates when ``exact=True``;
5. estimates: Monte Carlo over the enumerated vertices or over the LMO (directions; the draws
   themselves follow the law of lmo(g) exactly) and hit-and-run (volume).

``exact=False`` (centroid only) skips the rows whose centroid is exact.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any, Callable, Optional

import numpy as np

from ..errors import (InputError, SetkitError, SolveError, TimeLimitError, UnboundedDirectionError,
                      UnsupportedOperationError)
from .chains import hit_and_run, unbounded_volume_error
from .diagnostics import chain_summary, mixing_warning
from .geometry import (EXACT_MAX_DIM, enumerable, normal_cone_weights, reduced, simplex_volume_centroid,
                       vertices_of)

MEASURES = ("volume", "vertices", "directions")
PURPOSES = ("centroid", "sample")


def _check_rng(rng):
    if rng is None or isinstance(rng, np.random.Generator):
        return
    if not isinstance(rng, (int, np.integer)) or isinstance(rng, bool):
        raise InputError(f"rng must be a numpy.random.Generator, an int seed or None; got "
                         f"{type(rng).__name__} {rng!r}.")


def as_generator(rng, default_seed=None) -> np.random.Generator:
    """A numpy Generator from a Generator, an int seed or None (``default_seed``, None: fresh entropy).

    >>> int(as_generator(3).integers(10)) == int(as_generator(np.random.default_rng(3)).integers(10))
    True
    """
    _check_rng(rng)
    if isinstance(rng, np.random.Generator):
        return rng
    return np.random.default_rng(default_seed if rng is None else int(rng))


@dataclass(eq=False, slots=True)
class Request:
    """What is asked of the table: a centroid or ``k`` draws of ``K`` under ``measure``.

    ``seed``: a Generator, an int seed or None (then ``default_seed``; None: fresh entropy),
    checked at once and turned into :attr:`rng` only when a method draws.
    ``exact`` (centroid only): True refuses estimates, False skips exact methods, None takes the best
    available. ``samples`` (centroid estimates): number of draws, None for the method's default.
    ``chains``, ``burn_in``, ``thin``: hit-and-run settings (None for defaults).
    """

    K: Any
    measure: str
    purpose: str
    seed: Any = None
    default_seed: Optional[int] = None
    k: int = 0
    exact: Optional[bool] = None
    exact_max_dim: int = EXACT_MAX_DIM
    samples: Optional[int] = None
    chains: Optional[int] = None
    burn_in: Optional[int] = None
    thin: Optional[int] = None
    _generator: Optional[np.random.Generator] = field(default=None, init=False, repr=False)

    def __post_init__(self):
        try:
            _check_rng(self.seed)
        except InputError as exc:
            raise InputError(f"{self.asked}: {exc}") from None

    @property
    def rng(self) -> np.random.Generator:
        """The random generator of the request, built on first use."""
        if self._generator is None:      # the seed was checked on construction
            seed = self.seed
            self._generator = seed if isinstance(seed, np.random.Generator) else np.random.default_rng(
                self.default_seed if seed is None else int(seed))
        return self._generator

    @property
    def asked(self) -> str:
        """The request as a user wrote it, for messages: ``centroid(measure='volume') on simplex``."""
        return f"{self.purpose}(measure={self.measure!r}) on {self.K.node.label}"


@dataclass(eq=False, slots=True)
class Outcome:
    """A method's answer: a flat centroid ``(dim,)`` or flat draws ``(k, dim)``, with its accuracy.

    ``std_error`` is None for exact answers; ``warning`` is non-empty when the diagnostics of an
    estimate say it should not be trusted as is.
    """

    value: np.ndarray
    note: str = ""
    std_error: Optional[np.ndarray] = None
    ess: float = math.inf
    samples: int = 0
    rhat: float = math.nan
    warning: str = ""


@dataclass(frozen=True)
class Method:
    """One row of the table. ``centroid(request)`` / ``sample(request)`` return an :class:`Outcome`,
    None when the method does not apply, or raise (refusals); a missing function means the method
    does not serve that purpose. ``kind`` is "exact", "estimate" or "refusal" for the centroid;
    ``exact_draws`` says whether its draws follow the measure exactly (not a Markov chain)."""

    name: str
    kind: str
    measures: tuple
    about: str
    centroid: Optional[Callable[[Request], Optional[Outcome]]] = None
    sample: Optional[Callable[[Request], Optional[Outcome]]] = None
    exact_draws: bool = True


# ---------------------------------------------------------------------------------------------
# the family's own knowledge
# ---------------------------------------------------------------------------------------------
def _family_centroid(req):
    x = req.K.node.exact_centroid(req.measure)
    return None if x is None else Outcome(np.asarray(x, dtype=float).reshape(req.K.dim))


def _family_sample(req):
    X = req.K.node.exact_sample(req.k, req.measure, req.rng)
    return None if X is None else Outcome(np.asarray(X, dtype=float).reshape(req.k, req.K.dim))


# ---------------------------------------------------------------------------------------------
# exact answers from the enumerated vertices of a small polytope
# ---------------------------------------------------------------------------------------------
def _refuse_unbounded_volume(req):
    P = reduced(req.K)
    if P is not None and not P.bounded:
        raise unbounded_volume_error(req.asked)
    return None


def _on_vertices(answer, *, fall_back_on_failure=False):
    """An answer function that runs ``answer(req, P, V)`` when K's vertices can be enumerated (see
    :func:`~setkit.measures.geometry.enumerable`) and declines (None) otherwise. With
    ``fall_back_on_failure`` a failed reduction also declines, so that a method needing no reduction
    (the LMO) answers instead."""
    def run(req):
        try:
            found = enumerable(req.K, req.exact_max_dim)
        except TimeLimitError:
            raise
        except SolveError:
            if not fall_back_on_failure:
                raise
            found = None
        return None if found is None else answer(req, *found)
    return run


@_on_vertices
def _triangulation(req, P, V):
    return Outcome(P.to_x(simplex_volume_centroid(V)[None, :])[0],
                   note=f"{V.shape[0]} vertices, affine hull of dimension {P.m}")


@_on_vertices
def _vertex_mean(req, P, V):
    return Outcome(P.to_x(V).mean(axis=0), note=f"{V.shape[0]} vertices in an affine hull of dimension {P.m}")


@_on_vertices
def _vertex_choice(req, P, V):
    return Outcome(P.to_x(V[req.rng.integers(0, V.shape[0], size=req.k)]),
                   note=f"uniform choice among {V.shape[0]} enumerated vertices")


def _normal_cone_centroid(req):
    try:
        P = reduced(req.K)
    except TimeLimitError:
        raise
    except SolveError:          # a failed reduction: the estimates over the LMO need none
        return None
    if P is None or not P.bounded or P.m > 2:
        return None
    w, V = normal_cone_weights(vertices_of(req.K, P))
    return Outcome(P.to_x((w @ V)[None, :])[0], note=f"{V.shape[0]} vertices, affine hull of dimension {P.m}")


# ---------------------------------------------------------------------------------------------
# refusals
# ---------------------------------------------------------------------------------------------
def _refuse_vertices(req):
    try:
        P = reduced(req.K)
    except TimeLimitError:
        raise
    except SetkitError:
        P = None
    if P is None:
        why = ("the set is not given as a polytope without auxiliary variables and its family does not "
               "describe its extreme points")
    elif not P.bounded:
        why = "the set is unbounded"
    else:
        why = (f"its affine hull has dimension {P.m} > {req.exact_max_dim}, too many vertices to enumerate, and "
               f"no random walk gives an unbiased uniform draw over extreme points")
    raise UnsupportedOperationError(
        f"{req.asked}: no exact answer and no honest estimate, because {why}. measure='directions' (LMO of "
        f"a Gaussian direction, also a law on extreme points) or measure='volume' can be estimated with a "
        f"standard error.")


def _refuse_estimates(req):
    if not req.exact:
        return None
    raise UnsupportedOperationError(
        f"{req.asked}: no exact method is known for this set (no closed form, and it is not a polytope of "
        f"affine dimension <= {req.exact_max_dim}); call it with exact=None to get an estimate with its "
        f"standard error.")


# ---------------------------------------------------------------------------------------------
# estimates
# ---------------------------------------------------------------------------------------------
def _draw_count(req, default):
    n = default if req.samples is None else int(req.samples)
    if n < 2:
        raise InputError(f"{req.asked}: samples must be at least 2; got {n}.")
    return n


def _iid_estimate(X, note):
    n = X.shape[0]
    return Outcome(X.mean(axis=0), note=note, std_error=X.std(axis=0, ddof=1) / math.sqrt(n),
                   ess=float(n), samples=n)


def vertex_scan_draws(Vx, k, g, chunk=20_000):
    """lmo(g) for k standard Gaussian directions g by scanning the vertex list Vx (k_v, d).

    The exact law of lmo(g) on a polytope with those vertices (ties have probability zero).
    O(k k_v d), in chunks of ``chunk`` directions.

    >>> import numpy as np
    >>> X = vertex_scan_draws(np.eye(3), 5, np.random.default_rng(0))
    >>> X.shape, bool(np.all(X.sum(axis=1) == 1))
    ((5, 3), True)
    """
    d = Vx.shape[1]
    out = np.empty((k, d))
    for a in range(0, k, chunk):
        b = min(k, a + chunk)
        Gd = g.standard_normal((b - a, d))
        out[a:b] = Vx[np.argmin(Gd @ Vx.T, axis=1)]
    return out


def _scan_centroid(req, P, V):
    X = vertex_scan_draws(P.to_x(V), _draw_count(req, 100_000), req.rng)
    return _iid_estimate(X, f"iid Gaussian directions, best of {V.shape[0]} enumerated vertices by a scan")


def _scan_sample(req, P, V):
    return Outcome(vertex_scan_draws(P.to_x(V), req.k, req.rng),
                   note=f"iid Gaussian directions, best of {V.shape[0]} enumerated vertices by a scan")


def direction_draws(K, k, g):
    """lmo(g) for k standard Gaussian directions g, as a flat (k, dim) array.

    >>> import numpy as np, setkit
    >>> K = setkit.compile({"kind": "simplex", "dim": 3})
    >>> X = direction_draws(K, 4, np.random.default_rng(0))
    >>> X.shape, bool(np.all(X.sum(axis=1) == 1))
    ((4, 3), True)
    """
    Gd = g.standard_normal((k, K.dim))
    try:
        X = K.lmo(Gd.reshape((k,) + K.shape))
    except UnboundedDirectionError as exc:
        raise UnsupportedOperationError(
            f"measure='directions' on {K.node.label}: the set is unbounded along some Gaussian directions "
            f"({exc}); bound the set (e.g. intersect it with a box).") from None
    return np.asarray(X, dtype=float).reshape(k, K.dim)


def _lmo_centroid(req):
    default = 1000 if req.K.routes()["lmo"].provider == "native" else 400
    return _iid_estimate(direction_draws(req.K, _draw_count(req, default), req.rng), "iid Gaussian directions")


def _lmo_sample(req):
    return Outcome(direction_draws(req.K, req.k, req.rng), note="iid Gaussian directions")


def _chord_kind(K):
    return "chord from the constraints" if reduced(K) is not None else "membership chord with shrinkage"


def _hit_and_run_centroid(req):
    S = hit_and_run(req.K, _draw_count(req, 4000), req.rng, chains=req.chains, burn_in=req.burn_in,
                    thin=req.thin)
    mean, se, ess, rhat = chain_summary(S)
    kept = S.shape[0] * S.shape[1]
    return Outcome(mean, std_error=se, ess=ess, samples=kept, rhat=rhat, warning=mixing_warning(rhat, ess, kept),
                   note=f"{S.shape[0]} chains, {_chord_kind(req.K)}; standard error: the largest of batch "
                        f"means, autocorrelation time and spread of chain means")


def _hit_and_run_sample(req):
    S = hit_and_run(req.K, req.k, req.rng, chains=req.chains, burn_in=req.burn_in, thin=req.thin)
    C, per, d = S.shape
    # interleave the chains so that consecutive rows come from different chains
    return Outcome(S.transpose(1, 0, 2).reshape(C * per, d)[:req.k],
                   note=f"{C} chains, {_chord_kind(req.K)}; approximate (Markov chain states)")


# ---------------------------------------------------------------------------------------------
# the table and its walk
# ---------------------------------------------------------------------------------------------
LADDER: tuple = (
    Method("closed form", "exact", MEASURES,
           "the family's own exact centroid or sampler (exact_centroid / exact_sample)",
           centroid=_family_centroid, sample=_family_sample),
    Method("unbounded", "refusal", ("volume",),
           "an unbounded polytope has no uniform distribution",
           centroid=_refuse_unbounded_volume, sample=_refuse_unbounded_volume),
    Method("triangulation", "exact", ("volume",),
           "facets of the enumerated vertices' convex hull coned from an interior point",
           centroid=_triangulation),
    Method("vertex enumeration", "exact", ("vertices",),
           "the mean of, or a uniform choice among, the enumerated vertices",
           centroid=_vertex_mean, sample=_vertex_choice),
    Method("normal-cone angles", "exact", ("directions",),
           "each vertex weighted by its normal-cone angle (affine dimension <= 2)",
           centroid=_normal_cone_centroid),
    Method("no law on extreme points", "refusal", ("vertices",),
           "no exact answer and no unbiased random walk over extreme points",
           centroid=_refuse_vertices, sample=_refuse_vertices),
    Method("no exact method", "refusal", MEASURES,
           "exact=True and only estimates remain",
           centroid=_refuse_estimates),
    Method("Monte Carlo over enumerated vertices", "estimate", ("directions",),
           "iid Gaussian directions, the best enumerated vertex by a scan",
           centroid=_on_vertices(_scan_centroid, fall_back_on_failure=True),
           sample=_on_vertices(_scan_sample, fall_back_on_failure=True)),
    Method("Monte Carlo over LMO", "estimate", ("directions",),
           "iid Gaussian directions through the set's LMO",
           centroid=_lmo_centroid, sample=_lmo_sample),
    Method("hit-and-run", "estimate", ("volume",),
           "a Markov chain with the uniform distribution as its invariant law",
           centroid=_hit_and_run_centroid, sample=_hit_and_run_sample, exact_draws=False),
)


def choose(req: Request, ladder: Optional[tuple] = None) -> tuple:
    """Walk the table once: ``(method, outcome)`` of the first row that answers ``req``.

    Rows that do not serve the measure or the purpose are passed over, and so are exact rows when
    ``req.exact is False``; a refusal row raises. ``ladder`` defaults to :data:`LADDER`, read at
    call time. O(rows) plus the cost of the rows tried.

    >>> import numpy as np, setkit
    >>> K = setkit.compile({"kind": "simplex", "dim": 3})
    >>> method, outcome = choose(Request(K, "volume", "centroid", np.random.default_rng(0)))
    >>> method.name, outcome.value.tolist()
    ('closed form', [0.3333333333333333, 0.3333333333333333, 0.3333333333333333])
    >>> choose(Request(K, "volume", "centroid", np.random.default_rng(0), exact=False))[0].name
    'hit-and-run'
    """
    for method in LADDER if ladder is None else ladder:
        answer = method.centroid if req.purpose == "centroid" else method.sample
        if answer is None or req.measure not in method.measures:
            continue
        if req.purpose == "centroid" and req.exact is False and method.kind == "exact":
            continue
        outcome = answer(req)
        if outcome is not None:
            return method, outcome
    raise UnsupportedOperationError(f"{req.asked}: no method of the table answers this request.")
