"""Run files (HDF5, format version 1): the validating reader and the atomic writer.

Use :func:`open_run` to read a run file: it checks the whole layout, the metadata and (in a
streamed, chunk-by-chunk pass) the values of ``samples/time``, ``samples/azimuth`` and
``samples/signal``, then hands out validated metadata and chunked arrays
(:meth:`RunFile.iter_chunks`, azimuth always in radians). Use :class:`RunWriter` to write one
chunk by chunk; the output appears only when the writer closes without error. :func:`sha256`
fingerprints any file. The format itself is specified in ``docs/run-format.md``.

Every violation of the format raises :class:`~fringe.errors.InputFileError` with one line
``PATH: OBJECT: EXPECTED``, where OBJECT is a dataset path (``samples/time``), a group attribute
(``site.latitude_deg``) or a dataset attribute (``samples/time.units``).
"""

from __future__ import annotations

import contextlib
import datetime
import hashlib
import logging
import math
import os
import re
import secrets
from collections.abc import Iterator, Mapping, Sequence
from dataclasses import dataclass

import h5py
import numpy as np
from numpy.typing import NDArray

from .. import __version__
from ..conventions import DEFAULT_PATH_SEPARATION_DEG
from ..errors import ConfigError, InputFileError, OutputError
from ..site import Site

__all__ = ["APPARATUS_KINDS", "FORMAT_VERSION", "ApparatusKind", "RunFile", "RunWriter",
           "open_run", "parse_utc_iso", "sha256"]

logger = logging.getLogger(__name__)

# -- the format, version 1 -------------------------------------------------------------------
FORMAT_NAME = "run"
FORMAT_VERSION = 1
TIME_UNITS = ("s",)
AZIMUTH_UNITS = ("rad", "deg")
SIGNAL_UNITS = ("Hz", "1", "fringe")
CORE_CHANNELS = ("time", "azimuth", "signal")
RESERVED_GROUPS = ("site", "apparatus", "samples")
#: 2**17 float64 samples = 1 MiB per channel (practice: 1 MiB chunks read at full speed).
DEFAULT_CHUNK_SAMPLES = 2**17

_UTC_RE = re.compile(r"(\d{4})-(\d{2})-(\d{2})T(\d{2}):(\d{2}):(\d{2}(?:\.\d+)?)(Z|\+00:00)")
#: Also accepted where a person types the time (writer arguments, CSV cells): a space for T and
#: no suffix or " UTC" (the time is then taken as UTC), as in :class:`fringe.frames.Epoch`.
_UTC_LOOSE_RE = re.compile(
    r"(\d{4})-(\d{2})-(\d{2})[T ](\d{2}):(\d{2}):(\d{2}(?:\.\d+)?)(Z|\+00:00| ?UTC)?")
_EPOCH_HINT = "an ISO 8601 UTC time like '2027-02-03T00:00:00Z'"


class Invalid(Exception):
    """A value broke a format rule; ``expected`` is the text after ``OBJECT:``."""

    def __init__(self, expected: str, obj: str = ""):
        super().__init__(expected)
        self.expected = expected
        self.obj = obj


def plain(value):
    """An HDF5/TOML attribute value as a plain Python value (arrays stay numpy arrays)."""
    if isinstance(value, np.ndarray) and value.ndim == 0:
        value = value[()]
    if isinstance(value, np.ndarray) and value.dtype.kind == "S":  # fixed-length strings
        try:
            return np.char.decode(value, "utf-8")
        except UnicodeDecodeError:  # not UTF-8: left as bytes (refused where text is needed)
            return value
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, bytes):
        try:
            value = value.decode("utf-8")
        except UnicodeDecodeError:
            pass
    return value


def show(value) -> str:
    """Short text for a value in an error message."""
    value = plain(value)
    if isinstance(value, np.ndarray):
        return f"an array of shape {value.shape}"
    if isinstance(value, h5py.Empty):
        return "an empty attribute"
    text = repr(value)
    return text if len(text) <= 60 else text[:57] + "..."


def to_string(value) -> str:
    """The value as a str, or :class:`Invalid`."""
    v = plain(value)
    if not isinstance(v, str):
        raise Invalid(f"expected a string, got {show(value)}")
    return v


def to_number(value) -> float:
    """The value as a finite float (bools and strings refused), or :class:`Invalid`."""
    v = plain(value)
    if isinstance(v, bool) or not isinstance(v, (int, float)):
        raise Invalid(f"expected a number, got {show(value)}")
    x = float(v)
    if not math.isfinite(x):
        raise Invalid(f"expected a finite number, got {x!r}")
    return x


def _positive(value) -> float:
    x = to_number(value)
    if not x > 0:
        raise Invalid(f"expected a positive number, got {x!r}")
    return x


def _nonzero(value) -> float:
    x = to_number(value)
    if x == 0:
        raise Invalid("expected a non-zero number, got 0.0")
    return x


def _positive_int(value) -> int:
    v = plain(value)
    if isinstance(v, float) and v.is_integer():
        v = int(v)
    if isinstance(v, bool) or not isinstance(v, int) or v < 1:
        raise Invalid(f"expected a positive integer, got {show(value)}")
    return v


