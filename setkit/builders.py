"""Builders: one Python function per built-in kind, plus :func:`build` for any kind.

``setkit.simplex(dim=5)`` is ``setkit.build("simplex", dim=5)``, which is
``setkit.compile({"kind": "simplex", "dim": 5})``: the keyword parameters of a
builder are the keys of the kind in a description file, read and validated by
the family's own ``from_spec`` (errors name the builder's argument). A parameter
passed as ``None`` is left out, so the family's default applies. Every builder
only forwards its named parameters to :func:`build`; kinds without a builder here
(added by other modules or by entry points) are reached as ``setkit.<kind>(...)``
through the module's fallback, or by :func:`build`.

Nothing heavy is imported here: numpy, scipy and the families load on the
first call.
"""
from __future__ import annotations

TYPE_CHECKING = False   # mypy and pyright take it as true; nothing below is imported at run time
if TYPE_CHECKING:
    from typing import Any, Literal, Mapping, Sequence

    from numpy.typing import ArrayLike

    from .decision_set import DecisionSet

    SetLike = Mapping[str, Any] | DecisionSet

__all__ = ["build", "simplex", "budget", "box", "ball", "permutahedron", "transport", "birkhoff", "flow",
           "polyhedron", "hull", "intersection", "product", "affine"]


def build(kind: str, /, **params) -> DecisionSet:
    """Compile a set of kind ``kind`` from keyword parameters.

    ``build(kind, **params)`` is ``setkit.compile({"kind": kind, **params})``;
    parameters passed as ``None`` are left out (the family's default applies).

    Parameters
    ----------
    kind : str
        A registered kind (``setkit.extend.known_kinds()`` lists them).
    **params
        The parameters of the kind, as in a description file; array parameters
        accept lists, NumPy arrays or paths to ``.npy``/``.npz``/``.csv`` files.

    Returns
    -------
    DecisionSet

    Raises
    ------
    DescriptionError
        For an unknown kind or parameter, or an invalid value; the message names
        the argument and lists the valid choices.

    Notes
    -----
    Cost: validation of the parameters, linear in the size of the data (a flow
    network or a polyhedron is also checked for emptiness by one LP).

    Examples
    --------
    >>> import setkit
    >>> K = setkit.build("simplex", dim=3, total=2.0)
    >>> K.project([3.0, 0.0, 0.0]).tolist()
    [2.0, 0.0, 0.0]
    >>> setkit.build("simplex", dim=0)
    Traceback (most recent call last):
    ...
    setkit.errors.DescriptionError: simplex (argument: dim): dim must be at least 1; got 0.
    """
    from .decision_set import DecisionSet
    from .description import Location, parse_node
    spec = {"kind": kind}
    spec.update((k, v) for k, v in params.items() if v is not None)
    return DecisionSet(parse_node(spec, Location("argument", ())))


def simplex(*, dim: int, total: float = 1.0, mode: Literal["equal", "at_most"] = "equal",
            name: str | None = None) -> DecisionSet:
    """The simplex of points with nonnegative coordinates summing to ``total``.

    K = {x in R^n : x >= 0, sum_i x_i = t} (mode ``"equal"``) or
    {x in R^n : x >= 0, sum_i x_i <= t} (mode ``"at_most"``), with n = ``dim``
    and t = ``total``.

    Parameters
    ----------
    dim : int
        The number of coordinates n, at least 1.
    total : float, default 1.0
        The sum t, at least 0.
    mode : {"equal", "at_most"}, default "equal"
        Whether the coordinates sum exactly to ``total`` or to at most ``total``.
    name : str, optional
        A label used in error messages and ``explain()``.

    Returns
    -------
    DecisionSet
        Points of shape ``(dim,)``.

    Notes
    -----
    Projection by a sorted threshold, O(n log n); distance, LMO (a vertex
    t·e_i at the smallest c_i), support (t·max c) and membership, O(n).

    Examples
    --------
    >>> import setkit
    >>> K = setkit.simplex(dim=3)
    >>> K.project([0.8, 0.6, -1.0]).round(6).tolist()
    [0.6, 0.4, 0.0]
    >>> K.lmo([2.0, -1.0, 0.5]).tolist()
    [0.0, 1.0, 0.0]
    >>> setkit.simplex(dim=3, total=2.0, mode="at_most").project([-1.0, -1.0, 0.5]).tolist()
    [0.0, 0.0, 0.5]
    """
    return build("simplex", dim=dim, total=total, mode=mode, name=name)


