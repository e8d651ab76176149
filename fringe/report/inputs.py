"""Read and validate the inputs of a report: the fit result, its turns file, earlier results.

Use :func:`load_fit` for a fit result JSON (format "fit", version 1 or 2; the one reader is
:func:`fringe.io.fit_result.read_fit_result`), :func:`load_turns` for the accepted turns of the
per-turn amplitudes HDF5 file it names (read by :func:`fringe.io.turns_file.read_turns`) and
:func:`load_comparison` for a CSV or TOML table of earlier results. Each validates its file and
raises :class:`~fringe.errors.InputFileError` with one line "PATH: FIELD: EXPECTED"; nothing is
written and the files are never modified. :func:`fringe.report.build.assemble_report` calls
them.
"""

from __future__ import annotations

import csv
import math
from pathlib import Path

from fringe.errors import InputFileError
from fringe.io.fit_result import FitResult, read_fit_result
from fringe.io.turns_file import REQUIRED_COLUMNS, read_accepted_turns

__all__ = ["COMPARE_COLUMNS", "TURN_FIELDS", "load_comparison", "load_fit", "load_turns"]

#: The per-turn columns a report uses.
TURN_FIELDS = REQUIRED_COLUMNS
COMPARE_COLUMNS = ("name", "value", "sigma", "citation")


def load_fit(path) -> FitResult:
    """The fit result in ``path``, read and checked.

    See :func:`~fringe.io.fit_result.read_fit_result`.
    """
    return read_fit_result(path)


def load_turns(path, fit: FitResult | None = None) -> dict:
    """The accepted turns of a per-turn amplitudes file (HDF5, format "turns" v1), time-sorted.

    See :func:`~fringe.io.turns_file.read_accepted_turns`.

    Returns the arrays of :data:`TURN_FIELDS` but ``accepted`` plus ``turn_period_s``
    (``stage1.turn_period_s`` of ``fit`` if given, else the median turn spacing), ``n_turns``
    and ``n_rejected``.
    """
    path = Path(path)
    if not path.is_file():
        raise InputFileError(path, "file", "expected the per-turn amplitudes file named by "
                                           "amplitudes_file of the fit result")
    stage1 = fit.stage1 if fit is not None else None
    return read_accepted_turns(path, stage1.turn_period_s if stage1 is not None else None)


def _comparison_csv(path: Path, text: str) -> list[dict]:
    """The rows of a CSV table of earlier results (``#`` comments and blank lines skipped)."""
    lines = [ln for ln in text.splitlines() if ln.strip() and not ln.lstrip().startswith("#")]
    reader = csv.DictReader(lines, skipinitialspace=True)
    missing = [c for c in COMPARE_COLUMNS if c not in (reader.fieldnames or [])]
    if missing:
        raise InputFileError(path, "header", f"expected columns {', '.join(COMPARE_COLUMNS)}"
                                             f" (missing {', '.join(missing)})")
    return list(reader)


def _comparison_toml(path: Path, text: str) -> list[dict]:
    """The ``[[limits]]`` tables of a TOML file of earlier results."""
    try:
        import tomllib
    except ModuleNotFoundError:           # Python 3.10
        import tomli as tomllib
    try:
        raw = tomllib.loads(text).get("limits")
    except tomllib.TOMLDecodeError as exc:
        raise InputFileError(path, "TOML", f"expected valid TOML ({exc})") from None
    except RecursionError:
        raise InputFileError(path, "TOML", "expected valid TOML (tables and arrays nested "
                             "too deeply to read)") from None
    if not isinstance(raw, list) or not all(isinstance(r, dict) for r in raw):
        raise InputFileError(path, "limits", "expected an array of tables [[limits]] with "
                                             f"keys {', '.join(COMPARE_COLUMNS)}")
    return raw


def load_comparison(path) -> list[dict]:
    """Earlier results from a CSV or a TOML file.

    A CSV has the header ``name,value,sigma,citation`` (``#`` comments); a TOML file has
    ``[[limits]]`` tables with those keys. A quoted bound |c| < L is entered as
    value L, sigma 0. Returns rows ``{"name", "value", "sigma", "citation"}``.
    """
    path = Path(path)
    if not path.is_file():
        raise InputFileError(path, "file", "expected an existing .csv or .toml table of "
                                           "earlier results")
    suffix = path.suffix.lower()
    try:
        text = path.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise InputFileError(path, "file", f"expected a readable UTF-8 text file ({exc})") \
            from None
    if suffix == ".csv":
        raw, first = _comparison_csv(path, text), 2
    elif suffix == ".toml":
        raw, first = _comparison_toml(path, text), 1
    else:
        raise InputFileError(path, "file", f"expected a .csv or .toml file, got {suffix!r}")
    if not raw:
        raise InputFileError(path, "rows", "expected at least one earlier result")
    rows = []
    for i, r in enumerate(raw, start=first):
        where = f"row {i}" if suffix == ".csv" else f"limits[{i - 1}]"
        name, cite = str(r.get("name") or "").strip(), str(r.get("citation") or "").strip()
        if not name:
            raise InputFileError(path, f"{where}: name", "expected a coefficient name")
        if not cite:
            raise InputFileError(path, f"{where}: citation", "expected the source of the "
                                                             "result")
        vals = {}
        for col in ("value", "sigma"):
            x = r.get(col)
            try:
                v = float(x) if not isinstance(x, bool) else math.nan
            except (TypeError, ValueError):
                v = math.nan
            if not math.isfinite(v) or (col == "sigma" and v < 0):
                want = "a finite number >= 0" if col == "sigma" else "a finite number"
                raise InputFileError(path, f"{where}: {col}", f"expected {want}, got {x!r}")
            vals[col] = v
        rows.append({"name": name, **vals, "citation": cite})
    return rows
