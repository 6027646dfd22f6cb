"""Intersection of sets of one shape: K = K_1 ∩ ... ∩ K_m.

Description keys::

    kind: intersection
    of: [set, set, ...]        # the parts, all of one point shape
    accuracy: 1.0e-7           # splitting methods only: relative target of gap and residual
    max_iterations: 20000      # splitting methods only: cap on sweeps / evaluations
    splitting: accelerated     # general parts only: accelerated (dual proximal gradient) | dykstra

How each operator is served (chosen by :mod:`setkit.routing` at compile time among the
strategies declared here: ``cut_dual``, ``dual_splitting``, ``dykstra``; otherwise the
generic backends on the merged linear form):

* every part has a linear form without auxiliary variables (boxes, simplices,
  polyhedra...): the forms are merged into one linear form, so the OSQP
  projection and the HiGHS LMO serve the intersection, compiled once (except
  when a part with its own projection leaves at most ``POLYHEDRAL_CUTS`` other
  rows, e.g. a simplex with per-coordinate caps: then the cut dual below, a
  one- or two-dimensional search);
* else one part (the *base*, e.g. a permutahedron or a ball) has its own
  projection and the others are a few linear constraints (at most ``CUT_LIMIT``
  rows in all, bounds included; rows the base's own bounds imply are dropped):
  the projection solves the dual over the cut multipliers, each step one
  projection onto the base (:func:`setkit.kernels.splitting.project_with_cuts`);
* otherwise: a splitting method on the parts' own projections: the accelerated
  dual proximal gradient (:func:`setkit.kernels.splitting.fast_dual_projections`,
  default) or Dykstra's method (:func:`setkit.kernels.splitting.dykstra`,
  ``splitting: dykstra``), which slows down for points far from the set.

The LMO of a cut intersection is column generation on the base's own LMO (a
small master LP per call, exact for polytopes; :func:`setkit.kernels.splitting.lmo_with_cuts`).
Otherwise the LMO and the support function use the merged linear form when
every part has one (auxiliary variables allowed: extended formulations such as
a permutahedron written as the image of the Birkhoff polytope, offered by a
family's optional ``extended_form()`` hook, see :func:`setkit.combinators.lp_form`),
else the cvxpy reference. An empty intersection is reported with :class:`EmptySetError` when
the description is read if the merged linear form is LP-infeasible, and at run
time when a splitting method diverges.

``contains`` means dist(x, K) <= tol: a point farther than ``tol`` from some
part is out, a point every part contains up to rounding (1e-6·tol) is in, and
only the points in between are projected onto the intersection to decide;
``violation`` is the largest violation over the parts.
"""
from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

from ..errors import AccuracyWarning, EmptySetError, SolveError
from ..families import Family, kernel, memo, register
from ..forms import LinearForm
from ..kernels.splitting import dykstra, fast_dual_projections, lmo_with_cuts, project_with_cuts
from ..strategies import Strategy, register_strategy
from . import loose_of, lp_form, part_violation

CUT_LIMIT = 64           # a part with at most this many linear rows counts as a few cuts
POLYHEDRAL_CUTS = 2     # all-polyhedral parts: a native base with at most this many other rows uses the cut dual
FEASIBILITY_CHECK_LIMIT = 200_000   # variables of the merged form up to which emptiness is checked by LP
AUX_CHECK_LIMIT = 2_000  # beyond this many auxiliaries, a cut intersection is checked by column generation instead


def merge_forms(forms):
    """One linear form for the intersection: shared x, auxiliaries of every part side by side."""
    n_x = forms[0].n_x
    na = [f.n_aux for f in forms]
    N = n_x + sum(na)
    off = n_x + np.cumsum([0] + na)

    def place(A, i):
        A = sp.csr_matrix(A)
        blocks = [A[:, :n_x]]
        if off[i] > n_x:
            blocks.append(sp.csr_matrix((A.shape[0], off[i] - n_x)))
        if na[i]:
            blocks.append(A[:, n_x:])
        if N > off[i + 1]:
            blocks.append(sp.csr_matrix((A.shape[0], N - off[i + 1])))
        return sp.hstack(blocks, format="csr")

    A_eq = sp.vstack([place(f.A_eq, i) for i, f in enumerate(forms)], format="csr")
    A_ub = sp.vstack([place(f.A_ub, i) for i, f in enumerate(forms)], format="csr")
    lo_x = np.max([f.lo[:n_x] for f in forms], axis=0)
    hi_x = np.min([f.hi[:n_x] for f in forms], axis=0)
    lo = np.concatenate([lo_x] + [f.lo[n_x:] for f in forms])
    hi = np.concatenate([hi_x] + [f.hi[n_x:] for f in forms])
    return LinearForm(n_x, N - n_x, A_eq, np.concatenate([f.b_eq for f in forms]), A_ub,
                      np.concatenate([f.b_ub for f in forms]), lo, hi)


