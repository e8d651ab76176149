"""Run-file writer (HDF5, format version 1 or 2): :class:`RunWriter` and its private helpers.

This module holds the atomic, chunk-by-chunk writer: :class:`RunWriter` validates the metadata
with the rules of :mod:`fringe.io.runformat`, writes to a temporary file beside the output and
renames it over the output only when the writer closes without error, so the output is whole or
absent. The helpers refuse outputs that would replace an input or an existing file and store
strings as fixed-length HDF5 strings. Read run files with :func:`fringe.io.runreader.open_run`.
"""

from __future__ import annotations

import contextlib
import logging
import os
from collections.abc import Mapping, Sequence

import h5py
import numpy as np

from fringe.errors import ConfigError, OutputError, output_exists
from fringe.io.atomic import (
    check_directory_writable,
    check_name_length,
    name_max,
    output_error,
    pending_interrupt,
    real_target,
    signals_deferred,
    sweep_leftovers,
    temp_name,
)
from fringe.io.h5guard import open_h5_output
from fringe.io.runformat import (
    APPARATUS_KINDS,
    AZIMUTH_UNITS,
    CORE_CHANNELS,
    DEFAULT_CHUNK_SAMPLES,
    FORMAT_NAME,
    RESERVED_GROUPS,
    WEIGHT_CHANNEL,
    Invalid,
    _check_chunk_size,
    check_apparatus,
    check_azimuth_values,
    check_epoch_utc,
    check_signal_attrs,
    check_signal_values,
    check_site,
    check_time_values,
    check_weight_values,
    show,
    version_needed,
)
from fringe.site import Site
from fringe.version import __version__

__all__ = ["RunWriter"]

logger = logging.getLogger(__name__)


def _check_output_path(path: str, overwrite: bool, protect: Sequence) -> None:
    """Refuse (OutputError) an output that would replace an input or an existing file."""
    check_name_length(path)
    real = os.path.realpath(path)
    for item in protect:
        p = os.fspath(item)
        same = os.path.realpath(p) == real
        if not same and os.path.exists(p) and os.path.exists(path):
            same = os.path.samefile(p, path)
        if same:
            raise OutputError(f"{path}: refusing to write over the input file {p}")
    if os.path.isdir(path):
        raise OutputError(f"{path}: expected an output file path, got a directory; remove it "
                          "or choose another name")
    if not os.path.isdir(os.path.dirname(real)):
        raise OutputError(f"{path}: the output directory does not exist")
    if os.path.exists(path) and not overwrite:
        raise output_exists(path)
    check_directory_writable(os.path.dirname(real), shown=path)
    name = os.path.basename(real)
    if len(os.fsencode(name)) > name_max(os.path.dirname(real)):
        raise OutputError(f"{path}: file name too long ({len(os.fsencode(name))} bytes, at most "
                          f"{name_max(os.path.dirname(real))}); choose a shorter name")


def _fixed_strings(values) -> np.ndarray:
    """UTF-8 strings as fixed-length HDF5 strings.

    They are stored inside the (checksummed) object header, not in the global heap, where damage
    can make the HDF5 library loop forever.
    """
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


