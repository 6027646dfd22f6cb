"""Affine images of a set: {scale·x + shift : x in K} and {M x + shift : x in K}.

Description keys::

    kind: affine
    set: {...}          # the part K
    scale: 2.0          # a nonzero number (default 1)
    shift: [..]         # a number or an array of the image's shape (default 0)
    matrix: [[..], ..]  # optional: an m x dim(K) matrix M (or a .npy/.npz/.csv path);
                        # the image {scale·M x + shift} then has shape (m,)

Scalar images transform every operator exactly (a = scale, s = shift):

    project(y)  = a·P_K((y - s)/a) + s          distance(y) = |a|·d_K((y - s)/a)
    lmo(c)      = a·lmo_K(a·c) + s              support(c)  = sigma_K(a·c) + <c, s>
    contains(x) = (x - s)/a in K within tol/|a|  violation(x) = |a|·violation_K((x - s)/a)

A matrix image takes its LMO and support from the part exactly
(lmo(c) = M lmo_K(M^T c) + s, support(c) = sigma_K(M^T c) + <c, s>); its
projection is a QP: OSQP on the part's linear form composed with M (variables
(u, x, aux) with u = M x + s) when the part has a linear form, else accelerated
projected gradient on x with the part's projection, stopped on the Frank-Wolfe
gap (:func:`setkit.kernels.splitting.project_linear_image`).

The algorithms are strategies declared here (``change_of_variables``,
``pullback``, ``projected_gradient``) and ranked by :mod:`setkit.routing`; a matrix
image whose part has a linear form but no native projection is projected by the
generic QP backend on the composed linear form.
"""
from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

from ..errors import AccuracyWarning, SolveError
from ..families import Family, memo, register
from ..forms import LinearForm
from ..kernels.splitting import project_linear_image
from ..strategies import Strategy, register_strategy
from . import loose_of, lp_form, part_violation


