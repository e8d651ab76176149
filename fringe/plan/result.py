"""Result objects of the forecast, in plain JSON types and text for a person.

:class:`PlanResult` is what :func:`fringe.plan.forecast` returns (fixed schema, ``summary()``,
``to_dict()``/``from_dict()``); :class:`TargetAnswer` holds the days needed to reach one target
sigma; :class:`MonteCarloCheck` is the outcome of :func:`fringe.plan.monte_carlo_check`. No
computation here; :mod:`fringe.plan` re-exports all three, so import them from there.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from fringe.errors import ConfigError

__all__ = ["MonteCarloCheck", "PlanResult", "TargetAnswer"]


def _plain(x):
    """Plain JSON: tuples to lists, non-finite floats to None."""
    if isinstance(x, dict):
        return {str(k): _plain(v) for k, v in x.items()}
    if isinstance(x, (list, tuple)):
        return [_plain(v) for v in x]
    if isinstance(x, float) and not math.isfinite(x):
        return None
    return x


def _tup(values, none=math.inf):
    return tuple(none if v is None else float(v) for v in values)


def _fmt(x: float) -> str:
    return "unconstrained" if not math.isfinite(x) else f"{x:.3g}"


@dataclass(frozen=True)
class TargetAnswer:
    """Days of campaign (from the scenario's start) for sigma(name) to reach ``sigma_target``.

    ``days`` is None when the target is not reached within ``horizon_days``.
    """

    name: str
    sigma_target: float
    days: float | None
    horizon_days: float

    def text(self) -> str:
        if self.days is None:
            return (f"{self.name}: sigma = {self.sigma_target:.3g} not reachable within "
                    f"{self.horizon_days:.0f} d ({self.horizon_days / 365.25:.1f} yr)")
        return f"{self.name}: sigma = {self.sigma_target:.3g} reached after {self.days:.3g} d"


@dataclass(frozen=True)
class PlanResult:
    """The forecast of :func:`~fringe.plan.forecast`; fixed schema, plain-JSON round trip.

    Attributes (units in the names or stated)
    ----------
    title, source, theory, units : str
        Scenario title and file, theory name, observable units.
    free, nuisances : tuple of str
    noise : dict
        The PowerLawNoise coefficients (h2 Hz^-3, h0 Hz^-1, hm1, hm2 Hz; f_h_hz).
    noise_scale : float
        Observable units per unit fractional frequency (k).
    period_s, duty, signal_frequency_hz : float
        Turn period T_R, fraction of the turn used, f_0 = 2 / T_R.
    psd_at_signal : float
        S_y(f_0), 1/Hz.
    turn_sigma : float
        Per-turn amplitude sigma_a, observable units.
    start_utc : str
    campaign_days : float
    n_turns : int
        Whole turns in the campaign.
    sigma : dict
        name -> 1-sigma forecast for the campaign (coefficient units; inf: unconstrained).
    correlation : tuple of tuples
        Correlation matrix of the free coefficients for the campaign (order of ``free``).
    days : tuple of float
        Campaign lengths of the sigma-versus-days curve, days.
    sigma_vs_days : dict
        name -> sigmas at ``days``.
    comparison : dict
        SME only: {"ke_only": {ke name: sigmas}, "ke_ko": {...}} at ``days`` (ke_* alone, and
        ke_* with ko_* free), both with the nuisances.
    decoupling_ratio : tuple of float
        max over ke_* of sigma(ke+ko fit) / sigma(ke-only fit) at ``days`` (SME only).
    decoupling_threshold : float
    decoupling_days : float or None
        Span from which that ratio stays <= the threshold (None: not within the curve).
    periods_s : tuple of float
    sigma_vs_period : dict
        name -> sigma for the campaign at each rotation period.
    latitudes_deg : tuple of float
    sigma_vs_latitude : dict
        name -> sigma for the campaign at each site latitude (empty when not asked for).
    targets : tuple of TargetAnswer
    """

    title: str
    source: str
    theory: str
    units: str
    free: tuple
    nuisances: tuple
    noise: dict
    noise_scale: float
    period_s: float
    duty: float
    signal_frequency_hz: float
    psd_at_signal: float
    turn_sigma: float
    start_utc: str
    campaign_days: float
    n_turns: int
    sigma: dict
    correlation: tuple
    days: tuple
    sigma_vs_days: dict
    comparison: dict
    decoupling_ratio: tuple
    decoupling_threshold: float
    decoupling_days: float | None
    periods_s: tuple
    sigma_vs_period: dict
    latitudes_deg: tuple
    sigma_vs_latitude: dict
    targets: tuple

    FORMAT = "plan"
    VERSION = 1

    def to_dict(self) -> dict:
        """Plain JSON types (infinite sigmas and undefined correlations become null)."""
        out = {"fringe_format": self.FORMAT, "fringe_format_version": self.VERSION}
        for f in self.__dataclass_fields__:
            v = getattr(self, f)
            if f == "targets":
                v = [{"name": a.name, "sigma_target": a.sigma_target, "days": a.days,
                      "horizon_days": a.horizon_days} for a in v]
            out[f] = _plain(v)
        return out

    @classmethod
    def from_dict(cls, data: dict) -> PlanResult:
        """Inverse of :meth:`to_dict`."""
        if not isinstance(data, dict) or data.get("fringe_format") != cls.FORMAT:
            raise ConfigError("plan result: expected a mapping with fringe_format = 'plan'")
        d = {k: v for k, v in data.items() if k in cls.__dataclass_fields__}
        missing = sorted(set(cls.__dataclass_fields__) - set(d))
        if missing:
            raise ConfigError(f"plan result: {missing[0]}: missing")

        def curves(m):
            return {k: _tup(v) for k, v in m.items()}

        d["free"], d["nuisances"] = tuple(d["free"]), tuple(d["nuisances"])
        d["sigma"] = {k: math.inf if v is None else float(v) for k, v in d["sigma"].items()}
        d["correlation"] = tuple(_tup(row, math.nan) for row in d["correlation"])
        for key in ("days", "decoupling_ratio", "periods_s", "latitudes_deg"):
            d[key] = _tup(d[key])
        for key in ("sigma_vs_days", "sigma_vs_period", "sigma_vs_latitude"):
            d[key] = curves(d[key])
        d["comparison"] = {k: curves(v) for k, v in d["comparison"].items()}
        d["targets"] = tuple(TargetAnswer(**a) for a in d["targets"])
        return cls(**d)

    def __repr__(self) -> str:
        best = min(self.sigma.values()) if self.sigma else math.nan
        return (f"PlanResult(theory={self.theory!r}, free={list(self.free)}, "
                f"campaign_days={self.campaign_days:.4g}, n_turns={self.n_turns}, "
                f"best_sigma={best:.3g})")

    def summary(self) -> str:
        """Text for a person: the forecast, its curves and the answers to the targets."""
        nz = {k: v for k, v in self.noise.items() if k != "f_h_hz" and v}
        lines = [f"plan for {self.title or self.source}",
                 f"theory {self.theory}; free: {' '.join(self.free)}; nuisances: "
                 f"{' '.join(self.nuisances) or '(none)'}",
                 "noise S_y(f): " + ", ".join(f"{k} = {v:.3g}" for k, v in nz.items())
                 + f"; at f0 = 2/T_R = {self.signal_frequency_hz:.4g} Hz: "
                 f"S_y = {self.psd_at_signal:.3g} /Hz",
                 f"per-turn amplitude sigma: {self.turn_sigma:.3g} {self.units} "
                 f"(T_R = {self.period_s:g} s, duty {self.duty:.3g})",
                 f"campaign: {self.campaign_days:.4g} d from {self.start_utc}, "
                 f"{self.n_turns} turns", "", "1-sigma forecast for the campaign:"]
        lines += [f"  {k:<9} {_fmt(v)}" for k, v in self.sigma.items()]
        lines += ["", "sigma versus campaign length:",
                  "  days      " + " ".join(f"{n:>9}" for n in self.free)]
        step = max(1, len(self.days) // 8)
        for i in list(range(0, len(self.days), step))[:-1] + [len(self.days) - 1]:
            lines.append(f"  {self.days[i]:<9.4g} " + " ".join(
                f"{_fmt(self.sigma_vs_days[n][i]):>9}" for n in self.free))
        if self.decoupling_ratio:
            lines += ["", f"ko_*/ke_* decoupling (joint ke+ko sigma within "
                      f"{self.decoupling_threshold:g}x of the ke-only sigma for every ke_*): "
                      + (f"from {self.decoupling_days:.3g} d on" if self.decoupling_days
                         else f"not within {self.days[-1]:.0f} d"),
                      f"  ratio at {self.days[-1]:.0f} d: {self.decoupling_ratio[-1]:.3f}"]
        lines += ["", "sigma versus rotation period (this campaign, this noise):",
                  "  T_R [s]   " + " ".join(f"{n:>9}" for n in self.free)]
        for i, p in enumerate(self.periods_s):
            mark = " <" if abs(p - self.period_s) < 1e-9 * p else ""
            lines.append(f"  {p:<9.4g} " + " ".join(
                f"{_fmt(self.sigma_vs_period[n][i]):>9}" for n in self.free) + mark)
        if self.latitudes_deg:
            lines += ["", "sigma versus site latitude:",
                      "  lat [deg] " + " ".join(f"{n:>9}" for n in self.free)]
            for i, lat in enumerate(self.latitudes_deg):
                lines.append(f"  {lat:<9.4g} " + " ".join(
                    f"{_fmt(self.sigma_vs_latitude[n][i]):>9}" for n in self.free))
        if self.targets:
            lines += ["", "targets:"] + [f"  {a.text()}" for a in self.targets]
        lines += ["", "approximations: per-turn amplitudes white across turns with the noise "
                  "PSD at f0; statistical noise only (no systematics)."]
        return "\n".join(lines)


@dataclass(frozen=True)
class MonteCarloCheck:
    """Outcome of :func:`~fringe.plan.monte_carlo_check` (per-turn-amplitude Monte Carlo)."""

    names: tuple
    truth: tuple
    sigma_forecast: tuple
    sigma_scatter: tuple
    mean_offset: tuple
    n_campaigns: int
    n_turns: int
    method: str = ("per-turn amplitudes with white noise of the forecast variance, fitted by "
                   "least squares (checks the Fisher algebra, not the sample-level noise model)")

    def summary(self) -> str:
        rows = [f"  {n:<9} {f:.4g}  {s:.4g}  {s / f:.3f}" for n, f, s in
                zip(self.names, self.sigma_forecast, self.sigma_scatter, strict=True)]
        return "\n".join([f"Monte Carlo check: {self.n_campaigns} campaigns of {self.n_turns} "
                          f"turns; {self.method}", "  name      forecast  scatter  ratio"] + rows)
