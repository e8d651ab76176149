"""Where the stage-1 turn table lives while stages 2-3 run: in memory, or in scratch files.

A record of up to :data:`SEGMENT_TURNS` turns keeps its :class:`~fringe.demodulate.TurnTable`
in memory. A longer one, when the fit is given a scratch directory, is written to scratch
files (raw .npy, one per column and segment) as stage 1 produces it and read back a segment
at a time by stages 2-3, so the fit's peak memory does not grow with the record: what stays in
memory for the whole record is the status (1 byte per turn) and the residual RMS (8 bytes per
turn), which the glitch rule and the noise level need.

Stages 2-3 visit the table in segments of SEGMENT_TURNS rows (:meth:`TurnStore.segments`)
whichever way it is stored, so the numbers do not depend on where it lives.

:class:`Scratch` is the temporary directory of one fit (removed by :meth:`Scratch.close`, or
when the object is garbage-collected).
"""

from __future__ import annotations

import shutil
import tempfile
import weakref
from collections.abc import Iterator
from pathlib import Path

import numpy as np
from numpy.typing import NDArray

from fringe.demodulate.settings import DemodSettings
from fringe.demodulate.turns import TurnTable, TurnTableBuilder, glitch_status, status_counts
from fringe.errors import OutputError
from fringe.io.atomic import sweep_leftovers, temp_name

#: Turns per segment of stages 2-3 and per write of the scratch table (65536 turns: 34 days of
#: 45 s turns; about 17 MB of table and 14 MB of stage 2-3 rows per segment).
SEGMENT_TURNS = 1 << 16

#: Row fields of TurnTable stored per turn (aux channels and leak are stored as well).
_FIELDS = ("t_mid_s", "t_start_s", "t_stop_s", "n_valid", "coef", "ninv_2", "residual_rms",
           "angle_gap_deg", "status")


class Scratch:
    """A temporary directory for one fit's scratch files.

    Parameters
    ----------
    parent : str or Path, optional
        Directory in which to create it (default: the system's temporary directory).
    """

    def __init__(self, parent: str | Path | None = None):
        self.parent = parent
        self.path: Path | None = None             # created on the first file() call
        self._cleanup = None

    def file(self, name: str) -> Path:
        """Path of a scratch file (creates the directory on first use)."""
        if self.path is None:
            where = Path(self.parent if self.parent is not None else tempfile.gettempdir())
            try:
                sweep_leftovers(where)            # scratch of runs killed by SIGKILL
                path = where / temp_name("", "scratch")
                path.mkdir(mode=0o700)
                self.path = path
            except OSError as exc:
                where = self.parent if self.parent is not None else tempfile.gettempdir()
                raise OutputError(f"{where}: scratch directory: expected a writable directory "
                                  f"for the fit's temporary files ({exc.strerror}); choose "
                                  "another with scratch_dir=DIR") from None
            self._cleanup = weakref.finalize(self, shutil.rmtree, str(self.path), True)
        return self.path / name

    def close(self) -> None:
        """Remove the directory and everything in it."""
        if self._cleanup is not None:
            self._cleanup()

    def __enter__(self) -> Scratch:
        return self

    def __exit__(self, *exc) -> None:
        self.close()


def segment_bounds(n: int, size: int) -> list[tuple[int, int]]:
    """Row ranges [lo, hi) of the segments of ``size`` rows of a table of n rows."""
    return [(lo, min(lo + size, n)) for lo in range(0, n, size)] or [(0, 0)]


def save_arrays(scratch: Scratch, prefix: str, arrays: dict) -> None:
    """Write each array to its own raw .npy file ``prefix-NAME.npy`` in the scratch directory.

    Plain writes: cheaper than HDF5 for data read back once or twice, whole.
    """
    for name, arr in arrays.items():
        path = scratch.file(f"{prefix}-{name.replace('/', '~')}.npy")
        try:
            np.save(path, arr, allow_pickle=False)
        except OSError as exc:
            raise OutputError(f"{path.parent}: scratch file {path.name}: cannot be written "
                              f"({exc.strerror}); free space there or choose another "
                              "with scratch_dir=DIR") from None


