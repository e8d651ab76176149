"""CSV import: turn a table of samples into a run file.

Use :func:`import_csv` with a metadata TOML file (read by :func:`read_import_metadata`; format in
``docs/run-format.md``), with keyword arguments, or both (a keyword replaces the whole TOML
section of that name). The CSV is streamed in blocks of ``block_rows`` rows and written with
:class:`~fringe.io.runreader.RunWriter`, so the output is whole or absent and memory stays bounded.

Time is either seconds since ``epoch_utc`` (units ``"s"``) or ISO 8601 UTC timestamps (units
``"iso8601"``), converted to elapsed SI seconds since ``epoch_utc`` (default: the first
timestamp) with leap seconds counted (TAI - UTC from pyerfa's ``dat``). Before 1960, when there
was no UTC, timestamps are taken as UT: TAI - UTC = 0 and no leap seconds (what ``dat`` gives
there), with a :class:`~fringe.errors.TimeScaleWarning` that says so. Empty cells in the signal
or auxiliary columns are dropped samples (NaN). A bad cell raises
:class:`~fringe.errors.InputFileError`: ``data.csv: line 17, column 'beat': expected a number,
got 'abc'``.

Readings in instrument units, weights, the counter's gate and a second device's azimuth log
(optional sections ``[calibration]``, ``[gate]``, ``[azimuth_log]`` and the ``weight`` column;
:mod:`fringe.io.twodevice`) make a format-version-2 run file. An arbitrary zero of the readings
(a micrometer re-set each session or day) needs no option: stage 1 fits an offset per turn.
"""

from __future__ import annotations

import csv
import datetime
import hashlib
import io
import os
import warnings
from collections.abc import Callable, Iterator, Mapping, Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

try:
    import tomllib
except ModuleNotFoundError:  # Python 3.10
    import tomli as tomllib

from fringe.errors import (
    ConfigError,
    InputFileError,
    TimeScaleWarning,
    check_regular_file,
    closest_hint,
    missing_input,
    not_utf8,
    unknown_text,
)
from fringe.frames import UTC_FIRST_YEAR, leap_table_last_year
from fringe.io.runformat import (
    APPARATUS_KINDS,
    AZIMUTH_MAX_RAD,
    AZIMUTH_UNITS,
    CORE_CHANNELS,
    DEFAULT_CHUNK_SAMPLES,
    WEIGHT_CHANNEL,
    check_apparatus,
    check_epoch_utc,
    check_site,
    parse_utc_iso,
)
from fringe.io.runwriter import RunWriter, _check_output_path
from fringe.io.twodevice import (
    AzimuthTrack,
    check_azimuth_log,
    check_calibration,
    check_gate,
    gate_shift_s,
)
from fringe.site import Site

__all__ = ["TIME_FORMATS", "CsvImportSummary", "check_import_metadata", "import_csv",
           "read_import_metadata"]

TIME_FORMATS = ("s", "iso8601")
#: Units of the weight column: a relative weight, or the number of readings a value averages.
WEIGHT_UNITS = ("1", "readings")
_SECTIONS = ("epoch_utc", "site", "apparatus", "columns", "units", "csv", "calibration", "gate",
             "azimuth_log")
_ISO_HINT = "an ISO 8601 UTC time like '2027-02-03T00:00:00Z'"
ZERO = datetime.timedelta(0)


@dataclass(frozen=True)
class CsvImportSummary:
    """What :func:`import_csv` wrote.

    Attributes
    ----------
    out_path : str
        The run file written.
    n_samples : int
        Data rows imported.
    epoch_utc : str
        Epoch of the time axis.
    time_first_s, time_last_s : float
        First and last time, s since ``epoch_utc``.
    source_sha256 : str
        SHA-256 of the CSV bytes (also stored in the run file's ``provenance`` group).
    n_dropped : int
        Signal rows left out because the azimuth log had no azimuth for them (outside its span,
        or in a gap with ``on_gap = "drop"``); 0 for a one-file import.
    """

    out_path: str
    n_samples: int
    epoch_utc: str
    time_first_s: float
    time_last_s: float
    source_sha256: str
    n_dropped: int = 0


def _table(value, err, name: str) -> dict:
    if not isinstance(value, Mapping):
        raise err(name, f"expected a table, got {type(value).__name__}")
    return dict(value)


