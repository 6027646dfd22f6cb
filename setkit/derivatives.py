"""Derivatives of projections, distances and penalties, from the face each projection lies on.

The Euclidean projection P onto a closed convex set K is 1-Lipschitz, so it is
differentiable almost everywhere. Onto a polyhedron it is piecewise linear: near a
point y whose projection p = P(y) has strictly positive multipliers on its tight
constraints, P is the projection onto the affine hull of the face of p, and

.. math:: J_P(y)\\, v = \\Pi_{T}\\, v, \\qquad T = \\{d : a_i^T d = 0 \\text{ for every constraint tight at } p\\},

the orthogonal projection of v onto the tangent subspace T of the face (e.g. Martins
and Astudillo 2016, "From softmax to sparsemax", for the simplex; Blondel, Teboul,
Berthet and Djolonga 2020, "Fast differentiable sorting and ranking", for the
permutahedron -- both from memory).

**Nondifferentiable points.** Everywhere in setkit, every constraint that holds with
equality at p is treated as active (a coordinate of a simplex projection with p_i = 0
exactly is off the support, a box coordinate at a bound is fixed, a point exactly on
the boundary of a ball or at the tie of an at_most sum keeps that constraint). The
element returned is then the projector onto the tangent subspace of the smallest face
containing p: the Jacobian at the nearby points y + eps * n (n in the relative
interior of the normal cone at p), hence an element of the B-subdifferential (the
limiting Jacobians) and of Clarke's generalized Jacobian.

KL projections (``project_kl_jvp``, in log coordinates t = log y) have closed forms in the
families: the simplex (the softmax Jacobian diag(x) - x x^T / total), the box (diag(x) on the
free coordinates), the budget (x_F (v_F - w_F <w x, v>_F / <w^2 x>_F)), the permutahedron (the
softmax Jacobian on each pooling block, :func:`setkit.kernels.bregman.permutahedron_kl_jvp`),
transport and Birkhoff (implicit differentiation of Sinkhorn's fixed point,
:func:`setkit.kernels.bregman.transport_kl_jvp`) and products (block-wise); the same rule at
kinks applies. In log coordinates these Jacobians are symmetric, so ``project_kl_vjp`` is
served by the same kernels.

This module holds the generic active-set routes (any set with a linear form without
auxiliary variables: transport, Birkhoff, flow, polyhedron, intersections of such; for the
KL geometry the same face in the metric diag(x), :func:`kl_face_rows`),
the derivative of the permutahedron projection with respect to its weights, and the
gradients and Hessian-vector products of the distance and of the exact penalty.
"""
from __future__ import annotations

import numpy as np

from .errors import InputError, UnsupportedOperationError

__all__ = ["face_projector_rows", "form_jvp", "kl_face_rows", "form_kl_jvp", "permutahedron_weights_jvp", "permutahedron_weights_vjp",
           "distance_grad", "distance_hvp", "penalty_hvp"]


def _activity_tol(form, P):
    """Slack below which a constraint counts as tight: 1e-9 relative to the data and the point."""
    data = max(1.0, float(np.abs(form.b_eq).max(initial=0.0)), float(np.abs(form.b_ub).max(initial=0.0)),
               float(np.abs(form.lo[np.isfinite(form.lo)]).max(initial=0.0)),
               float(np.abs(form.hi[np.isfinite(form.hi)]).max(initial=0.0)))
    return 1e-9 * np.maximum(data, np.abs(P).max(axis=1, initial=0.0))


