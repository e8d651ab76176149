"""Readings import options: calibration, counter gate, and the azimuth log of a second device.

:func:`fringe.io.csvimport.import_csv` uses this module for three optional metadata sections
(format in ``docs/run-format.md``):

* ``[calibration]`` (:func:`check_calibration`): readings in instrument units (micrometer
  divisions, counter counts, volts) times ``scale_factor`` give the declared signal units; the
  factor's relative standard uncertainty ``scale_rel_sigma`` goes into the run file and from
  there into the fit result as a stated scale uncertainty.
* ``[gate]`` (:func:`check_gate`): the frequency counter's gate time, kind and where in the
  averaging window its timestamp falls; the import moves each time to the window's centre
  (:func:`gate_shift_s`) and the fit corrects the 1 theta and 2 theta amplitudes for the
  averaging (:mod:`fringe.demodulate.gate`).
* ``[azimuth_log]`` (:func:`check_azimuth_log`): the azimuth comes from its own CSV file (an
  encoder log) with its own clock and rate; :class:`AzimuthTrack` interpolates it onto the
  signal's times, unwrapping the angle, refusing (or dropping) signal times in a gap of the log
  longer than ``max_gap_s``.

The track reads the log in blocks as the signal's times advance, so memory stays bounded.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Iterator, Mapping

import numpy as np
from numpy.typing import NDArray

from fringe.errors import unknown_text
from fringe.io.runformat import AZIMUTH_UNITS, GATE_KINDS

__all__ = ["GAP_ACTIONS", "GATE_STAMPS", "AzimuthTrack", "check_azimuth_log",
           "check_calibration", "check_gate", "gate_shift_s", "window_s"]

#: Where the counter's timestamp falls in its averaging window.
GATE_STAMPS = ("start", "centre", "end")
#: What to do with a signal time inside a gap of the azimuth log longer than max_gap_s.
GAP_ACTIONS = ("error", "drop")
_LOG_KEYS = ("columns", "units", "epoch_utc", "clock_offset_s", "max_gap_s", "on_gap",
             "delimiter", "comment")


#: Largest |clock_offset_s| and gate_s accepted, s (a year; a larger value is a slip, and
#: would swamp the precision of float64 times).
MAX_SECONDS = 3.2e7


def _number(table: Mapping, key: str, err, prefix: str, *, positive: bool = False,
            nonnegative: bool = False, nonzero: bool = False, bound: float | None = None
            ) -> float:
    value = table[key]
    if isinstance(value, bool) or not isinstance(value, (int, float)) \
            or not math.isfinite(value):
        raise err(f"{prefix}.{key}", f"expected a finite number, got {value!r}")
    if bound is not None and abs(value) > bound:
        raise err(f"{prefix}.{key}", f"expected a number of magnitude <= {bound:g} s, got "
                  f"{value!r}")
    for flag, ok, text in ((positive, value > 0, "a number > 0"),
                           (nonnegative, value >= 0, "a number >= 0"),
                           (nonzero, value != 0, "a non-zero number")):
        if flag and not ok:
            raise err(f"{prefix}.{key}", f"expected {text}, got {value!r}")
    return float(value)


#: What each required entry is, for the "missing entry" message.
_WHAT = {"scale_factor": "the signal units per instrument unit",
         "scale_rel_sigma": "the relative standard uncertainty of scale_factor (>= 0)",
         "instrument_units": "the units the readings were taken in",
         "gate_s": "the counter's gate time in s",
         "kind": "'plain' or 'overlapping'",
         "stamp": "where the timestamp falls in the averaging window: 'start', 'centre' or "
                  "'end'",
         "columns": "a table with the time and azimuth header names",
         "units": "a table with the azimuth units (and the time units, default 's')",
         "max_gap_s": "the largest spacing of azimuth samples to interpolate across, s",
         "time": "a header name", "azimuth": "a header name or units"}


def _keys(table: Mapping, allowed, required, err, prefix: str) -> None:
    for key in table:
        if key not in allowed:
            raise err(f"{prefix}.{key}", unknown_text(key, allowed, "field", ordered=True))
    for key in required:
        if key not in table:
            raise err(f"{prefix}.{key}", f"missing entry; expected {_WHAT[key]}")


def _choice(table: Mapping, key: str, allowed, err, prefix: str) -> str:
    value = table[key]
    if value not in allowed:
        raise err(f"{prefix}.{key}", f"expected {' or '.join(map(repr, allowed))}, got "
                  f"{value!r}")
    return value


def check_calibration(table: Mapping, err) -> dict:
    """Check ``[calibration]``: scale_factor, scale_rel_sigma (both required), instrument_units.

    ``scale_factor`` is the signal units (declared in ``[units]``) per instrument unit, finite
    and non-zero; ``scale_rel_sigma`` its relative standard uncertainty (>= 0, 0 only if the
    factor is exact); ``instrument_units`` the units the readings were taken in (a string).
    """
    _keys(table, ("scale_factor", "scale_rel_sigma", "instrument_units"),
          ("scale_factor", "scale_rel_sigma", "instrument_units"), err, "calibration")
    units = table["instrument_units"]
    if not isinstance(units, str) or not units.strip():
        raise err("calibration.instrument_units", f"expected a non-empty string, got {units!r}")
    return {"scale_factor": _number(table, "scale_factor", err, "calibration", nonzero=True),
            "scale_rel_sigma": _number(table, "scale_rel_sigma", err, "calibration",
                                       nonnegative=True),
            "instrument_units": units}


def check_gate(table: Mapping, err) -> dict:
    """Check ``[gate]``: gate_s (> 0), kind (plain/overlapping), stamp (start/centre/end)."""
    _keys(table, ("gate_s", "kind", "stamp"), ("gate_s", "kind", "stamp"), err, "gate")
    return {"gate_s": _number(table, "gate_s", err, "gate", positive=True, bound=MAX_SECONDS),
            "kind": _choice(table, "kind", GATE_KINDS, err, "gate"),
            "stamp": _choice(table, "stamp", GATE_STAMPS, err, "gate")}


def window_s(gate: Mapping) -> float:
    """Length of the averaging window, s: gate_s (plain) or 2 gate_s (overlapping)."""
    return gate["gate_s"] * (2.0 if gate["kind"] == "overlapping" else 1.0)


def gate_shift_s(gate: Mapping | None) -> float:
    """Seconds to add to a counter timestamp to reach the centre of its averaging window."""
    if not gate:
        return 0.0
    half = 0.5 * window_s(gate)
    return {"start": half, "centre": 0.0, "end": -half}[gate["stamp"]]


def check_azimuth_log(table: Mapping, err, check_epoch: Callable) -> dict:
    """Check ``[azimuth_log]``: how to read the azimuth log and merge it.

    Keys: ``columns`` (time, azimuth header names), ``units`` (time "s"/"iso8601", azimuth
    "rad"/"deg"), ``epoch_utc`` (of the log's seconds; default the signal's epoch),
    ``clock_offset_s`` (added to the log's times to put them on the signal's clock; default 0),
    ``max_gap_s`` (required, > 0), ``on_gap`` ("error" or "drop"; default "error"),
    ``delimiter``, ``comment``. ``check_epoch(value, err, obj)`` checks the epoch.
    """
    _keys(table, _LOG_KEYS, ("columns", "units", "max_gap_s"), err, "azimuth_log")
    out = {"clock_offset_s": 0.0, "on_gap": "error", "delimiter": ",", "comment": "#",
           "epoch_utc": None}
    for sub, needed in (("columns", ("time", "azimuth")), ("units", ("azimuth",))):
        value = table[sub]
        if not isinstance(value, Mapping):
            raise err(f"azimuth_log.{sub}", f"expected a table, got {type(value).__name__}")
        _keys(value, ("time", "azimuth"), needed, err, f"azimuth_log.{sub}")
        for key, item in value.items():
            if not isinstance(item, str) or not item.strip():
                raise err(f"azimuth_log.{sub}.{key}", f"expected a non-empty string, got "
                          f"{item!r}")
        out[sub] = dict(value)
    out["units"].setdefault("time", "s")
    for key, allowed in (("time", ("s", "iso8601")), ("azimuth", AZIMUTH_UNITS)):
        _choice(out["units"], key, allowed, err, "azimuth_log.units")
    out["max_gap_s"] = _number(table, "max_gap_s", err, "azimuth_log", positive=True)
    if "clock_offset_s" in table:
        out["clock_offset_s"] = _number(table, "clock_offset_s", err, "azimuth_log",
                                        bound=MAX_SECONDS)
    if "on_gap" in table:
        out["on_gap"] = _choice(table, "on_gap", GAP_ACTIONS, err, "azimuth_log")
    for key in ("delimiter", "comment"):
        if key in table:
            value = table[key]
            what = "one character" if key == "delimiter" else "a string"
            if not isinstance(value, str) or (key == "delimiter" and len(value) != 1):
                raise err(f"azimuth_log.{key}", f"expected {what}, got {value!r}")
            out[key] = value
    if table.get("epoch_utc") is not None:
        out["epoch_utc"] = check_epoch(table["epoch_utc"], err, "azimuth_log.epoch_utc")
    return out


class AzimuthTrack:
    """The azimuth log, unwrapped and interpolated onto increasing signal times.

    Parameters
    ----------
    blocks : iterator of (t_s, azimuth, lines)
        The log in blocks: times on the signal's clock (s since the signal's epoch, strictly
        increasing, also across blocks), azimuths in the log's units, CSV line numbers.
    turn : float
        One turn in the log's units (360 or 2 pi); consecutive log samples are taken to differ
        by less than half a turn (the unwrap rule).
    max_gap_s : float
        Largest spacing of the two log samples around a signal time, s.
    """

    def __init__(self, blocks: Iterator[tuple[NDArray, NDArray, list[int]]], turn: float,
                 max_gap_s: float):
        self._blocks, self._turn, self.max_gap_s = blocks, turn, max_gap_s
        self._t = np.zeros(0)
        self._az = np.zeros(0)
        self._line = np.zeros(0, np.int64)
        self._done = False
        self.first_s: float | None = None
        self.last_s: float | None = None

    def _read_until(self, t_s: float) -> None:
        while not self._done and (self._t.size == 0 or self._t[-1] < t_s):
            got = next(self._blocks, None)
            if got is None:
                self._done = True
                break
            t, az, lines = got
            if self._az.size:
                az = np.concatenate([self._az[-1:], az])
            az = np.unwrap(az, period=self._turn)
            if self._az.size:
                az = az[1:]
            if self.first_s is None:
                self.first_s = float(t[0])
            self.last_s = float(t[-1])
            self._t = np.concatenate([self._t, t])
            self._az = np.concatenate([self._az, az])
            self._line = np.concatenate([self._line, np.asarray(lines, np.int64)])

    def at(self, t_s: NDArray) -> tuple[NDArray, NDArray, NDArray, NDArray]:
        """Interpolate at increasing times ``t_s`` (s).

        Returns
        -------
        azimuth : ndarray
            Interpolated (unwrapped) azimuth, log units; NaN where there is none.
        inside : ndarray of bool
            Time within the log's span (first to last log sample).
        gap_s : ndarray
            Spacing of the two log samples around each time, s (0 at a log sample's own time,
            inf outside the span).
        line : ndarray of int
            CSV line of the log sample after each time (0 outside the span).
        """
        self._read_until(float(t_s[-1]))
        t, az = self._t, self._az
        n = t.size
        j = np.searchsorted(t, t_s, side="right")            # t[j-1] <= t_s < t[j]
        exact_end = (j == n) & (n > 0) & (t_s == (t[-1] if n else np.nan))
        j = np.where(exact_end, n - 1, j)
        inside = (j >= 1) & (j <= n - 1) if n >= 2 else np.zeros(t_s.size, bool)
        jj = np.clip(j, 1, max(n - 1, 1))
        out = np.full(t_s.size, np.nan)
        gap = np.full(t_s.size, np.inf)
        line = np.zeros(t_s.size, np.int64)
        if n >= 2:
            t0, t1 = t[jj - 1], t[jj]
            with np.errstate(invalid="ignore", divide="ignore"):   # t1 > t0 where inside
                w = np.where(inside, (t_s - t0) / np.where(t1 > t0, t1 - t0, 1.0), 0.0)
            value = az[jj - 1] + w * (az[jj] - az[jj - 1])
            out = np.where(inside, value, np.nan)
            gap = np.where(inside, np.where(t_s == t0, 0.0, t1 - t0), np.inf)  # exact: no gap
            line = np.where(inside, self._line[jj], 0)
            keep = max(int(jj[-1]) - 1, 0)                  # later times need no earlier rows
            self._t, self._az, self._line = t[keep:], az[keep:], self._line[keep:]
        return out, inside, gap, line
