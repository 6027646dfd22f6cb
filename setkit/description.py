"""Descriptions (YAML/JSON files, dicts, builders) -> immutable node tree.

Every error names the object, the file and the key path inside it, what was
expected and what was given, e.g.::

    budget 'weekly' (catalog/ads.yaml: set.of[1].total): total must be at most
    the sum of upper bounds, 2.0; got 3.0.
"""
from __future__ import annotations

import json
import os
import weakref
from dataclasses import dataclass
from numbers import Integral, Real
from typing import Mapping

import numpy as np

from .errors import DescriptionError

_REQUIRED = object()
_ORIGINS: "weakref.WeakKeyDictionary" = weakref.WeakKeyDictionary()   # node -> Location it was read at
ARRAY_SUFFIXES = (".npy", ".npz", ".csv")


@dataclass(frozen=True)
class Location:
    """Where a value sits: the source (file path, '<dict>' or 'argument') and the key path."""

    source: str = "<dict>"
    path: tuple = ()
    base_dir: str | None = None

    def child(self, key) -> "Location":
        return Location(self.source, self.path + (key,), self.base_dir)

    def key_path(self) -> str:
        out = ""
        for k in self.path:
            if isinstance(k, int):
                out += f"[{k}]"
            else:
                out += ("." if out else "") + str(k)
        return out or "(top)"

    def __str__(self) -> str:
        return f"{self.source}: {self.key_path()}"


def _describe(value) -> str:
    if isinstance(value, str):
        return repr(value)
    if isinstance(value, (list, tuple)) and len(value) > 6:
        return f"a list of length {len(value)}"
    if isinstance(value, np.ndarray):
        return f"an array of shape {value.shape}"
    return repr(value)


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
                self.fail(key, f"the parameter '{key}' is required; it is missing.")
            return default
        return self.spec[key]

    # -- typed access --------------------------------------------------------
    def number(self, key, default=_REQUIRED, *, min=None, max=None, strict_min=False,
               allow_inf=False) -> float:
        v = self.raw(key, default)
        if v is default and default is not _REQUIRED:
            return v
        if isinstance(v, bool) or not isinstance(v, Real):
            if isinstance(v, str):
                try:
                    v = float(v)
                except ValueError:
                    self.fail(key, f"{key} must be a number; got {_describe(v)}.")
            else:
                self.fail(key, f"{key} must be a number; got {_describe(v)}.")
        v = float(v)
        if np.isnan(v) or (np.isinf(v) and not allow_inf):
            self.fail(key, f"{key} must be a finite number; got {v}.")
        if min is not None and (v < min or (strict_min and v == min)):
            rel = "greater than" if strict_min else "at least"
            self.fail(key, f"{key} must be {rel} {min}; got {v}.")
        if max is not None and v > max:
            self.fail(key, f"{key} must be at most {max}; got {v}.")
        return v

    def integer(self, key, default=_REQUIRED, *, min=None) -> int:
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
        return v

    def choice(self, key, choices, default=_REQUIRED):
        v = self.raw(key, default)
        # YAML turns 'inf' into a string and 1/2 into ints; compare loosely
        for c in choices:
            if v == c or str(v) == str(c):
                return c
        self.fail(key, f"{key} must be one of {', '.join(map(str, choices))}; got {_describe(v)}.")

    def array(self, key, default=_REQUIRED, *, ndim=None, length=None, shape=None,
              allow_inf=False, dtype=float):
        """A numeric array given inline (nested lists) or as a path to .npy/.npz/.csv."""
        v = self.raw(key, default)
        if v is default and default is not _REQUIRED:
            return v
        arr = self._to_array(key, v, dtype)
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
        try:
            if hasattr(v, "toarray") and not isinstance(v, np.ndarray):
                return v  # sparse matrix: the caller decides
            arr = np.asarray(v, dtype=dtype)
        except (TypeError, ValueError):
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
            known = sorted(k for k in self._seen if k not in ("kind", "name", "about"))
            self.fail(extra[0], f"unknown parameter '{extra[0]}'; the parameters of {self.kind} are "
                                f"{', '.join(known) or '(none)'} (and the optional name, about).")


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
    if "kind" not in spec:
        raise DescriptionError(
            f"set ({location}): the key 'kind' is missing; it names the family, e.g. kind: simplex.",
            location)
    kind = spec["kind"]
    cls = lookup(str(kind), location)
    reader = Reader(spec, location, str(kind))
    node = cls.from_spec(reader)
    reader.done()
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
    if isinstance(description, Mapping) and "set" in description and "kind" not in description:
        extra = [k for k in description if k not in ("set", "about", "name")]
        if extra:
            loc = Location(source, (extra[0],), base_dir)
            raise DescriptionError(
                f"description ({loc}): unknown top-level key '{extra[0]}'; expected 'set' and "
                f"optionally 'about' and 'name'.", loc)
        return parse_node(description["set"], Location(source, ("set",), base_dir))
    return parse_node(description, Location(source, (), base_dir))


def read_file(path: str):
    """Read a YAML or JSON description file into plain Python data."""
    path = os.fspath(path)
    loc = Location(path, ())
    if not os.path.exists(path):
        raise DescriptionError(f"description ({path}): the file does not exist.", loc)
    with open(path, encoding="utf-8") as fh:
        text = fh.read()
    low = path.lower()
    try:
        if low.endswith(".json"):
            return json.loads(text)
        import yaml
        return yaml.safe_load(text)
    except json.JSONDecodeError as exc:
        raise DescriptionError(f"description ({path}): not valid JSON at line {exc.lineno}, "
                               f"column {exc.colno}: {exc.msg}.", loc) from None
    except Exception as exc:  # yaml.YAMLError and friends
        mark = getattr(exc, "problem_mark", None)
        where = f" at line {mark.line + 1}, column {mark.column + 1}" if mark else ""
        raise DescriptionError(f"description ({path}): not valid YAML{where}: "
                               f"{getattr(exc, 'problem', exc)}.", loc) from None


def load_file(path: str):
    data = read_file(path)
    return parse(data, source=os.fspath(path), base_dir=os.path.dirname(os.path.abspath(path)))
