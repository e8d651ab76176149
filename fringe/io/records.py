"""Read-only records read from JSON: a frozen mapping, the plain-JSON view, field checks.

* :class:`FrozenMap` is the read-only mapping of the result objects (fit and plan results):
  the file's order is kept; :func:`freeze` turns nested dicts and lists into FrozenMaps and
  tuples, :func:`plain` turns a record back into plain JSON types (non-finite floats become
  null, as the result files have always written them).
* :class:`Fields` checks the fields of one JSON object read from a file and raises
  :class:`~fringe.errors.InputFileError` with one line "SOURCE: FIELD: EXPECTED, got VALUE"
  (FIELD dotted from the top of the file, e.g. ``coefficients.ke_XY.sigma``).
"""

from __future__ import annotations

import math
from collections.abc import Iterator, Mapping

import numpy as np

from fringe.errors import InputFileError

__all__ = ["Fields", "FrozenMap", "freeze", "plain"]


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
        self.data = data

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
        if not _is_number(v) or not math.isfinite(v):
            raise self.error(key, "a finite number" + (" or null" if null else ""), v)
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
        return v

    def strings(self, key: str, *, required: bool = True) -> tuple[str, ...] | None:
        """A list of strings, as a tuple; None when absent and optional."""
        v = self.take(key, required, "a list of strings")
        if v is None:
            return None
        if not isinstance(v, list) or not all(isinstance(x, str) for x in v):
            raise self.error(key, "a list of strings", v)
        return tuple(v)

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
            isinstance(r, list) and len(r) == n and all(_is_number(x) and math.isfinite(x)
                                                        for x in r) for r in v)
        if not ok:
            raise InputFileError(self.source, self.name(key), f"expected {want}")
        return tuple(tuple(r) for r in v)

    def record(self, key: str, *, required: bool = True) -> FrozenMap | None:
        """A free-form JSON object, frozen (its own schema belongs to another module)."""
        v = self.take(key, required, "a JSON object")
        if v is None:
            return None
        if not isinstance(v, Mapping):
            raise self.error(key, "a JSON object", v)
        return freeze(v)
