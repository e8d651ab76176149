"""Scenario files (TOML): site, campaign calendar, apparatus, turntable, theory, coefficients.

A scenario describes an experiment that has not (necessarily) happened: ``fringe predict``,
``fringe simulate`` and ``fringe plan`` read it. The format is documented in
``docs/scenario.md``; ``examples/`` holds an invented example. Sections other than those parsed
here (:data:`STAGE_SECTIONS`: ``[noise]``, ``[systematics]``, ``[plan]``) are kept verbatim in
:attr:`Scenario.sections` for the stages that use them; any other section or top-level key is an
error naming the known sections and the closest match (a misspelt ``[nosie]`` would otherwise
give a noise-free campaign without a word).
"""

from __future__ import annotations

import math
import os

try:
    import tomllib
except ModuleNotFoundError:  # Python < 3.11
    import tomli as tomllib
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from fringe.errors import (
    ConfigError,
    InputFileError,
    check_dataclass_keywords,
    check_finite_number,
    check_regular_file,
    missing_input,
    not_utf8,
    reject_unknown_fields,
    unknown_name,
)
from fringe.experiment.apparatus import Apparatus, make_apparatus
from fringe.experiment.basis import Setup
from fringe.experiment.turntable import AxisTilt, make_motion
from fringe.frames import Epoch
from fringe.site import Site
from fringe.theories import THEORIES, make_theory
from fringe.theories.base import Theory

KNOWN_SECTIONS = {"title", "site", "campaign", "apparatus", "turntable", "theory",
                  "coefficients"}
#: Sections read by later stages (simulate, plan), kept verbatim in :attr:`Scenario.sections`.
STAGE_SECTIONS = ("noise", "systematics", "plan")


@dataclass(frozen=True)
class Scenario:
    """A parsed scenario file.

    Attributes
    ----------
    title : str
    source : str
        File the scenario was read from (for messages).
    site : Site
    epoch : Epoch
        Campaign start (sample times are seconds after it).
    duration_s : float
        Campaign length, s.
    sample_interval_s : float
        Sampling interval, s.
    apparatus : Apparatus
    units : str
        Observable units.
    motion : ContinuousRotation or SteppedRotation
    tilt : AxisTilt
    theory : Theory
    coefficients : dict
        Hypothetical (or injected) coefficient values.
    include_rotation_velocity : bool
    sections : dict
        The other sections, as parsed TOML.
    """

    title: str
    source: str
    site: Site
    epoch: Epoch
    duration_s: float
    sample_interval_s: float
    apparatus: Apparatus
    units: str
    motion: object
    tilt: AxisTilt
    theory: Theory
    coefficients: dict
    include_rotation_velocity: bool = True
    sections: dict = field(default_factory=dict)

    @property
    def n_samples(self) -> int:
        """Number of samples: floor(duration_s / sample_interval_s), 1e-9 slack against rounding."""
        return int(math.floor(self.duration_s / self.sample_interval_s + 1e-9))

    def setup(self) -> Setup:
        """The :class:`fringe.experiment.basis.Setup` of this scenario.

        Site, epoch, apparatus, theory, units, tilt and the rotation-velocity switch, as the
        basis and simulation functions take them.
        """
        return Setup(site=self.site, epoch=self.epoch, apparatus=self.apparatus,
                     theory=self.theory, units=self.units, tilt=self.tilt,
                     include_rotation_velocity=self.include_rotation_velocity)

    def sample_times(self, start: int = 0, stop: int | None = None) -> np.ndarray:
        """Sample times (s after the epoch) with indices in [start, stop)."""
        stop = self.n_samples if stop is None else min(stop, self.n_samples)
        return np.arange(start, stop, dtype=float) * self.sample_interval_s

    def with_coefficients(self, values: dict) -> Scenario:
        """A copy with some coefficient values replaced (validated against the theory)."""
        merged = dict(self.coefficients)
        merged.update(self.theory.check_params(values, source="Scenario.with_coefficients"))
        return _replace(self, coefficients=merged)

    def to_dict(self) -> dict:
        """Plain-JSON description (for provenance)."""
        return {"title": self.title, "source": self.source, "site": self.site.to_dict(),
                "start_utc": self.epoch.utc, "dut1_s": self.epoch.dut1_s,
                "duration_s": self.duration_s, "sample_interval_s": self.sample_interval_s,
                "apparatus": self.apparatus.attributes(), "units": self.units,
                "turntable": self.motion.to_dict(),
                "tilt_rad": [self.tilt.south_rad, self.tilt.east_rad],
                "theory": self.theory.to_dict(), "coefficients": dict(self.coefficients),
                "include_rotation_velocity": self.include_rotation_velocity}


