"""Figures of a forecast: sigma versus campaign length, rotation period and site latitude.

The forecast is a :class:`fringe.plan.PlanResult`. Each function takes ``ax=None`` (a new styled
figure, two columns wide, legend to the right of the axes) and returns the axes; the command
line saves them (:func:`fringe.report.figures.style.save_figure`).

Every coefficient has its own colour and marker, the markers of the i-th curve sit on every
n-th point starting at i (open symbols), so curves that coincide stay visible and each is named
in the legend.
"""

from __future__ import annotations

import math

import numpy as np

from fringe.report.figures import style as S

__all__ = ["COINCIDE_RTOL", "coincident_labels", "plan_figure_names", "plan_figures",
           "sigma_vs_days", "sigma_vs_latitude", "sigma_vs_period"]


def _finite(y):
    y = np.asarray(y, float)
    return np.where(np.isfinite(y), y, np.nan)


def _axes(ax):
    return ax if ax is not None else S.new_figure("two", 3.1)


def _unit(result) -> str:
    from fringe.theories import THEORIES

    cls = THEORIES.get(result.theory)
    units = {cls.parameter_units.get(n, "1") for n in result.free} if cls else {"1"}
    return units.pop() if len(units) == 1 else "1"


#: Relative difference below which two forecast curves are said to coincide (legend note).
COINCIDE_RTOL = 0.01


def _curve(ax, x, y, i: int, n: int, label: str, *, every: bool = False):
    """One coefficient's curve: colour and open marker of :func:`~.style.series_style`.

    Later curves get smaller markers, so that symbols at the same point nest inside each other.
    """
    st = S.series_style(i)
    mark = None if every else (i % max(n, 1), max(n, 1))
    ms = 4.0 + 0.6 * max(min(n, 6) - 1 - i, 0)
    (line,) = ax.plot(x, y, color=st["color"], marker=st["marker"], markevery=mark, ms=ms,
                      mfc="white", mew=0.9, lw=1.2, label=label, zorder=3 + 0.01 * i)
    return line


def coincident_labels(curves: dict) -> dict:
    """Legend labels of ``{name: sigmas}``; a curve equal to an earlier one says so.

    Two curves coincide when every finite pair of points agrees to :data:`COINCIDE_RTOL`;
    the later one is labelled "NAME (on EARLIER)" so that a hidden line is still named.
    """
    out, seen = {}, []
    for name, y in curves.items():
        y = np.asarray(y, float)
        label = S.coefficient_label(name)
        for other, yo in seen:
            ok = np.isfinite(y) & np.isfinite(yo)
            if ok.any() and np.allclose(y[ok], yo[ok], rtol=COINCIDE_RTOL, atol=0.0) \
                    and np.array_equal(np.isfinite(y), np.isfinite(yo)):
                label += f" (on {S.coefficient_label(other)})"
                break
        out[name] = label
        seen.append((name, y))
    return out


def _ylabel(result) -> str:
    unit = _unit(result)
    what = r"forecast $1\sigma$ of the coefficient"
    return what + (S.unit_suffix(unit) if unit != "1" else " (dimensionless)")