def load_arrays(scratch: Scratch, prefix: str, names) -> dict:
    """Read back the arrays of :func:`save_arrays` (names that were not saved are left out)."""
    out = {}
    for name in names:
        path = scratch.file(f"{prefix}-{name.replace('/', '~')}.npy")
        if path.exists():
            out[name] = np.load(path, allow_pickle=False)
    return out


class TurnStore:
    """The stage-1 turn table, in memory or in scratch files (module docstring).

    ``status`` and ``residual_rms`` are in memory either way; the tables from
    :meth:`segments` and :meth:`load` take their status from ``status`` (the glitch rule is
    applied to it after stage 1).
    """

    def __init__(self, settings: DemodSettings, status: NDArray, residual_rms: NDArray, *,
                 table: TurnTable | None = None, scratch: Scratch | None = None,
                 aux_names: tuple[str, ...] = (), has_leak: bool = True,
                 segment_turns: int | None = None):
        self.settings = settings
        #: rows per segment, fixed when the store is made (the scratch files are laid out so)
        self.segment_turns = int(segment_turns or SEGMENT_TURNS)
        self.status = status
        self.residual_rms = residual_rms
        self.aux_names = tuple(table.aux) if table is not None else tuple(aux_names)
        self.has_leak = (table.leak is not None) if table is not None else has_leak
        self._table = table
        self._scratch = scratch
        self._median: float | None = None        # median_accepted_rms, once computed

    @classmethod
    def in_memory(cls, table: TurnTable, segment_turns: int | None = None) -> TurnStore:
        """A store that keeps ``table`` in memory.

        Parameters
        ----------
        table : TurnTable
            The whole stage-1 table (kept, not copied).
        segment_turns : int, optional
            Rows per segment of :meth:`segments` (default :data:`SEGMENT_TURNS`).
        """
        return cls(table.settings, table.status, table.residual_rms, table=table,
                   segment_turns=segment_turns)

    @property
    def on_disk(self) -> bool:
        """True when the table is in scratch files rather than in memory."""
        return self._table is None

    @property
    def n_blocks(self) -> int:
        """Number of blocks (turns) in the table."""
        return int(self.status.size)

    @property
    def accepted(self) -> NDArray:
        """Boolean mask of the accepted blocks (status ACCEPTED), shape (n_blocks,)."""
        return self.status == TurnTable.ACCEPTED

    def counts(self) -> dict:
        """Blocks in all and per status, as :func:`~fringe.demodulate.turns.status_counts`."""
        return status_counts(self.status)

    def apply_glitch_rule(self) -> None:
        """Mark glitched blocks in ``status`` (:func:`~fringe.demodulate.turns.glitch_status`)."""
        glitch_status(self.status, self.residual_rms, self.settings.glitch_threshold)
        self._median = None

    def median_accepted_rms(self) -> float:
        """Median residual RMS of the accepted turns (the white per-sample level), signal units."""
        if self._median is None:
            self._median = float(np.median(self.residual_rms[self.accepted],
                                           overwrite_input=True))
        return self._median

    def bounds(self) -> list[tuple[int, int]]:
        """Row ranges of the segments."""
        return segment_bounds(self.n_blocks, self.segment_turns)

    def _segment(self, i: int, lo: int, hi: int) -> TurnTable:
        if self._table is not None:
            return self._table.rows(lo, hi)
        names = [n for n in _FIELDS if n != "status"] + [f"aux/{k}" for k in self.aux_names]
        got = load_arrays(self._scratch, f"table-{i}", names + ["leak"])
        aux = {k: got.pop(f"aux/{k}") for k in self.aux_names}
        return TurnTable(settings=self.settings, status=self.status[lo:hi], aux=aux,
                         leak=got.pop("leak", None) if self.has_leak else None, **got)

    def segments(self) -> Iterator[tuple[int, TurnTable]]:
        """(first row, rows) of each segment of ``segment_turns`` rows, in order."""
        for i, (lo, hi) in enumerate(self.bounds()):
            yield lo, self._segment(i, lo, hi)

    def load(self) -> TurnTable:
        """The whole table in memory.

        For the fits that need it whole: medium, rms_kt, the one-stage cross-check.
        """
        if self._table is not None:
            return self._table
        builder = TurnTableBuilder(self.settings, self.n_blocks)
        for _, part in self.segments():           # each takes its status from self.status
            builder.append(part)
        return builder.finish()


