"""The accuracy contract on the projection routes that need it (bound by :mod:`setkit.routing`).

An answer p of the projection of y is accepted when its feasibility residual (the set's
``violation``: the largest violated defining constraint) is at most

    RTOL * max(||y||_inf, ||p||_inf, s),    RTOL = 1e-7, s = max(1, data scale)

(the tolerance ``details=True`` records use). Rows above it are retried on the next routes of
the plan (the generic backends that serve the set, by priority) and kept only when the retry
meets the same bound; otherwise ``SolveError`` says what was asked, the magnitude of the input,
the residual reached and the allowed one. ``status="solved"`` with a residual above the
tolerance therefore cannot come out of a checked route.

Which routes are checked (always on): the native kernels of families declaring the trait
``"iterative_projection"`` (flow, transport, birkhoff: dual Newton, whose violation is a largest
node-balance or bound error, a distance-like residual; hull declares it too, but its violation is
not defined without the weights, so its answers, convex combinations of the points by
construction, are certified by Wolfe's gap instead). Their solves cost milliseconds, so the O(n)
check is cheap beside them. Combinator strategies are not wrapped: they measure their own
residual (as a distance) and gap per row and send unsettled rows to the generic backends; the
raw violation of their parts (unnormalized constraint rows) would misjudge correct answers. The exact finite kernels (simplex,
budget, box, balls, permutahedron, ...) are not checked on every call: the check costs 50% to
400% of their microsecond single-point calls (measured, see benchmarks/README.md); their range
is stated in their docstrings and tested at every magnitude (tests/test_kernel_magnitudes.py),
and ``details=True`` measures their residual.
"""
from __future__ import annotations

import warnings

import numpy as np

from .errors import AccuracyWarning, SolveError, TimeLimitError

__all__ = ["RTOL", "CHECKED_TRAIT", "needs_check", "checked_projection"]

RTOL = 1e-7
CHECKED_TRAIT = "iterative_projection"


def needs_check(node, op: str, category: str) -> bool:
    """True for the projection routes the contract checks on every call (see the module doc)."""
    if op != "project":
        return False
    return category == "native" and node.has_trait(CHECKED_TRAIT)


def _allowed(X, P, scale):
    return RTOL * np.maximum(np.maximum(np.abs(X).max(axis=1, initial=0.0), np.abs(P).max(axis=1, initial=0.0)),
                             scale)


def checked_projection(call, node, violation, retries, provider):
    """Wrap ``call(X) -> (P, info)`` so that every row meets the contract or is retried or refused.

    ``violation(P) -> (b,)`` is the set's residual (NaN rows are not judged); ``retries`` is a list
    of ``(name, project)`` with ``project(X) -> (P, info)`` tried in order on failing rows.
    """
    scale = max(1.0, float(node.scale()))

    def run(X):
        P, info = call(X)
        b = X.shape[0]
        if b == 0:
            return P, info
        P = np.asarray(P, dtype=float)
        v = np.asarray(violation(P), dtype=float).reshape(b)
        allowed = _allowed(X, P, scale)
        finite = np.isfinite(P).all(axis=1)
        bad = np.flatnonzero(~finite | (v > allowed))
        if bad.size == 0:
            return P, info
        P = P.copy()
        notes = list(info.get("backend_status") or ["exact"] * b) if isinstance(info, dict) else ["exact"] * b
        status = list(info.get("status") or ["solved"] * b) if isinstance(info, dict) else ["solved"] * b
        for i in bad:
            first = (f"{provider} answer violates the constraints by {float(v[i]):.3g}, above the allowed "
                     f"{float(allowed[i]):.3g}")
            errors = []
            for name, project in retries:
                try:
                    out = project(X[i:i + 1])
                    Q = out[0] if isinstance(out, tuple) else out
                except TimeLimitError:
                    raise
                except SolveError as exc:
                    errors.append(f"{name}: {exc}")
                    continue
                Q = np.asarray(Q, dtype=float)
                w = float(np.asarray(violation(Q), dtype=float).reshape(1)[0])
                ok_q = _allowed(X[i:i + 1], Q, scale)[0]
                if np.isfinite(Q).all() and not (w > ok_q):
                    P[i] = Q[0]
                    notes[i] = f"{first}; answered by {name}"
                    status[i] = "solved"
                    break
                errors.append(f"{name}: residual {w:.3g} above {ok_q:.3g}")
            else:
                mag = float(np.abs(X[i]).max(initial=0.0))
                tried = f" Retried on {', '.join(n for n, _ in retries)}: {' | '.join(errors)}." if retries else \
                    " No other route serves this projection."
                raise SolveError(
                    f"project on {node.label}: the {first} for batch row {int(i)} (input magnitude {mag:.3g}, data "
                    f"scale {scale:.3g}; the best residual reached is {float(v[i]) if np.isfinite(v[i]) else np.inf:.3g}, "
                    f"i.e. an achievable relative accuracy of about "
                    f"{float(v[i]) / max(mag, scale) if np.isfinite(v[i]) else np.inf:.1e}).{tried}",
                    status="inaccurate")
        if isinstance(info, dict):
            info = dict(info, backend_status=notes, status=status)
        return P, info
    return run


KL_RTOL = 1e-6     # accepted Bregman gap of a generic KL answer, relative to max(1, scale, |x|, |v|) sqrt(n)


def checked_kl_projection(call, node, lmo, provider, loose=False):
    """Wrap a generic (solver) route of ``project_kl``: ``call(T) -> (X, info)`` on log inputs.

    Every row's Bregman gap <g, x - lmo(g)>, g = log x - t (an upper bound on KL(x||y) - KL(x*||y),
    :func:`setkit.kernels.bregman.kl_certificate`), must be at most
    ``KL_RTOL * max(1, scale, ||x||_inf, ||lmo(g)||_inf) * sqrt(n)``; otherwise SolveError names the
    gap reached (found by benchmarks/fuzz_operators.py: the exponential-cone reference reported
    "optimal" on an intersection with a permutahedron at a gap of 1.3e-4). Costs one LMO per row,
    small beside a conic solve. With ``loose``: an AccuracyWarning and status "inaccurate" instead.
    """
    from .kernels.bregman import kl_gap_rows
    scale = max(1.0, float(node.scale()))

    def run(T):
        X, info = call(T)
        b = T.shape[0]
        if b == 0:
            return X, info
        X = np.asarray(X, dtype=float)
        gap, V = kl_gap_rows(T, X, lmo)          # the same gap as the certificate of details=True records
        allowed = KL_RTOL * np.maximum(np.maximum(np.abs(X).max(axis=1), np.abs(V).max(axis=1)), scale) \
            * max(1.0, float(np.sqrt(T.shape[1])))
        bad = np.flatnonzero(~np.isfinite(gap) | (gap > allowed))
        if bad.size:
            i = int(bad[0])
            msg = (f"project_kl on {node.label}: the {provider} answer for batch row {i} has a Bregman gap (an upper "
                   f"bound on its excess KL divergence) of {float(gap[i]):.3g}, above the accepted "
                   f"{float(allowed[i]):.3g} ({bad.size} of {b} rows). The generic exponential-cone solve is not "
                   f"accurate enough here; compile with loose=True to accept it with a warning.")
            if not loose:
                raise SolveError(msg, status="inaccurate")
            warnings.warn(msg, AccuracyWarning, stacklevel=4)
            if isinstance(info, dict):
                status = list(info.get("status") or ["solved"] * b)
                for j in bad:
                    status[j] = "inaccurate"
                info = dict(info, status=status)
        return X, info
    return run
