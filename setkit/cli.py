"""The command line.

    setkit inspect FILE            the family tree, shape, dimension and operator plan
    setkit verify FILE...          every operator against the cvxpy reference, with timings
    setkit run OPERATOR FILE [IN]  one operator on points read from .npy, .csv or .json
    setkit compare FILE            every backend that can serve each operator: time and agreement
    setkit draw FILE --out F.png   a picture of the set (or a 2-D slice), projections, LMO, centroid
    setkit catalog [NAME]          the ready descriptions, or one of them

Global options (before or after the command): --json (only JSON on stdout), --quiet, --dir FOLDER.

A FILE may also be the name of a catalog entry (``setkit verify weekly-channels``).
Exit codes: 0 ok, 1 a disagreement with the reference or a failed solve, 2 bad input or description.
"""
from __future__ import annotations

import argparse
import dataclasses
import json
import os
import sys
import threading
import time
from pathlib import Path

import numpy as np

from .agreement import DIRECT_DIM, compare_backends, verify
from .errors import DescriptionError, InputError, SetkitError, UnboundedDirectionError

EXIT_OK, EXIT_DISAGREE, EXIT_BAD_INPUT = 0, 1, 2
DESCRIPTION_SUFFIXES = (".yaml", ".yml", ".json")
POINT_OPERATORS = ("project", "distance", "lmo", "support", "contains", "violation", "penalty")
SET_OPERATORS = ("centroid", "sample")
CLEAR_LINE = "\r\033[K"     # carriage return + erase to the end of the line (ANSI, common practice)


class StepsOnly:
    """A view of a :class:`Progress` for inner work: shows its step text, leaves the count and total alone."""

    def __init__(self, progress):
        self.progress = progress
        self.total = None

    def set_step(self, step: str):
        self.progress.set_step(step)

    def advance(self, step: str = "", n: int = 1):
        self.progress.set_step(step)


# -- progress ------------------------------------------------------------------------------------
class Progress:
    """A progress line on stderr for anything that takes more than a second.

    Nothing is shown for quick work; after ``after`` seconds (default 1, or the
    environment variable SETKIT_PROGRESS_AFTER) a line with the current step and
    the elapsed time appears and is refreshed every half second (rewritten in
    place on a terminal, a new line at most every 2 s otherwise). Uses ``rich``
    when it is installed and stderr is a terminal.
    """

    def __init__(self, label: str, total: int | None = None, enabled: bool = True, stream=None):
        self.label = label
        self.total = total
        self.done = 0
        self.step = ""
        self.stream = stream if stream is not None else sys.stderr
        self.enabled = enabled
        self.after = float(os.environ.get("SETKIT_PROGRESS_AFTER", "1.0"))
        self._stop = threading.Event()
        self._thread = None
        self._shown = False
        self._last_line = 0.0
        self._rich = None
        self._lock = threading.Lock()

    def __enter__(self):
        self.t0 = time.perf_counter()
        if self.enabled:
            self._thread = threading.Thread(target=self._loop, daemon=True)
            self._thread.start()
        return self

    def advance(self, step: str = "", n: int = 1):
        self.done += n
        self.step = step

    def set_step(self, step: str):
        self.step = step

    def clear(self):
        """Erase the progress line on a terminal, so the next line of output starts clean."""
        if self._shown and self._rich is None and hasattr(self.stream, "isatty") and self.stream.isatty():
            with self._lock:
                self.stream.write(CLEAR_LINE)
                self.stream.flush()

    def _text(self):
        el = time.perf_counter() - self.t0
        count = f" {self.done}/{self.total}" if self.total else ""
        step = f" ({self.step})" if self.step else ""
        return f"setkit: {self.label}{count}{step}, {el:.1f} s"

    def _loop(self):
        tty = hasattr(self.stream, "isatty") and self.stream.isatty()
        if self._stop.wait(self.after):
            return
        if tty:
            try:
                from rich.console import Console  # optional
                self._rich = Console(file=self.stream).status(self._text())
                self._rich.start()
            except Exception:  # noqa: BLE001 - rich is optional
                self._rich = None
        while True:
            self._shown = True
            now = time.perf_counter()
            if self._rich is not None:
                self._rich.update(self._text())
            elif tty:
                with self._lock:
                    self.stream.write(CLEAR_LINE + self._text())
                    self.stream.flush()
            elif now - self._last_line >= 2.0:
                self.stream.write(self._text() + "\n")
                self.stream.flush()
                self._last_line = now
            if self._stop.wait(0.5):
                return

    def __exit__(self, *exc):
        self._stop.set()
        if self._thread is not None:
            self._thread.join()
        if self._rich is not None:
            self._rich.stop()
        else:
            self.clear()
        return False


