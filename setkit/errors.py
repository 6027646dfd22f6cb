"""The exception and warning hierarchy of setkit.

Every error raised on purpose by setkit derives from :class:`SetkitError` and
also from the built-in exception that fits, so callers can catch either.
"""
from __future__ import annotations


class SetkitError(Exception):
    """Base class of every error setkit raises on purpose."""


class DescriptionError(SetkitError, ValueError):
    """A set description is malformed, incomplete or infeasible.

    The message names the object, the location (file and key path), what was
    required and what was given.
    """

    def __init__(self, message: str, location=None):
        super().__init__(message)
        self.location = location


class EmptySetError(DescriptionError):
    """The described set has no point (for example unbalanced supplies)."""


class TakeGeneralPath(SetkitError):
    """Internal signal, never raised to callers: a compiled single-point kernel
    (:mod:`setkit.kernels.point`) leaves this point to the general path of the operator."""


class InputError(SetkitError, ValueError):
    """A point, direction or argument passed to an operator is invalid."""


class NonFiniteRows(InputError):
    """Internal signal: a native kernel split over threads (or one that checks its own input) found an
    entry that is not finite; the DecisionSet then validates the batch itself, which raises the
    InputError naming the first bad index. Kept an InputError so that, were it ever to escape, it
    still says what was wrong."""


class UnboundedDirectionError(SetkitError, ValueError):
    """The linear minimization has no minimizer: the set is unbounded along the direction."""

    def __init__(self, message: str, ray=None):
        super().__init__(message)
        self.ray = ray


class BackendUnavailableError(SetkitError, ImportError):
    """A requested backend is unknown or its package is not installed."""


class UnsupportedOperationError(SetkitError, NotImplementedError):
    """No implementation (native, derived or generic) can serve the operator for this set."""


class SolveError(SetkitError, RuntimeError):
    """A solver failed, did not converge, or returned a point that fails our own check."""

    def __init__(self, message: str, status: str | None = None):
        super().__init__(message)
        self.status = status


class TimeLimitError(SolveError):
    """A call ran past the time limit set with :func:`setkit.time_limit` (or ``time_limit=``).

    Attributes: ``asked`` (what was being computed), ``elapsed`` and ``limit`` (seconds) and
    ``accuracy`` (the best accuracy reached, in the words of the method that stopped; None if
    it had none yet).
    """

    def __init__(self, message: str, *, asked: str = "", elapsed: float = 0.0, limit: float = 0.0,
                 accuracy: str | None = None):
        super().__init__(message, status="time_limit")
        self.asked = asked
        self.elapsed = elapsed
        self.limit = limit
        self.accuracy = accuracy


class SetkitWarning(UserWarning):
    """Base class of setkit's warnings."""


class AccuracyWarning(SetkitWarning):
    """An answer was returned with a measured error above the requested tolerance
    because the caller asked for loose answers."""
