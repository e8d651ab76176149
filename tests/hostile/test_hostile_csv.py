"""Hostile input: property tests of the CSV import (all files under tmp_path;
docs/hostile-input.md). The contract is that of tests/hostile/test_hostile.py."""

from __future__ import annotations

import datetime
import json
import math
import os
import warnings
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st

from fringe.errors import FringeError, InputFileError, TimeScaleWarning
from fringe.io.csvimport import import_csv
from fringe.io.runreader import open_run
from tests.helpers.hostile import _settings, assert_one_line_naming, digest

# == 3. CSV import ===========================================================================
# A generated table (known values) and a metadata TOML that matches it, then perturbations of
# the rows, of the bytes and of the TOML. A case with no perturbation must import exactly.
CSV_EPOCH = "2020-01-01T00:00:00Z"
GARBAGE = ("abc", "", " ", "nan", "NaN", "inf", "-inf", "Infinity", "1e309", "-1e400", "0x10",
           "1_000", "1,5", "\u0661\u0662", "+.5", "  3.0  ", '"', "''", "\x00", "\u00e9",
           "2027-02-03T00:00:00Z", "2016-12-31T23:59:60Z", "2027-12-31T23:59:60Z",
           "2027-02-29T00:00:00Z", "1959-12-31T00:00:00Z", "2020-01-01 00:00:01", "9" * 400,
           "1" * 140_000, "#", "\ufeff1.0")
cells = st.sampled_from(GARBAGE) | st.text(max_size=12) | \
    st.floats(allow_nan=True, allow_infinity=True).map(repr)


@dataclass(frozen=True)
class Cell:
    row: int
    col: int
    text: str


@dataclass(frozen=True)
class RowEdit:
    row: int
    what: str  # "drop-cell", "add-cell", "wide", "swap-next", "repeat", "comment", "blank",
    #            "delete"


@dataclass(frozen=True)
class Header:
    col: int
    text: str


@dataclass(frozen=True)
class Bytes:
    where: float  # fraction of the file
    what: bytes  # inserted; b"" truncates there


@dataclass(frozen=True)
class Toml:
    section: str  # "" for a top-level key
    key: str | None  # None: the whole section
    value: object  # Ellipsis deletes


@dataclass(frozen=True)
class RawToml:
    data: bytes


ISO_TIMES = ("2027-02-03T00:00:00Z", "2016-12-31T23:59:60Z")
toml_values = st.one_of(
    st.sampled_from(("s", "iso8601", "deg", "rad", "Hz", "1", "fringe", "", "t", "az", "beat",
                     ",", ";;", "\t", "#", '"', "\n", "\r", "\x00", "\\", " ", "\u00e9", "0",
                     "clock", "michelson", "cavity-pair", CSV_EPOCH, "2020-01-01 00:00:00",
                     "2020-01-01", "tomorrow") + ISO_TIMES),
    st.text(max_size=8), st.integers(-10**20, 10**20),
    st.floats(allow_nan=True, allow_infinity=True), st.booleans(),
    st.lists(st.integers(0, 3), max_size=2), st.just({"a": 1}),
    st.sampled_from(("TOML:2020-01-01T00:00:00Z", "TOML:2020-01-01T00:00:00",  # bare TOML
                     "TOML:2020-01-01T00:00:00+02:00", "TOML:2020-01-01", "TOML:12:00:00")),
)
TOML_KEYS = {"": ("epoch_utc", "extra"), "site": ("latitude_deg", "longitude_deg", "height_m",
                                                  "name"),
             "apparatus": ("kind", "carrier_hz", "sensitivity_hz"),
             "columns": ("time", "azimuth", "signal", "tilt_x", "a/b"),
             "units": ("time", "azimuth", "signal", "tilt_x"), "csv": ("delimiter", "comment")}
csv_ops = st.one_of(
    st.builds(Cell, st.integers(0, 15), st.integers(0, 5), cells),
    st.builds(Cell, st.integers(0, 15), st.integers(0, 5), cells),
    st.builds(RowEdit, st.integers(0, 15), st.sampled_from(
        ("drop-cell", "add-cell", "wide", "swap-next", "repeat", "comment", "blank",
         "delete"))),
    st.builds(Header, st.integers(0, 5), st.sampled_from(("t", "az", "beat", "", " t ", "T",
                                                          "tilt")) | st.text(max_size=5)),
    st.builds(Bytes, st.floats(0, 1), st.sampled_from(
        (b"", b"\xff", b"\xc3", b"\xed\xa0\x80", b"\x00", b"\r", b"\n", b'"', b"\r\n", b",",
         b"\xef\xbb\xbf")) | st.binary(max_size=6)),
)
toml_ops = st.one_of(
    st.sampled_from(tuple(TOML_KEYS)).flatmap(lambda sec: st.builds(
        Toml, st.just(sec), st.sampled_from(TOML_KEYS[sec]) | st.none(),
        toml_values | st.just(Ellipsis))),
    st.builds(RawToml, st.sampled_from((b"", b"[site", b"a = ", b"\xff\xfe", b"x = 1\nx = 2\n",
                                        b"[site]\n[site]\n")) | st.binary(max_size=20)),
)
csv_cases = st.fixed_dictionaries({
    "n": st.integers(0, 12),
    "steps": st.lists(st.floats(1e-3, 1e4), min_size=12, max_size=12),
    "t0": st.floats(-1e6, 1e6),
    "azimuth": st.lists(st.floats(-720.0, 720.0), min_size=12, max_size=12),
    "signal": st.lists(st.floats(-1e3, 1e3) | st.just(None), min_size=12, max_size=12),
    "delimiter": st.sampled_from((",", ";", "\t", "|")),
    "time_units": st.sampled_from(("s", "s", "iso8601")),
    "azimuth_units": st.sampled_from(("deg", "rad")),
    "aux": st.booleans(),
    "order": st.permutations(range(5)),
    "crlf": st.booleans(),
    "block_rows": st.sampled_from((1, 2, 3, 5, 65_536)),
    "csv_ops": st.lists(csv_ops, max_size=3),
    "toml_ops": st.lists(toml_ops, max_size=1),
})