@register("affine")
@dataclass(frozen=True, eq=False, kw_only=True)
class AffineImage(Family):
    """{a·x + s : x in K} (``matrix`` None) or {M x + s : x in K}; routing picks the strategies.

    >>> import setkit
    >>> K = setkit.compile({"kind": "affine", "set": {"kind": "simplex", "dim": 2}, "scale": 2, "shift": 1})
    >>> K.project([5.0, 1.0]).tolist()
    [3.0, 1.0]
    """

    part: Family
    scale_factor: float = 1.0
    shift: np.ndarray = None             # flat, length dim of the image
    matrix: np.ndarray | None = None     # m x part.dim, scale folded in
    accuracy: float = 1e-7
    max_iterations: int = 50_000
    orthant_note: str = ""               # why the image leaves x >= 0, when the builder knows (centered sets)

    def orthant_violation(self):
        """The builder's reason when it knows the image leaves the orthant (centered sets), else unknown."""
        return self.orthant_note or NotImplemented

    @classmethod
    def from_spec(cls, r):
        part = r.node("set")
        a = r.number("scale", 1.0)
        if a == 0.0:
            r.fail("scale", "scale must be nonzero (a zero scale collapses the set to the shift); got 0.")
        M = None
        if r.has("matrix"):
            M = r.array("matrix", ndim=2)
            if M.shape[1] != part.dim:
                r.fail("matrix", f"matrix must have {part.dim} columns (the dimension of {part.label}); "
                                 f"got shape {M.shape}.")
            if M.shape[0] < 1:
                r.fail("matrix", "matrix must have at least one row.")
        shape = (M.shape[0],) if M is not None else tuple(part.shape)
        n = int(np.prod(shape))
        s = np.zeros(n)
        if r.has("shift"):
            v = r.raw("shift")
            if isinstance(v, (int, float)) and not isinstance(v, bool):
                s = np.full(n, r.number("shift"))
            else:
                arr = r.array("shift")
                if arr.shape not in (shape, (n,)):
                    r.fail("shift", f"shift must be a number or an array of shape {shape}; got shape {arr.shape}.")
                s = arr.reshape(n).astype(float)
        acc = r.number("accuracy", 1e-7, min=1e-14, max=1e-2)
        cap = r.integer("max_iterations", 50_000, min=1)
        return make_affine(part, scale=a, shift=s, matrix=M, accuracy=acc, max_iterations=cap, name=r.name)

    @classmethod
    def examples(cls):
        """Small instances for the conformance checks (scalar images and linear images)."""
        return [
            {"kind": "affine", "set": {"kind": "simplex", "dim": 3}, "scale": -2.0, "shift": [1.0, 0.0, 0.5]},
            {"kind": "affine", "set": {"kind": "box", "dim": 3, "lower": -1, "upper": 1},
             "matrix": [[1.0, 2.0, 0.0], [0.0, 1.0, -1.0]], "shift": 0.5},
            {"kind": "affine", "set": {"kind": "ball", "dim": 2, "radius": 1.0},
             "matrix": [[2.0, 0.0], [0.5, 1.0], [0.0, -1.0]]},
        ]

    @classmethod
    def random_example(cls, rng):
        """A random scaled and shifted simplex."""
        n = int(rng.integers(2, 6))
        a = float(np.round(rng.choice([-1, 1]) * rng.uniform(0.5, 3.0), 3))
        return {"kind": "affine", "set": {"kind": "simplex", "dim": n}, "scale": a,
                "shift": np.round(rng.normal(size=n), 3).tolist()}

    @property
    def is_scaled(self) -> bool:
        """True for a scalar image a·K + s (every operator by an exact change of variables)."""
        return self.matrix is None

    @property
    def shape(self):
        return tuple(self.part.shape) if self.matrix is None else (self.matrix.shape[0],)

    def children(self):
        return (self.part,)

    def scale(self):
        if self.matrix is None:
            base = abs(self.scale_factor) * self.part.scale()
        else:
            base = float(np.linalg.norm(self.matrix, 2)) * self.part.scale()
        return max(base, float(np.abs(self.shift).max(initial=0.0)))

    @property
    def traits(self):
        keep = {"polyhedral", "bounded"}
        return frozenset(t for t in self.part.traits if t in keep)

    def pre(self, X):
        """(x - s)/a: image points back to the part's coordinates (scalar images)."""
        return (X - self.shift) / self.scale_factor

    def cvxpy_constraints(self, x):
        if self.matrix is None:
            s = self.shift.reshape(self.shape) if len(self.shape) != 1 else self.shift
            return self.part.cvxpy_constraints((x - s) / self.scale_factor)
        import cvxpy as cp
        v = cp.Variable(self.part.dim)
        xp = v if len(self.part.shape) == 1 else cp.reshape(v, self.part.shape, order="C")
        return list(self.part.cvxpy_constraints(xp)) + [x == self.matrix @ v + self.shift]

    def linear_form(self):
        return memo(self, "linear_form", self._scaled_form if self.matrix is None else self._image_form)

    def _scaled_form(self):
        f = lp_form(self.part)
        if f is None:
            return None
        a, s, nx = self.scale_factor, self.shift, f.n_x
        # x_part = (x - s)/a: A_x x_part + A_w w = b  <=>  (A_x/a) x + A_w w = b + A_x s / a
        D = sp.diags(np.concatenate([np.full(nx, 1.0 / a), np.ones(f.n_aux)]), format="csr")
        sz = np.concatenate([s, np.zeros(f.n_aux)])
        A_eq = f.A_eq @ D
        A_ub = f.A_ub @ D
        b_eq = f.b_eq + A_eq @ sz
        b_ub = f.b_ub + A_ub @ sz
        lo_x, hi_x = a * f.lo[:nx] + s, a * f.hi[:nx] + s
        if a < 0:
            lo_x, hi_x = hi_x, lo_x
        with np.errstate(invalid="ignore"):
            lo_x = np.where(np.isnan(lo_x), -np.inf, lo_x)
            hi_x = np.where(np.isnan(hi_x), np.inf, hi_x)
        return LinearForm(nx, f.n_aux, A_eq.tocsr(), b_eq, A_ub.tocsr(), b_ub,
                          np.concatenate([lo_x, f.lo[nx:]]), np.concatenate([hi_x, f.hi[nx:]]))

    def _image_form(self):
        f = lp_form(self.part)
        if f is None:
            return None
        m = self.matrix.shape[0]
        M = sp.csr_matrix(self.matrix)
        # z = (u, x_part, aux): u - M x_part = s, and the part's constraints on (x_part, aux)
        link = sp.hstack([sp.eye(m), -M, sp.csr_matrix((m, f.n_aux))], format="csr")

        def pad(A):
            return sp.hstack([sp.csr_matrix((A.shape[0], m)), A], format="csr")
        A_eq = sp.vstack([link, pad(f.A_eq)], format="csr")
        A_ub = pad(f.A_ub)
        return LinearForm(m, f.n, A_eq, np.concatenate([self.shift, f.b_eq]), A_ub, f.b_ub.copy(),
                          np.concatenate([np.full(m, -np.inf), f.lo]),
                          np.concatenate([np.full(m, np.inf), f.hi]))

    # -- measure hooks (read by setkit.measures): an invertible affine map carries the uniform law on
    # K (volume), on its extreme points (vertices) to those of the image, and lmo_{aK+s}(g) =
    # a lmo_K(a g) + s has the law of a lmo_K(g) + s because g and -g have the same law (directions).
    def exact_centroid(self, measure):
        """a·centroid_K + s whenever the part knows its centroid exactly (scalar images only)."""
        c = self.part.exact_centroid(measure) if self.matrix is None else None
        if c is None:
            return None
        return self.scale_factor * np.asarray(c, dtype=float).reshape(-1) + self.shift

    def exact_sample(self, k, measure, rng):
        """a·X + s for exact samples X of the part (scalar images only)."""
        X = self.part.exact_sample(k, measure, rng) if self.matrix is None else None
        if X is None:
            return None
        return self.scale_factor * np.asarray(X, dtype=float).reshape(k, -1) + self.shift


