"""An online learner whose whole loop is compiled: projected gradient steps on a budget set.

Scenario (invented for this example): a community seed library splits a weekly stock of
seed packets over n garden plots; each plot gets between 0 and its cap, and the packets
handed out cost ``weights`` units of a shared budget. Each week a (simulated) loss vector
arrives and the learner takes a projected online gradient step
x_{t+1} = P_K(x_t - eta g_t) (Zinkevich's online gradient descent).

The loop runs twice: in Python calling ``K.project`` every round, and inside one ``@njit``
function calling ``K.jit_kernels().project`` (the set's native kernel with its data bound, no
Python between rounds). Both give bit-identical iterates; the script checks that and prints
the time per round of each. Outputs are numerical answers to be reviewed by the people who run
the library.

    python examples/jitted_learner.py [--quick]
"""
import argparse
import os
import time

import numpy as np
from numba import njit

import setkit


@njit(cache=False)
def learn(G, eta, x0, project):
    """Projected online gradient descent over the rows of G; returns every iterate and the total loss."""
    T = G.shape[0]
    X = np.empty_like(G)
    x = x0.copy()
    loss = 0.0
    for t in range(T):
        g = G[t]
        loss += np.dot(g, x)
        x = project(x - eta * g)
        X[t] = x
    return X, loss


def learn_python(K, G, eta, x0):
    X = np.empty_like(G)
    x = x0.copy()
    loss = 0.0
    for t in range(G.shape[0]):
        g = G[t]
        loss += float(g @ x)
        x = K.project(x - eta * g)
        X[t] = x
    return X, loss


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="fewer rounds (for CI)")
    a = ap.parse_args(argv)
    rng = np.random.default_rng(2026)
    n = 40
    T = 2_000 if a.quick else 50_000
    weights = rng.uniform(0.5, 2.0, n)
    caps = rng.uniform(1.0, 4.0, n)
    K = setkit.compile({"kind": "budget", "dim": n, "weights": weights, "upper": caps,
                        "total": 0.4 * float(weights @ caps), "about": "seed packets per plot"})
    G = rng.normal(size=(T, n)) + np.linspace(-1.0, 1.0, n)      # plots to the left do better on average
    x0 = K.project(np.zeros(n))
    eta = 1.0 / np.sqrt(T)
    project = K.jit_kernels().project
    learn(G[:2], eta, x0, project)                 # compile once (not timed)
    t0 = time.perf_counter()
    Xj, loss_j = learn(G, eta, x0, project)
    t_jit = time.perf_counter() - t0
    t0 = time.perf_counter()
    Xp, loss_p = learn_python(K, G, eta, x0)
    t_py = time.perf_counter() - t0
    same = bool(np.array_equal(Xj, Xp))
    print(f"{T} rounds on {K}: jitted loop {t_jit / T * 1e6:.2f} us/round, Python loop "
          f"{t_py / T * 1e6:.2f} us/round ({t_py / t_jit:.1f}x); identical iterates: {same}; "
          f"load average {os.getloadavg()[0]:.1f}")
    print(f"total loss {loss_j:.4f}; final allocation uses {float(weights @ Xj[-1]):.3f} of "
          f"{0.4 * float(weights @ caps):.3f} budget units; in the set: {bool(K.contains(Xj[-1]))}")
    if not same:
        raise SystemExit("the jitted and Python loops disagree")


if __name__ == "__main__":
    main()
