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
from dataclasses import dataclass, field

import numpy as np

from fringe.demodulate.blocks import azimuth_boundaries, demodulate_blocks, turn_boundaries
from fringe.demodulate.motion import (
    LegCutter,
    check_coverage,
    detect_motion,
    gap_harmonic,
    moving_mask,
    unwrapped_theta,
)
from fringe.demodulate.settings import DemodSettings, leak_terms
from fringe.demodulate.turn_store import Scratch, SpillingTurnBuilder, TurnStore
from fringe.demodulate.turns import TurnTable
from fringe.errors import ConfigError, InputFileError
from fringe.io.fit_sections import Motion
from fringe.io.runreader import open_run

logger = logging.getLogger(__name__)

#: Samples per range of stage 1 (transient memory about 50 bytes per sample: the channels read,
#: theta with its cos and sin, and the boundary flags; two ranges are in flight).
RANGE_SAMPLES = 1 << 17

#: Longest block read ahead, samples (or 256 turns, if more): a table that stops turning with
#: no time gap would otherwise make one block of the rest of the record, all of it in memory.
MAX_BLOCK_SAMPLES = 1 << 21

#: Samples at the start of a record that the survey reads (motion, turn period, reference
#: angle): a record's stage 1 depends on its first SURVEY_SAMPLES samples and the blocks' own.
SURVEY_SAMPLES = 1 << 16

#: Records of at most this many samples, fitted whole with the local engine, are read into
#: memory once (:meth:`fringe.io.runreader.RunFile.load`; about 24 bytes per sample and
#: channel) and split into LOCAL_THREADS equal ranges; longer ones are read range by range.
WHOLE_RECORD_SAMPLES = 1 << 19

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
    #: The counter's (gate_s, gate_kind) from samples/signal (format version 2), or None.
    gate: tuple[float, str] | None = None
    #: The record has a samples/weight channel (format version 2).
    weighted: bool = False
    motion: Motion | None = None
    #: first sample of every block (the leg rule of motions that reverse), else None; left out
    #: of ==, which compares the scalar description (the starts follow from it and the file)
    block_starts: np.ndarray | None = field(default=None, compare=False)
    rest_tolerance_deg: float = 1e-3

    @property
    def channels(self) -> tuple[str, ...]:
        """The channels stage 1 reads: time, azimuth, signal, [weight,] the auxiliary ones."""
        return ("time", "azimuth", "signal") + (("weight",) if self.weighted else ()) \
            + self.aux_channels

    @property
    def excludes_moving(self) -> bool:
        """True when samples not at rest are left out of the block fits (stepped motion)."""
        return self.motion is not None and self.motion.kind == "stepped"

    @property
    def gap_harmonic(self) -> int:
        """The coverage check of the blocks (:func:`fringe.demodulate.motion.gap_harmonic`)."""
        return 1 if self.motion is None else gap_harmonic(self.motion)

    @property
    def lookahead_samples(self) -> int:
        """Samples read ahead at a time to complete a range's last block (about four turns)."""
        return int(min(max(4.0 * self.samples_per_turn, 64), 1 << 20))

    def expected_blocks(self) -> int:
        """About how many blocks the record holds (full turns, plus a margin for gaps)."""
        return int(1.05 * self.n_samples / max(self.samples_per_turn, 1.0)) + 64


