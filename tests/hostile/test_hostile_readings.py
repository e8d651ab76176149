"""Hostile input to the readings import: calibration, weights, gate, two-device merge.

Every case runs ``fringe import`` (CliRunner) on files under tmp_path and checks the contract of
docs/hostile-input.md: exit status 2, exactly one stderr line ``error: FILE: FIELD: EXPECTED``
(the exact text is given per case), no traceback, the inputs unchanged, no output and no
temporary file. A final property test throws random values at the new TOML keys.
"""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner
from hypothesis import given
from hypothesis import strategies as st

from fringe.cli import main
from tests.helpers.hostile import _settings, digest

HEAD = """epoch_utc = "2027-05-01T00:00:00Z"
[site]
latitude_deg = 51.2
longitude_deg = -1.5
[apparatus]
kind = "cavity-pair"
carrier_hz = 2.8e14
"""
ONE_FILE = HEAD + """[columns]
time = "t"
azimuth = "az"
signal = "beat"
weight = "n"
[units]
azimuth = "deg"
signal = "Hz"
weight = "readings"
[calibration]
scale_factor = 0.5
scale_rel_sigma = 0.01
instrument_units = "counts"
[gate]
gate_s = 1.0
kind = "plain"
stamp = "end"
"""
TWO_FILE = HEAD + """[columns]
time = "t"
signal = "beat"
[units]
signal = "Hz"
[azimuth_log]
columns = { time = "clock_s", azimuth = "angle" }
units = { time = "s", azimuth = "deg" }
max_gap_s = 0.5
clock_offset_s = 0.0
"""


def _signal_rows(n=30):
    return "t,az,beat,n\n" + "".join(f"{i}.0,{(12.0 * i) % 360:.3f},{0.01 * i:.3f},{1 + i % 3}\n"
                                     for i in range(n))


def _encoder_rows(t0=-2.0, t1=32.0, dt=0.1, skip=None):
    t = np.arange(t0, t1, dt)
    if skip is not None:
        t = t[(t < skip[0]) | (t > skip[1])]
    return "clock_s,angle\n" + "".join(f"{x:.3f},{(12.0 * x) % 360:.6f}\n" for x in t)


def _edit(text, old, new):
    assert old in text, old
    return text.replace(old, new, 1)


