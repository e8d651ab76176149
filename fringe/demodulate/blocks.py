"""Stage 1: per-turn demodulation of a rotating-apparatus record.

The record is cut into turns (blocks) at the instants the turntable angle theta = pi - A (C7)
passes its starting value, and at every time gap longer than ``max_gap_s``. Each block is fitted
by linear least squares with

    y(t) = a0 + a1 tau [+ a2 tau^2] + c1 cos theta + s1 sin theta + C cos 2 theta + B sin 2 theta
           [+ 3 theta, 4 theta terms],      tau = (t - t_mid)/(half span of the block),

using the recorded azimuth (not an assumed rate). NaN samples are left out. The blocks of a
range are fitted by the compiled kernel :func:`fringe.demodulate.kernel.block_fits` (one block at
a time, three passes over its samples while they are in cache; no Python loop over blocks).
Auxiliary channels are demodulated with the same design.

Each block also records the (C, B) response of the fit to the slowly varying unit columns
tau^j cos 2 theta, tau^j sin 2 theta (j = 1 ... LEAK_ORDER) and tau^j (drift order < j <=
LEAK_ORDER) (``TurnTable.leak``, :func:`leak_terms`). Stage 3 uses them to model the per-turn
amplitudes of a signal that changes during the turn (sidereal and orbital motion) exactly,
instead of freezing it at the turn's mean time (which errs by about P_turn / P_sidereal of the
signal, see :func:`fringe.fit.turn_model`).

Rejection rules, counted in :class:`TurnTable`:

* **partial**: fewer than ``min_samples`` valid samples, an angular gap (largest gap in
  theta mod 2 pi among the valid samples) above ``max_angle_gap_deg``, or a singular
  block (the rank guard of :mod:`fringe.demodulate.kernel`);
* **glitch**: residual RMS above median + ``glitch_threshold`` x 1.4826 x MAD of the residual
  RMS over all otherwise-good blocks (applied once the whole record is demodulated).

A block belongs to the range in which it *starts*; ranges read ahead until their last block is
complete, so any split of the record into ranges (local chunks or dask tasks) gives the same
blocks and the same numbers.
"""

from __future__ import annotations

from dataclasses import dataclass, field, fields

import numpy as np
from numpy.typing import NDArray

from fringe.demodulate.kernel import LEAK_KIND_CODES, block_fits
from fringe.demodulate.kernel import block_starts as kernel_block_starts
from fringe.errors import ConfigError, FitError

DRIFT_TERMS = {"offset": 1, "linear": 2, "quadratic": 3}

#: Highest power of tau whose leakage into (C, B) is recorded per block (TurnTable.leak).
LEAK_ORDER = 3


@dataclass(frozen=True)
class DemodSettings:
    """Stage-1 settings.

    Parameters
    ----------
    drift : {"offset", "linear", "quadratic"}
        Per-block drift polynomial.
    max_harmonic : int
        Highest harmonic of theta in the block model (2, 3 or 4); 1 theta is always included.
    max_angle_gap_deg : float
        Largest allowed gap in turntable angle within a block, degrees.
    min_samples : int
        Least number of valid samples in a block.
    max_gap_s : float or None
        A time gap longer than this starts a new block, s (default: a quarter of the estimated
        turn period).
    glitch_threshold : float
        Robust rejection threshold in units of the MAD-estimated sigma (see module docstring).
    """

    drift: str = "linear"
    max_harmonic: int = 2
    max_angle_gap_deg: float = 60.0
    min_samples: int = 12
    max_gap_s: float | None = None
    glitch_threshold: float = 5.0

    def __post_init__(self):
        if self.drift not in DRIFT_TERMS:
            raise ConfigError(f"demodulation: drift: expected one of {', '.join(DRIFT_TERMS)}, "
                              f"got {self.drift!r}")
        if self.max_harmonic not in (2, 3, 4):
            raise ConfigError(f"demodulation: max_harmonic: expected 2, 3 or 4, "
                              f"got {self.max_harmonic!r}")
        if not 0 < self.max_angle_gap_deg <= 360:
            raise ConfigError("demodulation: max_angle_gap_deg: expected a value in (0, 360]")
        if self.glitch_threshold <= 0:
            raise ConfigError("demodulation: glitch_threshold: expected a positive number")

    @property
    def term_names(self) -> tuple[str, ...]:
        drift = ("a0", "a1", "a2")[:DRIFT_TERMS[self.drift]]
        harm = []
        for m in range(1, self.max_harmonic + 1):
            harm += [f"c{m}", f"s{m}"]
        return drift + tuple(harm)

    @property
    def n_terms(self) -> int:
        return len(self.term_names)

    def index(self, name: str) -> int:
        return self.term_names.index(name)

    def to_dict(self) -> dict:
        return {f.name: getattr(self, f.name) for f in fields(self)}


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
        return int(self.t_mid_s.size)

    @property
    def accepted(self) -> NDArray:
        return self.status == self.ACCEPTED

    @property
    def C(self) -> NDArray:
        """cos 2 theta amplitudes, signal units."""
        return self.coef[:, self.settings.index("c2")]

    @property
    def B(self) -> NDArray:
        """sin 2 theta amplitudes, signal units."""
        return self.coef[:, self.settings.index("s2")]

    def formal_cov(self) -> NDArray:
        """Per-block formal covariance of (C, B): residual variance x ninv_2, (n, 2, 2)."""
        return self.residual_rms[:, None, None] ** 2 * self.ninv_2

    def counts(self) -> dict:
        return status_counts(self.status)

    def apply_glitch_rule(self) -> None:
        """Mark glitched blocks (module docstring rule) among the non-partial ones."""
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
    """Set status GLITCH (in place) where the residual RMS exceeds median + threshold x
    1.4826 x MAD of the residual RMS of the accepted blocks (module docstring rule)."""
    good = status == TurnTable.ACCEPTED
    if np.sum(good) < 5:
        return
    r = residual_rms[good]
    med = np.median(r)
    mad = 1.4826 * np.median(np.abs(r - med))
    limit = med + threshold * max(mad, 1e-12 * med)
    status[good & (residual_rms > limit)] = TurnTable.GLITCH


