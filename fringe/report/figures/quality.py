"""Figures of ``fringe inspect``: Allan deviation and the spectrum around 2 f_R."""

from __future__ import annotations

import numpy as np


def allan_plot(tau_s, adev, *, turn_period_s: float | None = None, ax=None):
    """Log-log Allan deviation of the fractional signal; returns the axes."""
    import matplotlib.pyplot as plt

    if ax is None:
        _, ax = plt.subplots(figsize=(5.6, 4.0))
    ok = np.isfinite(adev)
    ax.loglog(np.asarray(tau_s)[ok], np.asarray(adev)[ok], "o-", ms=3)
    if turn_period_s:
        for x, lab in ((turn_period_s, "turn"), (turn_period_s / 2, "half turn")):
            ax.axvline(x, color="0.6", ls="--", lw=0.8)
            ax.text(x, ax.get_ylim()[1], lab, rotation=90, va="top", ha="right", fontsize=7)
    ax.set_xlabel("averaging time τ [s]")
    ax.set_ylabel("overlapping Allan deviation σ_y(τ)")
    ax.grid(True, which="both", alpha=0.3)
    return ax


def spectrum_plot(f_hz, amp, lines_hz: dict, *, ax=None):
    """Amplitude spectrum around 2 f_R with the sidereal sidebands marked; returns the axes."""
    import matplotlib.pyplot as plt

    if ax is None:
        _, ax = plt.subplots(figsize=(6.4, 4.0))
    f0 = lines_hz["2f_R"]
    ax.semilogy((np.asarray(f_hz) - f0) * 86400.0, amp, lw=0.7)
    for name, f in lines_hz.items():
        if name == "f_R":
            continue
        ax.axvline((f - f0) * 86400.0, color="C3" if name == "2f_R" else "C1", ls=":", lw=0.9)
        ax.text((f - f0) * 86400.0, ax.get_ylim()[1], name, rotation=90, va="top",
                ha="right", fontsize=7)
    ax.set_xlabel("frequency − 2 f_R [cycles per day]")
    ax.set_ylabel("amplitude (fractional)")
    return ax
