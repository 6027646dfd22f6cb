"""Descriptions (YAML/JSON files, dicts, builders) -> immutable node tree.

Every error names the object, the file and the key path inside it, what was
expected and what was given, e.g.::

    budget 'weekly' (catalog/ads.yaml: set.of[1].total): total must be at most
    the sum of upper bounds, 2.0; got 3.0.
"""
from __future__ import annotations

import difflib
import json
import os
import reprlib
import weakref
from dataclasses import dataclass
from numbers import Integral, Real
from typing import Mapping

import numpy as np

from .errors import DescriptionError

_REQUIRED = object()
_ORIGINS: "weakref.WeakKeyDictionary" = weakref.WeakKeyDictionary()   # node -> Location it was read at
ARRAY_SUFFIXES = (".npy", ".npz", ".csv")

# Size limits: a description that exceeds one is refused with a message naming the limit, before
# anything of that size is allocated.
def show_count(v: int) -> str:
    """A whole number for a message: itself below 10^20, else its magnitude (no float overflow, and no
    decimal conversion of a number with thousands of digits)."""
    if -10 ** 20 < v < 10 ** 20:
        return f"{v}"
    if abs(v) < 10 ** 300:
        return f"about {float(v):.3g}"
    return f"a number of about {int(abs(v).bit_length() * 0.30103) + 1} digits"


MAX_SIZE = 10 ** 8             # any count read by Reader.integer (dimensions, nodes, copies, ...)
MAX_DEPTH = 100                # nesting of lists and mappings in a description
MAX_VALUES = 10 ** 7           # entries of a description counted with YAML aliases expanded
MAX_FILE_BYTES = 256 * 2 ** 20  # size of a description file
_KEYWORDS = ("kind", "name", "about")

_short = reprlib.Repr()
_short.maxlevel = 3
_short.maxlist = _short.maxtuple = _short.maxdict = 6
_short.maxstring = _short.maxother = 60


@dataclass(frozen=True)
class Location:
    """Where a value sits: the source (file path, '<dict>' or 'argument') and the key path."""

    source: str = "<dict>"
    path: tuple = ()
    base_dir: str | None = None

    def child(self, key) -> "Location":
        return Location(self.source, self.path + (key,), self.base_dir)

    def key_path(self) -> str:
        path = self.path
        if len(path) > 16:      # very deep paths (refused descriptions): the ends say where
            head = Location(self.source, path[:6]).key_path()
            tail = Location(self.source, path[-6:]).key_path()
            return f"{head} ...({len(path) - 12} more)... {tail}"
        out = ""
        for k in path:
            if isinstance(k, int):
                out += f"[{k}]"
            else:
                out += ("." if out else "") + str(k)
        return out or "(top)"

    def __str__(self) -> str:
        return f"{self.source}: {self.key_path()}"


def _describe(value) -> str:
    """A short text for a given value (bounded in length and nesting: never recurses deeply)."""
    if isinstance(value, str):
        return _short.repr(value)
    if isinstance(value, (list, tuple)) and len(value) > 6:
        return f"a list of length {len(value)}"
    if isinstance(value, np.ndarray):
        return f"an array of shape {value.shape}"
    if hasattr(value, "toarray") and hasattr(value, "shape"):
        return f"a sparse matrix of shape {value.shape}"
    try:
        return _short.repr(value)
    except Exception:  # a user object whose repr fails: its type is enough
        return f"a {type(value).__name__}"


def closest(word, choices):
    """The choice closest to ``word`` (difflib ratio >= 0.6), or None."""
    got = difflib.get_close_matches(str(word), [str(c) for c in choices], n=1, cutoff=0.6)
    return got[0] if got else None


