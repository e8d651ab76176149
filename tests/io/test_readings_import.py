"""Readings import: calibration scale, weights, the counter's gate and a second device's log.

All files are written under tmp_path; every number is invented. Expected values are
arithmetic on the inputs (derived): the scale multiplies, the gate moves a stamp to its
window's centre, the merge interpolates a linear motion exactly.
"""

from __future__ import annotations

import importlib.util
from pathlib import Path

import h5py
import numpy as np
import pytest

from fringe.errors import TimeScaleWarning
from fringe.io.csvimport import import_csv
from fringe.io.runreader import open_run

SITE = {"latitude_deg": 51.2, "longitude_deg": -1.5, "name": "invented"}
MICHELSON = {"kind": "michelson", "arm_length_m": 11.0, "wavelength_m": 5.9e-7}
EPOCH = "2027-05-01T00:00:00Z"


def _write(path, header, rows):
    path.write_text(header + "\n" + "\n".join(",".join(str(x) for x in r) for r in rows) + "\n",
                    "utf-8")
    return path


def _stepped(tmp_path, n=32):
    """A stepped, hand-read table: 16 marks per turn, readings in micrometer divisions."""
    rows = [(10.0 * i, (22.5 * i) % 360.0, 40.0 + 3.0 * np.cos(np.radians(45.0 * i)), 1 + i % 3)
            for i in range(n)]
    return _write(tmp_path / "marks.csv", "t,mark_deg,divisions,n_read", rows), rows


def test_scale_weights_and_version(tmp_path):
    path, rows = _stepped(tmp_path)
    s = import_csv(path, tmp_path / "run.h5", site=SITE, apparatus=MICHELSON, epoch_utc=EPOCH,
                   columns={"time": "t", "azimuth": "mark_deg", "signal": "divisions",
                            "weight": "n_read"},
                   units={"time": "s", "azimuth": "deg", "signal": "fringe",
                          "weight": "readings"},
                   calibration={"scale_factor": 0.02, "scale_rel_sigma": 0.03,
                                "instrument_units": "micrometer divisions"})
    with open_run(s.out_path) as run:
        assert run.format_version == 2 and run.weighted
        assert run.signal_attrs == {"scale_factor": 0.02, "scale_rel_sigma": 0.03,
                                    "instrument_units": "micrometer divisions"}
        assert run.aux_channels == {}
        got = run.read_all(("time", "signal", "weight"))
    np.testing.assert_allclose(got["signal"], [r[2] * 0.02 for r in rows], rtol=1e-15)
    np.testing.assert_array_equal(got["weight"], [r[3] for r in rows])
    np.testing.assert_array_equal(got["time"], [r[0] for r in rows])


def test_a_plain_import_is_still_format_version_1(tmp_path):
    path, _ = _stepped(tmp_path)
    s = import_csv(path, tmp_path / "run.h5", site=SITE, apparatus=MICHELSON, epoch_utc=EPOCH,
                   columns={"time": "t", "azimuth": "mark_deg", "signal": "divisions"},
                   units={"azimuth": "deg", "signal": "fringe"})
    with h5py.File(s.out_path, "r") as f:
        assert int(f.attrs["fringe_format_version"]) == 1
        assert set(f["samples"]) == {"time", "azimuth", "signal"}
        assert "gate_s" not in f["samples/signal"].attrs


@pytest.mark.parametrize("kind, stamp, shift", [
    ("plain", "end", -0.5), ("plain", "start", 0.5), ("plain", "centre", 0.0),
    ("overlapping", "end", -1.0), ("overlapping", "start", 1.0)])
def test_gate_moves_stamps_to_the_window_centre(tmp_path, kind, stamp, shift):
    """Window tau (plain) or 2 tau (overlapping); tau = 1 s here, so the shift is +-tau/2, +-tau."""
    rows = [(float(i), 12.0 * i, 0.1 * i) for i in range(40)]
    path = _write(tmp_path / "c.csv", "t,az,beat", rows)
    s = import_csv(path, tmp_path / "run.h5", site=SITE, epoch_utc=EPOCH,
                   apparatus={"kind": "cavity-pair", "carrier_hz": 2.8e14},
                   columns={"time": "t", "azimuth": "az", "signal": "beat"},
                   units={"azimuth": "deg", "signal": "Hz"},
                   gate={"gate_s": 1.0, "kind": kind, "stamp": stamp})
    with open_run(s.out_path) as run:
        t = run.read_all(("time",))["time"]
        assert run.signal_attrs == {"gate_s": 1.0, "gate_kind": kind}
        assert run.read_group_attrs("provenance")["gate_stamp"] == stamp
    np.testing.assert_array_equal(t, np.arange(40.0) + shift)


