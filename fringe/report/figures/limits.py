"""The limits figure and the correlation figure of a fit report.

* :func:`plot_limits` -- each coefficient's value with its 68 % (value +- 1 sigma) and 95 %
  (value +- 1.96 sigma) intervals, the intervals of :mod:`fringe.report.tables`, on a symmetric
  logarithmic axis (dimensionless coefficients spanning decades) or a linear one (the medium's
  velocity components, km/s), beside earlier results the user supplied;
* :func:`plot_speed_limits` -- one-sided 95 % upper limits on speeds (the medium fit's derived
  speeds), from zero, with the best value marked;
* :func:`plot_correlation` -- the correlation matrix as an image with its numbers.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence

import numpy as np
from numpy.typing import ArrayLike

from fringe.linalg import correlation_from_covariance
from fringe.report.figures import style as S

__all__ = ["CORRELATION_LABELS_MAX", "CORRELATION_NUMBERS_MAX", "CORRELATION_SIDE_MAX_IN",
           "MIN_BAR_FRACTION", "Z68", "Z95", "choose_limits_scale", "plot_correlation",
           "plot_limits", "plot_speed_limits", "symlog_ticks"]

#: Half-widths of the 68 % and 95 % Gaussian intervals in sigma, as in the report's tables
#: (:data:`fringe.report.tables.Z68`, :data:`fringe.report.tables.Z95`).
Z68 = 1.0
Z95 = 1.96

#: Largest number of coefficients whose correlations are printed in the cells (beyond it the
#: colours alone are shown: n**2 text labels make a figure slow and unreadable).
CORRELATION_NUMBERS_MAX = 16
#: Largest side of the correlation figure, inches.
CORRELATION_SIDE_MAX_IN = 12.0
#: Most tick labels along each axis of the correlation figure.
CORRELATION_LABELS_MAX = 40
#: Most labelled decades on each side of zero of a symmetric-log axis (at one column width,
#: labels such as -10^-16 run together beyond five in all).
SYMLOG_DECADES_MAX = 2


def symlog_ticks(linthresh: float, lim: float) -> tuple[list[float], list[str], list[float]]:
    """Major ticks (0 and +-10^k), their mathtext labels, and unlabelled minor ticks.

    Decades run from the first power of ten at or above ``linthresh`` to ``lim``; with more
    than :data:`SYMLOG_DECADES_MAX` of them only every second (third, ...) decade is labelled,
    so tick labels never run into each other.
    """
    k0 = math.ceil(math.log10(linthresh) - 1e-9)
    k1 = math.floor(math.log10(lim) + 1e-9)
    ks = list(range(k0, k1 + 1)) or [k0]
    step = -(-len(ks) // SYMLOG_DECADES_MAX)
    labelled = ks[::-1][::step][::-1]
    major = [-(10.0 ** k) for k in labelled[::-1]] + [0.0] + [10.0 ** k for k in labelled]
    labels = [f"$-10^{{{k}}}$" for k in labelled[::-1]] + ["0"] + [f"$10^{{{k}}}$"
                                                                   for k in labelled]
    minor = [s * m * 10.0 ** k for k in range(k0 - 1, k1 + 1) for m in range(1, 10)
             for s in (-1.0, 1.0) if linthresh <= m * 10.0 ** k <= lim and
             not (m == 1 and k in labelled)]
    return major, labels, minor


def _row_handles(has_earlier: bool, shade: bool):
    from matplotlib.lines import Line2D
    from matplotlib.patches import Patch

    h = [Line2D([], [], color="k", marker="o", ls="none", ms=3.5, label="value"),
         Line2D([], [], color=S.COLORS[0], lw=4.5, alpha=0.55,
                label=r"68 % interval ($\pm1\sigma$)"),
         Line2D([], [], color=S.COLORS[0], lw=1.0, marker="|", ms=6,
                label=r"95 % interval ($\pm1.96\sigma$)")]
    if has_earlier:
        h.append(Line2D([], [], color=S.GREY, lw=4.5, alpha=0.55,
                        label="earlier result (as supplied)"))
    if shade:
        h.append(Patch(color="0.9", label="linear part of the axis"))
    return h


def _interval_rows(ax, entries, y):
    for yi, e in zip(y, entries, strict=True):
        v, s = float(e["value"]), float(e["sigma"])
        color = S.COLORS[0] if e.get("ours") else S.GREY
        ax.plot([v - Z95 * s, v + Z95 * s], [yi, yi], color=color, lw=1.0, marker="|", ms=6,
                solid_capstyle="butt", zorder=2)
        ax.plot([v - Z68 * s, v + Z68 * s], [yi, yi], color=color, lw=4.5, alpha=0.55,
                solid_capstyle="butt", zorder=3)
        ax.plot([v], [yi], "o", color="k" if e.get("ours") else S.GREY, ms=3.5, zorder=4)


#: Narrowest 68 % bar, as a fraction of the axis width, that a scale must leave for it to be
#: chosen by :func:`choose_limits_scale` (3 %: about two millimetres at one column; common
#: practice).
MIN_BAR_FRACTION = 0.03


def _symlog_params(sig, lim):
    pos = sig[np.isfinite(sig) & (sig > 0)]
    linthresh = float(pos.min()) if pos.size else lim / 100.0
    return min(linthresh, lim / 10.0)


def choose_limits_scale(entries: Sequence[Mapping], unit: str = "1") -> str:
    """The axis of the limits figure that leaves the most 68 % bars visible.

    A bar is visible when it spans at least :data:`MIN_BAR_FRACTION` of the axis. Candidates,
    in order of preference on a tie: ``"symlog"`` (dimensionless coefficients only: those with
    a unit, the medium's velocities, are never put on a logarithmic axis), ``"linear"`` (an
    axis symmetric about zero) and ``"zoom"`` (a linear axis around the intervals; zero need
    not be on it).
    """
    from matplotlib.scale import SymmetricalLogTransform

    vals = np.array([e["value"] for e in entries], float)
    sig = np.array([e["sigma"] for e in entries], float)
    ours = np.array([bool(e.get("ours")) for e in entries]) & np.isfinite(sig) & (sig > 0)
    if not ours.any():
        return "symlog" if unit == "1" else "linear"
    v, s = vals[ours], sig[ours]
    lim = float(np.nanmax(np.abs(vals) + Z95 * sig)) * 1.12
    counts = {}
    if unit == "1":
        big = lim * 10.0 ** 0.25 / 1.12
        tr = SymmetricalLogTransform(10, _symlog_params(sig, big), SYMLOG_LINSCALE)
        width = float(np.diff(tr.transform(np.array([-big, big])))[0])
        counts["symlog"] = int(np.sum(tr.transform(v + s) - tr.transform(v - s)
                                      >= MIN_BAR_FRACTION * width))
    counts["linear"] = int(np.sum(2 * s >= MIN_BAR_FRACTION * 2 * lim))
    span = float(np.nanmax(vals + Z95 * sig) - np.nanmin(vals - Z95 * sig)) * 1.24
    counts["zoom"] = int(np.sum(2 * s >= MIN_BAR_FRACTION * span))
    return max(counts, key=lambda k: counts[k])          # first of the largest: preference


#: Width of the linear part of the symmetric-log axis, in decades.
SYMLOG_LINSCALE = 0.6


def _set_symlog(ax, sig, lim):
    linthresh = _symlog_params(sig, lim)
    ax.set_xscale("symlog", linthresh=linthresh, linscale=SYMLOG_LINSCALE)
    ax.axvspan(-linthresh, linthresh, color="0.9", lw=0, zorder=0)
    major, labels, minor = symlog_ticks(linthresh, lim)
    ax.set_xticks(major, labels)
    ax.set_xticks(minor, minor=True)


@S.styled
def plot_limits(entries: Sequence[Mapping], *, scale: str = "auto", unit: str = "1",
                quantity: str = "coefficient value", ax=None):
    """Values with 68 % and 95 % intervals, one row per entry, top to bottom.

    Parameters
    ----------
    entries : sequence of mapping
        ``{"label": str, "value": float, "sigma": float, "ours": bool}`` (``label`` is shown as
        given: mathtext allowed), in the coefficient's unit ``unit``.
    scale : {"auto", "symlog", "linear", "zoom"}
        Symmetric logarithmic axis, linear within +- the smallest non-zero sigma (shaded); a
        linear axis symmetric about zero; or a linear axis around the intervals. Linear axes
        are in units of a power of ten shown in the axis label. ``"auto"``:
        :func:`choose_limits_scale`.
    unit : str
        Unit of the values (``"1"``: dimensionless).
    quantity : str
        What the values are (the axis label, before the unit).
    """
    n = len(entries)
    if ax is None:                # earlier results have long row names: a full-width figure
        wide = any(not e.get("ours") for e in entries)
        ax = S.new_figure("two" if wide else "one", 0.95 + 0.24 * max(n, 1))
    if not entries:
        ax.text(0.5, 0.5, "no coefficients", ha="center", va="center", transform=ax.transAxes)
        ax.set_axis_off()
        return ax
    if scale == "auto":
        scale = choose_limits_scale(entries, unit)
    if scale not in ("symlog", "linear", "zoom"):
        raise ValueError("limits figure: scale: expected 'auto', 'symlog', 'linear' or 'zoom', "
                         f"got {scale!r}")
    vals = np.array([e["value"] for e in entries], float)
    sig = np.array([e["sigma"] for e in entries], float)
    lim = float(np.nanmax(np.abs(vals) + Z95 * sig)) * 1.12 or 1.0
    k = 0
    if scale == "zoom":
        lo, hi = np.nanmin(vals - Z95 * sig), np.nanmax(vals + Z95 * sig)
        pad = 0.12 * (hi - lo) or abs(hi) or 1.0
        xlim = (lo - pad, hi + pad)
        k = S.power_of_ten(xlim)
    elif scale == "linear":
        k = S.power_of_ten([lim])
    f = 10.0 ** -k
    y = np.arange(n)[::-1]
    _interval_rows(ax, [dict(e, value=e["value"] * f, sigma=e["sigma"] * f) for e in entries], y)
    ax.axvline(0.0, color="k", lw=0.5, zorder=1)
    if scale == "symlog":               # 1.12 is too little room on a log axis: half a decade
        lim *= 10.0 ** 0.25 / 1.12
        ax.set_xlim(-lim, lim)
        _set_symlog(ax, sig, lim)
    else:
        ax.set_xlim(*(np.array(xlim) * f if scale == "zoom" else (-lim * f, lim * f)))
    ax.set_xlabel(quantity + S.unit_suffix(unit, k))
    ax.set_yticks(y, [e["label"] for e in entries])
    ax.tick_params(axis="y", which="both", length=0)
    ax.set_ylim(-0.6, n - 0.4)
    ax.grid(True, axis="x", which="major")
    S.legend_outside(ax, where="above", ncols=2,
                     handles=_row_handles(any(not e.get("ours") for e in entries),
                                          scale == "symlog"))
    return S.finish(ax)


@S.styled
def plot_speed_limits(rows: Sequence[Mapping], *, unit: str = "km/s", ax=None):
    """One-sided 95 % upper limits on speeds: a bar from zero to the limit, the best value marked.

    Parameters
    ----------
    rows : sequence of mapping
        ``{"label": str, "best": float, "upper_95": float}``, top to bottom, in ``unit``.
    """
    from matplotlib.lines import Line2D

    n = len(rows)
    if ax is None:
        ax = S.new_figure("one", 0.9 + 0.26 * max(n, 1))
    up = np.array([r["upper_95"] for r in rows], float)
    k = S.power_of_ten(up)
    y = np.arange(n)[::-1]
    for yi, r in zip(y, rows, strict=True):
        ax.plot([0.0, r["upper_95"] / 10.0 ** k], [yi, yi], color=S.COLORS[1], lw=4.5,
                alpha=0.55, solid_capstyle="butt")
        ax.plot([r["best"] / 10.0 ** k], [yi], "o", color="k", ms=3.5)
    ax.set_xlim(0.0, float(np.nanmax(up)) / 10.0 ** k * 1.1 if n else 1.0)
    ax.set_yticks(y, [r["label"] for r in rows])
    ax.tick_params(axis="y", which="both", length=0)
    ax.set_ylim(-0.6, n - 0.4)
    ax.set_xlabel("speed" + S.unit_suffix(unit, k))
    ax.grid(True, axis="x")
    handles = [Line2D([], [], color="k", marker="o", ls="none", ms=3.5, label="best value"),
               Line2D([], [], color=S.COLORS[1], lw=4.5, alpha=0.55,
                      label="up to the 95 % upper limit")]
    S.legend_outside(ax, where="above", ncols=2, handles=handles)
    return S.finish(ax)


@S.styled
def plot_correlation(names: Sequence[str], covariance: ArrayLike, ax=None):
    """Correlation matrix of the coefficients, colour image with the numbers.

    Up to :data:`CORRELATION_NUMBERS_MAX` coefficients each cell shows its number (two
    decimals, never ``-0.00``); beyond, the colours alone, and at most
    :data:`CORRELATION_LABELS_MAX` names label each axis. Names are shown through
    :func:`~fringe.report.figures.style.coefficient_label`.
    """
    n = len(names)
    if ax is None:
        side = min(max(S.ONE_COLUMN_IN, 1.3 + 0.42 * n), CORRELATION_SIDE_MAX_IN)
        ax = S.new_figure(side, min(side * 0.86, CORRELATION_SIDE_MAX_IN))
    rho = correlation_from_covariance(covariance, unit_diagonal=True)
    im = ax.imshow(rho, vmin=-1, vmax=1, cmap=S.DIVERGING_CMAP)
    if n <= CORRELATION_NUMBERS_MAX:
        size = 6.5 if n <= 8 else 5.0
        for i in range(n):
            for j in range(n):
                v = rho[i, j]
                ax.text(j, i, S.format_correlation(v), ha="center", va="center",
                        fontsize=size, color="w" if np.isfinite(v) and abs(v) > 0.6 else "k")
    step = -(-n // CORRELATION_LABELS_MAX)
    ticks = list(range(0, n, step))
    labels = [S.coefficient_label(names[k]) for k in ticks]
    if n > 6:
        ax.set_xticks(ticks, labels, rotation=45, ha="right", rotation_mode="anchor")
    else:
        ax.set_xticks(ticks, labels)
    ax.set_yticks(ticks, labels)
    ax.tick_params(which="both", length=0)
    bar = ax.figure.colorbar(im, ax=ax, label="correlation coefficient", shrink=0.9)
    bar.set_ticks([-1, -0.5, 0, 0.5, 1], labels=["\u22121", "\u22120.5", "0", "0.5", "1"])
    bar.ax.tick_params(labelsize=S.rc_params()["ytick.labelsize"])
    return S.finish(ax)