# (id, files {name: text}, command extra args, expected FILE (name), expected rest of line)
CASES = [
    ("scale-zero", {"meta.toml": _edit(ONE_FILE, "scale_factor = 0.5", "scale_factor = 0")},
     [], "meta.toml", "calibration.scale_factor: expected a non-zero number, got 0"),
    ("scale-text", {"meta.toml": _edit(ONE_FILE, "scale_factor = 0.5", 'scale_factor = "x"')},
     [], "meta.toml", "calibration.scale_factor: expected a finite number, got 'x'"),
    ("scale-nan", {"meta.toml": _edit(ONE_FILE, "scale_factor = 0.5", "scale_factor = nan")},
     [], "meta.toml", "calibration.scale_factor: expected a finite number, got nan"),
    ("scale-bool", {"meta.toml": _edit(ONE_FILE, "scale_factor = 0.5", "scale_factor = true")},
     [], "meta.toml", "calibration.scale_factor: expected a finite number, got True"),
    ("rel-negative", {"meta.toml": _edit(ONE_FILE, "scale_rel_sigma = 0.01",
                                         "scale_rel_sigma = -0.01")},
     [], "meta.toml", "calibration.scale_rel_sigma: expected a number >= 0, got -0.01"),
    ("rel-missing", {"meta.toml": _edit(ONE_FILE, "scale_rel_sigma = 0.01\n", "")},
     [], "meta.toml", "calibration.scale_rel_sigma: missing entry; expected the relative "
                      "standard uncertainty of scale_factor (>= 0)"),
    ("calibration-extra", {"meta.toml": _edit(ONE_FILE, "scale_rel_sigma = 0.01",
                                              "scale_rel_sigma = 0.01\noffset = 3")},
     [], "meta.toml", "calibration.offset: unknown field (known: scale_factor, "
                      "scale_rel_sigma, instrument_units)"),
    ("weight-negative", {"data.csv": _edit(_signal_rows(), "3.0,36.000,0.030,1",
                                           "3.0,36.000,0.030,-2")},
     [], "data.csv", "line 5, column 'n': expected a finite weight > 0 or an empty cell "
                     "(dropped sample), got '-2'"),
    ("weight-zero", {"data.csv": _edit(_signal_rows(), "3.0,36.000,0.030,1",
                                       "3.0,36.000,0.030,0")},
     [], "data.csv", "line 5, column 'n': expected a finite weight > 0 or an empty cell "
                     "(dropped sample), got '0'"),
    ("weight-fraction", {"data.csv": _edit(_signal_rows(), "3.0,36.000,0.030,1",
                                           "3.0,36.000,0.030,1.5")},
     [], "data.csv", "line 5, column 'n': expected a whole number of readings (units "
                     "'readings'), got '1.5'"),
    ("weight-inf", {"data.csv": _edit(_signal_rows(), "3.0,36.000,0.030,1",
                                      "3.0,36.000,0.030,inf")},
     [], "data.csv", "line 5, column 'n': expected a finite weight > 0 or an empty cell "
                     "(dropped sample), got 'inf'"),
    ("weight-units", {"meta.toml": _edit(ONE_FILE, 'weight = "readings"',
                                         'weight = "percent"')},
     [], "meta.toml", "units.weight: expected '1' or 'readings', got 'percent'"),
    ("gate-negative", {"meta.toml": _edit(ONE_FILE, "gate_s = 1.0", "gate_s = -1.0")},
     [], "meta.toml", "gate.gate_s: expected a number > 0, got -1.0"),
    ("gate-kind", {"meta.toml": _edit(ONE_FILE, 'kind = "plain"', 'kind = "sliding"')},
     [], "meta.toml", "gate.kind: expected 'plain' or 'overlapping', got 'sliding'"),
    ("gate-stamp", {"meta.toml": _edit(ONE_FILE, 'stamp = "end"\n', "")},
     [], "meta.toml", "gate.stamp: missing entry; expected where the timestamp falls in the "
                      "averaging window: 'start', 'centre' or 'end'"),
    ("signal-not-increasing", {"data.csv": _edit(_signal_rows(), "4.0,", "2.5,")},
     [], "data.csv", "line 6, column 't': expected a time later than line 5 ('3.0'), got "
                     "'2.5'"),
    ("log-gap", {"meta.toml": TWO_FILE, "enc.csv": _encoder_rows(skip=(10.05, 12.2))},
     ["--azimuth-log", "enc.csv"], "enc.csv",
     "line 123, column 'clock_s': expected azimuth samples at most azimuth_log.max_gap_s = "
     "0.5 s apart, got a gap of 2.2 s around the signal time 11.000000 s (data.csv line 13); "
     "or set azimuth_log.on_gap = 'drop'"),
    ("log-not-increasing", {"meta.toml": TWO_FILE,
                            "enc.csv": _edit(_encoder_rows(), "\n0.500,", "\n0.300,")},
     ["--azimuth-log", "enc.csv"], "enc.csv",
     "line 27, column 'clock_s': expected a time later than line 26 ('0.400'), got '0.300'"),
    ("log-garbage", {"meta.toml": TWO_FILE,
                     "enc.csv": _edit(_encoder_rows(), "\n0.500,6.000000", "\n0.500,six")},
     ["--azimuth-log", "enc.csv"], "enc.csv",
     "line 27, column 'angle': expected a number, got 'six'"),
    ("log-header", {"meta.toml": TWO_FILE,
                    "enc.csv": _edit(_encoder_rows(), "clock_s,angle", "clock_s,az")},
     ["--azimuth-log", "enc.csv"], "enc.csv",
     "header: expected one column named 'angle' (for azimuth), found 0 among 'clock_s', 'az'"),
    ("no-overlap", {"meta.toml": _edit(TWO_FILE, "clock_offset_s = 0.0",
                                       "clock_offset_s = 3600.0"), "enc.csv": _encoder_rows()},
     ["--azimuth-log", "enc.csv"], "meta.toml",
     "azimuth_log.clock_offset_s: expected the two logs to overlap in time, got signal times "
     "from 0 s to 29 s and azimuth log from 3598 s to 3631.9 s (with clock_offset_s = "
     "3600 s)"),
    ("log-empty", {"meta.toml": TWO_FILE, "enc.csv": "clock_s,angle\n"},
     ["--azimuth-log", "enc.csv"], "meta.toml",
     "azimuth_log.clock_offset_s: expected the two logs to overlap in time, got signal times "
     "from 0 s to 29 s and no azimuth samples (with clock_offset_s = 0 s)"),
    ("offset-inf", {"meta.toml": _edit(TWO_FILE, "clock_offset_s = 0.0",
                                       "clock_offset_s = inf")},
     ["--azimuth-log", "enc.csv"], "meta.toml",
     "azimuth_log.clock_offset_s: expected a finite number, got inf"),
    ("offset-huge", {"meta.toml": _edit(TWO_FILE, "clock_offset_s = 0.0",
                                        "clock_offset_s = 1e15")},
     ["--azimuth-log", "enc.csv"], "meta.toml",
     "azimuth_log.clock_offset_s: expected a number of magnitude <= 3.2e+07 s, got "
     "1000000000000000.0"),
    ("max-gap-missing", {"meta.toml": _edit(TWO_FILE, "max_gap_s = 0.5\n", "")},
     ["--azimuth-log", "enc.csv"], "meta.toml",
     "azimuth_log.max_gap_s: missing entry; expected the largest spacing of azimuth samples "
     "to interpolate across, s"),
    ("on-gap", {"meta.toml": _edit(TWO_FILE, "max_gap_s = 0.5", 'max_gap_s = 0.5\non_gap = 1')},
     ["--azimuth-log", "enc.csv"], "meta.toml",
     "azimuth_log.on_gap: expected 'error' or 'drop', got 1"),
    ("log-azimuth-in-main", {"meta.toml": _edit(TWO_FILE, 'signal = "beat"',
                                                'signal = "beat"\nazimuth = "az"')},
     ["--azimuth-log", "enc.csv"], "meta.toml",
     "columns.azimuth: expected no azimuth entry: the azimuth comes from azimuth_log"),
    ("log-file-without-section", {}, ["--azimuth-log", "enc.csv"], "meta.toml",
     "azimuth_log: expected the azimuth_log section together with an azimuth log file "
     "(--azimuth-log FILE), or neither"),
    ("section-without-log-file", {"meta.toml": TWO_FILE}, [], "meta.toml",
     "azimuth_log: expected the azimuth_log section together with an azimuth log file "
     "(--azimuth-log FILE), or neither"),
    ("log-missing", {"meta.toml": TWO_FILE}, ["--azimuth-log", "absent.csv"], "absent.csv",
     "file: not found; expected a CSV file; check the path"),
    ("log-azimuth-beyond-2**32-rad", {"meta.toml": TWO_FILE,
                                      "enc.csv": _edit(_encoder_rows(), "-1.900,337.200000",
                                                       "-1.900,3e11")},
     ["--azimuth-log", "enc.csv"], "enc.csv",
     "line 3, column 'angle': expected an azimuth within 2**32 rad (float64 resolves about "
     "1e-6 rad there; wrap larger ones), got '3e11'"),
]