def budget(*, dim: int, total: float, lower: ArrayLike | float = 0.0, upper: ArrayLike | float | None = None,
           weights: ArrayLike | float | None = None, mode: Literal["equal", "at_most"] = "equal",
           name: str | None = None) -> DecisionSet:
    """A budget split: bounded coordinates whose weighted sum equals (or is at most) ``total``.

    K = {x in R^n : l <= x <= u, sum_i w_i x_i = t} (mode ``"equal"``) or
    ``<= t`` (mode ``"at_most"``), with n = ``dim``, t = ``total``, l = ``lower``,
    u = ``upper`` and w = ``weights``. The set is bounded even without upper
    bounds: x_i <= l_i + (t - <w, l>)/w_i.

    Parameters
    ----------
    dim : int
        The number of coordinates n, at least 1.
    total : float
        The budget t; at least <w, l>, and (mode "equal") at most <w, u>.
    lower : float or array_like of shape (dim,), default 0.0
        Finite lower bounds l (a number applies to every coordinate).
    upper : float or array_like of shape (dim,), optional
        Upper bounds u, at least ``lower``; +inf entries allowed. Default: +inf.
    weights : float or array_like of shape (dim,), optional
        Positive weights w of the sum. Default: 1 for every coordinate.
    mode : {"equal", "at_most"}, default "equal"
        Whether the weighted sum equals ``total`` or is at most ``total``.
    name : str, optional
        A label used in error messages and ``explain()``.

    Returns
    -------
    DecisionSet
        Points of shape ``(dim,)``.

    Notes
    -----
    Projection by a randomized breakpoint search on the multiplier of the
    weighted sum, expected O(n); LMO and support by the continuous-knapsack
    greedy (smallest c_i / w_i first), expected O(n); membership O(n).

    Examples
    --------
    >>> import setkit
    >>> K = setkit.budget(dim=3, total=1.0, upper=0.5)
    >>> K.project([1.0, 1.0, -1.0]).round(6).tolist()
    [0.5, 0.5, 0.0]
    >>> K.lmo([3.0, 1.0, 2.0]).round(6).tolist()
    [0.0, 0.5, 0.5]
    >>> setkit.budget(dim=2, total=4.0, weights=[1.0, 2.0]).support([1.0, 1.0]).item()
    4.0
    """
    return build("budget", dim=dim, total=total, lower=lower, upper=upper, weights=weights, mode=mode, name=name)


def box(*, lower: ArrayLike | float | None = None, upper: ArrayLike | float | None = None, dim: int | None = None,
        name: str | None = None) -> DecisionSet:
    """A box: every coordinate between its lower and upper bound.

    K = {x in R^n : l_i <= x_i <= u_i}, with l = ``lower`` and u = ``upper``;
    bounds may be infinite (an unbounded box has no LMO along some directions).

    Parameters
    ----------
    lower : float or array_like of shape (n,), optional
        Lower bounds l; -inf entries allowed, +inf not. Default: -inf.
    upper : float or array_like of shape (n,), optional
        Upper bounds u, at least ``lower``; +inf entries allowed, -inf not.
        Default: +inf.
    dim : int, optional
        The number of coordinates n; required when both bounds are numbers,
        else the length of the bound lists.
    name : str, optional
        A label used in error messages and ``explain()``.

    Returns
    -------
    DecisionSet
        Points of shape ``(n,)``.

    Notes
    -----
    Every operator is O(n): projection by clipping, LMO (l_i where c_i > 0,
    u_i where c_i < 0), support sum_i max(c_i l_i, c_i u_i).

    Examples
    --------
    >>> import setkit
    >>> K = setkit.box(dim=2, lower=0, upper=1)
    >>> K.project([2.0, -1.0]).tolist()
    [1.0, 0.0]
    >>> setkit.box(lower=[0.0, -1.0], upper=[1.0, 3.0]).support([1.0, -2.0]).item()
    3.0
    """
    return build("box", lower=lower, upper=upper, dim=dim, name=name)


