"""Pictures of a set: its boundary, projections of sample points, an LMO answer and the centroid.

A set of dimension 2 is drawn as it is. A set of higher dimension is drawn as its *shadow* on
two chosen coordinates (the image of K under x -> (x_i, x_j)), whose support function is that
of K in the embedded direction: h_shadow(c) = h_K(c_i e_i + c_j e_j). The boundary of a 2-D
convex set is traced by its LMO over directions on the circle (each answer is an extreme point
of the shadow; in angle order they are the vertices of the drawn polygon). Along directions in
which K is unbounded, the point drawn is the projection of a far point in that direction, so an
unbounded set is drawn clipped to the neighbourhood of its samples.

A *slice* through a point ``at`` is the 2-D set of points of K that agree with ``at`` on every
other coordinate. It is compiled as the intersection of K with those equalities, so its own
projection and LMO serve the arrows and the LMO answer (they land on the drawn slice); its
boundary is traced by bisection along rays from a point of the slice with ``contains``.

Sample points are drawn around the centroid in the set's own coordinates, projected with
``K.project``, and both are shown in the chosen coordinates (an arrow from each point to its
projection; in a shadow the tip of the arrow is the shadow of the projection, which lies in the
shadow). matplotlib is optional: it is imported when a picture is made.
"""
from __future__ import annotations

import numpy as np

from .errors import BackendUnavailableError, InputError, SetkitError, UnboundedDirectionError

__all__ = ["draw", "parse_axes"]


def parse_axes(text) -> tuple:
    """Two coordinate indices from text such as ``"0,1"`` (or a pair of ints).

    >>> parse_axes("2, 5")
    (2, 5)
    """
    if isinstance(text, (tuple, list)):
        parts = list(text)
    else:
        parts = [t for t in str(text).replace(" ", "").split(",") if t]
    try:
        axes = tuple(int(t) for t in parts)
    except (TypeError, ValueError):
        raise InputError(f"axes {text!r}: expected two coordinate indices such as '0,1'.") from None
    if len(axes) != 2 or axes[0] == axes[1]:
        raise InputError(f"axes {text!r}: expected two different coordinate indices such as '0,1'.")
    return axes


def _matplotlib():
    try:
        import matplotlib
        matplotlib.use("Agg", force=False)
        from matplotlib.figure import Figure
    except ImportError as exc:
        raise BackendUnavailableError(
            f"pictures need matplotlib, which is not installed ({exc}); install it with "
            f"python3 -m pip install matplotlib (or the extra: pip install -e \".[docs]\").") from None
    return Figure


def _flat_call(K, op, A):
    """``op`` on flat rows ``A`` of length K.dim; the answers as flat rows."""
    out = getattr(K, op)(np.asarray(A, float).reshape((-1,) + tuple(K.shape)))
    return np.asarray(out, float).reshape(len(A), -1)


def _centroid(K, measure):
    try:
        c = K.centroid(measure=measure)
    except SetkitError:
        c = K.project(np.zeros(K.shape))
    return np.asarray(getattr(c, "point", c), float).reshape(-1)


def trace_boundary(K, axes, center, n_directions: int = 72, reach: float = 10.0) -> tuple:
    """Extreme points of the shadow of K on ``axes``, one per direction on the circle, in angle order.

    Returns (points of shape (n, 2), whether some direction was unbounded). Cost: n LMO calls
    (one batched call), plus n projections when K is unbounded along some direction.
    """
    i, j = axes
    angles = np.linspace(0.0, 2 * np.pi, n_directions, endpoint=False)
    C = np.zeros((n_directions, K.dim))
    C[:, i], C[:, j] = np.cos(angles), np.sin(angles)
    try:
        X = _flat_call(K, "lmo", -C)          # maximizing <c, x> = the LMO at -c
        unbounded = False
    except UnboundedDirectionError:
        rows, unbounded = [], False
        for c in C:
            try:
                rows.append(_flat_call(K, "lmo", -c[None])[0])
            except UnboundedDirectionError:
                unbounded = True
                rows.append(_flat_call(K, "project", (center + reach * c)[None])[0])
        X = np.array(rows)
    return X[:, [i, j]], unbounded


def slice_set(K, at, axes):
    """The points of K that agree with ``at`` off the two ``axes``: K ∩ {x : x_k = at_k, k not in axes}.

    Returned as a compiled intersection (a set of K.dim flat coordinates; a set of matrix
    points is first flattened by the identity map). Its projection and LMO are those of the
    slice, so arrows drawn with it end on the drawn slice. Raises EmptySetError (through the
    intersection's compile-time check) when the plane through ``at`` misses K.
    """
    from .builders import affine, intersection, polyhedron

    i, j = axes
    rest = [k for k in range(K.dim) if k not in (i, j)]
    flat = K if len(tuple(K.shape)) == 1 else affine(set=K, matrix=np.eye(K.dim))
    if not rest:
        return flat
    E = np.zeros((len(rest), K.dim))
    E[np.arange(len(rest)), rest] = 1.0
    return intersection(of=[flat, polyhedron(C=E, d=np.asarray(at, float)[rest], dim=K.dim)])


