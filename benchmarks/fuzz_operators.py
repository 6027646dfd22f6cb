"""Seeded operator fuzzer: every kind, every operator, magnitudes 1e-300..1e300, degenerate inputs.

Sets come from the catalog, from every registered family's ``examples()`` and
``random_example(rng)``, from data rescaled by powers of ten, and from combinators built on them
(intersection, product, affine image, ``K.centered()``). Inputs: Gaussian points at magnitudes
1e-300..1e300 around a point of the set and around the origin, rows whose entries mix exponents,
points of the set, vertices returned by the LMO, midpoints of two vertices (points on faces), ties,
repeated rows, empty batches and batches mixing tiny and huge rows.

Every answer is checked by conditions that do not trust the operator that produced it:

* feasibility by the set's own constraints, evaluated here: the linear form (rows normalized to
  unit length) where the set has one without auxiliaries, closed forms for norm balls, the
  permutahedron (majorization), spectral sets (singular values / eigenvalues), and the cvxpy
  constraints evaluated numerically otherwise; intersections check every part, products split
  the coordinates, scaled/shifted images undo the map;
* optimality of a projection p of y by the first-order condition (the Frank-Wolfe gap)
  max_{v in K} <y - p, v> - <y - p, p> <= tol, the max taken by the LMO; of an LMO answer l by
  <c, l> <= <c, v> for sampled points v of K and <c, l> = -support(-c) = support-consistency;
* batch == per-point, idempotence project(project(y)) == project(y), distance == ||y - project(y)||,
  contains agreeing with distance <= tol, violation 0 on points of the set;
* KL projections (sets in the nonnegative orthant) by the Bregman first-order condition
  <log x - log y, x - lmo(log x - log y)> <= tol; Jacobian products by adjointness
  <u, J v> = <J^T u, v> and 0 <= <v, J v> <= |v|^2 (the Jacobian of a Euclidean projection is
  symmetric with eigenvalues in [0, 1] where it exists).

Outcome of every operator call: ``correct``; ``setkit error`` (a SetkitError, counted by message
kind); ``foreign`` (any other exception: a defect); ``silent wrong`` (an answer outside the
tolerance with no error and no "inaccurate" status: a defect); ``timeout`` (the call ran past the
per-call limit; reported, not a verdict).

The tolerance a defect is judged by is the one the set states (as in ``K.project(y, details=True)``):
tau = 1e-7 * max(1, |y|_inf, |answer|_inf, scale of the data), times a small slack for rounding in the
checks. Answers within tau but farther than 1e-7 * max(|answer|_inf, scale) (a tolerance relative to
the answer rather than the input) are counted apart as ``loose`` in the table; they are not defects.

    python3 -m benchmarks.fuzz_operators --calls 100000 --seed 1      # the reliability run
    python3 -m benchmarks.fuzz_operators --calls 2000 --seed 3 -v     # a quick look
"""
from __future__ import annotations

import argparse
import collections
import math
import pickle
import re
import signal
import sys
import time
import traceback
import warnings
from pathlib import Path

import numpy as np

import setkit
from setkit.errors import SetkitError

CATALOG = Path(__file__).resolve().parent.parent / "catalog"
RTOL = 1e-7          # the stated tolerance factor (DecisionSet._default_tol, the Details guard)
SLACK = 10.0         # rounding slack of the checks themselves
TRACE = None        # --trace FILE: each call's set, operator and arguments, written before the call
BANDS = ("1e-300", "1e-150", "1e-12", "1e-3", "1", "1e3", "1e8", "1e16", "1e100", "1e300", "mixed", "degenerate")
OPERATORS = ("project", "distance", "lmo", "support", "contains", "violation", "project_kl",
             "project_jvp", "project_vjp", "batch", "empty")


class CallTimeout(Exception):
    """A fuzzed call ran past the per-call limit (not a setkit error: recorded as a timeout)."""


def _caused_by_timeout(e):
    seen = 0
    while e is not None and seen < 10:
        if isinstance(e, CallTimeout):
            return True
        e = e.__cause__ or e.__context__
        seen += 1
    return False


def _on_alarm(signum, frame):
    raise CallTimeout()


def _warm(K):
    """One call of each batch operator on a point and on a batch of two, under one generous alarm for
    the whole set: with an empty numba cache, kernels compile on these calls instead of under a
    per-call alarm. An
    alarm raised inside numba's compiler leaves a half-built library behind, and the next call of that
    kernel raises numba's RuntimeError "no compiled object yet" (seen once, seed 5 with an empty cache:
    a defect of the harness, not of setkit)."""
    y = np.full(K.shape, 0.5)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for arg in (y, np.stack([y, -y])):
            for op in ("project", "distance", "lmo", "support", "contains", "violation"):
                try:
                    getattr(K, op)(arg)
                except CallTimeout:
                    raise
                except Exception:                       # noqa: BLE001, S110 - only compiling matters here
                    pass
            try:
                K.project(np.abs(arg) + 0.5, geometry="kl")
            except CallTimeout:
                raise
            except Exception:                           # noqa: BLE001, S110
                pass


# ----------------------------------------------------------------------------------------------------
# the pool of sets
# ----------------------------------------------------------------------------------------------------

def _scaled_specs():
    """Family data at extreme magnitudes (the answer itself tiny or huge)."""
    out = []
    for a in (1e-12, 1e-6, 1e6, 1e12):
        out += [{"kind": "simplex", "dim": 4, "total": a},
                {"kind": "simplex", "dim": 3, "total": a, "mode": "at_most"},
                {"kind": "box", "dim": 3, "lower": -a, "upper": 2 * a},
                {"kind": "ball", "dim": 3, "norm": 2, "radius": a, "center": [a, 0.0, -a]},
                {"kind": "ball", "dim": 4, "norm": 1, "radius": a},
                {"kind": "ball", "dim": 3, "norm": "inf", "radius": a},
                {"kind": "budget", "dim": 4, "total": a, "upper": 0.6 * a},
                {"kind": "permutahedron", "weights": [3 * a, 2 * a, a, 0.0]},
                {"kind": "birkhoff", "n": 3} if a == 1e6 else {"kind": "transport", "rows": [a, a, 2 * a],
                                                               "cols": [2 * a, 2 * a]}]
    return out


