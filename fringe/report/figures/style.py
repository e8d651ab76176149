"""One look for every figure: sizes, fonts, line widths, colours, mathematical labels, saving.

Which function for what:

* :func:`new_figure` -- a :class:`matplotlib.figure.Figure` (no pyplot) with constrained layout,
  one column (:data:`ONE_COLUMN_IN`) or two columns (:data:`TWO_COLUMN_IN`) wide;
* :func:`styled` -- decorator that draws a plot function inside :func:`style_context`;
* :func:`finish` -- last step of every plot: tick sizes fixed on the axes, no offset text;
* :func:`coefficient_label`, :func:`harmonic_label`, :func:`unit_suffix`,
  :func:`scaled_label` -- labels as mathtext (matplotlib's own TeX subset; no TeX needed);
* :func:`power_of_ten` -- the power of ten a linear axis is scaled by, so that the axis label
  carries it ("C [10⁻⁷ Hz]") instead of an offset factor at the top of the axis;
* :func:`format_correlation` -- a correlation coefficient with two decimals, never ``-0.00``;
* :func:`save_figure` -- write one figure as ``stem.png`` and ``stem.pdf`` (each atomically).

The colours are the eight-colour palette of Okabe & Ito, distinguishable under the common
colour-vision deficiencies (docs/references.md [R-fig-palette]); signed quantities (correlations,
signal maps) use the diverging ColorBrewer red-blue map ``RdBu_r``, symmetric about zero.
"""

from __future__ import annotations

import functools
import math
import re
from collections.abc import Iterable, Sequence
from contextlib import contextmanager
from pathlib import Path

import numpy as np

__all__ = ["COLORS", "DIVERGING_CMAP", "LINESTYLES", "MARKERS", "ONE_COLUMN_IN", "PNG_DPI",
           "TWO_COLUMN_IN", "coefficient_label", "finish", "format_correlation",
           "harmonic_label", "legend_outside", "new_figure", "power_of_ten", "rc_params",
           "save_figure", "save_figure_file", "scaled_label", "series_style", "style_context",
           "styled", "unit_suffix"]

#: Width of one journal column, inches (8.6 cm, the APS single-column width; from memory).
ONE_COLUMN_IN = 3.4
#: Width of a full page (two columns), inches (17.8 cm, APS; from memory).
TWO_COLUMN_IN = 7.0
#: Resolution of the PNG files, dots per inch (one column = 680 pixels).
PNG_DPI = 200

#: Okabe & Ito palette (docs/references.md [R-fig-palette]), black left out (kept for
#: reference lines): blue, vermillion, bluish green, orange, reddish purple, sky blue, yellow.
COLORS = ("#0072B2", "#D55E00", "#009E73", "#E69F00", "#CC79A7", "#56B4E9", "#F0E442")
#: Colour of reference lines and of other people's results.
GREY = "0.45"
#: Colour map of signed quantities, symmetric about zero (ColorBrewer RdBu, reversed).
DIVERGING_CMAP = "RdBu_r"
#: Markers and dash patterns cycled with the colours, so that curves which coincide stay
#: distinguishable (and the figure reads in grey-scale print).
MARKERS = ("o", "s", "^", "D", "v", "P", "X", "<", ">")
LINESTYLES = ("-", (0, (5, 1.5)), (0, (1.5, 1.2)), (0, (6, 1.5, 1.5, 1.5)), (0, (3, 1)))

_BASE_PT = 8.0


def rc_params() -> dict:
    """The matplotlib settings of every fringe figure (fonts in points, widths in points)."""
    from cycler import cycler

    return {
        "font.family": "DejaVu Sans", "mathtext.fontset": "dejavusans",
        "font.size": _BASE_PT, "axes.labelsize": _BASE_PT, "axes.titlesize": _BASE_PT + 0.5,
        "xtick.labelsize": _BASE_PT - 1, "ytick.labelsize": _BASE_PT - 1,
        "legend.fontsize": _BASE_PT - 1, "legend.title_fontsize": _BASE_PT - 1,
        "figure.titlesize": _BASE_PT + 1,
        "axes.linewidth": 0.6, "lines.linewidth": 1.1, "lines.markersize": 3.5,
        "errorbar.capsize": 1.5, "patch.linewidth": 0.5,
        "xtick.major.width": 0.6, "ytick.major.width": 0.6, "xtick.minor.width": 0.4,
        "ytick.minor.width": 0.4, "xtick.major.size": 3.0, "ytick.major.size": 3.0,
        "xtick.minor.size": 1.6, "ytick.minor.size": 1.6,
        "xtick.direction": "in", "ytick.direction": "in", "xtick.top": False,
        "grid.linewidth": 0.4, "grid.alpha": 0.35,
        "axes.prop_cycle": cycler(color=list(COLORS)),
        "axes.formatter.useoffset": False, "axes.formatter.use_mathtext": True,
        "legend.frameon": False, "legend.handlelength": 2.2, "legend.borderaxespad": 0.3,
        "image.cmap": DIVERGING_CMAP, "figure.dpi": 100, "savefig.dpi": PNG_DPI,
        "pdf.fonttype": 42,
    }