def trace_slice(S, axes, base, n_directions: int = 72, reach: float = 10.0, steps: int = 60) -> tuple:
    """Boundary of the 2-D slice S (from :func:`slice_set`) around ``base``, a point of S.

    Along each of ``n_directions`` rays base + r·(cos t e_i + sin t e_j) the largest r with the
    point in S is found by bisection on ``S.contains`` (``steps`` halvings after doubling to a
    bracket, capped at ``reach`` times the set's scale). Returns (points (n, 2), whether some ray
    hit the cap). Cost: about ``steps`` + 40 batched membership calls of n points.
    """
    i, j = axes
    angles = np.linspace(0.0, 2 * np.pi, n_directions, endpoint=False)
    D = np.zeros((n_directions, S.dim))
    D[:, i], D[:, j] = np.cos(angles), np.sin(angles)
    scale = max(1.0, float(np.max(np.abs(base))))
    cap = reach * scale
    inside = lambda r: np.asarray(S.contains((base + r[:, None] * D).reshape((-1,) + tuple(S.shape))),  # noqa: E731
                                  bool).reshape(-1)
    lo = np.zeros(n_directions)
    hi = np.full(n_directions, 1e-3 * scale)
    for _ in range(40):                      # grow the bracket until every ray has left the set (or the cap)
        grow = inside(hi) & (hi < cap)
        if not grow.any():
            break
        lo = np.where(grow, hi, lo)
        hi = np.where(grow, np.minimum(2 * hi, cap), hi)
    capped = inside(hi)
    lo = np.where(capped, hi, lo)
    for _ in range(int(steps)):
        mid = 0.5 * (lo + hi)
        ok = inside(mid)
        lo, hi = np.where(ok, mid, lo), np.where(ok, hi, mid)
    X = base + lo[:, None] * D
    return X[:, [i, j]], bool(capped.any())


def polygon_centroid(P) -> np.ndarray:
    """Area centroid of the polygon with vertices P (n, 2) in order (shoelace formula).

    >>> polygon_centroid([[0, 0], [2, 0], [2, 2], [0, 2]]).tolist()
    [1.0, 1.0]
    """
    P = np.asarray(P, float)
    x, y = P[:, 0], P[:, 1]
    xn, yn = np.roll(x, -1), np.roll(y, -1)
    cross = x * yn - xn * y
    area = cross.sum() / 2.0
    if abs(area) <= 1e-300:
        return P.mean(axis=0)
    return np.array([((x + xn) * cross).sum(), ((y + yn) * cross).sum()]) / (6.0 * area)