def _check_section(name: str, value, err):
    """Validate one metadata section on its own; cross-checks come after merging."""
    if name == "epoch_utc":
        if isinstance(value, datetime.datetime) and value.utcoffset() in (None, ZERO):
            value = value.replace(tzinfo=None).isoformat()  # an unquoted TOML date-time, UTC
        return check_epoch_utc(value, err, "epoch_utc", strict=False)
    if name == "site":
        return value if isinstance(value, Site) else _check_site_table(value, err)
    if name == "apparatus":
        table = _table(value, err, name)
        _check_apparatus_names(table, err)
        return check_apparatus(table, err)
    if name in _OPTION_SECTIONS:
        return _OPTION_SECTIONS[name](_table(value, err, name), err)
    table = _table(value, err, name)
    for key, item in table.items():
        if not isinstance(item, str) or (name != "csv" and not item.strip()):
            raise err(f"{name}.{key}", f"expected a non-empty string, got {item!r}")
    if name == "csv":
        for key in table:
            if key not in ("delimiter", "comment"):
                raise err(f"csv.{key}", unknown_text(key, ("delimiter", "comment"), "field",
                                                     ordered=True))
        if len(table.get("delimiter", ",")) != 1:
            raise err("csv.delimiter", f"expected one character, got {table['delimiter']!r}")
    if name == "columns":
        for key in table:
            if key not in CORE_CHANNELS and ("/" in key or "." in key):
                raise err(f"columns.{key}", "expected a channel name without '/' or '.'")
    return table


#: The keys of the metadata's ``[site]`` table.
SITE_KEYS = ("latitude_deg", "longitude_deg", "height_m", "name")


def _check_site_table(value, err) -> Site:
    table = _table(value, err, "site")
    for key in table:
        if key not in SITE_KEYS:
            raise err(f"site.{key}", f"expected only the keys {', '.join(SITE_KEYS)}"
                      + closest_hint(key, SITE_KEYS))
    return check_site(table, err)


def _check_apparatus_names(attrs: Mapping, err) -> None:
    """Refuse an apparatus attribute no model reads that is close to one it does (a typo).

    Other further attributes (a serial number, a description) are stored as the run-file
    format allows (docs/run-format.md).
    """
    from fringe.experiment.apparatus import APPARATUS_KINDS as MODELS
    from fringe.experiment.apparatus import apparatus_fields

    if not isinstance(attrs.get("kind"), str) or attrs["kind"] not in MODELS:
        return                                  # check_apparatus names the kind's problem
    known = sorted(apparatus_fields(MODELS[attrs["kind"]]))
    for key in attrs:
        hint = closest_hint(key, known) if key != "kind" and key not in known else ""
        if hint:
            raise err(f"apparatus.{key}", f"expected an attribute of kind {attrs['kind']!r} "
                      f"({', '.join(known)}); this one is read by no model" + hint)


def _check_log(table: Mapping, err) -> dict:
    return check_azimuth_log(table, err, lambda v, e, o: _check_section("epoch_utc", v, e))


#: The optional sections of the readings import (fringe.io.twodevice).
_OPTION_SECTIONS = {"calibration": check_calibration, "gate": check_gate,
                    "azimuth_log": _check_log}


def read_import_metadata(path: str | os.PathLike) -> dict:
    """Read and validate a CSV-import metadata TOML file.

    Returns
    -------
    dict
        The sections present, validated: ``epoch_utc`` (str), ``site`` (Site), ``apparatus``
        (dict), ``columns``, ``units`` and ``csv`` (dicts of str).

    Raises
    ------
    InputFileError
        ``PATH: FIELD: EXPECTED``, e.g. ``meta.toml: site.latitude_deg: expected ...``.
    """
    path = os.fspath(path)
    if os.path.lexists(path):             # a FIFO would block the read forever
        check_regular_file(path, "the import's metadata (TOML) file")
    try:
        with open(path, "rb") as fh:
            raw = tomllib.load(fh)
    except FileNotFoundError:
        raise missing_input(path, "the import's metadata (TOML) file") from None
    except UnicodeDecodeError as exc:
        raise not_utf8(path, exc) from None
    except tomllib.TOMLDecodeError as exc:
        raise InputFileError(path, "file", f"expected valid TOML ({exc})") from None
    except RecursionError:
        raise InputFileError(path, "file", "expected valid TOML (tables and arrays nested "
                             "too deeply to read)") from None

    def err(obj, expected):
        return InputFileError(path, obj, expected)

    out = {}
    for name, value in raw.items():
        if name not in _SECTIONS:
            raise err(name, unknown_text(name, _SECTIONS, "section", ordered=True))
        out[name] = _check_section(name, value, err)
    return out


def check_import_metadata(path: str | os.PathLike) -> dict:
    """Validate a metadata file as :func:`import_csv` would, without reading any CSV.

    Every section on its own (:func:`read_import_metadata`) and together: the required
    sections, a column and units for every core channel, units allowed for the apparatus kind,
    ``epoch_utc`` for times in seconds, no azimuth column with ``[azimuth_log]``.

    Returns
    -------
    dict
        The merged, validated sections (as :func:`read_import_metadata`).
    """
    merged, _ = _merge(path, {})
    return merged


