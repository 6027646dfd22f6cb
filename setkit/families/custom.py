"""Custom sets stated by cvxpy constraints alone (kind ``custom``, built in Python).

    K = {x : constraints(x) hold}, with constraints(x) -> list of cvxpy constraints

Every operator is then served by the generic routes: projection and LMO by the
cvxpy reference (the problem is built once per workspace with cvxpy Parameters
and re-solved per point, never re-modeled per call), distance from the
projection, support from the LMO, membership from the distance, the penalty
from the projection; a linear form, when given, lets the OSQP and HiGHS
backends serve projection and LMO faster. The largest constraint violation is
measured natively by evaluating the constraints at the point (a cvxpy
Parameter stands for x), unless the constraints use auxiliary variables.
"""
from __future__ import annotations

from dataclasses import dataclass
from types import SimpleNamespace
from typing import Any, Callable, ClassVar

import numpy as np

from ..errors import DescriptionError
from . import Family, kernel

def _expression_of_shape(cp, obj, shape):
    d = int(np.prod(shape)) if shape else 1
    return obj if tuple(shape) == (d,) else cp.reshape(obj, shape, order="C")


# not registered: a custom set cannot be written in a description file, and code that iterates over
# the registered kinds (conformance, benchmarks, builders) must not meet a kind it cannot build
@dataclass(frozen=True, eq=False, kw_only=True)
class CustomSet(Family):
    """K = {x of shape ``point_shape`` : every constraint returned by ``build(x)`` holds}.

    Built with :func:`setkit.from_cvxpy`; it cannot be written in a description
    file (a file cannot carry Python code). For a set that description files can
    use, write a family class and register it (see DEVELOPERS.md).

    >>> import cvxpy as cp, setkit
    >>> K = setkit.from_cvxpy(lambda x: [x >= 0, cp.sum(x) <= 1, x[0] <= 0.25], 3)
    >>> K.project([1.0, 0.0, 0.0]).round(6).tolist()
    [0.25, 0.0, 0.0]
    """

    build: Callable
    point_shape: tuple
    data_scale: float = 1.0
    declared_traits: frozenset = frozenset()
    form: Any = None

    kind: ClassVar[str] = "custom"

    @property
    def traits(self):
        return frozenset(self.declared_traits)

    @classmethod
    def from_spec(cls, r):
        r.fail("kind", "a custom set is built in Python with setkit.from_cvxpy(constraints, shape); a "
                       "description file cannot carry code. To use your own set in files, write a family "
                       "class registered with @setkit.register('your_kind') or a 'setkit.families' entry point.")

    @property
    def shape(self):
        return tuple(self.point_shape)

    @property
    def label(self):
        return "custom" + (f" '{self.name}'" if self.name else "")

    def scale(self):
        return float(self.data_scale)

    def cvxpy_constraints(self, x):
        return list(self.build(x))

    def linear_form(self):
        return self.form

    # -- native violation: evaluate the constraints at x -------------------------------------------
    def new_workspace(self):
        """This thread's evaluator: the constraints built once on a cvxpy Parameter standing for x."""
        import cvxpy as cp
        p = cp.Parameter(self.dim)
        cons = list(self.build(_expression_of_shape(cp, p, self.shape)))
        return SimpleNamespace(p=p, cons=cons, aux=any(c.variables() for c in cons))

    @kernel("violation", workspace=True)
    def violation(self, X, ev):
        """Largest violation of the stated constraints evaluated at each point (NaN with auxiliary variables).

        One evaluation of the constraint expressions per point.
        """
        if ev.aux:
            return np.full(X.shape[0], np.nan)
        out = np.empty(X.shape[0])
        for i, x in enumerate(X):
            ev.p.value = x
            out[i] = max((float(np.max(c.violation(), initial=0.0)) for c in ev.cons), default=0.0)
        return out