def _replace(sc: Scenario, **changes) -> Scenario:
    from dataclasses import replace

    return replace(sc, **changes)


def _table(doc: dict, key: str, source: str, required: bool = True) -> dict:
    value = doc.get(key)
    if value is None:
        if required:
            raise ConfigError(f"{source}: [{key}]: section missing")
        return {}
    if not isinstance(value, dict):
        raise ConfigError(f"{source}: [{key}]: expected a table")
    return dict(value)


def _wrap(source: str, section: str, func, *args, **kwargs):
    """Call a constructor, prefixing ConfigError messages with the file and section."""
    if not args:                                   # keywords only: name the fields
        check_dataclass_keywords(func, kwargs, f"{source}: [{section}]")
    try:
        return func(*args, **kwargs)
    except ConfigError as exc:
        text = str(exc).removeprefix(f"{section}: ")       # the section is named once
        raise ConfigError(f"{source}: [{section}] {text}") from None
    except TypeError as exc:
        raise ConfigError(f"{source}: [{section}]: {exc}") from None


#: The fields of ``[site]`` (:class:`fringe.site.Site`) and ``[campaign]``.
SITE_FIELDS = ("latitude_deg", "longitude_deg", "height_m", "name")
CAMPAIGN_FIELDS = ("start_utc", "duration_days", "duration_s", "sample_interval_s", "dut1_s")
#: ``[theory]`` keys of every theory (for the "closest" hint of a misspelt option).
THEORY_OPTIONS = ("name", "rotation_velocity", "preferred_frame", "wave_speed_m_s")


def _site_from(doc: dict, source: str) -> Site:
    spec = _table(doc, "site", source)
    reject_unknown_fields(spec, SITE_FIELDS, f"{source}: [site]")
    for key in ("latitude_deg", "longitude_deg"):
        if key not in spec:
            raise ConfigError(f"{source}: [site] {key}: missing; expected the site's "
                              + ("geodetic latitude in degrees, north positive"
                                 if key == "latitude_deg" else "east longitude in degrees"))
    return _wrap(source, "site", Site, **spec)


def _theory_from(doc: dict, source: str) -> tuple[Theory, bool]:
    spec = _table(doc, "theory", source)
    name = spec.pop("name", "sme")
    rotation_velocity = spec.pop("rotation_velocity", True)
    if not isinstance(rotation_velocity, bool):
        raise ConfigError(f"{source}: [theory] rotation_velocity: expected true or false")
    cls = THEORIES.get(name)
    options = cls.scenario_options(spec, source) if cls is not None else {}
    if spec:
        known = ["name", "rotation_velocity"] + list(getattr(cls, "SCENARIO_OPTIONS", ()))
        raise ConfigError(f"{source}: [theory] " + unknown_name(
            sorted(spec)[0], known, f"option for theory {name!r}"))
    return _wrap(source, "theory", make_theory, name, **options), rotation_velocity


def _coefficients_from(doc: dict, source: str, theory: Theory) -> dict[str, float]:
    """The ``[coefficients]`` table, with a theory's named ``rest_frame`` filled in."""
    spec = _table(doc, "coefficients", source, required=False)
    if theory.rest_frames and "rest_frame" in spec:
        frame = spec.pop("rest_frame")
        if frame not in theory.rest_frames:
            raise ConfigError(f"{source}: [coefficients] rest_frame: expected one of "
                              f"{', '.join(repr(f) for f in theory.rest_frames)} for theory "
                              f"{theory.name!r}, got {frame!r}")
        spec = {**theory.rest_frames[frame](), **spec}
    return theory.check_params(spec, source=f"{source}: [coefficients]")


