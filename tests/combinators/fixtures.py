"""Private test fixtures: tiny sets the combinator tests need before (or besides) the real families.

They are Family nodes built directly (not registered), so they never shadow a
registered kind; descriptions can embed them because a node is accepted in
place of a mapping.
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import ClassVar

import numpy as np

from setkit.families import Family, kernel
from setkit.forms import LinearForm


@dataclass(frozen=True, eq=False, kw_only=True)
class Halfspaces(Family):
    """{x : A x <= b} (no native kernels: served through its linear form)."""

    A: np.ndarray
    b: np.ndarray
    kind: ClassVar[str] = "halfspaces-fixture"
    traits = frozenset({"polyhedral"})

    @property
    def shape(self):
        return (self.A.shape[1],)

    def cvxpy_constraints(self, x):
        return [self.A @ x <= self.b]

    def linear_form(self):
        return LinearForm.build(self.A.shape[1], A_ub=self.A, b_ub=self.b)

    def scale(self):
        return float(max(1.0, np.abs(self.b).max()))


@dataclass(frozen=True, eq=False, kw_only=True)
class Ball(Family):
    """{x : ||x - center|| <= radius}: no linear form, exact native operators."""

    center: np.ndarray
    radius: float
    kind: ClassVar[str] = "ball-fixture"
    traits = frozenset({"bounded"})

    @property
    def shape(self):
        return (self.center.size,)

    def cvxpy_constraints(self, x):
        import cvxpy as cp
        return [cp.norm(x - self.center, 2) <= self.radius]

    def scale(self):
        return float(max(1.0, self.radius, np.abs(self.center).max()))

    @kernel("project")
    def project(self, Y):
        """Radial scaling onto the ball, O(n)."""
        D = Y - self.center
        n = np.linalg.norm(D, axis=1, keepdims=True)
        f = np.where(n > self.radius, self.radius / np.maximum(n, 1e-300), 1.0)
        return self.center + D * f

    @kernel("lmo")
    def lmo(self, C):
        """center - radius c/||c||, O(n)."""
        n = np.linalg.norm(C, axis=1, keepdims=True)
        return self.center - self.radius * C / np.where(n > 0, n, 1.0)

    @kernel("support")
    def support(self, C):
        """<c, center> + radius ||c||, O(n)."""
        return C @ self.center + self.radius * np.linalg.norm(C, axis=1)


def halfspaces(A, b):
    return Halfspaces(A=np.atleast_2d(np.asarray(A, float)), b=np.atleast_1d(np.asarray(b, float)))


def ball(center, radius):
    return Ball(center=np.asarray(center, float), radius=float(radius))