def draw(K, at=None, axes=(0, 1), mode: str = "shadow", points: int = 6, seed: int = 0, ax=None,
         n_directions: int = 72, measure: str = "volume"):
    """A matplotlib Figure of K (or of its shadow on two coordinates) with projections, an LMO answer and the centroid.

    Parameters
    ----------
    K : DecisionSet
        The set. Dimension 2 is drawn as it is; higher dimensions as the shadow on ``axes``.
    at : array_like, optional
        The point the sample cloud is centred on (and the slice passes through), of shape
        K.shape (default: the centroid).
    axes : pair of int or str
        The two coordinates (flat, C order) drawn, e.g. ``(0, 1)`` or ``"2,5"``.
    mode : {"shadow", "slice"}
        "shadow": the orthogonal projection of the set onto the two coordinates. "slice": the
        points of the set that agree with ``at`` on every other coordinate (a 2-D cut through
        ``at``); samples, projections and the LMO answer are those of the slice, and the centroid
        drawn is the area centroid of the traced slice.
    points : int
        Sample points drawn with their projections (arrows).
    seed : int
        Seed of the sample points.
    ax : matplotlib Axes, optional
        Draw into these axes instead of a new figure.
    n_directions : int
        Directions on the circle for the boundary (one LMO call each, in one batch).
    measure : {"volume", "vertices", "directions"}
        The measure of the centroid drawn (see ``K.centroid``); "directions" is the cheapest
        on combinatorial sets.

    Returns
    -------
    matplotlib.figure.Figure
        With the attribute ``setkit_drawing``: a dict of what was drawn, with the sample
        points and their projections in the set's own coordinates (``samples``,
        ``projections``, flat lists of K.dim numbers), the boundary points, the LMO
        direction and answer and the centroid in the drawn coordinates.

    Notes
    -----
    The shadow of a convex set is convex and its support function is that of K along the
    embedded direction, so the LMO answers over the circle are its extreme points. Cost:
    ``n_directions`` LMO calls, one centroid, ``points`` projections.

    Examples
    --------
    >>> import setkit
    >>> from setkit.pictures import draw
    >>> fig = draw(setkit.simplex(dim=3), points=3)
    >>> sorted(fig.setkit_drawing)[:3]
    ['axes', 'boundary', 'centroid']
    """
    Figure = _matplotlib()
    if mode not in ("shadow", "slice"):
        raise InputError(f"draw: mode {mode!r} is not known; the modes are 'shadow' and 'slice'.")
    if K.dim < 2:
        raise InputError(f"draw: the set has dimension {K.dim}; a picture needs at least 2 coordinates.")
    axes = parse_axes(axes)
    if not all(0 <= a < K.dim for a in axes):
        raise InputError(f"draw: axes {axes} out of range; the set has coordinates 0..{K.dim - 1}.")
    if int(points) < 1:
        raise InputError(f"draw: points must be at least 1; got {points}.")
    i, j = axes
    centroid = _centroid(K, measure)
    center = centroid if at is None else np.asarray(at, float).reshape(-1)
    if center.size != K.dim:
        raise InputError(f"draw: at must have {K.dim} numbers (shape {K.shape}); got {center.size}.")
    c2 = np.array([1.0, 0.45]) / np.hypot(1.0, 0.45)
    c = np.zeros(K.dim)
    c[i], c[j] = c2
    rng = np.random.default_rng(seed)
    if mode == "slice" and K.dim > 2:
        S = slice_set(K, center, axes)
        base = center if bool(np.all(K.contains(center.reshape(K.shape)))) else _flat_call(S, "project", center[None])[0]
        boundary, unbounded = trace_slice(S, axes, base, n_directions)
        extent = float(np.max(np.ptp(boundary, axis=0))) or 1.0
        Y = np.repeat(base[None], int(points), axis=0)
        Y[:, [i, j]] += 0.6 * extent * rng.normal(size=(int(points), 2))
        P = _flat_call(S, "project", Y)
        try:
            L = _flat_call(S, "lmo", c[None])[0]
        except UnboundedDirectionError:
            L = None
        centroid = base.copy()
        centroid[[i, j]] = polygon_centroid(boundary)
        measure = "area of the slice"
    else:
        boundary, unbounded = trace_boundary(K, axes, center, n_directions)
        extent = float(np.max(np.ptp(boundary, axis=0))) or 1.0
        Y = center + 0.6 * extent * rng.normal(size=(int(points), K.dim))
        P = _flat_call(K, "project", Y)
        try:
            L = _flat_call(K, "lmo", c[None])[0]
        except UnboundedDirectionError:
            L = None
    drawn = "set" if K.dim == 2 else mode

    if ax is None:
        fig = Figure(figsize=(5.2, 4.6))
        ax = fig.add_subplot(1, 1, 1)
    else:
        fig = ax.figure
    closed = np.vstack([boundary, boundary[:1]])
    ax.fill(closed[:, 0], closed[:, 1], color="#cfe3f3", zorder=0,
            label={"set": "the set", "shadow": f"shadow on x[{i}], x[{j}]",
                   "slice": f"slice in x[{i}], x[{j}]"}[drawn])
    ax.plot(closed[:, 0], closed[:, 1], color="#2b6a99", lw=1.4, zorder=1)
    ax.scatter(Y[:, i], Y[:, j], s=14, color="#444444", zorder=3, label="sample points y")
    for y, p in zip(Y, P):
        ax.annotate("", xy=(p[i], p[j]), xytext=(y[i], y[j]),
                    arrowprops=dict(arrowstyle="->", color="#666666", lw=0.9), zorder=2)
    ax.scatter(P[:, i], P[:, j], s=16, color="#d9822b", zorder=4, label="projections")
    ax.scatter([centroid[i]], [centroid[j]], marker="P", s=70, color="#2f8f4e", zorder=5, label=f"centroid ({measure})")
    if L is not None:
        base = centroid[[i, j]]
        ax.annotate("", xy=base + 0.25 * extent * c2, xytext=base,
                    arrowprops=dict(arrowstyle="-|>", color="#a23b72", lw=1.6), zorder=5)
        ax.scatter([L[i]], [L[j]], marker="*", s=140, color="#a23b72", zorder=6, label="lmo(c), c = arrow")
    name = f" '{K.node.name}'" if getattr(K.node, "name", None) else ""
    title = f"{K.node.kind}{name}, shape {tuple(K.shape)}"
    if unbounded:
        title += " (unbounded; drawn near the samples)"
    ax.set_title(title, fontsize=10)
    ax.set_xlabel(f"x[{i}]")
    ax.set_ylabel(f"x[{j}]")
    ax.set_aspect("equal", adjustable="datalim")
    ax.legend(fontsize=7, loc="best", framealpha=0.85)
    fig.setkit_drawing = {
        "axes": [i, j], "mode": drawn, "unbounded": bool(unbounded),
        "boundary": boundary.tolist(), "samples": Y.tolist(), "projections": P.tolist(),
        "lmo_direction": c2.tolist(), "lmo": None if L is None else [float(L[i]), float(L[j])],
        "centroid": [float(centroid[i]), float(centroid[j])],
    }
    return fig
