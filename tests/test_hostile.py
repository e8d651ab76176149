"""Hostile input: property tests of the run-file reader, ``fringe inspect`` and the CSV import,
and writers killed mid-way (all files under tmp_path; docs/hostile-input.md).

The contract under test (fringe/errors.py, docs/run-format.md): every bad input gives a
:class:`~fringe.errors.FringeError` whose message is one line naming the file; never another
exception; inputs are never modified; outputs appear whole or not at all.

The fast tests run a fixed (derandomized) set of examples in CI; the ``slow`` variants draw
many more random examples: ``pytest -m slow tests/test_hostile.py``.
"""

from __future__ import annotations

import datetime
import hashlib
import json
import math
import os
import re
import signal
import subprocess
import sys
import time
import warnings
from dataclasses import dataclass
from pathlib import Path

import h5py
import numpy as np
import pytest
from click.testing import CliRunner
from hypothesis import HealthCheck, assume, example, given, settings
from hypothesis import strategies as st
from hypothesis.extra import numpy as hnp

from fringe.cli import main
from fringe.errors import FringeError, InputFileError, TimeScaleWarning
from fringe.io.csvimport import import_csv
from fringe.io.runfile import APPARATUS_KINDS, RunWriter, open_run, parse_utc_iso

N = 24  # samples in the base file
EPOCH = "2027-02-03T00:00:00Z"
CORE = ("time", "azimuth", "signal")


def _settings(n: int, *, fixed: bool):
    """Hypothesis settings: no example database (tests write only under tmp_path)."""
    return settings(max_examples=n, deadline=None, database=None, derandomize=fixed,
                    suppress_health_check=[HealthCheck.function_scoped_fixture,
                                           HealthCheck.too_slow, HealthCheck.data_too_large])


def digest(path) -> str:
    return hashlib.sha256(Path(path).read_bytes()).hexdigest()


def assert_one_line_naming(exc: BaseException, *paths) -> None:
    message = str(exc)
    assert "\n" not in message and "\r" not in message, message
    assert any(message.startswith(f"{p}: ") for p in paths), (message, paths)


# == 1. the run-file reader ==================================================================
# A valid base file (as in tests/test_runfile.py, written with h5py alone), then a list of
# perturbations. Each perturbation is a small dataclass, so a failing example prints readably.
def write_base_file(path: Path, *, n: int = N, fixed_strings: bool = False,
                    deg_per_sample: float = 10.0) -> Path:
    def s(text):  # a string attribute: variable-length (h5py default) or fixed-length UTF-8
        if not fixed_strings:
            return text
        raw = text.encode("utf-8")
        return np.array(raw, dtype=h5py.string_dtype("utf-8", max(1, len(raw))))

    t_s = np.arange(n, dtype=np.float64) * 0.5
    with h5py.File(path, "w") as f:
        f.attrs["fringe_format"] = s("run")
        f.attrs["fringe_format_version"] = 1
        site = f.create_group("site")
        site.attrs["latitude_deg"] = 44.0
        site.attrs["longitude_deg"] = -71.5
        site.attrs["name"] = s("invented site")
        app = f.create_group("apparatus")
        app.attrs["kind"] = s("cavity-pair")
        app.attrs["carrier_hz"] = 2.8e14
        smp = f.create_group("samples")
        time_ds = smp.create_dataset("time", data=t_s, maxshape=(None,), chunks=(8,))
        time_ds.attrs["units"] = s("s")
        time_ds.attrs["epoch_utc"] = s(EPOCH)
        smp.create_dataset("azimuth", data=t_s * 2 * deg_per_sample).attrs["units"] = s("deg")
        sig = np.sin(np.radians(t_s * 4 * deg_per_sample))
        sig[3] = np.nan
        smp.create_dataset("signal", data=sig).attrs["units"] = s("Hz")
        smp.create_dataset("tilt", data=np.arange(n, dtype=np.int32)).attrs["units"] = s("urad")
        truth = f.create_group("truth")
        truth.attrs["kappa_e_xy"] = 1e-17
        truth.create_dataset("noise_psd", data=np.ones(3))
    return path


def base_values(name: str, n: int) -> np.ndarray:
    t_s = np.arange(n, dtype=np.float64) * 0.5
    return {"time": t_s, "azimuth": t_s * 20.0, "signal": np.cos(t_s),
            "tilt": np.arange(n, dtype=np.float64)}.get(name, t_s)


@dataclass(frozen=True)
class SetAttr:
    obj: str
    name: str
    value: object

    def apply(self, f):
        (f if self.obj == "/" else f[self.obj]).attrs[self.name] = self.value


