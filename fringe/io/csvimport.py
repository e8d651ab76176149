"""CSV import: turn a table of samples into a run file.

Use :func:`import_csv` with a metadata TOML file (read by :func:`read_import_metadata`; format in
``docs/run-format.md``), with keyword arguments, or both (a keyword replaces the whole TOML
section of that name). The CSV is streamed in blocks of ``block_rows`` rows and written with
:class:`~fringe.io.runreader.RunWriter`, so the output is whole or absent and memory stays bounded.

Time is either seconds since ``epoch_utc`` (units ``"s"``) or ISO 8601 UTC timestamps (units
``"iso8601"``), converted to elapsed SI seconds since ``epoch_utc`` (default: the first
timestamp) with leap seconds counted (TAI - UTC from pyerfa's ``dat``). Empty cells in the signal
or auxiliary columns are dropped samples (NaN). A bad cell raises
:class:`~fringe.errors.InputFileError`: ``data.csv: line 17, column 'beat': expected a number,
got 'abc'``.
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

from fringe.errors import ConfigError, InputFileError, TimeScaleWarning, check_regular_file
from fringe.io.runformat import (
    APPARATUS_KINDS,
    AZIMUTH_UNITS,
    CORE_CHANNELS,
    DEFAULT_CHUNK_SAMPLES,
    check_apparatus,
    check_epoch_utc,
    check_site,
    parse_utc_iso,
)
from fringe.io.runwriter import RunWriter, _check_output_path
from fringe.site import Site

__all__ = ["TIME_FORMATS", "CsvImportSummary", "import_csv", "read_import_metadata"]

TIME_FORMATS = ("s", "iso8601")
_SECTIONS = ("epoch_utc", "site", "apparatus", "columns", "units", "csv")
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
    """

    out_path: str
    n_samples: int
    epoch_utc: str
    time_first_s: float
    time_last_s: float
    source_sha256: str


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
        return value if isinstance(value, Site) else check_site(_table(value, err, name), err)
    if name == "apparatus":
        return check_apparatus(_table(value, err, name), err)
    table = _table(value, err, name)
    for key, item in table.items():
        if not isinstance(item, str) or (name != "csv" and not item.strip()):
            raise err(f"{name}.{key}", f"expected a non-empty string, got {item!r}")
    if name == "csv":
        for key in table:
            if key not in ("delimiter", "comment"):
                raise err(f"csv.{key}", "expected only the keys delimiter and comment")
        if len(table.get("delimiter", ",")) != 1:
            raise err("csv.delimiter", f"expected one character, got {table['delimiter']!r}")
    if name == "columns":
        for key in table:
            if key not in CORE_CHANNELS and ("/" in key or "." in key):
                raise err(f"columns.{key}", "expected a channel name without '/' or '.'")
    return table


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
        raise InputFileError(path, "file", "expected an existing file") from None
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as exc:
        raise InputFileError(path, "file", f"expected valid TOML ({exc})") from None

    def err(obj, expected):
        return InputFileError(path, obj, expected)

    out = {}
    for name, value in raw.items():
        if name not in _SECTIONS:
            raise err(name, f"expected only the keys {', '.join(_SECTIONS)}")
        out[name] = _check_section(name, value, err)
    return out


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


def _checked_units(merged: dict, err_for: Callable) -> dict:
    """The ``[units]`` of ``merged``, checked against ``[columns]`` and the apparatus kind.

    Every core channel needs a column, every column its units (time defaults to "s") and no
    units without a column; seconds need an ``epoch_utc``. Errors come from ``err_for(section)``.
    """
    columns, units = merged["columns"], dict(merged["units"])
    for key in CORE_CHANNELS:
        if key not in columns:
            raise err_for("columns")(f"columns.{key}", "missing entry; expected a header name")
    units.setdefault("time", "s")
    u_err = err_for("units")
    for key in columns:
        if key not in units:
            raise u_err(f"units.{key}", f"missing entry; expected the units of column {key!r}")
    for key in units:
        if key not in columns:
            raise u_err(f"units.{key}", "expected units only for the columns named in columns")
    kind = merged["apparatus"]["kind"]
    for key, allowed in (("time", TIME_FORMATS), ("azimuth", AZIMUTH_UNITS),
                         ("signal", APPARATUS_KINDS[kind].signal_units)):
        if units[key] not in allowed:
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
            if y < 1960:
                raise ValueError(cell)
        except ValueError:
            raise err(obj, f"expected {_ISO_HINT} (from 1960 on), got {cell!r}") from None
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