def check_shape_of_data(data, location: Location):
    """Refuse descriptions nested deeper than MAX_DEPTH or with more than MAX_VALUES entries counted
    with shared parts (YAML aliases) expanded; a value that contains itself is refused by the
    depth limit. Iterative (no recursion), O(expanded size) with a small constant; YAML files
    are also capped while they are read (:func:`_load_yaml`), before any expansion.
    """
    dict_t, list_t, tuple_t = dict, list, tuple
    count = 0
    # entries: (container, depth, index of the parent entry in `trail`, key in the parent)
    trail = []
    stack = [(data, 0, -1, None)]
    while stack:
        obj, depth, parent, key = stack.pop()
        t = type(obj)
        if t is dict_t or (t is not list_t and t is not tuple_t and isinstance(obj, Mapping)):
            vals = obj.items()
        elif t is list_t or t is tuple_t:
            vals = enumerate(obj)
        else:
            continue
        trail.append((parent, key))
        me = len(trail) - 1
        if depth > MAX_DEPTH:
            path = []
            i = me
            while i > 0:
                p_, k_ = trail[i]
                path.append(k_)
                i = p_
            loc = Location(location.source, location.path + tuple(reversed(path)), location.base_dir)
            raise DescriptionError(f"description ({loc}): nested more than {MAX_DEPTH} levels deep (the "
                                   f"limit), or a value that contains itself (a recursive YAML alias); a set "
                                   f"description needs a few levels per combinator.", loc)
        count += len(obj)
        if count > MAX_VALUES:
            raise DescriptionError(f"description ({location}): more than {MAX_VALUES:,} entries once shared "
                                   f"parts (YAML aliases) are expanded (the limit); large arrays belong in "
                                   f".npy/.npz/.csv files.", location)
        for k, v in vals:
            tv = type(v)
            if tv is dict_t or tv is list_t or tv is tuple_t:
                stack.append((v, depth + 1, me, k))
            elif tv is np.ndarray:
                count += v.size
            elif not (tv is int or tv is float or tv is str or tv is bool or v is None) and isinstance(v, Mapping):
                stack.append((v, depth + 1, me, k))
        if len(trail) > 4 * MAX_VALUES:     # pragma: no cover - bounded by count already
            break


