r"""The LaTeX outputs of a report: pieces of the fragment report.tex and the macros numbers.tex.

report.tex is a fragment a paper ``\input``\ s (no ``\documentclass``, no ``\begin{document}``);
:func:`fragment_header` is its opening comment (the packages it needs, how to include it),
:func:`figure_environment` one figure with its caption and label. numbers.tex defines one
``\newcommand`` per headline number (:func:`numbers_tex`), each macro named by
:func:`macro_name` from the quantity's name: ``\fringe`` + the name's parts, each with a capital
first letter, digits spelled out as words (LaTeX macro names are letters only), then what the
number is (``Value``, ``Sigma``, ``Bound``, ...). ``ke_XY`` -> ``\fringeKeXYValue``,
``ke_XXmYY`` -> ``\fringeKeXXmYYSigma``, ``rms_mm`` -> ``\fringeRmsMmBound``, ``sun_vX_kms`` ->
``\fringeSunVXKmsValue``; docs/report.md lists them all. Numbers are PDG-rounded
(:mod:`fringe.report.rounding`) and wrapped in ``\ensuremath``, so a macro works in text and in
mathematics alike.
"""

from __future__ import annotations

import re
from collections.abc import Iterable, Mapping, Sequence
from typing import TYPE_CHECKING

from fringe.report.markup import latex_escape, latex_text
from fringe.report.page import png_css_width
from fringe.report.rounding import format_bound, format_interval, pdg_place, pdg_round
from fringe.report.tables import TABLE_MACRO, Z95, bound95, coefficient_label

if TYPE_CHECKING:
    from fringe.report.content import ReportContent

__all__ = ["FIGURE_PATH_MACRO", "MACRO_PREFIX", "NUMBERS_FILE", "PACKAGES", "WIDE_FIGURE_PX",
           "figure_environment", "figure_environments", "fixed_text", "fragment_header",
           "macro_name", "numbers", "numbers_tex"]

#: The file of the macros, beside report.tex.
NUMBERS_FILE = "numbers.tex"
#: Every macro of numbers.tex starts with this (letters only).
MACRO_PREFIX = "fringe"
#: The macro holding the folder of the figures, relative to the paper (``\providecommand``:
#: a paper defines it first to point elsewhere).
FIGURE_PATH_MACRO = r"\fringefigurepath"
#: Packages the fragment needs in the paper's preamble (tables: booktabs; figures: graphicx).
PACKAGES = ("booktabs", "graphicx")
#: A figure at least this wide on the page (CSS px at 96 per inch: 5 in) spans the text width
#: (``figure*`` in a two-column paper); narrower ones fill one column.
WIDE_FIGURE_PX = 480

_DIGITS = ("Zero", "One", "Two", "Three", "Four", "Five", "Six", "Seven", "Eight", "Nine")


def _word(part: str) -> str:
    """One part of a name as letters: digits spelled out, other characters dropped."""
    out = []
    for ch in part:
        if ch.isdigit() and ch.isascii():
            out.append(_DIGITS[int(ch)])
        elif ch.isascii() and ch.isalpha():
            out.append(ch)
    text = "".join(out)
    return text[:1].upper() + text[1:]


def macro_name(*parts: str) -> str:
    r"""The macro of a number: ``\fringe`` + each part's words, capital first letters.

    Each part is split at underscores, hyphens and spaces; digits become words (``C0`` ->
    ``CZero``), any other character that is not an ASCII letter is dropped.

    >>> macro_name("ke_XY", "Value")
    '\\fringeKeXYValue'
    >>> macro_name("rms_mm", "Bound")
    '\\fringeRmsMmBound'
    """
    words = [_word(w) for p in parts for w in re.split(r"[_\-\s]+", str(p))]
    return "\\" + MACRO_PREFIX + "".join(words)


def _math(text: str) -> str:
    r"""A LaTeX-style number ``$...$`` as ``\ensuremath{...}``."""
    return r"\ensuremath{" + text.strip().strip("$") + "}"


def _times(mantissa: str, exp: int) -> str:
    return mantissa if exp == 0 else rf"{mantissa}\times10^{{{exp}}}"