@contextmanager
def style_context():
    """Context in which matplotlib uses :func:`rc_params` (restored on exit)."""
    import matplotlib

    with matplotlib.rc_context(rc_params()):
        yield


def styled(func):
    """Decorator: run a plot function inside :func:`style_context`."""
    @functools.wraps(func)
    def wrapper(*args, **kwargs):
        with style_context():
            return func(*args, **kwargs)
    return wrapper


def new_figure(width: str | float = "one", height_in: float | None = None, *, nrows: int = 1,
               ncols: int = 1, aspect: float = 0.72, **subplot_kw):
    """A new Figure (no pyplot, constrained layout) and its axes.

    Parameters
    ----------
    width : {"one", "two"} or float
        One column (:data:`ONE_COLUMN_IN`), two columns (:data:`TWO_COLUMN_IN`), or inches.
    height_in : float, optional
        Height, inches; default ``aspect`` times the width of one panel.
    nrows, ncols : int
        Grid of axes (``Figure.subplots``); the axes come back as one Axes or an array.
    aspect : float
        Height over width of one panel when ``height_in`` is not given.
    **subplot_kw
        Passed to ``Figure.subplots`` (``gridspec_kw``, ``sharex``, ...).

    Returns
    -------
    Axes or ndarray of Axes
        Their ``.figure`` is the new Figure.
    """
    from matplotlib.figure import Figure

    w = {"one": ONE_COLUMN_IN, "two": TWO_COLUMN_IN}.get(width, width) \
        if isinstance(width, str) else float(width)
    if not isinstance(w, float):
        raise ValueError(f"figure width: expected 'one', 'two' or inches, got {width!r}")
    h = height_in if height_in is not None else aspect * w / ncols * nrows
    with style_context():
        fig = Figure(figsize=(w, h), layout="constrained")
        fig.get_layout_engine().set(w_pad=0.02, h_pad=0.02, wspace=0.04, hspace=0.04)
        return fig.subplots(nrows, ncols, **subplot_kw)


def finish(ax, *, x_offset: bool = False, y_offset: bool = False):
    """Fix tick sizes on ``ax`` (ticks are made lazily) and switch off offset factors.

    A linear axis whose values are scaled by :func:`power_of_ten` shows plain numbers; the
    power of ten is in its label. Returns ``ax``.
    """
    from matplotlib.ticker import ScalarFormatter

    p = rc_params()
    for which in ("major", "minor"):
        ax.tick_params(which=which, direction="in", labelsize=p["xtick.labelsize"],
                       width=p[f"xtick.{which}.width"], length=p[f"xtick.{which}.size"])
    for axis, keep in ((ax.xaxis, x_offset), (ax.yaxis, y_offset)):
        fmt = axis.get_major_formatter()
        if isinstance(fmt, ScalarFormatter) and not keep:
            fmt.set_useOffset(False)
            fmt.set_scientific(False)
    return ax


def power_of_ten(values: Iterable[float], *, keep: tuple[int, int] = (-2, 3)) -> int:
    """Exponent k such that values / 10**k are of order 1 (0 when they already are).

    k = floor(log10(max |finite value|)); values whose largest magnitude lies in
    [10**keep[0], 10**(keep[1]+1)) are left as they are (k = 0), as is an all-zero input.
    """
    v = np.abs(np.asarray(list(values) if not isinstance(values, np.ndarray) else values,
                          dtype=float))
    v = v[np.isfinite(v) & (v > 0)]
    if v.size == 0:
        return 0
    k = math.floor(math.log10(float(v.max())))
    return 0 if keep[0] <= k <= keep[1] else k


def unit_suffix(unit: str, exponent: int = 0) -> str:
    """Bracketed unit with the power of ten of a scaled axis: ``" [$10^{-7}$ Hz]"``.

    A dimensionless quantity (unit ``"1"`` or empty) gets ``" [$10^{k}$]"`` when scaled and
    nothing otherwise.
    """
    u = "" if unit in ("1", "") else unit.replace("$", r"\$")
    power = f"$10^{{{exponent}}}$" if exponent else ""
    inner = " ".join(p for p in (power, u) if p)
    return f" [{inner}]" if inner else ""


def scaled_label(quantity: str, unit: str, exponent: int = 0) -> str:
    """Axis label ``quantity [10^k unit]`` (mathtext); see :func:`unit_suffix`."""
    return quantity + unit_suffix(unit, exponent)


_COMPONENT = r"(XY|XZ|YZ|XXmYY|ZZ)"
_SME_BASE = {"ke": r"\tilde{\kappa}_{e-}", "ko": r"\tilde{\kappa}_{o+}", "cq": "c"}
_FIXED = {"ktr": r"$\tilde{\kappa}_{\mathrm{tr}}$", "rms_mm": r"$\delta-\beta+1/2$",
          "rms_kt": r"$\beta-\alpha-1$"}


