"""Synthetic campaigns: the signal of injected coefficients plus realistic noise and systematics.

:func:`simulate` writes a run file chunk by chunk (a year at 1 Hz never sits whole in memory).
Per chunk: the turntable azimuth (with optional rate jitter: a random walk of the table angle),
the noise-free signal of the scenario's coefficients (:func:`fringe.experiment.basis.signal`),
power-law frequency noise (:class:`fringe.noise.NoiseStream`), linear and quadratic drift, a tilt
coupling at 1 theta and a lab-fixed 2 theta term, glitches (steps or spikes), gaps (no samples)
and dropped samples (NaN). The injected truth, the noise model, the systematics and the scenario
are stored in the file's ``truth``, ``settings`` and ``provenance`` groups.

Scenario sections. For cavity kinds every level is fractional (of Delta nu / nu) and is multiplied
by the carrier for a signal in Hz; for a Michelson ("fringe") or a clock ("Hz") the levels are in
the observable's own units (there is no carrier to scale by), as in ``fringe plan``:

``[noise]``  ``white_pm_adev_1s``, ``white_fm_adev_1s``, ``flicker_fm_adev``,
``random_walk_fm_adev_1s`` (Allan-deviation levels) or ``h2``, ``h0``, ``hm1``, ``hm2``.

``[systematics]``  ``drift_per_day``, ``drift_per_day2``, ``tilt_1theta``,
``tilt_1theta_azimuth_deg``, ``lab_2theta``, ``lab_2theta_azimuth_deg``, ``glitches_per_day``,
``glitch_size``, ``gaps_per_day``, ``gap_length_s``, ``dropout_fraction``,
``rate_jitter_rad_per_sqrt_s``.
"""

from __future__ import annotations

import json
import math
import warnings
from dataclasses import dataclass, fields

import numpy as np

from fringe.errors import (
    ConfigError,
    SimulationWarning,
    check_finite_number,
    reject_unknown_fields,
)
from fringe.experiment.basis import CHUNK_SAMPLES, signal
from fringe.experiment.scenario import Scenario
from fringe.noise.powerlaw import PowerLawNoise, noise_from_section, noise_scale
from fringe.noise.stream import NoiseStream
from fringe.version import __version__


def noise_model_from_section(section: dict | None, source: str, sample_interval_s: float
                             ) -> PowerLawNoise:
    """The scenario's ``[noise]`` model (:func:`fringe.noise.noise_from_section`).

    No section, or an empty one, means a noise-free record.
    """
    if not section:
        return PowerLawNoise()
    return noise_from_section(section, source, sample_interval_s)


#: Amplitude of the recorded ``tilt_south`` auxiliary channel written alongside a 1 theta tilt
#: coupling, rad (an invented tiltmeter reading of the wobbling axis; it only labels the
#: coupling's phase for regression tests).
TILT_CHANNEL_AMPLITUDE_RAD = 1e-6


@dataclass(frozen=True)
class Systematics:
    """Systematic effects of a synthetic record (fractional units; see module docstring)."""

    drift_per_day: float = 0.0
    drift_per_day2: float = 0.0
    tilt_1theta: float = 0.0
    tilt_1theta_azimuth_deg: float = 0.0
    lab_2theta: float = 0.0
    lab_2theta_azimuth_deg: float = 0.0
    glitches_per_day: float = 0.0
    glitch_size: float = 0.0
    gaps_per_day: float = 0.0
    gap_length_s: float = 600.0
    dropout_fraction: float = 0.0
    rate_jitter_rad_per_sqrt_s: float = 0.0

    def __post_init__(self):
        for f in fields(self):
            v = check_finite_number(getattr(self, f.name), "[systematics]", f.name)
            object.__setattr__(self, f.name, v)
        for name in ("glitches_per_day", "gaps_per_day", "gap_length_s", "dropout_fraction",
                     "rate_jitter_rad_per_sqrt_s"):
            if getattr(self, name) < 0:
                raise ConfigError(f"[systematics] {name}: expected a value >= 0")
        if self.dropout_fraction >= 1:
            raise ConfigError("[systematics] dropout_fraction: expected a value < 1")

    @classmethod
    def from_section(cls, section: dict, source: str) -> Systematics:
        """Build from a scenario's ``[systematics]`` table (missing fields take their defaults).

        Parameters
        ----------
        section : dict or None
            The table; unknown fields are an error.
        source : str
            The scenario file, for the messages.
        """
        section = dict(section or {})
        reject_unknown_fields(section, {f.name for f in fields(cls)}, f"{source}: [systematics]")
        try:
            return cls(**section)
        except ConfigError as exc:
            raise ConfigError(f"{source}: {exc}") from None

    def to_dict(self) -> dict:
        """The fields as a dict name -> value (stored as JSON in the run file's ``settings``)."""
        return {f.name: getattr(self, f.name) for f in fields(self)}