def _passthrough(value):
    """Type sanity for optional attributes: string, boolean, number or 1-D numeric array."""
    v = plain(value)
    if isinstance(v, (str, bool, int, float)):
        return v
    if isinstance(v, (list, tuple)):
        v = np.asarray(v)
    if isinstance(v, np.ndarray) and v.ndim == 1 and v.dtype.kind in "biuf":
        return v.tolist()
    raise Invalid(f"expected a string, number, boolean or one-dimensional numeric array, "
                  f"got {show(value)}")


@dataclass(frozen=True)
class ApparatusKind:
    """What the ``apparatus`` group of one kind must and may carry.

    Attributes
    ----------
    name : str
        The ``kind`` attribute value.
    signal_units : tuple of str
        Allowed ``samples/signal`` units.
    required : tuple of (attribute, rule, description)
    optional : tuple of (attribute, rule, default)
    """

    name: str
    signal_units: tuple[str, ...]
    required: tuple = ()
    optional: tuple = ()


_SEPARATION = ("path_separation_deg", to_number, DEFAULT_PATH_SEPARATION_DEG)
_CARRIER = ("carrier_hz", _positive, "the carrier frequency in Hz, > 0")

#: Registry of apparatus kinds (drives validation, messages and tests).
APPARATUS_KINDS: dict[str, ApparatusKind] = {k.name: k for k in (
    ApparatusKind("cavity-pair", ("Hz", "1"), (_CARRIER,), (_SEPARATION,)),
    ApparatusKind("cavity-vs-reference", ("Hz", "1"), (_CARRIER,)),
    ApparatusKind("michelson", ("fringe",),
                  (("arm_length_m", _positive, "the arm length in m, > 0"),
                   ("wavelength_m", _positive, "the optical wavelength in m, > 0")),
                  (("passes", _positive_int, 1), _SEPARATION)),
    ApparatusKind("clock", ("Hz",),
                  (("sensitivity_hz", _nonzero, "the frequency response in Hz, non-zero"),)),
)}


def _kinds_text() -> str:
    return ", ".join(repr(k) for k in APPARATUS_KINDS)


def check_apparatus(attrs: Mapping, err, prefix: str = "apparatus") -> dict:
    """Validate apparatus attributes; return them as plain Python types with defaults filled.

    ``err(obj, expected)`` builds the exception to raise (file-specific).
    """
    if "kind" not in attrs:
        raise err(f"{prefix}.kind", f"missing attribute; expected one of {_kinds_text()}")
    kind = plain(attrs["kind"])
    if not isinstance(kind, str) or kind not in APPARATUS_KINDS:
        raise err(f"{prefix}.kind", f"expected one of {_kinds_text()}, got {show(kind)}")
    spec = APPARATUS_KINDS[kind]
    out: dict = {"kind": kind}
    for name, _rule, what in spec.required:
        if name not in attrs:
            raise err(f"{prefix}.{name}", f"missing attribute; kind {kind!r} requires {what}")
    checked = {name: rule for name, rule, _ in spec.required + spec.optional}
    for name, value in attrs.items():
        if name == "kind":
            continue
        try:
            out[name] = checked.get(name, _passthrough)(value)
        except Invalid as exc:
            raise err(f"{prefix}.{name}", exc.expected) from None
    for name, _, default in spec.optional:
        out.setdefault(name, default)
    return out


def check_site(attrs: Mapping, err, prefix: str = "site") -> Site:
    """Validate site attributes (latitude_deg, longitude_deg, optional height_m and name)."""
    rules = (("latitude_deg", -90.0, 90.0, "geodetic latitude in degrees, north positive"),
             ("longitude_deg", -360.0, 360.0, "east longitude in degrees"),
             ("height_m", -12_000.0, 100_000.0, "height above the ellipsoid in m"))
    values = {}
    for name, lo, hi, what in rules:
        if name not in attrs:
            if name == "height_m":
                continue
            raise err(f"{prefix}.{name}", f"missing attribute; expected {what}")
        try:
            x = to_number(attrs[name])
        except Invalid as exc:
            raise err(f"{prefix}.{name}", exc.expected) from None
        if not lo <= x <= hi:
            raise err(f"{prefix}.{name}", f"expected a value in [{lo:g}, {hi:g}], got {x!r}")
        values[name] = x
    if "name" in attrs:
        try:
            values["name"] = to_string(attrs["name"])
        except Invalid as exc:
            raise err(f"{prefix}.name", exc.expected) from None
    return Site(**values)


def parse_utc_iso(text: str, *, strict: bool = True) -> tuple[int, int, int, int, int, float]:
    """Split an ISO 8601 UTC time ``YYYY-MM-DDThh:mm:ss[.fff]Z`` (or ``+00:00``).

    Parameters
    ----------
    text : str
        The time.
    strict : bool
        If False, also accept a space for ``T`` and no suffix or ``UTC`` (taken as UTC).

    Returns
    -------
    tuple
        (year, month, day, hour, minute, second); second may be in [60, 61) only at 23:59 (a
        leap second, not checked against the leap-second table here).

    Raises
    ------
    ValueError
        If the text is not such a time.
    """
    regex = _UTC_RE if strict else _UTC_LOOSE_RE
    match = regex.fullmatch(text.strip()) if isinstance(text, str) else None
    if match is None:
        raise ValueError(text)
    y, mo, d, h, mi = (int(g) for g in match.groups()[:5])
    sec = float(match.group(6))
    datetime.date(y, mo, d)  # raises ValueError for a day that does not exist
    leap = h == 23 and mi == 59 and sec < 61.0
    if h > 23 or mi > 59 or not (sec < 60.0 or leap):
        raise ValueError(text)
    return y, mo, d, h, mi, sec