def _create_temp(path: str) -> str:
    """Create an empty temporary file beside the output (mode from the umask, like any file).

    Beside the file a symlink ``path`` points to, so the final rename stays on one filesystem.
    Temporary files of dead runs in that directory are removed first.
    """
    target = real_target(path)
    sweep_leftovers(target.parent)
    for _ in range(100):
        tmp = os.path.join(target.parent, temp_name(target.name, "part"))
        try:
            os.close(os.open(tmp, os.O_CREAT | os.O_EXCL | os.O_WRONLY, 0o666))
            return tmp
        except FileExistsError:
            continue
        except OSError as exc:
            raise output_error(path, exc) from None
    raise OutputError(f"{path}: cannot create a temporary file")


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
    signal_attrs : mapping, optional
        Version-2 attributes of ``samples/signal`` (``gate_s``, ``gate_kind``,
        ``scale_factor``, ``scale_rel_sigma``, ``instrument_units``; see
        :data:`fringe.io.runformat.SIGNAL_ATTRS`).
    weighted : bool
        Write a ``samples/weight`` channel (version 2); every :meth:`append` then gives
        ``weight=``.

    The file is written as format version 2 when it uses ``signal_attrs`` or ``weighted``,
    otherwise as version 1 (readable by every fringe).

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
                 compression: str | None = None, signal_attrs: Mapping | None = None,
                 weighted: bool = False):
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
        self.signal_attrs = check_signal_attrs(dict(signal_attrs or {}), cfg)
        unknown = sorted(set(signal_attrs or {}) - set(self.signal_attrs))
        if unknown:
            raise cfg(f"samples/signal.{unknown[0]}", "expected only gate_s, gate_kind, "
                      "scale_factor, scale_rel_sigma and instrument_units")
        self.weighted = bool(weighted)
        self.aux_channels = dict(aux_channels or {})
        for name, units in self.aux_channels.items():
            if not isinstance(name, str) or not name or name in CORE_CHANNELS \
                    or name == WEIGHT_CHANNEL or "/" in name or "." in name:
                raise cfg("aux_channels", f"expected channel names other than time, azimuth, "
                          f"signal and weight, without '/' or '.', got {show(name)}")
            if not isinstance(units, str) or not units.strip():
                raise cfg(f"samples/{name}.units", f"expected a units string, got {show(units)}")
        if compression not in (None, "lzf", "gzip"):
            raise cfg("compression", f"expected None, 'lzf' or 'gzip', got {show(compression)}")
        self._chunk = _check_chunk_size(chunk_samples)
        self._compression = compression
        self._overwrite, self._protect = overwrite, tuple(protect)
        _check_output_path(self.path, overwrite, self._protect)
        self._file: h5py.File | None = None
        self._guard = None
        self._tmp: str | None = None
        self._groups: set[str] = set()
        self.n_samples = 0
        self._last_t: float | None = None

    def _config_err(self, obj: str, expected: str) -> ConfigError:
        return ConfigError(f"{self.path}: {obj}: {expected}")

    def _output_err(self, obj: str, expected: str) -> OutputError:
        return OutputError(f"{self.path}: {obj}: {expected}")

    def __enter__(self) -> RunWriter:
        self._tmp = _create_temp(self.path)
        try:
            self._file, self._guard = open_h5_output(self._tmp, libver=("v108", "latest"))
            self._write_layout(self._file)
        except OSError as exc:
            self.abort()
            raise output_error(self.path, exc) from None
        except BaseException:
            self.abort()
            raise
        return self

    def _write_layout(self, f: h5py.File, fillvalue: float | None = None) -> None:
        """The root attributes, site, apparatus and the empty extendable sample datasets."""
        f.attrs["fringe_format"] = _fixed_strings(FORMAT_NAME)
        f.attrs["fringe_format_version"] = np.int64(
            version_needed(self.signal_attrs, self.weighted))
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
                 **({WEIGHT_CHANNEL: "1"} if self.weighted else {}), **self.aux_channels}
        for name, unit in units.items():
            ds = samples.create_dataset(name, shape=(0,), maxshape=(None,), dtype="f8",
                                        chunks=(self._chunk,), compression=self._compression,
                                        fillvalue=fillvalue)
            ds.attrs["units"] = _fixed_strings(unit)
        samples["time"].attrs["epoch_utc"] = _fixed_strings(self.epoch_utc)
        for key, value in self.signal_attrs.items():
            samples["signal"].attrs[key] = _attr_value(value, self._config_err,
                                                       f"samples/signal.{key}")

    def __exit__(self, exc_type, exc, tb) -> None:
        if exc_type is None:
            self.close()
        else:
            self.abort()

    def _require_open(self) -> h5py.File:
        if self._file is None:
            raise RuntimeError("RunWriter is not open: use it as a context manager")
        return self._file

    def append(self, time_s, azimuth, signal, *, weight=None, **aux) -> None:
        """Append samples: time (s since epoch), azimuth (``azimuth_units``), signal, aux.

        All arrays are one-dimensional of one length. Time must be finite and strictly
        increasing, also across calls; azimuth finite; signal finite or NaN; ``weight`` (only
        and always for a ``weighted`` writer) finite and > 0, or NaN.
        """
        f = self._require_open()
        arrays, last = self._checked(time_s, azimuth, signal, weight, aux)
        m = arrays["time"].size
        if m == 0:
            return
        n = self.n_samples
        for name, arr in arrays.items():
            ds = f["samples"][name]
            ds.resize((n + m,))
            ds.write_direct(arr, dest_sel=np.s_[n:n + m])
        self.n_samples, self._last_t = n + m, last
        if self._guard.error is not None:     # e.g. the disk is full: stop at once
            raise output_error(self.path, self._guard.error)

    def _checked(self, time_s, azimuth, signal, weight, aux) -> tuple[dict, float | None]:
        """The appended channels as float64 arrays, checked; and the new last time (s)."""
        if set(aux) != set(self.aux_channels):
            raise self._output_err("samples", f"expected auxiliary channels "
                                   f"{sorted(self.aux_channels)}, got {sorted(aux)}")
        if (weight is None) == self.weighted:
            raise self._output_err(f"samples/{WEIGHT_CHANNEL}", "expected weights exactly when "
                                   "the writer was made with weighted=True")
        extra = {WEIGHT_CHANNEL: weight} if self.weighted else {}
        arrays = {}
        for name, value in {"time": time_s, "azimuth": azimuth, "signal": signal, **extra,
                            **aux}.items():
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
            check_azimuth_values(arrays["azimuth"], self.n_samples, rad_per_unit=(
                np.pi / 180.0 if self.azimuth_units == "deg" else 1.0))
            check_signal_values(arrays["signal"], self.n_samples)
            if self.weighted:
                check_weight_values(arrays[WEIGHT_CHANNEL], self.n_samples)
        except Invalid as exc:
            raise self._output_err(exc.obj, exc.expected) from None
        return arrays, last

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
            self._file = None
            self._guard.close()           # syncs to the disk
            if self._guard.error is not None:
                raise output_error(self.path, self._guard.error)
            if os.path.exists(self.path) and not self._overwrite:
                raise output_exists(self.path)
            with signals_deferred():      # the rename and its record, or neither
                if pending_interrupt():   # held now, or swallowed on the way (a finaliser)
                    raise KeyboardInterrupt
                try:
                    os.replace(self._tmp, real_target(self.path))
                except OSError as exc:
                    raise output_error(self.path, exc) from None
                self._tmp = None
        except BaseException:
            self.abort()
            raise

    def abort(self) -> None:
        """Discard the temporary file; the output is left as it was.

        SIGINT and SIGTERM wait until it is gone.
        """
        with signals_deferred():
            if self._file is not None:
                try:
                    self._file.close()
                except (OSError, RuntimeError) as exc:  # the file is discarded anyway
                    logger.debug("closing %s failed: %s", self._tmp, exc)
                self._file = None
            if self._guard is not None:
                self._guard.close()
                self._guard = None
            if self._tmp is not None:
                with contextlib.suppress(FileNotFoundError):
                    os.remove(self._tmp)
                self._tmp = None
