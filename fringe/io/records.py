"""Read-only records read from JSON: a frozen mapping, the plain-JSON view, field checks.

* :class:`FrozenMap` is the read-only mapping of the result objects (fit and plan results):
  the file's order is kept; :func:`freeze` turns nested dicts and lists into FrozenMaps and
  tuples, :func:`plain` turns a record back into plain JSON types (non-finite floats become
  null, as the result files have always written them).
* :class:`Fields` checks the fields of one JSON object read from a file and raises
  :class:`~fringe.errors.InputFileError` with one line "SOURCE: FIELD: EXPECTED, got VALUE"
  (FIELD dotted from the top of the file, e.g. ``coefficients.ke_XY.sigma``).

What every getter refuses, whatever the field (a result file is checked as strictly as a run
file): names (object keys) and strings with control characters (a newline could fake a line of
output) or lone surrogates (they cannot be written as UTF-8); numbers that are not finite or
whose magnitude is outside [:data:`MIN_MAGNITUDE`, :data:`MAX_MAGNITUDE`] (zero is allowed),
integers beyond :data:`MAX_INTEGER`, and free-form records nested deeper than
:data:`MAX_DEPTH`. :func:`check_depth` bounds the nesting of a whole JSON document.
"""

from __future__ import annotations

import math
from collections.abc import Iterator, Mapping

import numpy as np

from fringe.errors import InputFileError

__all__ = ["MAX_DEPTH", "MAX_INTEGER", "MAX_MAGNITUDE", "MIN_MAGNITUDE", "Fields", "FrozenMap",
           "check_depth", "check_text", "freeze", "plain"]

#: Largest magnitude of a number read from a record: the square of a covariance element or a
#: product of two such numbers must stay finite in float64 (max ~1.8e308).
MAX_MAGNITUDE = 1e150
#: Smallest non-zero magnitude (squares and products must not underflow to zero).
MIN_MAGNITUDE = 1e-150
#: Largest magnitude of an integer (2**53: every such integer is exact as a float64).
MAX_INTEGER = 2 ** 53
#: Deepest nesting of objects and lists in a result file (the deepest written is 4).
MAX_DEPTH = 32


class FrozenMap(Mapping):
    """A read-only mapping (insertion order kept): what a frozen record holds for a JSON object.

    Compares equal to any mapping with the same items; ``dict(m)`` gives a plain, mutable copy.
    """

    __slots__ = ("_items",)

    def __init__(self, items=()):
        self._items = dict(items)

    def __getitem__(self, key):
        return self._items[key]

    def __iter__(self) -> Iterator:
        return iter(self._items)

    def __len__(self) -> int:
        return len(self._items)

    def __repr__(self) -> str:
        return f"FrozenMap({self._items!r})"

    def __reduce__(self):
        return (FrozenMap, (self._items,))


def freeze(obj):
    """``obj`` frozen: every dict a :class:`FrozenMap`, every list a tuple, nested.

    Numpy arrays become tuples of Python numbers; other values are kept.
    """
    if isinstance(obj, Mapping):
        return FrozenMap((k, freeze(v)) for k, v in obj.items())
    if isinstance(obj, (list, tuple)):
        return tuple(freeze(v) for v in obj)
    if isinstance(obj, np.ndarray):
        return freeze(obj.tolist())
    return obj


