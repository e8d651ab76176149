"""Run files: reader validation, writer guarantees, round trips (all files under tmp_path)."""

from __future__ import annotations

import hashlib
import os
import re
import subprocess
import sys
from pathlib import Path

import h5py
import numpy as np
import pytest

from fringe.errors import ConfigError, InputFileError, OutputError
from fringe.io.runformat import APPARATUS_KINDS, parse_utc_iso
from fringe.io.runreader import open_run, sha256
from fringe.io.runwriter import RunWriter
from fringe.site import Site

N = 40  # samples in the hand-built files
EPOCH = "2027-02-03T00:00:00Z"


def write_spec_file(path: Path, n: int = N) -> Path:
    """A run file written with h5py alone, following docs/run-format.md."""
    t_s = np.arange(n, dtype=np.float64) * 0.5
    with h5py.File(path, "w") as f:
        f.attrs["fringe_format"] = "run"
        f.attrs["fringe_format_version"] = 1
        site = f.create_group("site")
        site.attrs["latitude_deg"] = 44.0
        site.attrs["longitude_deg"] = -71.5
        app = f.create_group("apparatus")
        app.attrs["kind"] = "cavity-pair"
        app.attrs["carrier_hz"] = 2.8e14
        app.attrs["tilt_axis"] = "north"
        s = f.create_group("samples")
        time = s.create_dataset("time", data=t_s, maxshape=(None,), chunks=(16,))
        time.attrs["units"] = "s"
        time.attrs["epoch_utc"] = EPOCH
        s.create_dataset("azimuth", data=t_s * 10.0).attrs["units"] = "deg"
        signal = np.sin(np.radians(t_s * 20.0))
        signal[3] = np.nan
        s.create_dataset("signal", data=signal).attrs["units"] = "Hz"
        s.create_dataset("tilt", data=np.arange(n, dtype=np.int32)).attrs["units"] = "urad"
        truth = f.create_group("truth")
        truth.attrs["kappa_e_xy"] = 1e-17
        truth.create_dataset("noise_psd", data=np.ones(3))
    return path