def face_projector_rows(form, P, V, tol=None):
    """Project each row of V onto the tangent subspace of the face of the linear form at the row of P.

    The face: every equality, every inequality row with a_i^T p >= b_i - tol, every bound
    with p_j within tol of it (those coordinates are fixed). On the free coordinates F the
    answer is v_F - M^T z with z the least-squares solution of M^T z = v_F, M the tight rows
    restricted to F (redundant rows are harmless). O(|F| m^2) per row, m tight rows.

    Parameters
    ----------
    form : setkit.forms.LinearForm
        Without auxiliary variables.
    P : ndarray (b, n)
        Projections (points of the set).
    V : ndarray (b, n)
        Tangents.
    tol : ndarray (b,), optional
        Slack below which a constraint counts as tight (default 1e-9 relative).

    Examples
    --------
    >>> import numpy as np, setkit
    >>> form = setkit.compile({"kind": "simplex", "dim": 3}).linear_form()
    >>> face_projector_rows(form, np.array([[0.5, 0.5, 0.0]]), np.array([[1.0, 0.0, 5.0]])).round(12).tolist()
    [[0.5, -0.5, 0.0]]
    """
    return _face_rows(form, P, V, tol, weighted=False)


def _face_rows(form, P, V, tol, weighted):
    """The face loop shared by :func:`face_projector_rows` (metric I) and :func:`kl_face_rows`
    (metric diag(p): the free coordinates scaled by sqrt(p) before and after the least-squares step,
    and coordinates at 0 fixed)."""
    if form.n_aux:
        what = "the KL face route" if weighted else "the face projector"
        raise UnsupportedOperationError(f"{what} needs a linear form without auxiliary variables; "
                                        f"this one has {form.n_aux}.")
    P = np.asarray(P, dtype=float)
    V = np.asarray(V, dtype=float)
    if tol is None:
        tol = _activity_tol(form, P)
    A_eq = form.A_eq.toarray() if form.A_eq.shape[0] else np.zeros((0, form.n_x))
    A_ub = form.A_ub.toarray() if form.A_ub.shape[0] else np.zeros((0, form.n_x))
    out = np.zeros_like(V)
    for r in range(P.shape[0]):
        p, t = P[r], tol[r]
        fixed = (p <= form.lo + t) | (p >= form.hi - t)
        if weighted:
            fixed |= p <= 0.0
        free = np.flatnonzero(~fixed)
        if free.size == 0:
            continue
        rows = [A_eq]
        if A_ub.shape[0]:
            rows.append(A_ub[A_ub @ p >= form.b_ub - t])
        M = np.vstack(rows)[:, free]
        M = M[np.abs(M).max(axis=1, initial=0.0) > 0] if M.size else M
        sq = np.sqrt(p[free]) if weighted else 1.0
        v = sq * V[r, free]
        if M.shape[0]:
            B = (M * sq).T                      # S M^T (S = I in the Euclidean metric)
            z = np.linalg.lstsq(B, v, rcond=None)[0]
            v = v - B @ z
        out[r, free] = sq * v
    return out


# the largest dimension for which the tangent subspaces of the parts are intersected densely
FACE_INTERSECTION_MAX_DIM = 1500


def faces_of_parts_apply(node) -> bool:
    """Whether the face route can serve ``project_jvp`` of a combinator from its parts' faces.

    True for an intersection whose parts are all polyhedral (their own Jacobian products at a
    point of the set give the projectors onto their faces) and of dimension at most
    :data:`FACE_INTERSECTION_MAX_DIM`.
    """
    return (getattr(node, "kind", None) == "intersection" and node.dim <= FACE_INTERSECTION_MAX_DIM
            and all(_face_known(p) for p in node.children()))


def _face_known(node):
    """Parts whose face at an approximate point can be read with a tolerance (see part_face_projector_rows)."""
    if _is_l2_ball(node) or node.kind == "permutahedron" or (node.kind == "ball" and node.norm == 1):
        return True
    form = node.linear_form()
    return form is not None and form.n_aux == 0


def _is_l2_ball(node):
    return getattr(node, "kind", None) == "ball" and getattr(node, "norm", None) == 2


