"""The distance penalty G·dist(x, K) and its smoothings.

Definitions (exact; d(x) = dist(x, K), p(x) = project(x)):

* ``smoothing=None``: P(x) = G·d(x); the gradient returned is
  G·(x - p(x))/d(x) outside K and 0 inside (a subgradient; on the boundary 0 is one).
* ``smoothing="moreau"``: P(x) = G·h(d(x)) with h(t) = t²/(2δ) for t <= δ and
  t - δ/2 beyond (the Moreau envelope of G·d, i.e. G times the Huber function of
  the distance); grad P(x) = G·(x - p(x))/max(d(x), δ): one projection per point,
  exact, Lipschitz with constant G/δ.
* ``smoothing="ball"``: P(x) = E_u[G·d(x + δu)], u uniform in the unit ball of
  R^dim. Estimated from seeded samples u_1..u_n drawn in antithetic pairs
  (u, -u). Value estimator: the sample mean of G·d(x + δu_j). Gradient
  estimator: the sample mean of G·(y_j - p(y_j))/d(y_j) at y_j = x + δu_j (the
  gradient of G·d averaged over the ball; unbiased because d is Lipschitz and
  differentiable almost everywhere). Standard errors are computed over the
  n/2 pair means. By convexity each pair mean is at least G·d(x), so the
  estimate never falls below the unsmoothed penalty.

Every variant is G-Lipschitz, so if a loss f is G-Lipschitz, f + P is
2G-Lipschitz, and with the unsmoothed penalty a minimizer of f + P over the
whole space can be taken inside K.

KL geometry (``geometry="kl"``, sets inside the nonnegative orthant, points x > 0):
P(x) = G·D(x) with D(x) = min_{z in K} KL(z || x) = KL(q(x) || x), q(x) the KL projection
of x; grad P(x) = G·(1 - q(x)/x) (Danskin's theorem: the minimizer is unique since
KL(. || x) is strictly convex, so D is differentiable with the partial gradient of
KL(z || x) in x at z = q(x)). D is convex and 0 exactly on K ∩ {x > 0}, but not
Lipschitz (it grows like x log x), so ``lipschitz`` is undefined there. The Moreau and
ball smoothings are Euclidean constructions (a Huber function of the Euclidean distance,
an average over a Euclidean ball that leaves x > 0) and are refused with this geometry;
D is already smooth on x > 0.
"""
from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from .chunked import is_dask_array, lazy_call, no_details
from .errors import InputError, UnsupportedOperationError

SMOOTHINGS = (None, "moreau", "ball")
PENALTY_GEOMETRIES = ("euclidean", "kl")


@dataclass(frozen=True)
class PenaltyEstimate:
    """A penalty value or gradient with its standard error.

    ``estimate`` has the batch shape (values) or the input shape (gradients);
    ``std_error`` the same shape (zeros for the exact variants); ``samples`` the
    number of ball points per input point (0 when exact); ``estimator`` says how.
    """

    estimate: Any
    std_error: Any
    samples: int
    estimator: str