class TurnTableBuilder:
    """Joins the turn tables of consecutive ranges as they arrive, into arrays allocated once
    for about ``expected_blocks`` rows (grown by half when more arrive), so the per-range
    tables can be dropped at once: the peak memory is the table itself, not twice it."""

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
        """Drop the rows received (the arrays are kept and refilled; tables from
        :meth:`finish` are views of them)."""
        self._size = 0

    def finish(self) -> TurnTable:
        """The joined table (views of the allocated arrays, trimmed to the rows received)."""
        if self._size == 0:
            raise FitError("demodulation: no complete turn found in the record")
        rows = {name: arr[:self._size] for name, arr in self._arrays.items()}
        leak = rows.pop("leak", None)
        return TurnTable(settings=self.settings, leak=leak if self._has_leak else None,
                         aux={k: v[:self._size] for k, v in self._aux.items()}, **rows)


def leak_terms(settings: DemodSettings) -> tuple[tuple[str, int], ...]:
    """The unit columns of ``TurnTable.leak``, in order.

    ("C", j) is tau^j cos 2 theta, ("B", j) is tau^j sin 2 theta (j = 1 ... LEAK_ORDER) and
    ("A", j) is tau^j for the powers above the drift polynomial (up to LEAK_ORDER); tau is the
    block's normalised time (module docstring). Lower powers are in the block model, whose
    (C, B) responses are exactly 1 (cos 2 theta -> C, sin 2 theta -> B) or 0.
    """
    nd = DRIFT_TERMS[settings.drift]
    return (tuple(("C", j) for j in range(1, LEAK_ORDER + 1))
            + tuple(("B", j) for j in range(1, LEAK_ORDER + 1))
            + tuple(("A", j) for j in range(nd, LEAK_ORDER + 1)))


def turn_boundaries(theta_rad: NDArray, theta0_rad: float, t_s: NDArray, max_gap_s: float,
                    theta_prev: float | None = None, t_prev: float | None = None) -> NDArray:
    """Boolean array: True where a new block starts at sample i (before sample i).

    A block starts where theta - theta0 crosses a multiple of 2 pi (either sense: where
    psi = (theta - theta0) mod 2 pi jumps by more than pi between neighbouring samples), or after
    a time gap longer than ``max_gap_s``. ``theta_prev``/``t_prev`` give the sample before the
    first one. Angles may be wrapped or unwrapped; steps between samples must stay below pi.
    """
    has_prev = theta_prev is not None
    return kernel_block_starts(np.ascontiguousarray(theta_rad, float),
                               np.ascontiguousarray(t_s, float), float(theta0_rad),
                               float(max_gap_s), float(theta_prev) if has_prev else 0.0,
                               float(t_prev) if has_prev else 0.0, has_prev)


def demodulate_blocks(t_s: NDArray, azimuth_rad: NDArray, y: NDArray, block_starts: NDArray,
                      settings: DemodSettings, aux: dict[str, NDArray] | None = None
                      ) -> TurnTable:
    """Fit every block of a contiguous sample range (compiled kernel, module docstring).

    Parameters
    ----------
    t_s, azimuth_rad, y : ndarray, shape (n,)
        Times (s), azimuths of path 1 (rad, C7) and signal; y may hold NaN.
    block_starts : ndarray of int
        Index of the first sample of each block (increasing, first = 0); the last block ends at n.
    settings : DemodSettings
    aux : dict, optional
        Auxiliary channels (name -> (n,) array) demodulated with the same design.
    """
    aux = aux or {}
    names = list(aux)
    n = t_s.size
    aux_2d = (np.stack([np.asarray(aux[k], float) for k in names], axis=1) if names
              else np.zeros((n, 0)))
    kinds = leak_terms(settings)
    theta = np.pi - np.asarray(azimuth_rad, float)
    (vcount, t_mid, t_lo, t_hi, coef, aux_coef, leak, ninv_2, rms, gap_rad, ok) = block_fits(
        np.ascontiguousarray(t_s, float), theta, np.cos(theta), np.sin(theta),
        np.ascontiguousarray(y, float), aux_2d, np.asarray(block_starts, np.int64),
        DRIFT_TERMS[settings.drift], settings.max_harmonic,
        np.array([LEAK_KIND_CODES[k] for k, _ in kinds], np.int64),
        np.array([j for _, j in kinds], np.int64), settings.min_samples,
        np.radians(settings.max_angle_gap_deg))
    status = np.where(ok, TurnTable.ACCEPTED, TurnTable.PARTIAL).astype(np.int8)
    return TurnTable(t_mid_s=t_mid, t_start_s=t_lo, t_stop_s=t_hi, n_valid=vcount, coef=coef,
                     ninv_2=ninv_2, residual_rms=rms, angle_gap_deg=np.degrees(gap_rad),
                     status=status, settings=settings,
                     aux={name: aux_coef[j] for j, name in enumerate(names)}, leak=leak)