def part_face_projector_rows(part, P, V, rel):
    """Project the rows of V onto the tangent subspace of the smallest face of ``part`` containing each row of P.

    Constraints within ``rel`` (relative to the data and the point) of tight count as tight,
    so points computed to that accuracy find their face: the linear form without auxiliary
    variables when the part has one, the isotonic blocks with a tie tolerance for a
    permutahedron, the signed simplex face for an l1 ball.
    """
    node = part.node
    form = part.linear_form()
    if form is not None and form.n_aux == 0:
        return face_projector_rows(form, P, V, _activity_tol(form, P) * (rel / 1e-9))
    if node.kind == "permutahedron":
        from .kernels.face import permutahedron_face
        wd = np.sort(node.weights)[::-1]
        return permutahedron_face(P, wd, V, mode=0, tol=rel * max(1.0, float(np.abs(wd).max())))
    if node.kind == "ball" and node.norm == 1:
        Z = P - node.center
        t = rel * max(1.0, node.radius, float(np.abs(P).max(initial=0.0)))
        out = np.array(V, dtype=float, copy=True)
        rows = np.abs(Z).sum(axis=1) >= node.radius - t
        if rows.any():
            S = np.abs(Z[rows]) > t
            sgn = np.sign(Z[rows]) * S
            Vo = out[rows]
            k = S.sum(axis=1)
            m = np.divide(np.einsum("ij,ij->i", sgn, Vo), k, out=np.zeros(k.shape), where=k > 0)
            out[rows] = np.where(S, Vo - sgn * m[:, None], 0.0)
        return out
    raise UnsupportedOperationError(f"the face of {node.label} at an approximate point is not known to setkit.")


def _null_space(B, n):
    if B.shape[0] == 0:
        return np.eye(n)
    _, sv, Wt = np.linalg.svd(B, full_matrices=True)
    rank = int(np.sum(sv > 1e-8 * max(1.0, sv.max(initial=0.0))))
    return Wt[rank:].T


def intersect_tangents_rows(parts, P, V, rel=1e-9, Y=None):
    """Jacobian products of the projection onto an intersection of polyhedral parts and l2 balls (implicit differentiation).

    Polyhedral parts: the projector Pi_i onto the tangent subspace of the smallest face of
    K_i containing p (:func:`part_face_projector_rows`); the smallest face of the
    intersection containing p is the intersection of those faces, whose tangent subspace
    T_0 is the null space of the stacked (I - Pi_i). An l2 ball {||x - c|| <= r} with p on
    its sphere (within ``rel``) adds the constraint phi(x) = ||x - c|| - r with gradient
    g = (p - c)/r and Hessian (I - g g^T)/r; its multiplier mu >= 0 comes from the KKT
    conditions y - p = sum_j mu_j g_j + (normals of the polyhedral faces), read on T_0 by
    least squares. Implicit differentiation of the KKT system then gives

    .. math:: J v = Q (Q^T H Q)^{-1} Q^T v, \\quad H = I + \\sum_j \\mu_j (I - g_j g_j^T)/r_j,

    with Q an orthonormal basis of T = T_0 ∩ {g_j^T d = 0 : mu_j > 0}. For polyhedral parts
    only, H = I and J is the projector onto T. At kinks the smallest-face rule of each part
    applies, and a sphere with mu = 0 (touching without pushing) is dropped. ``Y`` (the
    inputs) is needed only when a ball part is present. O(k n^2) part products and O(k n^3)
    per row (k parts).
    """
    b, n = P.shape
    out = np.zeros_like(V)
    eye = np.eye(n)
    poly = [p for p in parts if not _is_l2_ball(p.node)]
    balls = [p.node for p in parts if _is_l2_ball(p.node)]
    for r in range(b):
        p = P[r]
        blocks = []
        for part in poly:
            Pi = part_face_projector_rows(part, np.repeat(P[r:r + 1], n, axis=0), eye, rel)
            blocks.append(eye - 0.5 * (Pi + Pi.T))
        Q0 = _null_space(np.vstack(blocks) if blocks else np.zeros((0, n)), n)
        grads, curv = [], []
        for bl in balls:
            z = p - bl.center
            if bl.radius > 0 and abs(np.linalg.norm(z) - bl.radius) <= rel * max(1.0, bl.radius, np.abs(p).max()):
                grads.append(z / np.linalg.norm(z))
                curv.append(bl.radius)
        H = eye
        Q = Q0
        if grads and Y is not None and Q0.shape[1]:
            G = np.array(grads)
            Gt = G @ Q0                               # the sphere normals read on T_0
            mu = np.linalg.lstsq(Gt.T, Q0.T @ (Y[r] - p), rcond=None)[0]
            push = mu > rel * max(1.0, float(np.abs(Y[r] - p).max()))
            H = eye + sum(m * (eye - np.outer(g, g)) / rad for m, g, rad, k in zip(mu, G, curv, push) if k)
            if push.any():
                Q = Q0 @ _null_space(Gt[push], Q0.shape[1])
        if Q.shape[1] == 0:
            continue
        w = Q.T @ V[r]
        out[r] = Q @ np.linalg.solve(Q.T @ H @ Q, w)
    return out


