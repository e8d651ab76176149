"""Checks every rendered figure must pass (used by tests/report/test_figures_*.py).

A figure is drawn to PNG in memory (nothing is written to disk) and inspected through its
matplotlib objects: pixel variance (not blank), axis labels, legend and title texts, no raw
markup outside mathtext, no offset factor on any axis, no text outside the canvas, no legend
over the data area.
"""

from __future__ import annotations

import io
import re

import numpy as np

#: Below this variance of the grey levels (0..1) a PNG counts as blank. A white canvas gives 0;
#: a figure with a few axes lines and labels is above 1e-3.
BLANK_VARIANCE = 1e-3


def png_variance(fig) -> float:
    """Variance of the grey levels of ``fig`` rendered to PNG (in memory)."""
    import matplotlib.image as mpimg

    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=60)
    buf.seek(0)
    img = mpimg.imread(buf, format="png")
    return float(np.var(img[..., :3].mean(axis=-1)))


def _renderer(fig):
    """Draw ``fig`` on an Agg canvas (a Figure made without pyplot has none) and return its
    renderer."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    if not isinstance(fig.canvas, FigureCanvasAgg):
        FigureCanvasAgg(fig)
    fig.canvas.draw()
    return fig.canvas.get_renderer()


def _axes_texts(ax) -> list[str]:
    out = [ax.get_xlabel(), ax.get_ylabel(), ax.get_title()]
    out += [t.get_text() for t in ax.get_xticklabels() + ax.get_yticklabels()]
    out += [t.get_text() for t in ax.texts]
    leg = ax.get_legend()
    if leg is not None:
        out += [t.get_text() for t in leg.get_texts()]
    return out


def figure_texts(fig) -> list[str]:
    """Every text string of ``fig`` (labels, tick labels, titles, legends, annotations)."""
    out = [t.get_text() for t in fig.texts]
    if fig._suptitle is not None:
        out.append(fig._suptitle.get_text())
    for leg in fig.legends:
        out += [t.get_text() for t in leg.get_texts()]
    for ax in fig.axes:
        out += _axes_texts(ax)
        for child in ax.get_children():          # secondary axes (labels above the axes)
            if hasattr(child, "get_xticklabels") and child is not ax and hasattr(child, "xaxis"):
                out += [t.get_text() for t in child.get_xticklabels()]
    return [t for t in out if t]


def outside_math(text: str) -> str:
    """``text`` with its $...$ parts removed (an escaped \\$ is kept out of the pairing)."""
    return re.sub(r"(?<!\\)\$.*?(?<!\\)\$", "", text)


def raw_markup(texts) -> list[str]:
    """Texts with TeX-like markup outside mathtext: ``_``, ``^``, ``\\`` or an odd ``$``."""
    bad = []
    for t in texts:
        rest = outside_math(t).replace(r"\$", "")
        if any(c in rest for c in "_^\\$"):
            bad.append(t)
    return bad


def offset_texts(fig) -> list[str]:
    """Offset / scientific factors shown at the end of any axis (should be none)."""
    _renderer(fig)
    out = []
    for ax in fig.axes:
        for axis in (ax.xaxis, ax.yaxis):
            text = axis.get_offset_text().get_text()
            if text:
                out.append(text)
    return out


def _overlap(a, b, tol: float = 1.0) -> bool:
    return (min(a.x1, b.x1) - max(a.x0, b.x0) > tol) and (min(a.y1, b.y1) - max(a.y0, b.y0) > tol)


def legends_over_data(fig) -> list[str]:
    """Legends whose box overlaps a data area (the axes patch) of ``fig``."""
    r = _renderer(fig)
    legends = list(fig.legends) + [ax.get_legend() for ax in fig.axes if ax.get_legend()]
    data = [ax.get_window_extent(r) for ax in fig.axes if ax.get_label() != "<colorbar>"]
    return [" / ".join(t.get_text() for t in leg.get_texts()) for leg in legends
            if any(_overlap(leg.get_window_extent(r), box) for box in data)]


def drawn_ticklabels(axis) -> list:
    """Tick labels an axis draws: those of the ticks in view (``get_ticklabels`` also returns
    the labels of ticks the locator gave beyond the view limits, which are not drawn)."""
    lo, hi = sorted(axis.get_view_interval())
    out = []
    for tick in axis.get_major_ticks() + axis.get_minor_ticks():
        loc = tick.get_loc()
        if loc is None or not (lo - 1e-9 * abs(hi - lo) <= loc <= hi + 1e-9 * abs(hi - lo)):
            continue
        out += [lab for lab in (tick.label1, tick.label2) if lab.get_visible()]
    return out


def _text_artists(fig) -> list:
    """The Text objects drawn on ``fig``: figure texts, legends, and per axes (secondary axes
    included) the title, labels, annotations and the tick labels in view."""
    arts = list(fig.texts) + ([fig._suptitle] if fig._suptitle is not None else [])
    for leg in fig.legends:
        arts += leg.get_texts()
    axes = list(fig.axes)
    for ax in fig.axes:
        axes += [c for c in ax.get_children() if hasattr(c, "xaxis") and c is not ax]
    for ax in axes:
        arts += [ax.title, ax.xaxis.label, ax.yaxis.label, *ax.texts]
        for axis in (ax.xaxis, ax.yaxis):
            if axis.get_visible():
                arts += drawn_ticklabels(axis)
        if ax.get_legend() is not None:
            arts += ax.get_legend().get_texts()
    return [a for a in arts if a.get_visible() and a.get_text()]


def clipped_texts(fig) -> list[str]:
    """Texts that reach outside the canvas (constrained layout should leave none)."""
    r = _renderer(fig)
    box = fig.bbox
    bad = []
    for artist in _text_artists(fig):
        e = artist.get_window_extent(r)
        if e.x0 < box.x0 - 1 or e.x1 > box.x1 + 1 or e.y0 < box.y0 - 1 or e.y1 > box.y1 + 1:
            bad.append(artist.get_text())
    return bad


def overlapping_ticklabels(fig) -> list[str]:
    """Pairs of visible tick labels of one axis whose boxes overlap (the labels run together)."""
    r = _renderer(fig)
    bad = []
    for ax in fig.axes:
        for axis in (ax.xaxis, ax.yaxis):
            labels = [t for t in drawn_ticklabels(axis) if t.get_text()]
            boxes = [t.get_window_extent(r) for t in labels]
            for i in range(len(boxes)):
                for j in range(i + 1, len(boxes)):
                    if _overlap(boxes[i], boxes[j], tol=0.5):
                        bad.append(f"{labels[i].get_text()} / {labels[j].get_text()}")
    return bad


def is_number_label(text: str) -> bool:
    """Whether a tick label is a number (``0``, ``$\\mathdefault{2.5}$``, ``$-10^{-16}$``,
    ``$2\\times10^{-18}$``)."""
    t = re.sub(r"\\mathdefault|[${} ]", "", text).replace("\u2212", "-")
    return re.fullmatch(r"[-+]?(\d+(\.\d*)?)?(\\times)?(10\^[-+]?\d+)?", t) is not None


def named_ticks(axis) -> bool:
    """Whether the tick labels of ``axis`` are names (rows or columns of categories), which
    label the axis without an axis label."""
    texts = [t.get_text() for t in drawn_ticklabels(axis) if t.get_text()]
    return bool(texts) and not any(is_number_label(t) for t in texts)


def check_figure(fig, *, needs_legend: bool = True) -> list[str]:
    """Every problem of ``fig`` as a list of messages (empty: the figure passes)."""
    problems = []
    if png_variance(fig) < BLANK_VARIANCE:
        problems.append("blank figure")
    data_axes = [ax for ax in fig.axes if ax.get_label() != "<colorbar>" and ax.axison]
    for i, ax in enumerate(data_axes):
        if not (ax.get_xlabel() or named_ticks(ax.xaxis)) or \
                not (ax.get_ylabel() or named_ticks(ax.yaxis)):
            problems.append(f"axes {i}: missing axis label")
    texts = figure_texts(fig)
    has_legend = bool(fig.legends) or any(ax.get_legend() for ax in fig.axes)
    if needs_legend and not has_legend:
        problems.append("no legend")
    if bad := raw_markup(texts):
        problems.append(f"raw markup outside mathtext: {bad}")
    if bad := offset_texts(fig):
        problems.append(f"offset text on an axis: {bad}")
    if bad := legends_over_data(fig):
        problems.append(f"legend over the data: {bad}")
    if bad := clipped_texts(fig):
        problems.append(f"text outside the canvas: {bad}")
    if bad := overlapping_ticklabels(fig):
        problems.append(f"tick labels run together: {bad}")
    return problems