class Reader:
    """Reads the parameters of one node from a mapping, raising located errors.

    Family classes use it in ``from_spec``; ``done()`` rejects keys nobody read.
    """

    def __init__(self, spec: Mapping, location: Location, kind: str):
        self.spec = spec
        self.location = location
        self.kind = kind
        name = spec.get("name")
        self.name = str(name) if name is not None else None
        self._seen = {"kind", "name", "about"}

    # -- error helpers -------------------------------------------------------
    def where(self, key=None) -> Location:
        return self.location if key is None else self.location.child(key)

    def fail(self, key, message: str, cls=DescriptionError):
        who = self.kind + (f" '{self.name}'" if self.name else "")
        loc = self.where(key)
        raise cls(f"{who} ({loc}): {message}", loc)

    # -- raw access ----------------------------------------------------------
    def has(self, key) -> bool:
        return key in self.spec and self.spec[key] is not None

    def raw(self, key, default=_REQUIRED):
        self._seen.add(key)
        if key not in self.spec or self.spec[key] is None:
            if default is _REQUIRED:
                unknown = [str(k) for k in self.spec if k not in self._seen and k not in _KEYWORDS]
                near = closest(key, unknown)
                if near is not None:
                    self.fail(key, f"missing {key}; unknown key {near} — did you mean {key}? (the parameter "
                                   f"'{key}' is required and '{near}' is not a parameter of {self.kind}.)")
                self.fail(key, f"the parameter '{key}' is required; it is missing.")
            return default
        return self.spec[key]

    # -- typed access --------------------------------------------------------
    def number(self, key, default=_REQUIRED, *, min=None, max=None, strict_min=False,
               allow_inf=False) -> float:
        v = self.raw(key, default)
        if v is default and default is not _REQUIRED:
            return v
        if isinstance(v, bool) or not isinstance(v, Real) or isinstance(v, np.ndarray):
            if isinstance(v, str):
                try:
                    v = float(v)
                except ValueError:
                    self.fail(key, f"{key} must be a number; got {_describe(v)}.")
            else:
                self.fail(key, f"{key} must be a number; got {_describe(v)}.")
        try:
            v = float(v)
        except OverflowError:
            self.fail(key, f"{key} must be a number within the float range (|x| < 1.8e308); got an integer "
                           f"with {len(str(abs(int(v))))} digits.")
        if np.isnan(v) or (np.isinf(v) and not allow_inf):
            self.fail(key, f"{key} must be a finite number; got {v}.")
        if min is not None and (v < min or (strict_min and v == min)):
            rel = "greater than" if strict_min else "at least"
            self.fail(key, f"{key} must be {rel} {min}; got {v}.")
        if max is not None and v > max:
            self.fail(key, f"{key} must be at most {max}; got {v}.")
        return v

    def integer(self, key, default=_REQUIRED, *, min=None, max=MAX_SIZE) -> int:
        """A whole number (an integral float such as 3.0 is accepted) in [min, max].

        ``max`` defaults to MAX_SIZE (10^8): counts larger than that would not fit in memory
        as coordinates, so they are refused here with the limit named.
        """
        v = self.raw(key, default)
        if v is default and default is not _REQUIRED:
            return v
        if isinstance(v, bool) or not isinstance(v, Integral):
            if isinstance(v, float) and v.is_integer():
                v = int(v)
            else:
                self.fail(key, f"{key} must be a whole number; got {_describe(v)}.")
        v = int(v)
        if min is not None and v < min:
            self.fail(key, f"{key} must be at least {min}; got {v}.")
        if max is not None and v > max:
            self.fail(key, f"{key} must be at most {max:,} (the size limit of setkit); got {show_count(v)}.")
        return v

    def choice(self, key, choices, default=_REQUIRED):
        v = self.raw(key, default)
        # YAML turns 'inf' into a string and 1/2 into ints; compare loosely (scalars only: an array
        # compared with == gives an array, not a verdict)
        if isinstance(v, (str, Real)) and not isinstance(v, np.ndarray):
            for c in choices:
                if v == c or str(v) == str(c):
                    return c
        near = closest(v, choices) if isinstance(v, str) else None
        hint = f" (did you mean {near}?)" if near is not None else ""
        self.fail(key, f"{key} must be one of {', '.join(map(str, choices))}; got {_describe(v)}{hint}.")

    def array(self, key, default=_REQUIRED, *, ndim=None, length=None, shape=None,
              allow_inf=False, dtype=float):
        """A numeric array given inline (nested lists) or as a path to .npy/.npz/.csv."""
        v = self.raw(key, default)
        if v is default and default is not _REQUIRED:
            return v
        arr = self._to_array(key, v, dtype)
        if not isinstance(arr, np.ndarray):       # a scipy.sparse matrix from a .npz file
            shape = tuple(arr.shape)
            if int(np.prod(shape, dtype=float)) > MAX_SIZE:
                self.fail(key, f"{key} is a sparse matrix of shape {shape}; as a dense array it would exceed "
                               f"{MAX_SIZE:,} entries (the size limit of setkit).")
            arr = np.asarray(arr.toarray(), dtype=dtype)
        if ndim is not None and arr.ndim != ndim:
            if ndim == 1 and arr.ndim == 0:
                arr = arr.reshape(1)
            else:
                self.fail(key, f"{key} must be {'a list' if ndim == 1 else f'a {ndim}-dimensional array'}; "
                               f"got an array of shape {arr.shape}.")
        if length is not None and arr.shape[0] != length:
            self.fail(key, f"{key} must have length {length}; got length {arr.shape[0]}.")
        if shape is not None and arr.shape != tuple(shape):
            self.fail(key, f"{key} must have shape {tuple(shape)}; got {arr.shape}.")
        if np.isnan(arr).any():
            self.fail(key, f"{key} must not contain NaN.")
        if not allow_inf and np.isinf(arr).any():
            self.fail(key, f"{key} must contain only finite numbers; got an infinite entry.")
        return arr

    def vector_or_scalar(self, key, length, default=_REQUIRED, allow_inf=False):
        """A scalar broadcast to ``length`` or a list of that length."""
        v = self.raw(key, default)
        if v is default and default is not _REQUIRED:
            return None if v is None else np.full(length, float(v))
        if isinstance(v, (Real, str)) and not isinstance(v, bool) and not (
                isinstance(v, str) and v.lower().endswith(ARRAY_SUFFIXES)):
            x = self.number(key, allow_inf=allow_inf)
            return np.full(length, x)
        return self.array(key, ndim=1, length=length, allow_inf=allow_inf)

    def _to_array(self, key, v, dtype):
        if isinstance(v, str):
            v = self._load_path(key, v)
        if hasattr(v, "toarray") and not isinstance(v, np.ndarray):
            return v  # sparse matrix: the caller decides
        if isinstance(v, np.ndarray) and v.dtype.kind not in "biuf":
            self.fail(key, f"{key} must hold real numbers; got an array of dtype {v.dtype}.")
        if isinstance(v, np.ndarray) and v.size > MAX_SIZE:
            self.fail(key, f"{key} has {v.size:,} entries, more than {MAX_SIZE:,} (the size limit of setkit).")
        try:
            raw = np.asarray(v)
        except (TypeError, ValueError):
            raw = None                       # ragged lists (NumPy 2 refuses them outright)
        if raw is not None and raw.dtype.kind == "c":
            self.fail(key, f"{key} must hold real numbers; got complex entries.")
        if raw is not None and raw.dtype.kind in "biuf":
            return raw.astype(dtype, copy=False)
        try:
            arr = np.asarray(v, dtype=dtype)
        except OverflowError:
            self.fail(key, f"{key} must hold numbers within the float range (|x| < 1.8e308); an integer "
                           f"entry is larger.")
        except (TypeError, ValueError):
            if raw is None or raw.dtype == object:
                self.fail(key, f"{key} must be a rectangular numeric array (lists of equal length); got "
                               f"{_describe(v)}.")
            self.fail(key, f"{key} must be numeric; got {_describe(v)}.")
        if arr.dtype == object:
            self.fail(key, f"{key} must be a rectangular numeric array; got ragged lists.")
        return arr

    def _load_path(self, key, path: str):
        low = path.lower()
        if not low.endswith(ARRAY_SUFFIXES) and ".npz:" not in low:
            # YAML strings such as 'inf' / '-inf'
            try:
                return float(path)
            except ValueError:
                self.fail(key, f"{key} must be numbers or a path ending in .npy, .npz or .csv; got {path!r}.")
        member = None
        if ".npz:" in path:
            path, member = path.split(".npz:", 1)
            path += ".npz"
        base = self.location.base_dir or os.getcwd()
        full = path if os.path.isabs(path) else os.path.join(base, path)
        if not os.path.exists(full):
            self.fail(key, f"the array file {path!r} does not exist (looked for {full}).")
        try:
            if full.lower().endswith(".npy"):
                return np.load(full, allow_pickle=False)
            if full.lower().endswith(".csv"):
                return np.loadtxt(full, delimiter=",", ndmin=1)
            try:
                import scipy.sparse as sp
                if member is None:
                    return sp.load_npz(full)
            except (ValueError, KeyError, OSError):
                pass
            with np.load(full, allow_pickle=False) as z:
                names = list(z.keys())
                if member is None:
                    if len(names) != 1:
                        self.fail(key, f"{path!r} holds {len(names)} arrays ({', '.join(names)}); "
                                       f"name one as '{path}:NAME'.")
                    member = names[0]
                if member not in names:
                    self.fail(key, f"{path!r} has no array {member!r}; it has {', '.join(names)}.")
                return z[member]
        except DescriptionError:
            raise
        except Exception as exc:  # unreadable file
            self.fail(key, f"could not read the array file {path!r}: {exc}.")

    def node(self, key, default=_REQUIRED):
        v = self.raw(key, default)
        if v is default and default is not _REQUIRED:
            return v
        return parse_node(v, self.where(key))

    def nodes(self, key, *, min_count=1):
        v = self.raw(key)
        if not isinstance(v, (list, tuple)):
            self.fail(key, f"{key} must be a list of sets; got {_describe(v)}.")
        if len(v) < min_count:
            self.fail(key, f"{key} must list at least {min_count} set(s); got {len(v)}.")
        return tuple(parse_node(item, self.where(key).child(i)) for i, item in enumerate(v))

    def done(self):
        extra = [k for k in self.spec if k not in self._seen]
        if extra:
            known = sorted(str(k) for k in self._seen if k not in _KEYWORDS)
            near = closest(extra[0], known + list(_KEYWORDS))
            hint = f" Did you mean {near}?" if near is not None else ""
            self.fail(extra[0], f"unknown parameter '{_short.repr(extra[0]) if not isinstance(extra[0], str) else extra[0]}'"
                                f"; the parameters of {self.kind} are "
                                f"{', '.join(known) or '(none)'} (and the optional name, about).{hint}")


