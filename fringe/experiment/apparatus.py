"""Apparatus kinds: which modes (light paths, resonator modes, clock axes) and how they combine.

Every apparatus is a set of *modes*. A mode has a sensitivity tensor ``M`` (the projector n n of
its axis for a Fabry-Perot cavity or an interferometer arm, or a general tensor from the mode
integrals, docs/references.md [R-SME-modes]) given in the **turntable frame** (x' = path 1,
y' = 90 deg counter-clockwise from it seen from above, z' = table axis) or, for a lab-fixed mode,
in the lab frame. The two-way fractional change of a mode is ``M_lab : T + tr(M) s`` (see
:mod:`fringe.theories.base`) and the observable is a weighted sum over modes (linear kinds) or an
exact function of the per-mode changes (the Michelson fringe count).

======================= ==================================================== =============
kind                    observable                                           units
======================= ==================================================== =============
``cavity-pair``         (nu_1 - nu_2)/nu, path 2 at azimuth A_1 + separation  "1" or "Hz"
``cavity-vs-reference`` rotating cavity minus a reference (atomic or fixed)   "1" or "Hz"
``michelson``           Delta N = c (t_1 - t_2)/lambda (C8)                   "fringe"
``clock``               sensitivity_hz * q . c_lab . q                        "Hz"
======================= ==================================================== =============

Paths are specified by azimuth (C7); a table-frame angle alpha (counter-clockwise, like theta)
corresponds to an azimuth offset -alpha.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import ClassVar

import numpy as np
from numpy.typing import NDArray

from fringe.conventions import DEFAULT_PATH_SEPARATION_DEG
from fringe.errors import ConfigError, check_finite_number, reject_unknown_fields


@dataclass(frozen=True)
class Mode:
    """One mode: sensitivity tensor (3x3), optional straight-path direction, mounting.

    Parameters
    ----------
    tensor : ndarray, shape (3, 3)
        Sensitivity tensor M, table frame (``on_table``) or lab frame (south, east, up).
    direction : ndarray, shape (3,) or None
        Unit direction of a straight two-way light path (needed by nonlinear theories).
    on_table : bool
        True for a mode that turns with the table.
    """

    tensor: NDArray
    direction: NDArray | None = None
    on_table: bool = True

    @staticmethod
    def straight(table_angle_rad: float, on_table: bool = True, vertical: bool = False) -> Mode:
        """A straight path (Fabry-Perot axis, interferometer arm or clock axis)."""
        if vertical:
            d = np.array([0.0, 0.0, 1.0])
        else:
            d = np.array([math.cos(table_angle_rad), math.sin(table_angle_rad), 0.0])
        return Mode(tensor=np.outer(d, d), direction=d, on_table=on_table)


def _check_tensor(value, source: str) -> NDArray:
    t = np.asarray(value, dtype=float) if not isinstance(value, str) else None
    if t is None or t.shape != (3, 3) or not np.all(np.isfinite(t)) or not np.allclose(t, t.T):
        raise ConfigError(f"{source}: expected a symmetric 3x3 array of finite numbers, "
                          f"got {value!r}")
    return t


def _azimuth_offset_to_table_angle(offset_deg: float) -> float:
    return -math.radians(offset_deg)


class Apparatus:
    """Base class. Subclasses define ``modes``, ``weights`` and the allowed units."""

    kind: ClassVar[str] = ""
    sector: ClassVar[str] = "photon"
    units_allowed: ClassVar[tuple[str, ...]] = ("1",)
    modes: tuple[Mode, ...]
    weights: tuple[float, ...]

    @property
    def default_units(self) -> str:
        """Signal units used when a run file or scenario names none (the first allowed)."""
        return self.units_allowed[0]

    @property
    def isotropic_reference(self) -> bool:
        """True when the observable compares against a reference with no anisotropy.

        Such a reference is, e.g., an atomic clock; against it an isotropic change of the light
        speed (e.g. rms_kt) stays visible.
        """
        return False

    def check_units(self, units: str) -> str:
        """Return ``units`` if this kind allows them, else raise :class:`ConfigError`."""
        if units not in self.units_allowed:
            raise ConfigError(f"apparatus {self.kind}: signal units: expected one of "
                              f"{', '.join(repr(u) for u in self.units_allowed)}, got {units!r}")
        return units

    def scale(self, units: str) -> float:
        """Factor from the fractional combination to the observable in ``units``."""
        self.check_units(units)
        return 1.0

    def linear_weights(self, units: str) -> NDArray:
        """Weights per mode of the observable, linearised in the mode shifts."""
        return self.scale(units) * np.asarray(self.weights, dtype=float)

    def combine(self, mode_shifts: NDArray, units: str, index: float = 1.0) -> NDArray:
        """Observable from per-mode two-way fractional changes (n, p) -> (n,); exact.

        ``index`` (c over the speed the changes refer to, the theory's
        :attr:`~fringe.theories.base.Theory.phase_index`) does not enter a resonator's or a
        clock's fractional frequency; only the Michelson fringe count uses it.
        """
        return mode_shifts @ self.linear_weights(units)

    def attributes(self) -> dict:
        """Attributes as stored in a run file's ``apparatus`` group."""
        raise NotImplementedError