# -- files ---------------------------------------------------------------------------------------
def catalog_dir() -> Path:
    """The catalog folder: $SETKIT_CATALOG, else catalog/ beside the package, else ./catalog."""
    env = os.environ.get("SETKIT_CATALOG")
    if env:
        return Path(env)
    here = Path(__file__).resolve().parent.parent / "catalog"
    return here if here.is_dir() else Path("catalog")


def catalog_entries(folder: Path | None = None) -> list[Path]:
    folder = Path(folder) if folder is not None else catalog_dir()
    if not folder.is_dir():
        return []
    return sorted(p for p in folder.iterdir() if p.suffix.lower() in DESCRIPTION_SUFFIXES)


def resolve(target: str, folder: Path | None = None) -> str:
    """A description file path, or the file of a catalog entry named ``target``."""
    if os.path.exists(target):
        if os.path.isdir(target):
            raise DescriptionError(f"description ({target}): this is a folder; give a .yaml, .yml or .json file.")
        return target
    folder = Path(folder) if folder is not None else catalog_dir()
    for suffix in ("",) + DESCRIPTION_SUFFIXES:
        p = folder / (target + suffix)
        if p.is_file():
            return str(p)
    names = ", ".join(p.stem for p in catalog_entries(folder)) or "(none found)"
    raise DescriptionError(f"description ({target}): no such file, and no catalog entry of that name in "
                           f"{folder}; the catalog entries are {names}.")


def _about(path: str) -> str:
    from .description import read_file
    try:
        data = read_file(path)
    except SetkitError:
        return ""
    return str(data.get("about", "")) if isinstance(data, dict) else ""


def _load(target, folder=None):
    from . import load
    path = resolve(target, folder)
    return path, load(path)


def read_points(source: str, K, argname: str = "points") -> np.ndarray:
    """Points from a .npy, .csv or .json file, '-' (JSON on stdin) or inline JSON text.

    The array's trailing axes must be K.shape, or each row must hold K.dim numbers
    (C order), which are reshaped to K.shape.
    """
    shape = K.shape
    what = f"{argname} {source!r}"
    if source == "-":
        text, kind = sys.stdin.read(), "json"
    elif source.lower().endswith((".npy", ".csv", ".json")):
        if not os.path.exists(source):
            raise InputError(f"{what}: the file does not exist.")
        kind, text = source.lower().rsplit(".", 1)[1], None
    elif source.lstrip()[:1] in "[{-0123456789.":
        text, kind = source, "json"
    else:
        raise InputError(f"{what}: expected a .npy, .csv or .json file, '-' for JSON on standard input, or "
                         f"inline JSON such as '[0.1, 0.2]'.")
    try:
        if kind == "npy":
            arr = np.load(source, allow_pickle=False)
        elif kind == "csv":
            arr = np.loadtxt(source, delimiter=",", ndmin=2, comments="#")
        else:
            data = json.loads(text) if text is not None else json.load(open(source, encoding="utf-8"))
            if isinstance(data, dict):
                if "points" not in data:
                    raise InputError(f"{what}: a JSON object must hold the points under the key 'points'; "
                                     f"it has {', '.join(map(str, data)) or 'no keys'}.")
                data = data["points"]
            arr = np.asarray(data, dtype=float)
    except InputError:
        raise
    except json.JSONDecodeError as exc:
        raise InputError(f"{what}: not valid JSON at line {exc.lineno}, column {exc.colno}: {exc.msg}.") from None
    except (ValueError, TypeError, OSError) as exc:
        raise InputError(f"{what}: could not read numbers: {exc}.") from None
    if arr.dtype == object or not np.issubdtype(arr.dtype, np.number):
        raise InputError(f"{what}: expected numbers; got {arr.dtype} data.")
    arr = np.asarray(arr, dtype=float)
    k = len(shape)
    if arr.ndim >= k and tuple(arr.shape[arr.ndim - k:]) == shape:
        pass
    elif arr.ndim in (1, 2) and arr.shape[-1] == K.dim:
        arr = arr.reshape((-1,) + shape) if arr.ndim == 2 else arr.reshape(shape)
    else:
        raise InputError(f"{what}: each point must have shape {shape} ({K.dim} numbers); got an array of "
                         f"shape {arr.shape}.")
    if not np.all(np.isfinite(arr)):
        bad = tuple(int(i) for i in np.argwhere(~np.isfinite(arr))[0])
        raise InputError(f"{what}: every entry must be a finite number; got {arr[bad]} at index {bad}.")
    return arr