def ball(*, radius: float, dim: int | None = None, norm: Literal[1, 2, "inf"] = 2,
         center: ArrayLike | float | None = None, name: str | None = None) -> DecisionSet:
    """A norm ball: the points within ``radius`` of ``center`` in the 1-, 2- or inf-norm.

    K = {x in R^n : ||x - c||_p <= r}, p in {1, 2, inf}, with c = ``center``
    and r = ``radius``.

    Parameters
    ----------
    radius : float
        The radius r, at least 0.
    dim : int, optional
        The number of coordinates n; required unless ``center`` is a list.
    norm : {1, 2, "inf"}, default 2
        The norm p.
    center : float or array_like of shape (n,), optional
        The center c (a number applies to every coordinate). Default: the origin.
    name : str, optional
        A label used in error messages and ``explain()``.

    Returns
    -------
    DecisionSet
        Points of shape ``(n,)``.

    Notes
    -----
    Every operator is O(n): projection by radial scaling (p = 2), clipping
    (p = inf) or a simplex projection of ``|y - c|`` (p = 1); support
    <s, c> + r ||s||_q with q the dual exponent.

    Examples
    --------
    >>> import setkit
    >>> K = setkit.ball(dim=2, norm=1, radius=1.0)
    >>> K.project([2.0, 0.5]).tolist()
    [1.0, 0.0]
    >>> setkit.ball(center=[1.0, 1.0], radius=2.0).support([3.0, 4.0]).item()
    17.0
    """
    return build("ball", radius=radius, dim=dim, norm=norm, center=center, name=name)


def permutahedron(*, weights: ArrayLike, dim: int | None = None, name: str | None = None) -> DecisionSet:
    """The permutahedron of a weight vector: the convex hull of all its permutations.

    K = conv{(w_pi(1), ..., w_pi(n)) : pi a permutation of 1..n}, w = ``weights``;
    equivalently sum x = sum w and, for every k, the k largest entries of x sum
    to at most the k largest entries of w. Used for rankings: position weights
    assigned to items.

    Parameters
    ----------
    weights : array_like of shape (n,)
        The weight vector w (at least one entry; ties allowed).
    dim : int, optional
        The number of coordinates n; when given it must equal ``len(weights)``.
    name : str, optional
        A label used in error messages and ``explain()``.

    Returns
    -------
    DecisionSet
        Points of shape ``(n,)``.

    Notes
    -----
    Projection by one sort and pool-adjacent-violators, LMO by the
    rearrangement inequality (largest weight at the smallest cost), support
    and membership by sorted partial sums: each O(n log n).

    Examples
    --------
    >>> import setkit
    >>> K = setkit.permutahedron(weights=[3, 2, 1])
    >>> K.lmo([0.5, -1.0, 2.0]).tolist()
    [2.0, 3.0, 1.0]
    >>> K.project([10.0, 0.0, 0.0]).round(6).tolist()
    [3.0, 1.5, 1.5]
    """
    return build("permutahedron", weights=weights, dim=dim, name=name)


def transport(*, rows: ArrayLike, cols: ArrayLike, name: str | None = None) -> DecisionSet:
    """A transportation polytope: nonnegative m x n plans with given row and column sums.

    K = {X in R^{m x n} : X >= 0, sum_j X_ij = r_i, sum_i X_ij = s_j}, with
    r = ``rows`` and s = ``cols``.

    Parameters
    ----------
    rows : array_like of shape (m,)
        The row sums r, nonnegative.
    cols : array_like of shape (n,)
        The column sums s, nonnegative, with the same total as ``rows``
        (otherwise the set is empty and :class:`~setkit.errors.EmptySetError` is raised).
    name : str, optional
        A label used in error messages and ``explain()``.

    Returns
    -------
    DecisionSet
        Points of shape ``(m, n)``.

    Notes
    -----
    Projection by a dual Newton method on node potentials, O(mn) per
    conjugate-gradient step; LMO by simplex on the bipartite network LP
    (vertex answers); support from the LMO.

    Examples
    --------
    >>> import setkit
    >>> K = setkit.transport(rows=[1, 2], cols=[2, 1])
    >>> K.lmo([[0.0, 1.0], [1.0, 5.0]]).tolist()
    [[0.0, 1.0], [2.0, 0.0]]
    """
    return build("transport", rows=rows, cols=cols, name=name)