@dataclass(frozen=True)
class CavityPair(Apparatus):
    """Two cavities on the table; S = (nu_1 - nu_2)/nu, or nu_1 - nu_2 in Hz.

    Parameters
    ----------
    carrier_hz : float or None
        Optical or microwave carrier frequency, Hz (needed for units "Hz").
    path_separation_deg : float
        Azimuth of path 2 minus azimuth of path 1, degrees (C8 default 90).
    mode_tensors : pair of 3x3 arrays, optional
        General sensitivity tensors of the two modes in the table frame, replacing the
        Fabry-Perot projectors (e.g. from a whispering-gallery mode integral).
    """

    carrier_hz: float | None = None
    path_separation_deg: float = DEFAULT_PATH_SEPARATION_DEG
    mode_tensors: tuple | None = None
    kind: ClassVar[str] = "cavity-pair"
    units_allowed: ClassVar[tuple[str, ...]] = ("Hz", "1")
    modes: tuple[Mode, ...] = field(init=False, repr=False)
    weights: tuple[float, ...] = field(init=False, repr=False, default=(1.0, -1.0))

    def __post_init__(self):
        if self.carrier_hz is not None:
            check_finite_number(self.carrier_hz, "apparatus", "carrier_hz", positive=True)
        sep = check_finite_number(self.path_separation_deg, "apparatus", "path_separation_deg")
        modes = [Mode.straight(0.0), Mode.straight(_azimuth_offset_to_table_angle(sep))]
        if self.mode_tensors is not None:
            if len(self.mode_tensors) != 2:
                raise ConfigError("apparatus: mode_tensors: expected two 3x3 tensors")
            modes = [Mode(tensor=_check_tensor(t, f"apparatus: mode_tensors[{i}]"),
                          direction=None) for i, t in enumerate(self.mode_tensors)]
        object.__setattr__(self, "modes", tuple(modes))

    @property
    def default_units(self):
        """Signal units used when none are named: "Hz" with a carrier frequency, else "1"."""
        return "Hz" if self.carrier_hz else "1"

    def scale(self, units):
        """Factor from the fractional difference to ``units``: the carrier in Hz for "Hz", else 1.

        Raises :class:`ConfigError` for "Hz" without ``carrier_hz``.
        """
        self.check_units(units)
        if units == "Hz":
            if not self.carrier_hz:
                raise ConfigError("apparatus: carrier_hz: needed for a signal in Hz")
            return float(self.carrier_hz)
        return 1.0

    def attributes(self):
        """Kind, path separation (deg) and carrier (Hz, if set), as in a run file."""
        out = {"kind": self.kind, "path_separation_deg": self.path_separation_deg}
        if self.carrier_hz:
            out["carrier_hz"] = self.carrier_hz
        return out