def kl_face_rows(form, X, V, tol=None):
    r"""The Jacobian of the KL projection in log coordinates, applied to each row of V, on a linear form.

    At x = argmin_{x in K} KL(x || e^t), K = {A_eq x = b_eq, A_ub x <= b_ub, lo <= x <= hi}, the
    stationarity conditions on the free coordinates F (not at a bound) are log x_F = t_F - M^T lam
    with M the tight rows restricted to F. Differentiating with M dx_F = 0 gives, with D = diag(x_F),

    .. math:: dx_F = D v_F - D M^T (M D M^T)^+ M D v_F, \qquad dx_{\text{fixed}} = 0,

    symmetric in log coordinates (so the VJP is the same map). Computed as the weighted
    least-squares residual: z = argmin ||S M^T z - S v_F||, dx_F = S (S v_F - S M^T z), S = D^(1/2).
    Every constraint tight within ``tol`` is active (the smallest face, as for Euclidean
    projections). O(|F| m^2) per row, m tight rows.

    Examples
    --------
    >>> import numpy as np, setkit
    >>> form = setkit.compile({"kind": "simplex", "dim": 2}).linear_form()
    >>> kl_face_rows(form, np.array([[0.25, 0.75]]), np.array([[1.0, 0.0]])).round(12).tolist()
    [[0.1875, -0.1875]]
    """
    return _face_rows(form, X, V, tol, weighted=True)


def _tight_rel(context, op):
    """How close (relative) a constraint must be to count as tight at the answer of ``op``.

    1e-9; the accuracy a combinator states for its projection (splitting methods) when larger;
    at least 1e-7 when a generic solver served ``op`` (tight within its stopping tolerance).
    """
    rel = max(1e-9, float(getattr(context.node, "accuracy", 0.0) or 0.0))
    if context.routes()[op].category in ("backend", "reference"):
        rel = max(rel, 1e-7)
    return rel


def form_kl_jvp(run, context):
    """The generic face route of ``project_kl_jvp`` on flat batches of log inputs (built by routing).

    Sets with a linear form without auxiliary variables (polyhedron, flow, paths, intersections
    of such): the KL projection from the set's own route, then :func:`kl_face_rows`. Constraints
    count as tight within 1e-9 relative, or 1e-7 when a generic solver served the projection.
    Returns ``jvp(T, V) -> (J(T) V, info)``.
    """
    def jvp(T, V):
        X, info = run("project_kl", T)
        form = context.linear_form()
        rel = _tight_rel(context, "project_kl")
        return kl_face_rows(form, X, V, _activity_tol(form, X) * (rel / 1e-9)), info
    return jvp


