"""The turntable motion, read from the recorded azimuth, and what a block is for each motion.

:func:`detect_motion` classifies the start of a record (the samples :func:`survey
<fringe.demodulate.engine.survey>` reads) from the table angle theta = pi - A (C7) alone:

* **at rest** -- a sample whose azimuth is within ``rest_tolerance_deg`` of the previous or the
  next sample's (:func:`moving_mask`); a record with at least STEPPED_REST_FRACTION of its
  sample intervals at rest, at three or more rest positions, is **stepped** (positions with
  dwell);
* **reversal** -- after moving one way the table has come back by more than
  REVERSAL_HYSTERESIS_DEG from its farthest angle; the sample at that extreme ends the leg.
  A record with reversals whose legs (median) cover at least FULL_LEG_TURNS of a turn is
  **reversing**, with shorter legs **swinging**; a record without reversals is **continuous**
  (a stepped one keeps the kind "stepped" and has the sense "alternating" when it reverses).

What a block (the unit of the per-block fit, "turn" in the tables) is:

* continuous, and stepped in one sense: one turn, from where theta passes its starting value
  theta0 + 2 pi k to the next such passage (:func:`fringe.demodulate.turn_boundaries`), or a
  time gap longer than ``max_gap_s``;
* reversing, swinging (and stepped with reversals): one leg, from the sample after a reversal
  to the reversal's extreme sample (:func:`leg_starts`); a leg longer than a turn is cut at each
  whole turn of travel from its start, a last piece of less than half a turn staying with the
  block before it; a time gap longer than ``max_gap_s`` also starts a block.

Samples excluded: for a stepped motion, every sample that is not at rest (the table moving
between marks). A record with one reading per position has no sample at rest and is read as
a continuous (or reversing) motion sampled at the marks: its block fit is the same least
squares on the same readings.

Coverage that defines the 2 theta pair (C, B) of a block: whole-turn motions (continuous,
reversing) keep the largest gap in theta at most ``max_angle_gap_deg``; swinging and stepped
motions the largest gap in 2 theta (mod 360 degrees) at most ``max_2theta_gap_deg`` (120
degrees by default: three 2 theta positions at least; a sweep of at least 120 degrees of
table angle). :func:`check_coverage` refuses at the start a stepped table whose marks cannot
separate C from B (e.g. steps of 90 degrees, where sin 2 theta is the same at every mark) and a
swing too short to cover 2 theta.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit
from numpy.typing import NDArray

from fringe.conventions import theta_from_azimuth
from fringe.demodulate.kernel import unwrap_angles
from fringe.demodulate.settings import DemodSettings
from fringe.errors import FitError
from fringe.io.fit_sections import Motion

#: Fraction of the sample intervals at rest from which a record is stepped (a continuously
#: turning table sampled faster than its encoder resolves has a few equal neighbours).
STEPPED_REST_FRACTION = 0.25

#: Travel back from the farthest angle that confirms a reversal, degrees (encoder jitter at
#: rest stays far below it).
REVERSAL_HYSTERESIS_DEG = 1.0

#: Median leg, in turns, from which a reversing record is "reversing" rather than "swinging".
FULL_LEG_TURNS = 0.95

#: Angles this close past a whole turn of a leg still count as within it, rad.
_LEG_TIE_RAD = 1e-7

_RULES = {
    "turns": ("one turn: from where theta passes its starting value theta0 + 2 pi k to the "
              "next such passage, or a time gap longer than max_gap_s"),
    "legs": ("one leg between reversals (a reversal: the table comes back by more than "
             f"{REVERSAL_HYSTERESIS_DEG:g} deg from its farthest angle, which ends the leg); a "
             "leg longer than a turn is cut at each whole turn of travel, a last piece of less "
             "than half a turn staying with the block before it; or a time gap longer than "
             "max_gap_s"),
}


def unwrapped_theta(azimuth_rad: NDArray) -> NDArray:
    """The table angle theta = pi - A (C7) of azimuths A, unwrapped (``numpy.unwrap``), rad."""
    return unwrap_angles(np.ascontiguousarray(theta_from_azimuth(azimuth_rad)))


def _wrapped(d: NDArray) -> NDArray:
    """Angle differences folded into [-pi, pi), rad."""
    return (d + np.pi) % (2 * np.pi) - np.pi


def moving_mask(azimuth_rad: NDArray, tolerance_rad: float, prev_rad: float | None = None,
                next_rad: float | None = None) -> NDArray:
    """True for the samples not at rest (module docstring), shape of ``azimuth_rad``.

    Parameters
    ----------
    azimuth_rad : ndarray, shape (n,)
        Azimuths of consecutive samples, rad.
    tolerance_rad : float
        Largest change between neighbours that counts as at rest, rad.
    prev_rad, next_rad : float, optional
        Azimuth of the sample before the first and after the last (None: there is none).
    """
    az = np.asarray(azimuth_rad, float)
    full = np.concatenate([[np.nan if prev_rad is None else prev_rad], az,
                           [np.nan if next_rad is None else next_rad]])
    still = np.abs(_wrapped(np.diff(full))) <= tolerance_rad      # NaN compares False
    return ~(still[:-1] | still[1:])


@njit(cache=True, nogil=True)
def _leg_starts(theta, t, state, hysteresis, max_gap_s, offset, cut_turns):  # noqa: C901
    """Block starts of the leg rule over one chunk (see :func:`leg_starts`).

    Without ``cut_turns`` the legs only (no cut at whole turns).

    ``state`` (float64, 9): has_prev, prev_t, sense, extreme, extreme index, leg start angle,
    next whole turn, pending cut index (-1: none), reversals so far; updated in place. Returns
    the starts found (global sample indices).
    """
    n = theta.size
    out = np.empty(n + 1, np.int64)
    k = 0
    two_pi = 2.0 * np.pi
    for i in range(n):
        th = theta[i]
        g = offset + i
        if state[0] == 0.0 or t[i] - state[1] > max_gap_s:
            out[k] = g
            k += 1
            state[2] = 0.0
            state[3] = th
            state[4] = g
            state[5] = th
            state[6] = 1.0
            state[7] = -1.0
        elif state[2] == 0.0:
            if abs(th - state[5]) > hysteresis:
                state[2] = 1.0 if th > state[5] else -1.0
                state[3] = th
                state[4] = g
        else:
            s = state[2]
            if s * (th - state[3]) >= 0.0:
                state[3] = th
                state[4] = g
            elif s * (state[3] - th) > hysteresis:
                out[k] = np.int64(state[4]) + 1
                k += 1
                state[8] += 1.0
                state[2] = -s
                state[5] = state[3]
                state[3] = th
                state[4] = g
                state[6] = 1.0
                state[7] = -1.0
            s = state[2]
            u = s * (th - state[5])
            if not cut_turns:
                pass
            elif state[7] < 0.0 and u > two_pi * state[6] + _LEG_TIE_RAD:
                state[7] = g
            if cut_turns and state[7] >= 0.0 and u > two_pi * state[6] + np.pi:
                out[k] = np.int64(state[7])
                k += 1
                state[7] = -1.0
                state[6] += 1.0
        state[0] = 1.0
        state[1] = t[i]
    return out[:k]


class LegCutter:
    """The leg rule (module docstring) streamed over consecutive chunks of a record."""

    def __init__(self, max_gap_s: float, cut_turns: bool = True):
        self.max_gap_s = float(max_gap_s)
        self.cut_turns = bool(cut_turns)
        self._state = np.zeros(9)
        self._offset = 0
        self._last = None            # unwrapped theta of the last sample

    def feed(self, t_s: NDArray, azimuth_rad: NDArray) -> NDArray:
        """Block starts (global sample indices) decided by this chunk's samples."""
        th = unwrapped_theta(azimuth_rad)
        if self._last is not None and th.size:
            th = th + (self._last + _wrapped(th[0] - self._last) - th[0])
        if th.size:
            self._last = float(th[-1])
        out = _leg_starts(th, np.ascontiguousarray(t_s, float), self._state,
                          math.radians(REVERSAL_HYSTERESIS_DEG), self.max_gap_s, self._offset,
                          self.cut_turns)
        self._offset += th.size
        return out

    @property
    def reversals(self) -> int:
        """Reversals found so far."""
        return int(self._state[8])


