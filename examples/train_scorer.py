"""Training linear scorers by gradient descent through projections (PyTorch layer).

Two invented scenarios, one set each:

* Ranking (permutahedron). A neighbourhood tool-lending library shows twelve tools in its
  front window and orders them each week by how often they will be borrowed. Every tool
  has five weekly features (season fit, days since last repair, ...); the borrowing order
  of past weeks is known. A linear scorer s = X w is turned into a fractional ranking by
  the projection r = P(s) onto the permutahedron of the rank values (12, 11, ..., 1): a
  "soft rank" vector whose largest entry belongs to the best-scored tool, which is exactly
  the rank vector when the scores are well separated. Loss: mean squared difference
  between r and the observed rank vector. Gradients pass through the projection
  (``setkit.autodiff.torch_project``), whose Jacobian is the projector onto its active face
  (averages over tied blocks). The scorer starts from small random weights: at w = 0 every
  score ties, the projection is the centroid and its Jacobian (one block) sends every
  rank-loss gradient to zero.
* Sparse class probabilities (simplex). A community radio station sorts listener messages
  into five programme slots. A linear scorer gives five scores per message; their
  projection onto the probability simplex is a sparse probability vector (most slots get
  exactly 0). Loss: half the squared distance between it and the one-hot slot.

The held-out ranking quality is Spearman's rank correlation (``scipy.stats.spearmanr``)
between the ranking read off the learned soft ranks and the observed one. Outputs are
numerical answers within stated tolerances; where rankings or allocations steer decisions
affecting people, a responsible person should review them under local rules.

Run:  python3 examples/train_scorer.py [--quick] [--seed N] [--plot PATH]
"""
from __future__ import annotations

import argparse
import os
import sys

import numpy as np

import setkit

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
DEFAULT_PLOT = os.path.join(ROOT, "docs", "_static", "train_scorer_loss.png")
TOOLS = 12                  # tools in the window
TOOL_FEATURES = 5
SLOTS = 5                   # programme slots
MESSAGE_FEATURES = 8


def tool_weeks(rng, weeks):
    """Invented weekly features of the tools and the observed rank vectors (12 = most borrowed)."""
    hidden = np.array([1.5, -1.0, 0.8, 0.0, 2.0])           # what drives borrowing (unknown to the learner)
    X = rng.standard_normal((weeks, TOOLS, TOOL_FEATURES))
    demand = X @ hidden + 0.3 * rng.standard_normal((weeks, TOOLS))
    ranks = demand.argsort(axis=1).argsort(axis=1) + 1.0     # 1 = least borrowed, 12 = most
    return X, ranks


def messages(rng, count, centers):
    """Invented message features (with a constant column) and their programme slots."""
    slot = rng.integers(0, SLOTS, count)
    X = centers[slot] + 1.2 * rng.standard_normal((count, MESSAGE_FEATURES))
    return np.hstack([X, np.ones((count, 1))]), slot


def spearman_of_soft_ranks(R, ranks):
    """Mean over weeks of Spearman's rho between the order of the soft ranks and the observed ranks."""
    from scipy.stats import spearmanr
    return float(np.mean([spearmanr(r, o).statistic for r, o in zip(R, ranks)]))


def train_ranking(torch, torch_project, rng, steps, lr):
    K = setkit.compile({"kind": "permutahedron", "weights": list(np.arange(TOOLS, 0, -1.0))})
    X_train, R_train = tool_weeks(rng, 60)
    X_test, R_test = tool_weeks(rng, 20)
    Xt, Rt = torch.tensor(X_train), torch.tensor(R_train)
    Xv, Rv = torch.tensor(X_test), torch.tensor(R_test)
    w = torch.tensor(0.01 * rng.standard_normal(TOOL_FEATURES), requires_grad=True)

    def loss_of(X, R):
        return ((torch_project(K, X @ w) - R) ** 2).mean()
    with torch.no_grad():
        rho_start = spearman_of_soft_ranks(torch_project(K, Xv @ w).numpy(), R_test)
    train, test = [], []
    for _ in range(steps):
        loss = loss_of(Xt, Rt)
        w.grad = None
        loss.backward()
        with torch.no_grad():
            train.append(float(loss))
            test.append(float(loss_of(Xv, Rv)))        # both at the same weights, before the step
            w -= lr * w.grad
    with torch.no_grad():
        final_train = float(loss_of(Xt, Rt))
        final_test = float(loss_of(Xv, Rv))
        soft = torch_project(K, Xv @ w).numpy()
    inside = bool(K.contains(soft).all())
    return {"train": train, "test": test, "final_train": final_train, "final_test": final_test,
            "rho_start": rho_start, "rho": spearman_of_soft_ranks(soft, R_test), "inside": inside}


