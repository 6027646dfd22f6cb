"""Diagnostics of Markov-chain estimates: standard errors, effective sample size, R-hat.

The standard error of a chain mean is taken as the largest of three estimates, because each can
understate the error of slowly mixing chains: batch means, Geyer's initial-positive-sequence
autocorrelation time (Geyer, "Practical Markov chain Monte Carlo", Statistical Science, 1992) and
the spread of the chain means (chains start dispersed). R-hat is the potential scale reduction
factor of Gelman and Rubin ("Inference from iterative simulation using multiple sequences",
Statistical Science, 1992); paper titles from memory.
"""
from __future__ import annotations

import math

import numpy as np

RHAT_WARN = 1.05      # estimates warn above this R-hat ...
ESS_WARN = 50.0       # ... or below this effective sample size


def _ips_tau(S):
    """Integrated autocorrelation time per coordinate of chains S (C, n, d): Geyer's initial positive
    sequence estimator on the chain-averaged autocovariance (centered at the pooled mean). O(C n log n d)."""
    C, n, d = S.shape
    Z = S - S.reshape(-1, d).mean(axis=0)
    L = 1 << int(math.ceil(math.log2(2 * n)))
    F = np.fft.rfft(Z, n=L, axis=1)
    acov = np.fft.irfft(F * np.conj(F), n=L, axis=1)[:, :n].mean(axis=0) / n     # (n, d)
    tau = np.ones(d)
    for j in range(d):
        g0 = acov[0, j]
        if g0 <= 0:
            continue
        rho = acov[:, j] / g0
        total = -1.0
        for k in range(0, n - 1, 2):
            pair = rho[k] + rho[k + 1]
            if pair <= 0:
                break
            total += 2.0 * pair
        tau[j] = max(total, 1.0 / (C * n))
    return tau


def chain_summary(S):
    """Mean, per-coordinate standard error, smallest effective sample size and largest R-hat of chains
    S (C, n, d).

    The standard error is the largest of three estimates, because each can understate the error of
    slowly mixing chains: batch means (5 batches per chain), the initial-positive-sequence
    autocorrelation time (Geyer, 1992) and the spread of the chain means (chains start dispersed).
    R-hat is the potential scale reduction of Gelman and Rubin (1992); values well above 1 mean the
    chains have not mixed.
    """
    C, n, d = S.shape
    flat = S.reshape(-1, d)
    mean = flat.mean(axis=0)
    if C * n < 2:
        return mean, np.full(d, np.nan), float("nan"), float("nan")
    var = flat.var(axis=0, ddof=1)
    B = max(1, min(n, 5))
    size = n // B
    bm = S[:, :B * size].reshape(C, B, size, d).mean(axis=2).reshape(C * B, d)
    se_b = bm.std(axis=0, ddof=1) / math.sqrt(C * B) if C * B > 1 else np.zeros(d)
    se_t = np.sqrt(var * _ips_tau(S) / (C * n)) if n > 1 else np.zeros(d)
    cm = S.mean(axis=1)
    se_c = cm.std(axis=0, ddof=1) / math.sqrt(C) if C > 1 else np.zeros(d)
    se = np.maximum(np.maximum(se_b, se_t), se_c)
    live = se > 1e-14 * max(1.0, float(np.abs(mean).max()))
    ess = float(np.min(var[live] / se[live] ** 2)) if live.any() else float(C * n)
    rhat = float("nan")
    if C > 1 and n > 1:
        W = S.var(axis=1, ddof=1).mean(axis=0)
        Bv = n * cm.var(axis=0, ddof=1)
        ok = W > 1e-300
        if ok.any():
            rhat = float(np.sqrt(((n - 1) / n * W[ok] + Bv[ok] / n) / W[ok]).max())
        else:
            rhat = 1.0
    return mean, se, min(ess, float(C * n)), rhat


def batch_means(S):
    """Mean, per-coordinate standard error and smallest effective sample size of chains S (see chain_summary)."""
    mean, se, ess, _ = chain_summary(S)
    return mean, se, ess


def mixing_warning(rhat: float, ess: float, kept: int) -> str:
    """Why chains with this R-hat and effective sample size (of ``kept`` states) should not be
    trusted, or "" when they pass (R-hat <= RHAT_WARN and ess >= ESS_WARN; a NaN R-hat fails).

    >>> mixing_warning(1.01, 900.0, 4000)
    ''
    >>> mixing_warning(1.3, 900.0, 4000).startswith("the hit-and-run chains mix slowly")
    True
    """
    if rhat <= RHAT_WARN and ess >= ESS_WARN:
        return ""
    return (f"the hit-and-run chains mix slowly (R-hat {rhat:.3f}, effective sample size {ess:.0f} of "
            f"{kept}); the standard error may be understated - pass a larger burn_in, thin or samples.")
