"""Run files (HDF5, format versions 1 and 2): the validating reader.

Use :func:`open_run` to read a run file: it checks the whole layout, the metadata and (in a
streamed, chunk-by-chunk pass) the values of ``samples/time``, ``samples/azimuth`` and
``samples/signal``, then hands out validated metadata and chunked arrays
(:meth:`RunFile.iter_chunks`, azimuth always in radians). :func:`sha256` fingerprints any file.
The format itself is specified in ``docs/run-format.md``.

The format rules (constants, :data:`APPARATUS_KINDS`, metadata and value checks) live in
:mod:`fringe.io.runformat`; the atomic writer :class:`RunWriter` lives in
:mod:`fringe.io.runwriter`. Both are re-exported here, so ``from fringe.io.runreader import X``
works for every name that was defined here before the split.

A run file holds all its data: an object reached through an external link (into another
file), a virtual dataset (mapped from other files) or a dataset with external raw storage is
refused, since the SHA-256 a fit records covers this file's bytes only and could not identify
data stored elsewhere. Soft links are followed; they always resolve inside the same file (one
that leads on to an external link is refused like the external link).

Every violation of the format raises :class:`~fringe.errors.InputFileError` with one line
``PATH: OBJECT: EXPECTED``, where OBJECT is a dataset path (``samples/time``), a group attribute
(``site.latitude_deg``) or a dataset attribute (``samples/time.units``).
"""

from __future__ import annotations

import contextlib
import hashlib
import logging
import os
from collections.abc import Iterator, Sequence

import h5py
import numpy as np
from numpy.typing import NDArray

from fringe.errors import ConfigError, InputFileError, check_regular_file, missing_input
from fringe.io.runformat import (
    APPARATUS_KINDS,
    AZIMUTH_UNITS,
    CORE_CHANNELS,
    DEFAULT_CHUNK_SAMPLES,
    FORMAT_NAME,
    READABLE_VERSIONS,
    RESERVED_GROUPS,
    TIME_UNITS,
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
    plain,
    show,
    to_string,
)
from fringe.site import Site

__all__ = ["RunFile", "open_run", "sha256"]

logger = logging.getLogger(__name__)


_WHY_LOCAL = "a run file holds all its data: the SHA-256 a fit records covers this file only"
_CORRUPT = "expected a readable HDF5 file, got a corrupt one (HDF5 could not read its contents)"


def sha256(path: str | os.PathLike, *, block_bytes: int = 1 << 20, stop=None) -> str | None:
    """SHA-256 of a file's bytes, read in blocks of ``block_bytes`` (hexadecimal string).

    ``stop``: a :class:`threading.Event`; once it is set, reading stops at the next block and
    None is returned (a hash computed beside a fit that has failed).
    """
    digest = hashlib.sha256()
    buf = bytearray(block_bytes)          # one buffer for every block (no new bytes objects)
    view = memoryview(buf)
    with open(path, "rb", buffering=0) as fh:
        while n := fh.readinto(buf):
            if stop is not None and stop.is_set():
                return None
            digest.update(view[:n])
    return digest.hexdigest()


def open_run(path: str | os.PathLike, *, check_values: bool = True,
             chunk_samples: int = DEFAULT_CHUNK_SAMPLES, while_written: bool = False) -> RunFile:
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
    while_written : bool
        Also open a file that a writer holds in HDF5's single-writer/multiple-reader (SWMR)
        mode (:class:`fringe.io.livewriter.LiveRunWriter`): it is opened in SWMR read mode and
        the :class:`RunFile` covers the part the writer has flushed, ``n_samples`` being the
        shortest flushed length of the sample datasets (``being_written`` is then True). A
        finished file opens as usual. Without it such a file is refused as unreadable.

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
    return RunFile(path, check_values=check_values, chunk_samples=chunk_samples,
                   while_written=while_written)