#: Most samples a scenario may ask for (1e11 samples of 24 bytes are 2.4 TB of run file).
MAX_SAMPLES = 10 ** 11
#: Longest campaign, s (100 Julian years: a sanity bound, no experiment runs longer).
MAX_DURATION_S = 100 * 365.25 * 86400.0
#: Most samples per turn below which the 2 theta signal aliases: it runs at twice the turn
#: rate, so the sampling theorem needs a sample interval below period_s / 4.
MIN_SAMPLES_PER_TURN = 4
#: Largest unwrapped azimuth of the simulated table, rad (that of the run-file reader).
MAX_AZIMUTH_RAD = 2.0 ** 32


def _check_sampling(source: str, duration: float, interval: float, motion) -> None:
    """Refuse a campaign no run file can hold or whose sampling aliases the 2 theta signal."""
    if duration > MAX_DURATION_S:
        raise ConfigError(f"{source}: [campaign] duration: expected at most 100 years "
                          f"({MAX_DURATION_S:.4g} s), got {duration:.4g} s")
    if duration / interval > MAX_SAMPLES:
        raise ConfigError(f"{source}: [campaign] sample_interval_s: expected at most "
                          f"{MAX_SAMPLES:.0e} samples (duration / sample_interval_s), got "
                          f"{duration / interval:.3g}")
    period = getattr(motion, "period_s", None)
    if period is None:
        return
    if interval >= period / MIN_SAMPLES_PER_TURN:
        raise ConfigError(f"{source}: [campaign] sample_interval_s: expected less than a "
                          f"quarter of the turn period ({period:.6g} s / 4: the 2 theta "
                          f"signal would alias), got {interval:.6g} s")
    if 2 * math.pi * duration / period > MAX_AZIMUTH_RAD:
        raise ConfigError(f"{source}: [turntable] period_s: expected at most "
                          f"{MAX_AZIMUTH_RAD / (2 * math.pi):.3g} turns in the campaign (the "
                          f"unwrapped azimuth must stay within 2**32 rad), got "
                          f"{duration / period:.3g}")


def load_scenario(path: str | Path) -> Scenario:
    """Read and validate a scenario TOML file; errors name the file, section and field."""
    path = Path(path)
    source = str(path)
    if os.path.lexists(path):             # a FIFO would block the read forever
        check_regular_file(path, "a scenario (TOML) file")
    try:
        with open(path, "rb") as fh:
            doc = tomllib.load(fh)
    except FileNotFoundError:
        raise missing_input(path, "a scenario (TOML) file") from None
    except OSError as exc:
        raise InputFileError(path, "file", f"cannot be read ({exc.strerror})") from None
    except tomllib.TOMLDecodeError as exc:
        raise InputFileError(path, "TOML", f"not valid TOML ({exc})") from None
    except UnicodeDecodeError as exc:
        raise not_utf8(path, exc) from None
    except RecursionError:
        raise InputFileError(path, "TOML", "expected tables and arrays nested less deeply "
                             "(too deep to read)") from None
    return scenario_from_dict(doc, source)


def _check_sections(doc: dict, source: str) -> None:
    """Refuse a section (or top-level key) that no stage reads, naming the closest known one."""
    sections = sorted((KNOWN_SECTIONS - {"title"}) | set(STAGE_SECTIONS))
    for key, value in doc.items():
        if key in KNOWN_SECTIONS or key in STAGE_SECTIONS:
            continue
        table = isinstance(value, dict)

        def shown(n, key=key, table=table):
            return f"[{n}]" if n in sections or (n == key and table) else n

        raise ConfigError(f"{source}: " + unknown_name(
            key, sections + ["title"], "section" if table else "top-level key", shown=shown))


