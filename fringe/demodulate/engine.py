"""Chunk-wise passes over a run file, locally or on a dask.distributed cluster.

:func:`survey` reads the start of a record (reference angle, turn period, gap threshold).
:func:`demodulate_range` runs stage 1 on the blocks that *start* in a sample range, reading
ahead until the last of them is complete; it opens the file itself, so it runs unchanged in a
dask worker (h5py objects are not picklable). :func:`run_stage1` splits the record into ranges
and runs them with the local engine (a plain loop: the fastest on one machine) or with dask
(``engine="dask"``, ``scheduler`` = a scheduler address, or a ``distributed.Client``).
"""

from __future__ import annotations

import dataclasses
import logging
import os
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from fringe.demodulate.blocks import demodulate_blocks, turn_boundaries
from fringe.demodulate.settings import DemodSettings, leak_terms
from fringe.demodulate.turn_store import Scratch, SpillingTurnBuilder, TurnStore
from fringe.demodulate.turns import TurnTable
from fringe.errors import ConfigError, FitError, InputFileError
from fringe.io.runreader import open_run

logger = logging.getLogger(__name__)

#: Samples per range of stage 1 (transient memory about 50 bytes per sample: the channels read,
#: theta with its cos and sin, and the boundary flags; two ranges are in flight).
RANGE_SAMPLES = 1 << 17

#: Longest block read ahead, samples (or 256 turns, if more): a table that stops turning with
#: no time gap would otherwise make one block of the rest of the record, all of it in memory.
MAX_BLOCK_SAMPLES = 1 << 21

#: Registry of the engines of stage 1 (also the CLI's choices).
ENGINES = ("local", "dask")


@dataclass(frozen=True)
class RecordInfo:
    """What stage 1 needs to know about a record before splitting it."""

    path: str
    n_samples: int
    theta0_rad: float
    turn_period_s: float
    max_gap_s: float
    aux_channels: tuple[str, ...]
    samples_per_turn: float = 16384.0

    @property
    def lookahead_samples(self) -> int:
        """Samples read ahead at a time to complete a range's last block (about four turns)."""
        return int(min(max(4.0 * self.samples_per_turn, 64), 1 << 20))

    def expected_blocks(self) -> int:
        """About how many blocks the record holds (full turns, plus a margin for gaps)."""
        return int(1.05 * self.n_samples / max(self.samples_per_turn, 1.0)) + 64


def survey(path: str, settings: DemodSettings, aux_channels: tuple[str, ...] = ()
           ) -> RecordInfo:
    """Reference angle, turn period and gap threshold from the start of the record."""
    with open_run(path, check_values=False) as run:      # each range checks what it reads
        n = run.n_samples
        first = next(run.iter_chunks(min(n, 1 << 16), ("time", "azimuth"), copy=True))
        for name in aux_channels:
            if name not in run.aux_channels:
                raise ConfigError(f"{path}: samples/{name}: no such auxiliary channel "
                                  f"(have {', '.join(run.aux_channels) or 'none'})")
    t, az = first["time"], first["azimuth"]
    theta = np.unwrap(np.pi - az)
    span_t = t[-1] - t[0]
    span_theta = abs(theta[-1] - theta[0])
    if span_t <= 0 or span_theta < np.pi:
        raise FitError(f"{path}: samples/azimuth: the table turns less than half a turn in the "
                       f"first {t.size} samples; cannot demodulate a non-rotating record")
    dt = np.diff(t)
    rate = np.median(np.abs(np.diff(theta))[dt > 0] / dt[dt > 0])   # robust to long gaps
    period = 2 * np.pi / rate if rate > 0 else np.inf
    if not np.isfinite(period):
        raise FitError(f"{path}: samples/azimuth: cannot estimate the turn period from the "
                       "first samples")
    max_gap = settings.max_gap_s if settings.max_gap_s is not None else 0.25 * period
    return RecordInfo(path=str(path), n_samples=n, theta0_rad=float(theta[0] % (2 * np.pi)),
                      turn_period_s=float(period), max_gap_s=float(max_gap),
                      aux_channels=tuple(aux_channels),
                      samples_per_turn=float(period / max(float(np.median(dt)), 1e-9)))


def _read(run, start: int, stop: int, channels) -> dict:
    """Samples [start, stop) of the channels, value-checked.

    One chunk spans the whole range and iter_chunks allocates its buffers per call, so the
    arrays it yields are ours (no copy).
    """
    for chunk in run.iter_chunks(max(stop - start, 1), channels, start=start, stop=stop):
        return chunk
    return {c: np.zeros(0) for c in channels}