def check_epoch_utc(value, err, obj: str, *, strict: bool = True) -> str:
    """Validate an epoch; return it (strict) or its canonical ``...Z`` form (not strict)."""
    v = plain(value)
    try:
        parse_utc_iso(v, strict=strict)
    except ValueError:
        raise err(obj, f"expected {_EPOCH_HINT}, got {show(value)}") from None
    if strict:
        return v
    m = _UTC_LOOSE_RE.fullmatch(v.strip())
    return f"{m.group(1)}-{m.group(2)}-{m.group(3)}T{m.group(4)}:{m.group(5)}:{m.group(6)}Z"


def _first(mask: NDArray[np.bool_]) -> int:
    return int(np.argmax(mask))


def check_time_values(t_s: NDArray, start: int, prev_s: float | None,
                      obj: str = "samples/time") -> float | None:
    """Times t_s (s) must be finite and strictly increasing, also after ``prev_s`` (the last
    time of the previous chunk); ``start`` is the index of ``t_s[0]``. Returns the last time."""
    bad = ~np.isfinite(t_s)
    if bad.any():
        i = _first(bad)
        raise Invalid(f"expected finite values, got {float(t_s[i])!r} at index {start + i}", obj)
    if t_s.size == 0:
        return prev_s
    if prev_s is not None and not t_s[0] > prev_s:
        _order_error(float(t_s[0]), prev_s, start, obj)
    step = t_s[1:] <= t_s[:-1]
    if step.any():
        i = _first(step) + 1
        _order_error(float(t_s[i]), float(t_s[i - 1]), start + i, obj)
    return float(t_s[-1])


def _order_error(value: float, before: float, index: int, obj: str):
    if value == before:
        raise Invalid(f"expected strictly increasing values, got {value!r} repeated at index "
                      f"{index}", obj)
    raise Invalid(f"expected strictly increasing values, got {value!r} at index {index} after "
                  f"{before!r}", obj)


def check_azimuth_values(azimuth: NDArray, start: int, obj: str = "samples/azimuth") -> None:
    """Azimuth (any angle unit) must be finite; ``start`` is the index of ``azimuth[0]``."""
    bad = ~np.isfinite(azimuth)
    if bad.any():
        i = _first(bad)
        raise Invalid(f"expected finite values (azimuth has no dropped samples), got "
                      f"{float(azimuth[i])!r} at index {start + i}", obj)


def check_signal_values(signal: NDArray, start: int, obj: str = "samples/signal") -> None:
    """Signal values must be finite or NaN (a dropped sample); ±inf is refused."""
    bad = np.isinf(signal)
    if bad.any():
        i = _first(bad)
        raise Invalid(f"expected finite values or NaN (a dropped sample), got "
                      f"{float(signal[i])!r} at index {start + i}", obj)


_CORRUPT = "expected a readable HDF5 file, got a corrupt one (HDF5 could not read its contents)"


def sha256(path: str | os.PathLike, *, block_bytes: int = 1 << 20) -> str:
    """SHA-256 of a file's bytes, read in blocks of ``block_bytes`` (hexadecimal string)."""
    digest = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(block_bytes), b""):
            digest.update(block)
    return digest.hexdigest()


def open_run(path: str | os.PathLike, *, check_values: bool = True,
             chunk_samples: int = DEFAULT_CHUNK_SAMPLES) -> RunFile:
    """Open and validate a run file (read-only); use as a context manager.

    Parameters
    ----------
    path : str or os.PathLike
        The run file.
    check_values : bool
        Check the values of time, azimuth and signal in a streamed pass at open time (bounded
        memory: ``chunk_samples`` samples per channel). If False, the same checks run lazily on
        every chunk that :meth:`RunFile.iter_chunks` or :meth:`RunFile.read_all` returns.
    chunk_samples : int
        Samples per read in the open-time pass.

    Returns
    -------
    RunFile

    Raises
    ------
    InputFileError
        One line naming the file, the object and what was expected.

    Examples
    --------
    >>> with open_run("run.h5") as run:                       # doctest: +SKIP
    ...     for chunk in run.iter_chunks():
    ...         t_s, azimuth_rad = chunk["time"], chunk["azimuth"]
    """
    return RunFile(path, check_values=check_values, chunk_samples=chunk_samples)


def _open_hdf5(path: str) -> h5py.File:
    if not os.path.exists(path):
        raise InputFileError(path, "file", "expected an existing file")
    if os.path.isdir(path):
        raise InputFileError(path, "file", "expected a file, got a directory")
    try:
        is_hdf5 = h5py.is_hdf5(path)
    except OSError as exc:
        raise InputFileError(path, "file", "expected a readable file") from exc
    if not is_hdf5:
        raise InputFileError(path, "file", "expected an HDF5 file (no HDF5 signature found)")
    try:
        return h5py.File(path, "r")
    except OSError as exc:
        logger.debug("h5py could not open %s: %s", path, exc)
        if "truncated" in str(exc):
            raise InputFileError(path, "file", "expected a complete HDF5 file, got a truncated "
                                 "one (shorter than its header records)") from exc
        raise InputFileError(path, "file", _CORRUPT) from exc