def _dumps(payload: dict) -> str:
    """JSON with one top-level key per line and arrays kept on one line."""
    items = [f"  {json.dumps(k)}: {json.dumps(v, default=_json_default)}" for k, v in payload.items()]
    return "{\n" + ",\n".join(items) + "\n}"


def write_result(out: str | None, payload: dict, array) -> None:
    single = payload.pop("single", False)
    if out is None:
        print(_dumps(payload))
        return
    low = out.lower()
    arr = np.asarray(array)
    if low.endswith(".npy"):
        np.save(out, arr)
    elif low.endswith(".csv"):
        a = arr.astype(float)
        a = a.reshape(1, -1) if a.ndim <= 1 and single else a
        np.savetxt(out, a.reshape(a.shape[0], -1) if a.ndim > 1 else a.reshape(-1, 1), delimiter=",", fmt="%.17g")
    elif low.endswith(".json"):
        with open(out, "w", encoding="utf-8") as fh:
            fh.write(_dumps(payload) + "\n")
    else:
        raise InputError(f"--out {out!r}: the result file must end in .npy, .csv or .json.")
    print(f"wrote {payload['operator']} of {payload['count']} point(s) to {out}", file=sys.stderr)


def _json_default(o):
    if isinstance(o, np.ndarray):
        return o.tolist()
    if isinstance(o, (np.floating, np.integer, np.bool_)):
        return o.item()
    if isinstance(o, (tuple, set, frozenset)):
        return list(o)
    return str(o)


# -- inspect -------------------------------------------------------------------------------------
def _array_summary(v) -> dict:
    return {"array_shape": [int(n) for n in v.shape], "dtype": str(getattr(v, "dtype", "float64"))}


def _parameters(node) -> dict:
    """The node's public parameters as JSON-ready values (arrays of more than 6 numbers as their shape)."""
    out = {}
    if not dataclasses.is_dataclass(node):
        return out
    for f in dataclasses.fields(node):
        if f.name == "name" or f.name.startswith("_") or not f.repr:
            continue
        v = getattr(node, f.name)
        if isinstance(v, np.ndarray):
            out[f.name] = v.tolist() if v.size <= 6 else _array_summary(v)
        elif hasattr(v, "toarray"):
            out[f.name] = {**_array_summary(v), "sparse": True}
        elif isinstance(v, (bool, int, float, str)) or v is None:
            out[f.name] = v
        elif isinstance(v, (np.integer, np.floating, np.bool_)):
            out[f.name] = v.item()
        elif isinstance(v, (tuple, list)) and v and all(hasattr(c, "kind") for c in v):
            continue   # children, shown as parts
        elif hasattr(v, "kind") and hasattr(v, "shape"):
            continue
        elif callable(v):
            out[f.name] = getattr(v, "__qualname__", type(v).__name__)
        elif isinstance(v, (tuple, list, frozenset)) and all(isinstance(x, (bool, int, float, str)) for x in v):
            out[f.name] = list(v) if len(v) <= 6 else {"length": len(v)}
        else:
            out[f.name] = type(v).__name__
    return out


def tree(node) -> dict:
    """The family tree of a compiled node as JSON-ready dicts (kind, name, shape, dim, traits, parameters, parts)."""
    return {"kind": node.kind, "name": node.name, "shape": [int(n) for n in node.shape], "dim": int(node.dim),
            "traits": sorted(node.traits), "parameters": _parameters(node),
            "parts": [tree(c) for c in node.children()]}


def _tree_lines(t, depth=0):
    name = f" '{t['name']}'" if t["name"] else ""
    params = ", ".join(f"{k}={_short(v)}" for k, v in t["parameters"].items())
    if len(params) > 160:
        params = params[:157] + "..."
    lines = ["  " * depth + f"- {t['kind']}{name}: shape {tuple(t['shape'])}" + (f"; {params}" if params else "")]
    for p in t["parts"]:
        lines.extend(_tree_lines(p, depth + 1))
    return lines


def _short(v):
    if isinstance(v, dict) and "array_shape" in v:
        return f"array of shape {tuple(v['array_shape'])}"
    s = json.dumps(v, default=_json_default) if not isinstance(v, str) else v
    return s if len(s) <= 48 else s[:45] + "..."


def _print_json(data) -> None:
    print(json.dumps(data, indent=2, default=_json_default))