def range_samples_and_blocks(info: RecordInfo, start: int, stop: int, run=None
                             ) -> tuple[dict, np.ndarray] | None:
    """Samples of the blocks starting in [start, stop), read ahead to complete the last one.

    ``run`` is an open :class:`~fringe.io.runreader.RunFile` of ``info.path`` to read from (it
    may be shared between threads: h5py serialises its calls); None opens the file here.
    Returns (channel -> array, block start indices into those arrays), or None when no block
    starts in the range.
    """
    if run is None:
        with open_run(info.path, check_values=False) as own:
            return range_samples_and_blocks(info, start, stop, own)
    channels = ("time", "azimuth", "signal") + info.aux_channels
    n = info.n_samples
    pos = min(stop + info.lookahead_samples, n)
    lo = max(start - 1, 0)
    data = _read(run, lo, pos, channels)
    t, th = data["time"], np.pi - data["azimuth"]
    if start > 0:
        bnd = turn_boundaries(th[1:], info.theta0_rad, t[1:], info.max_gap_s,
                              theta_prev=th[0], t_prev=t[0])
        data = {c: v[1:] for c, v in data.items()}
    else:
        bnd = turn_boundaries(th, info.theta0_rad, t, info.max_gap_s)
        bnd[0] = True
    starts = np.flatnonzero(bnd)                       # sample indices after `start`
    inside = starts[starts < stop - start]
    if inside.size == 0:
        return None
    after = starts[starts >= stop - start]
    parts, length = [data], data["time"].size
    longest = max(MAX_BLOCK_SAMPLES, 64 * info.lookahead_samples)
    while after.size == 0 and pos < n:                 # the last block is longer: read on
        if length - int(inside[-1]) > longest:
            raise InputFileError(
                info.path, "samples/azimuth",
                f"a turn within {longest} samples; from sample {start + int(inside[-1])} the "
                "table does not pass its starting angle (stopped turning?): cut the record "
                "there or split it")
        more = _read(run, pos, min(pos + info.lookahead_samples, n), channels)
        prev = parts[-1]
        hit = np.flatnonzero(turn_boundaries(
            np.pi - more["azimuth"], info.theta0_rad, more["time"], info.max_gap_s,
            theta_prev=np.pi - prev["azimuth"][-1], t_prev=prev["time"][-1]))
        after = hit + length
        parts.append(more)
        length += more["time"].size
        pos += more["time"].size
    if len(parts) > 1:
        data = {c: np.concatenate([p[c] for p in parts]) for c in channels}
    end = int(after[0]) if after.size else length
    first = int(inside[0])
    return {c: v[first:end] for c, v in data.items()}, inside - first


def demodulate_range(info: RecordInfo, settings: DemodSettings, start: int, stop: int,
                     run=None) -> TurnTable:
    """Stage 1 on the blocks starting in samples [start, stop) of ``info.path``.

    ``run`` is an open run file to read from, see :func:`range_samples_and_blocks`; None opens
    the file here. Returns the turn table of those blocks (empty if none starts in the range).
    """
    got = range_samples_and_blocks(info, start, stop, run)
    if got is None:
        return _empty(settings, info)
    data, block_starts = got
    return demodulate_blocks(data["time"], data["azimuth"], data["signal"], block_starts,
                             settings, aux={c: data[c] for c in info.aux_channels})


def _empty(settings: DemodSettings, info: RecordInfo) -> TurnTable:
    p = settings.n_terms
    z = np.zeros(0)
    return TurnTable(t_mid_s=z, t_start_s=z, t_stop_s=z, n_valid=np.zeros(0, np.int64),
                     coef=np.zeros((0, p)), ninv_2=np.zeros((0, 2, 2)), residual_rms=z,
                     angle_gap_deg=z, status=np.zeros(0, np.int8), settings=settings,
                     aux={c: np.zeros((0, p)) for c in info.aux_channels},
                     leak=np.zeros((0, 2, len(leak_terms(settings)))))


def ranges(n_samples: int, range_samples: int = RANGE_SAMPLES) -> list[tuple[int, int]]:
    """Split samples [0, n_samples) into consecutive [start, stop) ranges.

    Parameters
    ----------
    n_samples : int
        Samples in the record.
    range_samples : int
        Samples per range; the last range holds the remainder.

    Returns
    -------
    list of (int, int)
        The (start, stop) sample indices of each range, in order.
    """
    return [(a, min(a + range_samples, n_samples)) for a in range(0, n_samples, range_samples)]


