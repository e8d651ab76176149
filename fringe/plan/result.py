"""Result objects of the forecast, in plain JSON types and text for a person.

:class:`PlanResult` is what :func:`fringe.plan.forecast` returns (fixed schema, ``summary()``,
``to_dict()``/``from_dict()``); :class:`TargetAnswer` holds the days needed to reach one target
sigma; :class:`MonteCarloCheck` is the outcome of :func:`fringe.plan.monte_carlo_check`. No
computation here; :mod:`fringe.plan` re-exports all three, so import them from there.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, fields

from fringe.io.records import Fields, freeze, plain
from fringe.text_table import text_table

__all__ = ["MonteCarloCheck", "PlanResult", "TargetAnswer"]


def _fmt(x: float) -> str:
    return "unconstrained" if not math.isfinite(x) else f"{x:.3g}"


def _label(x: float) -> str:
    """A grid value as printed: up to 4 significant digits, no trailing zeros."""
    return f"{x:.4g}"


def collapsed_rows(labels, cells, marks=None) -> list[list[str]]:
    """Table rows with runs of identical cells merged into one row labelled "FIRST-LAST".

    Parameters
    ----------
    labels : sequence of str
        The grid value of each row (first column).
    cells : sequence of sequence of str
        The other columns, formatted as printed; rows whose cells print the same are merged.
    marks : sequence of str, optional
        A marker per row (e.g. "<" for the scenario's own value), kept on the merged row.
    """
    marks = list(marks) if marks is not None else [""] * len(labels)
    out, i = [], 0
    while i < len(labels):
        j = i
        while j + 1 < len(labels) and list(cells[j + 1]) == list(cells[i]):
            j += 1
        label = labels[i] if j == i else f"{labels[i]}-{labels[j]}"
        mark = " ".join(m for m in dict.fromkeys(marks[i:j + 1]) if m)
        out.append([label, *cells[i], mark])
        i = j + 1
    return out


def _freeze_fields(obj, names) -> None:
    for name in names:
        object.__setattr__(obj, name, freeze(getattr(obj, name)))


def _floats(f: Fields, key: str, *, null: float = math.inf, length: int | None = None
            ) -> tuple[float, ...]:
    """A list of numbers at ``key``; null (a non-finite value written by to_dict) is ``null``."""
    want = "a list of numbers or nulls" + (f" of length {length}" if length is not None else "")
    v = f.take(key, True, want)
    if not isinstance(v, list) or (length is not None and len(v) != length):
        raise f.error(key, want, v)
    return tuple(null if x is None else float(f.check_number(f"{key}[{i}]", x))
                 for i, x in enumerate(v))


def _curves(f: Fields, key: str, names, length: int) -> dict:
    """An object {NAME: list of ``length`` numbers or nulls}.

    NAME is among ``names`` unless that is None.
    """
    c = f.sub(key)
    if names is not None:
        c.unknown(tuple(names))
    return {k: _floats(c, k, length=length) for k, _ in c.items()}


def _number(f: Fields, key: str, **kw) -> float:
    return float(f.number(key, **kw))


@dataclass(frozen=True)
class TargetAnswer:
    """Days of campaign (from the scenario's start) for sigma(name) to reach ``sigma_target``.

    ``days`` is None when the target is not reached within ``horizon_days``.
    """

    name: str
    sigma_target: float
    days: float | None
    horizon_days: float

    def to_dict(self) -> dict:
        """The answer as plain JSON-ready data (the inverse of :meth:`from_dict`)."""
        return {"name": self.name, "sigma_target": self.sigma_target, "days": self.days,
                "horizon_days": self.horizon_days}

    @classmethod
    def from_dict(cls, d, source="plan result", where: str = "target") -> TargetAnswer:
        """Inverse of :meth:`to_dict`; checks every field (InputFileError naming it)."""
        f = Fields(source, d, where)
        f.unknown(("name", "sigma_target", "days", "horizon_days"))
        days = f.number("days", required=False, minimum=0.0)
        return cls(f.string("name"), _number(f, "sigma_target", positive=True),
                   None if days is None else float(days),
                   _number(f, "horizon_days", minimum=0.0))

    def text(self) -> str:
        """One line for a person: the days to reach the target, or that it is not reached."""
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
    noise : mapping
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
    sigma : mapping
        name -> 1-sigma forecast for the campaign (coefficient units; inf: unconstrained).
    correlation : tuple of tuples
        Correlation matrix of the free coefficients for the campaign (order of ``free``).
    days : tuple of float
        Campaign lengths of the sigma-versus-days curve, days.
    sigma_vs_days : mapping
        name -> sigmas at ``days``.
    comparison : mapping
        SME only: {"ke_only": {ke name: sigmas}, "ke_ko": {...}} at ``days`` (ke_* alone, and
        ke_* with ko_* free), both with the nuisances.
    decoupling_ratio : tuple of float
        max over ke_* of sigma(ke+ko fit) / sigma(ke-only fit) at ``days`` (SME only).
    decoupling_threshold : float
    decoupling_days : float or None
        Span from which that ratio stays <= the threshold (None: not within the curve).
    periods_s : tuple of float
    sigma_vs_period : mapping
        name -> sigma for the campaign at each rotation period.
    latitudes_deg : tuple of float
    sigma_vs_latitude : mapping
        name -> sigma for the campaign at each site latitude (empty when not asked for).
    targets : tuple of TargetAnswer

    Frozen: the mappings are read-only (:class:`~fringe.io.records.FrozenMap`), the sequences
    tuples.
    """

    title: str
    source: str
    theory: str
    units: str
    free: tuple
    nuisances: tuple
    noise: Mapping
    noise_scale: float
    period_s: float
    duty: float
    signal_frequency_hz: float
    psd_at_signal: float
    turn_sigma: float
    start_utc: str
    campaign_days: float
    n_turns: int
    sigma: Mapping
    correlation: tuple
    days: tuple
    sigma_vs_days: Mapping
    comparison: Mapping
    decoupling_ratio: tuple
    decoupling_threshold: float
    decoupling_days: float | None
    periods_s: tuple
    sigma_vs_period: Mapping
    latitudes_deg: tuple
    sigma_vs_latitude: Mapping
    targets: tuple

    FORMAT = "plan"
    VERSION = 1

    def __post_init__(self):
        _freeze_fields(self, ("free", "nuisances", "noise", "sigma", "correlation", "days",
                              "sigma_vs_days", "comparison", "decoupling_ratio", "periods_s",
                              "sigma_vs_period", "latitudes_deg", "sigma_vs_latitude",
                              "targets"))

    def to_dict(self) -> dict:
        """Plain JSON types (infinite sigmas and undefined correlations become null)."""
        out = {"fringe_format": self.FORMAT, "fringe_format_version": self.VERSION}
        for f in fields(self):
            out[f.name] = plain(getattr(self, f.name))
        return out

    @classmethod
    def from_dict(cls, data, source="plan result") -> PlanResult:
        """Inverse of :meth:`to_dict`, checking every field.

        Raises :class:`~fringe.errors.InputFileError` "SOURCE: FIELD: EXPECTED" for the first one
        missing, unknown or of the wrong kind (null sigmas are infinite, null correlations
        NaN).
        """
        f = Fields(source, data)
        if data.get("fringe_format") != cls.FORMAT:
            raise f.error("fringe_format", "'plan'", data.get("fringe_format"))
        if data.get("fringe_format_version") != cls.VERSION:
            raise f.error("fringe_format_version", str(cls.VERSION),
                          data.get("fringe_format_version"))
        f.unknown(("fringe_format", "fringe_format_version") + tuple(x.name for x in fields(cls)))
        free = f.strings("free")
        sig = f.sub("sigma")
        sig.unknown(free)
        days, periods = _floats(f, "days"), _floats(f, "periods_s")
        latitudes = _floats(f, "latitudes_deg")
        corr = f.elements("correlation")
        if len(corr.data) != len(free):
            raise f.error("correlation", f"a {len(free)}x{len(free)} matrix (order of free)")
        comp = f.sub("comparison")
        noise = f.sub("noise")
        targets = f.elements("targets")
        if "decoupling_days" not in data:
            raise f.error("decoupling_days", "a number of days or null (missing)")
        dec = f.number("decoupling_days", required=False, minimum=0.0)
        return cls(
            title=f.string("title", empty=True), source=f.string("source", empty=True),
            theory=f.string("theory"), units=f.string("units"), free=free,
            nuisances=f.strings("nuisances"),
            noise={k: noise.number(k, required=False) for k, _ in noise.items()},
            noise_scale=_number(f, "noise_scale"), period_s=_number(f, "period_s",
                                                                     positive=True),
            duty=_number(f, "duty", positive=True),
            signal_frequency_hz=_number(f, "signal_frequency_hz", positive=True),
            psd_at_signal=_number(f, "psd_at_signal", minimum=0.0),
            turn_sigma=_number(f, "turn_sigma", minimum=0.0),
            start_utc=f.string("start_utc"), campaign_days=_number(f, "campaign_days",
                                                                   minimum=0.0),
            n_turns=f.integer("n_turns"),
            sigma={k: math.inf if v is None else float(sig.check_number(k, v))
                   for k, v in sig.items()},
            correlation=tuple(_floats(corr, k, null=math.nan, length=len(free))
                              for k in corr.data),
            days=days, sigma_vs_days=_curves(f, "sigma_vs_days", free, len(days)),
            comparison={k: _curves(comp, k, None, len(days)) for k, _ in comp.items()},
            decoupling_ratio=_floats(f, "decoupling_ratio"),
            decoupling_threshold=_number(f, "decoupling_threshold", positive=True),
            decoupling_days=None if dec is None else float(dec),
            periods_s=periods, sigma_vs_period=_curves(f, "sigma_vs_period", free,
                                                       len(periods)),
            latitudes_deg=latitudes,
            sigma_vs_latitude=_curves(f, "sigma_vs_latitude", free, len(latitudes)),
            targets=tuple(TargetAnswer.from_dict(v, source, targets.name(k))
                          for k, v in targets.items()))

    def __repr__(self) -> str:
        best = min(self.sigma.values()) if self.sigma else math.nan
        return (f"PlanResult(theory={self.theory!r}, free={list(self.free)}, "
                f"campaign_days={self.campaign_days:.4g}, n_turns={self.n_turns}, "
                f"best_sigma={best:.3g})")

    def _table(self, title, grid, curves, rows, marks=None) -> list[str]:
        """An aligned sigma table over ``grid``; rows that print the same are merged.

        A merged row reads "FIRST-LAST"; a note says how many rows were merged.
        """
        rows = list(rows)
        cells = [[_fmt(curves[n][i]) for n in self.free] for i in rows]
        merged = collapsed_rows([_label(g) for g in grid], cells,
                                None if marks is None else [marks[i] for i in rows])
        out = text_table([title, *self.free, ""], merged)
        if len(merged) < len(rows):
            out.append(f"  (a row A-B stands for the grid values from A to B, whose sigmas "
                       f"print the same: {len(rows)} grid values in {len(merged)} rows)")
        return out

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
        lines += text_table(["coefficient", "sigma"], [[k, _fmt(v)] for k, v in
                                                       self.sigma.items()])
        lines += ["", "sigma versus campaign length:"]
        step = max(1, len(self.days) // 8)
        rows = list(range(0, len(self.days), step))[:-1] + [len(self.days) - 1]
        lines += self._table("days", [self.days[i] for i in rows], self.sigma_vs_days, rows)
        if self.decoupling_ratio:
            lines += ["", f"ko_*/ke_* decoupling (joint ke+ko sigma within "
                      f"{self.decoupling_threshold:g}x of the ke-only sigma for every ke_*): "
                      + (f"from {self.decoupling_days:.3g} d on" if self.decoupling_days
                         else f"not within {self.days[-1]:.0f} d"),
                      f"  ratio at {self.days[-1]:.0f} d: {self.decoupling_ratio[-1]:.3f}"]
        lines += ["", "sigma versus rotation period (this campaign, this noise):"]
        marks = ["<" if abs(p - self.period_s) < 1e-9 * p else "" for p in self.periods_s]
        lines += self._table("T_R [s]", self.periods_s, self.sigma_vs_period,
                             range(len(self.periods_s)), marks)
        if any(marks):
            lines.append(f"  < marks the scenario's own period, {self.period_s:g} s")
        if self.latitudes_deg:
            lines += ["", "sigma versus site latitude:"]
            lines += self._table("lat [deg]", self.latitudes_deg, self.sigma_vs_latitude,
                                 range(len(self.latitudes_deg)))
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

    def __post_init__(self):
        _freeze_fields(self, ("names", "truth", "sigma_forecast", "sigma_scatter",
                              "mean_offset"))

    def to_dict(self) -> dict:
        """Plain JSON types."""
        return {f.name: plain(getattr(self, f.name)) for f in fields(self)}

    @classmethod
    def from_dict(cls, data, source="Monte Carlo check") -> MonteCarloCheck:
        """Inverse of :meth:`to_dict`; checks every field (InputFileError naming it)."""
        f = Fields(source, data)
        f.unknown(tuple(x.name for x in fields(cls)))
        names = f.strings("names")
        k = len(names)
        return cls(names, _floats(f, "truth", length=k), _floats(f, "sigma_forecast", length=k),
                   _floats(f, "sigma_scatter", length=k), _floats(f, "mean_offset", length=k),
                   f.integer("n_campaigns", minimum=1), f.integer("n_turns", minimum=1),
                   f.string("method"))

    def summary(self) -> str:
        """Text for a person: forecast and Monte Carlo scatter per coefficient, and their ratio."""
        rows = [[n, f"{f:.4g}", f"{s:.4g}", f"{s / f:.3f}"] for n, f, s in
                zip(self.names, self.sigma_forecast, self.sigma_scatter, strict=True)]
        return "\n".join([f"Monte Carlo check: {self.n_campaigns} campaigns of {self.n_turns} "
                          f"turns; {self.method}"]
                         + text_table(["coefficient", "forecast", "scatter", "ratio"], rows))
