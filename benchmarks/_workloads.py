"""Size-parametrized benchmark instances, one or more per registered kind.

A builder turns a size ``n`` (the number of coordinates of a point, unless the
workload says otherwise) and a seeded generator into a description dict that
``setkit.compile`` accepts. The runner (``benchmarks/run.py``) discovers kinds
through ``setkit.families.known_kinds()`` and looks them up here; a registered
kind without a builder shows up in the report as a row saying so.

To add a builder for a new family::

    @workload("mykind", "mykind, dim n", floors={"project": "sort"})
    def _mykind(n, rng):
        return {"kind": "mykind", "dim": n, ...}

Builders must be cheap (they run at every size, including 1e6) and seeded.
Instances that a focused benchmark script already builds are imported from it
(the flow polytope comes from ``bench_flow.make_instance``), so each is written once.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from typing import Callable

import numpy as np

VECTOR_SIZES = (100, 1_000, 10_000, 100_000, 1_000_000)
QUICK_SIZES = (24,)

# floor names: "sort" (np.sort of the data), "sort+isotonic" (np.sort then
# scipy.optimize.isotonic_regression), "pass" (one np.sum over the data)
DEFAULT_FLOORS = {"project": "sort", "distance": "sort", "lmo": "pass", "support": "pass",
                  "contains": "pass"}


@dataclass(frozen=True)
class Workload:
    kind: str
    label: str
    build: Callable
    sizes_full: tuple = VECTOR_SIZES
    sizes_quick: tuple = QUICK_SIZES
    floors: dict = field(default_factory=dict)
    batch: int = 1          # points per call
    size_name: str = "n"    # what the size counts (coordinates unless said otherwise)
    needs: tuple = ()       # other kinds the instance is built from

    def floor(self, op: str) -> str:
        return {**DEFAULT_FLOORS, **self.floors}.get(op, "pass")


WORKLOADS: dict[str, list] = {}


def workload(kind, label, **kw):
    """Decorator: register ``fn(n, rng) -> description`` as a workload of ``kind``."""
    def deco(fn):
        WORKLOADS.setdefault(kind, []).append(Workload(kind=kind, label=label, build=fn, **kw))
        return fn
    return deco


def workloads_for(kind: str) -> list:
    return list(WORKLOADS.get(kind, ()))


# ---------------------------------------------------------------------------------------------
# vector families
# ---------------------------------------------------------------------------------------------
@workload("box", "box [-1, 2]^n", floors={"project": "pass", "distance": "pass"})
def box(n, rng):
    lo = -rng.uniform(0.5, 1.5, n)
    return {"kind": "box", "dim": n, "lower": lo, "upper": lo + rng.uniform(0.5, 3.0, n)}


@workload("simplex", "simplex, dim n")
def simplex(n, rng):
    return {"kind": "simplex", "dim": n, "total": 1.0}


@workload("budget", "capped weighted budget, dim n")
def budget(n, rng):
    upper = rng.uniform(0.5, 2.0, n)
    w = rng.uniform(0.5, 2.0, n)
    return {"kind": "budget", "dim": n, "total": 0.3 * float(w @ upper), "lower": 0.0, "upper": upper,
            "weights": w, "mode": "equal"}


@workload("ball", "l2 ball, dim n", floors={"project": "pass", "distance": "pass"})
def ball2(n, rng):
    return {"kind": "ball", "dim": n, "norm": 2, "radius": 1.5, "center": rng.standard_normal(n) * 0.1}


@workload("ball", "l1 ball, dim n")
def ball1(n, rng):
    return {"kind": "ball", "dim": n, "norm": 1, "radius": 2.0}


@workload("permutahedron", "permutahedron of n weights", floors={"project": "sort+isotonic",
                                                                 "distance": "sort+isotonic",
                                                                 "lmo": "sort", "support": "sort",
                                                                 "contains": "sort"})
def permutahedron(n, rng):
    return {"kind": "permutahedron", "weights": np.round(rng.uniform(0.0, 10.0, n), 3)}


# ---------------------------------------------------------------------------------------------
# matrix and graph families (the size is the number of coordinates of a point)
# ---------------------------------------------------------------------------------------------
MATRIX_SIZES = (100, 1_024, 10_000, 102_400, 1_000_000)


def _side(n):
    return max(2, int(round(np.sqrt(n))))


@workload("transport", "transport m x m, n = m^2 coordinates", sizes_full=MATRIX_SIZES, sizes_quick=(25,))
def transport(n, rng):
    m = _side(n)
    rows = rng.uniform(1.0, 3.0, m)
    cols = rng.uniform(1.0, 3.0, m)
    cols *= rows.sum() / cols.sum()
    return {"kind": "transport", "rows": rows, "cols": cols}


@workload("birkhoff", "birkhoff m x m, n = m^2 coordinates", sizes_full=MATRIX_SIZES, sizes_quick=(25,))
def birkhoff(n, rng):
    return {"kind": "birkhoff", "n": _side(n)}


@workload("flow", "flow polytope, n edges on n/4 nodes", sizes_full=(100, 1_000, 10_000, 100_000),
          sizes_quick=(24,))
def flow(n, rng):
    # the instance of benchmarks/bench_flow.py: a random connected digraph with lower bounds,
    # capacities and the supplies of a random feasible flow
    from .bench_flow import make_instance
    return make_instance(max(3, n // 4), n, rng)[0]


@workload("polyhedron", "polyhedron in R^n, n/10 random halfspaces and a box",
          sizes_full=(100, 1_000, 10_000, 100_000), sizes_quick=(24,))
def polyhedron(n, rng):
    import scipy.sparse as sp
    m = max(3, n // 10)
    A = sp.random(m, n, density=min(1.0, 10.0 / n), random_state=np.random.RandomState(int(rng.integers(1 << 30))),
                  format="csr")
    A = A + sp.csr_matrix((np.ones(m), (np.arange(m), rng.integers(0, n, m))), shape=(m, n))
    x0 = rng.uniform(-0.5, 0.5, n)
    b = A @ x0 + rng.uniform(0.1, 1.0, m)
    return {"kind": "polyhedron", "A": A.toarray() if n <= 2_000 else A, "b": b, "lower": -1.0, "upper": 1.0}


@workload("hull", "hull of n/10 points in R^10", sizes_full=(100, 1_000, 10_000, 100_000),
          sizes_quick=(40,), floors={"project": "pass", "distance": "pass"})
def hull(n, rng):
    d = 10
    k = max(2, n // d)
    return {"kind": "hull", "points": rng.standard_normal((k, d))}


# ---------------------------------------------------------------------------------------------
# combinators
# ---------------------------------------------------------------------------------------------
@workload("intersection", "permutahedron(n) with 3 halfspaces", sizes_full=(100, 1_000, 10_000),
          sizes_quick=(12,), needs=("permutahedron", "polyhedron"), floors={"project": "sort+isotonic", "distance": "sort+isotonic"})
def intersection(n, rng):
    # the instance of benchmarks/bench_combinators.py: halfspaces through points near the centre
    from .bench_combinators import cut_permutahedron
    return cut_permutahedron(n, rng)


@workload("product", "product of n/50 simplices of dim 50", sizes_full=(100, 1_000, 10_000, 100_000),
          sizes_quick=(100,))
def product(n, rng):
    k = max(1, n // 50)
    return {"kind": "product", "of": [{"kind": "simplex", "dim": 50}], "copies": k}


@workload("affine", "affine image 2 x + 1 of a simplex, dim n")
def affine(n, rng):
    return {"kind": "affine", "set": {"kind": "simplex", "dim": n}, "scale": 2.0, "shift": 1.0}


# ---------------------------------------------------------------------------------------------
# spectral sets (the size is the number of coordinates m^2 of an m x m matrix) and structured
# norm balls (the size is the dimension)
# ---------------------------------------------------------------------------------------------
SPECTRAL_SIZES = (100, 1_024, 10_000, 102_400)


@workload("nuclear_ball", "nuclear-norm ball of m x m matrices, n = m^2", sizes_full=SPECTRAL_SIZES,
          sizes_quick=(25,))
def nuclear_ball(n, rng):
    m = _side(n)
    return {"kind": "nuclear_ball", "rows": m, "cols": m, "radius": float(m)}


@workload("spectral_ball", "operator-norm ball of m x m matrices, n = m^2", sizes_full=SPECTRAL_SIZES,
          sizes_quick=(25,))
def spectral_ball(n, rng):
    m = _side(n)
    return {"kind": "spectral_ball", "rows": m, "cols": m, "radius": 1.0}


@workload("spectraplex", "spectraplex of m x m matrices (trace 1), n = m^2", sizes_full=SPECTRAL_SIZES,
          sizes_quick=(25,))
def spectraplex(n, rng):
    return {"kind": "spectraplex", "n": _side(n), "trace": 1.0}


@workload("group_ball", "group l1/l2 ball, groups of 3, dim n")
def group_ball(n, rng):
    return {"kind": "group_ball", "dim": n, "group_size": 3, "radius": 2.0}


@workload("owl_ball", "ordered weighted l1 ball, 4 weight levels, dim n", floors={"project": "sort+isotonic",
                                                                                   "distance": "sort+isotonic"})
def owl_ball(n, rng):
    # four levels (OSCAR-like steps): the reference's constraint has 4 sum_largest terms, not n
    return {"kind": "owl_ball", "weights": np.repeat([2.0, 1.5, 1.0, 0.5], -(-n // 4))[:n], "radius": 1.0}


@workload("ksupport_ball", "k-support ball, k = n/8, dim n")
def ksupport_ball(n, rng):
    return {"kind": "ksupport_ball", "dim": n, "k": max(1, n // 8), "radius": 1.0}


@workload("elastic_ball", "elastic-net ball, mix 0.5, dim n", floors={"project": "pass", "distance": "pass"})
def elastic_ball(n, rng):
    return {"kind": "elastic_ball", "dim": n, "radius": 1.0, "mix": 0.5}
