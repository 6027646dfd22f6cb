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
Python loop over blocks.

``contains`` means every block contains its coordinates within ``tol``;
``support`` is the sum of the blocks' supports; ``distance`` the root of the sum
of the squared block distances.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..families import Family, kernel, register
from ..forms import stack_blocks
from . import cached, lp_form, node_key, part_violation


@register("product")
@dataclass(frozen=True, eq=False, kw_only=True)
class Product(Family):
    """K = K_1 x ... x K_m with identical blocks grouped into one batched call each.

    >>> import setkit
    >>> K = setkit.compile({"kind": "product", "of": [{"kind": "simplex", "dim": 2}], "copies": 2})
    >>> K.project([1.0, 0.0, 3.0, 1.0]).tolist()
    [1.0, 0.0, 1.0, 0.0]
    """

    @classmethod
    def examples(cls):
        """Small instances for the conformance checks (tests/test_conformance.py)."""
        return [{"kind": "product", "of": [{"kind": "simplex", "dim": 3},
                                            {"kind": "box", "dim": 2, "lower": -1, "upper": 1}]},
                {"kind": "product", "of": [{"kind": "simplex", "dim": 2, "total": 3.0}], "copies": 3}]

    blocks: tuple          # the distinct block nodes
    layout: tuple          # for each position, the index of its block in ``blocks``

    traits = frozenset({"product"})

    @classmethod
    def from_spec(cls, r):
        nodes = r.nodes("of", min_count=1)
        copies = r.integer("copies", 1, min=1)
        return make_product(list(nodes) * copies, name=r.name)

    # -- structure --------------------------------------------------------------------------
    @property
    def shape(self):
        return (sum(self.blocks[g].dim for g in self.layout),)

    def children(self):
        return tuple(self.blocks)

    def scale(self):
        return max(b.scale() for b in self.blocks)

    def _groups(self):
        """For each distinct block: the (copies, block dim) array of its columns in x."""
        def build():
            offs = np.cumsum([0] + [self.blocks[g].dim for g in self.layout])
            out = []
            for g, blk in enumerate(self.blocks):
                pos = [i for i, h in enumerate(self.layout) if h == g]
                cols = np.array([np.arange(offs[i], offs[i] + blk.dim) for i in pos], dtype=np.intp)
                contiguous = len(self.blocks) == 1
                out.append((g, cols, contiguous))
            return out
        return cached(self, "groups", build)

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
        return cached(self, "linear_form", build)

    # -- measure hooks (read by setkit.measures): the uniform law on a product (volume), on the product
    # of the extreme-point sets (vertices) and the law of the block-wise lmo of a Gaussian direction
    # (directions) are all product laws, so centroids concatenate and samples are drawn block by block.
    def exact_centroid(self, measure):
        """Concatenation of the blocks' exact centroids (None if a block has none)."""
        cs = []
        for blk in self.blocks:
            hook = getattr(blk, "exact_centroid", None)
            c = hook(measure) if callable(hook) else None
            if c is None:
                return None
            cs.append(np.asarray(c, dtype=float).reshape(-1))
        return np.concatenate([cs[g] for g in self.layout])

    def exact_sample(self, k, measure, rng):
        """Independent exact samples of every block, concatenated (None if a block has none)."""
        out = []
        for g in self.layout:
            hook = getattr(self.blocks[g], "exact_sample", None)
            X = hook(k, measure, rng) if callable(hook) else None
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
        out = np.empty_like(X)
        for g, cols, contiguous in self._groups():
            k, d = cols.shape
            res, _ = parts[g]._run(op, self._gather(X, cols, contiguous))
            if contiguous:
                return np.asarray(res, dtype=float).reshape(b, k * d)
            out[:, cols.ravel()] = np.asarray(res).reshape(b, k * d)
        return out

    def _values(self, op, X, parts, tol=None):
        b = X.shape[0]
        vals = []
        for g, cols, contiguous in self._groups():
            k, d = cols.shape
            sub = self._gather(X, cols, contiguous)
            if op == "contains":
                res, _ = parts[g]._run(op, sub, tol=np.repeat(tol, k))
            elif op == "violation":
                res = part_violation(parts[g], sub)
            else:
                res, _ = parts[g]._run(op, sub)
            vals.append(np.asarray(res).reshape(b, k))
        return np.concatenate(vals, axis=1)

    @kernel("project")
    def project(self, Y, parts):
        """Block-wise projection, one batched call per distinct block, O(sum of the block costs)."""
        return self._points("project", Y, parts)

    @kernel("lmo")
    def lmo(self, C, parts):
        """Block-wise LMO, one batched call per distinct block, O(sum of the block costs)."""
        return self._points("lmo", C, parts)

    @kernel("distance")
    def distance(self, Y, parts):
        """Root of the sum of squared block distances, one batched call per distinct block."""
        d = self._values("distance", Y, parts)
        return np.sqrt(np.einsum("ij,ij->i", d, d))

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