def cut_rows(form):
    """An aux-free linear form as rows (E x = f; G x <= h) with unit-norm rows, or None if too many.

    Returns (A, rhs, n_eq) with the equalities first, or raises EmptySetError for
    a zero row that no point satisfies.
    """
    if form is None or form.n_aux:
        return None
    lo_f = np.flatnonzero(np.isfinite(form.lo))
    hi_f = np.flatnonzero(np.isfinite(form.hi))
    count = form.A_eq.shape[0] + form.A_ub.shape[0] + lo_f.size + hi_f.size
    if count > CUT_LIMIT:
        return None
    n = form.n_x
    E = form.A_eq.toarray()
    f = form.b_eq.copy()
    G = [form.A_ub.toarray()]
    h = [form.b_ub]
    if lo_f.size:
        G.append(-np.eye(n)[lo_f])
        h.append(-form.lo[lo_f])
    if hi_f.size:
        G.append(np.eye(n)[hi_f])
        h.append(form.hi[hi_f])
    G = np.vstack(G) if G else np.zeros((0, n))
    h = np.concatenate(h) if h else np.zeros(0)
    rows, rhs, n_eq = [], [], 0
    for mat, vec, eq in ((E, f, True), (G, h, False)):
        for a, c in zip(mat, vec):
            nrm = float(np.linalg.norm(a))
            if nrm == 0.0:
                if (eq and c != 0.0) or (not eq and c < 0.0):
                    raise EmptySetError(f"a constraint 0 {'=' if eq else '<='} {c} has no solution")
                continue
            rows.append(a / nrm)
            rhs.append(c / nrm)
            n_eq += eq
    A = np.array(rows).reshape(len(rows), n)
    return A, np.array(rhs, dtype=float), n_eq