def parse_node(spec, location: Location):
    """Turn one description mapping (or an already built set) into a node."""
    from .families import Family, lookup

    compiled = getattr(spec, "node", None)       # a compiled DecisionSet stands for its node
    if isinstance(compiled, Family) and not isinstance(spec, Mapping):
        return compiled
    if isinstance(spec, Family):
        return spec
    if not isinstance(spec, Mapping):
        raise DescriptionError(
            f"set ({location}): a set description must be a mapping with a 'kind' key; "
            f"got {_describe(spec)}.", location)
    if "kind" not in spec or spec["kind"] is None:
        near = closest("kind", [k for k in spec if isinstance(k, str)])
        if near is not None:
            raise DescriptionError(
                f"set ({location}): missing kind; unknown key {near} — did you mean kind? (kind names the "
                f"family, e.g. kind: simplex.)", location)
        raise DescriptionError(
            f"set ({location}): the key 'kind' is missing; it names the family, e.g. kind: simplex.",
            location)
    kind = spec["kind"]
    if not isinstance(kind, str):
        raise DescriptionError(f"set ({location.child('kind')}): kind must be a family name such as simplex; "
                               f"got {_describe(kind)}.", location.child("kind"))
    cls = lookup(kind, location)
    reader = Reader(spec, location, kind)
    try:
        node = cls.from_spec(reader)
        reader.done()
    except DescriptionError:
        raise
    except (OverflowError, MemoryError, RecursionError, UnicodeError, KeyError, IndexError, TypeError,
            ValueError, ZeroDivisionError, FloatingPointError, AttributeError) as exc:
        # last resort: a family's reader met a value it does not handle; say where, never leak the
        # foreign exception (the description fuzzer counts these: each one is a reader to fix)
        raise DescriptionError(f"{kind} ({location}): could not read this set's parameters (internal: "
                               f"{type(exc).__name__}: {_short.repr(str(exc))}).", location) from None
    try:
        _ORIGINS.setdefault(node, location)
    except TypeError:      # a node type that cannot be weakly referenced: errors then name no file
        pass
    return node