class DistancePenalty:
    """P(x) = G·dist(x, K), optionally smoothed; batched ``value`` and ``grad``.

    Build it with ``K.penalty(G, smoothing=None | "moreau" | "ball", width=delta)``.
    Ball smoothing options: ``samples`` (even, default 64), ``rng`` (Generator or
    int seed, default 0) and ``resample`` (False: the same seeded ball points are
    used on every call, so ``value`` is a deterministic function of x - common
    random numbers; True: fresh points each call).

    >>> import setkit
    >>> K = setkit.compile({"kind": "box", "dim": 2, "lower": 0, "upper": 1})
    >>> float(K.penalty(3.0).value([2.0, 0.5]))
    3.0
    >>> K.penalty(3.0, "moreau", width=2.0).grad([2.0, 0.5]).tolist()
    [1.5, 0.0]
    """

    def __init__(self, K, G, smoothing=None, width=None, *, samples: int = 64, rng=None,
                 resample: bool = False, geometry: str = "euclidean"):
        label = K.node.label
        if smoothing not in SMOOTHINGS:
            raise InputError(f"penalty on {label}: smoothing must be None, 'moreau' or 'ball'; got {smoothing!r}.")
        geometry = "euclidean" if geometry is None else str(geometry).lower()
        if geometry not in PENALTY_GEOMETRIES:
            raise InputError(f"penalty on {label}: geometry must be 'euclidean' or 'kl'; got {geometry!r}.")
        if geometry == "kl" and smoothing is not None:
            why = ("the Moreau smoothing is the Huber function of the Euclidean distance" if smoothing == "moreau"
                   else "the ball smoothing averages over x + delta*u, which leaves the positive orthant where "
                        "KL(z || x) is undefined")
            raise UnsupportedOperationError(
                f"penalty on {label}: smoothing {smoothing!r} does not apply to geometry='kl': {why}. The KL "
                f"penalty G*min_z KL(z || x) is already differentiable on x > 0: use smoothing=None with "
                f"geometry='kl', or geometry='euclidean' with this smoothing.")
        self.geometry = geometry
        try:
            G = float(G)
        except (TypeError, ValueError):
            raise InputError(f"penalty on {label}: G must be a number >= 0; got {G!r}.") from None
        if not math.isfinite(G) or G < 0:
            raise InputError(f"penalty on {label}: G must be a finite number >= 0; got {G}.")
        if smoothing is None:
            if width is not None:
                raise InputError(f"penalty on {label}: width is only used with smoothing 'moreau' or 'ball'; "
                                 f"got width={width} with smoothing=None.")
        else:
            try:
                width = float(width)
            except (TypeError, ValueError):
                raise InputError(f"penalty on {label}: smoothing {smoothing!r} needs width = delta > 0; "
                                 f"got {width!r}.") from None
            if not (math.isfinite(width) and width > 0):
                raise InputError(f"penalty on {label}: width must be a finite number > 0; got {width}.")
        self.K = K
        self.G = G
        self.smoothing = smoothing
        self.width = width
        self.resample = bool(resample)
        self._U = None
        if smoothing == "ball":
            from .measures import as_generator
            if isinstance(samples, bool) or not isinstance(samples, (int, np.integer)) or samples < 2 or samples % 2:
                raise InputError(f"penalty on {label}: samples must be an even int >= 2 (antithetic pairs); "
                                 f"got {samples!r}.")
            self.samples = int(samples)
            self._rng = as_generator(rng, 0)
            self._U = self._draw()
        else:
            self.samples = 0

    def __repr__(self):
        sm = "" if self.smoothing is None else f", smoothing={self.smoothing!r}, width={self.width}"
        sm += ", geometry='kl'" if self.geometry == "kl" else ""
        return f"<DistancePenalty G={self.G} on {self.K.node.label}{sm}>"

    @property
    def lipschitz(self) -> float:
        """A Lipschitz constant of P: G for every variant.

        d(x) = dist(x, K) is 1-Lipschitz, the Huber function h has slope at most
        1 and an average of 1-Lipschitz functions is 1-Lipschitz, so G·d, G·h(d)
        and E_u[G·d(x + δu)] are G-Lipschitz.

        Examples
        --------
        >>> import setkit
        >>> setkit.simplex(dim=3).penalty(2.5, "moreau", width=0.1).lipschitz
        2.5
        """
        if self.geometry == "kl":
            raise UnsupportedOperationError(
                f"penalty on {self.K.node.label}: the KL penalty G*min_z KL(z || x) has no Lipschitz constant "
                f"(it grows like x log x as x grows and its gradient 1 - z/x is unbounded as x -> 0).")
        return self.G

    # -- sampling --------------------------------------------------------------------------------
    def _draw(self):
        d, h = self.K.dim, self.samples // 2
        Z = self._rng.standard_normal((h, d))
        Z /= np.linalg.norm(Z, axis=1, keepdims=True)
        R = self._rng.random(h) ** (1.0 / d)
        U = Z * R[:, None]
        return np.concatenate([U, -U])          # rows j and j + h are an antithetic pair

    def _ball_points(self):
        return self._draw() if self.resample else self._U

    # -- core ------------------------------------------------------------------------------------
    def _dist_proj(self, X):
        P, _ = self.K.run("project", X)
        R = X - P
        d = np.linalg.norm(R, axis=1)
        tol = 1e-12 * np.maximum(1.0, np.abs(X).max(axis=1))
        return d, R, tol

    def _kl(self, X, want_grad):
        from .kernels.bregman import kl_divergence
        bad = np.flatnonzero((X <= 0).any(axis=1)) if X.size else np.zeros(0, int)
        if bad.size:
            i = int(bad[0])
            j = int(np.flatnonzero(X[i] <= 0)[0])
            raise InputError(f"penalty on {self.K.node.label}: the KL penalty needs x > 0 (KL(z || x) is defined "
                             f"for positive x); got {X[i, j]!r} at batch row {i}, coordinate {j}.")
        T = np.log(X)
        Q, _ = self.K.run("project_kl", T)
        b = X.shape[0]
        v = self.G * kl_divergence(T, Q)
        g = self.G * (1.0 - Q / X) if want_grad else None
        return v, np.zeros(b), g, (np.zeros_like(X) if want_grad else None)

    def _compute(self, X, want_grad):
        G, delta = self.G, self.width
        b, dim = X.shape
        if self.geometry == "kl":
            return self._kl(X, want_grad)
        if self.smoothing is None:
            d, R, tol = self._dist_proj(X)
            v = G * d
            g = np.where((d > tol)[:, None], G * R / np.where(d > tol, d, 1.0)[:, None], 0.0) if want_grad else None
            return v, np.zeros(b), g, (np.zeros((b, dim)) if want_grad else None)
        if self.smoothing == "moreau":
            d, R, _ = self._dist_proj(X)
            v = G * np.where(d <= delta, d * d / (2 * delta), d - delta / 2)
            g = G * R / np.maximum(d, delta)[:, None] if want_grad else None
            return v, np.zeros(b), g, (np.zeros((b, dim)) if want_grad else None)
        U = self._ball_points()
        n = U.shape[0]
        h = n // 2
        Y = (X[:, None, :] + delta * U[None, :, :]).reshape(b * n, dim)
        d, R, tol = self._dist_proj(Y)
        vals = (G * d).reshape(b, n)
        pv = 0.5 * (vals[:, :h] + vals[:, h:])          # antithetic pair means
        v = pv.mean(axis=1)
        v_se = pv.std(axis=1, ddof=1) / math.sqrt(h) if h > 1 else np.full(b, np.nan)
        if not want_grad:
            return v, v_se, None, None
        g_all = np.where((d > tol)[:, None], G * R / np.where(d > tol, d, 1.0)[:, None], 0.0).reshape(b, n, dim)
        pg = 0.5 * (g_all[:, :h] + g_all[:, h:])
        g = pg.mean(axis=1)
        g_se = pg.std(axis=1, ddof=1) / math.sqrt(h) if h > 1 else np.full((b, dim), np.nan)
        return v, v_se, g, g_se

    def _lazy(self, op, x, details, out_kind):
        """A dask array in: the penalty block by block, lazily (setkit.chunked); this penalty is shipped once."""
        if details:
            raise no_details(self.K, f"penalty.{op}")
        return lazy_call(self.K, op, [(x, "x")], target=self, out_kind=out_kind)

    def _estimator(self, what):
        if self.geometry == "kl":
            return ("exact: G*KL(q(x) || x), q the KL projection" if what == "value"
                    else "exact: G*(1 - q(x)/x), q the KL projection")
        if self.smoothing is None:
            return "exact: G*d(x)" if what == "value" else "exact: G*(x - proj(x))/d(x), 0 inside the set"
        if self.smoothing == "moreau":
            return ("exact: G*h(d(x)), h(t) = t^2/(2 delta) if t <= delta else t - delta/2" if what == "value"
                    else "exact: G*(x - proj(x))/max(d(x), delta)")
        base = f"{self.samples} ball points in antithetic pairs, standard error over pair means"
        return ("mean of G*d(x + delta*u)" if what == "value"
                else "mean of G*(y - proj(y))/d(y) at y = x + delta*u") + "; " + base

    # -- public ----------------------------------------------------------------------------------
    def value(self, x, details: bool = False):
        """The penalty P(x) for one point or a batch.

        P(x) = G·d(x), G·h(d(x)) (smoothing "moreau") or E_u[G·d(x + δu)]
        (smoothing "ball"), with d(x) = dist(x, K); see the module docstring.

        Parameters
        ----------
        x : array_like of shape (..., *K.shape)
            One point or a batch (leading axes).
        details : bool, default False
            Return a :class:`PenaltyEstimate` with the standard error (nonzero
            for the ball smoothing only) and how the value was computed.

        Returns
        -------
        float or ndarray or PenaltyEstimate
            A float for one point, an array of the batch shape for a batch.

        Notes
        -----
        One projection per point (``samples`` projections per point for the
        ball smoothing), plus O(dim).

        Examples
        --------
        >>> import setkit
        >>> K = setkit.box(dim=2, lower=0, upper=1)
        >>> float(K.penalty(3.0).value([2.0, 0.5]))
        3.0
        >>> K.penalty(3.0).value([[2.0, 0.5], [0.5, 0.5]]).tolist()
        [3.0, 0.0]
        >>> float(K.penalty(3.0, "moreau", width=2.0).value([2.0, 0.5]))   # 3 * 1**2 / (2 * 2)
        0.75
        >>> est = K.penalty(3.0, "ball", width=0.5).value([2.0, 0.5], details=True)
        >>> round(float(est.estimate), 12), est.samples     # d is affine on that ball: the mean is exact
        (3.0, 64)
        """
        if is_dask_array(x):
            return self._lazy("value", x, details, "values")
        X, lead = self.K.flatten(x, "x", "penalty.value")
        v, se, _, _ = self._compute(X, False)
        out = self.K.unflatten_values(v, lead)
        if not details:
            return out
        return PenaltyEstimate(out, self.K.unflatten_values(se, lead), self.samples, self._estimator("value"))

    __call__ = value

    def grad(self, x, details: bool = False):
        """The gradient of the penalty (a subgradient for smoothing=None), of the shape of x.

        grad P(x) = G·(x - p(x))/d(x) outside K and 0 inside (smoothing None),
        G·(x - p(x))/max(d(x), δ) (smoothing "moreau"), or the mean of the
        former over the ball x + δu (smoothing "ball"); p is the projection.

        Parameters
        ----------
        x : array_like of shape (..., *K.shape)
            One point or a batch (leading axes).
        details : bool, default False
            Return a :class:`PenaltyEstimate` with the standard error of each
            entry (nonzero for the ball smoothing only).

        Returns
        -------
        ndarray or PenaltyEstimate
            An array of the shape of ``x``.

        Notes
        -----
        One projection per point (``samples`` per point for the ball
        smoothing), plus O(dim).

        Examples
        --------
        >>> import setkit
        >>> K = setkit.box(dim=2, lower=0, upper=1)
        >>> K.penalty(3.0).grad([2.0, 0.5]).tolist()
        [3.0, 0.0]
        >>> K.penalty(3.0, "moreau", width=2.0).grad([2.0, 0.5]).tolist()
        [1.5, 0.0]
        """
        if is_dask_array(x):
            return self._lazy("grad", x, details, "points")
        X, lead = self.K.flatten(x, "x", "penalty.grad")
        _, _, g, gse = self._compute(X, True)
        out = self.K.unflatten_points(g, lead)
        if not details:
            return out
        return PenaltyEstimate(out, self.K.unflatten_points(gse, lead), self.samples, self._estimator("grad"))

    def value_and_grad(self, x):
        """The value and the gradient of the penalty from one set of projections.

        Returns (P(x), grad P(x)) as :meth:`value` and :meth:`grad` would, with
        the same ball samples for both when smoothing is "ball".

        Parameters
        ----------
        x : array_like of shape (..., *K.shape)
            One point or a batch (leading axes).

        Returns
        -------
        tuple
            The value (a float, or an array of the batch shape) and the gradient
            (an array of the shape of ``x``).

        Notes
        -----
        One projection per point (``samples`` per point for the ball smoothing).

        Examples
        --------
        >>> import setkit
        >>> v, g = setkit.box(dim=2, lower=0, upper=1).penalty(3.0).value_and_grad([2.0, 0.5])
        >>> float(v), g.tolist()
        (3.0, [3.0, 0.0])
        """
        if is_dask_array(x):      # two lazy arrays (each block is projected once for each)
            return self._lazy("value", x, False, "values"), self._lazy("grad", x, False, "points")
        X, lead = self.K.flatten(x, "x", "penalty.value_and_grad")
        v, _, g, _ = self._compute(X, True)
        return self.K.unflatten_values(v, lead), self.K.unflatten_points(g, lead)

    def extend(self, f, grad_f=None, *, batched: bool = False) -> "ExtendedLoss":
        """The loss f + P on the whole space, with value and gradient.

        F(x) = f(x) + P(x), grad F(x) = grad f(x) + grad P(x). With the
        unsmoothed penalty and f L-Lipschitz with L <= G, a minimizer of F over
        the whole space can be taken inside K.

        Parameters
        ----------
        f : callable
            ``f(x)`` returns a float for one point of K.shape.
        grad_f : callable, optional
            ``grad_f(x)`` returns an array of K.shape; needed for ``grad``.
        batched : bool, default False
            ``f`` and ``grad_f`` take a batch (..., *K.shape) instead of one point.

        Returns
        -------
        ExtendedLoss

        Notes
        -----
        Each evaluation costs the penalty's plus one call of f (or grad_f) per
        point (one call per batch when ``batched``).

        Examples
        --------
        >>> import setkit
        >>> P = setkit.box(dim=2, lower=0, upper=1).penalty(3.0)
        >>> F = P.extend(lambda x: float(x @ x), lambda x: 2 * x)
        >>> float(F.value([2.0, 0.5])), F.grad([2.0, 0.5]).tolist()
        (7.25, [7.0, 1.0])
        """
        if not callable(f) or (grad_f is not None and not callable(grad_f)):
            raise InputError("penalty.extend: f and grad_f must be callables (grad_f may be None if only "
                             "values are needed).")
        return ExtendedLoss(f, grad_f, self, batched)