@register("intersection")
@dataclass(frozen=True, eq=False, kw_only=True)
class Intersection(Family):
    """K = K_1 ∩ ... ∩ K_m: parts of one shape; routing picks the projection and LMO strategy.

    >>> import setkit
    >>> K = setkit.compile({"kind": "intersection", "of": [
    ...     {"kind": "simplex", "dim": 3}, {"kind": "box", "dim": 3, "lower": 0, "upper": 0.5}]})
    >>> K.project([1.0, 0.0, 0.0]).round(6).tolist()
    [0.5, 0.25, 0.25]
    """

    parts: tuple
    accuracy: float = 1e-7
    max_iterations: int = 20_000
    splitting: str = "accelerated"

    @classmethod
    def from_spec(cls, r):
        parts = r.nodes("of", min_count=1)
        shape = tuple(parts[0].shape)
        for i, p in enumerate(parts[1:], start=1):
            if tuple(p.shape) != shape:
                r.fail("of", f"every part must have the point shape of the first, {shape}; "
                             f"part {i} ({p.label}) has shape {tuple(p.shape)}.")
        acc = r.number("accuracy", 1e-7, min=1e-14, max=1e-2)
        cap = r.integer("max_iterations", 20_000, min=1)
        splitting = r.choice("splitting", ("accelerated", "dykstra"), "accelerated")
        return make_intersection(parts, accuracy=acc, max_iterations=cap, name=r.name, splitting=splitting)

    @classmethod
    def examples(cls):
        """Small instances for the conformance checks: one per projection route."""
        return [
            {"kind": "intersection", "of": [{"kind": "simplex", "dim": 4},
                                            {"kind": "box", "dim": 4, "lower": 0, "upper": 0.4}]},
            {"kind": "intersection", "of": [{"kind": "permutahedron", "weights": [3.0, 2.0, 1.0, 0.5, 0.0]},
                                            {"kind": "polyhedron", "A": [[1, 1, 0, 0, 0], [0, 0, 0, 1, 1]],
                                             "b": [4.0, 2.0]}]},
            {"kind": "intersection", "of": [{"kind": "ball", "dim": 3, "radius": 1.0},
                                            {"kind": "ball", "dim": 3, "radius": 1.0, "center": [0.5, 0.5, 0.0]}]},
            {"kind": "intersection", "of": [{"kind": "polyhedron", "A": [[1, 1, 1]], "b": [1.0],
                                             "lower": -1, "upper": 1},
                                            {"kind": "polyhedron", "A": [[1, -1, 0]], "b": [0.5]}]},
        ]

    @classmethod
    def random_example(cls, rng):
        """A random capped simplex: simplex(n) ∩ box with caps summing to at least 1."""
        n = int(rng.integers(3, 7))
        caps = np.round(rng.uniform(1.2 / n, 0.9, n), 3)
        return {"kind": "intersection", "of": [{"kind": "simplex", "dim": n},
                                               {"kind": "box", "dim": n, "lower": 0, "upper": caps.tolist()}]}

    @property
    def shape(self):
        return tuple(self.parts[0].shape)

    def children(self):
        return tuple(self.parts)

    def scale(self):
        # the intersection lies inside every bounded part, whose data magnitude bounds its points: the
        # smallest of those (the largest part's made a simplex of total 1e-6 inside an l1 ball of radius
        # 1e6 accept answers 0.1 outside the simplex); an unbounded part's data says nothing of the extent
        bounded = [p.scale() for p in self.parts if p.has_trait("bounded")]
        return min(bounded) if bounded else max(p.scale() for p in self.parts)

    def orthant_violation(self):
        """Inside x >= 0 when one part is (the intersection lies in it); otherwise unknown (LPs decide)."""
        for p in self.parts:
            why = p.orthant_violation()
            if why is None or why == "":
                return None
        return NotImplemented

    def cvxpy_constraints(self, x):
        cons = []
        for p in self.parts:
            cons.extend(p.cvxpy_constraints(x))
        return cons

    def linear_form(self):
        def build():
            forms = [lp_form(p) for p in self.parts]
            if any(f is None for f in forms):
                return None
            return merge_forms(forms)
        return memo(self, "linear_form", build)

    def is_polyhedral_without_aux(self) -> bool:
        """Every part has a linear form without auxiliary variables (one merged QP/LP serves it)."""
        return all(f is not None and f.n_aux == 0 for f in (p.linear_form() for p in self.parts))

    def cuts(self):
        """The cut analysis (base part index, unit-norm cut rows, right-hand sides, equality count), or None.

        One part (the *base*) has its own projection and the others are at most
        ``CUT_LIMIT`` linear rows once the base's own bounds are taken out; for
        all-polyhedral parts only when at most ``POLYHEDRAL_CUTS`` rows remain.
        """
        return memo(self, "cuts", lambda: cut_analysis(self.parts))

    @property
    def traits(self):
        common = set(self.parts[0].traits)
        for p in self.parts[1:]:
            common &= set(p.traits)
        if any(p.has_trait("bounded") for p in self.parts):
            common.add("bounded")
        return frozenset(common)

    def check_nonempty(self, parts, fail):
        """One LP on the merged form when it is small enough, else phase one of the cut column generation."""
        try:
            lp_forms = [lp_form(p) for p in self.parts]
            if all(f is not None for f in lp_forms) and sum(f.n_aux for f in lp_forms) <= AUX_CHECK_LIMIT:
                _check_feasible(merge_forms(lp_forms), self.parts)
                return
            cut = self.cuts()
            if cut is not None and "lmo" in self.parts[cut["base"]].kernels:
                _check_cuts_feasible(self, cut, parts[cut["base"]])
        except EmptySetError as exc:
            fail("of", str(exc), EmptySetError)

    def membership_screen(self, X, tol, parts):
        """Out when some part is farther than tol (dist to a part <= dist to K); in when every part contains
        the point up to rounding; undecided otherwise (routing then measures the distance to K itself)."""
        out = np.ones(X.shape[0], dtype=np.int8)
        tiny = 1e-6 * tol
        for p in parts:
            far = ~np.asarray(p.run("contains", X, tol=tol)[0], bool)
            near = np.asarray(p.run("contains", X, tol=tiny)[0], bool)
            out[far] = -1
            out[(out == 1) & ~near] = 0
        return out

    @kernel("violation")
    def violation(self, X, parts):
        """Largest violation over the parts (NaN if a part has no check), O(sum of the parts' costs)."""
        return np.max([part_violation(p, X) for p in parts], axis=0)


def _row_scale(node, Y):
    return np.maximum(max(1.0, node.scale()), np.abs(Y).max(axis=1))