@dataclass(frozen=True)
class DelAttr:
    obj: str
    name: str

    def apply(self, f):
        del (f if self.obj == "/" else f[self.obj]).attrs[self.name]


@dataclass(frozen=True)
class Delete:
    path: str

    def apply(self, f):
        del f[self.path]


@dataclass(frozen=True)
class AddGroup:
    path: str

    def apply(self, f):
        f.create_group(self.path)


@dataclass(frozen=True)
class AddDataset:
    path: str
    data: object
    units: object = None

    def apply(self, f):
        ds = f.create_dataset(self.path, data=self.data)
        if self.units is not None:
            ds.attrs["units"] = self.units


@dataclass(frozen=True)
class Link:
    path: str
    target: str
    external: bool = False

    def apply(self, f):
        if self.path in f:
            del f[self.path]
        f[self.path] = (h5py.ExternalLink("elsewhere.h5", self.target) if self.external
                        else h5py.SoftLink(self.target))


@dataclass(frozen=True)
class Replace:
    """Replace ``samples/<name>`` (keeping its attributes unless ``keep_attrs`` is False)."""

    name: str
    dtype: str = "f8"
    shape: str = "same"
    edits: tuple = ()
    order: str = "keep"
    storage: str = "contiguous"
    keep_attrs: bool = True

    def data(self, n: int):
        if self.shape == "null":
            return h5py.Empty("f8")
        length = {"same": n, "short": n - 1, "long": n + 1, "empty": 0, "one": 1}.get(
            self.shape, n)
        x = base_values(self.name, n)[:length].copy() if length <= n else \
            np.r_[base_values(self.name, n), n * 0.5]
        for i, v in self.edits:
            if x.size:
                k = i % x.size
                x[k] = x[k - 1] if v == "repeat" else v
        if self.order == "reverse":
            x = x[::-1].copy()
        elif self.order == "swap" and x.size > 2:
            x[[1, 2]] = x[[2, 1]]
        if self.shape == "scalar":
            x = np.float64(x[0] if x.size else 0.0)
        elif self.shape == "2d":
            x = np.stack([x, x], axis=1)
        elif self.shape == "row":
            x = x[None, :]
        with warnings.catch_warnings(), np.errstate(all="ignore"):
            warnings.simplefilter("ignore")  # NaN cast to int etc.: the file gets what it gets
            if self.dtype == "vlen-str":
                return np.array([repr(v) for v in np.ravel(x)], dtype=h5py.string_dtype()) \
                    .reshape(np.shape(x))
            if self.dtype == "compound":
                out = np.zeros(np.shape(x), dtype=[("a", "f8"), ("b", "i4")])
                out["a"] = x
                return out
            return np.asarray(x).astype(self.dtype)

    def apply(self, f):
        path = f"samples/{self.name}"
        old = dict(f[path].attrs) if self.keep_attrs and path in f else {}
        t = f.get("samples/time")
        n = t.shape[0] if isinstance(t, h5py.Dataset) and t.shape else N
        n = n if n < 10**6 else N
        if path in f:
            del f[path]
        data = self.data(n)
        kw = {}
        if self.storage != "contiguous" and not isinstance(data, h5py.Empty) and \
                np.ndim(data) >= 1 and np.size(data) > 0:
            kw = {"chunks": True, "maxshape": (None,) * np.ndim(data)}
            if self.storage in ("lzf", "gzip"):
                kw["compression"] = self.storage
        ds = f.create_dataset(path, data=data, **kw)
        for k, v in old.items():
            ds.attrs[k] = v


@dataclass(frozen=True)
class Edit:
    """Overwrite values of ``samples/<name>`` in place (same type and shape), then reorder."""

    name: str
    edits: tuple = ()
    order: str = "keep"

    def apply(self, f):
        ds = f[f"samples/{self.name}"]
        if not isinstance(ds, h5py.Dataset) or ds.ndim != 1 or not 0 < ds.size < 10**6:
            return
        x = ds[()]
        with warnings.catch_warnings(), np.errstate(all="ignore"):
            warnings.simplefilter("ignore")  # a float into an integer dataset: whatever it gets
            for i, v in self.edits:
                k = i % x.size
                x[k] = x[k - 1] if v == "repeat" else v
        if self.order == "reverse":
            x = x[::-1]
        elif self.order == "swap" and x.size > 2:
            x[[1, 2]] = x[[2, 1]]
        ds[...] = x