def birkhoff(*, n: int, name: str | None = None) -> DecisionSet:
    """The Birkhoff polytope: doubly-stochastic n x n matrices.

    K = {X in R^{n x n} : X >= 0, X 1 = 1, X^T 1 = 1}, the convex hull of the
    n! permutation matrices (Birkhoff-von Neumann theorem).

    Parameters
    ----------
    n : int
        The size n of the matrices, at least 1.
    name : str, optional
        A label used in error messages and ``explain()``.

    Returns
    -------
    DecisionSet
        Points of shape ``(n, n)``.

    Notes
    -----
    LMO and support by the assignment problem
    (``scipy.optimize.linear_sum_assignment``), O(n^3), with permutation
    matrices as answers; projection as for :func:`transport`.

    Examples
    --------
    >>> import numpy as np, setkit
    >>> K = setkit.birkhoff(n=3)
    >>> K.lmo([[0, 1, 1], [1, 1, 0], [1, 0, 1.0]]).tolist()
    [[1.0, 0.0, 0.0], [0.0, 0.0, 1.0], [0.0, 1.0, 0.0]]
    >>> K.project(np.eye(3) * 3).round(6).tolist()
    [[1.0, 0.0, 0.0], [0.0, 1.0, 0.0], [0.0, 0.0, 1.0]]
    """
    return build("birkhoff", n=n, name=name)


def flow(*, edges: Sequence | str | Any, nodes: Sequence | int | None = None,
         supply: Mapping | Sequence | None = None, name: str | None = None) -> DecisionSet:
    """A network-flow polytope: one coordinate per edge, flow conserved at every node.

    K = {x in R^E : out_v(x) - in_v(x) = s_v for every node v,
    l_e <= x_e <= u_e for every edge e}, with s = ``supply`` (net supply:
    flow out minus flow in), l the edges' lower bounds and u their capacities.

    Parameters
    ----------
    edges : list, str or networkx.DiGraph
        The edges in coordinate order: mappings with keys ``from``, ``to`` and
        optionally ``capacity`` (default +inf) and ``lower`` (default 0), or
        lists ``[from, to, capacity, lower]`` (the last two optional); or a
        path to a ``.csv`` edge list with a header row naming those columns;
        or a networkx DiGraph whose edge attributes ``capacity``/``lower`` and
        node attribute ``supply`` are read.
    nodes : list or int, optional
        The node names, or a node count (names 0..count-1). Default: the nodes
        the edges name, in order of appearance.
    supply : mapping or list, optional
        Net supply of each node (node name -> number; unnamed nodes have 0),
        or a list with one entry per node (needs ``nodes``). Default: 0
        everywhere (circulations).
    name : str, optional
        A label used in error messages and ``explain()``.

    Returns
    -------
    DecisionSet
        Points of shape ``(E,)``, E the number of edges.

    Notes
    -----
    Building checks feasibility by one LP (when the set is empty, a max-flow
    min-cut names the node set that cannot send its supply out). Projection by a dual Newton method on node
    potentials, O(E) per conjugate-gradient step; LMO by simplex on the
    incidence-matrix LP (vertex answers).

    Examples
    --------
    >>> import setkit
    >>> K = setkit.flow(nodes=["a", "b", "c"], supply={"a": 2, "c": -2},
    ...                 edges=[{"from": "a", "to": "b", "capacity": 1}, ["a", "c"], ["b", "c"]])
    >>> K.lmo([1.0, 3.0, 1.0]).tolist()
    [1.0, 1.0, 1.0]
    """
    return build("flow", edges=edges, nodes=nodes, supply=supply, name=name)