def import_csv(csv_path: str | os.PathLike, out_path: str | os.PathLike, *,
               metadata: str | os.PathLike | None = None, columns: Mapping | None = None,
               units: Mapping | None = None, site: Site | Mapping | None = None,
               apparatus: Mapping | None = None, epoch_utc: str | None = None,
               delimiter: str | None = None, comment: str | None = None,
               overwrite: bool = False, protect: Sequence = (), block_rows: int = 65_536,
               chunk_samples: int = DEFAULT_CHUNK_SAMPLES, compression: str | None = None,
               progress: Callable[[int, int], None] | None = None) -> CsvImportSummary:
    """Convert a CSV table of samples into a run file.

    Parameters
    ----------
    csv_path : path
        The CSV file: one header line, then one row per sample (``#`` lines and blank lines
        skipped).
    out_path : path
        The run file to write (never over ``csv_path``, ``metadata`` or ``protect``).
    metadata : path, optional
        TOML file with the sections below (see ``docs/run-format.md``).
    columns : mapping, optional
        Run-file channel -> CSV header name; needs ``time``, ``azimuth``, ``signal``; any other
        key is an auxiliary channel.
    units : mapping, optional
        Channel -> units: time ``"s"`` or ``"iso8601"``; azimuth ``"rad"`` or ``"deg"``; signal
        ``"Hz"``, ``"1"`` or ``"fringe"``; each auxiliary channel a units string.
    site : Site or mapping, optional
        Latitude_deg, longitude_deg (degrees), height_m (m), name.
    apparatus : mapping, optional
        The run file's ``apparatus`` attributes (``kind`` and the kind's attributes).
    epoch_utc : str, optional
        ISO 8601 UTC epoch; required for time in seconds; for ISO timestamps the default is
        the first timestamp.
    delimiter, comment : str, optional
        Field separator (default ``,``) and comment prefix (default ``#``; ``""`` for none).
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
    meta, err_for = _merge(metadata, {"epoch_utc": epoch_utc, "site": site, "apparatus": apparatus,
                                "columns": columns, "units": units,
                                "csv": _csv_options(delimiter, comment)})
    columns, units = meta["columns"], meta["units"]
    options = {"delimiter": ",", "comment": "#", **meta.get("csv", {})}
    protect = (csv_path,) + ((os.fspath(metadata),) if metadata else ()) + tuple(protect)
    _check_output_path(out_path, overwrite, protect)
    if not os.path.isfile(csv_path):
        raise InputFileError(csv_path, "file", "expected an existing file")
    epoch = meta.get("epoch_utc")
    writer, prev, first, e_parts = None, None, None, None

    def row_err(obj, expected):
        return InputFileError(csv_path, obj, expected)

    with open(csv_path, "rb") as fh:
        table = _Table(csv_path, fh, options["delimiter"], options["comment"])
        index = table.header(columns)
        try:
            for cells, lines in table.blocks(index, max(int(block_rows), 1)):
                t_col = columns["time"]
                if units["time"] == "iso8601":
                    where = [f"line {n}, column {t_col!r}" for n in lines]
                    if e_parts is None:
                        epoch = epoch or check_epoch_utc(cells["time"][0], row_err,
                                                         where[0], strict=False)
                        e_parts = _utc_parts([epoch], ["epoch_utc"], err_for("epoch_utc"),
                                             csv_path)
                    o, s, d = _utc_parts(cells["time"], where, row_err, csv_path)
                    t_s = (o - e_parts[0]) * 86400.0 + (s - e_parts[1]) + (d - e_parts[2])
                else:
                    t_s = _numbers(table, cells["time"], lines, t_col, False)
                    _first_bad(table, ~np.isfinite(t_s), cells["time"], lines, t_col,
                               "a finite time in seconds")
                prev = _check_increasing(table, t_s, cells["time"], lines, t_col, prev)
                first = t_s[0] if first is None else first
                az = _numbers(table, cells["azimuth"], lines, columns["azimuth"], False)
                _first_bad(table, ~np.isfinite(az), cells["azimuth"], lines,
                           columns["azimuth"], "a finite azimuth")
                sig = _numbers(table, cells["signal"], lines, columns["signal"], True)
                _first_bad(table, np.isinf(sig), cells["signal"], lines, columns["signal"],
                           "a finite number or an empty cell (dropped sample)")
                aux = {k: _numbers(table, cells[k], lines, columns[k], True)
                       for k in columns if k not in CORE_CHANNELS}
                if writer is None:
                    writer = RunWriter(out_path, site=meta["site"], apparatus=meta["apparatus"],
                                       epoch_utc=epoch, signal_units=units["signal"],
                                       azimuth_units=units["azimuth"],
                                       aux_channels={k: units[k] for k in aux},
                                       overwrite=overwrite, protect=protect,
                                       chunk_samples=chunk_samples, compression=compression)
                    writer.__enter__()
                writer.append(t_s, az, sig, **aux)
                if progress is not None:
                    progress(writer.n_samples, table.raw.count)
            if writer is None:
                raise InputFileError(csv_path, "data", "expected at least one data row after "
                                     "the header, got none")
            digest = table.raw.digest.hexdigest()
            writer.write_group("provenance", {"source_file": os.path.basename(csv_path),
                                              "source_sha256": digest,
                                              "imported_by": "fringe.io.csvimport"})
        except BaseException:
            if writer is not None:
                writer.abort()
            raise
    writer.close()
    return CsvImportSummary(out_path, writer.n_samples, epoch, float(first), prev[0], digest)


def _csv_options(delimiter: str | None, comment: str | None) -> dict | None:
    options = {k: v for k, v in (("delimiter", delimiter), ("comment", comment)) if v is not None}
    return options or None

