"""One command for every benchmark: ``python -m benchmarks.run --quick`` or ``--full``.

For every registered kind (``setkit.families.known_kinds()``, or the kinds asked
for) and every operator (project, distance, lmo, support, contains), run every
implementation that can serve it (the native kernel and every registered backend
that accepts the set, ``benchmarks/providers.py``; derived operators through each
provider of the operator they come from) at growing sizes, on the instances the
family declares itself (``benchmarks/instances.py``); measure the median
time over repeats, the error against the most accurate answer available, the
peak memory (tracemalloc) and, for native rows, the ratio to a floor (np.sort,
np.sort + isotonic regression, or one np.sum over the same data). Then check the
speed targets and write a Markdown report and log-log plots.

Timings on a shared machine are noisy; ratios are measured side by side in one run.
"""
from __future__ import annotations

import argparse
import gc
import os
import statistics
import sys
import time
import tracemalloc
import warnings
from dataclasses import dataclass, field

import numpy as np

if __package__ in (None, ""):  # python benchmarks/run.py
    sys.path.insert(0, os.path.dirname(os.path.dirname(os.path.abspath(__file__))))
    __package__ = "benchmarks"

import setkit  # noqa: E402
from setkit.agreement import DEFAULT_RTOL  # noqa: E402
from setkit.families import known_kinds  # noqa: E402

from .instances import FULL_SIZES, HOOK, QUICK_SIZES, missing_kinds, workloads  # noqa: E402
from .providers import REFERENCE, candidates, judge_order, provider_of  # noqa: E402

OPERATORS = ("project", "distance", "lmo", "support", "contains")
HERE = os.path.dirname(os.path.abspath(__file__))
AGREE_RTOL = DEFAULT_RTOL  # the tolerance of setkit.agreement.verify


@dataclass(frozen=True)
class Mode:
    name: str
    repeats: int            # at most this many timed calls after one warm-up call
    min_seconds: float      # ... and stop repeating once this much time was spent
    budget: float           # a generic backend whose call exceeds this stops growing
    native_budget: float    # same for native kernels
    memory_limit: float     # measure peak memory only for calls faster than this
    sizes: tuple            # the sizes n asked of every family's benchmark_example


QUICK = Mode("quick", 3, 0.02, 1.0, 5.0, 0.2, QUICK_SIZES)
FULL = Mode("full", 7, 0.5, 2.0, 20.0, 0.3, FULL_SIZES)


@dataclass
class Row:
    kind: str
    workload: str
    op: str
    backend: str
    n: int
    dim: int = 0
    batch: int = 1
    status: str = "ok"          # ok | skipped: ... | error: ... | no builder ...
    seconds: float = float("nan")    # median per call (one call = one batch)
    setup: float = float("nan")      # first call minus the median (workspace construction)
    repeats: int = 0
    error: float = float("nan")      # against the judge
    judge: str = ""
    error_ref: float = float("nan")  # against the reference, where it ran
    agrees: bool | None = None
    peak_bytes: float = float("nan")
    floor: str = ""
    floor_seconds: float = float("nan")
    ratio_floor: float = float("nan")
    ratio_ref: float = float("nan")  # reference seconds / this row's seconds
    route: str = ""

    @property
    def ran(self) -> bool:
        return self.status == "ok"


@dataclass
class Result:
    mode: str
    rows: list = field(default_factory=list)
    targets: list = field(default_factory=list)
    floors: list = field(default_factory=list)   # (n, floor name, seconds) on one vector of n
    machine: dict = field(default_factory=dict)
    started: str = ""
    seconds: float = 0.0


# ---------------------------------------------------------------------------------------------
# inputs, calls, errors
# ---------------------------------------------------------------------------------------------
def make_inputs(K, op, batch, rng, members=None):
    """Inputs of ``op``; for contains, half are ``members`` (points of K found earlier), half far away.

    Returns None for contains when no point of K is known at this size.
    """
    s = max(1.0, float(K.node.scale()))
    shape = (batch,) + K.shape
    if op in ("project", "distance"):
        return 2.0 * s * rng.standard_normal(shape)
    if op in ("lmo", "support"):
        return rng.standard_normal(shape)
    if members is None:
        return None
    Y = 3.0 * s * rng.standard_normal((max(2, batch),) + K.shape)
    h = Y.shape[0] // 2
    M = np.reshape(members, (-1,) + K.shape)
    Y[:h] = M[np.arange(h) % M.shape[0]]
    return Y


