"""Hostile input: absurd values in scenarios, CSV imports and command options (all files under
tmp_path; docs/hostile-input.md, item 7).

Scenarios built from the demo scenario get absurd turn periods, durations and sample intervals,
bytes that are not UTF-8 in a comment and tables nested 100 000 deep; CSV tables get unwrapped
azimuths too large for float64 to resolve a sample step and one column mapped to two channels;
``--seed`` gets negative values. Property: a one-line error naming the file (or the option), or
a result that is sane: the 2 theta signal sampled above its Nyquist rate, a sample count a run
file can hold, an azimuth float64 resolves to about 1e-6 rad.
"""

from __future__ import annotations

import math
import os
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pytest
import tomllib
from hypothesis import example, given
from hypothesis import strategies as st

from fringe.errors import ConfigError, FringeError, InputFileError
from fringe.experiment.scenario import (
    MAX_AZIMUTH_RAD,
    MAX_DURATION_S,
    MAX_SAMPLES,
    load_scenario,
)
from fringe.io.csvimport import import_csv, read_import_metadata
from fringe.io.runreader import open_run
from fringe.report.inputs import load_comparison
from tests.helpers.commands import run_command
from tests.helpers.hostile import _settings, assert_one_line_naming, digest
from tests.hostile.test_hostile_csv import toml_document

DEMO = Path(__file__).resolve().parents[2] / "fringe" / "data" / "demo.toml"
DEMO_DOC = tomllib.loads(DEMO.read_text("utf-8"))

# == scenarios ===============================================================================
ABSURD = (1e-300, 5e-324, 1e-9, 0.01, 0.25, 1.0, 9.99, 10.0, 40.0, 41.0, 1e6, 1e9, 1e12, 1e300,
          0.0, -1.0, math.inf, math.nan, "40", True, 10 ** 30)
absurd = st.sampled_from(ABSURD) | st.floats(1e-12, 1e12) | st.floats()
KEYS = (("campaign", "duration_days"), ("campaign", "sample_interval_s"),
        ("turntable", "period_s"), ("turntable", "dwell_s"), ("turntable", "move_s"),
        ("turntable", "step_deg"), ("turntable", "motion"))


@dataclass(frozen=True)
class SetKey:
    section: str
    key: str
    value: object


@dataclass(frozen=True)
class CommentBytes:
    data: bytes          # put into a comment line at the top


@dataclass(frozen=True)
class Nest:
    depth: int           # a key whose value is an array nested this deep


scenario_ops = st.one_of(
    st.builds(lambda k, v: SetKey(k[0], k[1], v), st.sampled_from(KEYS), absurd),
    st.builds(SetKey, st.just("turntable"), st.just("motion"),
              st.sampled_from(("continuous", "stepped", "spin"))),
    st.builds(CommentBytes, st.sampled_from((b"\xe9", b"\xff\xfe", b"\xc3", b"\x80abc",
                                             "caf\u00e9".encode("latin-1")))),
    st.builds(Nest, st.sampled_from((3, 300, 2000, 100_000))))
scenario_cases = st.lists(scenario_ops, max_size=4)

FOUND_SCENARIOS = [
    [SetKey("turntable", "period_s", 1e-300)],
    [SetKey("campaign", "duration_days", 1e9)],
    [SetKey("campaign", "sample_interval_s", 60.0)],       # longer than the 40 s turn
    [SetKey("campaign", "sample_interval_s", 10.0)],       # a quarter turn: 2 theta aliases
    [Nest(100_000)],
    [CommentBytes(b"\xe9")],
]


def _scenario_bytes(ops) -> bytes:
    doc = {"": {"title": DEMO_DOC["title"]}}
    doc.update({k: dict(v) for k, v in DEMO_DOC.items() if isinstance(v, dict)})
    head, tail = b"# an invented scenario\n", b""
    for op in ops:
        if isinstance(op, SetKey):
            doc[op.section][op.key] = op.value
            if op.key == "motion" and op.value == "stepped":
                doc["turntable"].pop("period_s", None)
                doc["turntable"].setdefault("step_deg", 45.0)
                doc["turntable"].setdefault("dwell_s", 8.0)
                doc["turntable"].setdefault("move_s", 2.0)
        elif isinstance(op, CommentBytes):
            head += b"# " + op.data + b"\n"
        else:
            tail = b"\n[deep]\nv = " + b"[" * op.depth + b"]" * op.depth + b"\n"
    return head + toml_document(doc).encode("utf-8") + tail


def check_scenario_case(directory: Path, ops) -> None:
    path = directory / "scenario.toml"
    path.write_bytes(_scenario_bytes(ops))
    before = digest(path)
    try:
        sc = load_scenario(path)
    except FringeError as exc:
        assert isinstance(exc, (ConfigError, InputFileError)), repr(exc)
        assert_one_line_naming(exc, path)
    else:
        period = getattr(sc.motion, "period_s", None)
        assert sc.duration_s <= MAX_DURATION_S
        assert 2 <= sc.n_samples <= MAX_SAMPLES
        if period is not None:
            assert sc.sample_interval_s < period / 4            # Nyquist of the 2 theta term
            assert 2 * math.pi * sc.duration_s / period <= MAX_AZIMUTH_RAD
    assert digest(path) == before


