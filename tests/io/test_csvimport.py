"""CSV import: round trips, line-numbered errors, metadata files (all files under tmp_path)."""

from __future__ import annotations

import hashlib
import os

import numpy as np
import pytest

from fringe.errors import ConfigError, InputFileError, OutputError, TimeScaleWarning
from fringe.io.csvimport import import_csv, read_import_metadata
from fringe.io.runreader import open_run
from fringe.site import Site

GOOD = """# invented test run, 1 Hz logger
t,table_deg,beat,tilt,unused

0.0,0.0,0.25,1,x
1.0,6.0,,2,x
# a comment inside the data
2.0,12.0,-0.5,3,x
3.5,18.0,nan,4,x
4.0,24.0,1e-3,,x
"""

COLUMNS = {"time": "t", "azimuth": "table_deg", "signal": "beat", "tilt_x": "tilt"}
UNITS = {"time": "s", "azimuth": "deg", "signal": "Hz", "tilt_x": "urad"}
META = dict(columns=COLUMNS, units=UNITS, site={"latitude_deg": 12.5, "longitude_deg": -60.25},
            apparatus={"kind": "cavity-vs-reference", "carrier_hz": 1.9e14,
                       "reference": "atomic"},
            epoch_utc="2027-02-03T00:00:00Z")

TOML = """
epoch_utc = "2027-02-03T00:00:00Z"

[site]
latitude_deg = 12.5
longitude_deg = -60.25
name = "invented site"

[apparatus]
kind = "cavity-vs-reference"
carrier_hz = 1.9e14
reference = "atomic"

[columns]
time = "t"
azimuth = "table_deg"
signal = "beat"
tilt_x = "tilt"

[units]
azimuth = "deg"
signal = "Hz"
tilt_x = "urad"
"""