def survey(path: str, settings: DemodSettings, aux_channels: tuple[str, ...] = (), *,
           run=None) -> RecordInfo:
    """Motion, reference angle, turn period and gap threshold from the start of the record.

    The motion is detected from the first samples (:func:`fringe.demodulate.motion
    .detect_motion`); for a motion that reverses, the blocks of the whole record are cut here
    (the leg rule, one streamed pass over time and azimuth). ``run``: the record already open
    (a :class:`~fringe.io.runreader.RunFile` of ``path``), else it is opened here.
    """
    if run is None:
        with open_run(path, check_values=False) as own:   # each range checks what it reads
            return survey(path, settings, aux_channels, run=own)
    n = run.n_samples
    # one chunk: its buffers are this call's (a RunFile allocates them per call; a LoadedRun
    # yields views of its arrays, which nothing here writes into), so no copy is needed
    first = next(run.iter_chunks(min(n, SURVEY_SAMPLES), ("time", "azimuth")))
    for name in aux_channels:
        if name not in run.aux_channels:
            raise ConfigError(f"{path}: samples/{name}: no such auxiliary channel "
                              f"(have {', '.join(run.aux_channels) or 'none'})")
    attrs, weighted = run.signal_attrs, run.weighted
    t, az = first["time"], first["azimuth"]
    theta = unwrapped_theta(az)
    dt = np.diff(t)
    median_dt = float(np.median(dt)) if dt.size else float("nan")
    motion = detect_motion(t, az, settings, source=str(path), theta_rad=theta, dt_s=dt,
                           median_dt_s=median_dt)
    check_coverage(motion, t, az, settings, source=str(path))
    period = motion.turn_period_s
    max_gap = settings.max_gap_s if settings.max_gap_s is not None else 0.25 * period
    starts = _leg_block_starts(run, max_gap) if motion.reverses else None
    gate = (attrs["gate_s"], attrs["gate_kind"]) if "gate_s" in attrs else None
    return RecordInfo(path=str(path), n_samples=n, theta0_rad=reference_angle(theta),
                      turn_period_s=float(period), max_gap_s=float(max_gap),
                      aux_channels=tuple(aux_channels),
                      samples_per_turn=float(period / max(median_dt, 1e-9)),
                      gate=gate, weighted=weighted,
                      motion=motion, block_starts=starts,
                      rest_tolerance_deg=settings.rest_tolerance_deg)


def reference_angle(theta_rad: np.ndarray) -> float:
    """theta0 of the turn rule (rad, in [0, 2 pi)): where the first block starts.

    The first sample's theta, except for a table turning toward smaller theta (clockwise seen
    from above, C6), where it is moved half the first step back against the motion: a block
    starts where theta - theta0 crosses a multiple of 2 pi, and for a decreasing theta the
    crossing at the first sample itself would otherwise cut a block of that one sample and
    start every turn one sample late (a hand-read turn of marks would lose its first mark
    to the turn before).
    """
    steps = np.diff(theta_rad)
    moves = steps != 0
    first = int(np.argmax(moves)) if moves.size else 0      # the first step that moves
    theta0 = float(theta_rad[0])
    if moves.size and moves[first] and steps[first] < 0:
        theta0 += 0.5 * float(-steps[first])
    return theta0 % (2 * np.pi)