@given(ops=scenario_cases)
@_settings(300, fixed=True)
def _scenario_property(tmp_path, ops):
    check_scenario_case(tmp_path, ops)


for _ops in FOUND_SCENARIOS:
    _scenario_property = example(ops=_ops)(_scenario_property)
test_scenario_property = _scenario_property


@pytest.mark.slow
@given(ops=scenario_cases)
@_settings(10_000, fixed=False)
def test_scenario_property_long(tmp_path, ops):
    check_scenario_case(tmp_path, ops)


@pytest.mark.parametrize(("ops", "needle"), [
    (FOUND_SCENARIOS[0], "[campaign] sample_interval_s: expected less than a quarter"),
    (FOUND_SCENARIOS[1], "[campaign] duration: expected at most 100 years"),
    (FOUND_SCENARIOS[2], "[campaign] sample_interval_s: expected less than a quarter of the "
                         "turn period (40 s / 4: the 2 theta signal would alias), got 60 s"),
    (FOUND_SCENARIOS[3], "[campaign] sample_interval_s: expected less than a quarter"),
    (FOUND_SCENARIOS[4], "TOML: expected tables and arrays nested less deeply"),
    (FOUND_SCENARIOS[5], "file: expected UTF-8 text, got byte 0xe9 at byte offset 2"),
    ([SetKey("campaign", "duration_days", 3.6e4), SetKey("campaign", "sample_interval_s",
                                                          0.01),
      SetKey("turntable", "period_s", 1.0)],
     "sample_interval_s: expected at most 1e+11 samples (duration / sample_interval_s), got "
     "3.11e+11"),
    ([SetKey("turntable", "motion", "stepped"), SetKey("turntable", "dwell_s", 0.5),
      SetKey("turntable", "move_s", 0.0)],
     "expected less than a quarter of the turn period (4 s"),
])
def test_absurd_scenarios_are_named(tmp_path, ops, needle):
    path = tmp_path / "scenario.toml"
    path.write_bytes(_scenario_bytes(ops))
    with pytest.raises(FringeError) as info:
        load_scenario(path)
    assert_one_line_naming(info.value, path)
    assert needle in str(info.value), str(info.value)


def test_many_turns_are_refused_before_the_azimuth_loses_resolution(tmp_path):
    # 90 years of 1 s turns: 2.8e9 turns, an unwrapped azimuth of 1.8e10 rad > 2**32 rad
    path = tmp_path / "scenario.toml"
    path.write_bytes(_scenario_bytes([SetKey("campaign", "duration_days", 90 * 365.25),
                                      SetKey("campaign", "sample_interval_s", 0.2),
                                      SetKey("turntable", "period_s", 1.0)]))
    with pytest.raises(ConfigError, match=r"\[turntable\] period_s: expected at most 6.84e\+08 "
                                          r"turns"):
        load_scenario(path)


# == TOML readers: deep nesting and bytes that are not UTF-8 =================================
def _import_toml(text: bytes) -> bytes:
    return (b'epoch_utc = "2027-02-03T00:00:00Z"\n[site]\nlatitude_deg = 12.5\n'
            b'longitude_deg = 1.0\n[apparatus]\nkind = "cavity-pair"\ncarrier_hz = 1.9e14\n'
            b'[columns]\ntime = "t"\nazimuth = "az"\nsignal = "beat"\n[units]\n'
            b'azimuth = "deg"\nsignal = "Hz"\n' + text)


@pytest.mark.parametrize("reader", ["import", "compare"])
@pytest.mark.parametrize("extra", [b"# caf\xe9\n", b"x = " + b"[" * 100_000 + b"]" * 100_000,
                                   b"x = " + b"{a = " * 100_000 + b"}" * 100_000])
def test_other_toml_readers_refuse_in_one_line(tmp_path, reader, extra):
    path = tmp_path / "table.toml"
    if reader == "import":
        path.write_bytes(_import_toml(extra))
        call = read_import_metadata
    else:
        path.write_bytes(b'[[limits]]\nname = "ke_XY"\nvalue = 1.0\nsigma = 0.5\n'
                         b'citation = "invented"\n' + extra)
        call = load_comparison
    with pytest.raises(InputFileError) as info:
        call(path)
    assert_one_line_naming(info.value, path)


# == CSV import: unresolvable azimuths, one column for two channels ==========================
CSV_META = {"": {"epoch_utc": "2027-02-03T00:00:00Z"},
            "site": {"latitude_deg": 12.5, "longitude_deg": -60.25},
            "apparatus": {"kind": "cavity-pair", "carrier_hz": 1.9e14},
            "columns": {"time": "t", "azimuth": "az", "signal": "beat"},
            "units": {"azimuth": "rad", "signal": "Hz"}}