def leg_starts(t_s: NDArray, azimuth_rad: NDArray, max_gap_s: float) -> NDArray:
    """First sample of each block of the leg rule (module docstring), int64 indices.

    Parameters
    ----------
    t_s, azimuth_rad : ndarray, shape (n,)
        Times (s) and azimuths of path 1 (rad, C7).
    max_gap_s : float
        A time gap longer than this starts a block, s.
    """
    return LegCutter(max_gap_s).feed(t_s, azimuth_rad)


def _legs(theta: NDArray, t: NDArray, max_gap_s: float, dt: NDArray | None = None
          ) -> tuple[int, NDArray]:
    """Starts of the legs between reversals of an unwrapped angle series, and their travel.

    The travel of a leg is counted from the previous leg's extreme, rad. ``theta`` is
    unwrapped already (one chunk: the leg rule runs on it directly); ``dt``: ``diff(t)``, s,
    if the caller has it.
    """
    state = np.zeros(9)               # LegCutter's state, for the one chunk
    starts = _leg_starts(np.ascontiguousarray(theta, float), np.ascontiguousarray(t, float),
                         state, math.radians(REVERSAL_HYSTERESIS_DEG), float(max_gap_s), 0,
                         False)
    reversals = int(state[8])
    ends = np.append(starts[1:], theta.size)
    gap = np.append((np.diff(t) if dt is None else dt) > max_gap_s, False)
    travel = np.array([np.ptp(theta[a - 1 if a > 0 and not gap[a - 1] else a:b])
                       if b > a else 0.0 for a, b in zip(starts, ends)])
    return reversals, travel