@dataclass(frozen=True)
class Sparse:
    """``samples/<name>`` of 2**40 samples never written: every value is the fill value."""

    name: str
    fill: float = 0.0

    def apply(self, f):
        path = f"samples/{self.name}"
        old = dict(f[path].attrs) if path in f else {}
        if path in f:
            del f[path]
        ds = f.create_dataset(path, shape=(2**40,), dtype="f8", chunks=(4096,),
                              fillvalue=self.fill)
        for k, v in old.items():
            ds.attrs[k] = v


@dataclass(frozen=True)
class SwitchKind:
    """A complete apparatus of another kind, with signal units that fit it."""

    kind: str

    def apply(self, f):
        app = f["apparatus"]
        for k in list(app.attrs):
            del app.attrs[k]
        app.attrs["kind"] = self.kind
        values = {"cavity-pair": {"carrier_hz": 1.1e10}, "cavity-vs-reference":
                  {"carrier_hz": 1.9e14}, "michelson": {"arm_length_m": 11.0,
                                                       "wavelength_m": 5.5e-7, "passes": 2.0},
                  "clock": {"sensitivity_hz": -3.5}}[self.kind]
        for k, v in values.items():
            app.attrs[k] = v
        f["samples/signal"].attrs["units"] = APPARATUS_KINDS[self.kind].signal_units[-1]


SPECIAL = (math.nan, math.inf, -math.inf, 1e308, -1e308, 5e-324, -0.0, 0.0, 2.0**53 + 1,
           -1.0, 1e-300, 91.0, -91.0, 361.0)
STRINGS = ("run", "s", "rad", "deg", "Hz", "1", "fringe", "ms", "", " ", "ｓ", "Hz\x00x",
           "cavity-pair", "cavity-vs-reference", "michelson", "clock", "44.0", "nan",
           EPOCH, "2027-02-03T00:00:00+00:00", "2016-12-31T23:59:60.5Z", "2027-02-03 00:00:00",
           "2027-02-03T00:00:00", "2027-02-29T00:00:00Z", "0001-01-01T00:00:00Z",
           "9999-12-31T23:59:59.999999999Z", "2027-02-03T23:59:60Z", "\u00e9t\u00e9 \u6e2c\u5b9a")
texts = st.text(st.characters(blacklist_categories=("Cs",)), max_size=16)
strings = st.sampled_from(STRINGS) | texts


def fixed_utf8(text: str):
    raw = text.encode("utf-8")
    return np.array(raw, dtype=h5py.string_dtype("utf-8", max(1, len(raw))))


small_shapes = hnp.array_shapes(min_dims=1, max_dims=2, min_side=0, max_side=3)
attr_values = st.one_of(
    st.integers(-2**63, 2**63 - 1),
    st.integers(2**63, 2**64 - 1).map(np.uint64),
    st.floats(allow_nan=True, allow_infinity=True),
    st.sampled_from(SPECIAL),
    st.booleans(),
    strings,                                   # variable-length string
    strings.map(fixed_utf8),                   # fixed-length UTF-8 string
    st.binary(max_size=8).map(np.bytes_),      # fixed-length bytes, any bytes (not UTF-8)
    st.complex_numbers(allow_nan=True),
    st.sampled_from(["i1", "u2", "f2", "f4", "g", "c8"]).flatmap(
        lambda dt: hnp.from_dtype(np.dtype(dt)).map(np.dtype(dt).type)),
    hnp.arrays(st.sampled_from(["f8", "i8", "f2", "c16", "S3", "?"]), small_shapes),
    st.lists(strings, min_size=1, max_size=3).map(
        lambda v: np.array(v, dtype=h5py.string_dtype())),
    st.lists(st.binary(min_size=1, max_size=4), min_size=1, max_size=3).map(np.array),
    st.sampled_from([h5py.Empty("f8"), h5py.Empty("i4"), h5py.Empty(h5py.string_dtype())]),
)
ATTR_NAMES = {
    "/": ("fringe_format", "fringe_format_version", "written_by"),
    "site": ("latitude_deg", "longitude_deg", "height_m", "name"),
    "apparatus": ("kind", "carrier_hz", "path_separation_deg", "arm_length_m", "wavelength_m",
                  "passes", "sensitivity_hz", "reference"),
    "samples/time": ("units", "epoch_utc"), "samples/azimuth": ("units",),
    "samples/signal": ("units",), "samples/tilt": ("units",), "samples": ("units",),
    "truth": ("theory",),
}
OBJECTS = tuple(ATTR_NAMES)
names = st.text(st.characters(blacklist_categories=("Cs",), blacklist_characters="/."),
                min_size=1, max_size=10)