def _merge(metadata, kwargs: dict) -> tuple[dict, Callable]:
    """Merge TOML and keyword metadata; return it and ``err_for(section)`` (error factory)."""
    def kw_err(obj, expected):
        return ConfigError(f"import_csv: {obj}: {expected}")

    merged = read_import_metadata(metadata) if metadata is not None else {}
    sources = dict.fromkeys(merged, "toml")
    for name, value in kwargs.items():
        if value is not None:
            merged[name] = _check_section(name, value, kw_err)
            sources[name] = "kw"
    toml_err = (lambda obj, exp: InputFileError(metadata, obj, exp)) if metadata else kw_err

    def err_for(section):
        return kw_err if sources.get(section) == "kw" else toml_err

    for name, what in (("site", "latitude_deg and longitude_deg"), ("apparatus", "a kind"),
                       ("columns", "time, azimuth and signal header names"),
                       ("units", "units of time, azimuth and signal")):
        if name not in merged:
            raise err_for(name)(name, f"missing table; expected {what}")
    merged["units"] = _checked_units(merged, err_for)
    return merged, err_for


def _core_columns(merged: dict, err_for: Callable) -> tuple[str, ...]:
    """The core channels the main CSV must give: no azimuth when it comes from a log."""
    if "azimuth_log" not in merged:
        return CORE_CHANNELS
    for section in ("columns", "units"):
        if "azimuth" in merged[section]:
            raise err_for(section)(f"{section}.azimuth", "expected no azimuth entry: the "
                                   "azimuth comes from azimuth_log")
    return ("time", "signal")


def _checked_units(merged: dict, err_for: Callable) -> dict:
    """The ``[units]`` of ``merged``, checked against ``[columns]`` and the apparatus kind.

    Every core channel needs a column, every column its units (time defaults to "s") and no
    units without a column; seconds need an ``epoch_utc``. Errors come from ``err_for(section)``.
    """
    columns, units = merged["columns"], dict(merged["units"])
    core = _core_columns(merged, err_for)
    for key in core:
        if key not in columns:
            raise err_for("columns")(f"columns.{key}", "missing entry; expected a header name")
    seen = {}
    for key, header in columns.items():
        if header in seen:
            raise err_for("columns")(f"columns.{key}", f"expected a column other than that of "
                                     f"columns.{seen[header]} ({header!r}): each column holds "
                                     "one channel")
        seen[header] = key
    units.setdefault("time", "s")
    u_err = err_for("units")
    for key in columns:
        if key not in units:
            raise u_err(f"units.{key}", f"missing entry; expected the units of column {key!r}")
    for key in units:
        if key not in columns:
            raise u_err(f"units.{key}", "expected units only for the columns named in columns")
    kind = merged["apparatus"]["kind"]
    rules = [("time", TIME_FORMATS), ("azimuth", AZIMUTH_UNITS),
             ("signal", APPARATUS_KINDS[kind].signal_units), (WEIGHT_CHANNEL, WEIGHT_UNITS)]
    for key, allowed in rules:
        if key in units and units[key] not in allowed:
            raise u_err(f"units.{key}", f"expected {' or '.join(map(repr, allowed))}, got "
                        f"{units[key]!r}")
    if units["time"] == "s" and "epoch_utc" not in merged:
        raise err_for("epoch_utc")("epoch_utc", f"missing; expected {_ISO_HINT} (required when "
                                   "time is in seconds)")
    return units


class _HashingReader(io.RawIOBase):
    """Counts and hashes the bytes read through it (for progress and provenance)."""

    def __init__(self, fh):
        self._fh, self.count, self.digest = fh, 0, hashlib.sha256()

    def readable(self) -> bool:
        return True

    def readinto(self, buffer) -> int:
        n = self._fh.readinto(buffer)
        if n:
            self.count += n
            self.digest.update(memoryview(buffer)[:n])
        return n


def _skip(row: list[str], comment: str) -> bool:
    return not row or (len(row) == 1 and not row[0].strip()) or \
        bool(comment and row[0].lstrip().startswith(comment))