def _leg_block_starts(run, max_gap_s: float) -> np.ndarray:
    """The leg rule's block starts over the whole record, streamed chunk by chunk."""
    cutter = LegCutter(max_gap_s)
    parts = [cutter.feed(ch["time"], ch["azimuth"])
             for ch in run.iter_chunks(channels=("time", "azimuth"))]
    return np.concatenate(parts) if parts else np.zeros(1, np.int64)


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
    starts in the range. For a stepped motion the channels include ``moving``, True for the
    samples not at rest (:func:`fringe.demodulate.motion.moving_mask`, with the neighbours
    outside the range), which the block fits leave out.
    """
    if run is None:
        with open_run(info.path, check_values=False) as own:
            return range_samples_and_blocks(info, start, stop, own)
    channels = info.channels
    if info.block_starts is not None:
        got = _listed_blocks(info, start, stop, run, channels)
    else:
        got = _crossing_blocks(info, start, stop, run, channels)
    if got is None:
        return None
    data, starts, before, after = got
    if info.excludes_moving:
        data["moving"] = moving_mask(data["azimuth"], np.radians(
            info.rest_tolerance_deg), before, after)
    return data, starts


def _listed_blocks(info: RecordInfo, start: int, stop: int, run, channels):
    """Samples of the listed blocks (``info.block_starts``) that start in [start, stop)."""
    bs, n = info.block_starts, info.n_samples
    i0, i1 = np.searchsorted(bs, [start, stop], side="left")
    if i0 == i1:
        return None
    first = int(bs[i0])
    end = int(bs[i1]) if i1 < bs.size else n
    longest = max(MAX_BLOCK_SAMPLES, 64 * info.lookahead_samples)
    if end - first > (i1 - i0) * longest:
        raise InputFileError(info.path, "samples/azimuth",
                             f"blocks within {longest} samples; from sample {first} the table "
                             "neither reverses nor completes a turn (stopped turning?): cut the "
                             "record there or split it")
    lo, hi = max(first - 1, 0), min(end + 1, n)
    data = _read(run, lo, hi, channels)
    az = data["azimuth"]
    before = float(az[0]) if first > 0 else None
    after = float(az[-1]) if end < n else None
    data = {c: v[first - lo:end - lo] for c, v in data.items()}
    return data, (bs[i0:i1] - first).astype(np.int64), before, after


def _crossing_blocks(info: RecordInfo, start: int, stop: int, run, channels):
    """Samples of the blocks of the crossing rule that start in [start, stop).

    Read ahead to complete the last one; also the azimuths of the samples just before and after
    them.
    """
    n = info.n_samples
    pos = min(stop + info.lookahead_samples, n)
    lo = max(start - 1, 0)
    data = _read(run, lo, pos, channels)
    t, az = data["time"], data["azimuth"]
    az_lo = float(az[0]) if start > 0 else None
    if start > 0:
        bnd = azimuth_boundaries(az[1:], info.theta0_rad, t[1:], info.max_gap_s,
                                 azimuth_prev=az[0], t_prev=t[0])
        data = {c: v[1:] for c, v in data.items()}
    else:
        bnd = azimuth_boundaries(az, info.theta0_rad, t, info.max_gap_s)
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
        hit = np.flatnonzero(azimuth_boundaries(
            more["azimuth"], info.theta0_rad, more["time"], info.max_gap_s,
            azimuth_prev=prev["azimuth"][-1], t_prev=prev["time"][-1]))
        after = hit + length
        parts.append(more)
        length += more["time"].size
        pos += more["time"].size
    if len(parts) > 1:
        data = {c: np.concatenate([p[c] for p in parts]) for c in channels}
    end = int(after[0]) if after.size else length
    first = int(inside[0])
    az = data["azimuth"]
    before = float(az[first - 1]) if first > 0 else az_lo
    beyond = float(az[end]) if end < length else None
    return {c: v[first:end] for c, v in data.items()}, inside - first, before, beyond


def last_turn_start(info: RecordInfo, run, start: int, stop: int) -> int | None:
    """The last block start of the crossing rule in (start, stop), or None if there is none.

    The blocks starting in [start, that index) end before it, so they are whole whatever
    follows ``stop``: what :class:`fringe.fit.growing.IncrementalFit` takes of a file still
    being written. A block start depends only on a sample and the one before it, so the search
    reads back from ``stop`` about four turns at a time. Only for records without listed blocks
    (``info.block_starts`` None).
    """
    width = info.lookahead_samples
    pos = stop
    while pos > start + 1:
        lo = max(start, pos - width)
        data = _read(run, lo, pos, ("time", "azimuth"))
        t, th = data["time"], np.pi - data["azimuth"]
        bnd = turn_boundaries(th[1:], info.theta0_rad, t[1:], info.max_gap_s,
                              theta_prev=th[0], t_prev=t[0])
        hit = np.flatnonzero(bnd)
        if hit.size:
            return lo + 1 + int(hit[-1])
        pos = lo + 1
    return None


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
    y = data["signal"]
    aux = {c: data[c] for c in info.aux_channels}
    if "moving" in data:                          # stepped: samples while moving left out
        y = np.where(data["moving"], np.nan, y)
    return demodulate_blocks(data["time"], data["azimuth"], y, block_starts, settings,
                             aux=aux, weight=data.get("weight"), gate=info.gate,
                             gap_harmonic=info.gap_harmonic)


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
                 progress: Callable[[int], None] | None = None, scratch: Scratch | None = None,
                 glitch_rule: bool = True, run=None, start: int = 0, stop: int | None = None
                 ) -> tuple[TurnStore, RecordInfo]:
    """As :func:`run_stage1`, but the table goes to a turn store; returns (store, info).

    The store is a :class:`~fringe.demodulate.turn_store.TurnStore`. With a ``scratch``
    directory, a record of more than SEGMENT_TURNS turns is kept in scratch files instead of in
    memory (:mod:`fringe.demodulate.turn_store`). ``glitch_rule`` False leaves the glitch rule
    to the caller (the incremental fit applies it to the whole campaign).

    ``run`` (local engine): the record already open (:func:`fringe.io.runreader.open_run`, e.g.
    the flushed part of a file still being written), left open. ``start``, ``stop``: only the
    blocks that start in samples [start, stop) (default: all); the survey still reads the
    record's start, so the blocks are those of the whole record's stage 1 in that range.
    """
    if engine not in ENGINES:
        raise ConfigError(f"engine: expected one of {', '.join(ENGINES)}, got {engine!r}")
    if engine == "local" and run is None:   # one opening for the survey and the ranges
        with open_run(path, check_values=False) as own:
            return stage1_store(path, settings, aux_channels=aux_channels,
                                range_samples=range_samples, progress=progress,
                                scratch=scratch, glitch_rule=glitch_rule, run=own,
                                start=start, stop=stop)
    if engine == "local":
        source = _loaded(run, aux_channels, start, stop)
        info = survey(path, settings, aux_channels, run=source)
        if source is not run and range_samples == RANGE_SAMPLES:   # one range per thread
            range_samples = max(-(-info.n_samples // LOCAL_THREADS), 1)
        parts = _sub_ranges(info.n_samples, range_samples, start, stop)
        builder = SpillingTurnBuilder(settings, info.expected_blocks(), scratch)
        _run_local(info, settings, parts, progress, builder.append, run=source)
    else:
        info = survey(path, settings, aux_channels)
        parts = _sub_ranges(info.n_samples, range_samples, start, stop)
        builder = SpillingTurnBuilder(settings, info.expected_blocks(), scratch)
        _run_dask(info, settings, parts, scheduler, builder.append, progress)
    store = builder.finish()
    if glitch_rule:
        store.apply_glitch_rule()
    c = store.counts()
    logger.info("stage 1: %d turns accepted of %d (%d partial, %d with a glitch)",
                c["n_accepted"], c["n_blocks"], c["n_rejected_partial"], c["n_rejected_glitch"])
    return store, info


def _loaded(run, aux_channels: tuple[str, ...], start: int, stop: int | None):
    """``run`` in memory (:class:`~fringe.io.runreader.LoadedRun`) if short, else ``run``.

    In memory: a record fitted whole of at most WHOLE_RECORD_SAMPLES samples. The channels
    are those stage 1 reads (:attr:`RecordInfo.channels`); with an auxiliary channel
    the file lacks, ``run`` is returned, so that the survey names it.
    """
    n = run.n_samples
    whole = start == 0 and stop in (None, n)
    if not whole or n > WHOLE_RECORD_SAMPLES or not hasattr(run, "load") \
            or any(c not in run.aux_channels for c in aux_channels):
        return run
    return run.load(("time", "azimuth", "signal") + (("weight",) if run.weighted else ())
                    + tuple(aux_channels))


def _sub_ranges(n_samples: int, range_samples: int, start: int, stop: int | None):
    """:func:`ranges` of samples [start, stop) (stop None: the end); checked."""
    stop = n_samples if stop is None else stop
    if not 0 <= start < stop <= n_samples:
        raise ConfigError(f"start, stop: expected 0 <= start < stop <= {n_samples}, got "
                          f"{start}, {stop}")
    if start == 0 and stop == n_samples:
        return ranges(n_samples, range_samples)
    return [(a, min(a + range_samples, stop)) for a in range(start, stop, range_samples)]


#: Threads of the local engine (numpy and HDF5 reads release the GIL for the heavy parts).
LOCAL_THREADS = min(2, os.cpu_count() or 1)


#: The local engine's worker threads, started once per process: (process id, executor).
_POOL: tuple[int, object] | None = None


def _local_pool():
    """The ThreadPoolExecutor of LOCAL_THREADS workers kept for this process's fits.

    Started on first use, so a study's many fits do not start threads for each; a forked
    child (whose copy has no threads) starts its own.
    """
    global _POOL
    from concurrent.futures import ThreadPoolExecutor

    if _POOL is None or _POOL[0] != os.getpid():
        _POOL = (os.getpid(), ThreadPoolExecutor(max_workers=LOCAL_THREADS,
                                                 thread_name_prefix="fringe-stage1"))
    return _POOL[1]


def _run_local(info, settings, parts, progress, collect, run=None):
    """Run the ranges in order, two at a time in threads.

    Each range's table goes to ``collect`` in range order (deterministic) as soon as it and its
    predecessors are done. ``run``: the record already open (else opened here).
    """
    from concurrent.futures import wait

    if run is None:
        with open_run(info.path, check_values=False) as own:
            return _run_local(info, settings, parts, progress, collect, run=own)

    def one(ab):
        table = demodulate_range(info, settings, *ab, run=run)
        if progress:
            progress(ab[1] - ab[0])
        return table

    if LOCAL_THREADS <= 1 or len(parts) < 2:
        for ab in parts:
            collect(one(ab))
        return
    if len(parts) <= LOCAL_THREADS:
        # a short record: the first range on this thread, which would otherwise only wait,
        # the others on the pool (one thread hand-off less); collected in range order
        rest = [_local_pool().submit(one, ab) for ab in parts[1:]]
        try:
            collect(one(parts[0]))
            for future in rest:
                collect(future.result())
        except BaseException:
            for future in rest:
                future.cancel()
            wait(rest)
            raise
        return
    pending = [_local_pool().submit(one, ab) for ab in parts]
    pending.reverse()
    try:
        while pending:
            # popped before its table is collected: a finished range's table is not kept by
            # this list until the record ends (it held a year's tables: +150 MiB)
            collect(pending.pop().result())
    except BaseException:
        # a bad range (or an interrupt) stops the rest at once instead of after every
        # queued range has run
        for future in pending:
            future.cancel()
        wait(pending)
        raise


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


def scheduler_client(scheduler):
    """``(client, own)``: a ``distributed.Client`` for ``scheduler`` and whether it was made here.

    ``scheduler`` is an address (a new client, ``own`` True: close it when done) or a client
    already connected (used as it is). One-line ConfigError: dask not installed, no scheduler
    given, or the scheduler unreachable.
    """
    try:
        from distributed import Client
    except ImportError:
        raise ConfigError("engine='dask': needs the 'dask' extra (pip install "
                          "'fringe[dask]')") from None
    if scheduler is None:
        raise ConfigError("engine='dask': needs scheduler=ADDRESS (e.g. tcp://host:8786)")
    own = not isinstance(scheduler, Client)
    return (_connect(Client, scheduler) if own else scheduler), own


def _run_dask(info, settings, parts, scheduler, collect, progress=None):
    """Run the ranges on a dask cluster; join them in range order, reporting each one done."""
    client, own = scheduler_client(scheduler)
    # the workers resolve a relative path against their own working directory: send the
    # absolute one (on a shared filesystem it names the same file)
    info = dataclasses.replace(info, path=os.path.abspath(info.path))
    try:
        futures = [client.submit(demodulate_range, info, settings, a, b, pure=False)
                   for a, b in parts]
        for (a, b), future in zip(parts, futures, strict=True):
            collect(future.result())      # in range order; each result is dropped once joined
            future.release()
            if progress:
                progress(b - a)
    finally:
        if own:
            client.close()
