"""Settings of a study: how many campaigns, what is injected, which field varies, where it runs.

:class:`StudySettings` holds everything :func:`fringe.study.run_study` needs besides the
scenario; :data:`STUDY_MODES`, :data:`VARY_FIELDS` and :data:`STUDY_ENGINES` are the registries
behind the command line's choices.
"""

from __future__ import annotations

import os
from dataclasses import dataclass, field

from fringe.demodulate.settings import DemodSettings
from fringe.errors import ConfigError, check_finite_number
from fringe.fit.settings import FitSettings

__all__ = ["STUDY_ENGINES", "STUDY_MODES", "VARY_FIELDS", "StudySettings", "parse_vary"]

#: What each campaign's record carries and what its pulls are taken against:
#: "coverage" -- the injected truth is simulated and fitted; pulls (estimate - truth) / sigma;
#: "null" -- nothing injected (every coefficient 0); pulls estimate / sigma;
#: "scramble" -- the truth is injected, then whole turns are permuted in time before the fit,
#: which moves each turn's amplitudes to a random sidereal time; pulls estimate / sigma.
STUDY_MODES = ("coverage", "null", "scramble")

#: Scenario fields a study can vary over a grid: name -> (TOML section, key, unit).
VARY_FIELDS = {
    "period_s": ("turntable", "period_s", "s"),
    "latitude_deg": ("site", "latitude_deg", "deg"),
    "duration_days": ("campaign", "duration_days", "d"),
}

#: Where the campaigns run: "local" (this process, or a pool of ``workers`` processes) or
#: "dask" (a dask.distributed scheduler; one task per campaign).
STUDY_ENGINES = ("local", "dask")

#: Most campaigns of one study (a sanity bound on the record list kept in memory).
MAX_CAMPAIGNS = 1_000_000


def parse_vary(text: str | None, source: str = "StudySettings.vary"
               ) -> tuple[str, tuple[float, ...]] | None:
    """Parse ``FIELD=V1,V2,...`` into ``(FIELD, values)``; None for None or an empty text.

    Raises
    ------
    ConfigError
        One line naming ``source`` for an unknown field, a missing ``=`` or a value that is
        not a positive number.
    """
    if not text:
        return None
    name, sep, values = text.partition("=")
    name = name.strip()
    if not sep or name not in VARY_FIELDS:
        raise ConfigError(f"{source}: expected FIELD=V1,V2,... with FIELD one of "
                          f"{', '.join(VARY_FIELDS)}, got {text!r}")
    out = []
    for item in values.split(","):
        try:
            v = float(item)
        except ValueError:
            raise ConfigError(f"{source}: {name}: expected numbers separated by commas, "
                              f"got {item.strip()!r}") from None
        out.append(check_finite_number(v, source, name, positive=name != "latitude_deg",
                                       minimum=-90.0 if name == "latitude_deg" else None,
                                       maximum=90.0 if name == "latitude_deg" else None))
    if len(set(out)) != len(out):
        raise ConfigError(f"{source}: {name}: expected distinct values, got {values!r}")
    return name, tuple(out)


@dataclass(frozen=True)
class StudySettings:
    """What a study runs (everything but the scenario).

    Parameters
    ----------
    campaigns : int
        Campaigns per grid value (>= 2).
    seed : int or None
        Master seed (>= 0) of ``numpy.random.SeedSequence``; each campaign's seeds are
        spawned from it. None: drawn from the operating system's entropy (and recorded).
    fit : FitSettings or None
        The fit of each campaign (None: ``fringe fit``'s defaults with the scenario's theory).
    demod : DemodSettings
        Stage-1 settings of each fit.
    mode : {"coverage", "null", "scramble"}
        See :data:`STUDY_MODES`.
    inject_sigma : float or None
        Draw each free coefficient's truth from N(0, (inject_sigma x forecast sigma)^2) per
        campaign instead of taking the scenario's ``[coefficients]`` value (dimensionless).
    vary : tuple (FIELD, values) or None
        One scenario field over a grid (:data:`VARY_FIELDS`); one row of results per value.
    engine : {"local", "dask"}
    workers : int or None
        Local engine: processes (1: in this process; None: the CPU count, at most
        ``campaigns``).
    scheduler : str or None
        dask scheduler address (engine "dask").
    scheduler_file : str or None
        dask scheduler file (engine "dask"; instead of ``scheduler``).
    scratch_dir : str or None
        Where the campaigns' temporary run files live (removed after each campaign). None:
        the system's temporary directory of the process that runs the campaign.
    """

    campaigns: int = 100
    seed: int | None = None
    fit: FitSettings | None = None
    demod: DemodSettings = field(default_factory=DemodSettings)
    mode: str = "coverage"
    inject_sigma: float | None = None
    vary: tuple | None = None
    engine: str = "local"
    workers: int | None = None
    scheduler: str | None = None
    scheduler_file: str | None = None
    scratch_dir: str | None = None

    def __post_init__(self):
        n = self.campaigns
        if isinstance(n, bool) or not isinstance(n, int) or not 2 <= n <= MAX_CAMPAIGNS:
            raise ConfigError(f"StudySettings.campaigns: expected an integer in "
                              f"[2, {MAX_CAMPAIGNS}], got {n!r}")
        s = self.seed
        if s is not None and (isinstance(s, bool) or not isinstance(s, int) or s < 0):
            raise ConfigError(f"StudySettings.seed: expected an integer >= 0, got {s!r}")
        if self.mode not in STUDY_MODES:
            raise ConfigError(f"StudySettings.mode: expected one of {', '.join(STUDY_MODES)}, "
                              f"got {self.mode!r}")
        if self.inject_sigma is not None:
            check_finite_number(self.inject_sigma, "StudySettings", "inject_sigma",
                                positive=True)
            if self.mode == "null":
                raise ConfigError("StudySettings.inject_sigma: a null study injects nothing; "
                                  "leave inject_sigma out or choose another mode")
        if self.vary is not None and (len(self.vary) != 2 or self.vary[0] not in VARY_FIELDS):
            raise ConfigError(f"StudySettings.vary: expected (FIELD, values) with FIELD one of "
                              f"{', '.join(VARY_FIELDS)}, got {self.vary!r}")
        self._check_engine()

    def _check_engine(self) -> None:
        if self.engine not in STUDY_ENGINES:
            raise ConfigError(f"StudySettings.engine: expected one of "
                              f"{', '.join(STUDY_ENGINES)}, got {self.engine!r}")
        w = self.workers
        if w is not None and (isinstance(w, bool) or not isinstance(w, int) or w < 1):
            raise ConfigError(f"StudySettings.workers: expected an integer >= 1, got {w!r}")
        if self.engine == "dask" and (self.scheduler is None) == (self.scheduler_file is None):
            raise ConfigError("engine='dask': needs scheduler=ADDRESS or scheduler_file=FILE "
                              "(one of them)")
        if self.engine == "local" and (self.scheduler or self.scheduler_file):
            raise ConfigError("scheduler=ADDRESS: needs engine='dask'")

    def local_workers(self) -> int:
        """Processes of the local engine: ``workers``, else the CPU count, at most campaigns."""
        if self.workers is not None:
            return self.workers
        return max(1, min(os.cpu_count() or 1, self.campaigns))