def _coefficient_numbers(name: str, value: float, sigma: float) -> list[tuple[str, str, str]]:
    v_str, s_str, exp = pdg_round(value, sigma)
    scaled = rf"({v_str} \pm {s_str})\times10^{{{exp}}}" if exp else rf"{v_str} \pm {s_str}"
    label = coefficient_label(name, "latex")
    rows = [("Result", _math(scaled), f"{label}: value $\\pm$ 1$\\sigma$ (PDG rounding)"),
            ("Value", _math(_times(v_str, exp)), f"{label}: value"),
            ("Sigma", _math(_times(s_str, exp)), f"{label}: 1$\\sigma$")]
    if sigma > 0:
        iv = format_interval(value - Z95 * sigma, value + Z95 * sigma, pdg_place(sigma)[0], exp,
                             "latex")
        rows += [("IntervalNinetyFive", _math(iv), f"{label}: 95 % interval, value $\\pm$ "
                                                   "1.96$\\sigma$"),
                 ("Bound", _math(format_bound(bound95(value, sigma), "latex")),
                  f"{label}: 95 % bound |value| + 1.96$\\sigma$, rounded up")]
    return [(macro_name(name, what), body, meaning) for what, body, meaning in rows]


def numbers(c: ReportContent) -> list[tuple[str, str, str]]:
    r"""The headline numbers of a report as ``(macro, LaTeX body, meaning)``, in file order.

    Each free coefficient: ``Result`` (value ± 1σ), ``Value``, ``Sigma`` and, when σ > 0,
    ``IntervalNinetyFive`` and ``Bound``; then the headline's bound (``\fringeHeadlineBound``)
    and the coefficient setting it (``\fringeHeadlineCoefficient``), the accepted turns
    (``\fringeTurns``), the campaign's start (``\fringeEpoch``, UTC) and span
    (``\fringeSpanDays``), the reduced χ² (``\fringeReducedChiSquare``), the theory
    (``\fringeTheory``) and the site (``\fringeSite``), each when the fit states it. A macro
    name that two quantities would share (names differing only in dropped characters) is
    given once, to the first.
    """
    fit, out = c.fit, []
    for name, e in fit.coefficients.items():
        if e.finite:
            out += _coefficient_numbers(name, float(e.value), float(e.sigma))
    h = c.headline or {}
    if h.get("bound_95") is not None:
        quantity = str(h.get("quantity", ""))
        bound = float(h["bound_95"])
        body = (_math(format_bound(bound, "latex")) if quantity in fit.coefficients
                else latex_escape(f"{bound:.3g}"))
        out.append((macro_name("headline", "bound"), body,
                    "the headline's 95 % bound (" + latex_escape(str(h.get("statement", "")))
                    + ")"))
        if quantity in fit.coefficients:
            out.append((macro_name("headline", "coefficient"),
                        _math(coefficient_label(quantity, "latex")),
                        "the coefficient that sets the headline's bound"))
    accepted = fit.stage1.counts.get("n_accepted") if fit.stage1 is not None else None
    if isinstance(accepted, int):
        out.append((macro_name("turns"), str(accepted), "accepted turns"))
    if fit.epoch_utc:
        out.append((macro_name("epoch"), latex_escape(str(fit.epoch_utc)[:10]),
                    "start of the campaign (UTC date)"))
    span = fit.span_s
    if isinstance(span, (int, float)) and span == span and span > 0:
        out.append((macro_name("span", "days"), f"{span / 86400.0:.3g}",
                    "span of the campaign, days"))
    chi = fit.statistics.chi2_reduced if fit.statistics is not None else None
    if isinstance(chi, (int, float)) and chi == chi:
        out.append((macro_name("reduced", "chi", "square"), f"{chi:.3g}",
                    "reduced chi-square of the fit"))
    out.append((macro_name("theory"), latex_escape(fit.theory), "theory of the fit"))
    site = dict(fit.site or {}).get("name")
    if site:
        out.append((macro_name("site"), latex_escape(str(site)), "site"))
    seen, unique = set(), []
    for macro, body, meaning in out:
        if macro not in seen and macro != "\\" + MACRO_PREFIX:
            seen.add(macro)
            unique.append((macro, body, meaning))
    return unique


def numbers_tex(c: ReportContent) -> str:
    r"""numbers.tex: one ``\newcommand`` per number of :func:`numbers`, its meaning beside it."""
    lines = [r"% Headline numbers of a fringe report as LaTeX macros (letters-only names: "
             r"\fringe + the quantity's name + what the number is; docs/report.md).",
             r"% \input this file in the preamble (or before the first use). Values are "
             r"PDG-rounded, 1 sigma unless named otherwise.",
             "% " + latex_escape(f"Fit: {c.fit_path.name}; theory {c.fit.theory}.")]
    for macro, body, meaning in numbers(c):
        lines.append(rf"\newcommand{{{macro}}}{{{body}}} % {meaning}")
    return "\n".join(lines) + "\n"


