"""Cartesian product of sets: K = K_1 x ... x K_m, coordinates concatenated.

Description keys::

    kind: product
    of: [set, set, ...]   # the blocks, in order; each block's point is flattened (C order)
    copies: 1             # optional: the list ``of`` repeated this many times

The point shape is (sum of the blocks' dims,). Every operator works block by
block. Identical blocks (same family and the same data, e.g. 10,000 per-user
simplices) are grouped when the description is read and served by ONE batched
call of the block's operator on a (batch * copies, block dim) array, so the cost
of a product of many small sets is that of one vectorized kernel, not of a
Python loop over blocks. Blocks of one family and shape that differ only in
data can share one call too when the family offers the optional stacking hooks
``stack_key()``, ``stack_params(nodes)`` and ``stacked(op, params, X)`` (the
simplex does: per-user budgets with different totals are one scaled call).

``contains`` means every block contains its coordinates within ``tol``;
``support`` is the sum of the blocks' supports; ``distance`` the root of the sum
of the squared block distances.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..errors import UnsupportedOperationError
from ..families import Family, kernel, memo, register
from ..forms import stack_blocks
from . import lp_form, node_key, part_violation


@register("product")
@dataclass(frozen=True, eq=False, kw_only=True)
class Product(Family):
    """K = K_1 x ... x K_m with identical blocks grouped into one batched call each.

    >>> import setkit
    >>> K = setkit.compile({"kind": "product", "of": [{"kind": "simplex", "dim": 2}], "copies": 2})
    >>> K.project([1.0, 0.0, 3.0, 1.0]).tolist()
    [1.0, 0.0, 1.0, 0.0]
    """

    blocks: tuple          # the distinct block nodes
    layout: tuple          # for each position, the index of its block in ``blocks``

    traits = frozenset({"product"})

    @classmethod
    def from_spec(cls, r):
        nodes = r.nodes("of", min_count=1)
        copies = r.integer("copies", 1, min=1)
        return make_product(list(nodes) * copies, name=r.name)

    @classmethod
    def examples(cls):
        """Small instances for the conformance checks (grouped blocks, mixed blocks, nesting)."""
        return [
            {"kind": "product", "of": [{"kind": "simplex", "dim": 3}], "copies": 3},
            {"kind": "product", "of": [{"kind": "simplex", "dim": 2, "total": 2.0},
                                       {"kind": "box", "dim": 2, "lower": -1, "upper": 1},
                                       {"kind": "simplex", "dim": 2, "total": 2.0}]},
            {"kind": "product", "of": [{"kind": "intersection", "of": [
                {"kind": "simplex", "dim": 3}, {"kind": "box", "dim": 3, "lower": 0, "upper": 0.5}]},
                {"kind": "ball", "dim": 2, "radius": 2.0}]},
        ]

    @classmethod
    def random_example(cls, rng):
        """A product of 2..4 random simplices."""
        k = int(rng.integers(2, 5))
        return {"kind": "product", "of": [{"kind": "simplex", "dim": int(rng.integers(2, 5)),
                                           "total": float(np.round(rng.uniform(0.5, 3.0), 3))} for _ in range(k)]}

    # -- structure --------------------------------------------------------------------------
    @property
    def shape(self):
        return memo(self, "shape", lambda: (int(sum(self.blocks[g].dim for g in self.layout)),))

    @property
    def dim(self):
        return self.shape[0]

    def children(self):
        return tuple(self.blocks)

    def scale(self):
        return max(b.scale() for b in self.blocks)

    def orthant_violation(self):
        """Outside x >= 0 when a block is (its reason); inside when every block says so; else unknown."""
        verdicts = [b.orthant_violation() for b in self.blocks]
        for b, why in zip(self.blocks, verdicts):
            if isinstance(why, str) and why:
                return f"its block {b.label} leaves it: {why}"
        return None if all(why is None or why == "" for why in verdicts) else NotImplemented

    def _groups(self):
        """How the positions are served, one entry per batched call.

        ("block", g, cols, contiguous): every position of distinct block g in one call of its
        operators; ("stack", (cls, params), cols, contiguous): distinct blocks of one family,
        shape and ``stack_key()`` whose class offers the optional hooks ``stack_key()``,
        ``stack_params(nodes)`` and ``stacked(op, params, X)`` (e.g. simplices with different
        totals), served by one call of the class's hook.
        ``cols`` is the (copies, block dim) array of the positions' coordinates.
        """
        def build():
            offs = np.cumsum([0] + [self.blocks[g].dim for g in self.layout])
            def cols_of(pos):
                return np.array([np.arange(offs[i], offs[i] + self.blocks[self.layout[i]].dim)
                                                        for i in pos], dtype=np.intp)
            out, used = [], set()
            # families with a stacking hook: group distinct blocks by (class, shape)
            fam = {}
            for g, blk in enumerate(self.blocks):
                key = blk.stack_key()
                if key is not None:
                    fam.setdefault((type(blk), tuple(blk.shape), key), []).append(g)
            for (cls, _, _), gs in fam.items():
                if len(gs) < 2:
                    continue
                gset = set(gs)
                pos = [i for i, h in enumerate(self.layout) if h in gset]
                params = cls.stack_params([self.blocks[self.layout[i]] for i in pos])
                if params is None:
                    continue
                used |= gset
                out.append(("stack", (cls, params), cols_of(pos), len(pos) == len(self.layout)))
            for g, blk in enumerate(self.blocks):
                if g in used:
                    continue
                pos = [i for i, h in enumerate(self.layout) if h == g]
                out.append(("block", g, cols_of(pos), len(self.blocks) == 1))
            return out
        return memo(self, "groups", build)

    def _call(self, entry, op, sub, parts, tol=None):
        how, what, _, _ = entry
        if how == "stack":
            cls, params = what
            return _stacked_call(cls, params, op, self.label)(sub, tol)[0]
        part = parts[what]
        fn = part.native(op)     # the part's bound native kernel, if it has one
        if op == "contains":
            if fn is not None:
                res = fn(sub, tol)
                return res[0] if isinstance(res, tuple) else res
            return part.run(op, sub, tol=tol)[0]
        if op == "violation":
            return part_violation(part, sub)
        if fn is not None:
            res = fn(sub)
            return res[0] if isinstance(res, tuple) else res
        return part.run(op, sub)[0]

    def positions(self):
        """The block node at each position (expanded layout)."""
        return [self.blocks[g] for g in self.layout]

    # -- formulations -----------------------------------------------------------------------
    def cvxpy_constraints(self, x):
        import cvxpy as cp
        cons, off = [], 0
        for blk in self.positions():
            seg = x[off:off + blk.dim]
            if len(blk.shape) != 1:
                seg = cp.reshape(seg, blk.shape, order="C")
            cons.extend(blk.cvxpy_constraints(seg))
            off += blk.dim
        return cons

    def linear_form(self):
        def build():
            forms = [lp_form(b) for b in self.blocks]
            if any(f is None for f in forms):
                return None
            return stack_blocks([forms[g] for g in self.layout])
        return memo(self, "linear_form", build)

    # -- measure hooks (read by setkit.measures): the uniform law on a product (volume), on the product
    # of the extreme-point sets (vertices) and the law of the block-wise lmo of a Gaussian direction
    # (directions) are all product laws, so centroids concatenate and samples are drawn block by block.
    def exact_centroid(self, measure):
        """Concatenation of the blocks' exact centroids (None if a block has none)."""
        cs = []
        for blk in self.blocks:
            c = blk.exact_centroid(measure)
            if c is None:
                return None
            cs.append(np.asarray(c, dtype=float).reshape(-1))
        return np.concatenate([cs[g] for g in self.layout])

    def exact_sample(self, k, measure, rng):
        """Independent exact samples of every block, concatenated (None if a block has none)."""
        out = []
        for g in self.layout:
            X = self.blocks[g].exact_sample(k, measure, rng)
            if X is None:
                return None
            out.append(np.asarray(X, dtype=float).reshape(k, -1))
        return np.concatenate(out, axis=1)

    # -- block-wise evaluation ----------------------------------------------------------------
    def _gather(self, X, cols, contiguous):
        b = X.shape[0]
        k, d = cols.shape
        if contiguous:
            return X.reshape(b * k, d)
        return X[:, cols.ravel()].reshape(b * k, d)

    def _points(self, op, X, parts):
        b = X.shape[0]
        out = None
        for entry in self._groups():
            cols, contiguous = entry[2], entry[3]
            k, d = cols.shape
            res = self._call(entry, op, self._gather(X, cols, contiguous), parts)
            if contiguous:
                return np.asarray(res, dtype=float).reshape(b, k * d)
            if out is None:
                out = np.empty_like(X)
            out[:, cols.ravel()] = np.asarray(res).reshape(b, k * d)
        return out if out is not None else np.empty_like(X)

    def _values(self, op, X, parts, tol=None):
        b = X.shape[0]
        groups = self._groups()
        if len(groups) == 1:             # one group (e.g. copies of one block): no concatenation
            entry = groups[0]
            cols, contiguous = entry[2], entry[3]
            k = cols.shape[0]
            t = None if tol is None else np.repeat(tol, k)
            return np.asarray(self._call(entry, op, self._gather(X, cols, contiguous), parts, tol=t)).reshape(b, k)
        vals = []
        for entry in groups:
            cols, contiguous = entry[2], entry[3]
            k, d = cols.shape
            t = None if tol is None else np.repeat(tol, k)
            res = self._call(entry, op, self._gather(X, cols, contiguous), parts, tol=t)
            vals.append(np.asarray(res).reshape(b, k))
        return np.concatenate(vals, axis=1)

    @kernel("project")
    def project(self, Y, parts):
        """Block-wise projection, one batched call per distinct block, O(sum of the block costs)."""
        return self._points("project", Y, parts)

    @kernel("project_kl")
    def project_kl(self, T, parts):
        """Block-wise KL projection (log-domain input), one batched call per distinct block, O(sum of the block costs)."""
        return self._points("project_kl", T, parts)

    def _block_columns(self):
        """For each distinct block g, the (copies, block dim) array of its positions' coordinates."""
        def build():
            offs = np.cumsum([0] + [self.blocks[g].dim for g in self.layout])
            return [np.array([np.arange(offs[i], offs[i + 1]) for i, h in enumerate(self.layout) if h == g],
                             dtype=np.intp) for g in range(len(self.blocks))]
        return memo(self, "block_columns", build)

    @kernel("project_jvp")
    def project_jvp(self, Y, V, parts):
        """Block-wise Jacobian products (the Jacobian of a product projection is block diagonal), one batched call per distinct block.

        Each block returns the element its own kernel documents at its kinks.
        """
        b = Y.shape[0]
        out = np.empty_like(Y)
        for g, cols in enumerate(self._block_columns()):
            k, d = cols.shape
            flat = cols.ravel()
            res, _ = parts[g].run("project_jvp", Y[:, flat].reshape(b * k, d), V[:, flat].reshape(b * k, d))
            out[:, flat] = np.asarray(res).reshape(b, k * d)
        return out

    @kernel("project_kl_jvp")
    def project_kl_jvp(self, T, V, parts):
        """Block-wise KL Jacobian products in log coordinates (block diagonal), one batched call per distinct block."""
        b = T.shape[0]
        out = np.empty_like(T)
        for g, cols in enumerate(self._block_columns()):
            k, d = cols.shape
            flat = cols.ravel()
            res, _ = parts[g].run("project_kl_jvp", T[:, flat].reshape(b * k, d), V[:, flat].reshape(b * k, d))
            out[:, flat] = np.asarray(res).reshape(b, k * d)
        return out

    @kernel("lmo")
    def lmo(self, C, parts):
        """Block-wise LMO, one batched call per distinct block, O(sum of the block costs)."""
        return self._points("lmo", C, parts)

    @kernel("distance")
    def distance(self, Y, parts):
        """Root of the sum of squared block distances, one batched call per distinct block."""
        d = self._values("distance", Y, parts)
        # scaled by the largest block distance: the squares of distances above ~1e154 would overflow
        m = d.max(axis=1, initial=0.0) if d.shape[1] else np.zeros(d.shape[0])
        s = np.where((m > 0.0) & np.isfinite(m), m, 1.0)
        q = d / s[:, None]
        return np.sqrt(np.einsum("ij,ij->i", q, q)) * s

    @kernel("support")
    def support(self, C, parts):
        """Sum of the block supports, one batched call per distinct block."""
        return self._values("support", C, parts).sum(axis=1)

    @kernel("contains")
    def contains(self, X, tol, parts):
        """Every block contains its coordinates within tol, one batched call per distinct block."""
        return self._values("contains", X, parts, tol=tol).all(axis=1)

    @kernel("violation")
    def violation(self, X, parts):
        """Largest violation over the blocks (NaN if a block has no check)."""
        return self._values("violation", X, parts).max(axis=1)


def make_product(nodes, name=None):
    """The product node of ``nodes`` with identical blocks grouped."""
    keys, blocks, layout = {}, [], []
    for nd in nodes:
        key = node_key(nd)
        if key not in keys:
            keys[key] = len(blocks)
            blocks.append(nd)
        layout.append(keys[key])
    return Product(blocks=tuple(blocks), layout=tuple(layout), name=name)


def _stacked_call(cls, params, op, label):
    """Operator ``op`` of stacked blocks: the family's ``stacked`` hook, or routing's derived rule on it."""
    from ..routing import TAKES_TOL, derived_call

    def run(o, Z, t=None):
        res = cls.stacked(o, params, Z)
        if res is not None:
            return res, {}
        rule = derived_call(o, run)
        if rule is None:
            raise UnsupportedOperationError(f"{label}: the stacked {cls.kind} blocks offer no {o}.")
        return rule(Z, t) if o in TAKES_TOL else rule(Z)
    return lambda Z, t=None: run(op, Z, t)