def call(K, op, X):
    if op == "contains":
        # the reference answers through an interior-point projection accurate to 1e-6..1e-5
        # relative per coordinate, so its distances are off by up to ~1e-5 sqrt(dim): membership
        # is asked at 1e-4 sqrt(dim) relative. The inputs are either on the set (projections) or
        # at a distance ~ sqrt(dim) from it, so this tolerance still separates them.
        Xf = X.reshape(X.shape[0], -1)
        tol = 1e-4 * np.sqrt(Xf.shape[1]) * np.maximum(1.0, np.maximum(np.abs(Xf).max(axis=1),
                                                                         float(K.node.scale())))
        return K.contains(X, tol=tol)
    return getattr(K, op)(X)


def op_error(op, out, ref, X, K) -> float:
    b = X.shape[0]
    Xf = X.reshape(b, -1)
    s = max(1.0, float(K.node.scale()))
    if op == "contains":
        return float(np.mean(np.asarray(out) != np.asarray(ref)))
    if op == "project":
        scale = np.maximum(1.0, np.abs(Xf).max(axis=1))
        return float((np.abs(np.reshape(out, (b, -1)) - np.reshape(ref, (b, -1))).max(axis=1) / scale).max())
    if op == "distance":
        scale = np.maximum(1.0, np.abs(Xf).max(axis=1))
        return float((np.abs(np.ravel(out) - np.ravel(ref)) / scale).max())
    cs = np.linalg.norm(Xf, axis=1) * s
    if op == "lmo":   # LMO answers may differ on ties: compare objective values
        v = np.einsum("ij,ij->i", Xf, np.reshape(out, (b, -1)))
        vr = np.einsum("ij,ij->i", Xf, np.reshape(ref, (b, -1)))
        return float((np.abs(v - vr) / cs).max())
    return float((np.abs(np.ravel(out) - np.ravel(ref)) / cs).max())


def timed_calls(fn, mode: Mode, budget: float, jit_warmup: bool = False):
    """One warm-up call (kept as the answer), then repeats; returns (out, first, median, reps)."""
    t0 = time.perf_counter()
    out = fn()
    first = time.perf_counter() - t0
    times = []
    if first > budget and jit_warmup:
        # a compiled kernel pays its JIT compilation on the first call: time one more call
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    elif first <= budget:
        spent = 0.0
        while len(times) < mode.repeats and (len(times) < 3 or spent < mode.min_seconds):
            t0 = time.perf_counter()
            fn()
            dt = time.perf_counter() - t0
            times.append(dt)
            spent += dt
            if spent > budget / 2:
                break
    med = statistics.median(times) if times else first
    return out, first, med, max(1, len(times))


def peak_memory(fn) -> float:
    gc.collect()
    tracemalloc.start()
    try:
        fn()
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    return float(peak)


# ---------------------------------------------------------------------------------------------
# floors
# ---------------------------------------------------------------------------------------------
def floor_fn(name, X):
    Xf = np.ascontiguousarray(X.reshape(X.shape[0], -1))
    if name == "sort":
        return lambda: np.sort(Xf, axis=1)
    if name == "sort+isotonic":
        from scipy.optimize import isotonic_regression

        def f():
            np.sort(Xf, axis=1)
            for row in Xf:
                isotonic_regression(row)
        return f
    if name == "pass":
        return lambda: np.sum(Xf)
    raise ValueError(f"unknown floor {name!r}; the floors are sort, sort+isotonic, pass.")


def time_floor(name, X, mode):
    fn = floor_fn(name, X)
    _, _, med, _ = timed_calls(fn, mode, 1e9)
    return med


# ---------------------------------------------------------------------------------------------
# the sweep
# ---------------------------------------------------------------------------------------------
def _judge(results: dict):
    """The most accurate answer among those that ran: the reference where it ran, else native."""
    for want in judge_order():
        for label, res in results.items():
            if provider_of(label) == want and res is not None:
                return label, res
    return None, None