def _combinators(specs, rng, count):
    """Random intersections, products and affine images of small vector specs."""
    if count <= 0:
        return []
    by_dim = collections.defaultdict(list)
    for s in specs:
        try:
            K = setkit.compile(s)
        except SetkitError:
            continue
        if len(K.shape) == 1 and K.dim <= 12:
            by_dim[K.dim].append(s)
    dims = [d for d, v in by_dim.items() if len(v) >= 2]
    out = []
    for _ in range(count):
        r = rng.integers(3)
        d = int(rng.choice(dims))
        a, b = (by_dim[d][int(i)] for i in rng.choice(len(by_dim[d]), 2, replace=False))
        if r == 0:
            out.append({"kind": "intersection", "of": [a, b]})
        elif r == 1:
            out.append({"kind": "product", "of": [a, b]})
        else:
            sc = float(rng.choice([-3.0, 0.5, 2.0, 1e-4, 1e4]))
            out.append({"kind": "affine", "set": a, "scale": sc, "shift": rng.normal(size=d).round(3).tolist()})
    return out


def build_pool(seed: int, randoms_per_kind: int = 3, combos: int = 30):
    """(label, spec-or-path) pairs: catalog, examples, random examples, rescaled data, combinators."""
    from setkit.families import known_kinds, lookup
    rng = np.random.default_rng([seed, 11])
    pool = [(f"catalog/{p.name}", p) for p in sorted(CATALOG.glob("*.yaml"))]
    specs = []
    for kind in known_kinds():
        cls = lookup(kind)
        if not cls.__module__.startswith("setkit."):
            continue
        for i, s in enumerate(cls.examples() or []):
            s = dict(s)
            s.setdefault("kind", kind)
            specs.append((f"{kind}.examples[{i}]", s))
        for i in range(randoms_per_kind):
            s = cls.random_example(rng)
            if s is not None:
                s = dict(s)
                s.setdefault("kind", kind)
                specs.append((f"{kind}.random[{seed}:{i}]", s))
    specs += [(f"{s['kind']}.scaled[{i}]", s) for i, s in enumerate(_scaled_specs())]
    plain = [s for _, s in specs if s["kind"] not in ("intersection", "product", "affine")]
    specs += [(f"{s['kind']}.combined[{seed}:{i}]", s) for i, s in enumerate(_combinators(plain, rng, combos))]
    pool += specs
    pool += [("centered:simplex", ("centered", {"kind": "simplex", "dim": 4})),
             ("centered:box", ("centered", {"kind": "box", "dim": 3, "lower": [0, -1, 2], "upper": [1, 5, 2.5]})),
             ("centered:permutahedron", ("centered", {"kind": "permutahedron", "weights": [4.0, 1.0, 0.5]}))]
    return pool


def compile_entry(entry):
    if isinstance(entry, Path):
        return setkit.load(entry)
    if isinstance(entry, tuple) and entry[0] == "centered":
        return setkit.compile(entry[1]).centered("volume")
    return setkit.compile(entry)


# ----------------------------------------------------------------------------------------------------
# independent feasibility: the set's own constraints, evaluated here
# ----------------------------------------------------------------------------------------------------

def _scaled_norm(v, ord=2, axis=None):
    """A norm that does not overflow at 1e300 (scale by the largest entry first)."""
    v = np.asarray(v, dtype=float)
    m = np.abs(v).max(axis=axis, keepdims=axis is not None, initial=0.0)
    safe = np.where(m > 0, m, 1.0)
    n = np.linalg.norm(v / safe, ord=ord, axis=axis)
    return n * (m.squeeze(axis) if axis is not None else m)


def _form_checker(lf):
    """Residual by a linear form without auxiliaries: each row scaled to unit length (a distance)."""
    import scipy.sparse as sp
    blocks = []
    for A, b, eq in ((lf.A_eq, lf.b_eq, True), (lf.A_ub, lf.b_ub, False)):
        if A.shape[0]:
            A = sp.csr_matrix(A)
            nrm = np.sqrt(np.asarray(A.multiply(A).sum(axis=1)).ravel())
            nrm = np.where(nrm > 0, nrm, 1.0)
            blocks.append((sp.diags(1 / nrm) @ A, b / nrm, eq))
    lo, hi = lf.lo, lf.hi

    def check(P):
        m = np.abs(P).max(axis=1, initial=0.0)
        s = np.where(m > 1e150, m, 1.0)[:, None]       # rows near overflow: check a scaled copy
        v = np.zeros(P.shape[0])
        Q = P / s
        for A, b, eq in blocks:
            r = (A @ Q.T).T - b[None, :] / s
            r = np.abs(r) if eq else np.maximum(r, 0.0)
            v = np.maximum(v, r.max(axis=1, initial=0.0) * s[:, 0])
        v = np.maximum(v, np.maximum(lo[None, :] - P, 0).max(axis=1, initial=0.0))
        v = np.maximum(v, np.maximum(P - hi[None, :], 0).max(axis=1, initial=0.0))
        return v
    return check


def _ball_checker(node):
    order = {1: 1, 2: 2}.get(node.norm, np.inf) if not isinstance(node.norm, str) else np.inf
    c = np.zeros(node.dim) if node.center is None else np.asarray(node.center, dtype=float).reshape(-1)
    r = float(node.radius)

    def check(P):
        D = P - c[None, :]
        n = _scaled_norm(D, ord=order, axis=1)
        scale = {1: 1.0, 2: 1.0}.get(order, 1.0) if order != 1 else 1 / math.sqrt(max(1, node.dim))
        return np.maximum(n - r, 0.0) * scale
    return check