def from_cvxpy(constraints: Callable, shape, *, name: str | None = None, scale: float = 1.0,
               traits=(), linear_form=None):
    """A :class:`~setkit.decision_set.DecisionSet` from cvxpy constraints alone.

    Parameters
    ----------
    constraints : callable
        ``constraints(x)`` returns a list of cvxpy constraints on ``x``, a cvxpy
        expression of the given shape. It is called a few times (once per
        problem and thread), never per operator call; use a module-level function
        if the set must pickle (to ship it to worker processes).
    shape : int or tuple
        The point shape.
    scale : float
        A magnitude of the set's data, used to make tolerances relative.
    traits : iterable of str
        Declared traits, e.g. ``("polyhedral", "bounded")``.
    linear_form : setkit.forms.LinearForm, optional
        The same set as {A_eq z = b_eq, A_ub z <= b_ub, lo <= z <= hi}; lets the
        OSQP and HiGHS backends serve projection and LMO.

    Every operator is served generically (see ``K.explain()``): projection and
    LMO by the cvxpy reference, with the problem built once with Parameters.

    >>> import cvxpy as cp, setkit
    >>> K = setkit.from_cvxpy(lambda x: [cp.norm(x, 2) <= 1, x[1] >= 0.5], 2, name="cap")
    >>> round(float(K.support([0.0, 1.0])), 6)
    1.0
    """
    import cvxpy as cp

    from ..decision_set import DecisionSet
    if isinstance(shape, (int, np.integer)):
        shape = (int(shape),)
    try:
        shape = tuple(int(s) for s in shape)
    except TypeError:
        raise DescriptionError(f"from_cvxpy: shape must be an int or a tuple of ints; got {shape!r}.") from None
    if not shape or any(s < 1 for s in shape):
        raise DescriptionError(f"from_cvxpy: shape must have positive sizes; got {shape}.")
    if not callable(constraints):
        raise DescriptionError(f"from_cvxpy: constraints must be a callable x -> list of cvxpy constraints; "
                               f"got {type(constraints).__name__}.")
    who = f"custom '{name}'" if name else "custom"
    d = int(np.prod(shape))
    x = cp.Variable(d)
    try:
        cons = constraints(_expression_of_shape(cp, x, shape))
    except Exception as exc:
        raise DescriptionError(f"from_cvxpy ({who}): calling constraints(x) on a cvxpy expression of shape "
                               f"{shape} failed: {type(exc).__name__}: {exc}") from exc
    if isinstance(cons, cp.constraints.constraint.Constraint):
        cons = [cons]
    try:
        cons = list(cons)
    except TypeError:
        raise DescriptionError(f"from_cvxpy ({who}): constraints(x) must return a list of cvxpy constraints; "
                               f"got {type(cons).__name__}.") from None
    bad = [c for c in cons if not isinstance(c, cp.constraints.constraint.Constraint)]
    if bad:
        raise DescriptionError(f"from_cvxpy ({who}): constraints(x) must return cvxpy constraints; item "
                               f"{cons.index(bad[0])} is {type(bad[0]).__name__} ({bad[0]!r}). A comparison of "
                               f"numbers instead of expressions gives a bool.")
    if not cp.Problem(cp.Minimize(0), cons).is_dcp():
        raise DescriptionError(f"from_cvxpy ({who}): the constraints are not convex by cvxpy's rules (DCP); "
                               f"write them as convex <= concave, affine == affine.")
    if not (np.isfinite(scale) and scale > 0):
        raise DescriptionError(f"from_cvxpy ({who}): scale must be a positive number; got {scale}.")
    if linear_form is not None and (linear_form.n_x != d):
        raise DescriptionError(f"from_cvxpy ({who}): linear_form has {linear_form.n_x} point coordinates; "
                               f"expected {d}.")
    node = CustomSet(build=constraints, point_shape=shape, data_scale=float(scale),
                     declared_traits=frozenset(traits), form=linear_form, name=name)
    return DecisionSet(node)