class RunFile:
    """A validated, open run file (read-only). Create it with :func:`open_run`.

    Attributes
    ----------
    path : str
        The file as given.
    site : Site
        Laboratory site (geodetic latitude and east longitude, degrees; height, m).
    apparatus : dict
        Validated ``apparatus`` attributes as plain Python types, with defaults filled in
        (``path_separation_deg`` = 90 for cavity-pair and michelson, ``passes`` = 1 for michelson).
    epoch_utc : str
        ISO 8601 UTC epoch of ``samples/time`` (as stored).
    n_samples : int
        Number of samples.
    time_first_s, time_last_s : float
        First and last time, seconds since ``epoch_utc``.
    signal_units : str
        ``"Hz"``, ``"1"`` or ``"fringe"``.
    azimuth_units : str
        Stored azimuth units, ``"rad"`` or ``"deg"`` (chunks are always in radians).
    aux_channels : dict[str, str]
        Auxiliary channel name -> units.
    extra_groups : tuple[str, ...]
        Names of root groups other than site, apparatus and samples.
    """

    def __init__(self, path: str | os.PathLike, *, check_values: bool = True,
                 chunk_samples: int = DEFAULT_CHUNK_SAMPLES):
        self.path = os.fspath(path)
        self._file = _open_hdf5(self.path)
        self._values_checked = False
        try:
            with self._guard():
                self._validate_layout()
                if check_values:
                    for _ in self._chunks(_check_chunk_size(chunk_samples), CORE_CHANNELS,
                                          0, self.n_samples, check=True, copy=False):
                        pass
                    self._values_checked = True
        except BaseException:
            self._file.close()
            raise

    # -- context manager -------------------------------------------------------------------
    def __enter__(self) -> RunFile:
        return self

    def __exit__(self, exc_type, exc, tb) -> None:
        self.close()

    def close(self) -> None:
        """Close the underlying HDF5 file."""
        self._file.close()

    def __repr__(self) -> str:
        return (f"RunFile({self.path!r}, kind={self.apparatus['kind']!r}, "
                f"n_samples={self.n_samples}, epoch_utc={self.epoch_utc!r})")

    # -- validation ------------------------------------------------------------------------
    def _err(self, obj: str, expected: str) -> InputFileError:
        return InputFileError(self.path, obj, expected)

    @contextlib.contextmanager
    def _guard(self):
        """Turn HDF5 read failures into one-line errors (h5py raises OSError, or KeyError when
        an object header is damaged; only h5py calls run inside this guard)."""
        try:
            yield
        except (OSError, RuntimeError, KeyError) as exc:
            logger.debug("HDF5 error reading %s: %s", self.path, exc)
            raise InputFileError(self.path, "file", _CORRUPT) from exc

    def _group(self, name: str, what: str) -> h5py.Group:
        if name not in self._file:
            raise self._err(name, f"missing group; expected {what}")
        obj = self._file[name]
        if not isinstance(obj, h5py.Group):
            raise self._err(name, "expected a group, got a dataset")
        return obj

    def _attr(self, obj, label: str, name: str, what: str):
        if name not in obj.attrs:
            raise self._err(label, f"missing attribute; expected {what}")
        return obj.attrs[name]

    def _validate_layout(self) -> None:
        f = self._file
        fmt = plain(self._attr(f, "fringe_format", "fringe_format",
                               f"{FORMAT_NAME!r} (a fringe run file)"))
        if not isinstance(fmt, str) or fmt != FORMAT_NAME:
            raise self._err("fringe_format", f"expected {FORMAT_NAME!r}, got {show(fmt)}")
        version = plain(self._attr(f, "fringe_format_version", "fringe_format_version",
                                   f"the integer {FORMAT_VERSION}"))
        if isinstance(version, bool) or not isinstance(version, int) or version != FORMAT_VERSION:
            raise self._err("fringe_format_version", f"expected the integer {FORMAT_VERSION} "
                            f"(this fringe reads run-file version 1), got {show(version)}")
        site = self._group("site", "attributes latitude_deg and longitude_deg")
        self.site: Site = check_site(dict(site.attrs), self._err)
        apparatus = self._group("apparatus", "an attribute 'kind'")
        self.apparatus: dict = check_apparatus(dict(apparatus.attrs), self._err)
        self._validate_samples(self._group("samples", "datasets time, azimuth and signal"))
        self.extra_groups: tuple[str, ...] = tuple(
            k for k, v in f.items() if k not in RESERVED_GROUPS and isinstance(v, h5py.Group))

    def _units(self, ds: h5py.Dataset, label: str, allowed: Sequence[str]) -> str:
        shown = " or ".join(repr(u) for u in allowed)
        value = plain(self._attr(ds, f"{label}.units", "units", shown))
        if not isinstance(value, str) or value not in allowed:
            raise self._err(f"{label}.units", f"expected {shown}, got {show(value)}")
        return value

    def _validate_samples(self, samples: h5py.Group) -> None:
        self._datasets: dict[str, h5py.Dataset] = {}
        what = {"time": "seconds since samples/time.epoch_utc",
                "azimuth": "the azimuth of path 1 from north toward east",
                "signal": "the recorded signal"}
        for name in CORE_CHANNELS:
            if name not in samples:
                raise self._err(f"samples/{name}", f"missing dataset; expected {what[name]}")
        names = list(CORE_CHANNELS) + sorted(k for k in samples if k not in CORE_CHANNELS)
        for name in names:
            ds = samples[name]
            label = f"samples/{name}"
            if not isinstance(ds, h5py.Dataset):
                raise self._err(label, "expected a one-dimensional dataset, got a group")
            if ds.shape is None:  # an HDF5 null dataspace (h5py.Empty)
                raise self._err(label, "expected a one-dimensional dataset, got an empty "
                                "(null) dataspace")
            if len(ds.shape) != 1:
                raise self._err(label, f"expected a one-dimensional dataset, got shape "
                                f"{tuple(ds.shape)}")
            if name == "time":
                self.n_samples = int(ds.shape[0])
                if self.n_samples == 0:
                    raise self._err(label, "expected at least one sample, got an empty dataset")
            elif ds.shape[0] != self.n_samples:
                raise self._err(label, f"expected the length of samples/time "
                                f"({self.n_samples}), got {ds.shape[0]}")
            _check_dtype(ds.dtype, name, lambda exp, lab=label: self._err(lab, exp))
            self._datasets[name] = ds
        time = self._datasets["time"]
        self._units(time, "samples/time", TIME_UNITS)
        self.epoch_utc: str = check_epoch_utc(
            self._attr(time, "samples/time.epoch_utc", "epoch_utc",
                       "an ISO 8601 UTC time like '2027-02-03T00:00:00Z'"),
            self._err, "samples/time.epoch_utc")
        self.azimuth_units: str = self._units(self._datasets["azimuth"], "samples/azimuth",
                                              AZIMUTH_UNITS)
        kind_units = APPARATUS_KINDS[self.apparatus["kind"]].signal_units
        self.signal_units: str = self._units(self._datasets["signal"], "samples/signal",
                                             kind_units)
        self.aux_channels: dict[str, str] = {}
        for name in names[3:]:
            label = f"samples/{name}.units"
            raw = self._attr(self._datasets[name], label, "units",
                             "a units string for this auxiliary channel")
            try:
                units = to_string(raw)
            except Invalid as exc:
                raise self._err(label, exc.expected) from None
            if not units.strip():
                raise self._err(label, "expected a non-empty units string, got ''")
            self.aux_channels[name] = units
        self.time_first_s = float(time[0])
        self.time_last_s = float(time[self.n_samples - 1])

    # -- reading ---------------------------------------------------------------------------
    @property
    def channels(self) -> tuple[str, ...]:
        """Names of every channel: time, azimuth, signal, then the auxiliary channels."""
        return CORE_CHANNELS + tuple(self.aux_channels)

    def _check_channels(self, channels: Sequence[str]) -> tuple[str, ...]:
        if isinstance(channels, str):
            channels = (channels,)
        for name in channels:
            if name not in self._datasets:
                raise ConfigError(f"{self.path}: channels: expected names among "
                                  f"{', '.join(self.channels)}, got {name!r}")
        return tuple(channels)

    def _chunks(self, chunk: int, channels: tuple[str, ...], start: int, stop: int, *,
                check: bool, copy: bool) -> Iterator[dict[str, NDArray[np.float64]]]:
        buffers = {name: np.empty(min(chunk, max(stop - start, 1))) for name in channels}
        prev_t = None
        if check and "time" in channels and start > 0:
            with self._guard():
                prev_t = float(self._datasets["time"][start - 1])
        for i in range(start, stop, chunk):
            m = min(chunk, stop - i)
            out = {}
            for name in channels:
                view = buffers[name][:m]
                with self._guard():
                    self._datasets[name].read_direct(view, np.s_[i:i + m], np.s_[0:m])
                if name == "azimuth" and self.azimuth_units == "deg":
                    np.radians(view, out=view)
                out[name] = view.copy() if copy else view
            if check:
                try:
                    if "time" in out:
                        prev_t = check_time_values(out["time"], i, prev_t)
                    if "azimuth" in out:
                        check_azimuth_values(out["azimuth"], i)
                    if "signal" in out:
                        check_signal_values(out["signal"], i)
                except Invalid as exc:
                    raise self._err(exc.obj, exc.expected) from None
            yield out

    def iter_chunks(self, chunk_samples: int = DEFAULT_CHUNK_SAMPLES,
                    channels: Sequence[str] = CORE_CHANNELS, *, start: int = 0,
                    stop: int | None = None,
                    copy: bool = False) -> Iterator[dict[str, NDArray[np.float64]]]:
        """Iterate over the samples in chunks, read into preallocated float64 buffers.

        Parameters
        ----------
        chunk_samples : int
            Samples per chunk (the last chunk may be shorter).
        channels : sequence of str
            Channels to read: ``"time"`` (s since ``epoch_utc``), ``"azimuth"`` (rad, always
            converted from the stored units), ``"signal"`` (``signal_units``), or auxiliary names.
        start, stop : int
            Sample range ``[start, stop)``; ``stop=None`` means the end.
        copy : bool
            If False (default) the yielded arrays are views into buffers that the next
            iteration overwrites; copy them (or pass True) to keep them.

        Yields
        ------
        dict[str, numpy.ndarray]
            Channel name -> float64 array of shape (m,), m <= chunk_samples.
        """
        chunk = _check_chunk_size(chunk_samples)
        names = self._check_channels(channels)
        stop = self.n_samples if stop is None else stop
        if not 0 <= start <= stop <= self.n_samples:
            raise ConfigError(f"{self.path}: start, stop: expected 0 <= start <= stop <= "
                              f"{self.n_samples}, got {start}, {stop}")
        yield from self._chunks(chunk, names, start, stop, check=not self._values_checked,
                                copy=copy)

    def read_all(self, channels: Sequence[str] = CORE_CHANNELS) -> dict[str, NDArray[np.float64]]:
        """Read whole channels (for small files): name -> float64 array of shape (n_samples,).

        Azimuth is returned in radians; see :meth:`iter_chunks` for the channel names.
        """
        names = self._check_channels(channels)
        chunks = self._chunks(self.n_samples, names, 0, self.n_samples,
                              check=not self._values_checked, copy=False)
        return next(chunks)

    def read_group_attrs(self, name: str) -> dict:
        """Attributes of group ``name`` (e.g. ``"truth"``): scalars as Python numbers/strings,
        arrays as numpy arrays."""
        with self._guard():
            group = self._group(name, "a group of that name")
            return {k: plain(v) for k, v in group.attrs.items()}

    def read_group_datasets(self, name: str) -> dict[str, np.ndarray]:
        """Datasets directly inside group ``name`` (for small extra groups), read whole."""
        with self._guard():
            group = self._group(name, "a group of that name")
            out = {}
            for key, ds in group.items():
                if isinstance(ds, h5py.Dataset):
                    try:
                        text = h5py.check_string_dtype(ds.dtype) is not None
                        out[key] = np.asarray(ds.asstr()[()] if text else ds[()])
                    except UnicodeDecodeError:  # strings that are not UTF-8: left as bytes
                        out[key] = np.asarray(ds[()])
            return out

    def to_dict(self) -> dict:
        """The validated metadata in plain JSON types (for ``fringe inspect``)."""
        return {"path": self.path, "fringe_format_version": FORMAT_VERSION,
                "site": self.site.to_dict(), "apparatus": dict(self.apparatus),
                "epoch_utc": self.epoch_utc, "n_samples": self.n_samples,
                "time_first_s": self.time_first_s, "time_last_s": self.time_last_s,
                "signal_units": self.signal_units, "azimuth_units": self.azimuth_units,
                "aux_channels": dict(self.aux_channels), "extra_groups": list(self.extra_groups)}