def coefficient_label(name: str) -> str:
    r"""Mathtext label of a coefficient name of any theory (fringe/theories).

    ``ke_XY`` -> ``$\tilde{\kappa}_{e-}^{XY}$``, ``ko_XZ`` -> ``$\tilde{\kappa}_{o+}^{XZ}$``,
    ``ke_XXmYY`` -> ``$\tilde{\kappa}_{e-}^{XX-YY}$``,
    ``ktr`` -> ``$\tilde{\kappa}_{\mathrm{tr}}$``,
    ``rms_mm`` -> ``$\delta-\beta+1/2$``, ``rms_kt`` -> ``$\beta-\alpha-1$``,
    ``sun_vX_kms`` -> ``$v_{\odot}^{X}$`` (the Sun's velocity through the medium),
    ``cq_XY`` -> ``$c^{XY}$`` (clock tensor). Other names come back with their underscores
    shown literally (no mathtext), so they never render as subscripts by accident.
    """
    m = re.fullmatch(rf"(ke|ko|cq)_{_COMPONENT}", name)
    if m:
        return f"${_SME_BASE[m.group(1)]}^{{{m.group(2).replace('XXmYY', 'XX-YY')}}}$"
    if name in _FIXED:
        return _FIXED[name]
    m = re.fullmatch(r"sun_v([XYZ])_kms", name)
    if m:
        return rf"$v_{{\odot}}^{{{m.group(1)}}}$"
    return name.replace("$", r"\$")


def harmonic_label(name: str) -> str:
    """Mathtext label of a harmonic name (C10): ``Cs1`` -> ``$C_{s1}$``, ``B0`` -> ``$B_{0}$``."""
    m = re.fullmatch(r"([CB])([sc]?\d)", name)
    return f"${m.group(1)}_{{{m.group(2)}}}$" if m else name


def format_correlation(rho: float) -> str:
    """Correlation coefficient with two decimals and a true minus; ``0.00`` never signed."""
    if not math.isfinite(rho):
        return "n/a"
    text = f"{rho:.2f}"
    if text in ("-0.00", "0.00"):
        return "0.00"
    return text.replace("-", "\u2212")


def series_style(i: int) -> dict:
    """Colour, marker and dash pattern of the i-th curve of a figure (cycled)."""
    return {"color": COLORS[i % len(COLORS)], "marker": MARKERS[i % len(MARKERS)],
            "linestyle": LINESTYLES[i % len(LINESTYLES)]}


def legend_outside(ax, *, where: str = "right", ncols: int = 1, handles=None, labels=None,
                   title: str | None = None):
    """Legend outside the data area (right of or below the axes; constrained layout makes room).

    Returns the legend, or None when there is nothing to label.
    """
    if handles is None:
        handles, labels = ax.get_legend_handles_labels()
    elif labels is None:
        labels = [h.get_label() for h in handles]
    if not handles:
        return None
    if where == "right":
        kw = {"loc": "upper left", "bbox_to_anchor": (1.01, 1.0)}
    elif where == "below":
        kw = {"loc": "upper center", "bbox_to_anchor": (0.5, -0.16)}
    elif where == "above":
        kw = {"loc": "lower center", "bbox_to_anchor": (0.5, 1.01)}
    else:
        raise ValueError(f"legend: where: expected 'right', 'below' or 'above', got {where!r}")
    return ax.legend(handles, labels, ncols=ncols, title=title, borderaxespad=0.0, **kw)


def save_figure(fig, stem, formats: Sequence[str] = ("png", "pdf"), *,
                overwrite: bool = False) -> list[Path]:
    """Write ``fig`` as ``stem.png``, ``stem.pdf`` (each whole or not at all); return the paths.

    PNG at :data:`PNG_DPI`; PDF with embedded TrueType fonts and no creation date (the same
    figure gives the same bytes). The bounding box is tightened (no clipped labels).

    Parameters
    ----------
    fig : matplotlib.figure.Figure
    stem : path
        Target path without suffix (``figures/limits`` -> ``figures/limits.png`` ...).
    formats : sequence of str
        File formats, each a matplotlib format name and the file suffix.
    overwrite : bool
        Replace existing files (else an existing target is refused before anything is written).
    """
    from fringe.io.atomic import check_output_path

    stem = Path(stem)
    paths = [stem.with_name(f"{stem.name}.{fmt}") for fmt in formats]
    for p in paths:                        # refuse before writing any of them
        check_output_path(p, overwrite=overwrite)
    for p in paths:
        save_figure_file(fig, p, overwrite=overwrite)
    return paths


def save_figure_file(fig, path, *, overwrite: bool = False) -> Path:
    """Write ``fig`` to one file, format from the suffix, as :func:`save_figure` does."""
    from fringe.io.atomic import write_atomic

    fmt = Path(path).suffix.lstrip(".") or "png"
    return write_atomic(path, functools.partial(_savefig, fig, fmt), overwrite=overwrite)


def _savefig(fig, fmt: str, tmp: str) -> None:
    meta = {"pdf": {"CreationDate": None}, "png": {"Software": None}}.get(fmt)
    with style_context():
        fig.savefig(tmp, format=fmt, dpi=PNG_DPI, bbox_inches="tight", pad_inches=0.03,
                    metadata=meta)
