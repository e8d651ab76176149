"""Figures of a forecast: sigma versus campaign length, rotation period and site latitude.

The forecast is a :class:`fringe.plan.PlanResult`. Each function takes ``ax=None`` and returns
the axes; only the command line saves figures.
"""

from __future__ import annotations

import math

import numpy as np


def _axes(ax, figsize=(6.4, 4.4)):
    import matplotlib.pyplot as plt

    if ax is None:
        _, ax = plt.subplots(figsize=figsize)
    return ax


def _finite(y):
    y = np.asarray(y, float)
    return np.where(np.isfinite(y), y, np.nan)


def sigma_vs_days(result, ax=None):
    """Forecast 1-sigma of each free coefficient versus campaign length (log-log).

    Solid: the free set of the plan. Dashed (SME): each ke_* fitted together with the ko_*,
    when ko_* are not already free. A grey dotted guide of slope -1/2 (a third of the first
    curve at its last point) shows the 1/sqrt(T) law; the vertical dash-dot line marks the
    span from which ko_* decouple from ke_*, the vertical dotted line the scenario's campaign;
    reached targets are marked with a star.
    """
    ax = _axes(ax)
    days = np.asarray(result.days)
    colors = {}
    for name in result.free:
        (line,) = ax.loglog(days, _finite(result.sigma_vs_days[name]), label=name)
        colors[name] = line.get_color()
    joint = result.comparison.get("ke_ko", {})
    if joint and not any(n.startswith("ko_") for n in result.free):
        for name, values in joint.items():
            ax.loglog(days, _finite(values), ls="--", lw=0.9, color=colors.get(name, "0.5"))
        ax.plot([], [], ls="--", color="0.4", lw=0.9, label="ke_* with ko_* free")
    first = _finite(result.sigma_vs_days[result.free[0]])
    if np.isfinite(first[-1]):
        ax.loglog(days, first[-1] / 3.0 * np.sqrt(days[-1] / days), ls=":", color="0.5",
                  label="∝ 1/√T (guide)")
    if result.decoupling_days:
        ax.axvline(result.decoupling_days, ls="-.", color="0.3", lw=0.9,
                   label=f"ko/ke decouple ({result.decoupling_days:.3g} d)")
    ax.axvline(result.campaign_days, ls=":", color="k", lw=0.9, label="this campaign")
    for t in result.targets:
        if t.days is not None:
            ax.plot([t.days], [t.sigma_target], marker="*", ms=11,
                    color=colors.get(t.name, "k"), ls="none")
        ax.axhline(t.sigma_target, color=colors.get(t.name, "k"), lw=0.6, alpha=0.5)
    ax.set_xlabel("campaign length [days]")
    ax.set_ylabel("forecast 1σ [coefficient units]")
    ax.set_title(f"σ versus campaign length (T_R = {result.period_s:g} s)", fontsize=10)
    ax.grid(True, which="both", alpha=0.25)
    ax.legend(fontsize=7, ncol=2)
    return ax


def sigma_vs_period(result, ax=None):
    """Forecast 1-sigma for the campaign versus rotation period; the scenario's is marked."""
    ax = _axes(ax)
    p = np.asarray(result.periods_s)
    for name in result.free:
        ax.loglog(p, _finite(result.sigma_vs_period[name]), marker=".", label=name)
    ax.axvline(result.period_s, ls=":", color="k", lw=0.9, label="scenario period")
    ax.set_xlabel("rotation period T_R [s]")
    ax.set_ylabel("forecast 1σ [coefficient units]")
    ax.set_title(f"σ versus rotation period ({result.campaign_days:.4g} d campaign)",
                 fontsize=10)
    ax.grid(True, which="both", alpha=0.25)
    ax.legend(fontsize=7, ncol=2)
    return ax


def sigma_vs_latitude(result, ax=None):
    """Forecast 1-sigma for the campaign versus site latitude (when the plan computed it)."""
    ax = _axes(ax)
    lat = np.asarray(result.latitudes_deg)
    for name in result.free:
        ax.semilogy(lat, _finite(result.sigma_vs_latitude.get(name, [math.nan] * lat.size)),
                    marker=".", label=name)
    ax.set_xlabel("site latitude [deg]")
    ax.set_title(f"σ versus site latitude ({result.campaign_days:.4g} d campaign)", fontsize=10)
    ax.set_ylabel("forecast 1σ [coefficient units]")
    ax.grid(True, which="both", alpha=0.25)
    ax.legend(fontsize=7, ncol=2)
    return ax