class ExtendedLoss:
    """x -> f(x) + P(x) with its gradient grad f(x) + grad P(x); batched like the penalty."""

    def __init__(self, f, grad_f, penalty: DistancePenalty, batched: bool):
        self.f, self.grad_f, self.penalty, self.batched = f, grad_f, penalty, batched

    def _apply(self, fn, x, kind):
        K = self.penalty.K
        X, lead = K.flatten(x, "x", f"extended loss {kind}")
        if self.batched:
            out = np.asarray(fn(K.unflatten_points(X, lead)), dtype=float)
            return out.reshape(lead + (() if kind == "value" else K.shape))
        rows = [np.asarray(fn(r.reshape(K.shape)), dtype=float) for r in X]
        if kind == "value":
            return K.unflatten_values(np.array([float(r) for r in rows]), lead)
        return K.unflatten_points(np.stack([r.reshape(K.dim) for r in rows]) if rows else np.zeros((0, K.dim)), lead)

    def value(self, x):
        """The extended loss f(x) + P(x) for one point or a batch.

        Parameters
        ----------
        x : array_like of shape (..., *K.shape)
            One point or a batch (leading axes).

        Returns
        -------
        float or ndarray
            A float for one point, an array of the batch shape for a batch.

        Notes
        -----
        The penalty's cost plus one call of f per point (one per batch when batched).

        Examples
        --------
        >>> import setkit
        >>> F = setkit.box(dim=2, lower=0, upper=1).penalty(3.0).extend(lambda x: float(x.sum()))
        >>> F.value([[2.0, 0.5], [0.5, 0.5]]).tolist()
        [5.5, 1.0]
        """
        return self._apply(self.f, x, "value") + self.penalty.value(x)

    __call__ = value

    def grad(self, x):
        """The gradient grad f(x) + grad P(x) for one point or a batch.

        Parameters
        ----------
        x : array_like of shape (..., *K.shape)
            One point or a batch (leading axes).

        Returns
        -------
        ndarray
            An array of the shape of ``x``.

        Raises
        ------
        InputError
            When the loss was built without ``grad_f``.

        Notes
        -----
        The penalty gradient's cost plus one call of grad_f per point.

        Examples
        --------
        >>> import numpy as np, setkit
        >>> F = setkit.box(dim=2, lower=0, upper=1).penalty(3.0).extend(lambda x: 0.0, lambda x: np.ones(2))
        >>> F.grad([2.0, 0.5]).tolist()
        [4.0, 1.0]
        """
        if self.grad_f is None:
            raise InputError("extended loss: grad needs grad_f; pass it to penalty.extend(f, grad_f).")
        return self._apply(self.grad_f, x, "grad") + self.penalty.grad(x)

    def lipschitz(self, L_f: float) -> float:
        """A Lipschitz constant of f + P when f is L_f-Lipschitz: L_f + G.

        Parameters
        ----------
        L_f : float
            A Lipschitz constant of f.

        Returns
        -------
        float

        Notes
        -----
        O(1): every penalty variant is G-Lipschitz.

        Examples
        --------
        >>> import setkit
        >>> setkit.box(dim=2, lower=0, upper=1).penalty(3.0).extend(lambda x: 0.0).lipschitz(1.5)
        4.5
        """
        return float(L_f) + self.penalty.lipschitz


