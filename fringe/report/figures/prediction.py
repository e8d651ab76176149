"""Figures of a prediction: the signal versus turntable azimuth and sidereal angle.

* :func:`signal_map` -- image of the signal over azimuth and sidereal angle;
* :func:`harmonic_bars` -- each coefficient's contribution to the sidereal harmonics;
* :func:`prediction_figure` -- both side by side, two columns wide.
"""

from __future__ import annotations

import numpy as np

from fringe.conventions import HARMONIC_NAMES
from fringe.report.figures import style as S

__all__ = ["harmonic_bars", "prediction_figure", "signal_map"]


@S.styled
def signal_map(azimuth_deg: np.ndarray, phi_deg: np.ndarray, signal: np.ndarray, *,
               units: str, title: str = "", ax=None):
    """Image of the signal (sidereal angle x azimuth); returns the axes.

    The colour scale is symmetric about zero, in units of a power of ten of ``units`` (in the
    colour bar's label).

    Parameters
    ----------
    azimuth_deg : ndarray, shape (na,)
        Azimuth of path 1 (C7), degrees.
    phi_deg : ndarray, shape (nphi,)
        Sidereal angle (C5), degrees.
    signal : ndarray, shape (nphi, na)
    units : str
    title : str
        Title above the axes (plain text).
    """
    if ax is None:
        ax = S.new_figure("one", aspect=0.85)
    lim = float(np.max(np.abs(signal))) or 1.0
    k = S.power_of_ten([lim])
    im = ax.pcolormesh(azimuth_deg, phi_deg, np.asarray(signal) / 10.0 ** k,
                       cmap=S.DIVERGING_CMAP, vmin=-lim / 10.0 ** k, vmax=lim / 10.0 ** k,
                       shading="auto", rasterized=True)
    bar = ax.figure.colorbar(im, ax=ax, label=S.scaled_label("signal", units, k))
    bar.ax.tick_params(labelsize=S.rc_params()["ytick.labelsize"])
    ax.set_xlabel(r"azimuth of path 1, $A$ [deg, north toward east]")
    ax.set_ylabel(r"sidereal angle $\varphi$ [deg]")
    ax.set_xticks(np.arange(0, 361, 90))
    ax.set_yticks(np.arange(0, 361, 90))
    if title:
        ax.set_title(title.replace("$", r"\$"))
    return S.finish(ax)


@S.styled
def harmonic_bars(table: dict, *, units: str, title: str = "", ax=None):
    """Bar chart of each coefficient's harmonic contributions (``HarmonicTable.contribution()``).

    ``table`` maps a coefficient name (or ``"total"``) to ``{harmonic name: amplitude}``; the
    amplitudes are shown in units of a power of ten of ``units``.
    """
    if ax is None:
        ax = S.new_figure("one", aspect=0.6)
    names = list(table)
    x = np.arange(len(HARMONIC_NAMES))
    width = 0.8 / max(len(names), 1)
    k = S.power_of_ten([table[n][h] for n in names for h in HARMONIC_NAMES])
    for i, name in enumerate(names):
        color = "k" if name == "total" else S.COLORS[i % len(S.COLORS)]
        ax.bar(x + (i - (len(names) - 1) / 2) * width,
               [table[name][h] / 10.0 ** k for h in HARMONIC_NAMES], width, color=color,
               label="total" if name == "total" else S.coefficient_label(name))
    ax.set_xticks(x, [S.harmonic_label(h) for h in HARMONIC_NAMES])
    ax.axhline(0.0, color="k", lw=0.5)
    ax.set_ylabel(S.scaled_label("amplitude", units, k))
    if title:
        ax.set_title(title)
    S.legend_outside(ax, where="right")
    return S.finish(ax)


@S.styled
def prediction_figure(result, *, title: str = "", coefficients=None):
    """Signal map and harmonic bars of a prediction, side by side; returns the Figure.

    Parameters
    ----------
    result : Prediction
        From :func:`fringe.experiment.prediction.predict` (``map_*``, ``units``, ``table``).
    title : str
        Title of the signal map.
    coefficients : mapping, optional
        The scenario's coefficient values; the bars show the non-zero ones and the total.
    """
    axes = S.new_figure("two", 3.1, ncols=2, gridspec_kw={"width_ratios": [1.0, 1.0]})
    signal_map(result.map_azimuth_deg, result.map_phi_deg, result.map_signal,
               units=result.units, ax=axes[0], title="signal")
    if title:
        axes[0].figure.suptitle(title.replace("$", r"\$"))
    coefs = coefficients or {}
    contrib = {k: v for k, v in result.table.contribution().items()
               if k == "total" or coefs.get(k)}
    if contrib:
        harmonic_bars(contrib, units=result.units, ax=axes[1],
                      title="sidereal harmonics, by coefficient")
    else:
        axes[1].set_axis_off()
    return axes[0].figure
