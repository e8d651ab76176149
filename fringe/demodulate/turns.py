"""The stage-1 turn table: per-turn results, the status of each turn and the glitch rule."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from numpy.typing import NDArray

from fringe.demodulate.settings import DemodSettings
from fringe.errors import FitError


@dataclass
class TurnTable:
    """Per-block results of stage 1 (arrays of length n_blocks unless noted).

    Attributes
    ----------
    t_mid_s : mean sample time of the block, s after the epoch
    t_start_s, t_stop_s : first and last valid sample times, s
    n_valid : valid samples used
    coef : (n_blocks, p) fitted block-model coefficients (``settings.term_names``), signal units
    ninv_2 : (n_blocks, 2, 2) the (C, B) block of the inverse normal matrix (unscaled)
    residual_rms : RMS of the block residuals, signal units (dof-corrected)
    angle_gap_deg : largest angular gap
    status : 0 accepted, 1 partial, 2 glitch
    aux : dict name -> (n_blocks, p) coefficients of auxiliary channels
    leak : (n_blocks, 2, q) fitted (C, B) of the unit columns of :func:`leak_terms`, or None
    """

    t_mid_s: NDArray
    t_start_s: NDArray
    t_stop_s: NDArray
    n_valid: NDArray
    coef: NDArray
    ninv_2: NDArray
    residual_rms: NDArray
    angle_gap_deg: NDArray
    status: NDArray
    settings: DemodSettings
    aux: dict = field(default_factory=dict)
    leak: NDArray | None = None

    ACCEPTED, PARTIAL, GLITCH = 0, 1, 2

    @property
    def n_blocks(self) -> int:
        """Number of blocks (turns) in the table."""
        return int(self.t_mid_s.size)

    @property
    def accepted(self) -> NDArray:
        """Boolean mask of the accepted blocks (status ACCEPTED), shape (n_blocks,)."""
        return self.status == self.ACCEPTED

    @property
    def C(self) -> NDArray:
        """Cos 2 theta amplitudes, signal units."""
        return self.coef[:, self.settings.index("c2")]

    @property
    def B(self) -> NDArray:
        """Sin 2 theta amplitudes, signal units."""
        return self.coef[:, self.settings.index("s2")]

    def formal_cov(self) -> NDArray:
        """Per-block formal covariance of (C, B): residual variance x ninv_2, (n, 2, 2)."""
        return self.residual_rms[:, None, None] ** 2 * self.ninv_2

    def counts(self) -> dict:
        """Blocks in all and per status, as :func:`status_counts`."""
        return status_counts(self.status)

    def apply_glitch_rule(self) -> None:
        """Mark glitched blocks among the non-partial ones (rule of :func:`glitch_status`)."""
        glitch_status(self.status, self.residual_rms, self.settings.glitch_threshold)

    def rows(self, lo: int, hi: int) -> TurnTable:
        """Rows [lo, hi) as a table of views."""
        sl = slice(lo, hi)
        return TurnTable(t_mid_s=self.t_mid_s[sl], t_start_s=self.t_start_s[sl],
                         t_stop_s=self.t_stop_s[sl], n_valid=self.n_valid[sl],
                         coef=self.coef[sl], ninv_2=self.ninv_2[sl],
                         residual_rms=self.residual_rms[sl], angle_gap_deg=self.angle_gap_deg[sl],
                         status=self.status[sl], settings=self.settings,
                         aux={k: v[sl] for k, v in self.aux.items()},
                         leak=None if self.leak is None else self.leak[sl])


def status_counts(status: NDArray) -> dict:
    """Blocks in all and per status (the ``stage1`` counts of a fit result)."""
    return {"n_blocks": int(status.size),
            "n_accepted": int(np.sum(status == TurnTable.ACCEPTED)),
            "n_rejected_partial": int(np.sum(status == TurnTable.PARTIAL)),
            "n_rejected_glitch": int(np.sum(status == TurnTable.GLITCH))}


def glitch_status(status: NDArray, residual_rms: NDArray, threshold: float) -> None:
    """Set status GLITCH (in place) on accepted blocks whose residual RMS is too large.

    The limit is median + ``threshold`` x 1.4826 x MAD of the residual RMS of the accepted blocks
    (the rule stated in :mod:`fringe.demodulate.blocks`). Fewer than 5 accepted blocks: nothing
    is marked.
    """
    good = status == TurnTable.ACCEPTED
    if np.sum(good) < 5:
        return
    r = residual_rms[good]
    med = np.median(r)
    mad = 1.4826 * np.median(np.abs(r - med))
    limit = med + threshold * max(mad, 1e-12 * med)
    status[good & (residual_rms > limit)] = TurnTable.GLITCH


class TurnTableBuilder:
    """Joins the turn tables of consecutive ranges as they arrive, into arrays allocated once.

    The arrays hold about ``expected_blocks`` rows (grown by half when more arrive), so the
    per-range tables can be dropped at once: the peak memory is the table itself, not twice it.
    """

    _ROW_FIELDS = ("t_mid_s", "t_start_s", "t_stop_s", "n_valid", "coef", "ninv_2",
                   "residual_rms", "angle_gap_deg", "status", "leak")

    def __init__(self, settings: DemodSettings, expected_blocks: int):
        self.settings = settings
        self._capacity = max(int(expected_blocks), 16)
        self._size = 0
        self._arrays: dict | None = None
        self._aux: dict = {}
        self._has_leak = True

    def _allocate(self, like: TurnTable, capacity: int) -> None:
        def grow(old, part):
            new = np.empty((capacity,) + part.shape[1:], part.dtype)
            if old is not None:
                new[:self._size] = old[:self._size]
            return new

        old = self._arrays or {}
        self._arrays = {name: grow(old.get(name), getattr(like, name))
                        for name in self._ROW_FIELDS if getattr(like, name) is not None}
        self._aux = {k: grow(self._aux.get(k), v) for k, v in like.aux.items()}
        self._capacity = capacity

    def append(self, table: TurnTable) -> None:
        """Copy the rows of ``table`` after those received so far (growing the arrays if full)."""
        n = table.n_blocks
        if n == 0:
            return
        self._has_leak &= table.leak is not None
        if self._arrays is None:
            self._allocate(table, max(self._capacity, n))
        elif self._size + n > self._capacity:
            self._allocate(table, max(self._size + n, int(1.5 * self._capacity)))
        sl = slice(self._size, self._size + n)
        for name, arr in self._arrays.items():
            part = getattr(table, name)
            if part is not None:
                arr[sl] = part
        for k, arr in self._aux.items():
            arr[sl] = table.aux[k]
        self._size += n

    @property
    def size(self) -> int:
        """Rows received so far."""
        return self._size

    def clear(self) -> None:
        """Drop the rows received.

        The arrays are kept and refilled; tables from :meth:`finish` are views of them.
        """
        self._size = 0

    def finish(self) -> TurnTable:
        """The joined table (views of the allocated arrays, trimmed to the rows received)."""
        if self._size == 0:
            raise FitError("demodulation: no complete turn found in the record")
        rows = {name: arr[:self._size] for name, arr in self._arrays.items()}
        leak = rows.pop("leak", None)
        return TurnTable(settings=self.settings, leak=leak if self._has_leak else None,
                         aux={k: v[:self._size] for k, v in self._aux.items()}, **rows)
