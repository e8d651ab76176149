"""Apparatus kinds: which modes (light paths, resonator modes, clock axes) and how they combine.

Every apparatus is a set of *modes*. A mode has a sensitivity tensor ``M`` given in the
**turntable frame** (x' = path 1, y' = 90 deg counter-clockwise from it seen from above, z' =
table axis) or, for a lab-fixed mode, in the lab frame. Internally ``M`` is normalised to trace
one for a straight path (the projector n n of a Fabry-Perot axis or an interferometer arm), and
the two-way fractional change of a mode is ``M_lab : T + tr(M) s`` (see
:mod:`fringe.theories.base`). General tensors a user supplies (``mode_tensors``) are in the
documented normalisation of docs/theory.md ([R-SME-modes]): delta nu / nu = M_doc : K_lab, with
M_doc = 1/2 n n for a Fabry-Perot mode and 1/4 (1 - a a) for a ring mode; since T = K_lab / 2
for the photon sector, the internal tensor is 2 M_doc. The observable is a weighted sum over
modes (linear kinds) or an exact function of the per-mode changes (the Michelson fringe count).

The harmonics of an observable relate to those of the two-path signal S of convention C9 by one
complex factor (:meth:`Apparatus.two_path_factor`).

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
from fringe.errors import ConfigError, check_finite_number, reject_unknown_fields, unknown_name


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


def _user_mode(value, source: str) -> Mode:
    """A general mode from a tensor in the documented normalisation (M_doc, module docstring)."""
    return Mode(tensor=2.0 * _check_tensor(value, source), direction=None)


def _spin2(tensor: NDArray) -> complex:
    """Horizontal traceless part of a table-frame tensor as (M_xx - M_yy)/2 + i M_xy."""
    return complex(0.5 * (tensor[0, 0] - tensor[1, 1]), tensor[0, 1])


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

    def observable(self, units: str) -> str:
        """What the observable is, in words, with its units (labels of harmonic tables)."""
        raise NotImplementedError

    def two_path_factor(self, units: str) -> complex:
        """Factor f from the two-path harmonics (C9) to this observable's 2 theta harmonics.

        With h = C - i B for each harmonic pair (C0, B0), (Cs1, Bs1), ...: h_observable =
        f h_two_path, i.e. C_obs = Re f C_S + Im f B_S and B_obs = Re f B_S - Im f C_S. The
        reference (f = 1) is, for the photon sector, the orthogonal Fabry-Perot pair read as
        (nu_1 - nu_2)/nu (C8, C9); for the matter sector, one clock along path 1 with a
        sensitivity of 1 Hz (docs/theory.md, "Direction-dependent clock"). The factor follows
        from the horizontal traceless part of the table-mounted modes, sum_i w_i M_i; lab-fixed
        modes add no 2 theta term, and a tilt of the table axis (ignored here) changes f by
        terms of order the tilt angle.
        """
        w = self.linear_weights(units)
        total = sum((wi * _spin2(m.tensor) for wi, m in zip(w, self.modes) if m.on_table),
                    0j)
        reference = 1.0 if self.sector == "photon" else 0.5
        f = complex(total / reference)
        tiny = 1e-12 * abs(f)       # rounding of cos 2 alpha, sin 2 alpha at 90 deg
        return complex(f.real if abs(f.real) > tiny else 0.0, f.imag if abs(f.imag) > tiny else 0.0)

    def offset_directions(self, units: str) -> dict[str, tuple[float, float]]:
        """Per-turn (C, B) of unit lab-fixed 2 theta offsets ``lab_C0`` and ``lab_B0``.

        ``lab_C0`` is a constant offset along the two-path C0 (the direction of ke_ZZ),
        ``lab_B0`` one along the two-path B0 (which no kappa_e- coefficient produces), mapped
        to this observable by :meth:`two_path_factor` and normalised to one observable unit;
        the sign keeps (1, 0) and (0, 1) for a real factor of either sign (every kind with
        paths 90 deg apart).
        """
        f = self.two_path_factor(units)
        if abs(f) == 0.0:
            return {"lab_C0": (1.0, 0.0), "lab_B0": (0.0, 1.0)}
        e = f / abs(f)
        e = -e if e.real < 0 or (e.real == 0 and e.imag < 0) else e
        return {"lab_C0": (e.real, -e.imag), "lab_B0": (e.imag, e.real)}

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
        Fabry-Perot modes, in the normalisation of docs/theory.md: delta nu / nu = M : K_lab
        (a Fabry-Perot mode along n is 1/2 n n, a ring mode in the plane normal to a is
        1/4 (1 - a a); e.g. from a whispering-gallery mode integral).
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
            modes = [_user_mode(t, f"apparatus: mode_tensors[{i}]")
                     for i, t in enumerate(self.mode_tensors)]
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

    def observable(self, units):
        """The beat of the two cavities: (nu_1 - nu_2)/nu, or nu_1 - nu_2 in Hz."""
        self.check_units(units)
        modes = "general modes" if self.mode_tensors is not None else "Fabry-Perot modes"
        beat = "ν_1 − ν_2 [Hz]" if units == "Hz" else "(ν_1 − ν_2)/ν [1]"
        return (f"cavity-pair beat {beat}, path 2 at azimuth A_1 + "
                f"{self.path_separation_deg:g} deg, {modes}")

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
            rotating = _user_mode(self.mode_tensors[0], "apparatus: mode_tensors[0]")
        if self.reference == "atomic":
            modes, weights = (rotating,), (1.0,)
        else:
            az = check_finite_number(self.reference, "apparatus", "reference")
            d = np.array([-math.cos(math.radians(az)), math.sin(math.radians(az)), 0.0])
            modes = (rotating, Mode(tensor=np.outer(d, d), direction=d, on_table=False))
            weights = (1.0, -1.0)
        object.__setattr__(self, "modes", modes)
        object.__setattr__(self, "weights", weights)

    def observable(self, units):
        """The rotating cavity against its reference, fractional or in Hz."""
        self.check_units(units)
        ref = ("an atomic reference" if self.reference == "atomic"
               else f"a lab-fixed cavity at azimuth {self.reference:g} deg")
        beat = "ν_rot − ν_ref [Hz]" if units == "Hz" else "(ν_rot − ν_ref)/ν [1]"
        return f"cavity-vs-reference {beat}, one rotating cavity against {ref}"

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

    def observable(self, units):
        """The fringe count Delta N = c (t_1 - t_2)/lambda (C8)."""
        self.check_units(units)
        return (f"michelson fringe count ΔN = c (t_1 − t_2)/λ [fringe], arm 2 at "
                f"azimuth A_1 + {self.path_separation_deg:g} deg, {self.passes} pass(es)")

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

    def observable(self, units):
        """The clock's frequency shift in Hz."""
        self.check_units(units)
        return (f"clock frequency shift [Hz], sensitivity {self.sensitivity_hz:g} Hz, "
                f"axis {self.axis}")

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
        raise ConfigError(f"{source}: kind: " + unknown_name(str(kind), APPARATUS_KINDS,
                                                             "apparatus kind", ordered=True))
    cls = APPARATUS_KINDS[kind]
    allowed = apparatus_fields(cls)
    reject_unknown_fields(attrs, allowed, f"{source}:", f"field of kind '{kind}'")
    if "passes" in attrs and isinstance(attrs["passes"], float) and attrs["passes"].is_integer():
        attrs["passes"] = int(attrs["passes"])
    return cls(**attrs)
