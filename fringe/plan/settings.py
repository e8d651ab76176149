"""Settings of the forecast (:mod:`fringe.plan`).

The scenario's ``[plan]`` section and the command-line overrides, validated into
:class:`PlanSettings`.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import TYPE_CHECKING

from fringe.errors import (
    ConfigError,
    check_finite_number,
    reject_unknown_fields,
    unknown_name,
    unknown_text,
)

if TYPE_CHECKING:
    from fringe.experiment.scenario import Scenario

#: Nuisance columns (C row, B row) of the per-turn model: constant lab-fixed 2 theta offsets,
#: as for paths 90 deg apart; the plan and the fit use the apparatus's own directions
#: (:meth:`fringe.experiment.apparatus.Apparatus.offset_directions`: two-path B0 and C0).
NUISANCES: dict[str, tuple[float, float]] = {"lab_B0": (0.0, 1.0), "lab_C0": (1.0, 0.0)}
#: Longest turn the per-turn model is used for, s (must be << a sidereal day).
MAX_PERIOD_S = 3600.0


@dataclass(frozen=True)
class PlanSettings:
    """What to forecast (the ``[plan]`` section, overridden by command-line options).

    Parameters
    ----------
    free : tuple of str
        Free coefficients.
    nuisances : tuple of str
        Nuisance terms fitted with them (keys of :data:`NUISANCES`; default lab_B0).
    max_days : float
        Longest campaign of the sigma-versus-days curve and of target searches, days.
    n_days : int
        Points of that curve (log-spaced from 1 day).
    periods_s : tuple of float
        Rotation periods of the sigma-versus-period curve, s (empty: 13 log-spaced from
        T_R/10 to 10 T_R, clipped to [8 samples, 3600 s]).
    latitudes_deg : tuple of float
        Site latitudes for sigma versus latitude (empty: none).
    decoupling_threshold : float
        ko_* count as decoupled when the joint ke+ko sigma of every ke_* is within this
        factor of its ke-only sigma (see docs/plan.md).
    max_turn_points : int
        Largest number of turns evaluated per grid; longer spans use every m-th turn, weighted m.
    targets : dict
        Coefficient -> target sigma (days needed are reported).
    drift : {"offset", "linear", "quadratic"}
        Per-turn drift model of the fit being forecast (default the fit's default, linear);
        sets the per-turn (C, B) covariance shape (:func:`turn_shape_matrix`).
    """

    free: tuple[str, ...]
    nuisances: tuple[str, ...] = ("lab_B0",)
    max_days: float = 730.0
    n_days: int = 25
    periods_s: tuple[float, ...] = ()
    latitudes_deg: tuple[float, ...] = ()
    decoupling_threshold: float = 1.1
    max_turn_points: int = 20000
    targets: dict = field(default_factory=dict)
    drift: str = "linear"

    def __post_init__(self):
        from fringe.demodulate.settings import DRIFT_TERMS

        if self.drift not in DRIFT_TERMS:
            raise ConfigError(f"plan: drift: expected one of {', '.join(DRIFT_TERMS)}, "
                              f"got {self.drift!r}")
        for n in self.nuisances:
            if n not in NUISANCES:
                raise ConfigError("plan: nuisances: " + unknown_name(n, NUISANCES, "nuisance",
                                                                     ordered=True))
        if "lab_C0" in self.nuisances and "ke_ZZ" in self.free:
            raise ConfigError("plan: nuisances: lab_C0 (a constant C offset) is degenerate with "
                              "ke_ZZ; drop lab_C0 or leave ke_ZZ out of free")
        check_finite_number(self.max_days, "plan", "max_days", minimum=1.0)
        check_finite_number(self.decoupling_threshold, "plan", "decoupling_threshold",
                            minimum=1.0 + 1e-9)
        for name, v, lo in (("n_days", self.n_days, 2), ("max_turn_points", self.max_turn_points,
                                                           100)):
            if isinstance(v, bool) or not isinstance(v, int) or v < lo:
                raise ConfigError(f"plan: {name}: expected an integer >= {lo}, got {v!r}")
        for p in self.periods_s:
            check_finite_number(p, "plan", "periods_s", positive=True, maximum=MAX_PERIOD_S)
        for lat in self.latitudes_deg:
            check_finite_number(lat, "plan", "latitudes_deg", minimum=-90.0, maximum=90.0)
        for k, v in self.targets.items():
            if k not in self.free:
                raise ConfigError(f"plan: target {k}: "
                                  + unknown_text(k, self.free, "free coefficient", ordered=True))
            check_finite_number(v, "plan", f"target {k}", positive=True)


def _names(value, where: str) -> tuple[str, ...]:
    if isinstance(value, str):
        value = [s.strip() for s in value.split(",") if s.strip()]
    if not isinstance(value, (list, tuple)) or not all(isinstance(s, str) for s in value):
        raise ConfigError(f"{where}: expected a list of names")
    return tuple(value)


def _plan_free(theory, free, sec: dict, where: str) -> tuple[str, ...]:
    """The free coefficients of the forecast, checked against ``theory``.

    ``free`` if given, else the section's ``free`` (popped from ``sec``), else the theory's
    primary names.
    """
    where_free = "plan_settings(free=...)" if free is not None else f"{where} free"
    if free is not None:
        names = _names(free, where_free)
        sec.pop("free", None)
    elif "free" in sec:
        names = _names(sec.pop("free"), where_free)
    else:
        names = theory.primary_names
    for n in names:
        if n not in theory.parameter_names:
            raise ConfigError(f"{where_free}: " + unknown_name(
                n, theory.parameter_names, f"coefficient of theory '{theory.name}'",
                ordered=True))
    if not names or len(set(names)) != len(names):
        raise ConfigError(f"{where_free}: expected distinct coefficient names")
    return tuple(names)


#: The fields of a scenario's ``[plan]`` section (docs/plan.md).
PLAN_FIELDS = ("free", "targets", "max_days", "n_days", "decoupling_threshold",
               "max_turn_points", "drift", "nuisances", "periods_s", "latitudes_deg")


def _plan_fields(sec: dict, where: str) -> dict:
    """The section's optional numeric and list fields as PlanSettings keywords (popped)."""
    kw = {}
    for key in ("max_days", "n_days", "decoupling_threshold", "max_turn_points", "drift"):
        if key in sec:
            kw[key] = sec.pop(key)
    for key in ("nuisances",):
        if key in sec:
            kw[key] = _names(sec.pop(key), f"{where} {key}")
    for key in ("periods_s", "latitudes_deg"):
        if key in sec:
            v = sec.pop(key)
            if not isinstance(v, list):
                raise ConfigError(f"{where} {key}: expected a list of numbers")
            kw[key] = tuple(v)
    return kw


def plan_settings(scenario: Scenario, free: str | Sequence[str] | None = None,
                  targets: dict[str, float] | None = None) -> PlanSettings:
    """Settings from the scenario's ``[plan]`` section; ``free``/``targets`` override/add."""
    where = f"{scenario.source}: [plan]"
    sec = scenario.sections.get("plan", {})
    if not isinstance(sec, dict):
        raise ConfigError(f"{where}: expected a table")
    sec = dict(sec)
    theory = scenario.theory
    if not theory.linear:
        raise ConfigError(f"{scenario.source}: [theory] name: the plan needs a linear theory "
                          f"(the Fisher forecast is for linear models), got {theory.name!r}")
    names = _plan_free(theory, free, sec, where)
    tg = sec.pop("targets", {})
    if not isinstance(tg, dict):
        raise ConfigError(f"{where} targets: expected a table NAME = sigma")
    tg = {**tg, **(targets or {})}
    kw = _plan_fields(sec, where)
    if sec:
        reject_unknown_fields(sec, PLAN_FIELDS, where)
    try:
        return PlanSettings(free=tuple(names), targets=tg, **kw)
    except ConfigError as exc:
        msg = str(exc)
        raise ConfigError(f"{where} {msg[6:] if msg.startswith('plan: ') else msg}") from None