def iso_from_seconds(t_s: float) -> str:
    """UTC label of CSV_EPOCH + t_s (no leap second in 2020-2021; to microseconds)."""
    base = datetime.datetime(2020, 1, 1, tzinfo=datetime.timezone.utc)
    return (base + datetime.timedelta(seconds=t_s)).strftime("%Y-%m-%dT%H:%M:%S.%fZ")


def toml_text(value) -> str:
    if isinstance(value, str) and value.startswith("TOML:"):
        return value[5:]  # a bare TOML date-time literal
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, float):
        return "nan" if math.isnan(value) else ("inf" if value > 0 else "-inf") \
            if math.isinf(value) else repr(value)
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(toml_text(v) for v in value) + "]"
    if isinstance(value, dict):
        return "{" + ", ".join(f"{k} = {toml_text(v)}" for k, v in value.items()) + "}"
    if isinstance(value, str):
        return json.dumps(value, ensure_ascii=False)
    return str(value)


def edit_row(rows: list[list[str]], op: RowEdit) -> None:
    """Apply one RowEdit to the (non-empty) ``rows``, in place."""
    i = op.row % len(rows)
    if op.what == "drop-cell":
        rows[i] = rows[i][:-1]
    elif op.what == "add-cell":
        rows[i] = rows[i] + ["1"]
    elif op.what == "wide":  # a very long line: 50 000 more fields
        rows[i] = rows[i] + ["2.5"] * 50_000
    elif op.what == "swap-next" and i + 1 < len(rows):
        rows[i], rows[i + 1] = rows[i + 1], rows[i]
    elif op.what == "repeat":
        rows.insert(i, list(rows[i]))
    elif op.what == "comment":
        rows[i] = ["# " + rows[i][0]] + rows[i][1:]
    elif op.what == "blank":
        rows.insert(i, [""])
    elif op.what == "delete":
        del rows[i]


def apply_text_ops(ops: list, header: list[str], rows: list[list[str]]) -> None:
    """Apply the Cell, Header and RowEdit operations of ``ops``, in order, in place."""
    for op in ops:
        if isinstance(op, Cell) and rows:
            row = rows[op.row % len(rows)]
            row[op.col % len(row)] = op.text
        elif isinstance(op, Header):
            header[op.col % len(header)] = op.text
        elif isinstance(op, RowEdit) and rows:
            edit_row(rows, op)


def apply_byte_ops(ops: list, data: bytes) -> bytes:
    """``data`` after the Bytes operations of ``ops``, in order (insert, or cut when empty)."""
    for op in ops:
        if isinstance(op, Bytes):
            k = int(op.where * len(data))
            data = data[:k] + op.what + data[k:] if op.what else data[:k]
    return data


def apply_toml_ops(ops: list, toml: dict) -> bytes | None:
    """Apply the section/key edits of ``ops`` to ``toml`` in place; the last RawToml's bytes."""
    raw = None
    for op in ops:
        if isinstance(op, RawToml):
            raw = op.data
        elif op.key is None:
            if op.value is Ellipsis:
                toml.pop(op.section, None)
            else:
                toml[op.section] = op.value if isinstance(op.value, dict) else {"v": op.value}
        elif op.value is Ellipsis:
            toml.get(op.section, {}).pop(op.key, None)
        else:
            toml.setdefault(op.section, {})[op.key] = op.value
    return raw


def toml_document(toml: dict) -> str:
    """TOML text of ``{section: {key: value}}``; section "" holds the top-level keys."""
    text = "".join(f"{k} = {toml_text(v)}\n" for k, v in toml.get("", {}).items())
    for section, table in toml.items():
        if section:
            text += f"[{section}]\n" + "".join(f'"{k}" = {toml_text(v)}\n'
                                               for k, v in table.items())
    return text


