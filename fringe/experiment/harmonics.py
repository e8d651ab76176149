"""The sidereal harmonic table (convention C10) of each coefficient, by projection.

For an instant t_ref the lab's orbital velocity is frozen at its ephemeris value, the sidereal
angle phi and turntable angle theta are laid on uniform grids (the Earth-rotation velocity follows
phi), the basis signals are evaluated, and each is projected on

    S = B sin 2 theta + C cos 2 theta,  C = C0 + Cs1 sin phi + Cc1 cos phi + Cs2 sin 2 phi + ...

The harmonics are those of the apparatus's observable, in its units; the table states the
observable and its factor to the two-path harmonics of convention C9.

Uniform grids make the projection exact for signals band-limited below half the grid sizes. The
part of each basis signal the C10 model does not capture (non-rotating
terms, higher harmonics) is reported as ``uncaptured_rms``.

Annual modulation: the projection is repeated at instants spread over a sidereal year and each
harmonic coefficient is fitted against the orbital phase Omega T (C3) with
{1, sin OT, cos OT, sin 2 OT, cos 2 OT}.

Earth orientation: phi is the angle about the celestial intermediate pole (CIP), so the table
holds the harmonics of the coefficients rotated into the celestial intermediate axes by the
IAU 2006/2000A matrix Q (:func:`fringe.frames.celestial_to_intermediate`) at the reference
instant, K -> Q K Qᵀ (velocities likewise). Q moves away from the identity by about 9.7e-5 rad
a year (precession since J2000; 2.4e-3 rad in 2026), which moves a few 1e-3 of each harmonic
between the harmonics of the SCCEF table (e.g. ke_ZZ into C_s1, C_c1). The annual table keeps Q
at its reference-instant value, so it shows the orbital modulation only; over a year Q itself
changes by about 1e-4 rad (a relative change of the harmonics of that order), which fits of
records follow sample by sample (docs/theory.md).
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache

import numpy as np
from numpy.typing import NDArray

from fringe.constants import DAY_S, SIDEREAL_YEAR_DAYS
from fringe.conventions import HARMONIC_NAMES
from fringe.experiment.basis import Setup, _combined_tensor, basis, signal
from fringe.experiment.memo import SetupMemo, Unkeyable, fingerprint, quiet_call, read_only
from fringe.frames import (
    FrameState,
    celestial_to_intermediate,
    earth_velocity_beta,
    orbital_phase_rad,
    rotation_velocity_beta,
)
from fringe.text_table import number, text_table

ORBIT_TERMS = ("mean", "sin_OT", "cos_OT", "sin_2OT", "cos_2OT")

N_THETA = 16
N_PHI = 32


@lru_cache(maxsize=4)
def _angle_grid(n_theta: int, n_phi: int) -> tuple[NDArray, NDArray, NDArray]:
    """The table and sidereal angles on their uniform grids (each (n_theta n_phi,)), C10 design.

    The design (n_theta n_phi, 10) has the columns cos 2 theta f(phi), then sin 2 theta f(phi),
    f = 1, sin phi, cos phi, sin 2 phi, cos 2 phi. Constant, so formed once (read-only).
    """
    theta = 2.0 * np.pi * np.arange(n_theta) / n_theta
    phi = 2.0 * np.pi * np.arange(n_phi) / n_phi
    th, ph = np.meshgrid(theta, phi, indexing="ij")          # (N_THETA, N_PHI)
    th, ph = th.ravel(), ph.ravel()
    funcs = [np.ones_like(ph), np.sin(ph), np.cos(ph), np.sin(2 * ph), np.cos(2 * ph)]
    design = np.stack([np.cos(2 * th) * f for f in funcs] + [np.sin(2 * th) * f for f in funcs],
                      axis=1)
    read_only(th, ph, design)
    return th, ph, design


#: The apparatus's lab tensor at the grid's table angles, per apparatus (37 kB each).
TENSOR_MEMO = SetupMemo("one-instant lab tensors", max_entries=8, max_bytes=1 << 20,
                        max_entry_bytes=1 << 18)


def _grid_tensor(setup: Setup, th: NDArray) -> tuple[NDArray, float]:
    """W_lab (n, 3, 3) and w_iso at path-1 azimuths pi - th (:func:`basis`'s), kept per setup."""
    try:
        key = ("grid-tensor", fingerprint(setup.apparatus), setup.units,
               fingerprint(setup.tilt), fingerprint(th), _combined_tensor)
    except Unkeyable:
        key = None
    got = None if key is None else TENSOR_MEMO.get(key)
    if got is None:
        got = _combined_tensor(setup.apparatus, setup.units, np.pi - th, setup.tilt)
        read_only(got[0])
        if key is not None:
            TENSOR_MEMO.put(key, got)
    return got


def _grid_state(setup: Setup, t_ref_s: float, c2i: NDArray | None = None):
    """The grid's angles and frames (the frames at the N_PHI sidereal angles, tiled)."""
    th, ph, _ = _angle_grid(N_THETA, N_PHI)
    # the frames depend on phi alone: formed at the first table angle's N_PHI rows, tiled
    ph1 = ph[:N_PHI]
    # one instant: ERFA there (what the frames' splines give at a grid node)
    beta = np.repeat(earth_velocity_beta(setup.epoch, [t_ref_s], grid_s=None), N_PHI, axis=0)
    if c2i is None:
        c2i = celestial_to_intermediate(setup.epoch, [t_ref_s], grid_s=None)[0]
    if setup.include_rotation_velocity:
        beta = beta + rotation_velocity_beta(ph1, setup.site.axis_distance_m, c2i)
    state = FrameState(ph1, setup.site.colatitude_rad, beta, c2i=c2i).tile(N_THETA)
    return th, ph, state


def _project(g: NDArray, design: NDArray) -> tuple[NDArray, NDArray]:
    """C10 coefficients (10, k) of signals g (n, k) on the grid, and the uncaptured rms (k,).

    ``design``: the C10 design of the grid (:func:`_angle_grid`).
    """
    coef, *_ = np.linalg.lstsq(design, g, rcond=None)
    resid = g - design @ coef
    return coef, np.sqrt(np.mean(resid ** 2, axis=0))


#: The one-instant harmonic tables per setup (:mod:`fringe.experiment.memo`; 10 x k each).
HARMONICS_MEMO = SetupMemo("one-instant harmonics", max_entries=64, max_bytes=1 << 20,
                           max_entry_bytes=1 << 16)


def _harmonics_key(setup, t_ref_s, params, names, c2i) -> tuple:
    """Everything :func:`harmonics_at` depends on (raises Unkeyable if not keyable)."""
    functions = (earth_velocity_beta, celestial_to_intermediate, rotation_velocity_beta, basis,
                 signal, _grid_state, _grid_tensor, _project)
    return ("harmonics-at", fingerprint(setup), float(t_ref_s).hex(), fingerprint(params),
            None if names is None else tuple(names),
            fingerprint(None if c2i is None else np.asarray(c2i, float)),
            N_THETA, N_PHI, functions)


def harmonics_at(setup: Setup, t_ref_s: float, params: dict[str, float] | None = None,
                 names: tuple[str, ...] | None = None, c2i: NDArray | None = None
                 ) -> tuple[NDArray, NDArray, tuple]:
    """C10 coefficients at one instant.

    The lab axes turn about the celestial intermediate pole of the instant: the frames use the
    celestial-to-intermediate matrix Q at ``t_ref_s`` (or ``c2i``, a (3, 3) Q to use instead),
    so the harmonics are those of the coefficients rotated by Q (module docstring). The result
    is kept in :data:`HARMONICS_MEMO` for the next call with the same setup and arguments
    (unless its computation warned); each call returns its own copies.

    Returns
    -------
    coef : ndarray, shape (10, k)
        Harmonics (order of :data:`~fringe.conventions.HARMONIC_NAMES`) per unit coefficient, in
        ``setup.units``; for a nonlinear theory (or when ``params`` is given) one column, the
        total signal of ``params``.
    uncaptured : ndarray, shape (k,)
    labels : tuple of str
        The column labels.
    """
    try:
        key = _harmonics_key(setup, t_ref_s, params, names, c2i)
    except Unkeyable:
        key = None
    got = None if key is None else HARMONICS_MEMO.get(key)
    if got is None:
        got, warned = quiet_call(_harmonics_at, setup, t_ref_s, params, names, c2i)
        read_only(got[0], got[1])
        if key is not None and not warned:
            HARMONICS_MEMO.put(key, got)
    coef, unc, labels = got
    return coef.copy(), unc.copy(), labels


def _harmonics_at(setup, t_ref_s, params, names, c2i):
    """:func:`harmonics_at` computed (no memo)."""
    th, ph, state = _grid_state(setup, t_ref_s, c2i)
    if params is not None or not setup.theory.linear:
        g = signal(setup, params or {}, np.zeros_like(th), np.pi - th, state=state)[:, None]
        labels = ("total",)
    else:
        # what basis() computes, with the time-independent lab tensors kept per apparatus
        labels = tuple(names) if names is not None else setup.theory.parameter_names
        w_lab, w_iso = _grid_tensor(setup, th)
        g = setup.theory.project(state, w_lab, w_iso, labels)
    coef, unc = _project(g, _angle_grid(N_THETA, N_PHI)[2])
    return coef, unc, labels


@dataclass(frozen=True)
class HarmonicTable:
    """Per-coefficient C10 harmonics at a reference instant, with their annual modulation.

    Attributes
    ----------
    labels : tuple of str
        Coefficient names (or ``("total",)``).
    units : str
        Units of the harmonics per unit coefficient (the observable's units).
    t_ref_utc : str
        The reference instant.
    at_ref : ndarray, shape (10, k)
        Harmonics at the reference instant.
    orbit : ndarray, shape (5, 10, k)
        Fit of each harmonic against orbital phase, terms :data:`ORBIT_TERMS`.
    uncaptured_rms : ndarray, shape (k,)
        RMS of the part of each basis signal outside the C10 model.
    values : dict
        Coefficient values used for the ``contribution`` view (may be empty).
    observable : str
        What the harmonics are of (the apparatus's observable, in ``units``).
    two_path_factor : complex
        f with h = f h_two_path for each harmonic pair h = C - i B (convention C9;
        :meth:`fringe.experiment.apparatus.Apparatus.two_path_factor`).
    """

    labels: tuple
    units: str
    t_ref_utc: str
    orbital_phase_ref_rad: float
    at_ref: NDArray
    orbit: NDArray
    uncaptured_rms: NDArray
    values: dict
    observable: str = ""
    two_path_factor: complex = 1.0

    def contribution(self) -> dict[str, dict[str, float]]:
        """Each coefficient's contribution (value x unit harmonic) at the reference instant."""
        out = {}
        for j, name in enumerate(self.labels):
            scale = self.values.get(name, 1.0) if name != "total" else 1.0
            out[name] = {h: float(scale * self.at_ref[i, j]) for i, h in enumerate(HARMONIC_NAMES)}
        return out

    def annual_modulation_present(self, rtol: float = 1e-6) -> list[str]:
        """Labels whose harmonics vary with the orbital phase beyond ``rtol`` of their size."""
        out = []
        for j, name in enumerate(self.labels):
            size = max(np.abs(self.orbit[:, :, j]).max(), 1e-300)
            if np.abs(self.orbit[1:, :, j]).max() > rtol * size:
                out.append(name)
        return out

    def to_dict(self) -> dict:
        """The table as plain JSON (harmonics in ``units`` per unit coefficient).

        Keys: units, the observable and its factor to the two-path harmonics
        (``two_path_factor``: [Re f, Im f]), reference instant and orbital phase (rad), the
        harmonic and orbit-term names, the coefficient values, the harmonics per unit
        coefficient (``per_unit``), the :meth:`contribution` view, the annual-modulation fit
        (``annual``) and the uncaptured RMS.
        """
        f = complex(self.two_path_factor)
        return {
            "units": self.units, "observable": self.observable,
            "two_path_factor": [f.real, f.imag], "t_ref_utc": self.t_ref_utc,
            "orbital_phase_ref_rad": self.orbital_phase_ref_rad,
            "harmonic_names": list(HARMONIC_NAMES), "orbit_terms": list(ORBIT_TERMS),
            "values": dict(self.values),
            "per_unit": {name: {h: float(self.at_ref[i, j]) for i, h in enumerate(HARMONIC_NAMES)}
                         for j, name in enumerate(self.labels)},
            "contribution": self.contribution(),
            "annual": {name: {h: {term: float(self.orbit[m, i, j])
                                  for m, term in enumerate(ORBIT_TERMS)}
                              for i, h in enumerate(HARMONIC_NAMES)}
                       for j, name in enumerate(self.labels)},
            "uncaptured_rms": {name: float(self.uncaptured_rms[j])
                               for j, name in enumerate(self.labels)},
        }

    def summary(self, nonzero_only: bool = True) -> str:
        """Readable table of contributions at the reference instant."""
        contrib = self.contribution()
        rows = [n for n in self.labels if not nonzero_only or self.values.get(n, 0.0) != 0.0
                or n == "total"] or list(self.labels)
        f = complex(self.two_path_factor)
        lines = [f"sidereal harmonics of the 2 theta amplitudes [{self.units}] at "
                 f"{self.t_ref_utc} (orbital phase "
                 f"{np.degrees(self.orbital_phase_ref_rad) % 360:.1f} deg): C = C0 + Cs1 sin "
                 "phi + Cc1 cos phi + Cs2 sin 2phi + Cc2 cos 2phi, likewise B",
                 f"of the observable: {self.observable}",
                 f"two-path harmonics: h_S = h / f for h = C - i B, f = "
                 f"{f.real:.6g}{f' {f.imag:+.6g} i' if f.imag else ''}"]
        cells = []
        for n in rows:
            # a harmonic 1e-12 of the row's largest is rounding of the projection: printed 0
            scale = max((abs(contrib[n][h]) for h in HARMONIC_NAMES), default=0.0)
            cells.append([n] + [number(contrib[n][h], ".3e", zero_below=1e-12 * scale)
                                for h in HARMONIC_NAMES])
        lines += text_table(["coefficient", *HARMONIC_NAMES], cells, indent="")
        annual = [n for n in self.annual_modulation_present() if n in rows]
        if annual:
            lines.append("annual modulation present for: " + ", ".join(annual))
        return "\n".join(lines)


def harmonic_table(setup: Setup, t_ref_s: float, values: dict[str, float] | None = None,
                   n_orbit: int = 24) -> HarmonicTable:
    """Build the :class:`HarmonicTable` at ``t_ref_s`` (seconds after ``setup.epoch``).

    For a linear theory the table holds one column per coefficient (unit value), and the
    ``values`` scale the contribution view; for the nonlinear medium it holds the total signal
    of ``values``.
    """
    values = dict(values or {})
    params = values if not setup.theory.linear else None
    c2i = celestial_to_intermediate(setup.epoch, [t_ref_s])[0]
    at_ref, unc, labels = harmonics_at(setup, t_ref_s, params, c2i=c2i)
    year_s = SIDEREAL_YEAR_DAYS * DAY_S
    t_orb = t_ref_s + year_s * np.arange(n_orbit) / n_orbit
    per = np.stack([harmonics_at(setup, float(t), params, c2i=c2i)[0]
                    for t in t_orb])                                          # (m, 10, k)
    op = orbital_phase_rad(setup.epoch, t_orb)
    design = np.stack([np.ones_like(op), np.sin(op), np.cos(op), np.sin(2 * op),
                       np.cos(2 * op)], axis=1)
    coef, *_ = np.linalg.lstsq(design, per.reshape(n_orbit, -1), rcond=None)
    orbit = coef.reshape(5, *at_ref.shape)
    return HarmonicTable(labels=labels, units=setup.units,
                         t_ref_utc=setup.epoch.utc_iso(t_ref_s),
                         orbital_phase_ref_rad=float(orbital_phase_rad(setup.epoch, [t_ref_s])[0]),
                         at_ref=at_ref, orbit=orbit, uncaptured_rms=unc, values=values,
                         observable=setup.apparatus.observable(setup.units),
                         two_path_factor=setup.apparatus.two_path_factor(setup.units))