def _gap_mask(t: np.ndarray, gaps: np.ndarray) -> np.ndarray:
    """True for samples inside any gap interval (gaps: (m, 2) start, stop in s)."""
    if gaps.size == 0:
        return np.zeros(t.size, bool)
    i = np.searchsorted(gaps[:, 0], t, side="right") - 1
    inside = i >= 0
    inside[inside] = t[inside] < gaps[i[inside], 1]
    return inside


def _warn_if_noiseless(scenario: Scenario, noise: PowerLawNoise) -> None:
    """Warn (SimulationWarning) when the scenario asks for no noise without saying so."""
    if noise.h0 or noise.h2 or noise.hm1 or noise.hm2:
        return
    what = "has no [noise] section" if "noise" not in scenario.sections else \
        "gives no noise level above zero in [noise]"
    warnings.warn(f"{scenario.source}: the scenario {what}: the simulated record is noise-free "
                  "(a fit of it says so in its warnings; give noise levels, or noise_free=True "
                  "to ask for the bare signal)", SimulationWarning, stacklevel=3)


def check_seed(seed) -> None:
    """Refuse a seed ``numpy.random.default_rng`` cannot take (a negative or non-integer)."""
    if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or seed < 0:
        raise ConfigError(f"simulate(seed=...): expected an integer >= 0 (the seed of "
                          f"numpy.random.default_rng), got {seed!r}")