def _accept(node, X, info, parts, method, sc):
    """Raise (or warn when loose) unless every row converged; returns (X, info for Details)."""
    status = info["status"]
    bad = [i for i, s in enumerate(status) if s != "solved"]
    if bad:
        i = bad[0]
        g, r, it = info["gap"][i], info["residual"][i], info["iterations"][i]
        if status[i] == "empty":
            raise EmptySetError(
                f"{node.label}: {method} diverged on batch row {i} (gap {g:.3g}, the parts stay "
                f"{r:.3g} apart after {it} steps): the parts appear to have no common point.")
        msg = (f"{node.label}: {method} did not reach the accuracy {node.accuracy:g} on {len(bad)} of "
               f"{len(status)} points within {node.max_iterations} steps (row {i}: duality gap {g:.3g}, "
               f"residual {r:.3g}). Raise max_iterations or accuracy in the description, or call "
               f"with_backends(project=\"reference\").")
        tol = node.accuracy * float(sc[i])
        if loose_of(parts) and r <= 1e3 * node.accuracy * max(1.0, node.scale()) and abs(g) <= 0.5 * (1e3 * tol) ** 2:
            warnings.warn(msg, AccuracyWarning, stacklevel=5)
        else:
            raise SolveError(msg, status="not_converged")
    bstat = [f"{method}: {s}, duality gap {g:.3g}, residual {r:.3g}"
             for s, g, r in zip(status, info["gap"], info["residual"])]
    return X, {"status": list(status), "iterations": list(info["iterations"]), "backend_status": bstat}


# -- strategies (ranked by setkit.routing) ------------------------------------------------------
@register_strategy("cut_dual")
class CutDual(Strategy):
    """A base part with its own projection cut by a few linear constraints."""

    kind = "intersection"
    operators = ("project", "lmo")
    priority = 10
    about = "cut dual on the base part"
    fallback_operators = ("lmo",)

    @classmethod
    def accepts(cls, node):
        cut = node.cuts()
        if cut is None:
            return False, "no part with its own projection cut by a few linear rows"
        return True, f"base {node.parts[cut['base']].label}, {cut['matrix'].shape[0]} cut rows"

    def __init__(self, node):
        super().__init__(node)
        cut = node.cuts()
        self.base = cut["base"]
        self.matrix, self.rhs, self.n_eq = cut["matrix"], cut["rhs"], cut["n_eq"]

    def project(self, Y, parts):
        """Dual over the few cut multipliers (semismooth Newton, L-BFGS-B fallback), one base projection per step, O(steps * base cost)."""
        base = parts[self.base]
        node = self.node
        fn = base.native("project")          # the base's bound kernel when it has one (one layer per step)

        def proj(Z):
            if fn is not None:
                out = fn(Z)
                return out[0] if isinstance(out, tuple) else out
            return base.run("project", Z)[0]

        sc = _row_scale(node, Y)
        X, info = project_with_cuts(proj, Y, self.matrix, self.rhs, self.n_eq, sc,
                                    accuracy=node.accuracy, max_iterations=node.max_iterations,
                                    feasibility_scale=max(1.0, node.scale()))
        return _accept(node, X, info, parts, "cut dual", sc)

    def lmo(self, C, parts):
        """Column generation (Dantzig-Wolfe): a small master LP over vertices from the base's own LMO, O(columns * (base LMO + small LP))."""
        base = parts[self.base]
        node = self.node
        # the LMO does not change when a row of C is multiplied by a positive number: bring every row to
        # a largest entry in [1, 2) (a power of two, exact) so that the master LP's optimality tolerance
        # (absolute) means the same at |c| ~ 1e-300 as at |c| ~ 1 (tiny costs read as all-zero otherwise)
        C = _unit_rows(C)
        X, info = lmo_with_cuts(lambda Q: base.run("lmo", Q)[0], C, self.matrix, self.rhs, self.n_eq,
                                max(1.0, node.scale()))
        status = info["status"]
        if "empty" in status:
            raise EmptySetError(f"{node.label}: the cuts leave no point of {base.node.label} "
                                f"(column generation ends with nonzero elastic slack).")
        bad = [i for i, s in enumerate(status) if s != "solved"]
        bstat = [f"column generation: {s}, {n} columns" for s, n in zip(status, info["iterations"])]
        # rows whose master did not settle within its column budget are answered by the fallback
        # route that setkit.routing chose for this operator (the merged LP or the reference)
        return X, {"status": list(status), "iterations": info["iterations"], "backend_status": bstat,
                   "unsettled": bad}