# -- strategies (ranked by setkit.routing) ------------------------------------------------------
@register_strategy("change_of_variables")
class ChangeOfVariables(Strategy):
    """Every operator of a·K + s from the part's, by an exact change of variables."""

    kind = "affine"
    operators = ("project", "distance", "lmo", "support", "contains", "violation", "project_jvp")
    priority = 10
    about = "exact change of variables"

    @classmethod
    def accepts(cls, node):
        return (True, "scalar image") if node.is_scaled else (False, "a matrix image is not invertible in general")

    def project(self, Y, parts):
        """a·P_K((y - s)/a) + s: the part's projection after an exact change of variables."""
        n = self.node
        fn = parts[0].native("project")        # the part's bound kernel when it has one (fewer layers)
        if fn is not None:
            P = fn(n.pre(Y))
            P, info = P if isinstance(P, tuple) else (P, {})
        else:
            P, info = parts[0].run("project", n.pre(Y))
        return n.scale_factor * P + n.shift, info

    def project_jvp(self, Y, V, parts):
        """J_K((y - s)/a) v: the part's Jacobian product after a change of variables (the factors a cancel).

        P(y) = a P_K((y - s)/a) + s, so J(y) v = a J_K((y - s)/a) (v / a); at a kink the element
        the part documents.
        """
        return parts[0].run("project_jvp", self.node.pre(Y), V)

    def distance(self, Y, parts):
        """|a|·d_K((y - s)/a): the part's distance after an exact change of variables."""
        d, info = parts[0].run("distance", self.node.pre(Y))
        return abs(self.node.scale_factor) * np.asarray(d), info

    def lmo(self, C, parts):
        """a·lmo_K(a·c) + s: the part's LMO after an exact change of variables."""
        n = self.node
        L, info = parts[0].run("lmo", n.scale_factor * C)
        return n.scale_factor * L + n.shift, info

    def support(self, C, parts):
        """sigma_K(a·c) + <c, s>: the part's support after an exact change of variables."""
        n = self.node
        v, info = parts[0].run("support", n.scale_factor * C)
        return np.asarray(v) + C @ n.shift, info

    def contains(self, X, tol, parts):
        """(x - s)/a in K within tol/|a|: the part's membership after a change of variables."""
        n = self.node
        v, info = parts[0].run("contains", n.pre(X), tol=tol / abs(n.scale_factor))
        return np.asarray(v, bool), info

    def violation(self, X, parts):
        """|a|·violation_K((x - s)/a) (NaN if the part has no check)."""
        return abs(self.node.scale_factor) * part_violation(parts[0], self.node.pre(X))


