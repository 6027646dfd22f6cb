"""Description mutation fuzzer: mutated catalog entries and family examples, read by setkit.

Each case takes a seed description (a catalog entry, or a family's ``examples()``), applies 1..3
random mutations (delete or misspell a key, swap a value's type, huge/tiny/NaN/negative numbers,
nested junk, wrong shapes, another kind) and compiles it, in memory (``setkit.compile``) or from a
file (``setkit.load`` on YAML or JSON, sometimes with corrupted bytes or another text encoding).

Every outcome must be one of:

* compiled: a DecisionSet;
* refused: a setkit error (``setkit.errors.SetkitError``) whose message names the source (the
  file path, or ``<dict>``) and, for a DescriptionError, carries its location.

Anything else is a failure: a foreign exception, or an error without its source. Refusals that
came from the last-resort conversion in ``description.parse_node`` (messages with "(internal: ...)")
are counted separately: they are located, but each names a family reader that met a value it
does not handle itself.

    python3 -m benchmarks.fuzz_descriptions --cases 10000          # the reliability run
    python3 -m benchmarks.fuzz_descriptions --cases 200 --seed 3   # a quick look
"""
from __future__ import annotations

import argparse
import collections
import copy
import json
import os
import random
import signal
import tempfile
import time
import traceback
from pathlib import Path

import numpy as np
import yaml

CATALOG = Path(__file__).resolve().parent.parent / "catalog"

JUNK_VALUES = [
    None, True, False, "", "abc", "1e999", "-inf", "nan", "3.5", "x.npy", "missing.csv", "data.npz:nope",
    [], [[]], [[], []], [None], {}, {"a": 1}, {"kind": "simplex"}, [1, "two", 3], [[1, 2], [3]],
    0, -1, 1, 2, 3, 7, -0.0, 1e-320, 5e-324, 1e-300, 1e300, -1e300, 1e308, -1e308, 1.7976931348623157e308,
    float("nan"), float("inf"), float("-inf"), 2 ** 31, 2 ** 63, 2 ** 64 + 1, 10 ** 9, 10 ** 400, -10 ** 400,
    1e15, 1e16 + 1, 0.1, 1e6, -5, 12.5,
]


def _nested(depth):
    v = [1.0]
    for _ in range(depth):
        v = [v]
    return v


def _dict_nested(depth):
    v = {"kind": "simplex", "dim": 2}
    for _ in range(depth):
        v = {"kind": "product", "of": [v]}
    return v


def _paths(obj, prefix=()):
    """Every key path of a nested description (mappings and lists), down to 20 levels."""
    out = [prefix]
    if len(prefix) >= 20:
        return out
    if isinstance(obj, dict):
        for k, v in obj.items():
            out += _paths(v, prefix + (k,))
    elif isinstance(obj, list) and len(obj) <= 12:
        for i, v in enumerate(obj):
            out += _paths(v, prefix + (i,))
    return out


def _get(obj, path):
    for k in path:
        obj = obj[k]
    return obj


def _set(obj, path, value):
    if not path:
        return value
    parent = _get(obj, path[:-1])
    parent[path[-1]] = value
    return obj


def _misspell(key, rng):
    s = str(key)
    if len(s) < 2:
        return s + "x"
    i = rng.randrange(len(s))
    op = rng.randrange(4)
    if op == 0:
        return s[:i] + s[i + 1:]
    if op == 1 and i + 1 < len(s):
        return s[:i] + s[i + 1] + s[i] + s[i + 2:]
    if op == 2:
        return s[:i] + rng.choice("aeioustx") + s[i:]
    return s.upper() if s.islower() else s + "s"


def _mutate_number(v, rng):
    f = rng.choice([0.0, -1.0, 1e-300, 1e-17, 1e17, 1e300, 1e308, -1e308, float("nan"), float("inf")])
    with np.errstate(all="ignore"):
        try:
            return float(v) * f if f not in (0.0,) else 0.0
        except OverflowError:
            return float("inf")


