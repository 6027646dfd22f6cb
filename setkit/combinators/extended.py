"""Compact extended formulations used to serve LMOs of intersections by one LP.

A permutahedron P(w) = conv{permutations of w} has exponentially many facets but
is the image of the Birkhoff polytope of doubly stochastic n x n matrices W
under x = W w (Birkhoff-von Neumann: the vertices of the Birkhoff polytope are
the permutation matrices). That gives a linear form with n^2 auxiliary
variables and 3n equalities, so P(w) ∩ {polyhedron} is one LP for HiGHS.
A permutahedron family may return :func:`permutahedron_form` from its optional
``extended_form()`` hook (see :func:`setkit.combinators.lp_form`).
"""
from __future__ import annotations

import numpy as np
import scipy.sparse as sp

from ..forms import LinearForm


def permutahedron_form(weights) -> LinearForm:
    """{(x, W) : x = W w, W 1 = 1, W^T 1 = 1, W >= 0}; z = (x, vec(W)) with W in C order.

    O(n^2) variables and nonzeros.
    """
    w = np.asarray(weights, dtype=float).reshape(-1)
    n = w.size
    I = sp.eye(n, format="csr")
    # x_i - sum_j W_ij w_j = 0
    link = sp.hstack([I, -sp.kron(I, sp.csr_matrix(w[None, :]))], format="csr")
    rows = sp.hstack([sp.csr_matrix((n, n)), sp.kron(I, sp.csr_matrix(np.ones((1, n))))], format="csr")
    cols = sp.hstack([sp.csr_matrix((n, n)), sp.kron(sp.csr_matrix(np.ones((1, n))), I)], format="csr")
    A_eq = sp.vstack([link, rows, cols], format="csr")
    b_eq = np.concatenate([np.zeros(n), np.ones(n), np.ones(n)])
    lo = np.concatenate([np.full(n, -np.inf), np.zeros(n * n)])
    hi = np.concatenate([np.full(n, np.inf), np.ones(n * n)])
    return LinearForm(n, n * n, A_eq, b_eq, sp.csr_matrix((0, n + n * n)), np.zeros(0), lo, hi)
