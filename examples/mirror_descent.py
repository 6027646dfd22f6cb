"""Online mirror descent (exponentiated gradient + KL projection) against projected gradient descent.

Scenario (invented): a night depot runs a fleet of six delivery drones and six charging pads,
and a community radio station orders eight programme segments of its morning show. Each
round (night or morning) the operator commits to a fractional decision, then sees a linear
loss with entries in [0, 1]:

* ranking: a point x of the permutahedron of the position weights (how much airtime the 1st,
  2nd, ... slot gets); the loss <c_t, x> has c_t[i] = the share of listeners who switched off
  during segment i that morning (a hidden mean per segment plus noise, clipped to [0, 1]);
* assignment: a doubly-stochastic 6 x 6 matrix X (drone i to pad j with weight X[i, j]); the
  loss <C_t, X> has C_t[i, j] = that night's charging delay of drone i on pad j (a hidden mean
  plus noise, clipped to [0, 1]).

Two learners play the same loss sequence from the same start:

* EG (online mirror descent with the entropy regularizer psi(x) = sum x log x - x):
  t = log x_t - eta * c_t, x_{t+1} = K.project(t, geometry="kl", log_input=True), the
  Bregman (KL) projection of exp(t) onto K, started at x_1 = argmin_K psi (the KL projection of
  the all-ones point).
* OGD (Euclidean projected gradient): x_{t+1} = K.project(x_t - eta * c_t) (Zinkevich 2003),
  started at the same x_1.

Theoretical step sizes (fixed horizon T, stated before the losses are seen):

* EG: every point of K has the same coordinate sum M (sum of the weights for the
  permutahedron, n for the n x n assignments), so psi is (1/M)-strongly convex in the l1 norm
  on K (Pinsker's inequality for measures of mass M). The mirror-descent bound (e.g.
  Shalev-Shwartz 2012, "Online Learning and Online Convex Optimization", the online mirror
  descent theorem; from memory) gives regret <= R^2/eta + eta M G_inf^2 T / 2 with
  R^2 = max_K psi - min_K psi (here psi is constant on the vertices) and G_inf = max |c_t|_inf;
  eta = sqrt(2 R^2 / (M G_inf^2 T)) gives the bound G_inf sqrt(2 R^2 M T).
* OGD: regret <= D^2/(2 eta) + eta G_2^2 T / 2 (Zinkevich 2003), with D the diameter of K
  (||w - reversed w|| for the permutahedron, by the rearrangement inequality; sqrt(2n) for
  the n x n permutation matrices) and G_2 = max ||c_t||_2; eta = D/(G_2 sqrt(T)) gives the
  bound D G_2 sqrt(T).

G_inf = 1 and G_2 = sqrt(dim) are the a-priori bounds from the loss range [0, 1]. Regret is
sum_t <c_t, x_t> - min_{u in K} <sum_t c_t, u> (one LMO call on the summed losses).

Outputs are numerical answers within stated tolerances; rankings and assignments that affect
people should be reviewed by a responsible person under local rules.

Run:  python examples/mirror_descent.py [--quick] [--seed N] [--out PNG | --no-plot]
Uses only the public setkit API (matplotlib for the plot).
"""
from __future__ import annotations

import argparse
import math
import os

import numpy as np

import setkit

SEGMENTS = ["news", "weather", "interview", "local music", "quiz", "traffic", "recipes", "garden tips"]
SLOT_WEIGHTS = [8.0, 6.0, 5.0, 4.0, 3.0, 2.0, 1.5, 1.0]     # airtime of the 1st, 2nd, ... slot (minutes)
DRONES = 6
DEFAULT_PNG = os.path.join(os.path.dirname(os.path.dirname(os.path.abspath(__file__))),
                           "docs", "_static", "mirror_regret.png")


def entropy(x):
    """psi(x) = sum x log x - x (0 log 0 = 0)."""
    x = np.asarray(x, dtype=float).ravel()
    pos = x > 0
    return float(np.sum(x[pos] * np.log(x[pos])) - x.sum())


def ranking_problem(rng, T):
    """Permutahedron of the slot weights, switch-off losses in [0, 1], its D and psi range."""
    K = setkit.compile({"kind": "permutahedron", "weights": SLOT_WEIGHTS})
    n = K.dim
    mean = rng.uniform(0.15, 0.6, n)                              # hidden switch-off rate per segment
    C = np.clip(mean + rng.normal(0.0, 0.25, (T, n)), 0.0, 1.0)
    w = np.sort(np.asarray(SLOT_WEIGHTS))
    D = float(np.linalg.norm(w - w[::-1]))                       # largest ||P w - Q w|| (rearrangement)
    return K, C, D, entropy(w), float(w.sum())                   # psi is the same at every vertex


def assignment_problem(rng, T):
    """Birkhoff polytope of DRONES x DRONES, charging-delay losses in [0, 1], D and psi at vertices."""
    n = DRONES
    K = setkit.compile({"kind": "birkhoff", "n": n})
    mean = rng.uniform(0.1, 0.7, (n, n))                          # hidden delay of drone i on pad j
    C = np.clip(mean[None] + rng.normal(0.0, 0.25, (T, n, n)), 0.0, 1.0)
    return K, C, math.sqrt(2.0 * n), entropy(np.eye(n)), float(n)


