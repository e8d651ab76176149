"""Prediction: what hypothetical coefficients would look like in a scenario's apparatus.

:func:`predict` returns a :class:`Prediction` with the harmonic table (per coefficient, with
annual modulation), the signal on an azimuth x sidereal-angle grid at the campaign's middle, and a
few summary numbers. :func:`iter_prediction_chunks` streams the noise-free time series of the whole
campaign (``fringe predict`` writes it as a run file; ``fringe simulate`` adds noise to it).
"""

from __future__ import annotations

from collections.abc import Iterator
from dataclasses import dataclass

import numpy as np

from fringe.experiment.basis import CHUNK_SAMPLES, signal
from fringe.experiment.harmonics import HarmonicTable, harmonic_table
from fringe.experiment.scenario import Scenario
from fringe.frames import (
    FrameState,
    celestial_to_intermediate,
    earth_velocity_beta,
    rotation_velocity_beta,
)


@dataclass(frozen=True)
class Prediction:
    """The result of :func:`predict`.

    Attributes
    ----------
    scenario : dict
        The scenario, as plain JSON (provenance).
    table : HarmonicTable
    map_azimuth_deg, map_phi_deg : ndarray
        Grid of the signal map.
    map_signal : ndarray, shape (nphi, na)
        Signal at the campaign's middle (orbital velocity frozen), in ``units``.
    units : str
    peak_to_peak : float
        Peak-to-peak of the map, ``units``.
    """

    scenario: dict
    table: HarmonicTable
    map_azimuth_deg: np.ndarray
    map_phi_deg: np.ndarray
    map_signal: np.ndarray
    units: str
    peak_to_peak: float

    def summary(self) -> str:
        """Readable text: theory and nonzero coefficients, map peak-to-peak and harmonic table."""
        c = self.scenario["coefficients"]
        vals = ", ".join(f"{k}={v:.3g}" for k, v in c.items() if v) or "(all zero)"
        return (f"prediction for {self.scenario['title'] or self.scenario['source']}\n"
                f"theory {self.scenario['theory']['name']}: {vals}\n"
                f"peak-to-peak over azimuth and sidereal angle: {self.peak_to_peak:.4g} "
                f"{self.units}\n\n" + self.table.summary())

    def to_dict(self) -> dict:
        """The prediction as plain JSON; the signal map is left out.

        Keys: format tag and version, scenario, units, peak-to-peak (in ``units``) and the
        harmonic table (:meth:`HarmonicTable.to_dict`).
        """
        return {"fringe_format": "prediction", "fringe_format_version": 1,
                "scenario": self.scenario, "units": self.units,
                "peak_to_peak": self.peak_to_peak, "harmonics": self.table.to_dict()}

    def __repr__(self) -> str:
        return (f"Prediction(theory={self.scenario['theory']['name']!r}, units={self.units!r}, "
                f"peak_to_peak={self.peak_to_peak:.3g})")


def signal_map(scenario: Scenario, t_ref_s: float, n_azimuth: int = 73, n_phi: int = 73):
    """Signal on an azimuth x sidereal-angle grid with the orbital velocity frozen at t_ref."""
    setup = scenario.setup()
    az = np.linspace(0.0, 360.0, n_azimuth)
    ph = np.linspace(0.0, 360.0, n_phi)
    a2, p2 = np.meshgrid(np.radians(az), np.radians(ph))
    beta = np.repeat(earth_velocity_beta(setup.epoch, [t_ref_s]), a2.size, axis=0)
    c2i = celestial_to_intermediate(setup.epoch, [t_ref_s])[0]
    if setup.include_rotation_velocity:
        beta = beta + rotation_velocity_beta(p2.ravel(), setup.site.axis_distance_m, c2i)
    state = FrameState(p2.ravel(), setup.site.colatitude_rad, beta, c2i=c2i)
    s = signal(setup, scenario.coefficients, np.zeros(a2.size), a2.ravel(), state=state)
    return az, ph, s.reshape(a2.shape)


def predict(scenario: Scenario, n_orbit: int = 24) -> Prediction:
    """Harmonic table and signal map of the scenario's coefficients at the campaign's middle."""
    t_mid = 0.5 * scenario.duration_s
    table = harmonic_table(scenario.setup(), t_mid, scenario.coefficients, n_orbit=n_orbit)
    az, ph, s = signal_map(scenario, t_mid)
    return Prediction(scenario=scenario.to_dict(), table=table, map_azimuth_deg=az,
                      map_phi_deg=ph, map_signal=s, units=scenario.units,
                      peak_to_peak=float(np.ptp(s)))


def iter_prediction_chunks(scenario: Scenario, chunk_samples: int = CHUNK_SAMPLES
                           ) -> Iterator[tuple[np.ndarray, np.ndarray, np.ndarray]]:
    """Yield (t_s, azimuth_rad, signal) of the noise-free campaign, chunk by chunk."""
    setup = scenario.setup()
    for start in range(0, scenario.n_samples, chunk_samples):
        t = scenario.sample_times(start, start + chunk_samples)
        az = scenario.motion.azimuth_rad(t)
        yield t, az, signal(setup, scenario.coefficients, t, az)