def _two_device(tmp_path, *, offset=0.0, enc_dt=0.1, enc_span=(-5.0, 70.0), gap=None,
                iso=False):
    """Counter every 1 s from 0 to 60 s; encoder (wrapped degrees) at enc_dt on its clock."""
    rate = 7.5                                   # deg/s, table turning (invented)
    t_sig = np.arange(0.0, 60.0, 1.0)
    sig = _write(tmp_path / "counter.csv", "stamp,beat",
                 [(f"2027-05-01T00:00:{x:09.6f}Z" if iso else x, 0.01 * i)
                  for i, x in enumerate(t_sig)])
    t_true = np.arange(*enc_span, enc_dt)
    if gap is not None:
        t_true = t_true[(t_true < gap[0]) | (t_true > gap[1])]
    enc = _write(tmp_path / "encoder.csv", "clock_s,angle",
                 [(f"{x - offset:.6f}", f"{(rate * x + 100.0) % 360.0:.9f}") for x in t_true])
    return sig, enc, t_sig, rate


def _log(**kw):
    out = {"columns": {"time": "clock_s", "azimuth": "angle"},
           "units": {"time": "s", "azimuth": "deg"}, "max_gap_s": 0.5}
    out.update(kw)
    return out


def _import_two(tmp_path, sig, enc, iso=False, block_rows=65_536, name="run.h5", **log):
    return import_csv(sig, tmp_path / name, site=SITE, epoch_utc=EPOCH, block_rows=block_rows,
                      apparatus={"kind": "cavity-pair", "carrier_hz": 2.8e14},
                      columns={"time": "stamp", "signal": "beat"},
                      units={"time": "iso8601" if iso else "s", "signal": "Hz"},
                      azimuth_log=enc, azimuth_log_format=_log(**log))


@pytest.mark.parametrize("iso", [False, True])
def test_merge_interpolates_the_unwrapped_encoder_angle(tmp_path, iso):
    sig, enc, t_sig, rate = _two_device(tmp_path, offset=0.37, iso=iso)
    s = _import_two(tmp_path, sig, enc, iso=iso, clock_offset_s=0.37)
    small = _import_two(tmp_path, sig, enc, iso=iso, clock_offset_s=0.37, block_rows=7,
                        name="blocks.h5")                    # signal in blocks of 7 rows
    with open_run(s.out_path) as run:
        got = run.read_all()
        prov = run.read_group_attrs("provenance")
    assert s.n_dropped == 0 and got["time"].size == t_sig.size
    want = np.radians(rate * t_sig + 100.0)
    d = np.angle(np.exp(1j * (got["azimuth"] - want)))
    assert np.abs(d).max() < np.radians(1e-6)                  # 1e-9 deg written, linear motion
    assert np.all(np.diff(got["azimuth"]) > 0)                 # unwrapped across 360
    assert prov["azimuth_source_file"] == "encoder.csv" and prov["clock_offset_s"] == 0.37
    with open_run(small.out_path) as run:
        np.testing.assert_array_equal(run.read_all()["azimuth"], got["azimuth"])


def test_merge_without_the_clock_offset_is_off_by_it(tmp_path):
    sig, enc, t_sig, rate = _two_device(tmp_path, offset=0.37)
    s = _import_two(tmp_path, sig, enc)
    with open_run(s.out_path) as run:
        az = run.read_all()["azimuth"]
    d = np.degrees(np.angle(np.exp(1j * (az - np.radians(rate * t_sig + 100.0)))))
    np.testing.assert_allclose(d, rate * 0.37, atol=1e-6)      # the angle 0.37 s later


def test_encoder_epoch_of_its_own(tmp_path):
    """Encoder seconds counted from an epoch 60 s earlier: the same merge once it is declared."""
    rate = 7.5
    sig, _, t_sig, _ = _two_device(tmp_path)
    t_true = np.arange(-5.0, 70.0, 0.1)
    enc = _write(tmp_path / "enc60.csv", "clock_s,angle",
                 [(f"{x + 60.0:.6f}", f"{(rate * x) % 360.0:.9f}") for x in t_true])
    s = _import_two(tmp_path, sig, enc, epoch_utc="2027-04-30T23:59:00Z")
    with open_run(s.out_path) as run:
        az = run.read_all()["azimuth"]
    d = np.angle(np.exp(1j * (az - np.radians(rate * t_sig))))
    assert np.abs(d).max() < np.radians(1e-6)


def test_signal_outside_the_encoder_span_is_left_out(tmp_path):
    sig, enc, t_sig, _ = _two_device(tmp_path, enc_span=(10.05, 50.0))
    s = _import_two(tmp_path, sig, enc)
    with open_run(s.out_path) as run:
        t = run.read_all(("time",))["time"]
    np.testing.assert_array_equal(t, np.arange(11.0, 50.0))      # 10.05 <= t <= 49.95
    assert s.n_dropped == t_sig.size - t.size


def test_gap_dropped_on_request(tmp_path):
    sig, enc, t_sig, _ = _two_device(tmp_path, gap=(20.5, 23.5))
    s = _import_two(tmp_path, sig, enc, on_gap="drop")
    with open_run(s.out_path) as run:
        t = run.read_all(("time",))["time"]
        assert run.read_group_attrs("provenance")["n_dropped"] == 3
    assert list(np.setdiff1d(t_sig, t)) == [21.0, 22.0, 23.0] and s.n_dropped == 3