def form_jvp(run, context):
    """The generic face route of ``project_jvp`` on flat batches (built by routing).

    ``run(op, X, tol=None)`` serves the set's operators (its projection), ``context`` is the
    DecisionSet (its ``linear_form()`` and compiled ``parts``). With a linear form without
    auxiliary variables: the projector onto the tangent subspace of the face of the form at
    p (:func:`face_projector_rows`); otherwise (an intersection of polyhedral parts, some with
    auxiliary variables): the intersection of the parts' face tangents
    (:func:`intersect_tangents_rows`). Returns ``jvp(Y, V) -> (J(Y) V, info)``.
    """
    def jvp(Y, V):
        P, info = run("project", Y)
        form = context.linear_form()
        rel = _tight_rel(context, "project")
        if form is not None and form.n_aux == 0:
            return face_projector_rows(form, P, V, _activity_tol(form, P) * (rel / 1e-9)), info
        return intersect_tangents_rows(context.parts, P, np.asarray(V, dtype=float), rel, Y=Y), info
    return jvp


# -- permutahedron: the derivative with respect to the weights ---------------------------------
def _permutahedron_parts(K, y, w, wname, op):
    node = getattr(K, "node", None)
    if getattr(node, "kind", None) != "permutahedron":
        raise UnsupportedOperationError(f"{op}: K must be a permutahedron set; got {getattr(node, 'label', K)!r}.")
    Y, lead = K.flatten(y, "y", op)
    W = np.asarray(w, dtype=float)
    return node, Y, lead, W


def permutahedron_weights_jvp(K, y, dw):
    """Derivative of the permutahedron projection with respect to its weights, applied to dw.

    .. math:: \\frac{\\partial P_w(y)}{\\partial w}\\, dw, \\qquad
              (dx)_{\\sigma(k)} = \\operatorname{mean}_{B \\ni k} (dw_{\\downarrow})

    With sigma the decreasing order of y and w sorted decreasingly, x_sigma = y_sigma - v
    where v is the isotonic fit of y_sigma - w on blocks B; so dx_sigma is the block mean of
    dw in decreasing-weight order. ``dw`` is indexed like ``K``'s weights (the weights are
    sorted by a stable sort, so tied weights keep their listed order: at tied weights the
    derivative is taken for that order, one element of the generalized Jacobian).
    Batched over leading axes of y; dw has the shape of y (one perturbation per point) or
    of the weights (shared). O(n log n) per point.

    Examples
    --------
    >>> import setkit
    >>> K = setkit.compile({"kind": "permutahedron", "weights": [2.0, 0.0]})
    >>> permutahedron_weights_jvp(K, [5.0, -5.0], [1.0, 0.0]).tolist()
    [1.0, 0.0]
    """
    from .kernels.face import permutahedron_face
    node, Y, lead, W = _permutahedron_parts(K, y, dw, "dw", "permutahedron_weights_jvp")
    n = node.weights.size
    if W.size == n:
        W = np.broadcast_to(W.reshape(n), Y.shape)
    elif W.size == Y.size:
        W = W.reshape(Y.shape)
    else:
        raise InputError(f"permutahedron_weights_jvp: dw must have {n} entries (the weights) or the shape of y; "
                         f"got {np.asarray(dw).shape}.")
    perm = np.argsort(-node.weights, kind="stable")
    out = permutahedron_face(Y, node.weights[perm], W[:, perm], mode=1)
    return K.unflatten_points(out, lead)