class _Table:
    """Row stream of one CSV file: header, then blocks of mapped fields with line numbers."""

    def __init__(self, path: str, fh, delimiter: str, comment: str):
        self.path, self.comment = path, comment
        self.raw = _HashingReader(fh)
        text = io.TextIOWrapper(io.BufferedReader(self.raw), encoding="utf-8-sig", newline="")
        self.reader = csv.reader(text, delimiter=delimiter)

    def _rows(self) -> Iterator[list[str]]:
        while True:
            try:
                row = next(self.reader)
            except StopIteration:
                return
            except UnicodeDecodeError:  # text is decoded in blocks: the line is a lower bound
                raise InputFileError(self.path, "file", f"expected UTF-8 text, got bytes that "
                                     f"are not UTF-8 at or after line "
                                     f"{self.reader.line_num + 1}") from None
            except csv.Error as exc:
                raise InputFileError(self.path, f"line {self.reader.line_num}",
                                     f"expected valid CSV ({exc})") from None
            if not _skip(row, self.comment):
                yield row

    def header(self, columns: Mapping[str, str]) -> dict[str, int]:
        self._iter = self._rows()
        header = next(self._iter, None)
        if header is None:
            raise InputFileError(self.path, "header", "expected a header line naming the "
                                 "columns, got no lines")
        self.width = len(header)
        names = [h.strip() for h in header]
        found = ", ".join(repr(h) for h in names[:12]) + (", ..." if len(names) > 12 else "")
        index = {}
        for key, col in columns.items():
            hits = [i for i, h in enumerate(names) if h == col]
            if len(hits) != 1:
                raise InputFileError(self.path, "header", f"expected one column named {col!r} "
                                     f"(for {key}), found {len(hits)} among {found}")
            index[key] = hits[0]
        return index

    def blocks(self, index: Mapping[str, int], rows: int) -> Iterator[tuple[dict, list[int]]]:
        cells: dict[str, list[str]] = {key: [] for key in index}
        lines: list[int] = []
        for row in self._iter:
            if len(row) != self.width:
                raise InputFileError(self.path, f"line {self.reader.line_num}", f"expected "
                                     f"{self.width} fields as in the header, got {len(row)}")
            for key, i in index.items():
                cells[key].append(row[i])
            lines.append(self.reader.line_num)
            if len(lines) >= rows:
                yield cells, lines
                cells, lines = {key: [] for key in index}, []
        if lines:
            yield cells, lines


def _numbers(table: _Table, cells: list[str], lines: list[int], col: str,
             empty_is_nan: bool) -> NDArray[np.float64]:
    if empty_is_nan:
        cells = [c if c.strip() else "nan" for c in cells]
    try:
        return np.array(cells, dtype=np.float64)
    except ValueError:
        values = []
        for cell, line in zip(cells, lines, strict=True):
            try:
                values.append(float(cell))
            except ValueError:
                raise InputFileError(table.path, f"line {line}, column {col!r}",
                                     f"expected a number, got {cell!r}") from None
        return np.array(values)


def _utc_parts(cells: list[str], where: Sequence[str], err, source: str):
    """(day ordinal, second of day, TAI - UTC in s) for each timestamp; where[i] names cell i."""
    import erfa

    ordinal, sod, ymd, fd = [], [], [], []
    for cell, obj in zip(cells, where, strict=True):
        try:
            y, mo, d, h, mi, s = parse_utc_iso(cell, strict=False)
        except ValueError:
            raise err(obj, f"expected {_ISO_HINT}, got {cell!r}") from None
        ordinal.append(datetime.date(y, mo, d).toordinal())
        sod.append(h * 3600.0 + mi * 60.0 + s)
        ymd.append((y, mo, d))
        fd.append(min(sod[-1] / 86400.0, 1.0))
    ordinal, sod, ymd = np.array(ordinal), np.array(sod), np.array(ymd)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", erfa.ErfaWarning)
        dat = erfa.dat(ymd[:, 0], ymd[:, 1], ymd[:, 2], np.array(fd))
        leap = sod >= 86400.0
        if leap.any():
            nxt = [datetime.date.fromordinal(o + 1) for o in ordinal[leap]]
            step = erfa.dat([n.year for n in nxt], [n.month for n in nxt],
                            [n.day for n in nxt], 0.0) - dat[leap]
            if np.any(step < 0.5):
                i = np.flatnonzero(leap)[int(np.argmax(step < 0.5))]
                raise err(where[i], f"expected a time that exists in UTC (no leap second "
                          f"that day), got {cells[i]!r}")
    if any(issubclass(w.category, erfa.ErfaWarning) for w in caught):
        if np.any(ymd[:, 0] < UTC_FIRST_YEAR):   # ERFA's dat is 0 there: UTC taken as UT
            warnings.warn(f"{source}: times before 1960 (no UTC then) are taken as UT: TAI - "
                          "UTC = 0, no leap seconds, elapsed seconds are UT seconds",
                          TimeScaleWarning, stacklevel=3)
        if np.any(ymd[:, 0] > leap_table_last_year()):
            warnings.warn(f"{source}: the leap-second table does not cover these UTC dates; "
                          "elapsed seconds miss any leap second announced later",
                          TimeScaleWarning, stacklevel=3)
    return ordinal, sod, dat


def _check_increasing(table, t_s, cells, lines, col, prev) -> tuple:
    """Strictly increasing times, also across blocks; prev = (time_s, cell, line) or None."""
    bad = t_s[1:] <= t_s[:-1]
    if prev is not None and not t_s[0] > prev[0]:
        i, before = 0, prev[1:]
    elif bad.any():
        i = int(np.argmax(bad)) + 1
        before = (cells[i - 1], lines[i - 1])
    else:
        return float(t_s[-1]), cells[-1], lines[-1]
    raise InputFileError(table.path, f"line {lines[i]}, column {col!r}",
                         f"expected a time later than line {before[1]} ({before[0]!r}), "
                         f"got {cells[i]!r}")