STEPPED = Path(__file__).resolve().parents[2] / "examples" / "stepped_1893"


def test_the_invented_1893_session_is_reproducible(tmp_path):
    spec = importlib.util.spec_from_file_location("stepped", STEPPED / "make_stepped_session.py")
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    written = mod.write(str(tmp_path))
    assert Path(written).read_bytes() == (STEPPED / "session.csv").read_bytes()


def test_the_invented_1893_session_imports(tmp_path):
    """6 turns x 16 marks, divisions x 0.02 = fringes, weights = readings averaged."""
    with pytest.warns(TimeScaleWarning) as caught:      # 1893: UT, and before epv00's span
        s = import_csv(STEPPED / "session.csv", tmp_path / "s.h5",
                       metadata=STEPPED / "session.toml")
    said = " ".join(str(w.message) for w in caught)
    assert "before 1960 when UTC began" in said and "outside 1900-2100" in said
    rows = np.loadtxt(STEPPED / "session.csv", delimiter=",", comments="#", skiprows=4)
    with open_run(s.out_path) as run:
        assert (run.n_samples, run.epoch_utc, run.format_version) == (96, "1893-10-17T09:30:00Z",
                                                                      2)
        assert run.apparatus["kind"] == "michelson" and run.weighted
        assert run.signal_attrs == {"scale_factor": 0.02, "scale_rel_sigma": 0.04,
                                    "instrument_units": "micrometer divisions"}
        got = run.read_all(("time", "azimuth", "signal", "weight"))
    np.testing.assert_array_equal(got["time"], rows[:, 0])
    np.testing.assert_allclose(got["azimuth"], np.radians(rows[:, 1]), rtol=1e-15)
    np.testing.assert_allclose(got["signal"], rows[:, 2] * 0.02, rtol=1e-15)
    np.testing.assert_array_equal(got["weight"], rows[:, 3])
    assert set(np.unique(rows[:, 3])) <= {3.0, 4.0}
    marks = np.diff(rows[:, 1])                          # 16 marks of 22.5 deg per turn
    assert np.sum(marks < 0) == 5 and np.all(marks[marks > 0] == 22.5)


def _h5(path, version, signal_attrs=None, weight=None):
    """A small run file written with h5py alone (as docs/run-format.md shows)."""
    t = np.arange(20.0)
    with h5py.File(path, "w") as f:
        f.attrs["fringe_format"] = "run"
        f.attrs["fringe_format_version"] = version
        f.create_group("site").attrs.update({"latitude_deg": 10.0, "longitude_deg": 20.0})
        f.create_group("apparatus").attrs.update({"kind": "cavity-pair", "carrier_hz": 2.8e14})
        s = f.create_group("samples")
        s.create_dataset("time", data=t).attrs.update({"units": "s", "epoch_utc": EPOCH})
        s.create_dataset("azimuth", data=t * 18.0).attrs["units"] = "deg"
        sig = s.create_dataset("signal", data=np.cos(t))
        sig.attrs["units"] = "Hz"
        sig.attrs.update(signal_attrs or {})
        if weight is not None:
            s.create_dataset("weight", data=weight).attrs["units"] = "1"
    return path


@pytest.mark.parametrize("attrs, weight, obj, expected", [
    ({"gate_s": 1.0}, None, "samples/signal.gate_kind",
     "missing attribute; expected the counter's gate kind, 'plain' or 'overlapping' (with "
     "gate_s)"),
    ({"gate_s": -1.0, "gate_kind": "plain"}, None, "samples/signal.gate_s",
     "expected a positive number, got -1.0"),
    ({"gate_s": 1.0, "gate_kind": "boxcar"}, None, "samples/signal.gate_kind",
     "expected 'plain' or 'overlapping', got 'boxcar'"),
    ({"scale_rel_sigma": -0.1}, None, "samples/signal.scale_rel_sigma",
     "expected a number >= 0, got -0.1"),
    ({}, np.r_[np.ones(4), -1.0, np.ones(15)], "samples/weight",
     "expected finite values > 0 or NaN (a dropped sample), got -1.0 at index 4"),
], ids=["gate-without-kind", "gate-negative", "gate-kind", "rel-negative", "weight-negative"])
def test_reader_refuses_bad_version_2_attributes(tmp_path, attrs, weight, obj, expected):
    from fringe.errors import InputFileError

    path = _h5(tmp_path / "v2.h5", 2, attrs, weight)
    with pytest.raises(InputFileError) as info:
        open_run(path).close()
    assert str(info.value) == f"{path}: {obj}: {expected}"


def test_version_1_ignores_version_2_names(tmp_path):
    """In a version-1 file gate attributes are ignored and 'weight' is an auxiliary channel."""
    path = _h5(tmp_path / "v1.h5", 1, {"gate_s": -5.0}, np.full(20, -1.0))
    with open_run(path) as run:
        assert run.format_version == 1 and run.signal_attrs == {} and not run.weighted
        assert run.aux_channels == {"weight": "1"}
