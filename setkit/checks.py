"""Certificates and differential comparison against the cvxpy reference."""
from __future__ import annotations

import time
from dataclasses import dataclass, field

import numpy as np

from .errors import SetkitError, UnboundedDirectionError

REFERENCE_ROUTES = dict(project="reference", lmo="reference", support="reference")


@dataclass(frozen=True)
class CheckRow:
    operator: str
    route: str
    cases: int
    max_error: float
    allowed: float
    ok: bool
    seconds: float
    reference_seconds: float
    note: str = ""


@dataclass(frozen=True)
class Report:
    label: str
    shape: tuple
    rows: tuple = field(default_factory=tuple)

    @property
    def ok(self) -> bool:
        return all(r.ok for r in self.rows)

    def text(self) -> str:
        head = f"{self.label}, shape {self.shape}: " + ("all operators agree with the reference"
                                                         if self.ok else "DISAGREEMENT with the reference")
        lines = [head, f"  {'operator':<10} {'route':<10} {'cases':>5} {'max error':>11} {'allowed':>9} "
                       f"{'ms/call':>9} {'ref ms':>9}  verdict"]
        for r in self.rows:
            lines.append(f"  {r.operator:<10} {r.route:<10} {r.cases:>5} {r.max_error:>11.2e} {r.allowed:>9.1e} "
                         f"{1e3 * r.seconds / max(r.cases, 1):>9.3f} {1e3 * r.reference_seconds / max(r.cases, 1):>9.3f}"
                         f"  {'ok' if r.ok else 'FAIL'}{'  ' + r.note if r.note else ''}")
        return "\n".join(lines)

    def as_dict(self) -> dict:
        return {"set": self.label, "shape": list(self.shape), "ok": self.ok,
                "rows": [r.__dict__.copy() for r in self.rows]}


def test_points(K, n: int, rng) -> np.ndarray:
    """Seeded points inside, near and far from K (a flat batch of about 3n rows)."""
    d = K.dim
    s = max(1.0, K.node.scale())
    raw = rng.standard_normal((n, d)) * s
    inside = K.project(raw.reshape((n,) + K.shape)).reshape(n, d)
    near = inside + 1e-3 * s * rng.standard_normal((n, d))
    far = 1e3 * s * rng.standard_normal((n, d))
    return np.concatenate([inside, near, raw, far])


def _timed(fn, *a):
    t0 = time.perf_counter()
    out = fn(*a)
    return out, time.perf_counter() - t0


def verify(K, n_points: int = 4, seed: int = 0, rtol: float = 2e-5) -> Report:
    """Compare every operator of K with the cvxpy reference on seeded random inputs."""
    rng = np.random.default_rng(seed)
    ref = K.with_backends(**REFERENCE_ROUTES)
    routes = K.routes()
    Y = test_points(K, n_points, rng)
    Yb = Y.reshape((-1,) + K.shape)
    C = rng.standard_normal((3 * n_points,) + K.shape)
    s = max(1.0, K.node.scale())
    rows = []

    # projection: points must agree; the certificate must be tiny
    P, t = _timed(K.project, Yb)
    Pr, tr = _timed(ref.project, Yb)
    scale = np.maximum(1.0, np.abs(Y).max(axis=1)) * s
    err = np.linalg.norm((P - Pr).reshape(len(Y), -1), axis=1) / scale
    # the interior-point reference is accurate to about 1e-6 relative on degenerate faces
    allowed = rtol
    rows.append(CheckRow("project", routes["project"].provider, len(Y), float(err.max()), allowed,
                         bool(err.max() <= allowed), t, tr))
    D, t = _timed(K.distance, Yb)
    Dr = np.linalg.norm((Y - Pr.reshape(len(Y), -1)), axis=1)
    err = np.abs(D - Dr) / scale
    rows.append(CheckRow("distance", routes["distance"].provider, len(Y), float(err.max()), allowed,
                         bool(err.max() <= allowed), t, tr))
    inside = Pr.reshape(len(Y), -1)
    M, t = _timed(K.contains, inside.reshape((-1,) + K.shape), 1e-5 * scale)
    far = Y[3 * n_points:]
    Mf = K.contains(far.reshape((-1,) + K.shape))
    far_expected = Dr[3 * n_points:] > 1e-3 * scale[3 * n_points:]
    wrong = int((~M).sum()) + int((Mf & far_expected).sum())
    rows.append(CheckRow("contains", routes["contains"].provider, len(Y) + len(far), float(wrong), 0.0,
                         wrong == 0, t, 0.0, "counts misclassified points"))
    # linear minimization: objective values must agree and the answer must lie in K
    try:
        L, t = _timed(K.lmo, C)
        Lr, tr = _timed(ref.lmo, C)
        Cf = C.reshape(len(C), -1)
        v = np.einsum("ij,ij->i", Cf, L.reshape(len(C), -1))
        vr = np.einsum("ij,ij->i", Cf, Lr.reshape(len(C), -1))
        cs = np.linalg.norm(Cf, axis=1) * s
        err = np.abs(v - vr) / cs
        dist_in = ref.distance(L) / s
        e = float(max(err.max(), dist_in.max()))
        rows.append(CheckRow("lmo", routes["lmo"].provider, len(C), e, allowed, e <= allowed, t, tr,
                             "objective gap and distance of the answer to K"))
        S, t = _timed(K.support, C)
        Sr, tr = _timed(ref.support, C)
        err = np.abs(S - Sr) / cs
        rows.append(CheckRow("support", routes["support"].provider, len(C), float(err.max()), allowed,
                             bool(err.max() <= allowed), t, tr))
    except UnboundedDirectionError as exc:
        rows.append(CheckRow("lmo", routes["lmo"].provider, 0, 0.0, 0.0, True, 0.0, 0.0,
                             f"set unbounded: {exc}"[:120]))
    # certificates of the projections
    try:
        cert = K.certificate(Yb, P)
        e = float(np.sqrt(2 * np.maximum(cert, 0)).max() / scale.max())
        rows.append(CheckRow("certificate", routes["project"].provider, len(Y), e, allowed, e <= allowed,
                             0.0, 0.0, "sqrt(2 * Frank-Wolfe gap), bounds the projection error"))
    except (SetkitError,) as exc:
        rows.append(CheckRow("certificate", "-", 0, 0.0, 0.0, True, 0.0, 0.0, f"not available: {exc}"[:120]))
    return Report(K.node.label, K.shape, tuple(rows))