def digest(path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def write(path, text: str):
    path.write_text(text, encoding="utf-8")
    return path


def check_good_run(out, csv_path):
    with open_run(out) as run:
        assert run.site.latitude_deg == 12.5 and run.site.longitude_deg == -60.25
        assert run.apparatus == {"kind": "cavity-vs-reference", "carrier_hz": 1.9e14,
                                 "reference": "atomic"}
        assert (run.epoch_utc, run.azimuth_units, run.signal_units) == \
            ("2027-02-03T00:00:00Z", "deg", "Hz")
        assert run.aux_channels == {"tilt_x": "urad"}
        data = run.read_all(run.channels)
        provenance = run.read_group_attrs("provenance")
    np.testing.assert_array_equal(data["time"], [0.0, 1.0, 2.0, 3.5, 4.0])
    np.testing.assert_array_equal(data["azimuth"], np.radians([0.0, 6.0, 12.0, 18.0, 24.0]))
    np.testing.assert_array_equal(data["signal"], [0.25, np.nan, -0.5, np.nan, 1e-3])
    np.testing.assert_array_equal(data["tilt_x"], [1.0, 2.0, 3.0, 4.0, np.nan])
    assert provenance == {"source_file": csv_path.name, "source_sha256": digest(csv_path),
                          "imported_by": "fringe.io.csvimport"}


@pytest.mark.parametrize("block_rows", [1, 2, 3, 65_536])
def test_good_csv_round_trip_with_keywords(tmp_path, block_rows):
    csv_path = write(tmp_path / "data.csv", GOOD)
    before = digest(csv_path)
    seen = []
    summary = import_csv(csv_path, tmp_path / "run.h5", block_rows=block_rows,
                         progress=lambda done, total: seen.append((done, total)), **META)
    assert (summary.n_samples, summary.time_first_s, summary.time_last_s) == (5, 0.0, 4.0)
    assert summary.source_sha256 == before
    check_good_run(tmp_path / "run.h5", csv_path)
    assert digest(csv_path) == before
    assert seen[-1] == (5, csv_path.stat().st_size)  # (rows imported, bytes read)
    assert [rows for rows, _ in seen] == sorted({min(5, k * block_rows) for k in
                                                 range(1, len(seen) + 1)})
    assert sorted(os.listdir(tmp_path)) == ["data.csv", "run.h5"]


def test_good_csv_round_trip_with_toml(tmp_path):
    csv_path = write(tmp_path / "data.csv", GOOD.replace(",", ";"))
    meta = write(tmp_path / "meta.toml", TOML + '\n[csv]\ndelimiter = ";"\n')
    import_csv(csv_path, tmp_path / "run.h5", metadata=meta)
    check_good_run(tmp_path / "run.h5", csv_path)
    with open_run(tmp_path / "run.h5") as run:
        assert run.site == Site(12.5, -60.25, 0.0, "invented site")


def test_keyword_replaces_a_toml_section(tmp_path):
    csv_path = write(tmp_path / "data.csv", GOOD)
    meta = write(tmp_path / "meta.toml", TOML)
    import_csv(csv_path, tmp_path / "run.h5", metadata=meta,
               apparatus={"kind": "cavity-pair", "carrier_hz": 3.0e14})
    with open_run(tmp_path / "run.h5") as run:
        assert run.apparatus == {"kind": "cavity-pair", "carrier_hz": 3.0e14,
                                 "path_separation_deg": 90.0}


HEADER = "t,table_deg,beat,tilt\n"
BAD_ROWS = [
    ("signal-text", "0,0,1,1\n1,0,abc,1\n", "line 3, column 'beat'",
     "expected a number, got 'abc'"),
    ("time-empty", "0,0,1,1\n,0,1,1\n", "line 3, column 't'", "expected a number, got ''"),
    ("time-nan", "0,0,1,1\nnan,0,1,1\n", "line 3, column 't'",
     "expected a finite time in seconds, got 'nan'"),
    ("time-repeat", "0,0,1,1\n1,0,1,1\n1,0,1,1\n", "line 4, column 't'",
     "expected a time later than line 3 ('1'), got '1'"),
    ("time-back", "0,0,1,1\n1,0,1,1\n2,0,1,1\n0.5,0,1,1\n", "line 5, column 't'",
     "expected a time later than line 4 ('2'), got '0.5'"),
    ("azimuth-nan", "0,0,1,1\n1,nan,1,1\n", "line 3, column 'table_deg'",
     "expected a finite azimuth, got 'nan'"),
    ("azimuth-empty", "0,,1,1\n", "line 2, column 'table_deg'", "expected a number, got ''"),
    ("signal-inf", "0,0,1,1\n1,0,-inf,1\n", "line 3, column 'beat'",
     "expected a finite number or an empty cell (dropped sample), got '-inf'"),
    ("aux-text", "0,0,1,1\n1,0,1,high\n", "line 3, column 'tilt'",
     "expected a number, got 'high'"),
    ("short-row", "0,0,1,1\n1,0,1\n", "line 3", "expected 4 fields as in the header, got 3"),
]


@pytest.mark.parametrize("rows, obj, expected", [c[1:] for c in BAD_ROWS],
                         ids=[c[0] for c in BAD_ROWS])
@pytest.mark.parametrize("block_rows", [1, 2, 1000])
def test_bad_row_names_file_line_and_column(tmp_path, rows, obj, expected, block_rows):
    csv_path = write(tmp_path / "data.csv", HEADER + rows)
    before = digest(csv_path)
    with pytest.raises(InputFileError) as info:
        import_csv(csv_path, tmp_path / "run.h5", block_rows=block_rows, **META)
    assert str(info.value) == f"{csv_path}: {obj}: {expected}"
    assert digest(csv_path) == before
    assert os.listdir(tmp_path) == ["data.csv"]  # no output, no temporary file


@pytest.mark.parametrize("text, obj, expected", [
    ("t,az,sig,tilt\n0,0,0,0\n", "header",
     "expected one column named 'table_deg' (for azimuth), found 0 among 't', 'az', 'sig', "
     "'tilt'"),
    ("t,table_deg,beat,beat,tilt\n", "header",
     "expected one column named 'beat' (for signal), found 2 among 't', 'table_deg', 'beat', "
     "'beat', 'tilt'"),
    (HEADER + "# nothing recorded\n\n", "data",
     "expected at least one data row after the header, got none"),
    ("# only a comment\n", "header", "expected a header line naming the columns, got no lines"),
    ("", "header", "expected a header line naming the columns, got no lines"),
], ids=["missing-column", "duplicate-column", "no-rows", "no-header", "empty-file"])
def test_header_and_empty_data_errors(tmp_path, text, obj, expected):
    csv_path = write(tmp_path / "data.csv", text)
    with pytest.raises(InputFileError) as info:
        import_csv(csv_path, tmp_path / "run.h5", **META)
    assert str(info.value) == f"{csv_path}: {obj}: {expected}"
    assert os.listdir(tmp_path) == ["data.csv"]


def test_text_that_is_not_utf8(tmp_path):
    csv_path = tmp_path / "data.csv"
    csv_path.write_bytes((HEADER + "0,0,1,1\n").encode() + "1,0,1,caf\xe9\n".encode("latin-1"))
    with pytest.raises(InputFileError) as info:
        import_csv(csv_path, tmp_path / "run.h5", **META)
    assert str(info.value) == (f"{csv_path}: file: expected UTF-8 text, got bytes that are not "
                               "UTF-8 at or after line 1")
    assert os.listdir(tmp_path) == ["data.csv"]


def test_iso_timestamps_count_the_leap_second(tmp_path):
    import erfa

    # Premise: a leap second was inserted at the end of 2016-12-31 (IERS Bulletin C 52, from
    # memory); pyerfa's table, which the import uses, agrees: TAI - UTC goes from 36 s to 37 s.
    assert erfa.dat(2017, 1, 1, 0.0) - erfa.dat(2016, 12, 31, 0.0) == 1.0
    rows = ["2016-12-31T23:59:59.5Z", "2016-12-31T23:59:60.5Z", "2017-01-01 00:00:00.5",
            "2017-01-01T00:00:02Z"]
    csv_path = write(tmp_path / "utc.csv", HEADER + "".join(f"{r},0,0,0\n" for r in rows))
    units = {**UNITS, "time": "iso8601"}
    meta = {**META, "units": units, "epoch_utc": None}
    summary = import_csv(csv_path, tmp_path / "a.h5", **meta)
    assert summary.epoch_utc == "2016-12-31T23:59:59.5Z"  # default: the first timestamp
    with open_run(tmp_path / "a.h5") as run:
        # elapsed SI seconds: 59.5 -> 60.5 -> 00.5 is 1 s + 1 s; naive subtraction would give 1 s
        np.testing.assert_allclose(run.read_all(["time"])["time"], [0.0, 1.0, 2.0, 3.5],
                                   rtol=0, atol=1e-9)  # float64 rounding of 86400 s scale sums
    import_csv(csv_path, tmp_path / "b.h5", **{**meta, "epoch_utc": "2016-12-31T23:59:00Z"})
    with open_run(tmp_path / "b.h5") as run:
        np.testing.assert_allclose(run.read_all(["time"])["time"], [59.5, 60.5, 61.5, 63.0],
                                   rtol=0, atol=1e-9)


@pytest.mark.parametrize("stamp, expected", [
    ("2027-02-03T12:00:60Z", "expected an ISO 8601 UTC time like '2027-02-03T00:00:00Z', "
                             "got '2027-02-03T12:00:60Z'"),
    ("2027-02-03T23:59:60.5Z", "expected a time that exists in UTC (no leap second that day), "
                               "got '2027-02-03T23:59:60.5Z'"),
    ("03/02/2027 12:00", "expected an ISO 8601 UTC time like '2027-02-03T00:00:00Z', "
                         "got '03/02/2027 12:00'"),
], ids=["second-60-midday", "no-leap-second-that-day", "not-iso"])
def test_bad_iso_timestamp(tmp_path, stamp, expected):
    csv_path = write(tmp_path / "utc.csv", HEADER + f"2027-02-03T00:00:00Z,0,0,0\n{stamp},0,0,0\n")
    with pytest.raises(InputFileError) as info:
        import_csv(csv_path, tmp_path / "run.h5", **{**META, "units": {**UNITS,
                                                                        "time": "iso8601"}})
    assert str(info.value) == f"{csv_path}: line 3, column 't': {expected}"


def test_dates_beyond_the_leap_second_table_warn(tmp_path):
    csv_path = write(tmp_path / "late.csv", HEADER + "2031-05-01T00:00:00Z,0,0,0\n"
                     "2031-05-01T00:00:01Z,0,0,0\n")
    with pytest.warns(TimeScaleWarning, match="leap-second table does not cover"):
        import_csv(csv_path, tmp_path / "run.h5",
                   **{**META, "units": {**UNITS, "time": "iso8601"}, "epoch_utc": None})


@pytest.mark.parametrize("edit, obj, expected", [
    (lambda t: t.replace('azimuth = "deg"', 'azimuth = "grad"'), "units.azimuth",
     "expected 'rad' or 'deg', got 'grad'"),
    (lambda t: t.replace("latitude_deg = 12.5", "latitude_deg = 95.0"), "site.latitude_deg",
     "expected a value in [-90, 90], got 95.0"),
    (lambda t: t.replace('kind = "cavity-vs-reference"', 'kind = "ring"'), "apparatus.kind",
     "expected one of 'cavity-pair', 'cavity-vs-reference', 'michelson', 'clock', got 'ring'"),
    (lambda t: t.replace('signal = "Hz"', 'signal = "fringe"'), "units.signal",
     "expected 'Hz' or '1', got 'fringe'"),
    (lambda t: t.replace('tilt_x = "urad"\n', ""), "units.tilt_x",
     "missing entry; expected the units of column 'tilt_x'"),
    (lambda t: t.replace('signal = "beat"\n', ""), "columns.signal",
     "missing entry; expected a header name"),
    (lambda t: t + "\n[plot]\ncolor = 1\n", "plot",
     "unknown section (known: epoch_utc, site, apparatus, columns, units, csv, calibration, "
     "gate, azimuth_log)"),
    (lambda t: t.replace('epoch_utc = "2027-02-03T00:00:00Z"', ""), "epoch_utc",
     "missing; expected an ISO 8601 UTC time like '2027-02-03T00:00:00Z' (required when time "
     "is in seconds)"),
    (lambda t: t.replace("[columns]", "[columns\n"), "file", None),
], ids=["units", "latitude", "kind", "signal-units", "aux-units", "column", "section", "epoch",
        "syntax"])
def test_bad_metadata_file_names_file_and_field(tmp_path, edit, obj, expected):
    csv_path = write(tmp_path / "data.csv", GOOD)
    meta = write(tmp_path / "meta.toml", edit(TOML))
    with pytest.raises(InputFileError) as info:
        import_csv(csv_path, tmp_path / "run.h5", metadata=meta)
    message = str(info.value)
    assert "\n" not in message
    if expected is None:
        assert message.startswith(f"{meta}: {obj}: expected valid TOML (")
    else:
        assert message == f"{meta}: {obj}: {expected}"
    assert sorted(os.listdir(tmp_path)) == ["data.csv", "meta.toml"]


def test_read_import_metadata_returns_validated_sections(tmp_path):
    meta = read_import_metadata(write(tmp_path / "meta.toml", TOML))
    assert meta["epoch_utc"] == "2027-02-03T00:00:00Z"
    assert meta["site"] == Site(12.5, -60.25, 0.0, "invented site")
    assert meta["apparatus"]["carrier_hz"] == 1.9e14
    assert meta["columns"] == COLUMNS and meta["units"]["azimuth"] == "deg"


@pytest.mark.parametrize("line, epoch", [
    ("epoch_utc = 2027-02-03T06:00:00.5Z", "2027-02-03T06:00:00.500000Z"),  # TOML date-time
    ("epoch_utc = 2027-02-03 06:00:00", "2027-02-03T06:00:00Z"),            # local: taken as UTC
    ('epoch_utc = "2027-02-03 06:00:00 UTC"', "2027-02-03T06:00:00Z"),
])
def test_epoch_forms_in_metadata(tmp_path, line, epoch):
    text = TOML.replace('epoch_utc = "2027-02-03T00:00:00Z"', line)
    assert read_import_metadata(write(tmp_path / "meta.toml", text))["epoch_utc"] == epoch


def test_missing_keyword_metadata_is_a_config_error(tmp_path):
    csv_path = write(tmp_path / "data.csv", GOOD)
    with pytest.raises(ConfigError) as info:
        import_csv(csv_path, tmp_path / "run.h5", **{**META, "epoch_utc": None})
    assert str(info.value) == ("import_csv: epoch_utc: missing; expected an ISO 8601 UTC time "
                               "like '2027-02-03T00:00:00Z' (required when time is in seconds)")


def test_import_never_writes_over_its_inputs(tmp_path):
    csv_path = write(tmp_path / "data.csv", GOOD)
    meta = write(tmp_path / "meta.toml", TOML)
    before = digest(csv_path), digest(meta)
    for out in (csv_path, meta):
        with pytest.raises(OutputError) as info:
            import_csv(csv_path, out, metadata=meta, overwrite=True)
        assert str(info.value) == f"{out}: refusing to write over the input file {out}"
    assert (digest(csv_path), digest(meta)) == before
    (tmp_path / "run.h5").write_bytes(b"old")
    with pytest.raises(OutputError, match=r"exists \(pass overwrite=True to replace it\)"):
        import_csv(csv_path, tmp_path / "run.h5", metadata=meta)
    assert (tmp_path / "run.h5").read_bytes() == b"old"