class SpillingTurnBuilder:
    """Joins stage 1's range tables, spilling full segments to scratch files.

    Past SEGMENT_TURNS rows (and with a ``scratch``), each full segment of SEGMENT_TURNS rows is
    written to scratch files instead of kept. ``append`` takes the range tables in order;
    ``finish`` gives the :class:`TurnStore`.
    """

    def __init__(self, settings: DemodSettings, expected_blocks: int,
                 scratch: Scratch | None = None):
        self.settings = settings
        self._scratch = scratch
        self._size = size = SEGMENT_TURNS
        spill = scratch is not None and expected_blocks > size
        self._buffer = TurnTableBuilder(settings, min(expected_blocks, size + 4096)
                                        if spill else expected_blocks)
        self._segments = 0
        self._kept = _GrowingColumns(expected_blocks if spill else 0)   # status, rms
        self._aux_names: tuple = ()
        self._has_leak = True

    def append(self, table: TurnTable) -> None:
        """Add the next range's table; with a scratch, write out every full segment."""
        self._buffer.append(table)
        while self._scratch is not None and self._buffer.size >= self._size:
            whole = self._buffer.finish()
            self._write(whole.rows(0, self._size))
            rest = _copy(whole.rows(self._size, whole.n_blocks))
            self._buffer.clear()
            self._buffer.append(rest)

    def _write(self, part: TurnTable) -> None:
        self._aux_names = tuple(part.aux)
        self._has_leak &= part.leak is not None
        arrays = {name: getattr(part, name) for name in _FIELDS if name != "status"}
        arrays.update({f"aux/{k}": v for k, v in part.aux.items()})
        if part.leak is not None:
            arrays["leak"] = part.leak
        save_arrays(self._scratch, f"table-{self._segments}", arrays)
        self._kept.append(part.status, part.residual_rms)
        self._segments += 1

    def finish(self) -> TurnStore:
        """The :class:`TurnStore` of the rows appended.

        In memory if no segment was written, else in scratch files (the last, partial segment
        is written too).
        """
        if self._segments == 0:
            return TurnStore.in_memory(self._buffer.finish(), self._size)
        if self._buffer.size:
            self._write(self._buffer.finish())
        status, rms = self._kept.finish()
        return TurnStore(self.settings, status, rms, scratch=self._scratch,
                         aux_names=self._aux_names, has_leak=self._has_leak,
                         segment_turns=self._size)


def _copy(table: TurnTable) -> TurnTable:
    """A table that owns its arrays (the builder refills the ones ``table`` views)."""
    return TurnTable(**{name: np.array(getattr(table, name)) for name in _FIELDS},
                     settings=table.settings, aux={k: v.copy() for k, v in table.aux.items()},
                     leak=None if table.leak is None else table.leak.copy())


class _GrowingColumns:
    """Status (int8) and residual RMS (float64) of the rows written.

    The arrays are allocated for about the expected rows and grown by half when more come (no
    joined copy at the end).
    """

    def __init__(self, expected: int):
        self._status = np.empty(max(int(expected), 16), np.int8)
        self._rms = np.empty(self._status.size)
        self._size = 0

    def append(self, status: NDArray, rms: NDArray) -> None:
        n = status.size
        if self._size + n > self._status.size:
            cap = max(self._size + n, int(1.5 * self._status.size))
            self._status = np.resize(self._status, cap)
            self._rms = np.resize(self._rms, cap)
        self._status[self._size:self._size + n] = status
        self._rms[self._size:self._size + n] = rms
        self._size += n

    def finish(self) -> tuple[NDArray, NDArray]:
        return self._status[:self._size], self._rms[:self._size]