@st.composite
def set_attrs(draw):
    obj = draw(st.sampled_from(OBJECTS))
    name = draw(st.sampled_from(ATTR_NAMES[obj]) | names)
    return SetAttr(obj, name, draw(attr_values))


value_edits = st.lists(st.tuples(st.integers(-N, N), st.sampled_from(SPECIAL + ("repeat",)) |
                                 st.floats()), max_size=3).map(tuple)
orders = st.sampled_from(("keep", "keep", "reverse", "swap"))
replacements = st.builds(
    Replace,
    name=st.sampled_from(("time", "time", "azimuth", "signal", "tilt")),
    dtype=st.sampled_from(("f8", "f8", "f8", "f4", "f2", "g", "i1", "i8", "u8", "c16", "?",
                           "S6", "vlen-str", "compound")),
    shape=st.sampled_from(("same", "same", "same", "short", "long", "empty", "one", "scalar",
                           "2d", "row", "null")),
    edits=value_edits,
    order=orders,
    storage=st.sampled_from(("contiguous", "chunked", "lzf", "gzip")),
    keep_attrs=st.booleans() | st.just(True),
)
PATHS = ("site", "apparatus", "samples", "truth", "samples/time", "samples/azimuth",
         "samples/signal", "samples/tilt", "truth/noise_psd")
perturbations = st.one_of(
    set_attrs(),
    set_attrs(),
    st.sampled_from(OBJECTS).flatmap(
        lambda obj: st.builds(DelAttr, st.just(obj), st.sampled_from(ATTR_NAMES[obj]))),
    replacements,
    st.builds(Edit, st.sampled_from(("time", "time", "azimuth", "signal")), value_edits,
              orders),
    replacements,
    st.builds(Delete, st.sampled_from(PATHS)),
    st.builds(AddGroup, st.sampled_from(("", "samples/", "truth/")).flatmap(
        lambda p: names.map(lambda n: p + n))),
    st.builds(AddDataset, st.sampled_from(("", "samples/", "truth/", "samples/")).flatmap(
        lambda p: names.map(lambda n: p + n)),
        st.sampled_from([np.zeros(N), np.arange(N), np.zeros(N, "f2"), np.zeros((N, 2)),
                         np.zeros(N - 1), np.array([b"\xff\xfe"], dtype=h5py.string_dtype()),
                         np.array(["\u00e9"] * N, dtype=h5py.string_dtype()), 1.5,
                         h5py.Empty("f8")]),
        st.none() | strings | attr_values),
    st.builds(Link, st.sampled_from(PATHS + ("samples/extra", "extra")),
              st.sampled_from(("/samples/time", "/samples/azimuth", "/samples", "/", "/nowhere",
                               "/truth/noise_psd")), st.booleans()),
    st.builds(SwitchKind, st.sampled_from(tuple(APPARATUS_KINDS))),
    st.builds(Sparse, st.sampled_from(CORE + ("tilt",)), st.sampled_from(SPECIAL)),
)
FILE_NAMES = ("run.h5", "run file é.h5", "実験-1.h5", "r")
run_cases = st.fixed_dictionaries({
    "ops": st.lists(perturbations, max_size=4),
    "fixed_strings": st.booleans(),
    "chunk": st.integers(1, 40),
    "file_name": st.sampled_from(FILE_NAMES),
    "damage": st.sampled_from((None,) * 6 + ("empty", "text", "truncate")),
})


