"""Small bounded per-process caches of work that depends only on an experiment's setup.

A study (:mod:`fringe.study`) fits hundreds of campaigns of one scenario in one process: the
same site, epoch, apparatus, theory and schedule. What depends only on those (the turn model's
frozen values on its time grid, :mod:`fringe.fit.turn_model`; the harmonic table at one
instant, :func:`fringe.experiment.harmonics.harmonics_at`) is computed once and kept in a
:class:`SetupMemo`, keyed on everything it depends on (:func:`fingerprint`: every field of the
setup, float by float, array by array, plus the grid and the functions it was computed with).

A miss costs what the work costs; a hit returns exactly the values the work gave (the cached
arrays are read-only; callers receive them or copies). :func:`clear_setup_caches` empties every
memo (a single ``fringe fit`` in a fresh process starts empty; the benchmark clears them to
time a cold fit). Each memo is bounded in entries and bytes; an entry larger than its
``max_entry_bytes`` is not kept (a year's model grid is recomputed, not held).
"""

from __future__ import annotations

import dataclasses
import threading
from collections import OrderedDict
from types import BuiltinFunctionType, FunctionType, MethodType

import numpy as np

from fringe.frames import warnings_issued

__all__ = ["SetupMemo", "Unkeyable", "clear_setup_caches", "fingerprint", "quiet_call"]

_REGISTRY: list[SetupMemo] = []


class Unkeyable(TypeError):
    """An object :func:`fingerprint` cannot key exactly (its result is then not cached)."""


def fingerprint(obj) -> tuple:
    """An exact, hashable key of ``obj``'s value.

    Floats by their hexadecimal form (exact, -0.0 apart from 0.0), arrays by dtype, shape and
    bytes, dataclasses by their type and every field, other objects by their type and their
    instance attributes, functions by identity. Raises :class:`Unkeyable` for anything else.
    """
    if obj is None or isinstance(obj, (bool, str, bytes)):
        return (type(obj), obj)
    if isinstance(obj, (int, np.integer)):
        return ("i", int(obj))
    if isinstance(obj, (float, np.floating)):
        return ("f", float(obj).hex())
    if isinstance(obj, complex):
        return ("c", obj.real.hex(), obj.imag.hex())
    if isinstance(obj, np.ndarray):
        if obj.dtype.hasobject:
            raise Unkeyable("an object array")
        return ("a", obj.dtype.str, obj.shape, np.ascontiguousarray(obj).tobytes())
    if isinstance(obj, (tuple, list)):
        return (type(obj), tuple(fingerprint(x) for x in obj))
    if isinstance(obj, dict):
        items = [(fingerprint(k), fingerprint(v)) for k, v in obj.items()]
        return ("d", tuple(sorted(items, key=repr)))
    if isinstance(obj, (FunctionType, MethodType, BuiltinFunctionType, np.ufunc, type)):
        return ("id", obj)
    if dataclasses.is_dataclass(obj):
        return (type(obj), tuple((f.name, fingerprint(getattr(obj, f.name)))
                                 for f in dataclasses.fields(obj)))
    attrs = getattr(obj, "__dict__", None)
    if attrs is None or hasattr(obj, "__slots__"):
        raise Unkeyable(f"an object of type {type(obj).__name__}")
    return (type(obj), fingerprint(dict(attrs)))


def _nbytes(value) -> int:
    if isinstance(value, np.ndarray):
        return int(value.nbytes)
    if isinstance(value, (tuple, list)):
        return sum(_nbytes(x) for x in value)
    return 64


def read_only(*arrays: np.ndarray) -> None:
    """Mark ``arrays`` read-only (what a memo holds must not be changed by a caller)."""
    for a in arrays:
        a.flags.writeable = False


class SetupMemo:
    """A bounded least-recently-used cache (thread-safe), registered for clearing.

    Parameters
    ----------
    name : str
        What it holds (for :meth:`stats`).
    max_entries : int
        Entries kept at most.
    max_bytes : int
        Bytes of arrays kept at most, over all entries.
    max_entry_bytes : int
        An entry above this many bytes is not kept.
    """

    def __init__(self, name: str, max_entries: int, max_bytes: int, max_entry_bytes: int):
        self.name = name
        self.max_entries, self.max_bytes = int(max_entries), int(max_bytes)
        self.max_entry_bytes = int(max_entry_bytes)
        self._data: OrderedDict = OrderedDict()
        self._bytes = 0
        self._lock = threading.Lock()
        self.hits = self.misses = 0
        _REGISTRY.append(self)

    def get(self, key):
        """The value stored under ``key``, or None (counted as a hit or a miss)."""
        with self._lock:
            got = self._data.get(key)
            if got is None:
                self.misses += 1
                return None
            self._data.move_to_end(key)
            self.hits += 1
            return got[0]

    def put(self, key, value) -> bool:
        """Store ``value`` under ``key`` unless it is too large; True when stored."""
        size = _nbytes(value)
        if size > self.max_entry_bytes:
            return False
        with self._lock:
            old = self._data.pop(key, None)
            if old is not None:
                self._bytes -= old[1]
            self._data[key] = (value, size)
            self._bytes += size
            while self._data and (len(self._data) > self.max_entries
                                  or self._bytes > self.max_bytes):
                _, (_, dropped) = self._data.popitem(last=False)
                self._bytes -= dropped
        return True

    def clear(self) -> None:
        """Drop every entry and reset the counters."""
        with self._lock:
            self._data.clear()
            self._bytes = 0
            self.hits = self.misses = 0

    def stats(self) -> dict:
        """Entries, bytes held, hits and misses since the last clear."""
        with self._lock:
            return {"name": self.name, "entries": len(self._data), "bytes": self._bytes,
                    "hits": self.hits, "misses": self.misses}


def clear_setup_caches() -> None:
    """Empty every :class:`SetupMemo` of the process (the next fit computes everything)."""
    for memo in _REGISTRY:
        memo.clear()


def quiet_call(func, *args, **kwargs):
    """``func(*args, **kwargs)`` and whether the frame functions warned meanwhile.

    A result whose computation warned (e.g. ERFA's ephemeris outside 1900-2100,
    :func:`fringe.frames.warnings_issued`) is not cached, so that every call that needs it
    warns again. The warnings themselves pass as usual (nothing is intercepted, so this is
    safe in threads; a warning of another thread meanwhile only stops this result's caching).
    """
    before = warnings_issued()
    out = func(*args, **kwargs)
    return out, warnings_issued() != before