def _unit_rows(C):
    """Rows of C times powers of two so that each nonzero row's largest |entry| lies in [1, 2) (exact)."""
    m = np.abs(C).max(axis=1, initial=0.0)
    ok = (m > 0.0) & np.isfinite(m)
    if not ok.any():
        return C
    e = np.zeros(C.shape[0])
    e[ok] = -np.floor(np.log2(m[ok]))
    return np.ldexp(C, e.astype(np.int64)[:, None])


@register_strategy("dual_splitting")
class DualSplitting(Strategy):
    """General parts: accelerated dual proximal gradient on the parts' own projections."""

    kind = "intersection"
    operators = ("project",)
    priority = 30
    about = "splitting on the parts' projections"

    @classmethod
    def accepts(cls, node):
        ok, why = _splitting_applies(node)
        if ok and node.splitting == "dykstra":
            return False, "the description asks for Dykstra's method"
        return ok, why

    def project(self, Y, parts):
        """Accelerated dual proximal gradient on the parts' projections, stopped on the duality gap and residual, O(iterations * sum of part costs)."""  # noqa: E501 (one line: explain() shows it)
        return _split(self.node, fast_dual_projections, "dual splitting", Y, parts)


@register_strategy("dykstra")
class Dykstra(Strategy):
    """General parts: Dykstra's method on the parts' own projections (slower for far points)."""

    kind = "intersection"
    operators = ("project",)
    priority = 31
    about = "splitting on the parts' projections"

    @classmethod
    def accepts(cls, node):
        return _splitting_applies(node)

    def project(self, Y, parts):
        """Dykstra's alternating projections with corrections, stopped on the duality gap and residual, O(iterations * sum of part costs)."""
        return _split(self.node, dykstra, "Dykstra", Y, parts)


@register_strategy("bregman_dykstra")
class BregmanDykstra(Strategy):
    """KL projection onto an intersection whose parts all have a native KL projection."""

    kind = "intersection"
    operators = ("project_kl",)
    priority = 30
    about = "cyclic Bregman projections with Dykstra corrections"

    @classmethod
    def accepts(cls, node):
        missing = [p.label for p in node.parts if "project_kl" not in p.kernels]
        if missing:
            return False, (f"{missing[0]} has no native KL projection (one conic solve per sweep would cost more "
                           f"than one exponential-cone solve of the whole intersection)")
        return True, "every part has a native KL projection"

    def project_kl(self, T, parts):
        """Cyclic KL projections onto the parts with Dykstra corrections, stopped on the Bregman gap and the parts' residual."""
        from ..kernels.bregman import bregman_dykstra
        node, whole = self.node, self.owner
        sc = max(1.0, float(node.scale()))
        X, info = bregman_dykstra([lambda Z, p=p: p.run("project_kl", Z)[0] for p in parts], T,
                                  lambda G: whole.run("lmo", G)[0],
                                  [lambda P, p=p: part_violation(p, P) for p in parts],
                                  np.maximum(1.0, sc), node.accuracy, node.max_iterations)
        return _accept(node, X, info, parts, "Bregman-Dykstra", np.full(T.shape[0], sc))


def _splitting_applies(node):
    """Splitting serves the projection unless every part is polyhedral (then one merged QP does)."""
    if node.is_polyhedral_without_aux():
        return False, "every part is polyhedral: one merged QP serves the projection"
    return True, "some part is not a few linear rows"


def _split(node, method, name, Y, parts):
    projs = [(lambda Z, p=p: p.run("project", Z)[0]) for p in parts]
    sc = _row_scale(node, Y)
    X, info = method(projs, Y, sc, accuracy=node.accuracy, max_iterations=node.max_iterations,
                     feasibility_scale=max(1.0, node.scale()))
    return _accept(node, X, info, parts, name, sc)


def make_intersection(parts, accuracy=1e-7, max_iterations=20_000, name=None, splitting="accelerated"):
    """The intersection node of ``parts``; nested intersections are flattened first.

    (A ∩ B) ∩ C is A ∩ B ∩ C, so no iterative projection ever serves as the base of
    another. No algorithm is chosen here: :mod:`setkit.routing` does that at compile time.
    """
    flat = []
    for p in parts:
        flat.extend(p.parts if isinstance(p, Intersection) else (p,))
    return Intersection(parts=tuple(flat), accuracy=accuracy, max_iterations=max_iterations, name=name,
                        splitting=splitting)


