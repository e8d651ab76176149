"""A run file written in place and readable while it grows: :class:`LiveRunWriter`.

For acquisition code whose run file ``fringe watch`` follows while it is recorded. The file is
created under its final name in our run format (docs/run-format.md) with extendable, chunked
sample datasets; the writer then enters HDF5's single-writer/multiple-reader (SWMR) mode, in
which readers may open the file (:func:`fringe.io.runreader.open_run` with
``while_written=True``) while samples are appended. Samples become visible to readers when
:meth:`LiveRunWriter.flush` returns. On :meth:`LiveRunWriter.close` the file is an ordinary run
file that ``fringe fit`` reads.

Unlike :class:`fringe.io.runwriter.RunWriter` (temporary name, renamed when whole), the file
exists under its final name from the start: that is the point. Readers that do not follow files
being written (every fringe command but ``watch``) refuse it until it is closed, since HDF5
marks it open for writing.

Order of a flush, so that a reader never takes a sample before all its channels are on disk:
the channels other than time are written and flushed first, ``samples/time`` last; an unflushed
time reads as NaN (the datasets' fill value), which no reader takes as a sample.
"""

from __future__ import annotations

import contextlib
import logging
import os
from collections.abc import Mapping

import h5py
import numpy as np

from fringe.errors import output_exists
from fringe.io.atomic import output_error, real_target, signals_deferred
from fringe.io.runwriter import RunWriter

__all__ = ["LiveRunWriter"]

logger = logging.getLogger(__name__)

#: Default chunk of the sample datasets, samples (2**14 float64 = 128 KiB): small enough that a
#: flush of a few turns does not rewrite a large chunk each time, large enough to read fast.
LIVE_CHUNK_SAMPLES = 2**14


class LiveRunWriter(RunWriter):
    """Append samples to a run file that readers may follow while it grows (module docstring).

    Parameters
    ----------
    path : str or os.PathLike
        The run file; it must not exist (it is created under this name at once).
    site, apparatus, epoch_utc, signal_units, azimuth_units, aux_channels, signal_attrs, weighted
        As for :class:`fringe.io.runwriter.RunWriter`.
    groups : mapping of str to (attrs, datasets), optional
        Extra root groups (e.g. ``settings``), written at creation: SWMR mode allows no new
        objects or attributes afterwards.
    chunk_samples : int
        HDF5 chunk length of the sample datasets.

    Notes
    -----
    Use it as a context manager. Leaving the ``with`` block, normally or by an exception, closes
    the file with the samples appended so far (an acquisition keeps what it recorded); a file
    with no sample is removed. Should a write fail half-way (a full disk), the datasets are cut
    to their shortest length on close, so the closed file stays a valid run file.

    Examples
    --------
    >>> with LiveRunWriter("day014.h5", site={"latitude_deg": 47.6, "longitude_deg": 11.4},
    ...                    apparatus={"kind": "cavity-pair", "carrier_hz": 2.82e14},
    ...                    epoch_utc="2027-05-14T00:00:00Z", signal_units="Hz") as w:
    ...     for t_s, azimuth_rad, beat_hz in blocks_from_the_counter():   # doctest: +SKIP
    ...         w.append(t_s, azimuth_rad, beat_hz)
    ...         w.flush()                       # now visible to fringe watch
    """

    def __init__(self, path, *, site, apparatus, epoch_utc: str, signal_units: str,
                 azimuth_units: str = "rad", aux_channels: Mapping[str, str] | None = None,
                 signal_attrs: Mapping | None = None, weighted: bool = False,
                 groups: Mapping | None = None, chunk_samples: int = LIVE_CHUNK_SAMPLES):
        super().__init__(path, site=site, apparatus=apparatus, epoch_utc=epoch_utc,
                         signal_units=signal_units, azimuth_units=azimuth_units,
                         aux_channels=aux_channels, chunk_samples=chunk_samples,
                         signal_attrs=signal_attrs, weighted=weighted)
        self._extra = dict(groups or {})
        self.n_flushed = 0

    def __enter__(self) -> LiveRunWriter:
        target = real_target(self.path)
        try:
            self._file = h5py.File(target, "x", libver="latest")   # "x": never over a file
        except FileExistsError:
            raise output_exists(self.path) from None
        except OSError as exc:
            if os.path.exists(target):
                raise output_exists(self.path) from None
            raise output_error(self.path, exc) from None
        self._tmp = os.fspath(target)          # what abort removes while no sample is in it
        try:
            self._write_layout(self._file, fillvalue=np.nan)
            for name, (attrs, datasets) in self._extra.items():
                self.write_group(name, attrs, datasets)
            self._file.swmr_mode = True
        except OSError as exc:
            self.abort()
            raise output_error(self.path, exc) from None
        except BaseException:
            self.abort()
            raise
        return self

    def __exit__(self, exc_type, exc, tb) -> None:
        self.close()

    def write_group(self, name: str, attrs: Mapping, datasets: Mapping | None = None) -> None:
        """An extra root group; only before SWMR mode starts (pass ``groups=`` instead)."""
        if self._file is not None and self._file.swmr_mode:
            raise self._config_err("group", "expected extra groups at creation (groups=): a "
                                   "file in SWMR mode takes no new objects")
        super().write_group(name, attrs, datasets)

    def append(self, time_s, azimuth, signal, *, weight=None, **aux) -> None:
        """Append samples (as :meth:`fringe.io.runwriter.RunWriter.append`); flush to show them.

        Time goes last, so a dataset grows only after the channels before it were written.
        """
        f = self._require_open()
        arrays, last = self._checked(time_s, azimuth, signal, weight, aux)
        m = arrays["time"].size
        if m == 0:
            return
        n = self.n_samples
        try:
            for name in [*(k for k in arrays if k != "time"), "time"]:
                ds = f["samples"][name]
                ds.resize((n + m,))
                ds.write_direct(arrays[name], dest_sel=np.s_[n:n + m])
        except OSError as exc:
            raise output_error(self.path, exc) from None
        self.n_samples, self._last_t = n + m, last

    def flush(self) -> None:
        """Make the samples appended so far visible to readers (channels first, time last)."""
        f = self._require_open()
        try:
            names = [k for k in f["samples"] if k != "time"] + ["time"]
            for name in names:
                f["samples"][name].flush()
            f.flush()
        except OSError as exc:
            raise output_error(self.path, exc) from None
        self.n_flushed = self.n_samples

    def close(self) -> None:
        """Close the file: an ordinary run file of the samples appended (none: removed)."""
        if self._file is None:
            return
        if self.n_samples == 0:
            self.abort()
            raise self._output_err("samples", "expected at least one sample, none appended "
                                   "(the file was removed)")
        try:
            with signals_deferred():
                samples = self._file["samples"]
                shortest = min(samples[k].shape[0] for k in samples)
                for k in samples:                  # a write that failed half-way
                    if samples[k].shape[0] != shortest:
                        samples[k].resize((shortest,))
                self._file.close()
        except OSError as exc:
            raise output_error(self.path, exc) from None
        finally:
            self._file, self._tmp = None, None

    def abort(self) -> None:
        """Close and remove the file (only while no sample was appended; else :meth:`close`)."""
        if self.n_samples:
            self.close()
            return
        with signals_deferred():
            if self._file is not None:
                with contextlib.suppress(OSError, RuntimeError):
                    self._file.close()
                self._file = None
            if self._tmp is not None:
                with contextlib.suppress(FileNotFoundError):
                    os.remove(self._tmp)
                self._tmp = None

