"""Turntable motion: the azimuth of path 1 (and the table tilt) as functions of time.

* :class:`ContinuousRotation` — uniform rotation at a period, in either sense.
* :class:`SteppedRotation` — steps of a fixed angle, with dwell marks (the time at rest).
* :class:`ReversingRotation` — uniform rotation whose sense reverses after every leg of whole
  turns (alternate turns).
* :class:`SwingingRotation` — back and forth through an arc of less than (or up to) a full turn
  at a constant rate, reversing at each end.
* :class:`RecordedAzimuth` — orientation taken from recorded azimuth samples.
* :class:`AxisTilt` — a tilt of the rotation axis from local vertical.
* :func:`table_to_lab` — the rotation from the table frame to the lab frame.

Azimuths follow C7 (from north toward east). A table turning counter-clockwise seen from above
("ccw") has d theta/dt > 0 (C6), i.e. a decreasing azimuth.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from fringe.conventions import theta_from_azimuth
from fringe.errors import (
    ConfigError,
    check_dataclass_keywords,
    check_finite_number,
    unknown_name,
)

SENSES = {"ccw": 1.0, "cw": -1.0}


def _check_sense(sense: str) -> float:
    if sense not in SENSES:
        raise ConfigError(f"turntable: sense: expected 'ccw' (counter-clockwise seen from "
                          f"above) or 'cw', got {sense!r}")
    return SENSES[sense]


@dataclass(frozen=True)
class ContinuousRotation:
    """Uniform rotation.

    Parameters
    ----------
    period_s : float
        Time for one full turn, s.
    sense : {"ccw", "cw"}
        Counter-clockwise (d theta/dt > 0) or clockwise, seen from above.
    start_azimuth_deg : float
        Azimuth of path 1 at t = 0, degrees.
    """

    period_s: float
    sense: str = "ccw"
    start_azimuth_deg: float = 0.0

    def __post_init__(self):
        check_finite_number(self.period_s, "turntable", "period_s", positive=True)
        check_finite_number(self.start_azimuth_deg, "turntable", "start_azimuth_deg")
        _check_sense(self.sense)

    @property
    def rate_rad_s(self) -> float:
        """Rate d theta / dt, rad/s (positive for ccw)."""
        return SENSES[self.sense] * 2.0 * math.pi / self.period_s

    def azimuth_rad(self, t_s: ArrayLike) -> NDArray:
        """Unwrapped azimuth of path 1, radians."""
        return math.radians(self.start_azimuth_deg) - self.rate_rad_s * np.asarray(t_s, float)

    def dwelling(self, t_s: ArrayLike) -> NDArray:
        """All False, shape of ``t_s``: a continuously turning table never rests at a mark."""
        return np.zeros(np.shape(t_s), dtype=bool)

    def to_dict(self) -> dict:
        """The motion as a scenario table (``motion = "continuous"`` plus its fields)."""
        return {"motion": "continuous", "period_s": self.period_s, "sense": self.sense,
                "start_azimuth_deg": self.start_azimuth_deg}


@dataclass(frozen=True)
class SteppedRotation:
    """Steps of ``step_deg``: dwell at rest, then move at constant rate for ``move_s``.

    Parameters
    ----------
    step_deg : float
        Angle of one step, degrees (22.5 gives 16 marks per turn).
    dwell_s : float
        Time at rest at each mark, s.
    move_s : float
        Time to move between marks, s.
    sense : {"ccw", "cw"}
        Sense of the steps seen from above.
    start_azimuth_deg : float
        Azimuth of path 1 at the first mark, degrees.
    """

    step_deg: float
    dwell_s: float
    move_s: float
    sense: str = "ccw"
    start_azimuth_deg: float = 0.0

    def __post_init__(self):
        check_finite_number(self.step_deg, "turntable", "step_deg", positive=True)
        check_finite_number(self.dwell_s, "turntable", "dwell_s", positive=True)
        check_finite_number(self.move_s, "turntable", "move_s", minimum=0.0)
        check_finite_number(self.start_azimuth_deg, "turntable", "start_azimuth_deg")
        _check_sense(self.sense)

    @property
    def period_s(self) -> float:
        """Time for a full turn, s."""
        return (self.dwell_s + self.move_s) * 360.0 / self.step_deg

    def _phase(self, t_s):
        cycle = self.dwell_s + self.move_s
        t = np.asarray(t_s, float)
        k = np.floor(t / cycle)
        into = t - k * cycle
        frac = np.clip((into - self.dwell_s) / self.move_s, 0.0, 1.0) if self.move_s > 0 \
            else np.zeros_like(into)
        return k + frac, into < self.dwell_s

    def azimuth_rad(self, t_s: ArrayLike) -> NDArray:
        """Unwrapped azimuth of path 1 at times ``t_s`` (s), radians."""
        steps, _ = self._phase(t_s)
        return (math.radians(self.start_azimuth_deg)
                - SENSES[self.sense] * math.radians(self.step_deg) * steps)

    def dwelling(self, t_s: ArrayLike) -> NDArray:
        """True while the table rests at a mark (the dwell marks)."""
        return self._phase(t_s)[1]

    def to_dict(self) -> dict:
        """The motion as a scenario table (``motion = "stepped"`` plus its fields)."""
        return {"motion": "stepped", "step_deg": self.step_deg, "dwell_s": self.dwell_s,
                "move_s": self.move_s, "sense": self.sense,
                "start_azimuth_deg": self.start_azimuth_deg}


def _triangle(t_s: ArrayLike, leg_s: float) -> NDArray:
    """Fraction of the current leg travelled, folded so that odd legs run back.

    A triangle wave in [0, 1] of period 2 leg_s (0 at t = 0).
    """
    u = np.asarray(t_s, float) / leg_s
    k = np.floor(u)
    frac = u - k
    return np.where(k % 2 == 0, frac, 1.0 - frac)


@dataclass(frozen=True)
class ReversingRotation:
    """Uniform rotation that reverses its sense after every ``turns_per_leg`` whole turns.

    The table turns at a constant rate through ``turns_per_leg`` turns in ``sense``, reverses at
    once and turns back through as many, so it passes its starting azimuth at every reversal
    (alternate turns for ``turns_per_leg = 1``).

    Parameters
    ----------
    period_s : float
        Time for one full turn, s.
    turns_per_leg : int
        Whole turns between reversals (>= 1).
    sense : {"ccw", "cw"}
        Sense of the first leg, seen from above.
    start_azimuth_deg : float
        Azimuth of path 1 at t = 0, degrees.
    """

    period_s: float
    turns_per_leg: int = 1
    sense: str = "ccw"
    start_azimuth_deg: float = 0.0

    def __post_init__(self):
        check_finite_number(self.period_s, "turntable", "period_s", positive=True)
        check_finite_number(self.start_azimuth_deg, "turntable", "start_azimuth_deg")
        if (isinstance(self.turns_per_leg, bool) or not isinstance(self.turns_per_leg, int)
                or self.turns_per_leg < 1):
            raise ConfigError(f"turntable: turns_per_leg: expected a whole number >= 1, "
                              f"got {self.turns_per_leg!r}")
        _check_sense(self.sense)

    def azimuth_rad(self, t_s: ArrayLike) -> NDArray:
        """Azimuth of path 1 at times ``t_s`` (s), radians (unwrapped)."""
        leg_s = self.period_s * self.turns_per_leg
        travel = 2.0 * math.pi * self.turns_per_leg * _triangle(t_s, leg_s)
        return math.radians(self.start_azimuth_deg) - SENSES[self.sense] * travel

    def dwelling(self, t_s: ArrayLike) -> NDArray:
        """All False, shape of ``t_s``: the table never rests at a mark."""
        return np.zeros(np.shape(t_s), dtype=bool)

    def to_dict(self) -> dict:
        """The motion as a scenario table (``motion = "reversing"`` plus its fields)."""
        return {"motion": "reversing", "period_s": self.period_s,
                "turns_per_leg": self.turns_per_leg, "sense": self.sense,
                "start_azimuth_deg": self.start_azimuth_deg}


@dataclass(frozen=True)
class SwingingRotation:
    """Back and forth through an arc of ``arc_deg`` at a constant rate.

    The table sweeps from its start azimuth through ``arc_deg`` in ``sense`` in ``sweep_s``,
    reverses at once and sweeps back, and so on (a triangle wave of the angle).

    Parameters
    ----------
    arc_deg : float
        Angle of one sweep, degrees (0 < arc_deg <= 360; at least 120 for a defined 2 theta pair
        per sweep, see ``docs/fit.md``).
    sweep_s : float
        Time of one sweep, s.
    sense : {"ccw", "cw"}
        Sense of the first sweep, seen from above.
    start_azimuth_deg : float
        Azimuth of path 1 at t = 0 (one end of the arc), degrees.
    """

    arc_deg: float
    sweep_s: float
    sense: str = "ccw"
    start_azimuth_deg: float = 0.0

    def __post_init__(self):
        check_finite_number(self.arc_deg, "turntable", "arc_deg", positive=True)
        check_finite_number(self.sweep_s, "turntable", "sweep_s", positive=True)
        check_finite_number(self.start_azimuth_deg, "turntable", "start_azimuth_deg")
        if self.arc_deg > 360.0:
            raise ConfigError(f"turntable: arc_deg: expected at most 360 (a swing of more than "
                              f"a turn is motion = \"reversing\"), got {self.arc_deg!r}")
        _check_sense(self.sense)

    @property
    def period_s(self) -> float:
        """Time per full turn of travel at the sweep rate, s."""
        return self.sweep_s * 360.0 / self.arc_deg

    def azimuth_rad(self, t_s: ArrayLike) -> NDArray:
        """Azimuth of path 1 at times ``t_s`` (s), radians (unwrapped)."""
        travel = math.radians(self.arc_deg) * _triangle(t_s, self.sweep_s)
        return math.radians(self.start_azimuth_deg) - SENSES[self.sense] * travel

    def dwelling(self, t_s: ArrayLike) -> NDArray:
        """All False, shape of ``t_s``: the table never rests at a mark."""
        return np.zeros(np.shape(t_s), dtype=bool)

    def to_dict(self) -> dict:
        """The motion as a scenario table (``motion = "swinging"`` plus its fields)."""
        return {"motion": "swinging", "arc_deg": self.arc_deg, "sweep_s": self.sweep_s,
                "sense": self.sense, "start_azimuth_deg": self.start_azimuth_deg}


@dataclass(frozen=True)
class RecordedAzimuth:
    """Orientation from recorded samples (linear interpolation in unwrapped azimuth)."""

    t_s: NDArray
    azimuth_rad_samples: NDArray

    def azimuth_rad(self, t_s: ArrayLike) -> NDArray:
        """Azimuth of path 1 at times ``t_s`` (s), radians, interpolated in unwrapped azimuth."""
        return np.interp(np.asarray(t_s, float), self.t_s,
                         np.unwrap(self.azimuth_rad_samples))

    def dwelling(self, t_s: ArrayLike) -> NDArray:
        """All False, shape of ``t_s``: recorded motion has no dwell marks."""
        return np.zeros(np.shape(t_s), dtype=bool)

    def to_dict(self) -> dict:
        """A summary for metadata: ``motion = "recorded"`` and the number of samples."""
        return {"motion": "recorded", "n_samples": int(np.size(self.t_s))}


@dataclass(frozen=True)
class AxisTilt:
    """Tilt of the table axis from local up: toward south and toward east, radians (small)."""

    south_rad: float = 0.0
    east_rad: float = 0.0

    def __post_init__(self):
        for name in ("south_rad", "east_rad"):
            v = check_finite_number(getattr(self, name), "turntable", f"tilt {name}")
            if abs(v) > 0.1:
                raise ConfigError(f"turntable: tilt {name}: expected a small angle "
                                  f"(|tilt| <= 0.1 rad), got {v!r}")

    @property
    def is_zero(self) -> bool:
        """True when both tilt components are exactly zero."""
        return self.south_rad == 0.0 and self.east_rad == 0.0


def tilt_matrix(south_rad: ArrayLike, east_rad: ArrayLike) -> NDArray:
    """Rotation taking local up to the tilted axis (tan s, tan e, 1)/norm, shape (..., 3, 3).

    Rodrigues rotation about the horizontal axis z x a (the smallest rotation doing so).
    """
    s, e = np.broadcast_arrays(np.asarray(south_rad, float), np.asarray(east_rad, float))
    a = np.stack([np.tan(s), np.tan(e), np.ones_like(s)], -1)
    a /= np.linalg.norm(a, axis=-1, keepdims=True)
    cos_t = a[..., 2]
    k = np.stack([-a[..., 1], a[..., 0], np.zeros_like(s)], -1)     # z x a, |k| = sin t
    kx = np.zeros(s.shape + (3, 3))
    kx[..., 0, 2], kx[..., 1, 2] = k[..., 1], -k[..., 0]
    kx[..., 2, 0], kx[..., 2, 1] = -k[..., 1], k[..., 0]
    kx[..., 0, 1] = kx[..., 1, 0] = 0.0
    # R = I + [k]x + [k]x^2 / (1 + cos t)  (k unnormalised, |k| = sin t)
    return np.eye(3) + kx + (kx @ kx) / (1.0 + cos_t)[..., None, None]


def table_to_lab(azimuth_rad: ArrayLike, tilt: AxisTilt | None = None) -> NDArray:
    """Rotation Q(t) from the table frame (x' = path 1) to lab axes, shape (n, 3, 3).

    Q = Tilt · Rz(theta) with theta = pi - A (C7), so Q x' = (cos theta, sin theta, 0) untilted.
    """
    th = theta_from_azimuth(azimuth_rad)
    c, s = np.cos(th), np.sin(th)
    z, o = np.zeros_like(th), np.ones_like(th)
    q = np.stack([np.stack([c, -s, z], -1), np.stack([s, c, z], -1), np.stack([z, z, o], -1)],
                 -2)
    if tilt is not None and not tilt.is_zero:
        q = tilt_matrix(tilt.south_rad, tilt.east_rad) @ q
    return q


#: Registry of the scenario motions: ``motion = NAME`` -> class.
MOTIONS = {"continuous": ContinuousRotation, "stepped": SteppedRotation,
           "reversing": ReversingRotation, "swinging": SwingingRotation}


def make_motion(spec: dict, source: str = "turntable"):
    """Build a turntable motion from a scenario table (``motion`` plus its fields)."""
    spec = dict(spec)
    motion = spec.pop("motion", "continuous")
    spec.pop("tilt_south_urad", None)
    spec.pop("tilt_east_urad", None)
    if motion not in MOTIONS:
        raise ConfigError(f"{source}: motion: "
                          + unknown_name(str(motion), MOTIONS, "motion", ordered=True))
    cls = MOTIONS[motion]
    check_dataclass_keywords(cls, spec, f"{source}:", f"field of {motion} motion")
    try:
        return cls(**spec)
    except TypeError as exc:
        raise ConfigError(f"{source}: {exc}") from None