def build(directory: Path, case: dict, **base) -> tuple[Path, list]:
    """Write the perturbed file; return it and the perturbations HDF5 refused to store."""
    path = write_base_file(directory / case["file_name"], fixed_strings=case["fixed_strings"],
                           **base)
    refused = []
    with h5py.File(path, "a") as f:
        for op in case["ops"]:
            try:
                op.apply(f)
            except (TypeError, ValueError, KeyError, OSError, RuntimeError, OverflowError) as exc:
                refused.append((op, exc))  # not storable in HDF5: this file simply lacks it
    damage = case.get("damage")
    if damage == "empty":
        path.write_bytes(b"")
    elif damage == "text":
        path.write_text("time,azimuth,signal\n0,0,0\n", encoding="utf-8")
    elif damage == "truncate":
        path.write_bytes(path.read_bytes()[: path.stat().st_size // 2])
    return path, refused


def read_everything(path: Path, chunk: int, check_values: bool) -> dict:
    """Open, read every channel in chunks and every extra group; return what was read."""
    with open_run(path, check_values=check_values, chunk_samples=chunk) as run:
        meta = run.to_dict()
        json.dumps(meta)  # plain JSON types (fringe inspect writes them)
        core = list(run.iter_chunks(chunk, CORE, copy=True))
        aux = list(run.iter_chunks(chunk, tuple(run.aux_channels), copy=True)) \
            if run.aux_channels else []
        groups = {g: (run.read_group_attrs(g), run.read_group_datasets(g))
                  for g in run.extra_groups}
        return {"run": run, "meta": meta, "core": core, "aux": aux, "groups": groups}


def assert_obeys_spec(got: dict) -> None:
    run, core = got["run"], got["core"]
    data = {k: np.concatenate([c[k] for c in core]) for k in CORE}
    n = run.n_samples
    assert n >= 1 and all(v.shape == (n,) and v.dtype == np.float64 for v in data.values())
    assert all({c[k].size for k in CORE} == {c["time"].size} for c in core)
    t_s = data["time"]
    assert np.all(np.isfinite(t_s)) and np.all(np.diff(t_s) > 0)
    assert (t_s[0], t_s[-1]) == (run.time_first_s, run.time_last_s)
    assert np.all(np.isfinite(data["azimuth"])) and not np.any(np.isinf(data["signal"]))
    for name in run.aux_channels:
        assert np.concatenate([c[name] for c in got["aux"]]).shape == (n,)
        assert isinstance(run.aux_channels[name], str) and run.aux_channels[name].strip()
    kind = run.apparatus["kind"]
    assert kind in APPARATUS_KINDS and run.signal_units in APPARATUS_KINDS[kind].signal_units
    assert isinstance(run.signal_units, str) and run.azimuth_units in ("rad", "deg")
    assert isinstance(run.azimuth_units, str) and isinstance(run.epoch_utc, str)
    parse_utc_iso(run.epoch_utc)
    assert -90 <= run.site.latitude_deg <= 90 and -360 <= run.site.longitude_deg <= 360


def outcome(path: Path, chunk: int, check_values: bool):
    """("ok", data) or ("error", message); any other exception propagates (a bug)."""
    try:
        return "ok", read_everything(path, chunk, check_values)
    except InputFileError as exc:
        assert_one_line_naming(exc, path)
        return "error", str(exc)


def check_reader(directory: Path, case: dict) -> None:
    path, _ = build(directory, case)
    before = digest(path)
    eager = outcome(path, case["chunk"], True)
    lazy = outcome(path, case["chunk"], False)  # same checks, run chunk by chunk while reading
    if eager[0] == "ok":
        assert_obeys_spec(eager[1])
        assert lazy[0] == "ok", lazy
        assert_obeys_spec(lazy[1])
    else:
        assert lazy == eager
    assert digest(path) == before  # the reader never modifies its input
    path.unlink()


# explicit examples: what the property tests found in fringe/io/runfile.py (each raised
# ValueError, TypeError or UnicodeDecodeError, or, for a one-element array as units, was
# accepted with an array for signal_units), all fixed there
BAD_UTF8_ARRAY = np.array([b"\xff"])
FOUND = [
    [SetAttr("/", "fringe_format", np.array(["run", "run"], dtype=h5py.string_dtype()))],
    [SetAttr("/", "fringe_format", BAD_UTF8_ARRAY)],
    [SetAttr("/", "fringe_format_version", np.array([1, 1]))],
    [SetAttr("samples/time", "units", np.array([b"s", b"s"]))],
    [SetAttr("samples/signal", "units", np.array([b"Hz"]))],
    [SetAttr("site", "name", BAD_UTF8_ARRAY)],
    [SetAttr("apparatus", "reference", BAD_UTF8_ARRAY)],
    [SetAttr("truth", "theory", BAD_UTF8_ARRAY)],
    [Replace("time", shape="null")],
    [Replace("signal", shape="null")],
    [AddDataset("truth/text", np.array([b"\xff\xfe"], dtype=h5py.string_dtype()))],
]


def _with_found(test):
    for ops in FOUND:
        test = example({"ops": ops, "fixed_strings": False, "chunk": 5,
                        "file_name": "run.h5"})(test)
    return test


@_with_found
@given(case=run_cases)
@_settings(400, fixed=True)
def test_reader_property(tmp_path, case):
    check_reader(tmp_path, case)


@pytest.mark.slow
@given(case=run_cases)
@_settings(5000, fixed=False)
def test_reader_property_long(tmp_path, case):
    check_reader(tmp_path, case)


# == 2. the same files through `fringe inspect` ===============================================
def inspect_grid_cells(path: Path) -> float:
    """Length of the regular time grid ``fringe inspect`` lays a valid record on (0 if the file
    is refused): span / median sample interval."""
    try:
        with open_run(path) as run:
            t_s = run.read_all(("time",))["time"]
    except InputFileError:
        return 0.0
    with np.errstate(over="ignore", invalid="ignore"):
        return float((t_s[-1] - t_s[0]) / np.median(np.diff(t_s))) if t_s.size > 1 else 0.0


def check_inspect(directory: Path, case: dict) -> None:
    path, _ = build(directory, case, n=160, deg_per_sample=9.0)  # 10 turns of 40 samples
    # valid records spanning more than 1e7 median intervals crash inspect (known bug, see
    # test_inspect_known_bug_*): left out here so that this property keeps guarding the rest
    assume(inspect_grid_cells(path) < 1e7)
    before = digest(path)
    with warnings.catch_warnings():
        warnings.simplefilter("default")  # as for a user: warnings are printed, not raised
        res = CliRunner().invoke(main, ["inspect", str(path)])
    out = res.stdout + res.stderr
    assert "Traceback" not in out
    assert res.exit_code in (0, 2), (res.exit_code, repr(res.exception), out[-2000:])
    errors = [line for line in res.stderr.splitlines() if not line.startswith("warning: ")]
    if res.exit_code == 0:
        assert errors == [] and res.stdout.startswith(f"run file {path}\n")
    else:
        assert len(errors) == 1 and errors[0].startswith("error: "), res.stderr
    assert digest(path) == before
    path.unlink()


@given(case=run_cases)
@_settings(100, fixed=True)
def test_inspect_cli_property(tmp_path, case):
    check_inspect(tmp_path, case)


def test_inspect_in_a_real_process_prints_one_line(tmp_path):
    """The same contract outside CliRunner: a file that once crashed the reader (null
    dataspace) gives exit 2 and exactly one stderr line, no traceback."""
    path, _ = build(tmp_path, {"ops": [Replace("time", shape="null")], "fixed_strings": False,
                               "file_name": "run file é.h5"})
    res = subprocess.run([sys.executable, "-m", "fringe.cli", "inspect", str(path)],
                         capture_output=True, text=True, timeout=120)
    assert res.returncode == 2 and res.stdout == ""
    assert res.stderr == f"error: {path}: samples/time: expected a one-dimensional dataset, " \
                         "got an empty (null) dataspace\n"


@pytest.mark.slow
@given(case=run_cases)
@_settings(1000, fixed=False)
def test_inspect_cli_property_long(tmp_path, case):
    check_inspect(tmp_path, case)


@pytest.mark.parametrize("t_last_s", [1e308, 5e14], ids=["overflow", "memory"])
def test_inspect_huge_span(tmp_path, t_last_s):
    """A valid record whose last sample comes very late (a long gap): inspect must answer with
    its summary or a one-line error, not crash while allocating the grid."""
    path, _ = build(tmp_path, {"ops": [Edit("time", ((-1, t_last_s),))], "fixed_strings": False,
                               "file_name": "run.h5"}, n=160, deg_per_sample=9.0)
    with open_run(path):
        pass  # the file itself is valid
    with warnings.catch_warnings():
        warnings.simplefilter("default")
        res = CliRunner().invoke(main, ["inspect", str(path)])
    assert res.exit_code in (0, 2), repr(res.exception)


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
    lines: list[str | None] = []
    for op in case["csv_ops"]:
        if isinstance(op, Cell) and rows:
            row = rows[op.row % len(rows)]
            row[op.col % len(row)] = op.text
        elif isinstance(op, Header):
            header[op.col % len(header)] = op.text
        elif isinstance(op, RowEdit) and rows:
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
    d = case["delimiter"]
    newline = "\r\n" if case["crlf"] else "\n"
    lines = ["# generated test table (invented)", d.join(header)] + [d.join(r) for r in rows]
    data = (newline.join(lines) + newline).encode("utf-8", "surrogatepass")
    for op in case["csv_ops"]:
        if isinstance(op, Bytes):
            k = int(op.where * len(data))
            data = data[:k] + op.what + data[k:] if op.what else data[:k]
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
    raw = None
    for op in case["toml_ops"]:
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
    text = "".join(f"{k} = {toml_text(v)}\n" for k, v in toml.get("", {}).items())
    for section, table in toml.items():
        if section:
            text += f"[{section}]\n" + "".join(f'"{k}" = {toml_text(v)}\n'
                                               for k, v in table.items())
    toml_bytes = raw if raw is not None else text.encode("utf-8", "surrogatepass")
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


# == 4. writers killed mid-way ===============================================================
# A child process writes a run file with RunWriter, append by append, reporting each append on
# stdout; in "wait" mode it then blocks on stdin (the file open and half written) until told to
# go on. The parent kills it after a few appends.
WRITER_CHILD = r"""
import sys
import numpy as np
from fringe.io.runfile import RunWriter
path, overwrite, mode = sys.argv[1], sys.argv[2] == "1", sys.argv[3]
m = 8192
with RunWriter(path, site={"latitude_deg": 10.0, "longitude_deg": 20.0},
               epoch_utc="2027-02-03T00:00:00Z", apparatus={"kind": "clock",
               "sensitivity_hz": 1.0}, signal_units="Hz", overwrite=overwrite,
               chunk_samples=m) as w:
    for k in range(400):  # at most 79 MB if never killed
        t_s = np.arange(k * m, (k + 1) * m, dtype=np.float64)
        w.append(t_s, np.zeros(m), np.zeros(m))
        print(k, flush=True)
        if mode == "wait":
            sys.stdin.readline()
"""
TEMP_NAME = re.compile(r"\.run\.h5\.[0-9a-f]{12}\.tmp")  # RunWriter's hidden temporary file


def write_and_kill(path: Path, sig: int, *, overwrite: bool, mode: str, appends: int = 3):
    proc = subprocess.Popen([sys.executable, "-c", WRITER_CHILD, str(path), str(int(overwrite)),
                             mode], stdin=subprocess.PIPE, stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True)
    try:
        for i in range(appends):
            assert proc.stdout.readline().strip() == str(i), proc.stderr.read()
            if mode == "wait" and i < appends - 1:
                proc.stdin.write("\n")
                proc.stdin.flush()
        assert proc.poll() is None  # still writing
        proc.send_signal(sig)
        proc.wait(timeout=60)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()
        for stream in (proc.stdin, proc.stdout, proc.stderr):
            stream.close()
    assert proc.returncode == -sig
    return proc


def small_run(path: Path) -> Path:
    with RunWriter(path, site={"latitude_deg": 10.0, "longitude_deg": 20.0}, epoch_utc=EPOCH,
                   apparatus={"kind": "clock", "sensitivity_hz": 1.0}, signal_units="Hz") as w:
        w.append(np.arange(50.0), np.zeros(50), np.ones(50))
    return path


@pytest.mark.parametrize("sig, mode", [(signal.SIGKILL, "wait"), (signal.SIGKILL, "run"),
                                       (signal.SIGTERM, "wait"), (signal.SIGINT, "wait")],
                         ids=["kill-blocked", "kill-writing", "term", "interrupt"])
@pytest.mark.parametrize("existing", [False, True], ids=["new", "overwrite"])
def test_killed_writer_leaves_output_untouched(tmp_path, sig, mode, existing):
    path = tmp_path / "run.h5"
    before = digest(small_run(path)) if existing else None
    write_and_kill(path, sig, overwrite=existing, mode=mode)
    leftovers = sorted(p for p in os.listdir(tmp_path) if p != "run.h5")
    if existing:
        assert digest(path) == before  # the older output, byte for byte
        with open_run(path) as run:
            assert run.n_samples == 50
    else:
        assert not path.exists()  # no output at all, let alone a partial one
    if sig == signal.SIGINT:
        assert leftovers == []  # KeyboardInterrupt: the writer removes its temporary file
    else:  # SIGKILL cannot be caught, SIGTERM is not: the hidden temporary file stays
        assert len(leftovers) == 1 and TEMP_NAME.fullmatch(leftovers[0]), leftovers


def test_stale_temporary_files_accumulate_and_are_refused(tmp_path):
    """Each killed write leaves its own hidden temporary file (documented, not cleaned up);
    opened by mistake, one is refused with one line (in a subprocess: a hang would show)."""
    path = tmp_path / "run.h5"
    for _ in range(2):
        write_and_kill(path, signal.SIGKILL, overwrite=False, mode="wait", appends=2)
    leftovers = sorted(os.listdir(tmp_path))
    assert len(leftovers) == 2 and all(TEMP_NAME.fullmatch(p) for p in leftovers)
    probe = ("import sys\nfrom fringe.errors import InputFileError\n"
             "from fringe.io.runfile import open_run\n"
             "try:\n    open_run(sys.argv[1]).close()\n    print('ok')\n"
             "except InputFileError as exc:\n    print(exc)\n")
    stale = tmp_path / leftovers[0]
    res = subprocess.run([sys.executable, "-c", probe, str(stale)], capture_output=True,
                         text=True, timeout=120)
    assert res.returncode == 0, res.stderr
    assert res.stdout.startswith(f"{stale}: ") and res.stdout.count("\n") == 1, res.stdout


def cli(*args: str, **kw) -> subprocess.Popen:
    return subprocess.Popen([sys.executable, "-m", "fringe.cli", *args],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, **kw)


def wait_for(condition, proc: subprocess.Popen, timeout_s: float = 120.0) -> None:
    """Poll until ``condition()``; fail if the process ends first."""
    end = time.monotonic() + timeout_s
    while not condition():
        if proc.poll() is not None:
            pytest.fail(f"the command ended (exit {proc.returncode}) before the kill: "
                        f"{proc.stderr.read()[-2000:]}")
        assert time.monotonic() < end, "timed out waiting"
        time.sleep(0.01)


def long_scenario(tmp_path: Path, days: float) -> Path:
    text = (Path(__file__).resolve().parents[1] / "examples" / "cavity_pair.toml").read_text()
    assert "duration_days = 2.0" in text
    path = tmp_path / "long.toml"
    path.write_text(text.replace("duration_days = 2.0", f"duration_days = {days}"))
    return path


@pytest.mark.parametrize("sig", [signal.SIGINT, signal.SIGKILL], ids=["interrupt", "kill"])
def test_simulate_interrupted(tmp_path, sig):
    scenario = long_scenario(tmp_path, 60.0)  # 5.2 million samples: tens of seconds of work
    out = tmp_path / "out" / "sim.h5"
    out.parent.mkdir()
    proc = cli("simulate", str(scenario), "--out", str(out), "--seed", "3")
    try:
        wait_for(lambda: any(p.startswith(".sim.h5.") for p in os.listdir(out.parent)), proc)
        proc.send_signal(sig)
        _, err = proc.communicate(timeout=60)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.communicate()
    assert not out.exists()
    leftovers = os.listdir(out.parent)
    if sig == signal.SIGINT:  # the CLI's guard: one line, exit 130, the temporary file removed
        assert proc.returncode == 130, err
        assert err.strip() == "error: interrupted; no partial output was kept"
        assert leftovers == []
    else:
        assert proc.returncode == -signal.SIGKILL
        assert len(leftovers) == 1 and re.fullmatch(r"\.sim\.h5\.[0-9a-f]{12}\.tmp",
                                                    leftovers[0])


def fit_input(path: Path, n: int = 2_000_000) -> Path:
    """A rotating cavity pair at 1 Hz (45 s turns), white noise only: a fit takes seconds."""
    rng = np.random.default_rng(11)
    with RunWriter(path, site={"latitude_deg": 47.6, "longitude_deg": 11.4}, epoch_utc=EPOCH,
                   apparatus={"kind": "cavity-pair", "carrier_hz": 2.82e14},
                   signal_units="Hz") as w:
        for start in range(0, n, 1 << 18):
            t_s = np.arange(start, min(n, start + (1 << 18)), dtype=np.float64)
            w.append(t_s, 2 * np.pi * t_s / 45.0, rng.normal(0.0, 0.1, t_s.size))
    return path


def test_fit_killed_mid_way_writes_nothing(tmp_path):
    if not os.path.isdir("/proc/self/fd"):
        pytest.skip("needs /proc to see when the fit has the run file open")
    run_path = fit_input(tmp_path / "run.h5")
    before = digest(run_path)
    out_dir = tmp_path / "out"
    out_dir.mkdir()
    proc = cli("fit", str(run_path), "--out", str(out_dir / "result.json"))

    real = os.path.realpath(run_path)

    def reading():  # the fit has the run file open: its outputs come only after the reading
        try:
            return any(os.path.realpath(f"/proc/{proc.pid}/fd/{fd}") == real
                       for fd in os.listdir(f"/proc/{proc.pid}/fd"))
        except OSError:
            return False

    try:
        wait_for(reading, proc)
        time.sleep(0.2)  # into the demodulation (the whole fit takes seconds)
        assert proc.poll() is None, "the fit ended before the kill"
        proc.kill()
        proc.communicate(timeout=60)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.communicate()
    assert proc.returncode == -signal.SIGKILL
    assert os.listdir(out_dir) == []  # no result.json, no result.turns.h5, no temporary file
    assert digest(run_path) == before