def _first_bad(table, mask, cells, lines, col, expected) -> None:
    if mask.any():
        i = int(np.argmax(mask))
        raise InputFileError(table.path, f"line {lines[i]}, column {col!r}",
                             f"expected {expected}, got {cells[i]!r}")


def _check_azimuth_range(table: _Table, az: NDArray, cells: list[str], lines: list[int],
                         col: str, units: str) -> None:
    """Refuse an azimuth beyond 2**32 rad, naming the file's line and column."""
    rad = np.pi / 180.0 if units == "deg" else 1.0
    _first_bad(table, np.abs(az) * rad > AZIMUTH_MAX_RAD, cells, lines, col,
               "an azimuth within 2**32 rad (float64 resolves about 1e-6 rad there; wrap "
               "larger ones)")


def _seconds(table: _Table, cells: list[str], lines: list[int], col: str, units: str,
             e_parts, row_err) -> NDArray[np.float64]:
    """Elapsed s since the epoch (``e_parts`` from :func:`_utc_parts`) of a block of times."""
    if units == "iso8601":
        where = [f"line {n}, column {col!r}" for n in lines]
        o, s, d = _utc_parts(cells, where, row_err, table.path)
        return (o - e_parts[0]) * 86400.0 + (s - e_parts[1]) + (d - e_parts[2])
    t_s = _numbers(table, cells, lines, col, False)
    _first_bad(table, ~np.isfinite(t_s), cells, lines, col, "a finite time in seconds")
    return t_s


def _weights(table: _Table, cells: list[str], lines: list[int], col: str,
             units: str) -> NDArray[np.float64]:
    w = _numbers(table, cells, lines, col, True)
    _first_bad(table, ~(w > 0) & ~np.isnan(w) | np.isinf(w), cells, lines, col,
               "a finite weight > 0 or an empty cell (dropped sample)")
    if units == "readings":
        _first_bad(table, np.isfinite(w) & (w != np.round(w)), cells, lines, col,
                   "a whole number of readings (units 'readings')")
    return w


