"""Wolfe's minimum-norm point with the kept Cholesky factor, on finite point clouds.

The polytope is conv(points) with the LMO "the point minimizing <c, v>"; the yardstick is the QP
over the convex weights solved by cvxpy (min ||V^T w - y|| over the probability simplex).
Degenerate clouds (repeated points, points on a low-dimensional affine subspace) make the corral
affinely dependent, which exercises the factor's refusal, rebuild and least-squares paths.
"""
import cvxpy as cp
import numpy as np
import pytest

from setkit.errors import SolveError
from setkit.kernels.minnorm import project_by_min_norm_point


def cloud_lmo(V):
    return lambda c: V[int(np.argmin(V @ c))]


def qp_projection(V, y):
    """cvxpy: the closest point of conv(rows of V) to y."""
    w = cp.Variable(V.shape[0])
    prob = cp.Problem(cp.Minimize(cp.sum_squares(V.T @ w - y)), [w >= 0, cp.sum(w) == 1])
    prob.solve(solver=cp.CLARABEL)
    return V.T @ w.value


@pytest.mark.parametrize("seed", range(6))
def test_point_clouds_against_the_qp(seed):
    rng = np.random.default_rng(seed)
    d = int(rng.integers(3, 25))
    V = rng.standard_normal((int(rng.integers(d + 2, 4 * d)), d))
    if seed % 3 == 1:                 # points on a 2-dimensional affine plane of R^d, some repeated
        B = rng.standard_normal((2, d))
        V = rng.standard_normal((V.shape[0], 2)) @ B + rng.standard_normal(d)
        V = np.vstack([V, V[:3]])
    if seed % 3 == 2:                 # a lattice cloud: many exact ties in <c, v>
        V = rng.integers(-2, 3, V.shape).astype(float)
    for y in (rng.standard_normal(d) * 3.0, V.mean(axis=0), V[0] + 1e-9):
        try:
            p, info = project_by_min_norm_point(y, cloud_lmo(V), scale=float(np.abs(V).max()))
        except SolveError as exc:     # allowed: a stated refusal, never a wrong point
            assert "gap" in str(exc)
            continue
        ref = qp_projection(V, y)
        # the Frank-Wolfe gap of the answer, measured here, is at most the stated tolerance
        q = cloud_lmo(V)(p - y)
        gap = float((p - y) @ (p - q))
        assert gap <= max(info["tolerance"], 1e-12 * d * max(1.0, np.abs(V).max()) ** 2)
        # against cvxpy's point (feasible to about 1e-8, optimal only to Clarabel's tolerance): ours is
        # at least as close to y, and the strong convexity of ||. - y||^2 places cvxpy's point near
        # ours: ||r - p||^2 <= ||r - y||^2 - ||p - y||^2 + 2 gap for the projection p (gap >= 0 slack)
        dp, dr = float(np.sum((p - y) ** 2)), float(np.sum((ref - y) ** 2))
        assert dp <= dr + 1e-9 * max(1.0, dr)
        assert float(np.sum((ref - p) ** 2)) <= dr - dp + 2.0 * gap + 1e-7 * max(1.0, dr)


def test_a_long_run_keeps_the_factor_exact():
    # 400 random points on the unit sphere of R^60 and y far outside: a corral of dozens of vertices
    # over hundreds of cycles (appends, Givens deletions, reference-vertex rebuilds)
    rng = np.random.default_rng(9)
    V = rng.standard_normal((400, 60))
    V /= np.linalg.norm(V, axis=1, keepdims=True)
    y = rng.standard_normal(60)
    y *= 0.3 / np.linalg.norm(y)
    p, info = project_by_min_norm_point(y, cloud_lmo(V))
    assert info["corral"] > 20
    np.testing.assert_allclose(p, qp_projection(V, y), atol=2e-6)