def _permutahedron_checker(node):
    w = np.sort(np.asarray(node.weights, dtype=float).reshape(-1))[::-1]
    cw = np.cumsum(w)

    def check(P):
        X = -np.sort(-P, axis=1)
        cx = np.cumsum(X, axis=1)
        v = np.maximum(cx[:, :-1] - cw[None, :-1], 0.0).max(axis=1, initial=0.0)
        return np.maximum(v, np.abs(cx[:, -1] - cw[-1])) / math.sqrt(P.shape[1])
    return check


def _spectral_checker(node, kind):
    m, n = node.shape if len(node.shape) == 2 else (node.n, node.n)

    def check(P):
        out = np.zeros(P.shape[0])
        for i, row in enumerate(P):
            M = row.reshape(m, n)
            if kind == "spectraplex":
                S = (M + M.T) / 2
                ev = np.linalg.eigvalsh(S)
                t = float(np.trace(M))
                asym = np.abs(M - M.T).max()
                v = max(-ev.min(), asym)
                v = max(v, abs(t - node.trace) if node.mode == "equal" else max(t - node.trace, 0.0))
            else:
                sv = np.linalg.svd(M, compute_uv=False)
                v = max(sv.sum() - node.radius, 0.0) if kind == "nuclear_ball" else max(sv.max(initial=0.0) - node.radius, 0.0)
            out[i] = v
        return out
    return check


def _cvxpy_checker(K):
    import cvxpy as cp
    x = cp.Variable(K.shape)
    cons = K.node.cvxpy_constraints(x)
    for c in cons:
        if any(v is not x for v in c.variables()):
            return None

    def check(P):
        out = np.zeros(P.shape[0])
        for i, row in enumerate(P):
            x.value = row.reshape(K.shape)
            out[i] = max((float(np.max(c.violation(), initial=0.0)) for c in cons), default=0.0)
        return out
    return check


def feasibility_checker(K):
    """(check(P) -> residual per row, source text), evaluated from the set's data, never its operators."""
    node = K.node
    kind = node.kind
    parts = K.parts
    if kind == "intersection":
        subs = [feasibility_checker(p) for p in parts]
        if all(s[0] is not None for s in subs):
            return (lambda P: np.max([s[0](P) for s in subs], axis=0)), "parts: " + ", ".join(s[1] for s in subs)
    if kind == "product":
        # parts are the distinct blocks; node.layout gives the block at each position
        layout = list(getattr(node, "layout", range(len(parts))))
        subs = [feasibility_checker(parts[j]) for j in layout]
        dims = [parts[j].dim for j in layout]
        if all(s[0] is not None for s in subs) and sum(dims) == K.dim:
            cuts = np.cumsum([0] + dims)

            def check(P):
                return np.max([s[0](P[:, a:b]) for s, a, b in zip(subs, cuts[:-1], cuts[1:])], axis=0)
            return check, "blocks: " + ", ".join(s[1] for s in subs)
    if kind == "affine" and node.matrix is None:
        sub, src = feasibility_checker(parts[0])
        if sub is not None:
            a = float(node.scale_factor)
            shift = np.zeros(K.dim) if node.shift is None else np.asarray(node.shift, dtype=float).reshape(-1)
            return (lambda P: sub((P - shift[None, :]) / a) * abs(a)), f"pre-image ({src})"
    if kind == "ball":
        return _ball_checker(node), "norm closed form"
    if kind == "permutahedron":
        return _permutahedron_checker(node), "majorization"
    if kind in ("nuclear_ball", "spectral_ball", "spectraplex"):
        return _spectral_checker(node, kind), "spectrum"
    lf = K.linear_form()
    if lf is not None and lf.n_aux == 0:
        return _form_checker(lf), "linear form"
    try:
        c = _cvxpy_checker(K)
    except Exception:                       # a family without cvxpy constraints we can evaluate
        c = None
    if c is not None:
        return c, "cvxpy constraints"
    return None, "none"


# ----------------------------------------------------------------------------------------------------
# inputs
# ----------------------------------------------------------------------------------------------------

BAND_SCALE = {"1e-300": 1e-300, "1e-150": 1e-150, "1e-12": 1e-12, "1e-3": 1e-3, "1": 1.0, "1e3": 1e3,
              "1e8": 1e8, "1e16": 1e16, "1e100": 1e100, "1e300": 1e300}