class _Import:
    """One import: the CSV (and azimuth log) streamed in blocks into a RunWriter."""

    def __init__(self, meta: dict, err_for: Callable, csv_path: str, log_path: str | None):
        self.meta, self.err_for, self.csv_path, self.log_path = meta, err_for, csv_path, log_path
        self.columns, self.units = meta["columns"], meta["units"]
        self.scale = meta.get("calibration", {}).get("scale_factor", 1.0)
        self.shift_s = gate_shift_s(meta.get("gate"))
        self.log = meta.get("azimuth_log")
        self.epoch = meta.get("epoch_utc")
        self.e_parts = None
        self.track: AzimuthTrack | None = None
        self.prev = self.first = self.last = None
        self.out_path = ""
        self.n_dropped = 0
        self.span = [None, None]          # first and last signal time, s (gate centres)

    def row_err(self, obj, expected):
        return InputFileError(self.csv_path, obj, expected)

    def times(self, table: _Table, cells: dict, lines: list[int]) -> NDArray[np.float64]:
        """The block's signal times, s since the epoch, moved to the gate windows' centres."""
        col = self.columns["time"]
        if self.e_parts is None and self.units["time"] == "iso8601":
            self.epoch = self.epoch or check_epoch_utc(
                cells["time"][0], self.row_err, f"line {lines[0]}, column {col!r}",
                strict=False)
            self.epoch_parts()
        t_s = _seconds(table, cells["time"], lines, col, self.units["time"], self.e_parts,
                       self.row_err)
        self.prev = _check_increasing(table, t_s, cells["time"], lines, col, self.prev)
        return t_s + self.shift_s

    def epoch_parts(self):
        """(day ordinal, second of day, TAI - UTC) of the epoch, computed once when needed."""
        if self.e_parts is None:
            self.e_parts = _utc_parts([self.epoch], ["epoch_utc"], self.err_for("epoch_utc"),
                                      self.csv_path)
        return self.e_parts

    def open_track(self, fh) -> None:
        """Start reading the azimuth log (after the epoch is known)."""
        log = self.log
        table = _Table(self.log_path, fh, log["delimiter"], log["comment"])
        index = table.header(log["columns"])
        offset = log["clock_offset_s"]
        if log["units"]["time"] == "s" and log["epoch_utc"] not in (None, self.epoch):
            lp, ep = _utc_parts([log["epoch_utc"]], ["azimuth_log.epoch_utc"],
                                self.err_for("azimuth_log"), self.log_path), self.epoch_parts()
            offset += float((lp[0] - ep[0])[0] * 86400.0 + (lp[1] - ep[1])[0]
                            + (lp[2] - ep[2])[0])
        e_parts = self.epoch_parts() if log["units"]["time"] == "iso8601" else None

        def err(obj, expected):
            return InputFileError(self.log_path, obj, expected)

        def blocks():
            prev = None
            for cells, lines in table.blocks(index, 65_536):
                tcol, acol = log["columns"]["time"], log["columns"]["azimuth"]
                t_s = _seconds(table, cells["time"], lines, tcol, log["units"]["time"],
                               e_parts, err)
                prev = _check_increasing(table, t_s, cells["time"], lines, tcol, prev)
                az = _numbers(table, cells["azimuth"], lines, acol, False)
                _first_bad(table, ~np.isfinite(az), cells["azimuth"], lines, acol,
                           "a finite azimuth")
                _check_azimuth_range(table, az, cells["azimuth"], lines, acol,
                                     log["units"]["azimuth"])
                shifted = t_s + offset
                _first_bad(table, np.diff(shifted, prepend=-np.inf) <= 0, cells["time"], lines,
                           tcol, "times that stay strictly increasing once moved onto the "
                           "signal's clock (azimuth_log.clock_offset_s, epoch_utc)")
                yield shifted, az, lines

        turn = 360.0 if log["units"]["azimuth"] == "deg" else 2.0 * np.pi
        self.track = AzimuthTrack(blocks(), turn, log["max_gap_s"])

    def merge(self, t_s: NDArray, lines: list[int]) -> tuple[NDArray, NDArray]:
        """Azimuth at the signal times and the rows kept (gaps refused or dropped)."""
        az, inside, gap, line = self.track.at(t_s)
        bad = inside & (gap > self.log["max_gap_s"])
        if bad.any() and self.log["on_gap"] == "error":
            i = int(np.argmax(bad))
            raise InputFileError(
                self.log_path, f"line {int(line[i])}, column {self.log['columns']['time']!r}",
                f"expected azimuth samples at most azimuth_log.max_gap_s = "
                f"{self.log['max_gap_s']:g} s apart, got a gap of {gap[i]:.6g} s around the "
                f"signal time {t_s[i]:.6f} s ({os.path.basename(self.csv_path)} line "
                f"{lines[i]}); or set azimuth_log.on_gap = 'drop'")
        self._check_unwrapped(az, inside, line)
        keep = inside & ~bad
        self.n_dropped += int(keep.size - np.count_nonzero(keep))
        return az, keep

    def _check_unwrapped(self, az: NDArray, inside: NDArray, line: NDArray) -> None:
        """Refuse an azimuth that unwrapping (whole turns added) took beyond 2**32 rad."""
        rad = np.pi / 180.0 if self.log["units"]["azimuth"] == "deg" else 1.0
        big = inside & (np.abs(az) * rad > AZIMUTH_MAX_RAD)
        if big.any():
            i = int(np.argmax(big))
            raise InputFileError(
                self.log_path, f"line {int(line[i])}, column {self.log['columns']['azimuth']!r}",
                f"expected an azimuth that stays within 2**32 rad once unwrapped (whole turns "
                f"added where consecutive samples jump by more than half a turn), got "
                f"{az[i] * rad:.12g} rad; wrap the log's azimuth to one turn, or split the log")

    def no_overlap(self) -> InputFileError:
        """The error for a two-device import that kept no row."""
        tr = self.track
        span = ("no azimuth samples" if tr.first_s is None else
                f"azimuth log from {tr.first_s:.6g} s to {tr.last_s:.6g} s")
        return self.err_for("azimuth_log")(
            "azimuth_log.clock_offset_s", f"expected the two logs to overlap in time, got "
            f"signal times from {self.span[0]:.6g} s to {self.span[1]:.6g} s and {span} "
            f"(with clock_offset_s = {self.log['clock_offset_s']:g} s)")

    def signal_attrs(self) -> dict:
        """The version-2 attributes of samples/signal for this import."""
        out = {}
        if "gate" in self.meta:
            out.update(gate_s=self.meta["gate"]["gate_s"], gate_kind=self.meta["gate"]["kind"])
        out.update(self.meta.get("calibration", {}))
        return out

    def provenance(self, digest: str) -> dict:
        """The provenance group's attributes."""
        out = {"source_file": os.path.basename(self.csv_path), "source_sha256": digest,
               "imported_by": "fringe.io.csvimport"}
        if "gate" in self.meta:
            out.update(gate_stamp=self.meta["gate"]["stamp"], time_shift_s=self.shift_s)
        if self.log is not None:
            from fringe.io.runreader import sha256

            out.update(azimuth_source_file=os.path.basename(self.log_path),
                       azimuth_source_sha256=sha256(self.log_path),
                       clock_offset_s=self.log["clock_offset_s"],
                       max_gap_s=self.log["max_gap_s"], on_gap=self.log["on_gap"],
                       n_dropped=self.n_dropped)
        return out