def _check_chunk_size(chunk_samples) -> int:
    if isinstance(chunk_samples, bool) or not isinstance(chunk_samples, (int, np.integer)) \
            or chunk_samples < 1:
        raise ConfigError(f"chunk_samples: expected a positive integer, got {chunk_samples!r}")
    return int(chunk_samples)


def _check_dtype(dtype: np.dtype, name: str, err) -> None:
    """Storage types: time float64 or integer; azimuth float64; signal float32/float64;
    auxiliary channels any integer or float32/float64."""
    kind, size = dtype.kind, dtype.itemsize
    if name == "time":
        if not ((kind == "f" and size >= 8) or kind in "iu"):
            raise err(f"expected float64 or integer seconds, got {dtype.name}")
    elif name == "azimuth":
        if not (kind == "f" and size >= 8):
            raise err(f"expected float64 values, got {dtype.name}")
    elif name == "signal":
        if not (kind == "f" and size >= 4):
            raise err(f"expected float32 or float64 values, got {dtype.name}")
    elif not ((kind == "f" and size >= 4) or kind in "iu"):
        raise err(f"expected integer, float32 or float64 values, got {dtype.name}")


# -- writer ----------------------------------------------------------------------------------
def _check_output_path(path: str, overwrite: bool, protect: Sequence) -> None:
    """Refuse (OutputError) an output that would replace an input or an existing file."""
    real = os.path.realpath(path)
    for item in protect:
        p = os.fspath(item)
        same = os.path.realpath(p) == real
        if not same and os.path.exists(p) and os.path.exists(path):
            same = os.path.samefile(p, path)
        if same:
            raise OutputError(f"{path}: refusing to write over the input file {p}")
    if os.path.isdir(path):
        raise OutputError(f"{path}: expected an output file path, got a directory")
    if not os.path.isdir(os.path.dirname(real)):
        raise OutputError(f"{path}: the output directory does not exist")
    if os.path.exists(path) and not overwrite:
        raise OutputError(f"{path}: the output file exists (overwriting was not requested)")