def cut_analysis(parts):
    """See :meth:`Intersection.cuts`: a dict(base, matrix, rhs, n_eq) or None."""
    forms = [p.linear_form() for p in parts]
    polyhedral = all(f is not None and f.n_aux == 0 for f in forms)
    cuts = [cut_rows(f) if f is not None and f.n_aux == 0 else None for f in forms]
    others = [i for i, c in enumerate(cuts) if c is None]
    native = [i for i, p in enumerate(parts) if "project" in p.kernels]
    base = None
    if len(parts) > 1 and len(others) == 1 and not polyhedral:
        # one part is not a few linear rows (a permutahedron, a ball): it is the base
        base = others[0]
    elif len(parts) > 1 and not others and native:
        # all polyhedral and small: the native part with the most rows is the base, but only when
        # at most POLYHEDRAL_CUTS rows remain once its own bounds are taken out (else one OSQP QP)
        base = max(native, key=lambda i: cuts[i][0].shape[0])
    if base is None:
        return None
    rest = [cuts[i] for i in range(len(parts)) if i != base]
    n_rows = sum(c[0].shape[0] for c in rest)
    if not (0 < n_rows <= CUT_LIMIT and (base in native or any(f is None for f in forms))):
        return None
    A = np.vstack([c[0] for c in rest])
    rhs = np.concatenate([c[1] for c in rest])
    eq = np.concatenate([np.arange(c[0].shape[0]) < c[2] for c in rest])
    keep = ~_implied_bounds(A, rhs, eq, forms[base])
    A, rhs, eq = A[keep], rhs[keep], eq[keep]
    order = np.concatenate([np.flatnonzero(eq), np.flatnonzero(~eq)])
    if not order.size or (polyhedral and order.size > POLYHEDRAL_CUTS):
        return None
    return {"base": base, "matrix": A[order], "rhs": rhs[order], "n_eq": int(eq.sum())}


def _implied_bounds(A, rhs, eq, base_form):
    """Cut rows that are coordinate bounds the base already enforces (redundant multipliers make the
    dual degenerate): -x_i <= -l with base lower bound >= l, or x_i <= u with base upper bound <= u."""
    out = np.zeros(A.shape[0], bool)
    if base_form is None or base_form.n_aux:
        return out
    for j, (a, c) in enumerate(zip(A, rhs)):
        if eq[j]:
            continue
        nz = np.flatnonzero(a)
        if nz.size != 1:
            continue
        i = int(nz[0])
        bound = c / a[i]            # a_i x_i <= c:  x_i >= bound (a_i < 0) or x_i <= bound (a_i > 0)
        out[j] = base_form.lo[i] >= bound if a[i] < 0 else base_form.hi[i] <= bound
    return out


def _check_cuts_feasible(node, cut, base):
    """Phase one of the column generation (c = 0): nonzero elastic slack means the cuts miss the base."""
    _, info = lmo_with_cuts(lambda Q: base.run("lmo", Q)[0], np.zeros((1, node.dim)), cut["matrix"],
                            cut["rhs"], cut["n_eq"], max(1.0, node.scale()))
    if info["status"][0] == "empty":
        raise EmptySetError(f"the parts have no common point: the cuts miss {base.node.label} "
                            f"(the elastic slack of the column generation stays {info['residual'][0]:.3g})")


def _check_feasible(form, parts):
    """LP feasibility of the merged form (HiGHS); raises EmptySetError when no point exists."""
    if form.n > FEASIBILITY_CHECK_LIMIT:
        return
    lo_x, hi_x = form.lo[:form.n_x], form.hi[:form.n_x]
    bad = np.flatnonzero(lo_x > hi_x)
    if bad.size:
        i = int(bad[0])
        raise EmptySetError(f"the parts have no common point: coordinate {i} must be at least {lo_x[i]:g} "
                            f"and at most {hi_x[i]:g}")
    from scipy.optimize import linprog
    res = linprog(np.zeros(form.n), A_ub=form.A_ub if form.A_ub.shape[0] else None,
                  b_ub=form.b_ub if form.A_ub.shape[0] else None,
                  A_eq=form.A_eq if form.A_eq.shape[0] else None,
                  b_eq=form.b_eq if form.A_eq.shape[0] else None,
                  bounds=np.column_stack([form.lo, form.hi]), method="highs")
    if res.status == 2:
        labels = ", ".join(p.label for p in parts)
        raise EmptySetError(f"the parts ({labels}) have no common point: the merged linear constraints are "
                            f"infeasible (HiGHS: {res.message})")