def import_csv(csv_path: str | os.PathLike, out_path: str | os.PathLike, *,
               metadata: str | os.PathLike | None = None, columns: Mapping | None = None,
               units: Mapping | None = None, site: Site | Mapping | None = None,
               apparatus: Mapping | None = None, epoch_utc: str | None = None,
               delimiter: str | None = None, comment: str | None = None,
               calibration: Mapping | None = None, gate: Mapping | None = None,
               azimuth_log: str | os.PathLike | None = None,
               azimuth_log_format: Mapping | None = None,
               overwrite: bool = False, protect: Sequence = (), block_rows: int = 65_536,
               chunk_samples: int = DEFAULT_CHUNK_SAMPLES, compression: str | None = None,
               progress: Callable[[int, int], None] | None = None) -> CsvImportSummary:
    """Convert a CSV table of samples (and optionally an azimuth log) into a run file.

    Parameters
    ----------
    csv_path : path
        The CSV file: one header line, then one row per sample (``#`` lines and blank lines
        skipped). With ``azimuth_log``, the signal log (time and signal, no azimuth).
    out_path : path
        The run file to write (never over ``csv_path``, ``metadata``, ``azimuth_log`` or
        ``protect``).
    metadata : path, optional
        TOML file with the sections below (see ``docs/run-format.md``).
    columns : mapping, optional
        Run-file channel -> CSV header name; needs ``time``, ``azimuth``, ``signal`` (no
        ``azimuth`` with ``azimuth_log``); ``weight`` names the weight column; any other key is
        an auxiliary channel.
    units : mapping, optional
        Channel -> units: time ``"s"`` or ``"iso8601"``; azimuth ``"rad"`` or ``"deg"``; signal
        ``"Hz"``, ``"1"`` or ``"fringe"`` (after ``calibration``); weight ``"1"`` (relative
        weight) or ``"readings"`` (the value is the mean of that many readings); each
        auxiliary channel a units string.
    site : Site or mapping, optional
        Latitude_deg, longitude_deg (degrees), height_m (m), name.
    apparatus : mapping, optional
        The run file's ``apparatus`` attributes (``kind`` and the kind's attributes).
    epoch_utc : str, optional
        ISO 8601 UTC epoch; required for time in seconds; for ISO timestamps the default is
        the first timestamp.
    delimiter, comment : str, optional
        Field separator (default ``,``) and comment prefix (default ``#``; ``""`` for none).
    calibration : mapping, optional
        ``scale_factor`` (signal units per instrument unit), ``scale_rel_sigma`` (its relative
        standard uncertainty), ``instrument_units``: readings are multiplied by the factor.
    gate : mapping, optional
        The counter's ``gate_s`` (s), ``kind`` (``"plain"`` or ``"overlapping"``) and ``stamp``
        (``"start"``, ``"centre"`` or ``"end"`` of the averaging window): times are moved to
        the window's centre and the gate is recorded for the fit's correction.
    azimuth_log : path, optional
        CSV of the azimuth from a second device (an encoder log), merged onto the signal's
        times; needs ``azimuth_log_format`` (or the TOML section ``[azimuth_log]``).
    azimuth_log_format : mapping, optional
        ``columns``, ``units``, ``max_gap_s`` (s), optional ``epoch_utc``, ``clock_offset_s``
        (s added to the log's times), ``on_gap`` (``"error"`` or ``"drop"``), ``delimiter``,
        ``comment`` (:func:`fringe.io.twodevice.check_azimuth_log`).
    overwrite : bool
        Replace an existing ``out_path``.
    protect : sequence of path
        Further paths that must not be written over.
    block_rows : int
        Rows converted per block (bounds memory).
    chunk_samples, compression
        Passed to :class:`~fringe.io.runreader.RunWriter`.
    progress : callable, optional
        Called as ``progress(rows_imported, bytes_read)`` after each block (the CSV's size,
        ``os.path.getsize(csv_path)``, is the final ``bytes_read``).

    Returns
    -------
    CsvImportSummary
    """
    csv_path, out_path = os.fspath(csv_path), os.fspath(out_path)
    log_path = os.fspath(azimuth_log) if azimuth_log is not None else None
    meta, err_for = _merge(metadata, {"epoch_utc": epoch_utc, "site": site, "apparatus": apparatus,
                                "columns": columns, "units": units,
                                "csv": _csv_options(delimiter, comment),
                                "calibration": calibration, "gate": gate,
                                "azimuth_log": azimuth_log_format})
    if (log_path is None) != ("azimuth_log" not in meta):
        raise err_for("azimuth_log")("azimuth_log", "expected the azimuth_log section together "
                                     "with an azimuth log file (azimuth_log=PATH), or neither")
    options = {"delimiter": ",", "comment": "#", **meta.get("csv", {})}
    protect = (csv_path,) + ((os.fspath(metadata),) if metadata else ()) \
        + ((log_path,) if log_path else ()) + tuple(protect)
    _check_output_path(out_path, overwrite, protect)
    for path in (csv_path, log_path):
        if path is not None and not os.path.isfile(path):
            raise missing_input(path, "a CSV file")
    job = _Import(meta, err_for, csv_path, log_path)
    job.out_path = out_path
    with open(csv_path, "rb") as fh, open(log_path or csv_path, "rb") as log_fh:
        table = _Table(csv_path, fh, options["delimiter"], options["comment"])
        writer = None
        try:
            writer = _stream(job, table, log_fh, max(int(block_rows), 1), progress,
                             dict(overwrite=overwrite, protect=protect,
                                  chunk_samples=chunk_samples, compression=compression))
            digest = table.raw.digest.hexdigest()
            writer.write_group("provenance", job.provenance(digest))
        except BaseException:
            if writer is not None:
                writer.abort()
            raise
    writer.close()
    if job.units["time"] == "s":      # ISO timestamps were checked day by day in _utc_parts
        _warn_time_span(csv_path, job.epoch, float(job.first), float(job.last))
    return CsvImportSummary(out_path, writer.n_samples, job.epoch, float(job.first),
                            float(job.last), digest, job.n_dropped)