def run_stage1(path: str, settings: DemodSettings, *, aux_channels: tuple[str, ...] = (),
               engine: str = "local", scheduler=None, range_samples: int = RANGE_SAMPLES,
               progress: Callable[[int], None] | None = None) -> tuple[TurnTable, RecordInfo]:
    """Demodulate the whole record; returns the turn table (glitch rule applied) and info."""
    store, info = stage1_store(path, settings, aux_channels=aux_channels, engine=engine,
                               scheduler=scheduler, range_samples=range_samples,
                               progress=progress)
    return store.load(), info


def stage1_store(path: str, settings: DemodSettings, *, aux_channels: tuple[str, ...] = (),
                 engine: str = "local", scheduler=None, range_samples: int = RANGE_SAMPLES,
                 progress: Callable[[int], None] | None = None, scratch: Scratch | None = None
                 ) -> tuple[TurnStore, RecordInfo]:
    """As :func:`run_stage1`, but the table goes to a turn store; returns (store, info).

    The store is a :class:`~fringe.demodulate.turn_store.TurnStore`. With a ``scratch``
    directory, a record of more than SEGMENT_TURNS turns is kept in scratch files instead of in
    memory (:mod:`fringe.demodulate.turn_store`).
    """
    if engine not in ENGINES:
        raise ConfigError(f"engine: expected one of {', '.join(ENGINES)}, got {engine!r}")
    info = survey(path, settings, aux_channels)
    parts = ranges(info.n_samples, range_samples)
    builder = SpillingTurnBuilder(settings, info.expected_blocks(), scratch)
    if engine == "local":
        _run_local(info, settings, parts, progress, builder.append)
    else:
        _run_dask(info, settings, parts, scheduler, builder.append)
        if progress:
            progress(info.n_samples)
    store = builder.finish()
    store.apply_glitch_rule()
    logger.info("stage 1: %s", store.counts())
    return store, info


#: Threads of the local engine (numpy and HDF5 reads release the GIL for the heavy parts).
LOCAL_THREADS = min(2, os.cpu_count() or 1)


def _run_local(info, settings, parts, progress, collect):
    """Run the ranges in order, two at a time in threads.

    Each range's table goes to ``collect`` in range order (deterministic) as soon as it and its
    predecessors are done.
    """
    from concurrent.futures import ThreadPoolExecutor

    with open_run(info.path, check_values=False) as run:
        def one(ab):
            table = demodulate_range(info, settings, *ab, run=run)
            if progress:
                progress(ab[1] - ab[0])
            return table

        if LOCAL_THREADS <= 1 or len(parts) < 2:
            for ab in parts:
                collect(one(ab))
            return
        pool = ThreadPoolExecutor(max_workers=LOCAL_THREADS)
        try:
            for table in pool.map(one, parts):
                collect(table)
        except BaseException:
            # a bad range (or an interrupt) stops the rest at once instead of after every
            # queued range has run
            pool.shutdown(wait=True, cancel_futures=True)
            raise
        pool.shutdown(wait=True)


#: Seconds to wait for a dask scheduler before giving up (dask's own default is 30 s).
SCHEDULER_TIMEOUT_S = 10.0


def _connect(client_class, address):
    """A client of the scheduler at ``address``, or a one-line ConfigError if unreachable."""
    try:
        return client_class(address, timeout=SCHEDULER_TIMEOUT_S)
    except (OSError, TimeoutError, ValueError) as exc:
        reason = " ".join(str(exc).split()) or type(exc).__name__
        if len(reason) > 160:
            reason = reason[:157] + "..."
        raise ConfigError(f"scheduler=ADDRESS: cannot reach a dask scheduler at {address!r} "
                          f"within {SCHEDULER_TIMEOUT_S:g} s ({reason}); check the address "
                          "and that the scheduler is running") from None


def _run_dask(info, settings, parts, scheduler, collect):
    try:
        from distributed import Client
    except ImportError:
        raise ConfigError("engine='dask': needs the 'dask' extra (pip install "
                          "'fringe[dask]')") from None
    if scheduler is None:
        raise ConfigError("engine='dask': needs scheduler=ADDRESS (e.g. tcp://host:8786)")
    own = not isinstance(scheduler, Client)
    client = _connect(Client, scheduler) if own else scheduler
    # the workers resolve a relative path against their own working directory: send the
    # absolute one (on a shared filesystem it names the same file)
    info = dataclasses.replace(info, path=os.path.abspath(info.path))
    try:
        futures = [client.submit(demodulate_range, info, settings, a, b, pure=False)
                   for a, b in parts]
        for future in futures:            # in range order; each result is dropped once joined
            collect(future.result())
            future.release()
    finally:
        if own:
            client.close()