def _fixed_strings(values) -> np.ndarray:
    """UTF-8 strings as fixed-length HDF5 strings: stored inside the (checksummed) object
    header, not in the global heap, where damage can make the HDF5 library loop forever."""
    encoded = np.asarray(np.char.encode(np.asarray(values, dtype=str), "utf-8"))
    return encoded.astype(h5py.string_dtype("utf-8", max(1, encoded.dtype.itemsize)))


def _attr_value(value, err, obj: str):
    """A value h5py can store as an attribute or small dataset, or ``err``."""
    if isinstance(value, str):
        return _fixed_strings(value)
    if isinstance(value, (bool, int, float, np.generic)):
        return value
    if isinstance(value, (list, tuple, np.ndarray)):
        arr = np.asarray(value)
        if arr.dtype.kind == "U":
            return _fixed_strings(arr)
        if arr.dtype.kind in "biuf":
            return arr
    raise err(obj, f"expected a string, number, boolean or numeric array, got "
              f"{type(value).__name__}")


def _create_temp(directory: str, name: str) -> str:
    """Create an empty temporary file beside the output (mode from the umask, like any file)."""
    for _ in range(100):
        tmp = os.path.join(directory, f".{name}.{secrets.token_hex(6)}.tmp")
        try:
            os.close(os.open(tmp, os.O_CREAT | os.O_EXCL | os.O_WRONLY, 0o666))
            return tmp
        except FileExistsError:
            continue
    raise OutputError(f"{os.path.join(directory, name)}: cannot create a temporary file")