def _stream(job: _Import, table: _Table, log_fh, block_rows: int, progress,
            writer_options: dict) -> RunWriter:
    """Convert and append every block; return the (open) writer."""
    columns, units, meta = job.columns, job.units, job.meta
    index = table.header(columns)
    writer = None
    try:
        for cells, lines in table.blocks(index, block_rows):
            t_s = job.times(table, cells, lines)
            job.span = [t_s[0] if job.span[0] is None else job.span[0], t_s[-1]]
            if job.log is not None:
                if job.track is None:
                    job.open_track(log_fh)
                az, keep = job.merge(t_s, lines)
            else:
                az = _numbers(table, cells["azimuth"], lines, columns["azimuth"], False)
                _first_bad(table, ~np.isfinite(az), cells["azimuth"], lines,
                           columns["azimuth"], "a finite azimuth")
                _check_azimuth_range(table, az, cells["azimuth"], lines, columns["azimuth"],
                                     units["azimuth"])
                keep = None
            sig = _numbers(table, cells["signal"], lines, columns["signal"], True)
            _first_bad(table, np.isinf(sig), cells["signal"], lines, columns["signal"],
                       "a finite number or an empty cell (dropped sample)")
            extra = {}
            if WEIGHT_CHANNEL in columns:
                extra["weight"] = _weights(table, cells[WEIGHT_CHANNEL], lines,
                                           columns[WEIGHT_CHANNEL], units[WEIGHT_CHANNEL])
            aux = {k: _numbers(table, cells[k], lines, columns[k], True)
                   for k in columns if k not in CORE_CHANNELS and k != WEIGHT_CHANNEL}
            arrays = {"t": t_s, "az": az, "sig": sig * job.scale, **extra, **aux}
            if keep is not None:
                arrays = {k: v[keep] for k, v in arrays.items()}
                if not arrays["t"].size:
                    continue
            if writer is None:
                writer = RunWriter(job.out_path, site=meta["site"],
                                   apparatus=meta["apparatus"], epoch_utc=job.epoch,
                                   signal_units=units["signal"],
                                   azimuth_units=(job.log["units"]["azimuth"] if job.log
                                                  else units["azimuth"]),
                                   aux_channels={k: units[k] for k in aux},
                                   signal_attrs=job.signal_attrs(), weighted=bool(extra),
                                   **writer_options)
                writer.__enter__()
                job.first = arrays["t"][0]
            t, a, y = arrays.pop("t"), arrays.pop("az"), arrays.pop("sig")
            writer.append(t, a, y, **arrays)
            job.last = t[-1]
            if progress is not None:
                progress(writer.n_samples, table.raw.count)
    except BaseException:
        if writer is not None:
            writer.abort()
        raise
    if writer is None:
        if job.track is not None and job.n_dropped:
            raise job.no_overlap()
        raise InputFileError(job.csv_path, "data", "expected at least one data row after the "
                             "header, got none")
    return writer


def _warn_time_span(source: str, epoch: str, first_s: float, last_s: float) -> None:
    """Warn (TimeScaleWarning) when times lie outside a reliable span of the time scales.

    Or of the ephemeris (:func:`fringe.frames.time_span_cautions`).
    """
    from fringe.frames import Epoch, time_span_cautions

    with warnings.catch_warnings():
        warnings.simplefilter("ignore", TimeScaleWarning)
        cautions = time_span_cautions(Epoch(epoch), first_s, last_s)
    for c in cautions:
        warnings.warn(f"{source}: {c.sentence}", TimeScaleWarning, stacklevel=3)


def _csv_options(delimiter: str | None, comment: str | None) -> dict | None:
    options = {k: v for k, v in (("delimiter", delimiter), ("comment", comment)) if v is not None}
    return options or None
