"""Hostile input: property tests of the run-file reader and ``fringe inspect`` (all files under
tmp_path; docs/hostile-input.md). The CSV import is in tests/hostile/test_hostile_csv.py, killed
writers and commands in tests/hostile/test_hostile_interrupt.py.

The contract under test (fringe/errors.py, docs/run-format.md): every bad input gives a
:class:`~fringe.errors.FringeError` whose message is one line naming the file; never another
exception; inputs are never modified; outputs appear whole or not at all.

The fast tests run a fixed (derandomized) set of examples in CI; the ``slow`` variants draw
many more random examples: ``pytest -m slow tests/hostile/test_hostile*.py``.
"""

from __future__ import annotations

import json
import math
import subprocess
import sys
import warnings
from dataclasses import dataclass
from pathlib import Path

import h5py
import numpy as np
import pytest
from click.testing import CliRunner
from hypothesis import assume, example, given
from hypothesis import strategies as st
from hypothesis.extra import numpy as hnp

from fringe.cli import main
from fringe.errors import InputFileError
from fringe.io.runformat import APPARATUS_KINDS, parse_utc_iso
from fringe.io.runreader import open_run
from tests.helpers.hostile import CORE, EPOCH, N, _settings, assert_one_line_naming, digest


# == 1. the run-file reader ==================================================================
# A valid base file (as in tests/io/test_runfile.py, written with h5py alone), then a list of
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
    assert np.all(np.abs(data["azimuth"]) <= 2.0 ** 32)   # float64 resolves ~1e-6 rad there
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


# explicit examples: what the property tests found in fringe/io/runreader.py (each raised
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
