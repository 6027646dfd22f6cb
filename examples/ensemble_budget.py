"""An ensemble of weak linear predictors, recentered at the centroid and kept inside a budget set.

Scenario (invented): a community garden splits 10 volunteer hours of watering a day
across 5 plots, at most 4 hours per plot (a budget set). From the morning's weather
features z (3 numbers) the garden wants the allocation that its best gardener would
have chosen. Each weak predictor j is a random linear rule: it scores the plots by
W_j z and answers the best allocation for that score, h_j(z) = lmo(-W_j z), a vertex
of the set. The combined decision is recentered at the centroid c of the set,

    x(z) = c + sum_j alpha_j (h_j(z) - c),

so that with alpha = 0 it is the centroid, and the weights alpha (free, not summing to
one) are fit by gradient descent on the squared error plus the smoothed distance
penalty G * dist(x, K) (Moreau smoothing, width delta), built with
K.penalty(...).extend(f, grad_f). The penalty keeps the combined decisions (almost)
inside the set without constraining alpha.

Outputs are numerical answers within stated tolerances; allocations that affect people
should be reviewed by a responsible person under local rules.

Run:  python examples/ensemble_budget.py [--quick] [--seed N]
Uses only the public setkit API.
"""
from __future__ import annotations

import argparse

import numpy as np

import setkit

PLOTS, HOURS, CAP, FEATURES = 5, 10.0, 4.0, 3


def budget_set():
    try:
        return setkit.compile({"kind": "budget", "dim": PLOTS, "total": HOURS, "upper": CAP}), "budget"
    except setkit.DescriptionError:
        # without the budget family: the same set as a polyhedron or, failing that, the uncapped simplex
        try:
            A = np.vstack([np.eye(PLOTS), -np.eye(PLOTS)]).tolist()
            b = [CAP] * PLOTS + [0.0] * PLOTS
            return setkit.compile({"kind": "polyhedron", "A": A, "b": b, "C": [[1.0] * PLOTS],
                                   "d": [HOURS]}), "polyhedron"
        except setkit.DescriptionError:
            return setkit.compile({"kind": "simplex", "dim": PLOTS, "total": HOURS}), "simplex"


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="smaller data and fewer steps (for tests)")
    ap.add_argument("--seed", type=int, default=7)
    args = ap.parse_args(argv)
    rng = np.random.default_rng(args.seed)
    n_train, n_test, n_weak, steps = (150, 150, 20, 150) if args.quick else (600, 600, 40, 600)
    K, kind = budget_set()
    c = K.centroid(details=True)

    # the gardener's hidden rule: a projected linear response to the weather
    W_true = rng.normal(0.0, 1.5, (PLOTS, FEATURES))
    Z = rng.normal(0.0, 1.0, (n_train + n_test, FEATURES))
    Y = K.project(c.point + Z @ W_true.T)
    W_weak = rng.normal(0.0, 1.0, (n_weak, PLOTS, FEATURES))

    def weak_answers(Zs):
        # H[t, j] = lmo(-W_j z_t): vertex j's answer on day t
        scores = -np.einsum("jpf,tf->tjp", W_weak, Zs)
        return K.lmo(scores)

    H = weak_answers(Z) - c.point                             # recentered: (days, weak, plots)
    Htr, Hte = H[:n_train], H[n_train:]
    Ytr, Yte = Y[:n_train], Y[n_train:]

    E = np.eye(PLOTS)
    widths = K.support(E) + K.support(-E)
    G = float(np.sqrt(np.sum(widths ** 2))) + 1.0             # >= the squared loss's gradient norm near K
    delta = 0.25
    loss = K.penalty(G, "moreau", width=delta).extend(
        lambda X: 0.5 * np.sum((X - Ytr) ** 2, axis=-1), lambda X: X - Ytr, batched=True)

    def combine(Hs, alpha):
        return c.point + np.einsum("tjp,j->tp", Hs, alpha)

    # gradient descent on alpha with Nesterov momentum; step 1/L for the smoothness constant
    # L = (1 + G/delta) * ||A||^2 / n_train of the objective in alpha (A: alpha -> all training decisions)
    A = Htr.transpose(0, 2, 1).reshape(-1, n_weak)
    sigma2 = float(np.linalg.norm(A, 2) ** 2) / n_train

    def fit(objective, lipschitz):
        alpha = np.zeros(n_weak)
        prev = alpha.copy()
        lr = 1.0 / (lipschitz * sigma2)
        for k in range(steps):
            yk = alpha + (k / (k + 3.0)) * (alpha - prev)
            gx = objective.grad(combine(Htr, yk))                 # (days, plots)
            prev, alpha = alpha, yk - lr * np.einsum("tjp,tp->j", Htr, gx) / n_train
        return alpha

    plain = K.penalty(0.0).extend(lambda X: 0.5 * np.sum((X - Ytr) ** 2, axis=-1), lambda X: X - Ytr,
                                  batched=True)
    alpha_plain = fit(plain, 1.0)
    start = float(loss.value(combine(Htr, np.zeros(n_weak))).mean())
    alpha = fit(loss, 1.0 + G / delta)
    end = float(loss.value(combine(Htr, alpha)).mean())
    dist_plain = K.distance(combine(Hte, alpha_plain))

    Xte = combine(Hte, alpha)
    mse_centroid = float(np.mean(np.sum((c.point - Yte) ** 2, axis=1)))
    mse_ensemble = float(np.mean(np.sum((Xte - Yte) ** 2, axis=1)))
    dist = K.distance(Xte)
    mse_projected = float(np.mean(np.sum((K.project(Xte) - Yte) ** 2, axis=1)))
    print(f"set: {kind} ({PLOTS} plots, {HOURS:g} hours, at most {CAP:g} per plot where capped)")
    print(f"centroid ({c.method}): " + ", ".join(f"{v:.3f}" for v in c.point))
    print(f"weak predictors: {n_weak}, training days: {n_train}, test days: {n_test}")
    print(f"training loss with penalty: {start:.4f} -> {end:.4f}")
    print(f"test squared error, centroid only: {mse_centroid:.4f}")
    print(f"test squared error, ensemble: {mse_ensemble:.4f}")
    print(f"test squared error, ensemble projected onto the set: {mse_projected:.4f}")
    print(f"largest distance of a combined decision from the set: {dist.max():.4f} (width {delta})")
    print(f"share of decisions within {delta} of the set: {np.mean(dist <= delta):.3f}")
    print(f"without the penalty: largest distance {dist_plain.max():.4f}, share within {delta}: "
          f"{np.mean(dist_plain <= delta):.3f}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