def _open_hdf5(path: str, while_written: bool = False) -> tuple[h5py.File, bool]:
    """The open HDF5 file and whether a writer holds it in SWMR mode (only ``while_written``)."""
    if not os.path.exists(path):
        raise missing_input(path, "a run file (HDF5)")
    if os.path.isdir(path):
        raise InputFileError(path, "file", "expected a file, got a directory")
    check_regular_file(path, "a run file (HDF5)")     # a FIFO would block the read forever
    try:
        is_hdf5 = h5py.is_hdf5(path)
    except OSError as exc:
        raise InputFileError(path, "file", "expected a readable file") from exc
    if not is_hdf5:
        raise InputFileError(path, "file", "expected an HDF5 file (no HDF5 signature found)")
    try:
        return h5py.File(path, "r"), False
    except OSError as exc:
        logger.debug("h5py could not open %s: %s", path, exc)
        if while_written:    # a writer in SWMR mode marks the file open for writing
            try:
                return h5py.File(path, "r", libver="latest", swmr=True), True
            except OSError as exc2:
                logger.debug("h5py could not open %s in SWMR mode either: %s", path, exc2)
        if "already open for write" in str(exc):
            raise InputFileError(path, "file", "expected a closed run file, got one a writer "
                                 "still holds open (HDF5 marks it open for writing; fringe "
                                 "watch follows such a file; after a writer died, HDF5's "
                                 "h5clear -s removes the mark)") from exc
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
    format_version : int
        1 or 2.
    signal_attrs : dict
        Version 2: the gate and calibration attributes of ``samples/signal`` present
        (:data:`fringe.io.runformat.SIGNAL_ATTRS`); empty for version 1.
    weighted : bool
        Version 2: the file has a ``samples/weight`` channel (read as channel ``"weight"``).
    being_written : bool
        A writer holds the file in SWMR mode (opened with ``while_written``): the samples are
        the flushed part, ``n_samples`` the shortest flushed length of the sample datasets;
        ``flushed_lengths`` holds each dataset's.
    """

    def __init__(self, path: str | os.PathLike, *, check_values: bool = True,
                 chunk_samples: int = DEFAULT_CHUNK_SAMPLES, while_written: bool = False):
        self.path = os.fspath(path)
        self._file, self.being_written = _open_hdf5(self.path, while_written)
        self.flushed_lengths: dict[str, int] = {}
        self._values_checked = False
        try:
            with self._guard():
                self._validate_layout()
                if check_values:
                    checked = CORE_CHANNELS + ((WEIGHT_CHANNEL,) if self.weighted else ())
                    for _ in self._chunks(_check_chunk_size(chunk_samples), checked,
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
        """Turn HDF5 read failures into one-line errors.

        h5py raises OSError, or KeyError when an object header is damaged; only h5py calls run
        inside this guard.
        """
        try:
            yield
        except (OSError, RuntimeError, KeyError) as exc:
            logger.debug("HDF5 error reading %s: %s", self.path, exc)
            raise InputFileError(self.path, "file", _CORRUPT) from exc

    def _group(self, name: str, what: str) -> h5py.Group:
        obj = self._get(self._file, name, name, missing=f"missing group; expected {what}")
        if not isinstance(obj, h5py.Group):
            raise self._err(name, "expected a group, got a dataset")
        return obj

    def _get(self, group: h5py.Group, key: str, label: str, missing: str | None = None):
        """``group[key]``, refused (one line) unless its data are stored in this file.

        ``missing``: the refusal of a name ``group`` lacks (default: h5py's KeyError, which
        the guard reports as a damaged file).
        """
        link = group.get(key, getlink=True)
        if link is None and missing is not None:
            raise self._err(label, missing)
        if isinstance(link, h5py.ExternalLink):
            raise self._err(label, f"expected an object stored in this file, got an external "
                            f"link to {link.path!r} in {link.filename!r} ({_WHY_LOCAL})")
        return self._local(group[key], label)

    def _local(self, obj, label: str):
        """``obj`` if its data are stored in this file; else the one-line refusal.

        Refused: an object of another file (reached through an external link), a virtual
        dataset, a dataset with external raw storage. The fit's SHA-256 covers this file only.
        """
        why = _WHY_LOCAL
        # the file of obj's id, without building an h5py.File for it (obj.file does)
        if h5py.h5i.get_file_id(obj.id).fileno != self._file.id.fileno:
            raise self._err(label, f"expected an object stored in this file, got a link that "
                            f"leads into another file ({why})")
        if isinstance(obj, h5py.Dataset):
            if obj.is_virtual:
                raise self._err(label, f"expected data stored in this file, got a virtual "
                                f"dataset mapped from other files ({why})")
            if obj.external:
                raise self._err(label, f"expected data stored in this file, got a dataset "
                                f"with external raw storage ({why})")
        return obj

    def _attr(self, obj, label: str, name: str, what: str):
        try:
            return obj.attrs[name]
        except KeyError:
            if name in obj.attrs:            # there, but unreadable: the guard's refusal
                raise
        raise self._err(label, f"missing attribute; expected {what}")

    def _validate_layout(self) -> None:
        f = self._file
        fmt = plain(self._attr(f, "fringe_format", "fringe_format",
                               f"{FORMAT_NAME!r} (a fringe run file)"))
        if not isinstance(fmt, str) or fmt != FORMAT_NAME:
            raise self._err("fringe_format", f"expected {FORMAT_NAME!r}, got {show(fmt)}")
        versions = " or ".join(map(str, READABLE_VERSIONS))
        version = plain(self._attr(f, "fringe_format_version", "fringe_format_version",
                                   f"the integer {versions}"))
        if isinstance(version, bool) or not isinstance(version, int) \
                or version not in READABLE_VERSIONS:
            raise self._err("fringe_format_version", f"expected the integer {versions} (this "
                            f"fringe reads run-file versions {versions}), got {show(version)}")
        self.format_version: int = version
        site = self._group("site", "attributes latitude_deg and longitude_deg")
        self.site: Site = check_site(dict(site.attrs), self._err)
        apparatus = self._group("apparatus", "an attribute 'kind'")
        self.apparatus: dict = check_apparatus(dict(apparatus.attrs), self._err)
        self._validate_samples(self._group("samples", "datasets time, azimuth and signal"))
        extra = [k for k in f if k not in RESERVED_GROUPS]
        self.extra_groups: tuple[str, ...] = tuple(
            k for k in extra if isinstance(self._get(f, k, k), h5py.Group))

    def _units(self, ds: h5py.Dataset, label: str, allowed: Sequence[str]) -> str:
        shown = " or ".join(repr(u) for u in allowed)
        value = plain(self._attr(ds, f"{label}.units", "units", shown))
        if not isinstance(value, str) or value not in allowed:
            raise self._err(f"{label}.units", f"expected {shown}, got {show(value)}")
        return value

    def _check_length(self, name: str, ds: h5py.Dataset, label: str) -> None:
        """Every dataset as long as samples/time; a file being written: note each length."""
        if self.being_written:
            ds.refresh()           # the extent the writer has flushed
            self.flushed_lengths[name] = int(ds.shape[0])
        elif name == "time":
            self.n_samples = int(ds.shape[0])
            if self.n_samples == 0:
                raise self._err(label, "expected at least one sample, got an empty dataset")
        elif ds.shape[0] != self.n_samples:
            raise self._err(label, f"expected the length of samples/time "
                            f"({self.n_samples}), got {ds.shape[0]}")

    def _validate_samples(self, samples: h5py.Group) -> None:
        self._datasets: dict[str, h5py.Dataset] = {}
        what = {"time": "seconds since samples/time.epoch_utc",
                "azimuth": "the azimuth of path 1 from north toward east",
                "signal": "the recorded signal"}
        for name in CORE_CHANNELS:
            if name not in samples:
                raise self._err(f"samples/{name}", f"missing dataset; expected {what[name]}")
        self.weighted: bool = self.format_version >= 2 and WEIGHT_CHANNEL in samples
        core = CORE_CHANNELS + ((WEIGHT_CHANNEL,) if self.weighted else ())
        names = list(core) + sorted(k for k in samples if k not in core)
        for name in names:
            label = f"samples/{name}"
            ds = self._get(samples, name, label)
            if not isinstance(ds, h5py.Dataset):
                raise self._err(label, "expected a one-dimensional dataset, got a group")
            if ds.shape is None:  # an HDF5 null dataspace (h5py.Empty)
                raise self._err(label, "expected a one-dimensional dataset, got an empty "
                                "(null) dataspace")
            if len(ds.shape) != 1:
                raise self._err(label, f"expected a one-dimensional dataset, got shape "
                                f"{tuple(ds.shape)}")
            self._check_length(name, ds, label)
            _check_dtype(ds.dtype, name, lambda exp, lab=label: self._err(lab, exp))
            self._datasets[name] = ds
        if self.being_written:         # consistent: the shortest flushed dataset
            self.n_samples = min(self.flushed_lengths.values())
            if self.n_samples == 0:
                raise self._err("samples", "expected at least one flushed sample in every "
                                "dataset (the writer has flushed none in some yet)")
        ds = None             # the loop's last handle (the datasets are reopened below)
        if not self.being_written:
            self._without_chunk_cache(samples)
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
        self.signal_attrs: dict = ({} if self.format_version < 2 else check_signal_attrs(
            {k: v for k, v in self._datasets["signal"].attrs.items()}, self._err))
        if self.weighted:
            self._units(self._datasets[WEIGHT_CHANNEL], f"samples/{WEIGHT_CHANNEL}", ("1",))
        self.aux_channels: dict[str, str] = {}
        for name in names[len(core):]:
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

    def _without_chunk_cache(self, samples: h5py.Group) -> None:
        """Reopen the validated chunked datasets without filters with no chunk cache.

        Stage 1 reads each sample once, in long runs: HDF5 then reads straight into the
        caller's buffer instead of through its cache (on this project's machine, opening a
        2-day record and reading its three channels took 9.3 ms with h5py's default cache and
        1.8 ms without; docs/performance.md). Compressed datasets keep the cache, which saves
        decompressing a chunk per read.
        """
        old, self._datasets = self._datasets, {}
        for name in list(old):
            ds = old.pop(name)
            if ds.chunks is not None and not ds.id.get_create_plist().get_nfilters():
                # HDF5 takes a dataset's cache settings when it opens it: drop the open
                # handle (the last reference) before opening it again
                del ds
                dapl = h5py.h5p.create(h5py.h5p.DATASET_ACCESS)
                dapl.set_chunk_cache(521, 0, 0.75)      # slots (HDF5's default), bytes, w0
                ds = h5py.Dataset(h5py.h5d.open(samples.id, name.encode(), dapl))
            self._datasets[name] = ds

    # -- reading ---------------------------------------------------------------------------
    @property
    def channels(self) -> tuple[str, ...]:
        """Names of every channel: time, azimuth, signal, [weight,] then the auxiliary ones."""
        return CORE_CHANNELS + ((WEIGHT_CHANNEL,) if self.weighted else ()) \
            + tuple(self.aux_channels)

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
                    if self.weighted and WEIGHT_CHANNEL in out:
                        check_weight_values(out[WEIGHT_CHANNEL], i)
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

    def load(self, channels: Sequence[str] = CORE_CHANNELS) -> LoadedRun:
        """The channels read whole into memory, read back like this file (:class:`LoadedRun`)."""
        return LoadedRun(self, self._check_channels(channels))

    def read_all(self, channels: Sequence[str] = CORE_CHANNELS) -> dict[str, NDArray[np.float64]]:
        """Read whole channels (for small files): name -> float64 array of shape (n_samples,).

        Azimuth is returned in radians; see :meth:`iter_chunks` for the channel names.
        """
        names = self._check_channels(channels)
        chunks = self._chunks(self.n_samples, names, 0, self.n_samples,
                              check=not self._values_checked, copy=False)
        return next(chunks)

    def samples_sha256(self, start: int = 0, stop: int | None = None) -> str:
        """SHA-256 identifying samples [start, stop) of every channel (hexadecimal string).

        The digest of the lines ``NAME DIGEST`` (one per channel of :attr:`channels`, in that
        order), DIGEST being the SHA-256 of the channel's values as read (float64,
        little-endian; azimuth in radians). Unlike :func:`sha256` of the file's bytes, it stays
        the same while a writer appends after ``stop`` (the identity ``fringe watch`` records
        for the part of a growing file it took).
        """
        digests = {name: hashlib.sha256() for name in self.channels}
        for chunk in self.iter_chunks(channels=self.channels, start=start, stop=stop):
            for name, values in chunk.items():
                digests[name].update(np.ascontiguousarray(values, "<f8").tobytes())
        lines = "".join(f"{name} {d.hexdigest()}\n" for name, d in digests.items())
        return hashlib.sha256(lines.encode()).hexdigest()

    def read_group_attrs(self, name: str, only: Sequence[str] | None = None) -> dict:
        """Attributes of group ``name`` (e.g. ``"truth"``), as a dict.

        Scalars come back as Python numbers/strings, arrays as numpy arrays. ``only``: just
        these attributes, those of them the group has (each read costs tens of microseconds).
        """
        with self._guard():
            group = self._group(name, "a group of that name")
            attrs = group.attrs
            if only is None:
                return {k: plain(v) for k, v in attrs.items()}
            return {k: plain(attrs[k]) for k in only if k in attrs}

    def read_group_datasets(self, name: str) -> dict[str, np.ndarray]:
        """Datasets directly inside group ``name`` (for small extra groups), read whole."""
        with self._guard():
            group = self._group(name, "a group of that name")
            out = {}
            for key in group:
                ds = self._get(group, key, f"{name}/{key}")
                if isinstance(ds, h5py.Dataset):
                    try:
                        text = h5py.check_string_dtype(ds.dtype) is not None
                        out[key] = np.asarray(ds.asstr()[()] if text else ds[()])
                    except UnicodeDecodeError:  # strings that are not UTF-8: left as bytes
                        out[key] = np.asarray(ds[()])
            return out

    def to_dict(self) -> dict:
        """The validated metadata in plain JSON types (for ``fringe inspect``)."""
        extra = {}
        if self.signal_attrs:
            extra["signal_attrs"] = dict(self.signal_attrs)
        if self.weighted:
            extra["weighted"] = True
        return {"path": self.path, "fringe_format_version": self.format_version,
                "site": self.site.to_dict(), "apparatus": dict(self.apparatus),
                "epoch_utc": self.epoch_utc, "n_samples": self.n_samples,
                "time_first_s": self.time_first_s, "time_last_s": self.time_last_s,
                "signal_units": self.signal_units, "azimuth_units": self.azimuth_units,
                "aux_channels": dict(self.aux_channels), "extra_groups": list(self.extra_groups),
                **extra, **({"being_written": True} if self.being_written else {})}


class LoadedRun:
    """Channels of an open run file read whole (value-checked), read back like the file.

    For a short record read by several passes (stage 1's survey and its ranges): one read of
    each channel instead of one per pass. :meth:`iter_chunks` takes the arguments of
    :meth:`RunFile.iter_chunks` and yields the same values; without ``copy`` the arrays are
    views of the loaded ones (never overwritten; do not write into them). Create it with
    :meth:`RunFile.load`.

    Attributes
    ----------
    path, n_samples, aux_channels, signal_attrs, weighted, being_written
        Those of the run file (see :class:`RunFile`).
    channels : tuple of str
        The channels loaded.
    """

    def __init__(self, run: RunFile, channels: Sequence[str]):
        self.path = run.path
        self.n_samples = run.n_samples
        self.aux_channels = dict(run.aux_channels)
        self.signal_attrs = dict(run.signal_attrs)
        self.weighted = run.weighted
        self.being_written = run.being_written
        self.channels = tuple(channels)
        self._data = run.read_all(self.channels)

    def __repr__(self) -> str:
        return (f"LoadedRun({self.path!r}, n_samples={self.n_samples}, "
                f"channels={self.channels})")

    def iter_chunks(self, chunk_samples: int = DEFAULT_CHUNK_SAMPLES,
                    channels: Sequence[str] = CORE_CHANNELS, *, start: int = 0,
                    stop: int | None = None,
                    copy: bool = False) -> Iterator[dict[str, NDArray[np.float64]]]:
        """Iterate over samples [start, stop) in chunks, as :meth:`RunFile.iter_chunks`."""
        chunk = _check_chunk_size(chunk_samples)
        names = (channels,) if isinstance(channels, str) else tuple(channels)
        for name in names:
            if name not in self._data:
                raise ConfigError(f"{self.path}: channels: expected names among "
                                  f"{', '.join(self.channels)}, got {name!r}")
        stop = self.n_samples if stop is None else stop
        if not 0 <= start <= stop <= self.n_samples:
            raise ConfigError(f"{self.path}: start, stop: expected 0 <= start <= stop <= "
                              f"{self.n_samples}, got {start}, {stop}")
        for i in range(start, stop, chunk):
            sl = slice(i, min(i + chunk, stop))
            yield {name: self._data[name][sl].copy() if copy else self._data[name][sl]
                   for name in names}


def _check_dtype(dtype: np.dtype, name: str, err) -> None:
    """Check a channel's storage type, raising ``err(expected)`` if it is not allowed.

    Time float64 or integer; azimuth float64; signal float32/float64; auxiliary channels any
    integer or float32/float64.
    """
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