def _rest_positions(theta: NDArray, tolerance_rad: float) -> NDArray:
    """Angle of each rest (two or more consecutive samples within the tolerance), rad."""
    still = np.abs(np.diff(theta)) <= tolerance_rad
    edges = np.flatnonzero(np.diff(np.concatenate([[0], still.astype(np.int8), [0]])))
    return np.array([np.mean(theta[a:b + 1]) for a, b in zip(edges[::2], edges[1::2])])


def detect_motion(t_s: NDArray, azimuth_rad: NDArray, settings: DemodSettings,
                  source: str = "run file", *, theta_rad: NDArray | None = None,
                  dt_s: NDArray | None = None, median_dt_s: float | None = None) -> Motion:
    """Classify the motion of a record's first samples (module docstring).

    Parameters
    ----------
    t_s, azimuth_rad : ndarray, shape (n,)
        Times (s) and azimuths of path 1 (rad, C7) of the first samples.
    settings : DemodSettings
        ``rest_tolerance_deg`` is used.
    source : str
        The run file, for the messages.
    theta_rad : ndarray, shape (n,), optional
        :func:`unwrapped_theta` of ``azimuth_rad``, if the caller has it already.
    dt_s : ndarray, shape (n - 1,), optional
        ``numpy.diff(t_s)``, s, if the caller has it already (the survey).
    median_dt_s : float, optional
        ``numpy.median(dt_s)``, s, if the caller has it already (the survey).

    Raises
    ------
    FitError
        When the table travels less than half a turn over the samples.
    """
    t = np.asarray(t_s, float)
    theta = unwrapped_theta(azimuth_rad) if theta_rad is None else theta_rad
    d = np.diff(theta)
    dt = np.diff(t) if dt_s is None else dt_s
    if median_dt_s is not None:
        median_dt = float(median_dt_s)
    else:
        median_dt = float(np.median(dt)) if dt.size else math.nan
    long = dt <= 10.0 * median_dt if dt.size else dt > 0    # leave out time gaps
    # the sums over the samples without gaps at once, their arrays dropped before the leg
    # rule runs (fewer large arrays alive: the allocator reuses their memory)
    d_long = d[long]
    travel = float(np.sum(np.abs(d_long)))
    turning_ccw = bool(np.sum(d_long) > 0)
    del d_long
    if t.size < 2 or not t[-1] > t[0] or travel < np.pi:
        raise FitError(f"{source}: samples/azimuth: the table travels less than half a turn in "
                       f"the first {t.size} samples; cannot demodulate a non-rotating record")
    rest_fraction = float(np.mean(np.abs(d) <= math.radians(settings.rest_tolerance_deg)))
    tol = math.radians(settings.rest_tolerance_deg)
    # stepped: rests at three or more positions (a table idle at one angle is not stepped)
    stepped = rest_fraction >= STEPPED_REST_FRACTION and _rest_positions(theta, tol).size >= 3
    n_rev, legs = _legs(theta, t, 10.0 * median_dt, dt)
    reverses = n_rev > 0
    sense = "alternating" if reverses else ("ccw" if turning_ccw else "cw")
    if stepped or reverses:
        period = 2 * np.pi * float(np.sum(dt[long])) / max(travel, 1e-300)
    else:                       # continuous: the median rate (robust to long gaps), as before
        good = dt > 0
        abs_d = np.abs(d)
        rate = float(np.median(abs_d / dt if good.all() else abs_d[good] / dt[good]))
        period = 2 * np.pi / rate if rate > 0 else math.inf
    if not math.isfinite(period):
        raise FitError(f"{source}: samples/azimuth: cannot estimate the turn period from the "
                       "first samples")
    sweep = float(np.degrees(np.median(legs[:-1] if legs.size > 2 else legs))) if reverses \
        else None
    if stepped:
        kind = "stepped"
    elif reverses:
        kind = "reversing" if sweep >= 360.0 * FULL_LEG_TURNS else "swinging"
    else:
        kind = "continuous"
    step = marks = None
    excluded = ""
    if stepped:
        pos = _rest_positions(theta, math.radians(settings.rest_tolerance_deg))
        steps = np.abs(np.diff(pos))
        steps = steps[steps > math.radians(settings.rest_tolerance_deg)]
        if steps.size:
            step = float(np.degrees(np.median(steps)))
            marks = 360.0 / step
        excluded = (f"samples not at rest: a sample is at rest when its azimuth is within "
                    f"{settings.rest_tolerance_deg:g} deg of the previous or the next "
                    "sample's; the others (the table moving between marks) are left out")
    return Motion(kind=kind, sense=sense, turn_period_s=float(period),
                  block_rule=_RULES["legs" if reverses else "turns"],
                  excluded_samples_rule=excluded, dwell_fraction=rest_fraction,
                  sweep_deg=sweep, step_deg=step, marks_per_turn=marks)