def permutahedron_weights_vjp(K, y, u):
    """Vector-Jacobian product of the permutahedron projection with respect to its weights.

    .. math:: \\left(\\frac{\\partial P_w(y)}{\\partial w}\\right)^T u

    The adjoint of :func:`permutahedron_weights_jvp`: block means of u_sigma placed at the
    weights' positions. Returns one gradient per point, of the shape of y. O(n log n) per point.

    Examples
    --------
    >>> import setkit
    >>> K = setkit.compile({"kind": "permutahedron", "weights": [2.0, 0.0]})
    >>> permutahedron_weights_vjp(K, [0.1, 0.0], [1.0, 0.0]).tolist()
    [0.5, 0.5]
    """
    from .kernels.face import permutahedron_face
    node, Y, lead, U = _permutahedron_parts(K, y, u, "u", "permutahedron_weights_vjp")
    if U.size != Y.size:
        raise InputError(f"permutahedron_weights_vjp: u must have the shape of y, {np.asarray(y).shape}; "
                         f"got {U.shape}.")
    perm = np.argsort(-node.weights, kind="stable")
    G = permutahedron_face(Y, node.weights[perm], U.reshape(Y.shape), mode=2)
    out = np.empty_like(G)
    out[:, perm] = G
    return K.unflatten_points(out, lead)


# -- distance and penalty ----------------------------------------------------------------------
def distance_grad(K, y):
    """Gradient of the Euclidean distance to K: (y - P(y)) / d(y) outside K, 0 inside.

    .. math:: \\nabla d_K(y) = \\frac{y - P_K(y)}{\\|y - P_K(y)\\|}

    (0 inside K is the minimum-norm subgradient there; on the boundary too). One projection.

    Examples
    --------
    >>> import setkit
    >>> distance_grad(setkit.compile({"kind": "box", "dim": 2, "lower": 0, "upper": 1}), [4.0, 5.0]).tolist()
    [0.6, 0.8]
    """
    Y, lead = K.flatten(y, "y", "distance_grad")
    P, _ = K.run("project", Y)
    R = Y - P
    d = np.linalg.norm(R, axis=1)
    G = np.divide(R, d[:, None], out=np.zeros_like(R), where=d[:, None] > 0)
    return K.unflatten_points(G, lead)


def distance_hvp(K, y, v):
    """Hessian-vector product of the distance to K outside K, through the projection's Jacobian.

    .. math:: \\nabla^2 d_K(y)\\, v = \\frac{(I - J)v - g \\langle g, (I - J) v\\rangle}{d_K(y)},
              \\quad g = \\nabla d_K(y)

    (d_K is C^2-smooth away from K where P is differentiable; 0 is returned inside K, where
    d_K = 0.) The Hessian of (1/2) d_K^2 is simply I - J. One projection and one JVP.

    Examples
    --------
    >>> import setkit
    >>> K = setkit.compile({"kind": "box", "dim": 2, "lower": 0, "upper": 1})
    >>> distance_hvp(K, [3.0, 0.5], [0.0, 1.0]).tolist()
    [0.0, 0.0]
    """
    Y, lead = K.flatten(y, "y", "distance_hvp")
    Vf, lead_v = K.flatten(v, "v", "distance_hvp")
    if lead_v != lead:
        raise InputError(f"distance_hvp: v must have the shape of y; got batch {lead_v}, expected {lead}.")
    P, _ = K.run("project", Y)
    R = Y - P
    d = np.linalg.norm(R, axis=1)
    JV, _ = K.run("project_jvp", Y, Vf)
    W = Vf - JV
    out = np.zeros_like(W)
    out_rows = d > 0
    if out_rows.any():
        g = R[out_rows] / d[out_rows, None]
        Wo = W[out_rows]
        out[out_rows] = (Wo - g * np.einsum("ij,ij->i", g, Wo)[:, None]) / d[out_rows, None]
    return K.unflatten_points(out, lead)


def penalty_hvp(K, G, y, v):
    """Hessian-vector product of the exact penalty G * d_K(y): G times :func:`distance_hvp`.

    .. math:: \\nabla^2 (G\\, d_K)(y)\\, v = G\\, \\nabla^2 d_K(y)\\, v

    Examples
    --------
    >>> import setkit
    >>> K = setkit.compile({"kind": "ball", "dim": 2, "radius": 1.0})
    >>> penalty_hvp(K, 2.0, [2.0, 0.0], [0.0, 1.0]).round(12).tolist()
    [0.0, 1.0]
    """
    return float(G) * distance_hvp(K, y, v)