def render_csv_case(case: dict) -> tuple[bytes, bytes, dict | None]:
    """(CSV bytes, TOML bytes, expected channels or None when the case was perturbed)."""
    n, iso = case["n"], case["time_units"] == "iso8601"
    steps = case["steps"][:n]
    if iso:  # times to the microsecond from the start of 2020, within two years
        t_s = np.cumsum([round(s, 6) for s in steps]) if n else np.zeros(0)
        t_s = np.round(t_s, 6)
    else:
        t_s = case["t0"] + np.cumsum(steps) if n else np.zeros(0)
    times = [iso_from_seconds(float(t)) for t in t_s] if iso else [repr(float(t)) for t in t_s]
    az = case["azimuth"][:n]
    sig = case["signal"][:n]
    names = ["t", "az", "beat", "tilt", "note"]
    columns = [times, [repr(a) for a in az], ["" if s is None else repr(s) for s in sig],
               [repr(float(i)) for i in range(n)], ["x y"] * n]
    order = [i for i in case["order"] if case["aux"] or names[i] != "tilt"]
    header = [names[i] for i in order]
    rows = [[columns[i][r] for i in order] for r in range(n)]
    apply_text_ops(case["csv_ops"], header, rows)
    d = case["delimiter"]
    newline = "\r\n" if case["crlf"] else "\n"
    lines = ["# generated test table (invented)", d.join(header)] + [d.join(r) for r in rows]
    data = apply_byte_ops(case["csv_ops"],
                          (newline.join(lines) + newline).encode("utf-8", "surrogatepass"))
    toml = {"": {"epoch_utc": CSV_EPOCH},
            "site": {"latitude_deg": 12.5, "longitude_deg": -60.25, "name": "invented site"},
            "apparatus": {"kind": "cavity-pair", "carrier_hz": 1.9e14},
            "columns": {"time": "t", "azimuth": "az", "signal": "beat"},
            "units": {"time": case["time_units"], "azimuth": case["azimuth_units"],
                      "signal": "Hz"},
            "csv": {"delimiter": d}}
    if case["aux"]:
        toml["columns"]["tilt_x"] = "tilt"
        toml["units"]["tilt_x"] = "urad"
    if iso and case["n"] % 2:
        del toml[""]["epoch_utc"]  # the default: the first timestamp
    raw = apply_toml_ops(case["toml_ops"], toml)
    toml_bytes = raw if raw is not None else toml_document(toml).encode("utf-8", "surrogatepass")
    if case["csv_ops"] or case["toml_ops"]:
        return data, toml_bytes, None
    first = t_s[0] if (iso and "epoch_utc" not in toml[""] and n) else 0.0
    expected = {"time": t_s - first,
                "azimuth": np.radians(az) if case["azimuth_units"] == "deg" else np.array(az),
                "signal": np.array([np.nan if s is None else s for s in sig], dtype=float)}
    return data, toml_bytes, expected


def check_csv_import(directory: Path, case: dict) -> None:
    src, out_dir = directory / "in", directory / "out"
    src.mkdir(exist_ok=True)
    out_dir.mkdir(exist_ok=True)
    data, toml_bytes, expected = render_csv_case(case)
    csv_path, toml_path, out = src / "table.csv", src / "meta.toml", out_dir / "run.h5"
    csv_path.write_bytes(data)
    toml_path.write_bytes(toml_bytes)
    before = digest(csv_path), digest(toml_path)
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", TimeScaleWarning)  # far dates: a warning, by design
            summary = import_csv(csv_path, out, metadata=toml_path,
                                 block_rows=case["block_rows"])
    except FringeError as exc:
        assert isinstance(exc, InputFileError), repr(exc)
        assert_one_line_naming(exc, csv_path, toml_path)
        if expected is not None:  # a clean table is refused only when it has no rows
            assert str(exc) == f"{csv_path}: data: expected at least one data row after the " \
                               "header, got none", f"a clean table was refused: {exc}"
        assert os.listdir(out_dir) == []  # no output, no temporary file
    else:
        assert os.listdir(out_dir) == ["run.h5"]
        with open_run(out) as run:  # the full validation of the format
            got = run.read_all()
            assert run.n_samples == summary.n_samples
        if expected is not None:
            assert case["n"] > 0
            tol = 1e-6 if case["time_units"] == "iso8601" else 0.0  # labels to the microsecond
            np.testing.assert_allclose(got["time"], expected["time"], rtol=0, atol=tol)
            np.testing.assert_array_equal(got["azimuth"], expected["azimuth"])
            np.testing.assert_array_equal(got["signal"], expected["signal"])
        out.unlink()
    assert (digest(csv_path), digest(toml_path)) == before  # inputs never modified


@given(case=csv_cases)
@_settings(300, fixed=True)
def test_csv_import_property(tmp_path, case):
    check_csv_import(tmp_path, case)


@pytest.mark.slow
@given(case=csv_cases)
@_settings(4000, fixed=False)
def test_csv_import_property_long(tmp_path, case):
    check_csv_import(tmp_path, case)