def play(K, C, D, psi_vertex, mass):
    """Run EG + KL projection and OGD on the losses C (T, *K.shape); cumulative regret curves."""
    T = C.shape[0]
    dim = K.dim
    x1 = K.project(np.zeros(K.shape), geometry="kl", log_input=True)   # argmin_K psi
    R2 = psi_vertex - entropy(x1)
    G_inf, G_2 = 1.0, math.sqrt(dim)
    eta_eg = math.sqrt(2.0 * R2 / (mass * G_inf ** 2 * T))
    eta_ogd = D / (G_2 * math.sqrt(T))
    x_eg, x_ogd = x1.copy(), x1.copy()
    loss_eg, loss_ogd = np.empty(T), np.empty(T)
    worst_violation = 0.0
    tiny = np.finfo(float).tiny
    for t in range(T):
        c = C[t]
        loss_eg[t] = float(np.sum(c * x_eg))
        loss_ogd[t] = float(np.sum(c * x_ogd))
        x_eg = K.project(np.log(np.maximum(x_eg, tiny)) - eta_eg * c, geometry="kl", log_input=True)
        x_ogd = K.project(x_ogd - eta_ogd * c)
        worst_violation = max(worst_violation, float(K.violation(x_eg)), float(K.violation(x_ogd)))
    cum = np.cumsum(C.reshape(T, -1), axis=0)
    best = np.array([float(K.support(-cum[s].reshape(K.shape))) for s in range(T)])   # -min_u <cum, u>
    regret_eg = np.cumsum(loss_eg) + best
    regret_ogd = np.cumsum(loss_ogd) + best
    rounds = np.arange(1, T + 1)
    # the fixed-step bounds after s rounds: R^2/eta + eta M G_inf^2 s / 2 and D^2/(2 eta) + eta G_2^2 s / 2
    curve_eg = R2 / eta_eg + eta_eg * mass * G_inf ** 2 * rounds / 2.0
    curve_ogd = D ** 2 / (2.0 * eta_ogd) + eta_ogd * G_2 ** 2 * rounds / 2.0
    return dict(regret_eg=regret_eg, regret_ogd=regret_ogd, eta_eg=eta_eg, eta_ogd=eta_ogd,
                bound_eg=G_inf * math.sqrt(2.0 * R2 * mass * T), bound_ogd=D * G_2 * math.sqrt(T),
                curve_eg=curve_eg, curve_ogd=curve_ogd,
                final_eg=x_eg, final_ogd=x_ogd, violation=worst_violation, T=T)


def plot(results, path):
    import matplotlib
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    fig, axes = plt.subplots(1, 2, figsize=(10, 3.8))
    for ax, (title, r) in zip(axes, results.items()):
        rounds = np.arange(1, r["T"] + 1)
        ax.plot(rounds, r["regret_eg"], label=f"EG + KL projection (eta={r['eta_eg']:.3g})", color="tab:blue")
        ax.plot(rounds, r["regret_ogd"], label=f"Euclidean OGD (eta={r['eta_ogd']:.3g})", color="tab:orange")
        ax.plot(rounds, r["curve_eg"], ":", color="tab:blue", lw=1, label="EG regret bound at that step size")
        ax.plot(rounds, r["curve_ogd"], ":", color="tab:orange", lw=1, label="OGD regret bound at that step size")
        ax.set_title(title)
        ax.set_xlabel("round")
        ax.set_ylabel("cumulative regret")
        ax.set_ylim(bottom=min(0.0, float(min(r["regret_eg"].min(), r["regret_ogd"].min()))))
        ax.legend(fontsize=7, loc="upper left")
    fig.suptitle("Online learning on invented data: mirror descent vs projected gradient (setkit)", fontsize=10)
    fig.tight_layout()
    os.makedirs(os.path.dirname(os.path.abspath(path)), exist_ok=True)
    fig.savefig(path, dpi=110)
    plt.close(fig)


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="few rounds (for tests)")
    ap.add_argument("--seed", type=int, default=13)
    ap.add_argument("--out", default=DEFAULT_PNG, help="PNG of the regret curves (default docs/_static/mirror_regret.png)")
    ap.add_argument("--no-plot", action="store_true", help="skip the plot")
    args = ap.parse_args(argv)
    rng = np.random.default_rng(args.seed)
    T = 200 if args.quick else 3000
    results = {}
    for title, make in (("ranking: permutahedron of 8 slot weights", ranking_problem),
                        ("assignment: 6 x 6 doubly-stochastic matrices", assignment_problem)):
        K, C, D, psi_vertex, mass = make(rng, T)
        r = play(K, C, D, psi_vertex, mass)
        results[title] = r
        print(title)
        print(f"  rounds: {T}")
        print(f"  EG step size eta: {r['eta_eg']:.6g}    OGD step size eta: {r['eta_ogd']:.6g}")
        print(f"  EG regret: {r['regret_eg'][-1]:.6g}    EG bound: {r['bound_eg']:.6g}")
        print(f"  OGD regret: {r['regret_ogd'][-1]:.6g}    OGD bound: {r['bound_ogd']:.6g}")
        print(f"  largest violation of a decision: {r['violation']:.3g}")
    kinds = list(results.values())
    if all(r["violation"] <= 1e-8 for r in kinds):
        print("all decisions inside the sets: yes")
    else:
        print("all decisions inside the sets: NO")
    rank = results["ranking: permutahedron of 8 slot weights"]["final_eg"]
    order = [SEGMENTS[i] for i in np.argsort(-rank, kind="stable")]
    print("EG final airtime order: " + ", ".join(order))
    if not args.no_plot:
        try:
            plot(results, args.out)
            print(f"regret plot written: {args.out}")
        except ImportError:
            print("matplotlib is not installed: no plot")
    return results


if __name__ == "__main__":
    main()