def fragment_header(c: ReportContent, headline_text: str, warnings: Iterable[str]
                    ) -> list[str]:
    r"""The opening comment of report.tex: what it is, its packages, how to include it.

    ``headline_text`` is the headline in LaTeX; it and every warning are repeated as comments.
    """
    pk = ", ".join(PACKAGES)
    out = [r"% fringe report: a LaTeX fragment for \input in a paper (it has no preamble "
           r"and no document environment).",
           rf"% Needs in the paper's preamble: \usepackage{{{pk}}}; the numbers as macros: "
           rf"\input{{{NUMBERS_FILE}}} (docs/report.md).",
           rf"% Figures are read from {FIGURE_PATH_MACRO} (default: figures, relative to where "
           r"the paper is compiled); define it before the \input to point elsewhere, e.g.",
           rf"%   \newcommand{{{FIGURE_PATH_MACRO}}}{{report/figures}}",
           "% " + latex_escape(f"Fit: {c.fit_path.name}; theory {c.fit.theory}."),
           "% Result: " + headline_text.replace("\n", " ")]
    out += ["% Warning raised by the fit: " + latex_escape(w).replace("\n", " ")
            for w in warnings]
    out.append(rf"\providecommand{{{FIGURE_PATH_MACRO}}}{{figures}}")
    out += TABLE_PLACEMENT
    return out


#: The definition of ``\fringetable{CAPTION AND LABEL}{TABULAR}`` (the fragment's opening): the
#: tabular is measured first; a ``table`` float if it fits a column, else ``table*`` (both
#: columns of a two-column paper; the same as ``table`` in a one-column one), and scaled down
#: to the text width only if it is wider still. Plain LaTeX 2e and graphicx's \resizebox.
TABLE_PLACEMENT = (
    r"% \fringetable{caption and label}{tabular}: one column wide, or across the page (table*)",
    r"% when wider than a column; scaled to the text width only if wider than that",
    r"\ifdefined\fringetablebox\else\newsavebox{\fringetablebox}\fi",
    r"\providecommand{\fringetablebody}{\ifdim\wd\fringetablebox>\textwidth",
    r"  \resizebox{\textwidth}{!}{\usebox{\fringetablebox}}\else\usebox{\fringetablebox}\fi}",
    rf"\providecommand{{{TABLE_MACRO}}}[2]{{\sbox{{\fringetablebox}}{{#2}}%",
    r"  \ifdim\wd\fringetablebox>\columnwidth",
    r"    \begin{table*}[htbp]\centering#1\fringetablebody\end{table*}%",
    r"  \else",
    r"    \begin{table}[htbp]\centering#1\fringetablebody\end{table}%",
    r"  \fi}",
)


def figure_environment(name: str, caption: str, png: bytes | None, number: int) -> str:
    r"""One figure of the report: ``\includegraphics`` of figures/NAME.pdf, caption, label.

    A figure at least :data:`WIDE_FIGURE_PX` wide (its PNG at 96 px per inch) goes in
    ``figure*`` at ``\textwidth``, a narrower one in ``figure`` at ``\columnwidth``.
    """
    wide = png is not None and png_css_width(png) >= WIDE_FIGURE_PX
    env, width = ("figure*", r"\textwidth") if wide else ("figure", r"\columnwidth")
    safe = re.sub(r"[^A-Za-z0-9_-]", "", name) or f"figure{number}"
    return "\n".join([rf"\begin{{{env}}}[htbp]", r"\centering",
                      rf"\includegraphics[width={width}]{{{FIGURE_PATH_MACRO}/{safe}.pdf}}",
                      rf"\caption{{{latex_text(caption)}}}",
                      rf"\label{{fig:{safe}}}", rf"\end{{{env}}}"]) + "\n"


def figure_environments(figs: Sequence[tuple[str, str, bytes]]) -> list[str]:
    """The figure environments of ``figs`` ``(name, caption, png)``, in order."""
    return [figure_environment(n, cap, png, i)
            for i, (n, cap, png) in enumerate(figs, start=1)]


def fixed_text(fixed: Mapping[str, float]) -> str:
    """``Fixed: ke_XY = 0, ...`` in LaTeX (coefficient symbols), or empty."""
    if not fixed:
        return ""
    return "Fixed: " + ", ".join(f"{coefficient_label(k, 'latex')} $= {v:g}$"
                                 for k, v in fixed.items()) + "."