def _cmd_inspect(args) -> int:
    with Progress(f"inspect {args.file}", enabled=not args.quiet):
        path, K = _load(args.file, args.dir)
    t = tree(K.node)
    plan = {op: {"provider": r.provider, "reason": r.reason} for op, r in K.routes().items()}
    if args.json:
        _print_json({"file": path, "about": _about(path), "shape": list(K.shape), "dim": K.dim,
                     "tree": t, "plan": plan})
        return EXIT_OK
    about = _about(path)
    print(f"file:      {path}")
    if about:
        print(f"about:     {about}")
    print(f"shape:     {K.shape}")
    print(f"dimension: {K.dim}")
    print("tree:")
    for line in _tree_lines(t, 1):
        print(line)
    print("plan:")
    for line in K.explain().splitlines():
        print("  " + line)
    return EXIT_OK


# -- tables ----------------------------------------------------------------------------------------
def format_table(header: list, rows: list, right: set = frozenset(), indent: str = "  ") -> str:
    """Columns sized to their widest cell (header included); columns whose index is in ``right`` right-aligned.

    The last column is left unpadded (free text such as notes).
    """
    cells = [list(map(str, header))] + [list(map(str, r)) for r in rows]
    n = len(header)
    widths = [max(len(r[j]) for r in cells) for j in range(n)]
    out = []
    for r in cells:
        parts = [(r[j].rjust(widths[j]) if j in right else r[j].ljust(widths[j])) for j in range(n - 1)]
        out.append((indent + "  ".join(parts + [r[n - 1]])).rstrip())
    return "\n".join(out)


def _compare_table(rows) -> str:
    body = []
    for r in rows:
        ms = "-" if r["ms_per_call"] is None else f"{r['ms_per_call']:.4f}"
        gap = "-" if r["max_gap"] is None else f"{r['max_gap']:.2e}"
        verdict = "FAILED" if r.get("failed") else {True: "agrees", False: "DISAGREES", None: "-"}[r["agrees"]]
        body.append([r["operator"], r["provider"], r["cases"], ms, gap, f"{r['allowed']:.0e}",
                     verdict + (f"  {r['note']}" if r["note"] else "")])
    return format_table(["operator", "provider", "cases", "warm ms/call", "max gap", "allowed", "verdict"], body,
                        right={2, 3, 4, 5})


def _verify_table(rep) -> str:
    body = []
    for r in rep.rows:
        n = max(r.cases, 1)
        body.append([r.operator, r.route, r.cases, f"{r.max_error:.2e}", f"{r.allowed:.1e}",
                     f"{1e3 * r.seconds / n:.4f}", f"{1e3 * r.reference_seconds / n:.3f}",
                     ("ok" if r.ok else "FAIL") + (f"  {r.note}" if r.note else "")])
    return format_table(["operator", "route", "cases", "max error", "allowed", "warm ms/pt", "ref ms/pt", "verdict"],
                        body, right={2, 3, 4, 5, 6})


# -- verify ----------------------------------------------------------------------------------------
FIRST_CALL_OPERATORS = ("project", "distance", "contains", "lmo", "support")


def first_call_ms(K) -> dict:
    """Milliseconds of the first call of each operator (one point, then a batch of two) in this process.

    The first call includes just-in-time compilation of the compiled kernels and the setup of
    generic solvers; the timings of :func:`setkit.agreement.verify` measured afterwards are
    warm, per-call times. Operators that raise (e.g. lmo on an unbounded set) are timed as well.
    """
    y = np.zeros(K.shape)
    Y = np.zeros((2,) + tuple(K.shape))
    out = {}
    for op in FIRST_CALL_OPERATORS:
        t0 = time.perf_counter()
        for arg in (y, Y):
            try:
                getattr(K, op)(arg)
            except SetkitError:
                pass
        out[op] = 1e3 * (time.perf_counter() - t0)
    return out


def _say(args, prog, text: str) -> None:
    """Human text on stdout, unless --json asked for JSON only."""
    if args.json:
        return
    if prog is not None:
        prog.clear()
    print(text, flush=True)


def _positive(value, option: str) -> None:
    if value < 1:
        raise InputError(f"{option} must be a whole number of at least 1; got {value}.")