def polyhedron(*, A: ArrayLike | str | None = None, b: ArrayLike | float | None = None,
               C: ArrayLike | str | None = None, d: ArrayLike | float | None = None,
               lower: ArrayLike | float | None = None, upper: ArrayLike | float | None = None,
               dim: int | None = None, name: str | None = None) -> DecisionSet:
    """A general polyhedron given by inequalities, equalities and bounds (dense or sparse).

    K = {x in R^n : A x <= b, C x = d, l <= x <= u}; every part is optional.

    Parameters
    ----------
    A : array_like or scipy.sparse matrix of shape (p, n), optional
        Inequality matrix (or a ``.npy``/``.npz``/``.csv`` path); needs ``b``.
    b : float or array_like of shape (p,), optional
        Right-hand sides of A x <= b; +inf entries drop their row.
    C : array_like or scipy.sparse matrix of shape (q, n), optional
        Equality matrix; needs ``d``.
    d : float or array_like of shape (q,), optional
        Right-hand sides of C x = d.
    lower : float or array_like of shape (n,), optional
        Lower bounds l (-inf allowed). Default: -inf.
    upper : float or array_like of shape (n,), optional
        Upper bounds u (+inf allowed). Default: +inf.
    dim : int, optional
        The number of coordinates n; else read from ``A``, ``C`` or the bound lists.
    name : str, optional
        A label used in error messages and ``explain()``.

    Returns
    -------
    DecisionSet
        Points of shape ``(n,)``.

    Notes
    -----
    Building costs O(nnz(A) + nnz(C) + n) plus one LP, which reports an empty
    polyhedron with its conflicting constraints. Projection by OSQP
    (factorized once, warm-started) and LMO by HiGHS on the linear form: one
    QP or LP solve per point.

    Examples
    --------
    >>> import setkit
    >>> K = setkit.polyhedron(A=[[1, 1]], b=[1], lower=0)
    >>> K.project([1.0, 1.0]).round(6).tolist()
    [0.5, 0.5]
    >>> K.support([1.0, 2.0]).round(6).item()
    2.0
    """
    return build("polyhedron", A=A, b=b, C=C, d=d, lower=lower, upper=upper, dim=dim, name=name)


def hull(*, points: ArrayLike, dim: int | None = None, name: str | None = None) -> DecisionSet:
    """The convex hull of given points.

    K = conv{v_1, ..., v_k} = {V^T w : w >= 0, sum w = 1}, the points v_i being
    the rows of V = ``points``.

    Parameters
    ----------
    points : array_like of shape (k, n)
        The points, one per row (at least one point with one coordinate).
    dim : int, optional
        The number of coordinates n; when given it must equal the number of
        columns (``dim=1`` reads a flat list as k points on a line).
    name : str, optional
        A label used in error messages and ``explain()``.

    Returns
    -------
    DecisionSet
        Points of shape ``(n,)``.

    Notes
    -----
    LMO and support by a scan of the points, O(kn); projection by Wolfe's
    nearest-point algorithm, O(kn) per cycle, stopped on the Frank-Wolfe gap.

    Examples
    --------
    >>> import setkit
    >>> K = setkit.hull(points=[[0, 0], [2, 0], [0, 2]])
    >>> K.project([2.0, 2.0]).round(8).tolist()
    [1.0, 1.0]
    >>> K.lmo([1.0, -1.0]).tolist()
    [0.0, 2.0]
    """
    return build("hull", points=points, dim=dim, name=name)


def intersection(*, of: Sequence[SetLike], accuracy: float = 1e-7, max_iterations: int = 20_000,
                 splitting: Literal["accelerated", "dykstra"] = "accelerated",
                 name: str | None = None) -> DecisionSet:
    """The intersection of sets of one point shape.

    K = K_1 ∩ ... ∩ K_m.

    Parameters
    ----------
    of : list of DecisionSet or description mappings
        The parts K_i (at least one), all of one point shape.
    accuracy : float, default 1e-7
        Splitting methods only: the relative target of the duality gap and the
        residual, between 1e-14 and 1e-2.
    max_iterations : int, default 20000
        Splitting methods only: the cap on sweeps or evaluations, at least 1.
    splitting : {"accelerated", "dykstra"}, default "accelerated"
        The splitting method for general parts: accelerated dual proximal
        gradient, or Dykstra's method.
    name : str, optional
        A label used in error messages and ``explain()``.

    Returns
    -------
    DecisionSet
        Points of the parts' shape.

    Notes
    -----
    Polyhedral parts are merged into one linear form (one QP or LP per call);
    a part with its own projection cut by a few linear constraints is served
    by a dual method over the cut multipliers; general parts by splitting,
    O(iterations x the parts' projection costs). ``explain()`` names the route.

    Examples
    --------
    >>> import setkit
    >>> K = setkit.intersection(of=[setkit.simplex(dim=3), setkit.box(dim=3, lower=0, upper=0.5)])
    >>> K.project([1.0, 0.0, 0.0]).round(6).tolist()
    [0.5, 0.25, 0.25]
    """
    return build("intersection", of=of, accuracy=accuracy, max_iterations=max_iterations, splitting=splitting,
                 name=name)


