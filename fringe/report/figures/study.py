"""Figures of a study (the dict of study.json): pull histograms, coverage, sigma vs forecast.

Each function takes ``ax=None`` (or ``axes=None``) and returns the axes; only the command line
saves figures.
"""

from __future__ import annotations

import math

import numpy as np

from fringe.report.figures.style import coefficient_label

__all__ = ["coverage", "pull_histograms", "sigma_vs_forecast"]

_MARKERS = ("o", "s", "^", "v", "D", "P", "X", "*")


def _axes(ax, figsize=(6.4, 4.4)):
    import matplotlib.pyplot as plt

    if ax is None:
        _, ax = plt.subplots(figsize=figsize)
    return ax


def _row_label(row: dict) -> str:
    v = row["vary"]
    return "" if v is None else f"{v['field']} = {v['value']:g}"


def row_pulls(study: dict, row: int = 0) -> dict:
    """Pulls of each free coefficient over the successful campaigns of ``row``."""
    r = study["rows"][row]
    zero = r["pulls_against"] == "zero"
    recs = [c for c in study["campaigns"] if c["row"] == row and "error" not in c]
    return {n: np.array([(c["value"][n] - (0.0 if zero else c["truth"].get(n, 0.0)))
                         / c["sigma"][n] for c in recs]) for n in r["free"]}


def pull_histograms(study: dict, row: int = 0, axes=None):
    """One histogram of the pulls per free coefficient, with the unit normal density over it.

    Pulls beyond ±4 are counted in the outermost bins.

    Parameters
    ----------
    study : dict
        study.json's content.
    row : int
        Grid row.
    axes : sequence of matplotlib Axes, optional
        One per free coefficient (default: a new figure with a row of panels).
    """
    z = row_pulls(study, row)
    names = list(z)
    if axes is None:
        import matplotlib.pyplot as plt

        _, axes = plt.subplots(1, len(names), figsize=(2.6 * len(names), 3.0), sharey=True,
                               squeeze=False)
        axes = axes[0]
    grid = np.linspace(-4.0, 4.0, 161)
    for ax, name in zip(axes, names):
        v = z[name]
        ax.hist(np.clip(v, -4.0, 4.0), bins=np.linspace(-4.0, 4.0, 17), density=True,
                color="C0", alpha=0.6, label="campaigns")
        ax.plot(grid, np.exp(-0.5 * grid**2) / math.sqrt(2 * math.pi), "k-", lw=1,
                label="N(0, 1)")
        ax.set_title(coefficient_label(name), fontsize=10)
        ax.set_xlabel("pull (est − ref) / σ")
        if v.size:
            ax.text(0.03, 0.97, f"mean {np.mean(v):+.2f}\nstd {np.std(v, ddof=1):.2f}"
                    if v.size > 1 else "", transform=ax.transAxes, va="top", fontsize=8)
    axes[0].set_ylabel("density")
    axes[0].legend(fontsize=7, loc="upper right")
    return axes


def coverage(study: dict, ax=None):
    """Coverage of the 1σ and 1.96σ intervals per coefficient and row, with binomial bands.

    The shaded bands are the expected fractions (68.27 %, 95.00 %) ± 1 and ± 2 binomial
    standard deviations for the row's number of campaigns (the first row's N). Colour: the
    interval; marker: the grid row.
    """
    ax = _axes(ax, (7.2, 4.4))
    rows = study["rows"]
    names = rows[0]["free"]
    x = np.arange(len(names))
    for key, colour in (("coverage_68", "C0"), ("coverage_95", "C1")):
        first = next(iter(rows[0]["coefficients"].values()), None)
        if first is None:
            continue
        p, sd = first[key]["expected"], first[key]["binomial_sigma"]
        for k, alpha in ((2, 0.12), (1, 0.25)):
            ax.axhspan(100 * (p - k * sd), 100 * (p + k * sd), color=colour, alpha=alpha, lw=0)
        ax.axhline(100 * p, color=colour, lw=0.8)
        for j, row in enumerate(rows):
            dx = (j - 0.5 * (len(rows) - 1)) * min(0.12, 0.6 / len(rows))
            y = [100 * row["coefficients"][n][key]["value"] if n in row["coefficients"]
                 else np.nan for n in names]
            ax.plot(x + dx, y, _MARKERS[j % len(_MARKERS)], color=colour, ms=4,
                    label=("≤ 1σ" if key == "coverage_68" else "≤ 1.96σ") if j == 0 else None)
    if len(rows) > 1:                 # one marker per grid row, explained in grey
        for j, row in enumerate(rows):
            ax.plot([], [], _MARKERS[j % len(_MARKERS)], color="0.4", ms=4,
                    label=_row_label(row))
    ax.set_xticks(x, [coefficient_label(n) for n in names])
    ax.set_ylim(top=101.0)
    ax.set_ylabel("campaigns inside the interval (%)")
    ax.set_title("coverage; bands: expected ± 1 and ± 2 binomial σ", fontsize=10)
    ax.legend(fontsize=7, loc="upper left", bbox_to_anchor=(1.01, 1.0))
    return ax


def sigma_vs_forecast(study: dict, ax=None):
    """Median reported σ and the scatter of the estimates, each divided by the forecast σ.

    Without a grid: per coefficient, median σ / forecast (filled) and std(est − ref) / forecast
    (open), beside the line 1 (a fit that reaches the Fisher bound of the scenario's noise
    model). With a grid: median σ (points) and forecast σ (lines) of each coefficient versus
    the varied field. Coefficients without a forecast are left out.
    """
    ax = _axes(ax)
    rows = study["rows"]
    names = rows[0]["free"]
    if rows[0]["vary"] is None:
        c = rows[0]["coefficients"]
        shown = [n for n in names if n in c and c[n]["sigma_forecast"]]
        x = np.arange(len(shown))
        ax.axhline(1.0, color="k", lw=0.8, ls="--", label="forecast")
        ax.plot(x, [c[n]["sigma_median"] / c[n]["sigma_forecast"] for n in shown], "o",
                color="C0", label="median reported σ / forecast")
        ax.plot(x, [c[n]["scatter"] / c[n]["sigma_forecast"] for n in shown], "o", color="C1",
                mfc="none", label="std(est − ref) / forecast")
        ax.set_xticks(x, [coefficient_label(n) for n in shown])
        ax.set_ylabel("ratio to the forecast σ")
        ax.set_ylim(min(0.8, ax.get_ylim()[0]), max(1.2, ax.get_ylim()[1]))
    else:
        v = [r["vary"]["value"] for r in rows]
        for i, n in enumerate(names):
            med = [r["coefficients"].get(n, {}).get("sigma_median", np.nan) for r in rows]
            fc = [r["coefficients"].get(n, {}).get("sigma_forecast") or np.nan for r in rows]
            ax.semilogy(v, med, "o", color=f"C{i}", label=f"{coefficient_label(n)} median σ")
            ax.semilogy(v, fc, "-", color=f"C{i}", lw=1)
        f = rows[0]["vary"]
        ax.set_xlabel(f"{f['field']} ({f['unit']})")
        ax.set_ylabel("σ (points: median reported; lines: forecast)")
    ax.legend(fontsize=7)
    ax.set_title("σ against the forecast (Fisher bound of the scenario's noise model)",
                 fontsize=10)
    return ax