def mutate(spec, rng):
    """One random mutation of a description (a deep copy is changed and returned)."""
    try:
        spec = copy.deepcopy(spec)
    except RecursionError:          # already nested beyond what deepcopy follows: keep it as it is
        return spec
    paths = _paths(spec)
    path = rng.choice(paths)
    target = _get(spec, path) if path else spec
    kind = rng.randrange(12)
    if kind == 0 and path:                                   # delete a key / an item
        parent = _get(spec, path[:-1])
        if isinstance(parent, dict):
            del parent[path[-1]]
        elif isinstance(parent, list) and len(parent) > 0:
            parent.pop(path[-1])
        return spec
    if kind == 1 and path and isinstance(_get(spec, path[:-1]), dict):   # misspell a key
        parent = _get(spec, path[:-1])
        parent[_misspell(path[-1], rng)] = parent.pop(path[-1])
        return spec
    if kind == 2:                                            # swap in a junk value
        return _set(spec, path, copy.deepcopy(rng.choice(JUNK_VALUES)))
    if kind == 3 and isinstance(target, (int, float)) and not isinstance(target, bool):
        if rng.random() < 0.5:           # a mild change of magnitude: the set often still compiles
            try:
                return _set(spec, path, float(target) * 10.0 ** rng.randint(-300, 300))
            except OverflowError:
                return _set(spec, path, float("inf"))
        return _set(spec, path, _mutate_number(target, rng))
    if kind == 4:                                            # nested junk
        return _set(spec, path, _nested(rng.choice([3, 40, 150, 400])))
    if kind == 5 and isinstance(target, list):               # wrong shapes
        choice = rng.randrange(4)
        if choice == 0:
            return _set(spec, path, [target])
        if choice == 1:
            return _set(spec, path, target[: max(0, len(target) - 1)])
        if choice == 2:
            return _set(spec, path, target + target[:1])
        return _set(spec, path, [[x] for x in target])
    if kind == 6 and isinstance(target, dict) and "kind" in target:    # another kind
        from setkit.families import known_kinds
        target["kind"] = rng.choice(sorted(known_kinds()) + ["simplx", "Simplex", "", "polytope"])
        return spec
    if kind == 7:                                            # a numpy array of a strange dtype / shape
        arr = rng.choice([np.array([1 + 2j, 3]), np.array(["a", "b"]), np.zeros((2, 0)), np.ones((2, 2, 2)),
                          np.array([1.0, np.nan]), np.arange(3), np.array(object())])
        return _set(spec, path, arr)
    if kind == 8 and isinstance(target, dict):               # an extra unknown key
        target[rng.choice(["totl", "dimm", "extra", "cols2", "of", "set", "upper", "nodes"])] = \
            copy.deepcopy(rng.choice(JUNK_VALUES))
        return spec
    if kind == 9:                                            # deep nesting of sets
        return _set(spec, path, _dict_nested(rng.choice([5, 60, 200])))
    if kind == 10 and isinstance(target, (int, float)) and not isinstance(target, bool):
        return _set(spec, path, rng.choice([10 ** 9, 2 ** 63, 10 ** 400, 1e308, -(10 ** 9), 10 ** 6]))
    if kind == 11 and isinstance(target, str):
        return _set(spec, path, rng.choice(["", target * 3, target.upper(), target + ".csv", "../" + target,
                                            "\x00", "é" * 3]))
    return _set(spec, path, copy.deepcopy(rng.choice(JUNK_VALUES)))


def seeds():
    """(name, description as plain data, base folder) for every catalog entry and family example."""
    out = []
    for p in sorted(CATALOG.iterdir()):
        if p.suffix in (".yaml", ".yml", ".json"):
            out.append((p.stem, yaml.safe_load(p.read_text(encoding="utf-8")), str(CATALOG)))
    from setkit.families import known_kinds, lookup
    for kind in sorted(known_kinds()):
        try:
            cls = lookup(kind)
        except Exception:  # pragma: no cover - every registered kind resolves
            continue
        ex = getattr(cls, "examples", None)
        for i, spec in enumerate(ex() if callable(ex) else []):
            if isinstance(spec, dict):
                out.append((f"{kind}-example-{i}", spec, str(CATALOG)))
    return out


class _Timeout(Exception):
    pass


def _on_alarm(signum, frame):
    raise _Timeout()


def _write_file(data, folder, rng, case):
    """Write the mutated description as YAML or JSON, sometimes with corrupted or re-encoded bytes."""
    ext = rng.choice([".yaml", ".json"])
    path = os.path.join(folder, f"case{case}{ext}")
    try:
        text = json.dumps(data, default=str) if ext == ".json" else yaml.safe_dump(data, allow_unicode=True)
    except (TypeError, ValueError, yaml.YAMLError, RecursionError):
        text = "kind: simplex\ndim: [\n"
    raw = text.encode("utf-8")
    r = rng.randrange(10)
    if r == 0:
        raw = text.encode("utf-16")
    elif r == 1:
        raw = text.encode("latin-1", errors="replace") + b"\xff\xfe\xfa"
    elif r == 2 and raw:
        i = rng.randrange(len(raw))
        raw = raw[:i] + bytes([rng.randrange(256)]) + raw[i + 1:]
    elif r == 3:
        raw = raw[: rng.randrange(len(raw) + 1)]
    with open(path, "wb") as fh:
        fh.write(raw)
    return path


