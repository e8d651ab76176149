"""Figures of ``fringe inspect``: Allan deviation and the spectrum around twice the rotation rate.

* :func:`allan_plot` -- overlapping Allan deviation of the fractional signal, half a turn and a
  turn marked;
* :func:`spectrum_plot` -- amplitude spectrum around 2 f_R with the sidereal sidebands marked;
* :func:`inspect_figures` -- both, as styled figures, for an
  :class:`~fringe.demodulate.quality.InspectReport`.
"""

from __future__ import annotations

import re

import numpy as np

from fringe.constants import STELLAR_DAY_S
from fringe.report.figures import style as S

__all__ = ["allan_plot", "inspect_figures", "line_label", "spectrum_plot"]


@S.styled
def allan_plot(tau_s, adev, *, turn_period_s: float | None = None, ax=None):
    """Log-log overlapping Allan deviation of the fractional signal; returns the axes.

    Half a turn and a turn (``turn_period_s``) are marked by dashed lines labelled above the
    axes.
    """
    from matplotlib.ticker import NullLocator

    if ax is None:
        ax = S.new_figure("one")
    ok = np.isfinite(adev)
    ax.loglog(np.asarray(tau_s)[ok], np.asarray(adev)[ok], "o-", color=S.COLORS[0])
    if turn_period_s:
        marks = ((turn_period_s / 2, r"$T_\mathrm{R}/2$"), (turn_period_s, r"$T_\mathrm{R}$"))
        for x, _ in marks:
            ax.axvline(x, color=S.GREY, ls="--", lw=0.7, zorder=0)
        top = ax.secondary_xaxis("top")
        top.set_xticks([m[0] for m in marks], [m[1] for m in marks])
        top.xaxis.set_minor_locator(NullLocator())
        top.tick_params(length=0, labelsize=S.rc_params()["xtick.labelsize"])
    ax.set_xlabel(r"averaging time $\tau$ [s]")
    ax.set_ylabel(r"overlapping Allan deviation $\sigma_y(\tau)$")
    ax.grid(True, which="major")
    return S.finish(ax)


def line_label(name: str) -> str:
    r"""Mathtext label of a line of the inspection (``2f_R-f_sid`` -> ``$-f_\mathrm{sid}$``).

    The lines are drawn relative to 2 f_R, so the sidebands are labelled by their offset.
    """
    if name == "2f_R":
        return r"$2f_\mathrm{R}$"
    m = re.fullmatch(r"2f_R([+-])(2?)f_sid", name)
    if m:
        sign = "+" if m.group(1) == "+" else "-"
        return rf"${sign}{m.group(2)}f_\mathrm{{sid}}$"
    return name


@S.styled
def spectrum_plot(f_hz, amp, lines_hz: dict, *, ax=None):
    """Amplitude spectrum around 2 f_R with the sidereal sidebands marked; returns the axes.

    The frequency axis is the offset from 2 f_R in cycles per sidereal day, so the sidebands
    2 f_R +- f_sid and 2 f_R +- 2 f_sid sit at +-1 and +-2 (dotted lines, named in the legend
    above the axes).
    """
    from matplotlib.lines import Line2D

    if ax is None:
        ax = S.new_figure("one")
    f0 = lines_hz["2f_R"]
    x = (np.asarray(f_hz) - f0) * STELLAR_DAY_S
    ax.semilogy(x, amp, lw=0.7, color=S.COLORS[0])
    shown = {n: (f - f0) * STELLAR_DAY_S for n, f in lines_hz.items() if n != "f_R"}
    shown = {n: v for n, v in shown.items() if x.size and x.min() <= v <= x.max()}
    for name, v in shown.items():
        ax.axvline(v, color=S.COLORS[1] if name == "2f_R" else S.GREY, ls=":", lw=0.9,
                   zorder=0)
    handles = [Line2D([], [], color=S.COLORS[1], ls=":", lw=0.9, label=line_label("2f_R")),
               Line2D([], [], color=S.GREY, ls=":", lw=0.9,
                      label=r"sidereal sidebands $2f_\mathrm{R} \pm f_\mathrm{sid}$, "
                            r"$\pm 2f_\mathrm{sid}$")]
    S.legend_outside(ax, where="above", ncols=2, handles=handles)
    ax.set_xlabel(r"frequency offset $f - 2f_\mathrm{R}$ [cycles per sidereal day]")
    ax.set_ylabel("amplitude (fractional)")
    return S.finish(ax)


def inspect_figures(report) -> list[tuple[str, object]]:
    """The inspection's figures ``[("allan", Figure), ("spectrum", Figure)]``.

    Parameters
    ----------
    report : InspectReport
        From :func:`fringe.demodulate.quality.inspect_run`.
    """
    ax1 = allan_plot(report.allan.tau_s, report.allan.adev,
                     turn_period_s=report.stats["turn_period_s"])
    ax2 = spectrum_plot(report.spectrum_f_hz, report.spectrum_amp, report.lines_hz)
    return [("allan", ax1.figure), ("spectrum", ax2.figure)]