@dataclass(frozen=True)
class CavityVsReference(CavityPair):
    """One rotating cavity against a non-rotating reference.

    Parameters
    ----------
    carrier_hz : float or None
        Carrier, Hz.
    reference : str or float
        ``"atomic"`` (a reference with no anisotropy: the isotropic terms, e.g. rms_kt, stay
        visible) or the fixed azimuth of a lab-fixed reference cavity, degrees.
    """

    reference: str | float = "atomic"
    kind: ClassVar[str] = "cavity-vs-reference"

    @property
    def isotropic_reference(self) -> bool:
        """True for the ``"atomic"`` reference (no anisotropy); False for a reference cavity."""
        return self.reference == "atomic"

    def __post_init__(self):
        if self.carrier_hz is not None:
            check_finite_number(self.carrier_hz, "apparatus", "carrier_hz", positive=True)
        rotating = Mode.straight(0.0)
        if self.mode_tensors is not None:
            rotating = Mode(tensor=_check_tensor(self.mode_tensors[0],
                                                 "apparatus: mode_tensors[0]"))
        if self.reference == "atomic":
            modes, weights = (rotating,), (1.0,)
        else:
            az = check_finite_number(self.reference, "apparatus", "reference")
            d = np.array([-math.cos(math.radians(az)), math.sin(math.radians(az)), 0.0])
            modes = (rotating, Mode(tensor=np.outer(d, d), direction=d, on_table=False))
            weights = (1.0, -1.0)
        object.__setattr__(self, "modes", modes)
        object.__setattr__(self, "weights", weights)

    def attributes(self):
        """Kind, reference ("atomic" or azimuth, deg) and carrier (Hz, if set), as in a run file."""
        out = {"kind": self.kind, "reference": self.reference}
        if self.carrier_hz:
            out["carrier_hz"] = self.carrier_hz
        return out


@dataclass(frozen=True)
class Michelson(Apparatus):
    """Michelson interferometer on the table; fringe count Delta N = c (t_1 - t_2)/lambda.

    Parameters
    ----------
    arm_length_m : float
        Length of arm 1 (one way, per pass), m.
    wavelength_m : float
        Vacuum wavelength, m.
    passes : int
        Number of round trips along each arm (folded paths).
    arm_length_2_m : float or None
        Length of arm 2, m (default: equal arms).
    path_separation_deg : float
        Azimuth of arm 2 minus azimuth of arm 1, degrees.

    Notes
    -----
    With t_i = 2 passes L_i / (u (1 + delta_i)), delta_i the two-way change relative to the
    wave speed u = c/n (n = 1 in vacuum), the orientation-dependent part of
    Delta N = c (t_1 - t_2)/lambda is
    Delta N = n (2 passes / lambda) [-L_1 delta_1/(1 + delta_1) + L_2 delta_2/(1 + delta_2)];
    the constant 2 n passes (L_1 - L_2)/lambda is dropped. Linearised: -(2 n L / lambda) S for
    equal arms.
    """

    arm_length_m: float = 1.0
    wavelength_m: float = 633e-9
    passes: int = 1
    arm_length_2_m: float | None = None
    path_separation_deg: float = DEFAULT_PATH_SEPARATION_DEG
    kind: ClassVar[str] = "michelson"
    units_allowed: ClassVar[tuple[str, ...]] = ("fringe",)
    modes: tuple[Mode, ...] = field(init=False, repr=False)
    weights: tuple[float, ...] = field(init=False, repr=False, default=(1.0, -1.0))

    def __post_init__(self):
        check_finite_number(self.arm_length_m, "apparatus", "arm_length_m", positive=True)
        check_finite_number(self.wavelength_m, "apparatus", "wavelength_m", positive=True)
        if self.arm_length_2_m is not None:
            check_finite_number(self.arm_length_2_m, "apparatus", "arm_length_2_m", positive=True)
        if isinstance(self.passes, bool) or not isinstance(self.passes, int) or self.passes < 1:
            raise ConfigError(f"apparatus: passes: expected a positive integer, "
                              f"got {self.passes!r}")
        sep = check_finite_number(self.path_separation_deg, "apparatus", "path_separation_deg")
        object.__setattr__(self, "modes", (Mode.straight(0.0),
                                           Mode.straight(_azimuth_offset_to_table_angle(sep))))

    @property
    def arm_lengths_m(self) -> NDArray:
        """Lengths of arms 1 and 2 (one way, per pass), m; arm 2 defaults to arm 1."""
        l2 = self.arm_length_2_m if self.arm_length_2_m is not None else self.arm_length_m
        return np.array([self.arm_length_m, l2])

    def linear_weights(self, units):
        """Fringes per unit two-way fractional change of arms 1, 2: -(2 passes/lambda) (L1, -L2)."""
        self.check_units(units)
        return -(2.0 * self.passes / self.wavelength_m) * self.arm_lengths_m * np.array([1, -1])

    def combine(self, mode_shifts, units, index=1.0):
        """Exact fringe count Delta N from the per-arm changes delta, (n, 2) -> (n,); see Notes.

        ``index`` is n = c/u when the changes refer to waves of speed u (a medium of index n):
        Delta N = c (t_1 - t_2)/lambda is then n times the vacuum-form count.
        """
        self.check_units(units)
        return index * ((mode_shifts / (1.0 + mode_shifts)) @ self.linear_weights(units))

    def attributes(self):
        """Kind, arm lengths (m), wavelength (m), passes, arm separation (deg), as in a run file."""
        out = {"kind": self.kind, "arm_length_m": self.arm_length_m,
               "wavelength_m": self.wavelength_m, "passes": self.passes,
               "path_separation_deg": self.path_separation_deg}
        if self.arm_length_2_m is not None:
            out["arm_length_2_m"] = self.arm_length_2_m
        return out