def gap_harmonic(motion: Motion) -> int:
    """The coverage check of a motion's blocks: 1 (gap in theta) or 2 (gap in 2 theta)."""
    return 2 if motion.kind in ("swinging", "stepped") else 1


def _largest_gap_deg(angles_deg: NDArray) -> float:
    a = np.sort(np.mod(angles_deg, 360.0))
    if a.size == 0:
        return 360.0
    return float(max(np.max(np.diff(a), initial=0.0), a[0] + 360.0 - a[-1]))


def check_coverage(motion: Motion, t_s: NDArray, azimuth_rad: NDArray,
                   settings: DemodSettings, source: str = "run file") -> None:
    """Refuse a motion whose blocks cannot separate C from B (module docstring).

    Stepped: the distinct rest positions of the first samples must leave no gap in 2 theta
    above ``max_2theta_gap_deg`` and number at least 2 max_harmonic + 1 (the harmonics of the
    block model at distinct angles). Swinging: twice the sweep must cover 360 degrees less
    ``max_2theta_gap_deg``.

    Raises
    ------
    FitError
        Naming the marks or the sweep and what the 2 theta pair needs.
    """
    gap_max = settings.max_2theta_gap_deg
    if motion.kind == "swinging" and 2.0 * motion.sweep_deg < 360.0 - gap_max:
        raise FitError(
            f"{source}: samples/azimuth: the table swings through {motion.sweep_deg:.3g} deg, "
            f"which leaves a gap of {360 - 2 * motion.sweep_deg:.3g} deg in 2 theta (more than "
            f"DemodSettings.max_2theta_gap_deg = {gap_max:g}): a sweep cannot separate C from "
            f"B; swing through at least {180 - gap_max / 2:g} deg")
    if motion.kind != "stepped":
        return
    theta = unwrapped_theta(azimuth_rad)
    marks = np.degrees(_rest_positions(theta, math.radians(settings.rest_tolerance_deg))) % 360.0
    distinct = np.unique(np.round(marks, 1) % 360.0)
    gap2 = _largest_gap_deg(2.0 * distinct)
    need = 2 * settings.max_harmonic + 1
    if gap2 > gap_max or distinct.size < need:
        shown = ", ".join(f"{m:g}" for m in distinct[:8]) + (", ..." if distinct.size > 8
                                                             else "")
        raise FitError(
            f"{source}: samples/azimuth: the table rests at {distinct.size} distinct angle(s) "
            f"theta = {shown} deg, which leave a gap of {gap2:.3g} deg in 2 theta (at most "
            f"DemodSettings.max_2theta_gap_deg = {gap_max:g} allowed) and need at least {need} "
            "for the block model: the marks cannot separate C from B (e.g. steps of 90 deg "
            "give the same sin 2 theta at every mark)")