def product(*, of: Sequence[SetLike], copies: int = 1, name: str | None = None) -> DecisionSet:
    """The Cartesian product of sets, coordinates concatenated.

    K = K_1 x ... x K_m = {(x_1, ..., x_m) : x_i in K_i}, each block's point
    flattened in C order.

    Parameters
    ----------
    of : list of DecisionSet or description mappings
        The blocks K_i, in order (at least one).
    copies : int, default 1
        The list ``of`` repeated this many times (e.g. one simplex per user).
    name : str, optional
        A label used in error messages and ``explain()``.

    Returns
    -------
    DecisionSet
        Points of shape ``(sum of the blocks' dims,)``.

    Notes
    -----
    Every operator works block by block, with identical blocks grouped into
    one batched call: O(sum of the block costs).

    Examples
    --------
    >>> import setkit
    >>> K = setkit.product(of=[setkit.simplex(dim=2)], copies=2)
    >>> K.project([1.0, 0.0, 3.0, 1.0]).tolist()
    [1.0, 0.0, 1.0, 0.0]
    >>> K.support([1.0, 2.0, -1.0, -3.0]).item()
    1.0
    """
    return build("product", of=of, copies=copies, name=name)


def affine(*, set: SetLike, scale: float = 1.0, shift: ArrayLike | float | None = None,
           matrix: ArrayLike | str | None = None, accuracy: float = 1e-7, max_iterations: int = 50_000,
           name: str | None = None) -> DecisionSet:
    """The image of a set under an affine map.

    K = {a·x + s : x in K_0} (scaled image) or {a·M x + s : x in K_0} (with a
    matrix), with K_0 = ``set``, a = ``scale``, s = ``shift`` and M = ``matrix``.

    Parameters
    ----------
    set : DecisionSet or description mapping
        The set K_0 being mapped.
    scale : float, default 1.0
        The nonzero factor a.
    shift : float or array_like of the image's shape, optional
        The translation s (a number applies to every coordinate). Default: 0.
    matrix : array_like of shape (m, dim of set), optional
        The matrix M (or a ``.npy``/``.npz``/``.csv`` path); the image then has
        shape ``(m,)``.
    accuracy : float, default 1e-7
        Matrix images of sets without a linear form only: the relative target
        of the projected-gradient method, between 1e-14 and 1e-2.
    max_iterations : int, default 50000
        Matrix images of sets without a linear form only: the iteration cap.
    name : str, optional
        A label used in error messages and ``explain()``.

    Returns
    -------
    DecisionSet
        Points of the shape of ``set`` (scaled image) or ``(m,)`` (matrix image).

    Notes
    -----
    A scaled image serves every operator exactly through the part's, e.g.
    project(y) = a·P_0((y - s)/a) + s, at the part's cost plus O(n). A matrix
    image takes LMO and support from the part (O(part + mn)) and projects by
    a QP on the composed linear form, or by projected gradient.

    Examples
    --------
    >>> import setkit
    >>> K = setkit.affine(set=setkit.simplex(dim=2), scale=2.0, shift=[1.0, 0.0])
    >>> K.lmo([1.0, -1.0]).tolist()
    [1.0, 2.0]
    >>> K.project([5.0, 0.0]).tolist()
    [3.0, 0.0]
    """
    return build("affine", set=set, scale=scale, shift=shift, matrix=matrix, accuracy=accuracy,
                 max_iterations=max_iterations, name=name)