def run(cases, seed=0, time_limit=20.0, file_share=0.3, verbose=False, skip=()):
    """Run ``cases`` mutated descriptions; returns a dict of counts and example failures.

    ``skip`` names seeds to leave out (the CI test leaves out the two whose compile takes about a
    second each, an intersection of balls and a catalog intersection; the full run keeps them).
    """
    import setkit
    from setkit.errors import DescriptionError, SetkitError

    rng = random.Random(seed)
    pool = [sd for sd in seeds() if sd[0] not in skip]
    counts = collections.Counter()
    failures = []
    internal = collections.Counter()
    slow = []
    folder = tempfile.mkdtemp(prefix="setkit-fuzz-")
    use_alarm = hasattr(signal, "SIGALRM")
    if use_alarm:
        old = signal.signal(signal.SIGALRM, _on_alarm)
    t_start = time.perf_counter()
    try:
        for case in range(cases):
            name, spec, base = rng.choice(pool)
            data = spec
            for _ in range(rng.choice((1, 1, 1, 2, 3))):
                data = mutate(data, rng)
            from_file = rng.random() < file_share
            t0 = time.perf_counter()
            source = None
            try:
                if use_alarm:
                    signal.setitimer(signal.ITIMER_REAL, time_limit)
                if from_file:
                    source = _write_file(data, folder, rng, case)
                    setkit.load(source)
                else:
                    source = "<dict>"
                    setkit.compile(data)
                counts["compiled"] += 1
            except _Timeout:
                counts["timeout"] += 1
                slow.append((name, time.perf_counter() - t0, _short(data)))
            except SetkitError as exc:
                msg = str(exc)
                located = source in msg
                if isinstance(exc, DescriptionError) and getattr(exc, "location", None) is None:
                    located = False
                if located:
                    counts["refused (located)"] += 1
                    if "(internal:" in msg:
                        internal[msg.split("(internal:", 1)[1].split(":", 1)[0].strip()] += 1
                else:
                    counts["FAIL unlocated"] += 1
                    failures.append((name, "unlocated " + type(exc).__name__, msg[:300], _short(data)))
            except Exception as exc:  # noqa: BLE001 - the point of the fuzzer
                counts["FAIL foreign"] += 1
                tb = traceback.extract_tb(exc.__traceback__)
                where = f"{tb[-1].filename.split('setkit/')[-1]}:{tb[-1].lineno}" if tb else "?"
                failures.append((name, f"{type(exc).__name__} at {where}", str(exc)[:300], _short(data)))
            finally:
                if use_alarm:
                    signal.setitimer(signal.ITIMER_REAL, 0)
            dt = time.perf_counter() - t0
            if dt > 5.0 and len(slow) < 50:
                slow.append((name, dt, _short(data)))
            if verbose and (case + 1) % 1000 == 0:
                print(f"  {case + 1} cases, {dict(counts)}", flush=True)
    finally:
        if use_alarm:
            signal.signal(signal.SIGALRM, old)
    return {"cases": cases, "counts": dict(counts), "failures": failures, "internal": dict(internal),
            "slow": slow, "seconds": time.perf_counter() - t_start}


def _short(data):
    import reprlib
    r = reprlib.Repr()
    r.maxlevel, r.maxlist, r.maxdict, r.maxstring = 4, 4, 6, 40
    try:
        return r.repr(data)
    except Exception:  # pragma: no cover
        return "<unprintable>"


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--cases", type=int, default=10_000)
    ap.add_argument("--seed", type=int, default=0)
    ap.add_argument("--time-limit", type=float, default=20.0, help="seconds per case before it counts as a timeout")
    a = ap.parse_args(argv)
    res = run(a.cases, a.seed, a.time_limit, verbose=True)
    print(f"{res['cases']} mutated descriptions in {res['seconds']:.1f} s (seed {a.seed})")
    for k, v in sorted(res["counts"].items()):
        print(f"  {k:>20}: {v}")
    if res["internal"]:
        print("  refusals by the last-resort conversion (located; reader to fix):", res["internal"])
    for name, what, msg, data in res["failures"][:40]:
        print(f"  FAIL {name}: {what}: {msg}\n       {data}")
    for name, dt, data in res["slow"][:10]:
        print(f"  slow {name}: {dt:.1f} s  {data}")
    fails = res["counts"].get("FAIL foreign", 0) + res["counts"].get("FAIL unlocated", 0)
    return 1 if fails else 0


if __name__ == "__main__":
    raise SystemExit(main())