def sweep_workload(wl, mode: Mode, log, seed=0, ops=OPERATORS) -> list:
    rows = []
    stopped = {}      # (op, label) -> reason larger sizes are skipped
    last = {}         # (op, label) -> (n, first-call seconds)
    slopes = {}       # (op, label) -> growth exponent measured between the last two sizes
    for n in wl.sizes or (None,):
        rng = np.random.default_rng([seed, n or 0])
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                spec = wl.build(n, rng)
                if spec is None:      # the family has no instance of this size
                    continue
                missing = missing_kinds(spec)
                if missing:
                    rows.append(Row(wl.kind, wl.label, "-", "-", n or 0,
                                    status=f"not available: needs the kind(s) {', '.join(missing)}, "
                                           f"not registered yet"))
                    return rows
                K = setkit.compile(spec)
                n = n or K.dim        # a declared example runs at its own size
        except Exception as exc:  # an instance that no longer matches its family is reported, not hidden
            rows.append(Row(wl.kind, wl.label, "-", "-", n or 0, status=f"error: instance failed: "
                                                                           f"{type(exc).__name__}: {str(exc)[:160]}"))
            log(f"  {wl.label} n={n}: instance failed: {exc}")
            continue
        # one compiled set per provider, shared by its operators (distance and membership through
        # a projection reuse the projection's workspace, as a user's set would)
        all_cands = {op: candidates(K.node, op) for op in ops}
        merged = {}
        for cands in all_cands.values():
            for label, over in cands:
                merged.setdefault(provider_of(label), {}).update(over)
        compiled = {}

        def compiled_for(label):
            b = provider_of(label)
            if b not in compiled:
                compiled[b] = K.with_backends(**merged[b])
            return compiled[b]

        members = None   # points of K from the most accurate projection (or LMO) at this size
        for op in ops:
            if op == "contains" and members is None:
                # no projection or LMO answer so far (other operators skipped or not asked): one
                # projection by the default route, unless that route is already over its budget
                r = K.routes()["project"].provider
                if not any(k[0] == "project" and provider_of(k[1]) == r for k in stopped):
                    try:
                        members = K.project(2.0 * rng.standard_normal((1,) + K.shape))
                    except Exception:
                        members = None
            X = make_inputs(K, op, wl.batch, rng, members)
            if X is None:
                rows.append(Row(wl.kind, wl.label, op, "-", n, K.dim, 0,
                                status="skipped: no point of the set available at this size "
                                       "(every projection and LMO skipped)"))
                continue
            cands = all_cands[op]
            if not cands:
                rows.append(Row(wl.kind, wl.label, op, "-", n, K.dim, X.shape[0],
                                status="unsupported: no implementation serves it"))
                continue
            outs, op_rows = {}, []
            for label, over in cands:
                row = Row(wl.kind, wl.label, op, label, n, K.dim, X.shape[0])
                op_rows.append(row)
                outs[label] = None
                key = (op, label)
                budget = mode.native_budget if provider_of(label) == "native" else mode.budget
                if key in stopped:
                    row.status = stopped[key]
                    continue
                src = {"(via project)": "project", "(via lmo)": "lmo"}.get(label.partition(" ")[2])
                if src and (src, provider_of(label)) in stopped:
                    row.status = stopped[key] = f"skipped: {src} by {provider_of(label)} is skipped from this size on"
                    continue
                if key in last:
                    # extrapolate with the slope measured so far (clipped to [1, 3]); with one size
                    # only, assume 1.5: generic solvers on extended formulations grow faster than n
                    n0, t0 = last[key]
                    k = slopes.get(key, 1.5)
                    guess = t0 * (n / n0) ** k
                    if guess > 2 * budget:
                        row.status = stopped[key] = (f"skipped: predicted {guess:.3g} s per call from n={n0}, "
                                                     f"over the {budget:g} s budget")
                        continue
                try:
                    Kb = compiled_for(label)
                    row.route = Kb.routes()[op].provider
                    want = over[op]
                    if row.route != want:   # the merged overrides must route this operator as asked
                        raise RuntimeError(f"internal: {op} routed to {row.route}, expected {want}")
                    with warnings.catch_warnings():
                        warnings.simplefilter("ignore")
                        out, first, med, reps = timed_calls(lambda: call(Kb, op, X), mode, budget,
                                                            jit_warmup=provider_of(label) == "native")
                        if med < mode.memory_limit:
                            row.peak_bytes = peak_memory(lambda: call(Kb, op, X))
                except MemoryError as exc:   # e.g. cvxpy canonicalizing a large cone: its practical limit
                    row.status = stopped[key] = f"limit: out of memory at n={n} ({str(exc)[:80]})"
                    continue
                except Exception as exc:  # any failure is a row of the report, never a crash of the run
                    row.status = f"error: {type(exc).__name__}: {str(exc)[:160]}"
                    stopped[key] = "skipped: failed at a smaller size"
                    continue
                outs[label] = out
                row.seconds, row.setup, row.repeats = med, max(0.0, first - med), reps
                t_now = med if provider_of(label) == "native" else first
                if key in last and n > last[key][0] and last[key][1] > 0 and t_now > 0:
                    n0, t0 = last[key]
                    slopes[key] = float(np.clip(np.log(t_now / t0) / np.log(n / n0), 1.0, 3.0))
                last[key] = (n, t_now)
                if med > budget:
                    stopped[key] = f"skipped: one call took {med:.3g} s at n={n}, over the {budget:g} s budget"
            jl, jout = _judge(outs)
            if op in ("project", "lmo") and members is None:
                # an exact native answer lies on the set; else the most accurate one
                members = outs.get("native") if outs.get("native") is not None else jout
            ref_label = next((lb for lb in outs if provider_of(lb) == REFERENCE and outs[lb] is not None), None)
            # a membership test answered through a projection has the projection's floor
            via_project = any(r.ran and r.backend == "native (via project)" for r in op_rows)
            fname = wl.floor("project") if op == "contains" and via_project else wl.floor(op)
            fsec = time_floor(fname, X, mode) if any(r.ran and provider_of(r.backend) == "native" for r in op_rows) else None
            ref_sec = next((r.seconds for r in op_rows if r.backend == ref_label), None)
            for row in op_rows:
                if not row.ran:
                    continue
                out = outs[row.backend]
                if jout is not None:
                    row.judge = jl
                    row.error = op_error(op, out, jout, X, K)
                if ref_label is not None:
                    row.error_ref = op_error(op, out, outs[ref_label], X, K)
                    tol = 0.0 if op == "contains" else AGREE_RTOL
                    row.agrees = bool(row.error_ref <= tol)
                    row.ratio_ref = ref_sec / row.seconds if row.seconds > 0 else float("inf")
                if provider_of(row.backend) == "native" and fsec:
                    row.floor, row.floor_seconds = fname, fsec
                    row.ratio_floor = row.seconds / fsec
            rows.extend(op_rows)
            for r in op_rows:
                log("  " + short_line(r))
    return rows