@register_strategy("pullback")
class Pullback(Strategy):
    """LMO and support of M K + s from the part's, on the pulled-back direction M^T c."""

    kind = "affine"
    operators = ("lmo", "support")
    priority = 10
    about = "exact pullback of the direction"

    @classmethod
    def accepts(cls, node):
        return (False, "scalar image") if node.is_scaled else (True, "matrix image")

    def lmo(self, C, parts):
        """M·lmo_K(M^T c) + s: the part's LMO on the pulled-back direction, O(part LMO + b m d)."""
        n = self.node
        L, info = parts[0].run("lmo", C @ n.matrix)
        return L @ n.matrix.T + n.shift, info

    def support(self, C, parts):
        """sigma_K(M^T c) + <c, s>: the part's support on the pulled-back direction, O(part + b m d)."""
        n = self.node
        v, info = parts[0].run("support", C @ n.matrix)
        return np.asarray(v) + C @ n.shift, info


@register_strategy("projected_gradient")
class ProjectedGradient(Strategy):
    """Projection onto M K + s by accelerated projected gradient on the preimage."""

    kind = "affine"
    operators = ("project",)
    priority = 20
    about = "projected gradient on the preimage"

    @classmethod
    def accepts(cls, node):
        if node.is_scaled:
            return False, "scalar image"
        if "project" in node.part.kernels:
            return True, "the part projects natively (exact certificate, no degenerate QP)"
        if lp_form(node.part) is None:
            return True, "the part has no linear form"
        return False, "the part has a linear form but no native projection: one QP on the composed form"

    def project(self, Y, parts):
        """Accelerated projected gradient on the preimage, stopped on the Frank-Wolfe gap, O(steps * part cost)."""
        node, part = self.node, parts[0]
        sc = np.maximum(max(1.0, node.scale()), np.abs(Y).max(axis=1))
        X, info = project_linear_image(lambda Z: part.run("project", Z)[0],
                                       lambda C: np.asarray(part.run("support", C)[0]),
                                       node.matrix, node.shift, Y, sc, accuracy=node.accuracy,
                                       max_iterations=node.max_iterations)
        bad = [i for i, s in enumerate(info["status"]) if s != "solved"]
        if bad:
            i = bad[0]
            msg = (f"{node.label}: projected gradient did not reach the Frank-Wolfe gap "
                   f"{0.5 * (node.accuracy * sc[i]) ** 2:.3g} on {len(bad)} of {Y.shape[0]} points within "
                   f"{node.max_iterations} steps (row {i}: gap {info['gap'][i]:.3g}). Raise max_iterations or "
                   f"accuracy, or call with_backends(project=\"reference\").")
            if loose_of(parts) and info["gap"][i] <= 0.5 * (1e3 * node.accuracy * sc[i]) ** 2:
                warnings.warn(msg, AccuracyWarning, stacklevel=4)
            else:
                raise SolveError(msg, status="not_converged")
        bstat = [f"projected gradient: {s}, Frank-Wolfe gap {g:.3g}" for s, g in zip(info["status"], info["gap"])]
        return X, {"status": info["status"], "iterations": info["iterations"], "backend_status": bstat}


def make_affine(part, scale=1.0, shift=None, matrix=None, accuracy=1e-7, max_iterations=50_000, name=None):
    """The affine image node of ``part`` (see the module docstring for the operators)."""
    scale = float(scale)
    if scale == 0.0:
        raise ValueError("affine: scale must be nonzero; got 0.")
    kw = dict(part=part, accuracy=accuracy, max_iterations=max_iterations, name=name)
    if matrix is None:
        n = part.dim
        s = np.zeros(n) if shift is None else np.broadcast_to(np.asarray(shift, float).reshape(-1)
                                                               if np.ndim(shift) else float(shift), (n,)).copy()
        return AffineImage(scale_factor=scale, shift=s, **kw)
    M = scale * np.asarray(matrix, dtype=float)
    m = M.shape[0]
    s = np.zeros(m) if shift is None else np.broadcast_to(np.asarray(shift, float).reshape(-1)
                                                           if np.ndim(shift) else float(shift), (m,)).copy()
    return AffineImage(scale_factor=1.0, shift=s, matrix=M, **kw)


def translated(node, shift, name=None, orthant_note=""):
    """The node of {x + shift : x in K}: used by ``DecisionSet.centered``.

    ``orthant_note``: why the translate leaves the nonnegative orthant, when the caller knows
    (the KL geometry then raises with that reason instead of searching by LPs).
    """
    out = make_affine(node, scale=1.0, shift=shift, name=name)
    if orthant_note:
        object.__setattr__(out, "orthant_note", str(orthant_note))
    return out
