"""Figures of a prediction: the signal versus turntable azimuth and sidereal angle."""

from __future__ import annotations

import numpy as np

from fringe.conventions import HARMONIC_NAMES


def signal_map(azimuth_deg: np.ndarray, phi_deg: np.ndarray, signal: np.ndarray, *,
               units: str, title: str = "", ax=None):
    """Image of the signal (sidereal angle x azimuth); returns the axes.

    Parameters
    ----------
    azimuth_deg : ndarray, shape (na,)
        Azimuth of path 1 (C7), degrees.
    phi_deg : ndarray, shape (nphi,)
        Sidereal angle (C5), degrees.
    signal : ndarray, shape (nphi, na)
    units : str
    """
    import matplotlib.pyplot as plt

    if ax is None:
        _, ax = plt.subplots(figsize=(6.4, 4.6))
    lim = float(np.max(np.abs(signal))) or 1.0
    im = ax.pcolormesh(azimuth_deg, phi_deg, signal, cmap="RdBu_r", vmin=-lim, vmax=lim,
                       shading="auto")
    ax.figure.colorbar(im, ax=ax, label=f"signal [{units}]")
    ax.set_xlabel("azimuth of path 1 A [deg, north toward east]")
    ax.set_ylabel("sidereal angle φ [deg]")
    ax.set_xticks(np.arange(0, 361, 90))
    ax.set_yticks(np.arange(0, 361, 90))
    if title:
        ax.set_title(title, fontsize=10)
    return ax


def harmonic_bars(table: dict, *, units: str, ax=None):
    """Bar chart of each coefficient's C10 contributions (``HarmonicTable.contribution()``)."""
    import matplotlib.pyplot as plt

    if ax is None:
        _, ax = plt.subplots(figsize=(6.4, 3.2))
    names = list(table)
    x = np.arange(len(HARMONIC_NAMES))
    width = 0.8 / max(len(names), 1)
    for i, name in enumerate(names):
        ax.bar(x + (i - (len(names) - 1) / 2) * width,
               [table[name][h] for h in HARMONIC_NAMES], width, label=name)
    ax.set_xticks(x, HARMONIC_NAMES)
    ax.axhline(0.0, color="k", lw=0.5)
    ax.set_ylabel(f"amplitude [{units}]")
    ax.legend(fontsize=8)
    return ax