def digest(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def assert_one_line(exc: Exception, path: Path, obj: str, expected: str) -> None:
    message = str(exc)
    assert "\n" not in message
    assert message == f"{path}: {obj}: {expected}"


# -- a file written to the spec with h5py alone -------------------------------------------------
def test_spec_file_written_with_h5py_is_read(tmp_path):
    path = write_spec_file(tmp_path / "lab.h5")
    before = digest(path)
    with open_run(path) as run:
        assert run.site == Site(44.0, -71.5)
        assert run.apparatus == {"kind": "cavity-pair", "carrier_hz": 2.8e14,
                                 "path_separation_deg": 90.0, "tilt_axis": "north"}
        assert (run.epoch_utc, run.n_samples) == (EPOCH, N)
        assert (run.signal_units, run.azimuth_units) == ("Hz", "deg")
        assert run.aux_channels == {"tilt": "urad"}
        assert run.extra_groups == ("truth",)
        assert run.read_group_attrs("truth") == {"kappa_e_xy": 1e-17}
        np.testing.assert_array_equal(run.read_group_datasets("truth")["noise_psd"], np.ones(3))
        data = run.read_all(run.channels)
    t_s = np.arange(N) * 0.5
    np.testing.assert_array_equal(data["time"], t_s)
    np.testing.assert_array_equal(data["azimuth"], np.radians(t_s * 10.0))  # deg -> rad
    assert np.isnan(data["signal"][3])
    np.testing.assert_array_equal(data["tilt"], np.arange(N, dtype=float))
    assert digest(path) == before  # the reader never modifies its input


def test_documented_h5py_example_is_valid(tmp_path, monkeypatch):
    text = (Path(__file__).parents[2] / "docs" / "run-format.md").read_text(encoding="utf-8")
    block = text.split("## Writing a run file with h5py alone", 1)[1]
    code = re.search(r"```python\n(.*?)```", block, re.S).group(1)
    monkeypatch.chdir(tmp_path)
    exec(compile(code, "run-format.md", "exec"), {})
    with open_run(tmp_path / "run.h5") as run:
        assert run.n_samples == 86_400 and run.aux_channels == {"tilt_x": "urad"}
        assert np.isnan(run.read_all()["signal"][1000:1010]).all()


# -- every validation rule, one bad file each ---------------------------------------------------
def _set(obj_path, name, value):
    def mutate(f):
        (f if obj_path == "/" else f[obj_path]).attrs[name] = value
    return mutate


def _del_attr(obj_path, name):
    def mutate(f):
        del (f if obj_path == "/" else f[obj_path]).attrs[name]
    return mutate


def _del(name):
    def mutate(f):
        del f[name]
    return mutate


def _replace(name, data):
    def mutate(f):
        old = dict(f[name].attrs)
        del f[name]
        ds = f.create_dataset(name, data=data)
        for k, v in old.items():
            ds.attrs[k] = v
    return mutate


def _michelson_without_wavelength(f):
    app = f["apparatus"]
    app.attrs["kind"] = "michelson"
    app.attrs["arm_length_m"] = 1.0
    f["samples/signal"].attrs["units"] = "fringe"


def _empty_samples(f):
    for name in ("time", "azimuth", "signal", "tilt"):
        _replace(f"samples/{name}", np.zeros(0))(f)


def _times(values):
    t = np.arange(N, dtype=float) * 0.5
    for i, v in values.items():
        t[i] = v
    return _replace("samples/time", t)


def _azimuths(i, v):
    a = np.arange(N, dtype=float)
    a[i] = v
    return _replace("samples/azimuth", a)


KINDS = "'cavity-pair', 'cavity-vs-reference', 'michelson', 'clock'"
BAD_FILES = [
    ("no-format", _del_attr("/", "fringe_format"), "fringe_format",
     "missing attribute; expected 'run' (a fringe run file)"),
    ("wrong-format", _set("/", "fringe_format", "result"), "fringe_format",
     "expected 'run', got 'result'"),
    ("no-version", _del_attr("/", "fringe_format_version"), "fringe_format_version",
     "missing attribute; expected the integer 1 or 2"),
    ("version-3", _set("/", "fringe_format_version", 3), "fringe_format_version",
     "expected the integer 1 or 2 (this fringe reads run-file versions 1 or 2), got 3"),
    ("no-site", _del("site"), "site",
     "missing group; expected attributes latitude_deg and longitude_deg"),
    ("no-apparatus", _del("apparatus"), "apparatus", "missing group; expected an attribute 'kind'"),
    ("no-samples", _del("samples"), "samples",
     "missing group; expected datasets time, azimuth and signal"),
    ("no-latitude", _del_attr("site", "latitude_deg"), "site.latitude_deg",
     "missing attribute; expected geodetic latitude in degrees, north positive"),
    ("latitude-91", _set("site", "latitude_deg", 91.0), "site.latitude_deg",
     "expected a value in [-90, 90], got 91.0"),
    ("latitude-text", _set("site", "latitude_deg", "north"), "site.latitude_deg",
     "expected a number, got 'north'"),
    ("latitude-nan", _set("site", "latitude_deg", np.nan), "site.latitude_deg",
     "expected a finite number, got nan"),
    ("unknown-kind", _set("apparatus", "kind", "ring"), "apparatus.kind",
     f"expected one of {KINDS}, got 'ring'"),
    ("no-carrier", _del_attr("apparatus", "carrier_hz"), "apparatus.carrier_hz",
     "missing attribute; kind 'cavity-pair' requires the carrier frequency in Hz, > 0"),
    ("negative-carrier", _set("apparatus", "carrier_hz", -1.0), "apparatus.carrier_hz",
     "expected a positive number, got -1.0"),
    ("carrier-text", _set("apparatus", "carrier_hz", "280 THz"), "apparatus.carrier_hz",
     "expected a number, got '280 THz'"),
    ("no-wavelength", _michelson_without_wavelength, "apparatus.wavelength_m",
     "missing attribute; kind 'michelson' requires the optical wavelength in m, > 0"),
    ("no-time", _del("samples/time"), "samples/time",
     "missing dataset; expected seconds since samples/time.epoch_utc"),
    ("no-azimuth", _del("samples/azimuth"), "samples/azimuth",
     "missing dataset; expected the azimuth of path 1 from north toward east"),
    ("no-signal", _del("samples/signal"), "samples/signal",
     "missing dataset; expected the recorded signal"),
    ("time-units", _set("samples/time", "units", "ms"), "samples/time.units",
     "expected 's', got 'ms'"),
    ("no-time-units", _del_attr("samples/time", "units"), "samples/time.units",
     "missing attribute; expected 's'"),
    ("azimuth-units", _set("samples/azimuth", "units", "grad"), "samples/azimuth.units",
     "expected 'rad' or 'deg', got 'grad'"),
    ("signal-units", _set("samples/signal", "units", "fringe"), "samples/signal.units",
     "expected 'Hz' or '1', got 'fringe'"),
    ("aux-no-units", _del_attr("samples/tilt", "units"), "samples/tilt.units",
     "missing attribute; expected a units string for this auxiliary channel"),
    ("no-epoch", _del_attr("samples/time", "epoch_utc"), "samples/time.epoch_utc",
     "missing attribute; expected an ISO 8601 UTC time like '2027-02-03T00:00:00Z'"),
    ("bad-epoch", _set("samples/time", "epoch_utc", "2027-13-01T00:00:00Z"),
     "samples/time.epoch_utc",
     "expected an ISO 8601 UTC time like '2027-02-03T00:00:00Z', got '2027-13-01T00:00:00Z'"),
    ("epoch-no-zone", _set("samples/time", "epoch_utc", "2027-02-03T00:00:00"),
     "samples/time.epoch_utc",
     "expected an ISO 8601 UTC time like '2027-02-03T00:00:00Z', got '2027-02-03T00:00:00'"),
    ("azimuth-2d", _replace("samples/azimuth", np.zeros((N, 2))), "samples/azimuth",
     f"expected a one-dimensional dataset, got shape ({N}, 2)"),
    ("signal-short", _replace("samples/signal", np.zeros(N - 1)), "samples/signal",
     f"expected the length of samples/time ({N}), got {N - 1}"),
    ("aux-long", _replace("samples/tilt", np.zeros(N + 1)), "samples/tilt",
     f"expected the length of samples/time ({N}), got {N + 1}"),
    ("empty", _empty_samples, "samples/time", "expected at least one sample, got an empty dataset"),
    ("time-float32", _replace("samples/time", np.arange(N, dtype=np.float32)), "samples/time",
     "expected float64 or integer seconds, got float32"),
    ("azimuth-int", _replace("samples/azimuth", np.arange(N)), "samples/azimuth",
     "expected float64 values, got int64"),
    ("signal-int", _replace("samples/signal", np.arange(N)), "samples/signal",
     "expected float32 or float64 values, got int64"),
    ("subgroup", lambda f: f["samples"].create_group("extra"), "samples/extra",
     "expected a one-dimensional dataset, got a group"),
    ("time-decreases", _times({5: 1.0}), "samples/time",
     "expected strictly increasing values, got 1.0 at index 5 after 2.0"),
    ("time-repeats", _times({5: 2.0}), "samples/time",
     "expected strictly increasing values, got 2.0 repeated at index 5"),
    ("time-nan", _times({7: np.nan}), "samples/time", "expected finite values, got nan at index 7"),
    ("time-inf", _times({N - 1: np.inf}), "samples/time",
     f"expected finite values, got inf at index {N - 1}"),
    ("azimuth-nan", _azimuths(9, np.nan), "samples/azimuth",
     "expected finite values (azimuth has no dropped samples), got nan at index 9"),
    ("azimuth-inf", _azimuths(0, -np.inf), "samples/azimuth",
     "expected finite values (azimuth has no dropped samples), got -inf at index 0"),
    ("signal-inf", _replace("samples/signal", np.r_[np.zeros(N - 1), np.inf]), "samples/signal",
     f"expected finite values or NaN (a dropped sample), got inf at index {N - 1}"),
]
VALUE_RULES = {"time-decreases", "time-repeats", "time-nan", "time-inf", "azimuth-nan",
               "azimuth-inf", "signal-inf"}


def _bad_file(tmp_path, mutate) -> Path:
    path = write_spec_file(tmp_path / "bad.h5")
    with h5py.File(path, "a") as f:
        mutate(f)
    return path


@pytest.mark.parametrize("mutate, obj, expected", [c[1:] for c in BAD_FILES],
                         ids=[c[0] for c in BAD_FILES])
def test_invalid_file_gives_one_line_error(tmp_path, mutate, obj, expected):
    path = _bad_file(tmp_path, mutate)
    before = digest(path)
    with pytest.raises(InputFileError) as info:
        open_run(path)
    assert_one_line(info.value, path, obj, expected)
    assert digest(path) == before


@pytest.mark.parametrize("mutate, obj, expected",
                         [c[1:] for c in BAD_FILES if c[0] in VALUE_RULES],
                         ids=[c[0] for c in BAD_FILES if c[0] in VALUE_RULES])
@pytest.mark.parametrize("chunk", [1, 4, 5, 1000])
def test_value_rules_are_checked_chunkwise_and_lazily(tmp_path, mutate, obj, expected, chunk):
    path = _bad_file(tmp_path, mutate)
    with pytest.raises(InputFileError) as info:  # open-time pass, chunk boundaries anywhere
        open_run(path, chunk_samples=chunk)
    assert_one_line(info.value, path, obj, expected)
    with open_run(path, check_values=False) as run:  # lazy: raised by the chunk that has it
        with pytest.raises(InputFileError) as info:
            for _ in run.iter_chunks(chunk):
                pass
        assert_one_line(info.value, path, obj, expected)
        with pytest.raises(InputFileError) as info:
            run.read_all()
    assert_one_line(info.value, path, obj, expected)


def test_open_time_pass_reads_in_bounded_chunks(tmp_path, monkeypatch):
    path = write_spec_file(tmp_path / "run.h5", n=1000)
    reads = []
    original = h5py.Dataset.read_direct

    def spy(self, dest, source_sel=None, dest_sel=None):
        reads.append((self.name, dest.size))
        return original(self, dest, source_sel, dest_sel)

    monkeypatch.setattr(h5py.Dataset, "read_direct", spy)
    with open_run(path, chunk_samples=64):
        pass
    assert {name for name, _ in reads} == {"/samples/time", "/samples/azimuth", "/samples/signal"}
    assert max(size for _, size in reads) == 64  # never the whole dataset
    assert len(reads) == 3 * 16  # ceil(1000 / 64) chunks per channel


def test_lazy_check_across_a_start_offset(tmp_path):
    path = _bad_file(tmp_path, _times({20: 9.0}))  # t[19] = 9.5
    with open_run(path, check_values=False) as run:
        with pytest.raises(InputFileError, match="got 9.0 at index 20 after 9.5"):
            list(run.iter_chunks(8, start=20))


def _truncate(path: Path):
    data = path.read_bytes()
    path.write_bytes(data[: len(data) // 2])


def _scramble_superblock(path: Path):
    data = bytearray(path.read_bytes())
    data[8:40] = b"\xff" * 32  # keep the 8-byte HDF5 signature, break what follows
    path.write_bytes(bytes(data))


@pytest.mark.parametrize("damage, expected", [
    (lambda p: p.write_text("time,azimuth\n0,0\n"),
     "expected an HDF5 file (no HDF5 signature found)"),
    (_truncate, "expected a complete HDF5 file, got a truncated one (shorter than its header "
                "records)"),
    (_scramble_superblock, "expected a readable HDF5 file, got a corrupt one (HDF5 could not "
                           "read its contents)"),
    (lambda p: p.unlink(), "not found; expected a run file (HDF5); check the path"),
], ids=["not-hdf5", "truncated", "corrupt", "missing"])
def test_damaged_or_foreign_file(tmp_path, damage, expected):
    path = write_spec_file(tmp_path / "run.h5")
    damage(path)
    before = digest(path) if path.exists() else None
    with pytest.raises(InputFileError) as info:
        open_run(path)
    assert_one_line(info.value, path, "file", expected)
    assert (digest(path) if path.exists() else None) == before


_DAMAGE_SWEEP = r"""
import sys
from pathlib import Path
from fringe.errors import InputFileError
from fringe.io.runreader import open_run
src, work = Path(sys.argv[1]), Path(sys.argv[2])
data = src.read_bytes()
counts = [0, 0]
for offset in range(0, len(data), 61):
    for byte in (b"\x00", b"\xff"):
        damaged = bytearray(data)
        damaged[offset:offset + 48] = byte * len(damaged[offset:offset + 48])
        work.write_bytes(bytes(damaged))
        try:
            with open_run(work) as run:
                run.read_all(run.channels)
                for group in run.extra_groups:
                    run.read_group_attrs(group)
                    run.read_group_datasets(group)
            counts[0] += 1
        except InputFileError as exc:
            assert "\n" not in str(exc) and str(exc).startswith(f"{work}: "), str(exc)
            counts[1] += 1
print(*counts)
"""


def test_damaged_files_written_by_fringe_fail_cleanly(tmp_path):
    """Overwrite 48-byte pieces of a RunWriter file: every outcome is a clean read or one
    InputFileError line, never another exception or a hang (run in a subprocess with a timeout,
    because a hang inside the HDF5 library cannot be interrupted from Python)."""
    src = tmp_path / "run.h5"
    with _writer(src) as w:
        w.append(np.arange(300.0), np.zeros(300), np.ones(300), temp=np.zeros(300))
        w.write_group("truth", {"theory": "sme", "kappa_e_xy": 1e-17}, {"grid": np.ones(4)})
    proc = subprocess.run([sys.executable, "-c", _DAMAGE_SWEEP, str(src), str(tmp_path / "d.h5")],
                          capture_output=True, text=True, timeout=120)
    assert proc.returncode == 0, proc.stderr[-2000:]
    clean, errors = map(int, proc.stdout.split())
    assert errors > 0 and clean + errors == 2 * len(range(0, src.stat().st_size, 61))


# -- writer -------------------------------------------------------------------------------------
def _writer(path, **kw):
    args = dict(site=Site(-35.5, 20.5, 20.0, "invented site"), epoch_utc=EPOCH,
                apparatus={"kind": "michelson", "arm_length_m": 11.0, "wavelength_m": 5.5e-7,
                           "tilt_x_urad": 1.5},
                signal_units="fringe", azimuth_units="deg", aux_channels={"temp": "K"},
                chunk_samples=8)
    args.update(kw)
    return RunWriter(path, **args)


@pytest.mark.parametrize("compression", [None, "lzf"])
@pytest.mark.parametrize("splits", [(50,), (1, 7, 8, 9, 25), (20, 0, 30)])
def test_write_read_round_trip(tmp_path, compression, splits):
    rng = np.random.default_rng(7)
    n = sum(splits)
    t_s = np.cumsum(rng.uniform(0.1, 2.0, n))
    az_deg = rng.uniform(-720.0, 720.0, n)
    signal = rng.normal(size=n)
    signal[::11] = np.nan
    temp = rng.normal(293.0, 0.1, n)
    path = tmp_path / "run.h5"
    with _writer(path, compression=compression) as w:
        i = 0
        for m in splits:
            w.append(t_s[i:i + m], az_deg[i:i + m], signal[i:i + m], temp=temp[i:i + m])
            i += m
        w.write_group("truth", {"kappa_e_xy": 2e-17, "theory": "sme", "flags": [1, 0, 1]},
                      {"coefficients": np.arange(5.0)})
    assert sorted(os.listdir(tmp_path)) == ["run.h5"]  # no temporary file left
    with open_run(path) as run:
        assert run.site == Site(-35.5, 20.5, 20.0, "invented site")
        assert run.apparatus == {"kind": "michelson", "arm_length_m": 11.0,
                                 "wavelength_m": 5.5e-7, "tilt_x_urad": 1.5, "passes": 1,
                                 "path_separation_deg": 90.0}
        assert (run.n_samples, run.signal_units, run.azimuth_units) == (n, "fringe", "deg")
        assert run.aux_channels == {"temp": "K"} and run.extra_groups == ("truth",)
        attrs = run.read_group_attrs("truth")
        assert attrs["kappa_e_xy"] == 2e-17 and attrs["theory"] == "sme"
        np.testing.assert_array_equal(attrs["flags"], [1, 0, 1])
        # only the attributes asked for, of those the group has
        assert run.read_group_attrs("truth", only=("theory", "absent")) == {"theory": "sme"}
        np.testing.assert_array_equal(run.read_group_datasets("truth")["coefficients"],
                                      np.arange(5.0))
        whole = run.read_all(run.channels)
        chunks = list(run.iter_chunks(6, run.channels, copy=True))
        loaded = list(run.load(run.channels).iter_chunks(6, run.channels, start=3))
        # unfiltered chunked data are read without HDF5's chunk cache, compressed data with it
        cache_bytes = run._datasets["signal"].id.get_access_plist().get_chunk_cache()[1]
        assert (cache_bytes == 0) == (compression is None)
    np.testing.assert_array_equal(whole["time"], t_s)
    np.testing.assert_array_equal(whole["azimuth"], np.radians(az_deg))
    np.testing.assert_array_equal(whole["signal"], signal)  # NaN in the same places
    np.testing.assert_array_equal(whole["temp"], temp)
    for name in whole:
        np.testing.assert_array_equal(np.concatenate([c[name] for c in chunks]), whole[name])
    assert max(c["time"].size for c in chunks) == 6
    for name in whole:                 # the record in memory reads back as the file does
        np.testing.assert_array_equal(np.concatenate([c[name] for c in loaded]),
                                      whole[name][3:])


def test_iter_chunks_reuses_buffers_unless_copy(tmp_path):
    path = write_spec_file(tmp_path / "run.h5")
    with open_run(path) as run:
        views = [c["time"] for c in run.iter_chunks(10)]
        copies = [c["time"] for c in run.iter_chunks(10, copy=True)]
        with pytest.raises(ConfigError, match="channels: expected names among time, azimuth, "
                                              "signal, tilt, got 'temperature'"):
            list(run.iter_chunks(10, ("time", "temperature")))
    assert np.shares_memory(views[0], views[1])  # one buffer, overwritten by each chunk
    np.testing.assert_array_equal(np.concatenate(copies), np.arange(N) * 0.5)


def test_existing_output_is_refused_without_overwrite(tmp_path):
    path = tmp_path / "run.h5"
    path.write_bytes(b"previous result")
    with pytest.raises(OutputError) as info:
        _writer(path)
    assert str(info.value) == f"{path}: exists (pass overwrite=True to replace it)"
    assert path.read_bytes() == b"previous result"
    with _writer(path, overwrite=True) as w:
        w.append([0.0], [0.0], [0.0], temp=[1.0])
    with open_run(path) as run:
        assert run.n_samples == 1


@pytest.mark.parametrize("existing", [False, True])
def test_exception_mid_write_leaves_no_output_and_no_temp(tmp_path, existing):
    path = tmp_path / "run.h5"
    if existing:
        path.write_bytes(b"previous result")
    with pytest.raises(KeyboardInterrupt):
        with _writer(path, overwrite=True) as w:
            w.append(np.arange(10.0), np.zeros(10), np.zeros(10), temp=np.zeros(10))
            assert len(os.listdir(tmp_path)) == 1 + existing  # the temporary file
            raise KeyboardInterrupt
    assert os.listdir(tmp_path) == (["run.h5"] if existing else [])
    if existing:
        assert path.read_bytes() == b"previous result"


def test_protect_refuses_any_spelling_of_an_input(tmp_path, monkeypatch):
    src = write_spec_file(tmp_path / "input.h5")
    before = digest(src)
    (tmp_path / "sub").mkdir()
    os.symlink(src, tmp_path / "link.h5")
    os.link(src, tmp_path / "hard.h5")
    monkeypatch.chdir(tmp_path / "sub")
    for out in (src, Path("../input.h5"), tmp_path / "link.h5", tmp_path / "hard.h5"):
        with pytest.raises(OutputError) as info:
            _writer(out, protect=[src], overwrite=True)
        assert str(info.value) == f"{out}: refusing to write over the input file {src}"
    assert digest(src) == before


@pytest.mark.parametrize("appends, obj, expected", [
    ([(np.arange(5.0),), (np.arange(4.0, 8.0),)], "samples/time",
     "expected strictly increasing values, got 4.0 repeated at index 5"),
    ([(np.array([0.0, 2.0, 1.0]),)], "samples/time",
     "expected strictly increasing values, got 1.0 at index 2 after 2.0"),
    ([(np.array([0.0, np.nan]),)], "samples/time", "expected finite values, got nan at index 1"),
    ([(np.arange(3.0), np.array([0.0, np.inf, 1.0]))], "samples/azimuth",
     "expected finite values (azimuth has no dropped samples), got inf at index 1"),
    ([(np.arange(3.0), np.zeros(3), np.array([np.nan, -np.inf, 0.0]))], "samples/signal",
     "expected finite values or NaN (a dropped sample), got -inf at index 1"),
    ([(np.arange(3.0), np.zeros(2))], "samples/azimuth",
     "expected the length of time (3), got 2"),
    ([(np.zeros((3, 2)),)], "samples/time", "expected a one-dimensional array, got shape (3, 2)"),
], ids=["repeat-across-appends", "decrease", "time-nan", "azimuth-inf", "signal-inf", "lengths",
        "2d"])
def test_writer_validates_what_it_writes(tmp_path, appends, obj, expected):
    path = tmp_path / "run.h5"
    with pytest.raises(OutputError) as info:
        with _writer(path) as w:
            for args in appends:
                t = args[0]
                az = args[1] if len(args) > 1 else np.zeros(len(t))
                sig = args[2] if len(args) > 2 else np.zeros(len(t))
                w.append(t, az, sig, temp=np.zeros(len(t)))
    assert str(info.value) == f"{path}: {obj}: {expected}"
    assert os.listdir(tmp_path) == []


@pytest.mark.parametrize("kw, message", [
    ({"apparatus": {"kind": "ring"}}, f"apparatus.kind: expected one of {KINDS}, got 'ring'"),
    ({"signal_units": "Hz"}, "samples/signal.units: expected 'fringe' for kind 'michelson', "
                             "got 'Hz'"),
    ({"azimuth_units": "grad"}, "samples/azimuth.units: expected 'rad' or 'deg', got 'grad'"),
    ({"epoch_utc": "3 Feb 2027"}, "samples/time.epoch_utc: expected an ISO 8601 UTC time like "
                                  "'2027-02-03T00:00:00Z', got '3 Feb 2027'"),
    ({"aux_channels": {"time": "s"}}, "aux_channels: expected channel names other than time, "
                                      "azimuth, signal and weight, without '/' or '.', got "
                                      "'time'"),
    ({"compression": "bz2"}, "compression: expected None, 'lzf' or 'gzip', got 'bz2'"),
], ids=["kind", "signal-units", "azimuth-units", "epoch", "aux-name", "compression"])
def test_writer_rejects_bad_metadata(tmp_path, kw, message):
    path = tmp_path / "run.h5"
    with pytest.raises(ConfigError) as info:
        _writer(path, **kw)
    assert str(info.value) == f"{path}: {message}"


def test_writer_refuses_an_empty_run_and_bad_aux(tmp_path):
    path = tmp_path / "run.h5"
    with pytest.raises(OutputError, match="samples: expected at least one sample, none appended"):
        with _writer(path):
            pass
    with pytest.raises(OutputError, match=r"expected auxiliary channels \['temp'\], got \[\]"):
        with _writer(path) as w:
            w.append([0.0], [0.0], [0.0])
    assert os.listdir(tmp_path) == []


def test_writer_normalises_a_typed_epoch(tmp_path):
    path = tmp_path / "run.h5"
    with _writer(path, epoch_utc="2027-02-03 06:30:12.25") as w:
        w.append([0.0], [0.0], [0.0], temp=[1.0])
    with open_run(path) as run:
        assert run.epoch_utc == "2027-02-03T06:30:12.25Z"


# -- small helpers and registries ---------------------------------------------------------------
@pytest.mark.parametrize("text, fields", [
    ("2027-02-03T00:00:00Z", (2027, 2, 3, 0, 0, 0.0)),
    ("2027-02-03T06:30:12.125+00:00", (2027, 2, 3, 6, 30, 12.125)),
    ("2016-12-31T23:59:60.5Z", (2016, 12, 31, 23, 59, 60.5)),  # leap-second label
    ("2028-02-29T12:00:00Z", (2028, 2, 29, 12, 0, 0.0)),       # leap day
])
def test_parse_utc_iso_accepts(text, fields):
    assert parse_utc_iso(text) == fields


@pytest.mark.parametrize("text", ["2027-02-03T00:00:00", "2027-02-03 00:00:00Z",
                                  "2027-02-30T00:00:00Z", "2027-02-03T24:00:00Z",
                                  "2027-02-03T12:00:60Z", "2027-02-03T00:00:00+01:00", ""])
def test_parse_utc_iso_rejects(text):
    with pytest.raises(ValueError):
        parse_utc_iso(text)


def test_format_kinds_match_the_apparatus_models():
    import dataclasses

    from fringe.experiment.apparatus import APPARATUS_KINDS as MODELS
    from fringe.experiment.apparatus import apparatus_fields

    assert list(APPARATUS_KINDS) == list(MODELS)
    for kind, spec in APPARATUS_KINDS.items():
        assert spec.signal_units == MODELS[kind].units_allowed, kind
        # every attribute the format checks is a field of the model, and a format default is
        # the model's own default
        fields = {f.name: f for f in dataclasses.fields(MODELS[kind])}
        for name, _rule, _what in spec.required + spec.optional:
            assert name in apparatus_fields(MODELS[kind]), (kind, name)
        for name, _rule, default in spec.optional:
            assert fields[name].default == default, (kind, name)


def test_sha256_streams_the_bytes(tmp_path):
    path = tmp_path / "blob.bin"
    path.write_bytes(bytes(range(256)) * 41)
    assert sha256(path, block_bytes=7) == hashlib.sha256(path.read_bytes()).hexdigest()


def test_sha256_of_an_empty_file_and_a_stopped_hash(tmp_path):
    import threading

    empty = tmp_path / "empty.bin"
    empty.write_bytes(b"")
    assert sha256(empty) == hashlib.sha256(b"").hexdigest()
    stop = threading.Event()
    stop.set()                       # a fit that failed: the hash beside it ends at once
    # an empty file has no block to stop at: its hash is complete
    assert sha256(empty, stop=stop) == hashlib.sha256(b"").hexdigest()
    blob = tmp_path / "blob.bin"
    blob.write_bytes(bytes(range(256)) * 41)
    assert sha256(blob, block_bytes=7, stop=stop) is None