@dataclass(frozen=True)
class OrientedClock(Apparatus):
    """A clock transition whose quantization axis turns with the table (or stays vertical).

    Parameters
    ----------
    sensitivity_hz : float
        Frequency shift per unit coefficient, Hz (from atomic-structure calculations).
    axis : {"table", "vertical"}
        Quantization axis along path 1 on the table, or fixed along local up.
    """

    sensitivity_hz: float = 1.0
    axis: str = "table"
    kind: ClassVar[str] = "clock"
    sector: ClassVar[str] = "matter"
    units_allowed: ClassVar[tuple[str, ...]] = ("Hz",)
    modes: tuple[Mode, ...] = field(init=False, repr=False)
    weights: tuple[float, ...] = field(init=False, repr=False, default=(1.0,))

    def __post_init__(self):
        check_finite_number(self.sensitivity_hz, "apparatus", "sensitivity_hz")
        if self.axis not in ("table", "vertical"):
            raise ConfigError(f"apparatus: axis: expected 'table' or 'vertical', "
                              f"got {self.axis!r}")
        mode = Mode.straight(0.0, on_table=self.axis == "table",
                             vertical=self.axis == "vertical")
        object.__setattr__(self, "modes", (mode,))

    def scale(self, units):
        """Factor to the signal in Hz: ``sensitivity_hz``."""
        self.check_units(units)
        return float(self.sensitivity_hz)

    def attributes(self):
        """Kind, sensitivity (Hz) and axis, as in a run file."""
        return {"kind": self.kind, "sensitivity_hz": self.sensitivity_hz, "axis": self.axis}


#: Class-level constants of the apparatus classes (never constructor arguments).
_CLASS_CONSTANTS = {"kind", "sector", "units_allowed", "modes", "weights"}


def apparatus_fields(cls: type[Apparatus]) -> set[str]:
    """The constructor fields of an apparatus class (what a run file or scenario may set)."""
    return {f for f, d in cls.__dataclass_fields__.items()
            if d.init and f not in _CLASS_CONSTANTS}


APPARATUS_KINDS: dict[str, type[Apparatus]] = {
    cls.kind: cls for cls in (CavityPair, CavityVsReference, Michelson, OrientedClock)}


def make_apparatus(attrs: dict, source: str = "apparatus") -> Apparatus:
    """Build an apparatus from run-file / scenario attributes (``kind`` plus its fields)."""
    attrs = dict(attrs)
    kind = attrs.pop("kind", None)
    if kind not in APPARATUS_KINDS:
        raise ConfigError(f"{source}: kind: expected one of {', '.join(APPARATUS_KINDS)}, "
                          f"got {kind!r}")
    cls = APPARATUS_KINDS[kind]
    allowed = apparatus_fields(cls)
    reject_unknown_fields(attrs, allowed, f"{source}:", f"not a field of kind '{kind}'")
    if "passes" in attrs and isinstance(attrs["passes"], float) and attrs["passes"].is_integer():
        attrs["passes"] = int(attrs["passes"])
    return cls(**attrs)