class RunWriter:
    """Write a run file chunk by chunk; the output appears whole on success or not at all.

    Data go to a temporary file in the output's directory, renamed over ``path`` (``os.replace``)
    when the ``with`` block ends without an exception; an exception removes the temporary file.

    Parameters
    ----------
    path : str or os.PathLike
        Output run file.
    site : Site or mapping
        Laboratory site (latitude_deg, longitude_deg, height_m, name).
    apparatus : mapping
        ``apparatus`` attributes: ``kind`` and the kind's attributes (see ``APPARATUS_KINDS``).
    epoch_utc : str
        ISO 8601 UTC epoch of the time axis, e.g. ``"2027-02-03T00:00:00Z"``.
    signal_units : str
        ``"Hz"``, ``"1"`` or ``"fringe"`` (as allowed for the kind).
    azimuth_units : str
        ``"rad"`` or ``"deg"``: units of the azimuths passed to :meth:`append` (stored as is).
    aux_channels : mapping of str to str, optional
        Auxiliary channel name -> units string; every :meth:`append` must give each of them.
    overwrite : bool
        Replace an existing output.
    protect : sequence of path
        Inputs that must never be written over (checked by resolved path and by file identity).
    chunk_samples : int
        HDF5 chunk length of the sample datasets.
    compression : None, "lzf" or "gzip"
        Dataset filter; None (default) is fastest to read and write, "gzip" is for archives.

    Raises
    ------
    ConfigError
        Invalid metadata (``PATH: apparatus.kind: expected ...``).
    OutputError
        Output exists, would replace an input, or appended data break the format.

    Examples
    --------
    >>> with RunWriter("run.h5", site=Site(48.1, 11.6), epoch_utc="2027-02-03T00:00:00Z",
    ...                apparatus={"kind": "cavity-pair", "carrier_hz": 2.8e14},
    ...                signal_units="Hz") as w:                   # doctest: +SKIP
    ...     w.append(t_s, azimuth_rad, beat_hz)
    """

    def __init__(self, path: str | os.PathLike, *, site: Site | Mapping, apparatus: Mapping,
                 epoch_utc: str, signal_units: str, azimuth_units: str = "rad",
                 aux_channels: Mapping[str, str] | None = None, overwrite: bool = False,
                 protect: Sequence = (), chunk_samples: int = DEFAULT_CHUNK_SAMPLES,
                 compression: str | None = None):
        self.path = os.fspath(path)
        cfg = self._config_err
        self.site = site if isinstance(site, Site) else check_site(dict(site), cfg)
        self.apparatus = check_apparatus(dict(apparatus), cfg)
        self.epoch_utc = check_epoch_utc(epoch_utc, cfg, "samples/time.epoch_utc", strict=False)
        allowed = APPARATUS_KINDS[self.apparatus["kind"]].signal_units
        if signal_units not in allowed:
            raise cfg("samples/signal.units", f"expected {' or '.join(map(repr, allowed))} "
                      f"for kind {self.apparatus['kind']!r}, got {show(signal_units)}")
        if azimuth_units not in AZIMUTH_UNITS:
            raise cfg("samples/azimuth.units", f"expected 'rad' or 'deg', got "
                      f"{show(azimuth_units)}")
        self.signal_units, self.azimuth_units = signal_units, azimuth_units
        self.aux_channels = dict(aux_channels or {})
        for name, units in self.aux_channels.items():
            if not isinstance(name, str) or not name or name in CORE_CHANNELS \
                    or "/" in name or "." in name:
                raise cfg("aux_channels", f"expected channel names other than time, azimuth "
                          f"and signal, without '/' or '.', got {show(name)}")
            if not isinstance(units, str) or not units.strip():
                raise cfg(f"samples/{name}.units", f"expected a units string, got {show(units)}")
        if compression not in (None, "lzf", "gzip"):
            raise cfg("compression", f"expected None, 'lzf' or 'gzip', got {show(compression)}")
        self._chunk = _check_chunk_size(chunk_samples)
        self._compression = compression
        self._overwrite, self._protect = overwrite, tuple(protect)
        _check_output_path(self.path, overwrite, self._protect)
        self._file: h5py.File | None = None
        self._tmp: str | None = None
        self._groups: set[str] = set()
        self.n_samples = 0
        self._last_t: float | None = None

    def _config_err(self, obj: str, expected: str) -> ConfigError:
        return ConfigError(f"{self.path}: {obj}: {expected}")

    def _output_err(self, obj: str, expected: str) -> OutputError:
        return OutputError(f"{self.path}: {obj}: {expected}")

    def __enter__(self) -> RunWriter:
        directory = os.path.dirname(os.path.realpath(self.path))
        self._tmp = _create_temp(directory, os.path.basename(self.path))
        try:
            self._file = f = h5py.File(self._tmp, "w", libver=("v108", "latest"))
            f.attrs["fringe_format"] = _fixed_strings(FORMAT_NAME)
            f.attrs["fringe_format_version"] = np.int64(FORMAT_VERSION)
            f.attrs["written_by"] = _fixed_strings(f"fringe {__version__}")
            site = f.create_group("site")
            for key, value in self.site.to_dict().items():
                if key != "name" or value:
                    site.attrs[key] = _attr_value(value, self._config_err, f"site.{key}")
            app = f.create_group("apparatus")
            for key, value in self.apparatus.items():
                app.attrs[key] = _attr_value(value, self._config_err, f"apparatus.{key}")
            samples = f.create_group("samples")
            units = {"time": "s", "azimuth": self.azimuth_units, "signal": self.signal_units,
                     **self.aux_channels}
            for name, unit in units.items():
                ds = samples.create_dataset(name, shape=(0,), maxshape=(None,), dtype="f8",
                                            chunks=(self._chunk,), compression=self._compression)
                ds.attrs["units"] = _fixed_strings(unit)
            samples["time"].attrs["epoch_utc"] = _fixed_strings(self.epoch_utc)
        except BaseException:
            self.abort()
            raise
        return self

    def __exit__(self, exc_type, exc, tb) -> None:
        if exc_type is None:
            self.close()
        else:
            self.abort()

    def _require_open(self) -> h5py.File:
        if self._file is None:
            raise RuntimeError("RunWriter is not open: use it as a context manager")
        return self._file

    def append(self, time_s, azimuth, signal, **aux) -> None:
        """Append samples: time (s since epoch), azimuth (``azimuth_units``), signal, aux.

        All arrays are one-dimensional of one length. Time must be finite and strictly
        increasing, also across calls; azimuth finite; signal finite or NaN.
        """
        f = self._require_open()
        if set(aux) != set(self.aux_channels):
            raise self._output_err("samples", f"expected auxiliary channels "
                                   f"{sorted(self.aux_channels)}, got {sorted(aux)}")
        arrays = {}
        for name, value in {"time": time_s, "azimuth": azimuth, "signal": signal, **aux}.items():
            try:
                arr = np.ascontiguousarray(value, dtype=np.float64)
            except (TypeError, ValueError):
                raise self._output_err(f"samples/{name}", "expected numbers") from None
            if arr.ndim != 1:
                raise self._output_err(f"samples/{name}", f"expected a one-dimensional array, "
                                       f"got shape {arr.shape}")
            arrays[name] = arr
        m = arrays["time"].size
        for name, arr in arrays.items():
            if arr.size != m:
                raise self._output_err(f"samples/{name}", f"expected the length of time ({m}), "
                                       f"got {arr.size}")
        try:
            last = check_time_values(arrays["time"], self.n_samples, self._last_t)
            check_azimuth_values(arrays["azimuth"], self.n_samples)
            check_signal_values(arrays["signal"], self.n_samples)
        except Invalid as exc:
            raise self._output_err(exc.obj, exc.expected) from None
        if m == 0:
            return
        n = self.n_samples
        for name, arr in arrays.items():
            ds = f["samples"][name]
            ds.resize((n + m,))
            ds.write_direct(arr, dest_sel=np.s_[n:n + m])
        self.n_samples, self._last_t = n + m, last

    def write_group(self, name: str, attrs: Mapping, datasets: Mapping | None = None) -> None:
        """Write an extra root group (e.g. ``truth``, ``settings``, ``provenance``).

        Attribute values and datasets: strings, booleans, numbers or numeric/string arrays.
        """
        f = self._require_open()
        if not isinstance(name, str) or not name or "/" in name or name in RESERVED_GROUPS \
                or name in self._groups:
            raise self._config_err("group", f"expected a new group name other than site, "
                                   f"apparatus and samples, without '/', got {show(name)}")
        group = f.create_group(name)
        self._groups.add(name)
        for key, value in dict(attrs).items():
            group.attrs[key] = _attr_value(value, self._config_err, f"{name}.{key}")
        for key, value in dict(datasets or {}).items():
            group.create_dataset(key, data=_attr_value(value, self._config_err, f"{name}/{key}"))

    def close(self) -> None:
        """Finish the file and rename it over ``path`` (no-op if already closed)."""
        if self._file is None:
            return
        try:
            if self.n_samples == 0:
                raise self._output_err("samples", "expected at least one sample, none appended")
            self._file.close()
            with open(self._tmp, "rb+") as fh:
                os.fsync(fh.fileno())
            if os.path.exists(self.path) and not self._overwrite:
                raise OutputError(f"{self.path}: the output file exists (overwriting was not "
                                  f"requested)")
            os.replace(self._tmp, self.path)
            self._file, self._tmp = None, None
        except BaseException:
            self.abort()
            raise

    def abort(self) -> None:
        """Discard the temporary file; the output is left as it was."""
        if self._file is not None:
            try:
                self._file.close()
            except (OSError, RuntimeError) as exc:  # the file is discarded anyway
                logger.debug("closing %s failed: %s", self._tmp, exc)
            self._file = None
        if self._tmp is not None:
            with contextlib.suppress(FileNotFoundError):
                os.remove(self._tmp)
            self._tmp = None