def _run(tmp_path: Path, files: dict, extra: list):
    src = tmp_path / "in"
    out = tmp_path / "out"
    src.mkdir(parents=True)
    out.mkdir()
    texts = {"meta.toml": ONE_FILE, "data.csv": _signal_rows(), "enc.csv": _encoder_rows(),
             **files}
    for name, text in texts.items():
        (src / name).write_text(text, "utf-8")
    before = {p.name: digest(p) for p in src.iterdir()}
    args = ["import", str(src / "data.csv"), "--meta", str(src / "meta.toml"),
            "--out", str(out / "run.h5")]
    args += [str(src / a) if a.endswith(".csv") else a for a in extra]
    res = CliRunner().invoke(main, args)
    assert {p.name: digest(p) for p in src.iterdir()} == before     # inputs untouched
    return res, src, out


@pytest.mark.parametrize("case", CASES, ids=[c[0] for c in CASES])
def test_bad_readings_input_gives_one_line(tmp_path, case):
    _, files, extra, where, rest = case
    res, src, out = _run(tmp_path, files, extra)
    assert res.exit_code == 2, (res.exit_code, res.stdout, res.stderr, res.exception)
    assert "Traceback" not in res.stdout + res.stderr
    assert res.stderr == f"error: {src / where}: {rest}\n"
    assert os.listdir(out) == []                                   # no output, no temp file


def test_the_good_inputs_import(tmp_path):
    """The base files of the cases above import (so each case fails for its own edit)."""
    for files, extra in (({}, []), ({"meta.toml": TWO_FILE}, ["--azimuth-log", "enc.csv"])):
        res, _, out = _run(tmp_path / str(len(extra)), files, extra)
        assert res.exit_code == 0, res.stderr
        assert os.listdir(out) == ["run.h5"]