def origin_of(node):
    """The :class:`Location` a node was read at, or None (built in Python)."""
    try:
        return _ORIGINS.get(node)
    except TypeError:
        return None


def failer_for(node):
    """A ``fail(key, message, cls=DescriptionError)`` for checks that run at compile time.

    The error names the object and, when the node was read from a description, the
    file and the key path, like the errors raised while parsing.
    """
    loc = origin_of(node)

    def fail(key, message, cls=DescriptionError):
        if loc is None:
            raise cls(f"{node.label}: {message}")
        at = loc.child(key) if key is not None else loc
        raise cls(f"{node.label} ({at}): {message}", at)
    return fail


def parse(description, source: str = "<dict>", base_dir: str | None = None):
    """Parse a description: either a set mapping, or a document with a top-level 'set' key."""
    from .families import Family
    compiled = isinstance(description, Family) or isinstance(getattr(description, "node", None), Family)
    if not compiled:                     # a compiled DecisionSet (it carries its node) or a node: no data to check
        check_shape_of_data(description, Location(source, (), base_dir))
    if isinstance(description, Mapping) and "set" in description and "kind" not in description:
        extra = [k for k in description if k not in ("set", "about", "name")]
        if extra:
            loc = Location(source, (extra[0],), base_dir)
            near = closest(extra[0], ("set", "about", "name")) if isinstance(extra[0], str) else None
            hint = f" Did you mean {near}?" if near is not None else ""
            raise DescriptionError(
                f"description ({loc}): unknown top-level key {_describe(extra[0])}; expected 'set' and "
                f"optionally 'about' and 'name'.{hint}", loc)
        return parse_node(description["set"], Location(source, ("set",), base_dir))
    if isinstance(description, Mapping) and "kind" not in description:
        near = closest("set", [k for k in description if isinstance(k, str)])
        if near is not None and near != "set":
            loc = Location(source, (near,), base_dir)
            raise DescriptionError(
                f"description ({loc}): missing set (or kind); unknown key {near} — did you mean set? A "
                f"description is either a set mapping with 'kind' or a document with a top-level 'set'.", loc)
    return parse_node(description, Location(source, (), base_dir))


