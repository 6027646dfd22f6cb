"""Former home of :func:`verify`; kept so that ``from setkit.checks import verify`` still works.

Everything here is defined in :mod:`setkit.agreement`, the one module that compares a set
with the cvxpy reference.
"""
from .agreement import REFERENCE_ROUTES, CheckRow, Report, verify

__all__ = ["REFERENCE_ROUTES", "CheckRow", "Report", "verify"]