def short_line(r: Row) -> str:
    t = f"{1e3 * r.seconds:10.3f} ms" if r.ran else " " * 13
    extra = ""
    if r.ran:
        extra = f" err={r.error:.1e}" + (f" xfloor={r.ratio_floor:.2f}" if r.floor else "") + \
                (f" ref/this={r.ratio_ref:.0f}" if r.ratio_ref == r.ratio_ref else "")
    else:
        extra = " " + r.status
    return f"{r.workload[:34]:<34} {r.op:<8} {r.backend[:26]:<26} n={r.n:<8} {t}{extra}"


def sweep(mode: Mode, kinds=None, ops=OPERATORS, log=print, seed=0) -> list:
    """Rows for every workload of ``kinds`` (default: every registered kind; kinds declared only by
    an entry point are found by name)."""
    rows = []
    for kind in sorted(kinds) if kinds else known_kinds():
        try:
            wls = workloads(kind, mode.sizes, seed)
        except Exception as exc:   # a family whose instances cannot be built is a row of the report
            rows.append(Row(kind, kind, "-", "-", 0, status=f"error: no instance: {type(exc).__name__}: "
                                                            f"{str(exc)[:160]}"))
            log(f"{kind}: no instance: {exc}")
            continue
        if not wls:
            rows.append(Row(kind, kind, "-", "-", 0, status=f"no benchmark instance: the family declares neither "
                                                            f"{HOOK}(n, rng) nor examples()"))
            log(f"{kind}: no benchmark instance")
            continue
        for wl in wls:
            log(f"{wl.label}:")
            rows.extend(sweep_workload(wl, mode, log, seed=seed, ops=ops))
    return rows