def read_file(path: str):
    """Read a YAML or JSON description file into plain Python data."""
    path = os.fspath(path)
    loc = Location(path, ())
    if not os.path.exists(path):
        raise DescriptionError(f"description ({path}): the file does not exist.", loc)
    try:
        size = os.path.getsize(path)
        if size > MAX_FILE_BYTES:
            raise DescriptionError(f"description ({path}): the file has {size:,} bytes, more than "
                                   f"{MAX_FILE_BYTES:,} (the limit); put large arrays in .npy/.npz/.csv files.",
                                   loc)
        with open(path, "rb") as fh:
            raw = fh.read()
    except OSError as exc:
        raise DescriptionError(f"description ({path}): the file cannot be read: {exc.strerror or exc}.", loc) \
            from None
    text = decode_text(raw, path, loc)
    low = path.lower()
    try:
        if low.endswith(".json"):
            return json.loads(text)
        return _load_yaml(text)
    except _AliasLimit as exc:
        raise DescriptionError(f"description ({path}): {exc}", loc) from None
    except RecursionError:
        raise DescriptionError(f"description ({path}): nested too deeply to read (more than {MAX_DEPTH} "
                               f"levels is refused).", loc) from None
    except json.JSONDecodeError as exc:
        raise DescriptionError(f"description ({path}): not valid JSON at line {exc.lineno}, "
                               f"column {exc.colno}: {exc.msg}.", loc) from None
    except Exception as exc:  # yaml.YAMLError and friends
        mark = getattr(exc, "problem_mark", None)
        where = f" at line {mark.line + 1}, column {mark.column + 1}" if mark else ""
        raise DescriptionError(f"description ({path}): not valid YAML{where}: "
                               f"{getattr(exc, 'problem', exc)}.", loc) from None


def decode_text(raw: bytes, path: str, loc=None) -> str:
    """Bytes of a text file -> str: UTF-8 (a BOM allowed), or UTF-16/UTF-32 when a BOM says so.

    Anything else is refused with the byte offset of the first undecodable byte.
    """
    import codecs
    loc = loc or Location(path, ())
    for bom, enc in ((codecs.BOM_UTF32_LE, "utf-32"), (codecs.BOM_UTF32_BE, "utf-32"),
                     (codecs.BOM_UTF8, "utf-8-sig"), (codecs.BOM_UTF16_LE, "utf-16"),
                     (codecs.BOM_UTF16_BE, "utf-16")):
        if raw.startswith(bom):
            break
    else:
        enc = "utf-8"
    try:
        return raw.decode(enc)
    except UnicodeDecodeError as exc:
        raise DescriptionError(f"description ({path}): the file is not valid {enc.upper().replace('-SIG', '')} "
                               f"text (byte {exc.start}: {raw[exc.start:exc.start + 1]!r}); save it as UTF-8.",
                               loc) from None


MAX_ALIASES = 10_000


class _AliasLimit(Exception):
    pass


def _load_yaml(text: str):
    """yaml.safe_load with a cap on alias use (an alias bomb is refused before it is expanded)."""
    import yaml

    class _Loader(yaml.SafeLoader):
        aliases = 0

        def compose_node(self, parent, index):
            if self.check_event(yaml.AliasEvent):
                self.aliases += 1
                if self.aliases > MAX_ALIASES:
                    mark = self.peek_event().start_mark
                    raise _AliasLimit(f"more than {MAX_ALIASES:,} YAML aliases (the limit), at line "
                                      f"{mark.line + 1}; aliases are for reuse, not for building large data.")
            node = super().compose_node(parent, index)
            # expanded size of the node (an alias returns the same node, whose size is known)
            if getattr(node, "_expanded", None) is None:
                if isinstance(node, yaml.SequenceNode):
                    n = 1 + sum(getattr(c, "_expanded", 1) or 1 for c in node.value)
                elif isinstance(node, yaml.MappingNode):
                    n = 1 + sum((getattr(k, "_expanded", 1) or 1) + (getattr(v, "_expanded", 1) or 1)
                                for k, v in node.value)
                else:
                    n = 1
                node._expanded = n
                if n > MAX_VALUES:
                    raise _AliasLimit(f"more than {MAX_VALUES:,} entries once YAML aliases are expanded (the "
                                      f"limit), at line {node.start_mark.line + 1}; aliases are for reuse, not "
                                      f"for building large data.")
            return node

    loader = _Loader(text)
    try:
        return loader.get_single_data()
    finally:
        loader.dispose()


def load_file(path: str):
    data = read_file(path)
    return parse(data, source=os.fspath(path), base_dir=os.path.dirname(os.path.abspath(path)))