def plain(obj):
    """``obj`` in plain JSON types.

    Mappings become dicts (string keys), sequences lists, numpy scalars Python numbers,
    non-finite floats None; a record with ``to_dict()`` gives that.
    """
    if hasattr(obj, "to_dict") and not isinstance(obj, type):
        return plain(obj.to_dict())
    if isinstance(obj, Mapping):
        return {str(k): plain(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [plain(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return plain(obj.tolist())
    if isinstance(obj, np.bool_):
        return bool(obj)
    if isinstance(obj, (np.floating, float)):
        x = float(obj)
        return x if math.isfinite(x) else None
    if isinstance(obj, np.integer):
        return int(obj)
    return obj


def _show(value) -> str:
    text = repr(value)
    return text if len(text) <= 60 else text[:57] + "..."


def _is_number(x) -> bool:
    return isinstance(x, (int, float)) and not isinstance(x, bool)


def check_text(text: str) -> str | None:
    """What is wrong with ``text`` as a name or string of a record, or None when it is fine.

    Refused: control characters (C0, DEL, C1: a newline or carriage return could fake a line
    of output) and lone surrogates (not encodable as UTF-8).
    """
    for ch in text:
        o = ord(ch)
        if o < 0x20 or 0x7F <= o < 0xA0:
            return "a string without control characters (newline, tab, ...)"
        if 0xD800 <= o < 0xE000:
            return "a valid Unicode string (no lone surrogate)"
    return None


def _magnitude_problem(v) -> str | None:
    """What is wrong with the number ``v`` (int or float), or None."""
    if isinstance(v, int):
        return None if abs(v) <= MAX_INTEGER else "an integer of magnitude <= 2**53"
    if not math.isfinite(v):
        return "a finite number"
    a = abs(v)
    if a > MAX_MAGNITUDE or 0 < a < MIN_MAGNITUDE:
        return (f"a number of magnitude between {MIN_MAGNITUDE:g} and {MAX_MAGNITUDE:g} "
                "(or zero)")
    return None


def check_depth(obj, source, limit: int = MAX_DEPTH) -> None:
    """Refuse a JSON value nested deeper than ``limit`` (objects and lists), iteratively.

    Raises :class:`~fringe.errors.InputFileError` "SOURCE: JSON: expected ...".
    """
    stack = [(obj, 1)]
    while stack:
        value, depth = stack.pop()
        if isinstance(value, (Mapping, list, tuple)):
            if depth > limit:
                raise InputFileError(str(source), "JSON", f"expected objects and lists nested "
                                     f"at most {limit} deep")
            items = value.values() if isinstance(value, Mapping) else value
            stack.extend((v, depth + 1) for v in items)


_MISSING = object()


class Fields:
    """The fields of one JSON object read from ``source``, checked as they are taken.

    Parameters
    ----------
    source : str or path
        The file (or a label such as "fit result") named first in every error.
    data : object
        The JSON value; an error unless it is an object.
    where : str
        Dotted path of this object in the file ("" for the top level).

    Every getter raises :class:`~fringe.errors.InputFileError` naming the dotted field; a
    missing field is an error when ``required``, else the getter returns None. JSON ``null``
    stands for a non-finite number where ``null`` is allowed (returned as NaN).
    """

    def __init__(self, source, data, where: str = ""):
        self.source, self.where = str(source), where
        if not isinstance(data, Mapping):
            raise InputFileError(self.source, where or "top level",
                                 f"expected a JSON object, got {_show(data)}")
        for key in data:
            self._check_key(key)
        self.data = data

    def _check_key(self, key) -> None:
        """Refuse a name that is not a string or holds control characters or surrogates."""
        bad = "a string" if not isinstance(key, str) else check_text(key)
        if bad is not None:
            raise InputFileError(self.source, self.where or "top level",
                                 f"expected names that are {bad.removeprefix('a ')}, "
                                 f"got {_show(key)}")

    def name(self, key: str) -> str:
        """The dotted name of ``key`` in the file (``[i]`` for a list element)."""
        if str(key).startswith("["):
            return f"{self.where}{key}"
        return f"{self.where}.{key}" if self.where else str(key)

    def unknown(self, allowed) -> None:
        """Refuse a field that is not in ``allowed`` (a record's fixed schema)."""
        for key in self.data:
            if key not in allowed:
                raise InputFileError(self.source, self.name(key), "unknown field (expected "
                                     f"only {', '.join(allowed)})")

    def error(self, key: str, expected: str, value=_MISSING) -> InputFileError:
        """The error for ``key``: "SOURCE: FIELD: EXPECTED[, got VALUE]"."""
        got = "" if value is _MISSING else f", got {_show(value)}"
        return InputFileError(self.source, self.name(key), f"expected {expected}{got}")

    def has(self, key: str) -> bool:
        """Whether ``key`` is present and not null."""
        return self.data.get(key) is not None

    def take(self, key: str, required: bool, what: str):
        """The value at ``key``, or None when absent and not ``required``.

        When ``required``, an absent key is "missing" and a null "expected WHAT, got None".
        """
        v = self.data.get(key)
        if v is None and required:
            raise self.error(key, what, v) if key in self.data else \
                InputFileError(self.source, self.name(key), f"missing; expected {what}")
        return v

    def sub(self, key: str, *, required: bool = True) -> Fields | None:
        """The JSON object at ``key`` as :class:`Fields` (None when absent and optional)."""
        v = self.take(key, required, "a JSON object")
        return None if v is None else Fields(self.source, v, self.name(key))

    def items(self) -> Iterator[tuple[str, object]]:
        """The raw (key, value) pairs."""
        return iter(self.data.items())

    def elements(self, key: str, *, required: bool = True) -> Fields | None:
        """The JSON list at ``key`` as :class:`Fields` keyed ``[0]``, ``[1]``, ....

        None when absent and optional.
        """
        v = self.take(key, required, "a list")
        if v is None:
            return None
        if not isinstance(v, list):
            raise self.error(key, "a list", v)
        return Fields(self.source, {f"[{i}]": x for i, x in enumerate(v)}, self.name(key))

    def string(self, key: str, *, required: bool = True, empty: bool = False) -> str | None:
        """A string (non-empty unless ``empty``); None when absent and optional."""
        want = "a string" if empty else "a non-empty string"
        v = self.take(key, required, want)
        if v is None:
            return None
        if not isinstance(v, str) or (not empty and not v):
            raise self.error(key, want, v)
        return self.check_string(key, v)

    def check_string(self, key: str, v: str) -> str:
        """``v`` (the string at ``key``) refused if it has control characters or surrogates."""
        bad = check_text(v)
        if bad is not None:
            raise self.error(key, bad, v)
        return v

    def number(self, key: str, *, required: bool = True, null: bool = False,
               minimum: float | None = None, positive: bool = False) -> float | None:
        """A number (an int is kept as an int, as the file wrote it).

        With ``null``, JSON null is a non-finite value (returned as NaN) and a present null is
        not 'missing'.
        """
        if null and key in self.data and self.data[key] is None:
            return math.nan
        v = self.take(key, required, "a finite number")
        if v is None:
            return None
        return self.check_number(key, v, null=null, minimum=minimum, positive=positive)

    def check_number(self, key: str, v, *, null: bool = False, minimum: float | None = None,
                     positive: bool = False):
        """``v`` (the value of ``key``, or of an element named ``key``) checked as a number."""
        if null and v is None:
            return math.nan
        if not _is_number(v):
            raise self.error(key, "a finite number" + (" or null" if null else ""), v)
        bad = _magnitude_problem(v)
        if bad is not None:
            raise self.error(key, bad + (" or null" if null else ""), v)
        if positive and not v > 0:
            raise self.error(key, "a positive number", v)
        if minimum is not None and v < minimum:
            raise self.error(key, f"a number >= {minimum:g}", v)
        return v

    def integer(self, key: str, *, required: bool = True, minimum: int = 0) -> int | None:
        """An integer >= ``minimum`` (a bool is refused); None when absent and optional."""
        v = self.take(key, required, f"an integer >= {minimum}")
        if v is None:
            return None
        if not isinstance(v, int) or isinstance(v, bool) or v < minimum:
            raise self.error(key, f"an integer >= {minimum}", v)
        if v > MAX_INTEGER:
            raise self.error(key, "an integer of magnitude <= 2**53", v)
        return v

    def strings(self, key: str, *, required: bool = True) -> tuple[str, ...] | None:
        """A list of strings, as a tuple; None when absent and optional."""
        v = self.take(key, required, "a list of strings")
        if v is None:
            return None
        if not isinstance(v, list) or not all(isinstance(x, str) for x in v):
            raise self.error(key, "a list of strings", v)
        return tuple(self.check_string(f"{key}[{i}]", x) for i, x in enumerate(v))

    def numbers(self, key: str, *, length: int | None = None, required: bool = True,
                minimum: float | None = None) -> tuple[float, ...] | None:
        """A list of finite numbers (of ``length`` when given)."""
        want = "a list of finite numbers" + (f" of length {length}" if length is not None
                                             else "")
        v = self.take(key, required, want)
        if v is None:
            return None
        if not isinstance(v, list) or (length is not None and len(v) != length):
            raise self.error(key, want, v)
        return tuple(self.check_number(f"{key}[{i}]", x, minimum=minimum)
                     for i, x in enumerate(v))

    def matrix(self, key: str, n: int, *, required: bool = True
               ) -> tuple[tuple[float, ...], ...] | None:
        """An n x n matrix (list of rows) of finite numbers."""
        want = f"a {n}x{n} matrix of finite numbers"
        v = self.take(key, required, want)
        if v is None:
            return None
        ok = isinstance(v, list) and len(v) == n and all(
            isinstance(r, list) and len(r) == n for r in v)
        if not ok:
            raise InputFileError(self.source, self.name(key), f"expected {want}")
        return tuple(tuple(self.check_number(f"{key}[{i}][{j}]", x) for j, x in enumerate(r))
                     for i, r in enumerate(v))

    def record(self, key: str, *, required: bool = True) -> FrozenMap | None:
        """A free-form JSON object, frozen (its own schema belongs to another module)."""
        v = self.take(key, required, "a JSON object")
        if v is None:
            return None
        if not isinstance(v, Mapping):
            raise self.error(key, "a JSON object", v)
        self._check_free(key, v, 1)
        return freeze(v)

    def _check_free(self, key: str, v, depth: int) -> None:
        """Check a free-form JSON value at ``key``: names, strings, numbers and depth."""
        if depth > MAX_DEPTH:
            raise self.error(key, f"objects and lists nested at most {MAX_DEPTH} deep")
        if isinstance(v, Mapping):
            sub = Fields(self.source, v, self.name(key))
            for k, x in v.items():
                sub._check_free(k, x, depth + 1)
        elif isinstance(v, (list, tuple)):
            for i, x in enumerate(v):
                self._check_free(f"{key}[{i}]", x, depth + 1)
        elif isinstance(v, str):
            self.check_string(key, v)
        elif _is_number(v):
            self.check_number(key, v)
        elif v is not None and not isinstance(v, bool):
            raise self.error(key, "a JSON value (object, list, string, number, true, false "
                             "or null)", v)