@dataclass(frozen=True)
class CsvCase:
    offset: float          # added to every azimuth (an unwrapped record far from zero)
    units: str             # "rad" or "deg"
    step: float            # azimuth step per sample, in units
    mapping: tuple         # (time, azimuth, signal) header names


csv_cases = st.builds(
    CsvCase, st.sampled_from((0.0, 1e3, 4e9, 2.0 ** 32, 4.3e9, 2.5e11, 1e15, -1e15, 1e300)) |
    st.floats(-1e16, 1e16), st.sampled_from(("rad", "deg")),
    st.sampled_from((0.3, 1e-3, 20.0)),
    st.sampled_from((("t", "az", "beat"), ("t", "t", "beat"), ("t", "az", "az"),
                     ("beat", "az", "beat"), ("t", "az", "t"))))
FOUND_CSV = [CsvCase(1e15, "rad", 0.3, ("t", "az", "beat")),
             CsvCase(0.0, "rad", 0.3, ("t", "t", "beat"))]


def _write_csv_case(directory: Path, case: CsvCase) -> tuple[Path, Path, Path]:
    """The table and metadata of ``case`` under ``directory``: (CSV, TOML, output path)."""
    src, out_dir = directory / "in", directory / "out"
    src.mkdir(exist_ok=True)
    out_dir.mkdir(exist_ok=True)
    rows = [f"{0.5 * i!r},{case.offset + case.step * i!r},{math.cos(i)!r}" for i in range(40)]
    csv_path, toml_path = src / "table.csv", src / "meta.toml"
    csv_path.write_text("t,az,beat\n" + "\n".join(rows) + "\n", "utf-8")
    meta = {k: dict(v) for k, v in CSV_META.items()}
    meta["columns"] = dict(zip(("time", "azimuth", "signal"), case.mapping, strict=True))
    meta["units"]["azimuth"] = case.units
    toml_path.write_text(toml_document(meta), "utf-8")
    return csv_path, toml_path, out_dir / "run.h5"


def check_csv_case(directory: Path, case: CsvCase) -> None:
    csv_path, toml_path, out = _write_csv_case(directory, case)
    before = digest(csv_path), digest(toml_path)
    try:
        import_csv(csv_path, out, metadata=toml_path)
    except FringeError as exc:
        assert isinstance(exc, InputFileError), repr(exc)
        assert_one_line_naming(exc, csv_path, toml_path)
        assert os.listdir(out.parent) == []
    else:
        assert len(set(case.mapping)) == 3            # each column holds one channel
        with open_run(out) as run:
            az = run.read_all()["azimuth"]
        step_rad = case.step * (math.pi / 180 if case.units == "deg" else 1.0)
        assert np.spacing(np.max(np.abs(az))) <= 1e-6          # float64 resolves ~1e-6 rad
        np.testing.assert_allclose(np.diff(az), step_rad, rtol=0, atol=2e-6)
        out.unlink()
    assert (digest(csv_path), digest(toml_path)) == before


@given(case=csv_cases)
@_settings(100, fixed=True)
def _csv_property(tmp_path, case):
    check_csv_case(tmp_path, case)


for _c in FOUND_CSV:
    _csv_property = example(case=_c)(_csv_property)
test_csv_values_property = _csv_property


@pytest.mark.slow
@given(case=csv_cases)
@_settings(2000, fixed=False)
def test_csv_values_property_long(tmp_path, case):
    check_csv_case(tmp_path, case)


@pytest.mark.parametrize(("case", "needle"), [
    (FOUND_CSV[0], r"table.csv: line 2, column 'az': expected an azimuth within 2\*\*32 "
                   r"rad \(float64 resolves about 1e-6 rad there; wrap larger ones\), got "
                   r"'1000000000000000.0'"),
    (FOUND_CSV[1], r"meta.toml: columns.azimuth: expected a column other than that of "
                   r"columns.time \('t'\): each column holds one channel")])
def test_csv_errors_name_the_column_and_the_mapping(tmp_path, case, needle):
    csv_path, toml_path, out = _write_csv_case(tmp_path, case)
    with pytest.raises(InputFileError, match=needle):
        import_csv(csv_path, out, metadata=toml_path)


# == --seed =================================================================================
@pytest.mark.parametrize("command", ["simulate", "demo"])
@pytest.mark.parametrize("seed", ["-1", str(-2 ** 70)])
def test_negative_seed_is_one_line_and_writes_nothing(tmp_path, command, seed):
    (tmp_path / "scenario.toml").write_bytes(DEMO.read_bytes())
    args = (["simulate", "scenario.toml", "--out", "run.h5"] if command == "simulate"
            else ["demo", "--out", "demo"]) + ["--seed", seed]
    run = run_command(tmp_path, args)
    assert run.exit_code == 2, run.stdout + run.stderr
    assert run.stderr.strip().splitlines() == [
        f"error: --seed: expected an integer >= 0 (the seed of numpy.random.default_rng), "
        f"got {seed}"]
    assert sorted(p.name for p in tmp_path.iterdir()) == ["scenario.toml"]