def floor_table(mode: Mode, seed=0) -> list:
    """The floors alone on one vector of each size: what no operator on n numbers can beat by much."""
    out = []
    for n in mode.sizes:
        X = np.random.default_rng([seed, n, 1]).standard_normal((1, n))
        for name in ("pass", "sort", "sort+isotonic"):
            out.append((n, name, time_floor(name, X, mode)))
    return out


def machine_stamp() -> dict:
    import platform
    import scipy
    cpu = "unknown"
    try:
        with open("/proc/cpuinfo") as fh:
            for line in fh:
                if line.startswith("model name"):
                    cpu = line.split(":", 1)[1].strip()
                    break
    except OSError:
        pass
    try:
        load = os.getloadavg()
    except OSError:
        load = (float("nan"),) * 3
    return {"platform": platform.platform(), "python": platform.python_version(), "cpu": cpu,
            "cores": os.cpu_count(), "numpy": np.__version__, "scipy": scipy.__version__,
            "setkit": setkit.__version__, "load": f"{load[0]:.2f} {load[1]:.2f} {load[2]:.2f}",
            "date": time.strftime("%Y-%m-%d %H:%M %Z")}


def run(mode="quick", kinds=None, ops=OPERATORS, out_dir=None, targets=True, plots=True, log=print,
        seed=0, publish=False) -> Result:
    """Run the benchmarks; write the report to ``out_dir`` (default benchmarks/out); return the rows."""
    from . import report
    from . import targets as tg
    m = {"quick": QUICK, "full": FULL}[mode]
    res = Result(mode=mode, machine=machine_stamp(), started=time.strftime("%Y-%m-%d %H:%M:%S"))
    t0 = time.perf_counter()
    res.floors = floor_table(m, seed)
    res.rows = sweep(m, kinds, ops, log, seed)
    if targets:
        res.targets = tg.check_targets(m, res.rows, log=log)
    res.seconds = time.perf_counter() - t0
    out_dir = out_dir or os.path.join(HERE, "out")
    report.write(res, out_dir, plots=plots)
    if publish:
        report.publish(res, out_dir, HERE)
    log(f"report written to {os.path.join(out_dir, 'RESULTS.md')} ({res.seconds:.1f} s)")
    return res


def main(argv=None):
    ap = argparse.ArgumentParser(prog="python -m benchmarks.run",
                                 description="Time every operator of every registered kind on every backend.")
    g = ap.add_mutually_exclusive_group()
    g.add_argument("--quick", action="store_const", dest="mode", const="quick",
                   help="small sizes, checks that every row runs and agrees with the reference (default)")
    g.add_argument("--full", action="store_const", dest="mode", const="full",
                   help="sizes 1e2..1e6, the speed targets at their stated sizes")
    ap.add_argument("--kinds", help="comma-separated kinds to run (default: every registered kind)")
    ap.add_argument("--ops", help=f"comma-separated operators (default: {','.join(OPERATORS)})")
    ap.add_argument("--out", help="output directory (default: benchmarks/out)")
    ap.add_argument("--no-targets", action="store_true", help="skip the targets section")
    ap.add_argument("--no-plots", action="store_true", help="skip the PNG plots")
    ap.add_argument("--publish", action="store_true",
                    help="also copy the report to benchmarks/RESULTS.md and the plots to benchmarks/plots/")
    a = ap.parse_args(argv)
    kinds = set(a.kinds.split(",")) if a.kinds else None
    ops = tuple(a.ops.split(",")) if a.ops else OPERATORS
    bad = [o for o in ops if o not in OPERATORS]
    if bad:
        ap.error(f"unknown operator(s) {', '.join(bad)}; the operators are {', '.join(OPERATORS)}")
    res = run(a.mode or "quick", kinds, ops, a.out, targets=not a.no_targets, plots=not a.no_plots,
              publish=a.publish)
    bad_rows = [r for r in res.rows if r.status.startswith("error") or r.agrees is False]
    return 1 if bad_rows else 0


if __name__ == "__main__":
    sys.exit(main())