def simulate(scenario: Scenario, out_path, *, seed: int, overwrite: bool = False,
             protect=(), chunk_samples: int = CHUNK_SAMPLES, progress=None,
             noise_free: bool = False) -> dict:
    """Write a synthetic run file for ``scenario``; returns a summary dict.

    Parameters
    ----------
    scenario : Scenario
        Includes the injected coefficients and the ``[noise]``/``[systematics]`` sections.
    out_path : path
    seed : int
        Seed of ``numpy.random.default_rng``; the same seed gives the same file.
    noise_free : bool
        Write the bare signal (no noise, no systematics): equals ``fringe predict``'s series.
    """
    from fringe.io.runwriter import RunWriter

    check_seed(seed)
    src = scenario.source
    noise = noise_model_from_section(scenario.sections.get("noise", {}), src,
                                     scenario.sample_interval_s)
    syst = Systematics.from_section(scenario.sections.get("systematics", {}), src)
    if noise_free:
        noise, syst = PowerLawNoise(), Systematics()
    else:
        _warn_if_noiseless(scenario, noise)
    rng = np.random.default_rng(seed)
    setup = scenario.setup()
    scale = noise_scale(setup.apparatus, scenario.units)
    duration = scenario.duration_s
    day = 86400.0
    n_gaps = rng.poisson(syst.gaps_per_day * duration / day)
    g0 = np.sort(rng.uniform(0, duration, n_gaps))
    gaps = np.stack([g0, g0 + syst.gap_length_s], axis=1) if n_gaps else np.zeros((0, 2))
    n_gl = rng.poisson(syst.glitches_per_day * duration / day)
    glitch_t = np.sort(rng.uniform(0, duration, n_gl))
    glitch_kind = rng.integers(0, 2, n_gl)              # 0 spike (one sample), 1 step
    glitch_amp = syst.glitch_size * rng.choice([-1.0, 1.0], n_gl)
    stream = NoiseStream(noise, scenario.sample_interval_s, rng, span_s=duration) \
        if not noise_free and (noise.h0 or noise.h2 or noise.hm1 or noise.hm2) else None
    jitter_state = 0.0
    step_level = 0.0
    n_written = 0
    truth = {k: float(v) for k, v in scenario.coefficients.items()}
    a_t = math.radians(syst.tilt_1theta_azimuth_deg)
    a_l = math.radians(syst.lab_2theta_azimuth_deg)
    with RunWriter(out_path, site=scenario.site, apparatus=scenario.apparatus.attributes(),
                   epoch_utc=scenario.epoch.utc, signal_units=scenario.units,
                   azimuth_units="rad", overwrite=overwrite, protect=protect,
                   aux_channels={"tilt_south": "rad"} if syst.tilt_1theta else None) as w:
        w.write_group("truth", {"theory": scenario.theory.name,
                                "coefficients_json": json.dumps(truth),
                                **{f"coefficient_{k}": v for k, v in truth.items()}})
        w.write_group("settings", {"seed": int(seed), "noise_json": json.dumps(noise.to_dict()),
                                   "systematics_json": json.dumps(syst.to_dict()),
                                   "scenario_json": json.dumps(scenario.to_dict()),
                                   "gaps_s_json": json.dumps(gaps.tolist()),
                                   "glitch_times_s_json": json.dumps(glitch_t.tolist()),
                                   "noise_free": bool(noise_free)})
        w.write_group("provenance", {"created_by": f"fringe {__version__} simulate",
                                     "scenario": str(src)})
        for start in range(0, scenario.n_samples, chunk_samples):
            t = scenario.sample_times(start, start + chunk_samples)
            az = scenario.motion.azimuth_rad(t)
            if syst.rate_jitter_rad_per_sqrt_s:
                steps = rng.normal(0.0, syst.rate_jitter_rad_per_sqrt_s
                                   * math.sqrt(scenario.sample_interval_s), t.size)
                walk = jitter_state + np.cumsum(steps)
                jitter_state = float(walk[-1])
                az = az + walk
            y = signal(setup, scenario.coefficients, t, az)
            frac = np.zeros(t.size)
            if stream is not None:
                frac += stream.next(t.size)
            if syst.drift_per_day or syst.drift_per_day2:
                td = t / day
                frac += syst.drift_per_day * td + syst.drift_per_day2 * td * td
            theta = np.pi - az
            if syst.tilt_1theta:
                frac += syst.tilt_1theta * np.cos(theta - (np.pi - a_t))
            if syst.lab_2theta:
                frac += syst.lab_2theta * np.cos(2 * (theta - (np.pi - a_l)))
            if n_gl:
                frac += step_level                      # steps from earlier chunks
                lo, hi = np.searchsorted(glitch_t, [t[0], t[-1] + scenario.sample_interval_s])
                for j in range(lo, hi):
                    k = min(int(np.searchsorted(t, glitch_t[j])), t.size - 1)
                    if glitch_kind[j] == 0:
                        frac[k] += glitch_amp[j]
                    else:
                        frac[k:] += glitch_amp[j]
                        step_level += glitch_amp[j]
            y = y + scale * frac
            if syst.dropout_fraction:
                y[rng.random(t.size) < syst.dropout_fraction] = np.nan
            keep = ~_gap_mask(t, gaps)
            aux = {}
            if syst.tilt_1theta:
                aux["tilt_south"] = (TILT_CHANNEL_AMPLITUDE_RAD
                                     * np.cos(theta - (np.pi - a_t)))[keep]
            if np.any(keep):
                w.append(t[keep], az[keep], y[keep], **aux)
                n_written += int(np.sum(keep))
            if progress:
                progress(t.size)
    return {"path": str(out_path), "n_samples": n_written, "n_gaps": int(n_gaps),
            "n_glitches": int(n_gl), "truth": truth, "seed": int(seed),
            "noise": noise.to_dict(), "systematics": syst.to_dict()}