def test_an_azimuth_log_unwrapped_beyond_2_32_rad_names_the_log_line(tmp_path):
    """Raw values below 2**32 rad that the unwrap lifts above it: the log's line is named.

    The log (rad) starts 0.9 rad below 2**32 rad and turns at 0.2 rad/s, its values wrapped
    back by 2 pi before they reach the bound; unwrapped, it passes 2**32 rad at t = 2.5 s. The
    first signal time beyond is 3 s, interpolated between the log samples at 3.0 s and 3.1 s;
    the latter is the log's 52nd sample (t = -2 + 0.1 * 51), on line 53 after the header
    (derived).
    """
    t = np.round(np.arange(-2.0, 32.0, 0.1), 3)
    raw = 2.0 ** 32 - 0.9 + 0.2 * (t + 2.0)
    raw = np.where(raw < 2.0 ** 32 - 0.2, raw, raw - 2 * np.pi)
    enc = "clock_s,angle\n" + "".join(f"{x:.3f},{a:.6f}\n" for x, a in zip(t, raw))
    meta = _edit(TWO_FILE, 'units = { time = "s", azimuth = "deg" }',
                 'units = { time = "s", azimuth = "rad" }')
    res, src, out = _run(tmp_path, {"meta.toml": meta, "enc.csv": enc},
                         ["--azimuth-log", "enc.csv"])
    assert res.exit_code == 2 and "Traceback" not in res.stdout + res.stderr
    assert res.stderr.startswith(f"error: {src / 'enc.csv'}: line 53, column 'angle': expected "
                                 "an azimuth that stays within 2**32 rad once unwrapped")
    assert res.stderr.count("\n") == 1 and "samples/azimuth" not in res.stderr
    assert os.listdir(out) == []


def test_output_over_the_azimuth_log_is_refused(tmp_path):
    res, src, out = _run(tmp_path, {"meta.toml": TWO_FILE}, ["--azimuth-log", "enc.csv"])
    before = digest(src / "enc.csv")
    res = CliRunner().invoke(main, ["import", str(src / "data.csv"), "--meta",
                                    str(src / "meta.toml"), "--azimuth-log",
                                    str(src / "enc.csv"), "--out", str(src / "enc.csv"),
                                    "--overwrite"])
    assert res.exit_code == 2 and digest(src / "enc.csv") == before
    assert res.stderr.startswith(f"error: {src / 'enc.csv'}: refusing to write over the input")


values = st.one_of(st.none(), st.booleans(), st.integers(-3, 3), st.floats(allow_nan=True),
                   st.text(max_size=6), st.lists(st.integers(0, 2), max_size=2))
KEYS = [("calibration", "scale_factor"), ("calibration", "scale_rel_sigma"),
        ("calibration", "instrument_units"), ("gate", "gate_s"), ("gate", "kind"),
        ("gate", "stamp"), ("azimuth_log", "max_gap_s"), ("azimuth_log", "clock_offset_s"),
        ("azimuth_log", "on_gap"), ("azimuth_log", "epoch_utc")]


def _toml_value(v):
    if v is None:
        return None
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, float):
        return "nan" if v != v else ("inf" if v == float("inf") else
                                     "-inf" if v == float("-inf") else repr(v))
    if isinstance(v, str):
        return '"' + v.replace("\\", "\\\\").replace('"', '\\"') + '"'
    if isinstance(v, list):
        return "[" + ", ".join(map(str, v)) + "]"
    return str(v)


@given(key=st.sampled_from(KEYS), value=values)
@_settings(150, fixed=True)
def test_any_value_of_a_new_key_imports_or_gives_one_line(tmp_path_factory, key, value):
    section, name = key
    base = TWO_FILE + "[gate]\ngate_s = 1.0\nkind = \"plain\"\nstamp = \"end\"\n" \
        "[calibration]\nscale_factor = 0.5\nscale_rel_sigma = 0.01\ninstrument_units = \"c\"\n"
    lines = []
    current = None
    for line in base.splitlines():
        if line.startswith("["):
            current = line.strip("[]")
        if current == section and line.split(" = ")[0] == name:
            continue                                   # drop the key: re-added below
        lines.append(line)
        if line == f"[{section}]" and _toml_value(value) is not None:
            lines.append(f"{name} = {_toml_value(value)}")
    tmp = tmp_path_factory.mktemp("prop")
    try:
        text = "\n".join(lines) + "\n"
        import tomllib
        tomllib.loads(text)
    except Exception:                                  # not TOML at all: another test's subject
        return
    res, src, out = _run(tmp, {"meta.toml": text}, ["--azimuth-log", "enc.csv"])
    assert "Traceback" not in res.stdout + res.stderr
    if res.exit_code == 0:
        assert os.listdir(out) == ["run.h5"]
    else:
        assert res.exit_code == 2, (res.exception, res.stderr)
        assert res.stderr.count("\n") == 1 and res.stderr.startswith(f"error: {src}/")
        assert os.listdir(out) == []
