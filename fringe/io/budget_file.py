"""The systematic budget file (TOML) given to ``fringe fit --budget``: its one reader.

A budget file declares systematic terms beside those the fit estimates itself from its
auxiliary channels (``docs/fit.md``, "Systematic budget")::

    [[term]]                       # a size on one coefficient
    name = "cavity mount creep"
    coefficient = "ke_XY"
    size = 2e-18
    units = "1"                    # the coefficient's units

    [[term]]                       # a size on one C10 harmonic of the observable
    name = "table tilt residual"
    harmonic = "Cs2"
    size = 3e-3
    units = "Hz"                   # the observable's units

    [[scale]]                      # a relative scale uncertainty on every coefficient
    name = "frequency calibration"
    relative = 0.01

:func:`read_budget` checks every field (one-line errors naming the file, the field and what was
expected; an unknown field names the nearest known one) and returns a :class:`Budget`; whether
a coefficient or unit fits the fit's theory is checked by the fit
(:func:`fringe.fit.budget.check_budget`). The file is only read.
"""

from __future__ import annotations

import difflib
import math
from dataclasses import dataclass
from pathlib import Path

try:
    import tomllib
except ModuleNotFoundError:         # Python 3.10
    import tomli as tomllib

from fringe.conventions import HARMONIC_NAMES
from fringe.errors import InputFileError, check_regular_file

__all__ = ["Budget", "DeclaredScale", "DeclaredTerm", "read_budget"]

_SECTIONS = ("term", "scale")
_TERM_FIELDS = ("name", "coefficient", "harmonic", "size", "units", "note")
_SCALE_FIELDS = ("name", "relative", "note")


@dataclass(frozen=True)
class DeclaredTerm:
    """A declared systematic size on one coefficient or one C10 harmonic.

    Attributes
    ----------
    name : str
    coefficient : str or None
        The coefficient it affects (size in the coefficient's units), or None.
    harmonic : str or None
        The C10 harmonic it affects (size in the observable's units), or None.
    size : float
        Its 1 sigma size (> 0).
    units : str
    note : str
    """

    name: str
    coefficient: str | None
    harmonic: str | None
    size: float
    units: str
    note: str = ""


@dataclass(frozen=True)
class DeclaredScale:
    """A relative scale uncertainty common to every coefficient (e.g. a calibration factor)."""

    name: str
    relative: float
    note: str = ""


@dataclass(frozen=True)
class Budget:
    """What a budget file declares, with the file's path and SHA-256."""

    terms: tuple[DeclaredTerm, ...]
    scales: tuple[DeclaredScale, ...]
    path: str
    sha256: str


def _nearest(word: str, known) -> str:
    near = difflib.get_close_matches(word, known, n=1, cutoff=0.5)
    return f"; did you mean {near[0]!r}?" if near else ""


def _unknown(path, where: str, table: dict, known) -> None:
    for key in table:
        if key not in known:
            raise InputFileError(path, f"{where}.{key}" if where else key,
                                 f"unknown field (expected some of {', '.join(known)})"
                                 + _nearest(key, known))


def _string(path, where: str, table: dict, key: str, required: bool = True) -> str | None:
    v = table.get(key)
    if v is None:
        if required:
            raise InputFileError(path, f"{where}.{key}", "missing; expected a text")
        return None
    if not isinstance(v, str) or not v.strip():
        raise InputFileError(path, f"{where}.{key}", f"expected a non-empty text, got {v!r}")
    return v.strip()


def _positive(path, where: str, table: dict, key: str) -> float:
    v = table.get(key)
    if v is None:
        raise InputFileError(path, f"{where}.{key}", "missing; expected a number > 0")
    if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v) or v <= 0:
        raise InputFileError(path, f"{where}.{key}", f"expected a finite number > 0, got {v!r}")
    return float(v)


def _term(path, where: str, t: dict) -> DeclaredTerm:
    _unknown(path, where, t, _TERM_FIELDS)
    coefficient = _string(path, where, t, "coefficient", required=False)
    harmonic = _string(path, where, t, "harmonic", required=False)
    if (coefficient is None) == (harmonic is None):
        raise InputFileError(path, where, "expected exactly one of 'coefficient' (a coefficient "
                             "name) or 'harmonic' (one of " + ", ".join(HARMONIC_NAMES) + ")")
    if harmonic is not None and harmonic not in HARMONIC_NAMES:
        raise InputFileError(path, f"{where}.harmonic", "expected one of "
                             f"{', '.join(HARMONIC_NAMES)}, got {harmonic!r}"
                             + _nearest(harmonic, HARMONIC_NAMES))
    return DeclaredTerm(_string(path, where, t, "name"), coefficient, harmonic,
                        _positive(path, where, t, "size"), _string(path, where, t, "units"),
                        _string(path, where, t, "note", required=False) or "")


def _tables(path, doc: dict, key: str) -> list[dict]:
    v = doc.get(key, [])
    if not isinstance(v, list) or not all(isinstance(x, dict) for x in v):
        raise InputFileError(path, key, f"expected an array of tables ([[{key}]] entries)")
    return v


def read_budget(path) -> Budget:
    """Read and check a budget file (see module docstring).

    Raises
    ------
    InputFileError
        One line "PATH: FIELD: EXPECTED": a missing or unreadable file, invalid TOML, an
        unknown section or field (with the nearest known name), a missing or bad value, a
        term with both or neither of ``coefficient`` and ``harmonic``, two terms of one name,
        or a file that declares nothing.
    """
    import hashlib

    check_regular_file(path, "a systematic budget (TOML) file")
    try:
        raw = Path(path).read_bytes()
        doc = tomllib.loads(raw.decode("utf-8"))
    except OSError as exc:
        raise InputFileError(path, "file", f"expected a readable file ({exc.strerror})") \
            from None
    except UnicodeDecodeError:
        raise InputFileError(path, "file", "expected UTF-8 text") from None
    except tomllib.TOMLDecodeError as exc:
        raise InputFileError(path, "TOML", f"expected valid TOML ({exc})") from None
    _unknown(path, "", doc, _SECTIONS)
    terms = tuple(_term(path, f"term[{i}]", t) for i, t in enumerate(_tables(path, doc, "term")))
    scales = []
    for i, t in enumerate(_tables(path, doc, "scale")):
        where = f"scale[{i}]"
        _unknown(path, where, t, _SCALE_FIELDS)
        scales.append(DeclaredScale(_string(path, where, t, "name"),
                                    _positive(path, where, t, "relative"),
                                    _string(path, where, t, "note", required=False) or ""))
    names = [x.name for x in terms] + [x.name for x in scales]
    for i, n in enumerate(names):
        if n in names[:i]:
            raise InputFileError(path, "name", f"expected each term's name once, got {n!r} "
                                 "twice")
    if not names:
        raise InputFileError(path, "term", "expected at least one [[term]] or [[scale]] entry")
    return Budget(terms, tuple(scales), str(path), hashlib.sha256(raw).hexdigest())