@S.styled
def sigma_vs_days(result, ax=None):
    """Forecast 1-sigma of each free coefficient versus campaign length (log-log).

    Solid, with markers: the free set of the plan. Thin dashed (SME): each ke_* fitted together
    with the ko_*, when ko_* are not already free. A grey dotted guide of slope -1/2 (a third of
    the first curve at its last point) shows the 1/sqrt(T) law; the vertical dash-dot line
    marks the span from which ko_* decouple from ke_*, the vertical dotted line the scenario's
    campaign; targets are thin horizontal lines, reached ones are marked with a star.
    """
    from matplotlib.lines import Line2D

    ax = _axes(ax)
    days = np.asarray(result.days)
    colors = {}
    n = len(result.free)
    labels = coincident_labels({k: _finite(result.sigma_vs_days[k]) for k in result.free})
    for i, name in enumerate(result.free):
        line = _curve(ax, days, _finite(result.sigma_vs_days[name]), i, n, labels[name])
        colors[name] = line.get_color()
    joint = result.comparison.get("ke_ko", {})
    if joint and not any(x.startswith("ko_") for x in result.free):
        for name, values in joint.items():
            ax.plot(days, _finite(values), ls=(0, (4, 2)), lw=0.8, color=colors.get(name, "0.5"),
                    zorder=2)
        ax.plot([], [], ls=(0, (4, 2)), color="0.3", lw=0.8,
                label=r"same, $\tilde{\kappa}_{o+}$ also free")
    first = _finite(result.sigma_vs_days[result.free[0]])
    if np.isfinite(first[-1]):
        ax.plot(days, first[-1] / 3.0 * np.sqrt(days[-1] / days), ls=":", color=S.GREY,
                label=r"guide $\propto 1/\sqrt{T}$")
    if result.decoupling_days:
        ax.axvline(result.decoupling_days, ls="-.", color="0.3", lw=0.8,
                   label=rf"$\tilde{{\kappa}}_{{o+}}$ decouple ({result.decoupling_days:.3g} d)")
    ax.axvline(result.campaign_days, ls=":", color="k", lw=0.9,
               label=f"this campaign ({result.campaign_days:.4g} d)")
    starred = False
    for t in result.targets:
        ax.axhline(t.sigma_target, color=colors.get(t.name, "k"), lw=0.6, alpha=0.6, zorder=1)
        if t.days is not None:
            ax.plot([t.days], [t.sigma_target], marker="*", ms=9, ls="none", zorder=5,
                    color=colors.get(t.name, "k"), mec="k", mew=0.4)
            starred = True
    if result.targets:
        ax.plot([], [], color="0.3", lw=0.6, label="target")
    if starred:
        ax.add_line(Line2D([], [], marker="*", ms=9, ls="none", color="0.5", mec="k", mew=0.4,
                           label="target reached"))
    ax.set_xscale("log")
    ax.set_yscale("log")
    ax.set_xlabel("campaign length [days]")
    ax.set_ylabel(_ylabel(result))
    ax.set_title(rf"$\sigma$ versus campaign length ($T_\mathrm{{R}}$ = {result.period_s:g} s)")
    ax.grid(True, which="major")
    S.legend_outside(ax, where="right")
    return S.finish(ax)


@S.styled
def sigma_vs_period(result, ax=None):
    """Forecast 1-sigma for the campaign versus rotation period; the scenario's is marked."""
    ax = _axes(ax)
    p = np.asarray(result.periods_s)
    labels = coincident_labels({k: _finite(result.sigma_vs_period[k]) for k in result.free})
    for i, name in enumerate(result.free):
        _curve(ax, p, _finite(result.sigma_vs_period[name]), i, len(result.free), labels[name],
               every=len(p) <= 8)
    ax.axvline(result.period_s, ls=":", color="k", lw=0.9,
               label=f"this scenario ({result.period_s:g} s)")
    ax.set_xscale("log")
    ax.set_yscale("log")
    ax.set_xlabel(r"rotation period $T_\mathrm{R}$ [s]")
    ax.set_ylabel(_ylabel(result))
    ax.set_title(rf"$\sigma$ versus rotation period ({result.campaign_days:.4g} d campaign)")
    ax.grid(True, which="major")
    S.legend_outside(ax, where="right")
    return S.finish(ax)


@S.styled
def sigma_vs_latitude(result, ax=None):
    """Forecast 1-sigma for the campaign versus site latitude (when the plan computed it)."""
    ax = _axes(ax)
    lat = np.asarray(result.latitudes_deg)
    curves = {k: _finite(result.sigma_vs_latitude.get(k, [math.nan] * lat.size))
              for k in result.free}
    labels = coincident_labels(curves)
    for i, name in enumerate(result.free):
        _curve(ax, lat, curves[name], i, len(result.free), labels[name], every=len(lat) <= 8)
    ax.set_yscale("log")
    ax.set_xlabel("site latitude [deg]")
    ax.set_ylabel(_ylabel(result))
    ax.set_title(rf"$\sigma$ versus site latitude ({result.campaign_days:.4g} d campaign)")
    ax.grid(True, which="major")
    S.legend_outside(ax, where="right")
    return S.finish(ax)


def plan_figure_names(result) -> list[str]:
    """Names of the figures of a forecast (``plan_sigma_vs_days``, ...), in order."""
    names = ["plan_sigma_vs_days", "plan_sigma_vs_period"]
    if len(result.latitudes_deg):
        names.append("plan_sigma_vs_latitude")
    return names


def plan_figures(result) -> list[tuple[str, object]]:
    """Every figure of a forecast as ``(name, Figure)``; see :func:`plan_figure_names`."""
    funcs = {"plan_sigma_vs_days": sigma_vs_days, "plan_sigma_vs_period": sigma_vs_period,
             "plan_sigma_vs_latitude": sigma_vs_latitude}
    return [(name, funcs[name](result).figure) for name in plan_figure_names(result)]