def scenario_from_dict(doc: dict, source: str = "scenario") -> Scenario:
    """Build a :class:`Scenario` from parsed TOML.

    Raises
    ------
    ConfigError
        One line naming the source, the section and the field; an unknown section names the
        known ones and the closest match.
    """
    _check_sections(doc, source)
    site = _site_from(doc, source)

    camp = _table(doc, "campaign", source)
    reject_unknown_fields(camp, CAMPAIGN_FIELDS, f"{source}: [campaign]")
    start = camp.pop("start_utc", None)
    if start is None:
        raise ConfigError(f"{source}: [campaign] start_utc: missing (ISO 8601 UTC expected)")
    try:
        epoch = Epoch(start, camp.pop("dut1_s", 0.0))
        _ = epoch.tai_jd                               # validates the instant itself
    except ConfigError as exc:
        raise ConfigError(f"{source}: [campaign] "
                          + str(exc).replace("epoch_utc", "start_utc")) from None
    if "duration_days" in camp and "duration_s" in camp:
        raise ConfigError(f"{source}: [campaign]: give duration_days or duration_s, not both")
    if "duration_days" in camp:
        duration = 86400.0 * _wrap(source, "campaign", check_finite_number,
                                   camp.pop("duration_days"), "campaign", "duration_days",
                                   positive=True)
    else:
        duration = _wrap(source, "campaign", check_finite_number, camp.pop("duration_s", None),
                         "campaign", "duration_s", positive=True)
    interval = _wrap(source, "campaign", check_finite_number,
                     camp.pop("sample_interval_s", 1.0), "campaign", "sample_interval_s",
                     positive=True)
    if camp:
        reject_unknown_fields(camp, ("start_utc", "dut1_s", "duration_days", "duration_s",
                                     "sample_interval_s"), f"{source}: [campaign]")
    if duration < 2 * interval:
        raise ConfigError(f"{source}: [campaign] duration: expected at least two samples")

    app_spec = _table(doc, "apparatus", source)
    units = app_spec.pop("units", None)
    apparatus = _wrap(source, "apparatus", make_apparatus, app_spec, "apparatus")
    units = units or apparatus.default_units
    _wrap(source, "apparatus", apparatus.check_units, units)
    if apparatus.kind in ("cavity-pair", "cavity-vs-reference") and not apparatus.carrier_hz:
        raise ConfigError(f"{source}: [apparatus] carrier_hz: missing; cavity kinds need the "
                          "carrier frequency in Hz (> 0), which run files record")

    tt = _table(doc, "turntable", source)
    tilt = _wrap(source, "turntable", AxisTilt,
                 1e-6 * tt.get("tilt_south_urad", 0.0), 1e-6 * tt.get("tilt_east_urad", 0.0))
    motion = _wrap(source, "turntable", make_motion, tt, "turntable")
    _check_sampling(source, duration, interval, motion)

    theory, rot = _theory_from(doc, source)
    coefficients = _coefficients_from(doc, source, theory)

    title = doc.get("title", "")
    if not isinstance(title, str):
        raise ConfigError(f"{source}: title: expected a string")
    sections = {k: v for k, v in doc.items() if k not in KNOWN_SECTIONS}
    sc = Scenario(title=title, source=source, site=site, epoch=epoch, duration_s=duration,
                  sample_interval_s=interval, apparatus=apparatus, units=units, motion=motion,
                  tilt=tilt, theory=theory, coefficients=coefficients,
                  include_rotation_velocity=rot, sections=sections)
    _wrap(source, "theory", sc.setup)          # sector / units compatibility
    return sc


def parse_assignments(items: tuple[str, ...], source: str = "assignments"
                      ) -> dict[str, float]:
    """Parse ``NAME=VALUE`` strings into a dict of floats.

    Errors name ``source`` (the command line passes its option, e.g. ``"--set"``).
    """
    out = {}
    for item in items:
        name, sep, value = item.partition("=")
        if not sep or not name.strip():
            raise ConfigError(f"{source}: {item!r}: expected NAME=VALUE, e.g. ke_XY=1e-17")
        try:
            out[name.strip()] = float(value)
        except ValueError:
            raise ConfigError(f"{source}: {name.strip()}: expected a number, "
                              f"got {value!r}") from None
    return out