def train_slots(torch, torch_project, rng, steps, lr):
    K = setkit.compile({"kind": "simplex", "dim": SLOTS})
    centers = 1.5 * rng.standard_normal((SLOTS, MESSAGE_FEATURES))
    X_train, y_train = messages(rng, 400, centers)
    X_test, y_test = messages(rng, 200, centers)
    Xt, Xv = torch.tensor(X_train), torch.tensor(X_test)
    Yt = torch.nn.functional.one_hot(torch.tensor(y_train), SLOTS).double()
    Yv = torch.nn.functional.one_hot(torch.tensor(y_test), SLOTS).double()
    W = torch.zeros((MESSAGE_FEATURES + 1, SLOTS), dtype=torch.float64, requires_grad=True)

    def loss_of(X, Y):
        return 0.5 * ((torch_project(K, X @ W) - Y) ** 2).sum(dim=1).mean()
    train, test = [], []
    for _ in range(steps):
        loss = loss_of(Xt, Yt)
        W.grad = None
        loss.backward()
        with torch.no_grad():
            train.append(float(loss))
            test.append(float(loss_of(Xv, Yv)))
            W -= lr * W.grad
    with torch.no_grad():
        P = torch_project(K, Xv @ W).numpy()
        final_train, final_test = float(loss_of(Xt, Yt)), float(loss_of(Xv, Yv))
    return {"train": train, "test": test, "final_train": final_train, "final_test": final_test,
            "accuracy": float(np.mean(P.argmax(axis=1) == y_test)),
            "mean_support": float(np.mean((P > 0).sum(axis=1))),
            "inside": bool(K.contains(P).all())}


def plot(ranking, slots, path):
    try:
        import matplotlib
        matplotlib.use("Agg")
        import matplotlib.pyplot as plt
    except ImportError:
        print("loss plot: skipped (matplotlib is not installed)")
        return
    fig, axes = plt.subplots(1, 2, figsize=(9, 3.4))
    for ax, res, title, ylabel in ((axes[0], ranking, "window ranking (permutahedron)", "mean squared rank error"),
                                   (axes[1], slots, "programme slots (simplex)", "half squared error")):
        ax.plot(res["train"], label="training weeks" if res is ranking else "training messages")
        ax.plot(res["test"], label="held out", linestyle="--")
        ax.set_title(title, fontsize=10)
        ax.set_xlabel("gradient step")
        ax.set_ylabel(ylabel)
        ax.set_yscale("log")
        ax.legend(fontsize=8)
    fig.tight_layout()
    fig.savefig(path, dpi=110)
    plt.close(fig)
    print(f"loss plot: {path}")


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="fewer gradient steps (for tests)")
    ap.add_argument("--seed", type=int, default=7)
    ap.add_argument("--plot", default=None, help=f"where to write the loss curves (default {DEFAULT_PLOT}; "
                                                 "with --quick only when given)")
    args = ap.parse_args(argv)
    try:
        import torch

        from setkit.autodiff import torch_project
    except ImportError:
        print('this example needs PyTorch: pip install "setkit[torch]"', file=sys.stderr)
        return 2
    rng = np.random.default_rng(args.seed)
    steps = 60 if args.quick else 300
    ranking = train_ranking(torch, torch_project, rng, steps, lr=0.05)
    slots = train_slots(torch, torch_project, rng, steps, lr=0.5)
    print(f"ranking: gradient steps: {steps}")
    print(f"ranking: training loss: {ranking['train'][0]:.4f} -> {ranking['final_train']:.4f}")
    print(f"ranking: held-out loss: {ranking['test'][0]:.4f} -> {ranking['final_test']:.4f}")
    print(f"ranking: held-out Spearman rho before training: {ranking['rho_start']:.3f}")
    print(f"ranking: held-out Spearman rho after training: {ranking['rho']:.3f}")
    print(f"ranking: soft ranks inside the permutahedron: {'yes' if ranking['inside'] else 'no'}")
    print(f"slots: training loss: {slots['train'][0]:.4f} -> {slots['final_train']:.4f}")
    print(f"slots: held-out loss: {slots['test'][0]:.4f} -> {slots['final_test']:.4f}")
    print(f"slots: held-out accuracy: {slots['accuracy']:.3f}")
    print(f"slots: mean number of nonzero probabilities: {slots['mean_support']:.2f} of {SLOTS}")
    print(f"slots: probabilities inside the simplex: {'yes' if slots['inside'] else 'no'}")
    path = args.plot or (None if args.quick else DEFAULT_PLOT)
    if path:
        plot(ranking, slots, path)
    return 0


if __name__ == "__main__":
    sys.exit(main())