def _cmd_verify(args) -> int:
    _positive(args.points, "--points")
    status = EXIT_OK
    reports = []
    with Progress("verify", total=len(args.files), enabled=not args.quiet) as prog:
        for target in args.files:
            prog.set_step(target)
            path, K = _load(target, args.dir)   # description errors -> exit 2
            t0 = time.perf_counter()
            try:
                prog.set_step(f"{target}: first calls")
                first = first_call_ms(K)
                rep = verify(K, n_points=args.points, seed=args.seed,
                             progress=lambda text, target=target: prog.set_step(f"{target}: {text}"))
            except (DescriptionError, InputError):
                raise
            except SetkitError as exc:
                _say(args, prog, f"{path}: FAILED: {type(exc).__name__}: {exc}")
                reports.append({"file": path, "set": K.node.label, "shape": list(K.shape), "ok": False,
                                "error": f"{type(exc).__name__}: {exc}"})
                status = EXIT_DISAGREE
                prog.advance(target)
                continue
            d = rep.as_dict()
            for row in d["rows"]:
                row["ms_per_point"] = 1e3 * row["seconds"] / max(row["cases"], 1)
            entry = {"file": path, **d, "first_call_ms": first, "seconds": time.perf_counter() - t0}
            head = rep.text().splitlines()[0]
            ref_line = (f"\n  reference: {rep.reference.get('reason', '')}"
                        if rep.reference.get("mode") not in (None, "full") else "")
            _say(args, prog, f"{path}: {head}\n{_verify_table(rep)}{ref_line}\n  first calls in this process, including "
                             f"compilation (paid once): " + ", ".join(f"{op} {ms:.1f} ms" for op, ms in first.items())
                 + "\n  warm ms/pt: per point of a batch after the first call; ref ms/pt: the cvxpy reference")
            if K.dim > DIRECT_DIM and not args.no_timings:
                entry["backends"] = None
                _say(args, prog, f"  backend timings skipped: {K.dim} coordinates is above {DIRECT_DIM}, where every "
                                 f"generic backend would be timed (run `setkit compare` to force them)")
            elif not args.no_timings:
                timing = compare_backends(K, n_points=max(1, args.points // 2), seed=args.seed, repeat=1,
                                          progress=StepsOnly(prog))
                entry["backends"] = timing
                _say(args, prog, "  warm timings and agreement of every backend that can serve each operator:\n"
                     + "\n".join("  " + line for line in _compare_table(timing).splitlines()))
                # informational: only the default plan (the report above) decides the exit code
            reports.append(entry)
            if not rep.ok:
                status = EXIT_DISAGREE
            prog.advance(target)
    if args.json:
        _print_json(reports)
    return status


# -- compare ---------------------------------------------------------------------------------------
def _cmd_compare(args) -> int:
    _positive(args.points, "--points")
    _positive(args.repeat, "--repeat")
    path, K = _load(args.file, args.dir)
    with Progress(f"compare {path}", enabled=not args.quiet) as prog:
        first = first_call_ms(K)
        rows = compare_backends(K, n_points=args.points, seed=args.seed, repeat=args.repeat,
                                progress=StepsOnly(prog))
        prog.clear()
    bad = [r for r in rows if r["agrees"] is False or r.get("failed")]
    if args.json:
        _print_json({"file": path, "set": K.node.label, "shape": list(K.shape), "repeat": args.repeat,
                     "first_call_ms": first, "rows": rows})
        return EXIT_DISAGREE if bad else EXIT_OK
    print(f"{path}: {K.node.label}, shape {K.shape}; warm time per call, median of {args.repeat} run(s) after "
          f"the first call; gaps relative to the cvxpy reference")
    print(_compare_table(rows))
    print("first calls of the default plan, including compilation (paid once): "
          + ", ".join(f"{op} {ms:.1f} ms" for op, ms in first.items()))
    fastest = {}
    for r in rows:
        if r["agrees"] and r["ms_per_call"] is not None:
            cur = fastest.get(r["operator"])
            if cur is None or r["ms_per_call"] < cur["ms_per_call"]:
                fastest[r["operator"]] = r
    if fastest:
        print("fastest agreeing: " + ", ".join(f"{op} {r['provider']}" for op, r in fastest.items()))
    if bad:
        print("not agreeing or failing: " + ", ".join(f"{r['operator']} {r['provider']}" for r in bad))
    return EXIT_DISAGREE if bad else EXIT_OK


# -- run -------------------------------------------------------------------------------------------
def _check_out(out):
    if out is None:
        return
    if not out.lower().endswith((".npy", ".csv", ".json")):
        raise InputError(f"--out {out!r}: the result file must end in .npy, .csv or .json.")
    folder = os.path.dirname(os.path.abspath(out))
    if not os.path.isdir(folder):
        raise InputError(f"--out {out!r}: the folder {folder} does not exist; create it first or write elsewhere.")


def _cmd_run(args) -> int:
    _check_out(args.out)
    path, K = _load(args.file, args.dir)
    if args.backend:
        op = "project" if args.operator == "penalty" else args.operator
        if op in SET_OPERATORS:
            raise InputError(f"--backend does not apply to {args.operator}.")
        K = K.with_backends(**{op: args.backend})
    op = args.operator
    payload = {"operator": op, "set": K.node.label, "file": path, "shape": list(K.shape)}
    with Progress(f"run {op}", enabled=not args.quiet) as prog:
        if op in SET_OPERATORS:
            if args.points is not None or args.at is not None:
                raise InputError(f"{op} takes no points; drop the points argument.")
            rng = np.random.default_rng(args.seed)
            if op == "centroid":
                res = K.centroid(measure=args.measure)
                point = getattr(res, "point", res)
                payload.update(count=1, single=True, measure=args.measure, result=np.asarray(point))
                for key in ("standard_error", "exact", "method", "effective_samples"):
                    if hasattr(res, key):
                        payload[key] = getattr(res, key)
                arr = np.asarray(point)
            else:
                _positive(args.count, "--count")
                arr = np.asarray(K.sample(args.count, measure=args.measure, rng=rng))
                payload.update(count=args.count, measure=args.measure, seed=args.seed, result=arr)
            prog.clear()
            write_result(args.out, payload, arr)
            return EXIT_OK
        source = args.at if args.at is not None else args.points
        if source is None:
            raise InputError(f"{op} needs points: give a .npy, .csv or .json file, '-' for standard input, "
                             f"or --at '[...]'.")
        X = read_points(source, K, "--at" if args.at is not None else "points")
        single = X.shape == K.shape
        payload.update(count=1 if single else int(np.prod(X.shape[: X.ndim - len(K.shape)])), single=single)
        if op == "penalty":
            if args.G is None:
                raise InputError("penalty needs --G (the factor G of G * dist(x, K); --weight is the old name).")
            pen = K.penalty(args.G, smoothing=args.smoothing, width=args.width)
            Xb = X.reshape((-1,) + K.shape)
            vals = np.array([float(np.asarray(pen.value(x))) for x in Xb])
            grads = np.stack([np.asarray(pen.grad(x), float) for x in Xb])
            payload.update(G=args.G, smoothing=args.smoothing, width=args.width,
                           result=vals[0] if single else vals, gradient=grads[0] if single else grads)
            prog.clear()
            write_result(args.out, payload, vals)
            return EXIT_OK
        if op == "contains":
            res = K.contains(X, tol=args.tol)
        elif op in ("project", "lmo") and args.details:
            d = K.project(X, details=True) if op == "project" else K.lmo(X, details=True)
            res = d.point
            payload.update(status=d.status, route=d.route, residual=d.residual, certificate=d.certificate,
                           seconds=d.seconds)
        else:
            res = getattr(K, op)(X)
        payload["result"] = np.asarray(res)
        prog.clear()
        write_result(args.out, payload, res)
    return EXIT_OK


# -- draw ------------------------------------------------------------------------------------------
def _cmd_draw(args) -> int:
    from .pictures import draw, parse_axes
    _positive(args.points, "--points")
    if not args.out.lower().endswith((".png", ".svg")):
        raise InputError(f"--out {args.out!r}: the picture file must end in .png or .svg.")
    _check_folder(args.out)
    path, K = _load(args.file, args.dir)
    at = read_points(args.at, K, "--at") if args.at is not None else None
    with Progress(f"draw {path}", enabled=not args.quiet) as prog:
        fig = draw(K, at=at, axes=parse_axes(args.axes), mode=args.mode, points=args.points, seed=args.seed,
                   measure=args.measure)
        fig.savefig(args.out, dpi=args.dpi)
        prog.clear()
    if args.json:
        _print_json({"file": path, "set": K.node.label, "shape": list(K.shape), "out": args.out,
                     "drawing": fig.setkit_drawing})
    else:
        print(f"wrote a picture of {K.node.label} to {args.out}")
    return EXIT_OK


def _check_folder(out):
    folder = os.path.dirname(os.path.abspath(out))
    if not os.path.isdir(folder):
        raise InputError(f"--out {out!r}: the folder {folder} does not exist; create it first or write elsewhere.")


# -- catalog ---------------------------------------------------------------------------------------
def _catalog_row(p, load):
    try:
        K = load(p)
        kind, shape = K.node.label, [int(n) for n in K.shape]
    except SetkitError as exc:
        msg = str(exc)
        why = msg[msg.index("unknown kind"):].split(";")[0] if "unknown kind" in msg else "see: setkit inspect"
        kind, shape = "(does not compile here)", None
        return (p.stem, kind, shape, _about(str(p)), why)
    return (p.stem, kind, shape, _about(str(p)), "")


def _cmd_catalog(args) -> int:
    folder = Path(args.dir) if args.dir else catalog_dir()
    if args.name:
        path = resolve(args.name, folder)
        text = Path(path).read_text(encoding="utf-8").rstrip()
        try:
            from . import load
            K = load(path)
            info, code = {"set": K.node.label, "shape": list(K.shape), "dim": K.dim}, EXIT_OK
        except SetkitError as exc:
            info, code = {"error": str(exc)}, EXIT_BAD_INPUT
        if args.json:
            _print_json({"name": Path(path).stem, "file": path, "text": text, **info})
            return code
        print(f"# {path}")
        print(text)
        print()
        if code == EXIT_OK:
            print(f"# compiles to {info['set']}, shape {tuple(info['shape'])}, dimension {info['dim']}")
        else:
            print(f"# does not compile here: {info['error']}")
        return code
    entries = catalog_entries(folder)
    if not entries:
        raise DescriptionError(f"catalog ({folder}): no .yaml, .yml or .json descriptions found; set "
                               f"SETKIT_CATALOG or --dir to the catalog folder.")
    from . import load
    rows = []
    with Progress("catalog", total=len(entries), enabled=not args.quiet) as prog:
        for p in entries:
            prog.advance(p.stem)
            rows.append(_catalog_row(p, load))
        prog.clear()
    if args.json:
        _print_json([dict(name=a, set=b, shape=c, about=d, **({"error": e} if e else {})) for a, b, c, d, e in rows])
        return EXIT_OK
    print(f"catalog: {folder} ({len(rows)} entries; show one with: setkit catalog NAME)")
    print(format_table(["name", "set", "shape", "about"],
                       [[a, b, str(tuple(c)) if c is not None else f"- ({e})", d] for a, b, c, d, e in rows]))
    return EXIT_OK


# -- parser ----------------------------------------------------------------------------------------
class _Parser(argparse.ArgumentParser):
    """argparse with one-line errors: ``setkit: <message> (see: setkit COMMAND --help)``, exit status 2."""

    def error(self, message):
        self.exit(EXIT_BAD_INPUT, f"setkit: {message} (see: {self.prog} --help)\n")


def _global_options(parser, top: bool) -> None:
    # the same options on the top parser and on every command, so they work in any position; on the
    # commands they default to SUPPRESS so they do not overwrite a value given before the command
    default = (lambda v: v) if top else (lambda v: argparse.SUPPRESS)
    parser.add_argument("--dir", metavar="FOLDER", default=default(None),
                        help="the catalog folder (default: $SETKIT_CATALOG or ./catalog)")
    parser.add_argument("--quiet", action="store_true", default=default(False), help="no progress line on stderr")
    parser.add_argument("--json", action="store_true", default=default(False),
                        help="write only JSON to stdout (no human text); save it with > FILE")


def build_parser() -> argparse.ArgumentParser:
    p = _Parser(
        prog="setkit", description="Compile convex decision sets into verified operators.",
        epilog="A FILE may be a description file or the name of a catalog entry. --dir, --quiet and --json "
               "may be given before or after the command. Exit codes: 0 ok, 1 disagreement or failed solve, "
               "2 bad input or description.")
    _global_options(p, top=True)
    sub = p.add_subparsers(dest="command", required=True, metavar="COMMAND")

    def command(name, **kw):
        c = sub.add_parser(name, **kw)
        _global_options(c, top=False)
        return c

    i = command("inspect", help="family tree, shape, dimension and operator plan of a description")
    i.add_argument("file", help="description file or catalog name")
    i.set_defaults(run=_cmd_inspect)

    v = command("verify", help="compare every operator of a description with the cvxpy reference")
    v.add_argument("files", nargs="+", help="description files (.yaml, .yml or .json) or catalog names")
    v.add_argument("--points", type=int, default=4, help="random points per category (inside, near, far); >= 1")
    v.add_argument("--seed", type=int, default=0, help="seed of the random points and directions")
    v.add_argument("--no-timings", action="store_true", help="skip the per-backend timing table")
    v.set_defaults(run=_cmd_verify)

    r = command("run", help="run one operator on points read from .npy, .csv or .json")
    r.add_argument("operator", choices=POINT_OPERATORS + SET_OPERATORS)
    r.add_argument("file", help="description file or catalog name")
    r.add_argument("points", nargs="?", help="points: .npy, .csv or .json file, or '-' for JSON on stdin")
    r.add_argument("--at", metavar="JSON", help="the points as inline JSON, e.g. '[0.2, 0.9, 0.1]'")
    r.add_argument("--out", metavar="FILE", help="write the result to a .npy, .csv or .json file")
    r.add_argument("--backend", help="serve the operator by this provider (native, derived or a backend name)")
    r.add_argument("--details", action="store_true", help="project/lmo: also status, residual, certificate")
    r.add_argument("--tol", type=float, help="contains: absolute tolerance")
    r.add_argument("--measure", default="volume", help="centroid/sample: volume, vertices or directions")
    r.add_argument("--count", type=int, default=10, help="sample: how many points")
    r.add_argument("--seed", type=int, default=0, help="sample: seed")
    r.add_argument("--G", "--weight", dest="G", type=float, metavar="G",
                   help="penalty: the factor G of G * dist(x, K), as in K.penalty(G=...); --weight is the old "
                        "name, still accepted")
    r.add_argument("--smoothing", choices=("moreau", "ball"), help="penalty: smoothing")
    r.add_argument("--width", type=float, help="penalty: smoothing width")
    r.set_defaults(run=_cmd_run)

    c = command("compare", help="time every backend on a description and check their agreement")
    c.add_argument("file", help="description file or catalog name")
    c.add_argument("--points", type=int, default=4, help="random points per category; >= 1")
    c.add_argument("--repeat", type=int, default=3, help="runs per provider, the median is shown; >= 1")
    c.add_argument("--seed", type=int, default=0)
    c.set_defaults(run=_cmd_compare)

    d = command("draw", help="a picture of a set (or a 2-D slice of it) with projections, LMO and centroid")
    d.add_argument("file", help="description file or catalog name")
    d.add_argument("--out", required=True, metavar="FILE", help="the picture: a .png or .svg file")
    d.add_argument("--at", metavar="JSON", help="the centre of the sample points (default: the centroid)")
    d.add_argument("--axes", default="0,1", help="the two coordinates drawn, e.g. '0,1' or '2,5' (default 0,1)")
    d.add_argument("--mode", choices=("shadow", "slice"), default="shadow",
                   help="higher dimensions: 'shadow' (orthogonal projection of the set on the two axes) or "
                        "'slice' (the points of the set that agree with --at on every other coordinate)")
    d.add_argument("--points", type=int, default=6, help="sample points whose projections are drawn; >= 1")
    d.add_argument("--seed", type=int, default=0, help="seed of the sample points")
    d.add_argument("--measure", default="volume", choices=("volume", "vertices", "directions"),
                   help="the measure of the centroid drawn (directions is the cheapest on combinatorial sets)")
    d.add_argument("--dpi", type=int, default=100, help="PNG resolution")
    d.set_defaults(run=_cmd_draw)

    g = command("catalog", help="list the catalog, or show one entry")
    g.add_argument("name", nargs="?", help="an entry to show")
    g.set_defaults(run=_cmd_catalog)
    return p


def main(argv=None) -> int:
    parser = build_parser()
    try:
        args = parser.parse_args(argv)
    except SystemExit as exc:   # argparse: usage errors exit 2, --help exits 0
        return int(exc.code or 0)
    for key in ("dir", "quiet", "json"):
        if not hasattr(args, key):
            setattr(args, key, None)
    try:
        return args.run(args)
    except (DescriptionError, InputError, UnboundedDirectionError) as exc:
        print(f"setkit: {exc}", file=sys.stderr)
        return EXIT_BAD_INPUT
    except SetkitError as exc:
        print(f"setkit: {type(exc).__name__}: {exc}", file=sys.stderr)
        return EXIT_DISAGREE if not isinstance(exc, (ImportError, NotImplementedError)) else EXIT_BAD_INPUT
    except (ImportError, ModuleNotFoundError) as exc:
        print(f"setkit: this operator is not available in this installation: {exc}", file=sys.stderr)
        return EXIT_BAD_INPUT
    except BrokenPipeError:
        # the reader of our output went away (e.g. `setkit verify ... | head`): stop quietly with
        # the shell's status for a closed pipe, 128 + SIGPIPE (common practice); the verdict is unknown
        try:
            sys.stdout = open(os.devnull, "w")
        except OSError:
            pass
        return 141
    except KeyboardInterrupt:
        print("setkit: interrupted", file=sys.stderr)
        return 130


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
