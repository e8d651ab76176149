"""The history figure of ``fringe watch``: estimates and sigma versus days, and diagnostics.

:func:`plot_history` takes the entries of ``history.json`` (:mod:`fringe.report.watching`).
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np


def _series(entries, group: str, name: str):
    days, value, sigma = [], [], []
    for e in entries:
        got = e.get(group, {}).get(name) if group else e.get(name)
        if got is not None:
            days.append(e["days"])
            value.append(got["value"])
            sigma.append(got["sigma"])
    return np.array(days), np.array(value), np.array(sigma)


def plot_history(entries: Sequence[dict], axes=None):
    """Three panels: coefficient value ± sigma, sigma with the forecast, B0/C0/nuisances.

    Parameters
    ----------
    entries : sequence of dict
        History entries (those without ``coefficients`` are skipped).
    axes : sequence of three matplotlib Axes, optional

    Returns
    -------
    The three axes.
    """
    if axes is None:
        from matplotlib.figure import Figure

        fig = Figure(figsize=(7.0, 9.0))
        axes = fig.subplots(3, 1, sharex=True)
    entries = [e for e in entries if "coefficients" in e]
    names = list(entries[-1]["coefficients"]) if entries else []
    ax_v, ax_s, ax_d = axes
    for j, name in enumerate(names):
        d, v, s = _series(entries, "coefficients", name)
        colour = f"C{j % 10}"
        ax_v.errorbar(d + 0.02 * j, v, s, fmt="o", ms=3, color=colour, label=name)
        ax_s.plot(d, s, "o-", ms=3, color=colour, label=name)
        fd = [(e["days"], e["forecast_sigma"][name]) for e in entries
              if name in e.get("forecast_sigma", {})]
        if fd:
            ax_s.plot(*zip(*fd), "--", color=colour, lw=1)
    ax_v.axhline(0.0, color="0.6", lw=0.8)
    ax_v.set_ylabel("estimate ± 1σ")
    ax_v.legend(fontsize=7, ncol=3)
    ax_s.set_yscale("log")
    ax_s.set_ylabel("1σ (dashed: plan forecast)")
    keys = ["B0", "C0"] + sorted({n for e in entries for n in e.get("nuisance", {})})
    for j, key in enumerate(keys):
        group = "" if key in ("B0", "C0") else "nuisance"
        d, v, s = _series(entries, group, key)
        if d.size:
            ax_d.errorbar(d + 0.02 * j, v / np.where(s > 0, s, 1.0), 0 * s + 1.0, fmt="o",
                          ms=3, label=key, color=f"C{j % 10}")
    ax_d.axhline(0.0, color="0.6", lw=0.8)
    for y in (-3.0, 3.0):
        ax_d.axhline(y, color="0.8", lw=0.8, ls=":")
    ax_d.set_ylabel("diagnostic / its σ")
    ax_d.set_xlabel("days of data")
    ax_d.legend(fontsize=7, ncol=4)
    ax_v.set_title("fringe watch: the campaign so far")
    return axes