def make_inputs(band, K, anchors, rng, b):
    """A (b, dim) batch for a magnitude band; anchors are points of K (may be empty)."""
    d = K.dim
    if band == "mixed":
        e = rng.uniform(-300, 300, size=(b, d))
        Y = rng.normal(size=(b, d)) * 10.0 ** e
        if b >= 2:                                      # a batch mixing a tiny and a huge row
            Y[0] = rng.normal(size=d) * 1e-290
            Y[1] = rng.normal(size=d) * 1e290
        return Y
    if band == "degenerate":
        rows = []
        for _ in range(b):
            r = rng.integers(6)
            if r == 0 and anchors:                       # a point of the set (vertex or projection)
                rows.append(anchors[rng.integers(len(anchors))].copy())
            elif r == 1 and len(anchors) >= 2:           # a point on a face: midpoint of two points of K
                i, j = rng.choice(len(anchors), 2)
                rows.append(0.5 * (anchors[i] + anchors[j]))
            elif r == 2:                                 # ties
                rows.append(np.full(d, float(rng.choice([0.0, 1.0, -2.5, 1e-9]))))
            elif r == 3:                                 # ties in part of the coordinates
                v = rng.normal(size=d)
                v[: max(1, d // 2)] = v[0]
                rows.append(v)
            elif r == 4 and anchors:                     # a point just outside a point of the set
                rows.append(anchors[rng.integers(len(anchors))] + 1e-9 * rng.normal(size=d))
            else:
                rows.append(np.round(rng.normal(size=d)))
        Y = np.array(rows)
        if b >= 3:
            Y[-1] = Y[0]                                 # repeated rows
        return Y
    s = BAND_SCALE[band] * max(1.0, _data_scale(K)) if BAND_SCALE[band] >= 1 else BAND_SCALE[band]
    G = rng.normal(size=(b, d)) * s
    if anchors and rng.random() < 0.5:                   # around a point of the set
        G = G + anchors[rng.integers(len(anchors))][None, :]
    return G


def _data_scale(K):
    try:
        return float(K.node.scale())
    except Exception:
        return 1.0


# ----------------------------------------------------------------------------------------------------
# the fuzzing loop
# ----------------------------------------------------------------------------------------------------

def _message_kind(e):
    """A short key for a setkit error: its class and its message with numbers and quotes removed."""
    msg = str(e).split("\n")[0]
    msg = re.sub(r"'[^']*'|\"[^\"]*\"", "'.'", msg)
    msg = re.sub(r"[-+]?\d[\d.eE+-]*", "#", msg)
    msg = re.sub(r"\([^)]*\)", "", msg)
    words = msg.split(":")[-1].strip()[:70]
    return f"{type(e).__name__}: {words}"


class Tally:
    """Counters of calls by kind / operator / band / outcome, and the defects with reproducers."""

    def __init__(self):
        self.calls = collections.Counter()          # (kind, op, band) -> calls
        self.outcomes = collections.Counter()       # (kind, op, outcome) -> count
        self.by_band = collections.Counter()        # (band, outcome)
        self.errors = collections.Counter()         # message kind -> count
        self.loose = collections.Counter()          # (kind, op) -> count
        self.defects = []                           # dicts
        self.total = 0

    def record(self, kind, op, band, outcome, detail=None):
        self.total += 1
        self.calls[(kind, op, band)] += 1
        self.outcomes[(kind, op, outcome)] += 1
        self.by_band[(band, outcome)] += 1
        if outcome == "setkit error":
            self.errors[detail] += 1
        elif outcome in ("foreign", "silent wrong") and detail is not None:
            self.defects.append(detail)

    def count(self, outcome):
        return sum(v for (k, o, oc), v in self.outcomes.items() if oc == outcome)


class SetFuzzer:
    """Fuzz the operators of one compiled set, recording every call in a Tally."""

    def __init__(self, label, K, tally, rng, time_limit=20.0):
        self.label, self.K, self.tally, self.rng = label, K, tally, rng
        self.kind = K.kind
        self.time_limit = time_limit
        self.check, self.check_source = feasibility_checker(K)
        self.scale = max(1.0, _data_scale(K))
        self.answer_scale = _data_scale(K)
        self.anchors = []
        self.cost = 0.0
        self.orthant = self._in_orthant()
        self.has_lmo = K.routes()["lmo"].provider != "none"
        self.has_violation = K.routes()["violation"].provider != "none"

    def _in_orthant(self):
        try:
            v = self.K.node.orthant_violation()
            if v is NotImplemented and self.K.routes()["project_kl"].provider == "reference":
                v = self.K.workspace("reference").orthant_violation()       # one LP per coordinate
        except Exception:
            return False
        return v is None or v == ""

    # a call with its outcome classified -------------------------------------------------------
    def call(self, op, band, fn, *args, **kw):
        """(ok, value): ok False when the call raised (recorded here)."""
        use_alarm = hasattr(signal, "SIGALRM")
        if TRACE is not None:
            # a hard crash inside compiled code (a signal) leaves this file naming the call
            with open(TRACE, "wb") as f:
                pickle.dump({"set": self.label, "op": op, "band": band, "fn": getattr(fn, "__name__", repr(fn)),
                             "args": args, "kw": kw}, f)
        if use_alarm:
            signal.setitimer(signal.ITIMER_REAL, self.time_limit)
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                return True, fn(*args, **kw)
        except CallTimeout:
            self.tally.record(self.kind, op, band, "timeout")
            self.tally.errors[f"timeout after {self.time_limit:g} s"] += 1
            return False, None
        except SetkitError as e:
            self.tally.record(self.kind, op, band, "setkit error", _message_kind(e))
            return False, None
        except Exception as e:                                   # noqa: BLE001 - the point of the fuzzer
            if _caused_by_timeout(e):      # the alarm fired inside a compiled function (numba re-raises it as
                self.tally.record(self.kind, op, band, "timeout")      # SystemError with the timeout as context)
                self.tally.errors[f"timeout after {self.time_limit:g} s"] += 1
                return False, None
            self.tally.record(self.kind, op, band, "foreign", self._defect(op, band, args, f"{type(e).__name__}: {e}",
                                                                         traceback.format_exc(limit=4)))
            return False, None
        finally:
            if use_alarm:
                signal.setitimer(signal.ITIMER_REAL, 0)

    def _defect(self, op, band, args, what, tb=""):
        arg = args[0] if args else None
        if isinstance(arg, np.ndarray) and arg.size <= 400:
            full = repr(arg.tolist())
        else:
            full = None
        if isinstance(arg, np.ndarray) and arg.size > 40:
            arg = f"array shape {arg.shape}, max |.| {np.abs(arg).max(initial=0):.3g}"
        elif isinstance(arg, np.ndarray):
            arg = np.array2string(arg, precision=17, separator=", ")
        return {"set": self.label, "kind": self.kind, "op": op, "band": band, "input": arg, "what": what, "trace": tb, "full": full}

    def verdict(self, op, band, failures, args, loose=False):
        if failures:
            self.tally.record(self.kind, op, band, "silent wrong", self._defect(op, band, args, "; ".join(failures)))
        else:
            self.tally.record(self.kind, op, band, "correct")
            if loose:
                self.tally.loose[(self.kind, op)] += 1

    # tolerances -------------------------------------------------------------------------------------
    def stated(self, *arrays):
        m = max([float(np.abs(a).max(initial=0.0)) for a in arrays] + [self.scale])
        return RTOL * m

    def strict(self, *arrays):
        m = max([float(np.abs(a).max(initial=0.0)) for a in arrays] + [self.answer_scale, 1e-300])
        return RTOL * m

    def feas(self, P):
        if self.check is None:
            return None
        with np.errstate(all="ignore"):
            return self.check(np.atleast_2d(P))

    # operators --------------------------------------------------------------------------------------
    def seed_anchors(self):
        """Points of K: LMO vertices of random directions and projections of a few random points."""
        K, rng = self.K, self.rng
        if self.has_lmo:
            C = rng.normal(size=(3, K.dim))
            ok, L = self.call("lmo", "1", lambda c: K.lmo(c), C.reshape((3,) + K.shape))
            if ok:
                self.anchors += list(np.asarray(L).reshape(3, K.dim))
        ok, P = self.call("project", "1", lambda y: K.project(y), rng.normal(size=(2,) + K.shape) * self.scale)
        if ok:
            self.anchors += list(np.asarray(P).reshape(2, K.dim))
        self.anchors = [a for a in self.anchors if np.all(np.isfinite(a))]

    def fuzz_project(self, band, Y):
        K = self.K
        b = Y.shape[0]
        details = self.rng.random() < 0.3
        ok, out = self.call("project", band, (lambda y: K.project(y, details=True)) if details else K.project,
                            Y.reshape((b,) + K.shape))
        if not ok:
            return None
        if details:
            status = np.asarray(out.status).reshape(-1)
            P = np.asarray(out.point, dtype=float).reshape(b, K.dim)
        else:
            status = np.array(["solved"] * b, dtype=object)
            P = np.asarray(out, dtype=float).reshape(b, K.dim)
        fails, loose = [], False
        good = status != "inaccurate"
        for i in np.flatnonzero(good):
            y, p = Y[i], P[i]
            if not np.all(np.isfinite(p)):
                fails.append(f"row {i}: non-finite answer")
                continue
            tau = self.stated(y, p)
            r = self.feas(p)
            if r is not None:
                if r[0] > SLACK * tau:
                    fails.append(f"row {i}: infeasible by {r[0]:.3g} (tol {tau:.3g}, {self.check_source})")
                elif r[0] > SLACK * self.strict(p):
                    loose = True
            gap = self.fw_gap(y, p)
            if gap is not None:
                g, gtol = gap
                if g > SLACK * max(gtol, tau):
                    fails.append(f"row {i}: first-order gap {g:.3g} above {SLACK * max(gtol, tau):.3g}")
                elif g > SLACK * gtol:
                    loose = True
        if fails:
            self.verdict("project", band, fails[:3], (Y,))
            return P
        self.verdict("project", band, [], (Y,), loose)
        # idempotence on the answers of the set (a point of K is its own projection)
        sel = np.flatnonzero(good & np.all(np.isfinite(P), axis=1))[:4]
        if sel.size:
            ok, Q = self.call("project", band, K.project, P[sel].reshape((sel.size,) + K.shape))
            if ok:
                Q = np.asarray(Q).reshape(sel.size, K.dim)
                f = [f"project(project(y)) moved row {j} by {np.abs(Q[k] - P[j]).max():.3g}"
                     for k, j in enumerate(sel) if np.abs(Q[k] - P[j]).max() > SLACK * self.stated(Y[j], P[j])]
                self.verdict("project", band, f, (P[sel],))
        # distance == |y - p|
        ok, D = self.call("distance", band, K.distance, Y.reshape((b,) + K.shape))
        if ok:
            D = np.asarray(D, dtype=float).reshape(b)
            with np.errstate(all="ignore"):
                ref = _scaled_norm(Y - P, axis=1)
            f = [f"row {i}: distance {D[i]:.17g} but |y - project(y)| = {ref[i]:.17g}" for i in np.flatnonzero(good)
                 if not (abs(D[i] - ref[i]) <= SLACK * self.stated(Y[i], P[i]) + 1e-12 * ref[i]
                         or (np.isinf(ref[i]) and D[i] > 1e300))]
            self.verdict("distance", band, f[:3], (Y,))
        # the answers are members
        self.fuzz_contains(band, P[good], expect=True)
        return P

    def fw_gap(self, y, p):
        """(gap, tol): the first-order condition of a projection, normalized by |y - p|_inf; None if no LMO."""
        if not self.has_lmo:
            return None
        r = y - p
        m = float(np.abs(r).max(initial=0.0))
        if m == 0.0 or not np.isfinite(m):
            return None
        rn = r / m
        # max over K of <rn, v> is attained at lmo(-rn)
        ok, L = self.call("lmo", "derived", self.K.lmo, (-rn).reshape(self.K.shape))
        if not ok:
            return None
        L = np.asarray(L, dtype=float).reshape(-1)
        g = float(rn @ L - rn @ p)
        # an error e of p along the normal moves the normalized gap by about |e|; a residual y - p that is
        # itself rounding (m ~ ulp(S)) makes rn noise and the gap up to ulp(S) * S / m: allow both
        S = max(self.scale, float(np.abs(L).max()), float(np.abs(p).max()))
        tol = RTOL * S * max(1.0, math.sqrt(len(p))) * (1.0 + S / m)
        return g, tol

    def fuzz_lmo(self, band, C):
        K = self.K
        b = C.shape[0]
        ok, L = self.call("lmo", band, K.lmo, C.reshape((b,) + K.shape))
        if not ok:
            return
        L = np.asarray(L, dtype=float).reshape(b, K.dim)
        fails = []
        samples = [a for a in self.anchors[:8]]
        for i in range(b):
            c, l = C[i], L[i]
            if not np.all(np.isfinite(l)):
                fails.append(f"row {i}: non-finite vertex")
                continue
            tau = self.stated(l)
            r = self.feas(l)
            if r is not None and r[0] > SLACK * tau:
                fails.append(f"row {i}: LMO answer infeasible by {r[0]:.3g} ({self.check_source})")
            m = float(np.abs(c).max(initial=0.0))
            if m == 0 or not np.isfinite(m):
                continue
            cn = c / m
            for v in samples:
                S = max(self.scale, float(np.abs(v).max()), float(np.abs(l).max()))
                if cn @ l > cn @ v + SLACK * RTOL * S * max(1.0, math.sqrt(len(c))):
                    fails.append(f"row {i}: <c, lmo(c)> = {m * (cn @ l):.6g} above <c, v> = {m * (cn @ v):.6g} for a point v of K")
                    break
        self.verdict("lmo", band, fails[:3], (C,))
        if fails:
            return
        self.anchors += [l for l in L[:2] if np.all(np.isfinite(l))]
        self.anchors = self.anchors[-16:]
        # support(c) == <c, lmo(c)>?  no: support is a max, <c, lmo(c)> the min: min <c,x> = -support(-c)
        ok, S1 = self.call("support", band, K.support, (-C).reshape((b,) + K.shape))
        if ok:
            S1 = np.asarray(S1, dtype=float).reshape(b)
            f = []
            for i in range(b):
                with np.errstate(all="ignore"):
                    cm = float(np.abs(C[i]).max(initial=0.0))
                    cm = cm if cm > 0 else 1.0
                    want = -float((C[i] / cm) @ L[i]) * cm      # inf (not NaN) where the value overflows
                    scale_term = float(np.abs(C[i]).max()) * max(self.scale, float(np.abs(L[i]).max()))
                tol = SLACK * RTOL * scale_term * max(1.0, math.sqrt(K.dim))
                if np.isinf(want) and np.isinf(S1[i]) and np.sign(want) == np.sign(S1[i]):
                    continue
                if not abs(S1[i] - want) <= tol:
                    f.append(f"row {i}: support(-c) = {S1[i]:.17g} but -<c, lmo(c)> = {want:.17g}")
            self.verdict("support", band, f[:3], (-C,))

    def fuzz_contains(self, band, X, expect=None):
        K = self.K
        if X.shape[0] == 0:
            return
        ok, V = self.call("contains", band, K.contains, X.reshape((X.shape[0],) + K.shape))
        if not ok:
            return
        V = np.asarray(V, dtype=bool).reshape(-1)
        ok, D = self.call("distance", band, K.distance, X.reshape((X.shape[0],) + K.shape))
        if not ok:
            return
        D = np.asarray(D, dtype=float).reshape(-1)
        fails = []
        for i in range(X.shape[0]):
            tol = RTOL * max(1.0, float(np.abs(X[i]).max()), self.scale)
            if expect and not V[i]:
                fails.append(f"row {i}: an answer of the set is not a member (distance {D[i]:.3g}, tol {tol:.3g})")
            elif D[i] <= 0.5 * tol and not V[i]:
                fails.append(f"row {i}: contains False at distance {D[i]:.3g} <= tol {tol:.3g}")
            elif D[i] >= 2 * tol and V[i]:
                fails.append(f"row {i}: contains True at distance {D[i]:.3g} > tol {tol:.3g}")
        self.verdict("contains", band, fails[:3], (X,))
        if self.has_violation:
            ok, W = self.call("violation", band, K.violation, X.reshape((X.shape[0],) + K.shape))
            if ok:
                W = np.asarray(W, dtype=float).reshape(-1)
                f = []
                for i in range(X.shape[0]):
                    tol = RTOL * max(1.0, float(np.abs(X[i]).max()), self.scale)
                    r = self.feas(X[i])
                    if expect and W[i] > SLACK * 100 * tol:
                        f.append(f"row {i}: violation {W[i]:.3g} on an answer of the set")
                    if r is not None and r[0] > 1e3 * tol and not W[i] > 0:
                        f.append(f"row {i}: violation {W[i]:.3g} on a point violating the constraints by {r[0]:.3g}")
                self.verdict("violation", band, f[:3], (X,))

    def fuzz_batch(self, band, Y):
        """A batch equals its rows one by one (the rows may mix magnitudes)."""
        K = self.K
        b = Y.shape[0]
        if b < 2:
            return
        ok, P = self.call("batch", band, K.project, Y.reshape((b,) + K.shape))
        if not ok:
            return
        P = np.asarray(P).reshape(b, K.dim)
        fails = []
        for i in range(b):
            ok, p = self.call("project", band, K.project, Y[i].reshape(K.shape))
            if not ok:
                continue
            p = np.asarray(p).reshape(-1)
            if not np.abs(p - P[i]).max(initial=0.0) <= SLACK * self.stated(Y[i], p):
                fails.append(f"row {i}: batch row differs from the single call by {np.abs(p - P[i]).max():.3g}")
        self.verdict("batch", band, fails[:3], (Y,))

    def fuzz_empty(self):
        K = self.K
        Z = np.zeros((0,) + K.shape)
        for op in ("project", "distance", "lmo", "support", "contains"):
            if op in ("lmo", "support") and not self.has_lmo:
                continue
            ok, out = self.call("empty", "degenerate", getattr(K, op), Z)
            if ok:
                want = (0,) + K.shape if op in ("project", "lmo") else (0,)
                self.verdict("empty", "degenerate", [] if np.shape(out) == want else
                             [f"{op} of an empty batch has shape {np.shape(out)}; expected {want}"], (Z,))

    def fuzz_kl(self, band, Y):
        K = self.K
        b = Y.shape[0]
        with np.errstate(all="ignore"):
            T = np.log(np.abs(Y) + 1e-300)                     # log y, y > 0
        # |log y| <= 300: far enough for every band, and the exact answer's entries stay far above
        # the underflow threshold, so that the first-order check is meaningful on every coordinate
        T = np.clip(T, -300.0, 300.0)
        ok, X = self.call("project_kl", band, lambda t: K.project(t, geometry="kl", log_input=True),
                          T.reshape((b,) + K.shape))
        if not ok:
            return
        X = np.asarray(X, dtype=float).reshape(b, K.dim)
        fails = []
        for i in range(b):
            x = X[i]
            if not np.all(np.isfinite(x)):
                fails.append(f"row {i}: non-finite answer")
                continue
            r = self.feas(x)
            tau = self.stated(x)
            if r is not None and r[0] > SLACK * tau:
                fails.append(f"row {i}: KL projection infeasible by {r[0]:.3g}")
                continue
            if np.any(x < -tau):
                fails.append(f"row {i}: KL projection has a negative entry {x.min():.3g}")
                continue
            if not self.has_lmo or np.any(x <= 0.0):
                # a zero entry (legitimate where bounds leave no room, e.g. caps that use up the total)
                # has an infinite KL gradient: the first-order check is only rigorous on positive answers
                continue
            with np.errstate(divide="ignore"):
                g = np.where(x > 0, np.log(np.where(x > 0, x, 1.0)), -745.0) - T[i]
            gm = float(np.abs(g).max())
            if gm == 0 or not np.isfinite(gm):
                continue
            ok, L = self.call("lmo", "derived", K.lmo, (g / gm).reshape(K.shape))
            if not ok:
                continue
            L = np.asarray(L).reshape(-1)
            # the Bregman gap <g, x - lmo(g)> >= KL(x||y) - KL(x*||y), in absolute terms (normalizing g
            # by its size would amplify the rounding of g = log x - log y = 0 at interior points)
            gap = float(g @ (x - L))
            S = max(self.scale, float(np.abs(L).max()), float(np.abs(x).max()))
            if gap > 1e-6 * S * max(1.0, math.sqrt(K.dim)):
                fails.append(f"row {i}: Bregman first-order gap {gap:.3g} (lmo vertex {np.array2string(L, precision=6)})")
        self.verdict("project_kl", band, fails[:3], (T,))

    def fuzz_jacobian(self, band, Y):
        K = self.K
        b = Y.shape[0]
        V = self.rng.normal(size=(b, K.dim))
        U = self.rng.normal(size=(b, K.dim))
        ok, JV = self.call("project_jvp", band, K.project_jvp, Y.reshape((b,) + K.shape), V.reshape((b,) + K.shape))
        if not ok:
            return
        ok, JU = self.call("project_vjp", band, K.project_vjp, Y.reshape((b,) + K.shape), U.reshape((b,) + K.shape))
        if not ok:
            return
        JV = np.asarray(JV, dtype=float).reshape(b, K.dim)
        JU = np.asarray(JU, dtype=float).reshape(b, K.dim)
        fails = []
        for i in range(b):
            if not (np.all(np.isfinite(JV[i])) and np.all(np.isfinite(JU[i]))):
                fails.append(f"row {i}: non-finite Jacobian product")
                continue
            nu, nv = np.linalg.norm(U[i]), np.linalg.norm(V[i])
            a1, a2 = float(U[i] @ JV[i]), float(JU[i] @ V[i])
            if abs(a1 - a2) > 1e-6 * nu * nv:
                fails.append(f"row {i}: <u, Jv> = {a1:.12g} but <J^T u, v> = {a2:.12g}")
            q = float(V[i] @ JV[i])
            if q < -1e-6 * nv * nv or q > (1 + 1e-6) * nv * nv:
                fails.append(f"row {i}: <v, Jv> = {q:.6g} outside [0, |v|^2 = {nv * nv:.6g}]")
        self.verdict("project_jvp", band, fails[:3], (Y,))

    # one round over the bands -------------------------------------------------------------------------
    def round(self, bands, batch=3, heavy=True):
        rng, K = self.rng, self.K
        if not self.anchors:
            self.seed_anchors()
        for band in bands:
            Y = make_inputs(band, K, self.anchors, rng, batch)
            P = self.fuzz_project(band, Y)
            if self.has_lmo:
                C = make_inputs(band, K, [], rng, batch) if band != "degenerate" else Y
                self.fuzz_lmo(band, C)
            X = make_inputs(band, K, self.anchors, rng, batch)
            self.fuzz_contains(band, X)
            if heavy and band in ("mixed", "1", "1e8", "degenerate", "1e-300", "1e300"):
                self.fuzz_batch(band, make_inputs(band, K, self.anchors, rng, 4))
            if heavy and self.orthant and band in ("1", "1e-3", "1e8", "degenerate", "mixed"):
                self.fuzz_kl(band, Y if P is None else Y)
            if heavy and band in ("1", "1e-3", "degenerate"):
                self.fuzz_jacobian(band, Y)
        if heavy:
            self.fuzz_empty()


def run(calls=100_000, seed=0, time_limit=20.0, randoms_per_kind=3, combos=30, verbose=False, bands=BANDS,
        max_seconds=None, only=None):
    """Fuzz until ``calls`` operator calls were made; returns the Tally."""
    tally = Tally()
    pool = build_pool(seed, randoms_per_kind, combos)
    if only:
        pool = [(l, e) for l, e in pool if any(o in l for o in only)]
    fuzzers = []
    old = signal.signal(signal.SIGALRM, _on_alarm) if hasattr(signal, "SIGALRM") else None
    t0 = time.perf_counter()
    tally.sets = 0
    tally.kinds = set()
    tally.compile_errors = collections.Counter()
    try:
        for label, entry in pool:
            try:
                signal.setitimer(signal.ITIMER_REAL, 4 * time_limit)
                K = compile_entry(entry)
            except CallTimeout:
                tally.compile_errors["timeout"] += 1
                continue
            except SetkitError as e:
                tally.compile_errors[_message_kind(e)] += 1
                continue
            except Exception as e:                                  # noqa: BLE001
                tally.defects.append({"set": label, "kind": "compile", "op": "compile", "band": "-", "input": None,
                                      "what": f"{type(e).__name__}: {e}", "trace": traceback.format_exc(limit=4)})
                continue
            finally:
                signal.setitimer(signal.ITIMER_REAL, 0)
            try:
                signal.setitimer(signal.ITIMER_REAL, max(30.0, 10 * time_limit))   # generous: compiling is not timed
                _warm(K)
            except CallTimeout:
                pass
            finally:
                signal.setitimer(signal.ITIMER_REAL, 0)
            fz = SetFuzzer(label, K, tally, np.random.default_rng([seed, len(fuzzers)]), time_limit)
            fuzzers.append(fz)
            tally.kinds.add(fz.kind)
        tally.sets = len(fuzzers)
        r = 0
        while tally.total < calls and fuzzers:
            for fz in fuzzers:
                if tally.total >= calls or (max_seconds and time.perf_counter() - t0 > max_seconds):
                    break
                # sets whose rounds are slow (generic solvers, timeouts) run less often, so that
                # the calls spread over the kinds instead of piling up behind one slow set
                if fz.cost > 1.0 and r % min(60, math.ceil(2 * fz.cost)) != 0:
                    continue
                t1 = time.perf_counter()
                fz.round(bands, heavy=(r % 3 == 0))
                fz.cost = time.perf_counter() - t1
                if verbose:
                    print(f"[{tally.total:>7}] {fz.label:<40} round {r} {time.perf_counter() - t1:6.2f} s", flush=True)
            r += 1
            if max_seconds and time.perf_counter() - t0 > max_seconds:
                break
    finally:
        if old is not None:
            signal.signal(signal.SIGALRM, old)
    tally.seconds = time.perf_counter() - t0
    tally.seed = seed
    return tally


def summary(t: Tally, command: str = "") -> str:
    outs = ("correct", "setkit error", "foreign", "silent wrong", "timeout")
    lines = [f"setkit operator fuzzer: {t.total} calls over {t.sets} sets of {len(t.kinds)} kinds, seed {t.seed}, "
             f"{t.seconds:.0f} s", f"command: {command}" if command else "", ""]
    lines.append("outcomes: " + ", ".join(f"{o} {t.count(o)}" for o in outs))
    lines.append(f"loose (within the stated tolerance, beyond 1e-7 x the answer's scale): {sum(t.loose.values())}")
    lines.append(f"sets refused at compile: {sum(t.compile_errors.values())}")
    lines.append("")
    lines.append("by kind and operator (calls: correct / setkit error / foreign / silent wrong / timeout)")
    kinds = sorted({k for (k, o, b) in t.calls})
    ops = [o for o in OPERATORS if any(oo == o for (_, oo, _) in t.calls)] + ["derived"]
    for k in kinds:
        cells = []
        for o in OPERATORS:
            n = sum(v for (kk, oo, b), v in t.calls.items() if kk == k and oo == o)
            if n:
                c = [t.outcomes[(k, o, oc)] for oc in outs]
                cells.append(f"{o} {n}: " + "/".join(map(str, c)))
        lines.append(f"  {k:<16} " + "; ".join(cells))
    del ops
    lines.append("")
    lines.append("by magnitude band (calls: correct / setkit error / foreign / silent wrong / timeout)")
    for band in BANDS + ("derived",):
        c = [t.by_band[(band, oc)] for oc in outs]
        if sum(c):
            lines.append(f"  {band:<10} {sum(c):>8}: " + "/".join(map(str, c)))
    lines.append("")
    lines.append("setkit errors by message kind")
    for msg, n in t.errors.most_common(25):
        lines.append(f"  {n:>6}  {msg}")
    if t.compile_errors:
        lines.append("refused at compile")
        for msg, n in t.compile_errors.most_common(10):
            lines.append(f"  {n:>6}  {msg}")
    lines.append("")
    lines.append(f"defects: {len(t.defects)}")
    seen = set()
    for d in t.defects:
        key = (d["set"], d["op"], d["what"][:60])
        if key in seen:
            continue
        seen.add(key)
        lines.append(f"  [{d['kind']}/{d['op']}/{d['band']}] {d['set']}: {d['what'][:300]}")
        if d.get("input") is not None:
            lines.append(f"      input: {str(d['input'])[:400]}")
        if len(seen) >= 60:
            lines.append("  ...")
            break
    return "\n".join(lines) + "\n"


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--calls", type=int, default=100_000)
    ap.add_argument("--seed", type=int, default=0)
    ap.add_argument("--time-limit", type=float, default=20.0, help="seconds per call before it counts as a timeout")
    ap.add_argument("--randoms", type=int, default=3, help="random examples per family")
    ap.add_argument("--combos", type=int, default=30, help="random combinator sets")
    ap.add_argument("--only", nargs="*", help="only sets whose label contains one of these")
    ap.add_argument("--max-seconds", type=float, default=None, help="stop after this many seconds (wall clock)")
    ap.add_argument("--out", default=str(Path(__file__).with_name("fuzz_operators_last_run.txt")))
    ap.add_argument("--trace", default=None, help="write each call (set, operator, arguments) to this file first")
    ap.add_argument("-v", "--verbose", action="store_true")
    a = ap.parse_args(argv)
    global TRACE
    TRACE = a.trace
    if a.calls < 1:
        ap.error(f"--calls must be a positive integer; got {a.calls}.")
    t = run(a.calls, a.seed, a.time_limit, a.randoms, a.combos, a.verbose, only=a.only, max_seconds=a.max_seconds)
    text = summary(t, "python3 -m benchmarks.fuzz_operators " + " ".join(argv if argv is not None else sys.argv[1:]))
    print(text)
    if a.out:
        Path(a.out).write_text(text)
    return 1 if (t.count("foreign") or t.count("silent wrong")) else 0


if __name__ == "__main__":
    sys.exit(main())