def make_penalty(K, G, smoothing=None, width=None, **kw) -> DistancePenalty:
    """The penalty object served by ``K.penalty(G, smoothing, width, ...)``.

    P(x) = G·dist(x, K), optionally smoothed (see the module docstring).

    Parameters
    ----------
    K : DecisionSet
        The set.
    G : float
        The weight G >= 0 (a Lipschitz constant of the loss being extended).
    smoothing : {None, "moreau", "ball"}, default None
        The smoothing of the distance.
    width : float, optional
        The smoothing width δ > 0; required with a smoothing, not allowed without.
    **kw
        ``geometry`` ("euclidean" or "kl", see the module docstring). Ball smoothing
        options: ``samples`` (even, default 64), ``rng`` (a
        Generator or an int seed, default 0) and ``resample`` (default False).

    Returns
    -------
    DistancePenalty

    Raises
    ------
    InputError
        For a negative or non-finite G, an unknown smoothing or a bad width.

    Notes
    -----
    O(1) to build, plus O(samples·dim) to draw the ball points.

    Examples
    --------
    >>> import setkit
    >>> from setkit.penalty import make_penalty
    >>> P = make_penalty(setkit.box(dim=2, lower=0, upper=1), 3.0, "moreau", width=2.0)
    >>> P.grad([2.0, 0.5]).tolist()
    [1.5, 0.0]
    """
    return DistancePenalty(K, G, smoothing, width, **kw)
