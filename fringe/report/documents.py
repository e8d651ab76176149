"""Render what a report states: the headline and the documents.

The documents are report.md, report.tex, report.html and summary.json.

Use :func:`headline` for the result in the trade's terms (from a checked fit result), and
:func:`markdown_report`, :func:`latex_report`, :func:`html_report` and :func:`summary` to render
a :class:`~fringe.report.build.ReportContent` as text (or, for summary.json, a dict of plain JSON
types). Nothing is written here: :func:`fringe.report.build.write_report` writes the files (and
:mod:`fringe.report.build` re-exports these functions).
"""

from __future__ import annotations

import json
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING, NamedTuple

from fringe.report.rms_solve import RmsSolution
from fringe.report.rounding import (
    format_bound,
    format_interval,
    format_mantissas,
    pdg_place,
    pdg_round,
)
from fringe.report.tables import (
    Z95,
    bound95,
    latex_escape,
    report_tables,
    to_html,
    to_latex,
    to_markdown,
)
from fringe.theories import (
    THEORIES,
    ClassicalMedium,
    DirectionalClock,
    RobertsonMansouriSexl,
    SmePhoton,
    Theory,
)

if TYPE_CHECKING:                      # annotations only: build imports this module
    from fringe.io.fit_result import FitResult
    from fringe.report.content import ReportContent

__all__ = ["EXTRA_TABLES", "FIGURE_DIR", "headline", "html_report", "latex_report",
           "markdown_report", "summary"]

FIGURE_DIR = "figures"
#: Tables after the main ones, in report order: (key of report_tables, heading).
EXTRA_TABLES = (("sessions", "Per-session 2θ amplitudes"),
                ("nuisance", "Nuisance parameters"), ("cross_check", "One-stage cross-check"),
                ("harmonics", "C10 harmonics"), ("correlation", "Correlations"))


# --------------------------------------------------------------------------- the headline

def _esc(text: str, style: str) -> str:
    return latex_escape(text) if style == "latex" else text


def headline(fit: FitResult, style: str = "unicode") -> dict:
    """The result in the trade's terms.

    * theory ``sme``: the orientation-dependent Delta c / c bound, stated as the largest 95 %
      bound |value| + 1.96 sigma among the free primary coefficients (ke_*,
      :attr:`~fringe.theories.base.Theory.primary_names`);
    * ``rms``: delta - beta + 1/2 with 1 sigma, its 95 % interval and bound;
    * ``medium``: ``upper_limits.speed_kms_95`` when present;
    * otherwise (and ``clock``): the largest 95 % bound among the free coefficients.

    The theory named by the fit is looked up in :data:`fringe.theories.THEORIES`; each theory
    class has its statement in ``_HEADLINES`` (a theory without one gets the largest bound).

    Returns ``{"text", "quantity", "bound_95", "statement"}``, text in ``style``
    (``"unicode"`` or ``"latex"``).
    """
    unc = (fit.statistics.uncertainty if fit.statistics is not None else None)
    tail = _esc(f" Uncertainties: {unc}.", style) if unc else ""
    render = _HEADLINES.get(THEORIES.get(fit.theory), _largest_bound_headline)
    out = render(fit, _Marks.of(style))
    return {**out, "text": out["text"] + tail}


@dataclass(frozen=True)
class _Marks:
    """The typographic pieces of a headline in one style."""

    style: str
    pct: str
    sig: str
    lt: str
    absval: str

    @classmethod
    def of(cls, style: str) -> _Marks:
        if style == "latex":
            return cls(style, r"95\,\%", r"$\sigma$", "$<$", r"$|$value$|$")
        return cls(style, "95 %", "σ", "<", "|value|")


def _largest_bound_headline(fit: FitResult, m: _Marks, what: str = "Largest bound") -> dict:
    """The largest 95 % bound among all free coefficients, introduced by ``what``."""
    coefs = fit.coefficients
    name, bound = _largest_bound(coefs, list(coefs))
    text = (_esc(f"{what}: |{name}| < ", m.style) + f"{format_bound(bound, m.style)} ({m.pct}), "
            f"the largest {m.pct} bound {m.absval} + 1.96{m.sig} among the free coefficients.")
    return {"text": text, "quantity": name, "bound_95": bound,
            "statement": "largest |value| + 1.96 sigma among the free coefficients"}


def _largest_bound(coefs: dict, names: list[str]) -> tuple[str, float]:
    bounds = {n: bound95(coefs[n].value, coefs[n].sigma) for n in names}
    name = max(bounds, key=bounds.get)
    return name, bounds[name]


def _sme_headline(fit: FitResult, m: _Marks) -> dict:
    coefs = fit.coefficients
    ke = [n for n in coefs if n in SmePhoton.primary_names]
    if not ke:
        return _largest_bound_headline(fit, m, "No ke_* coefficient was free; largest bound")
    name, bound = _largest_bound(coefs, ke)
    lat = m.style == "latex"
    dcc = r"$\Delta c/c$" if lat else "Δc/c"
    kappa = r"$\tilde{\kappa}_{e-}$" if lat else "κ̃_e−"
    text = (f"Orientation-dependent {dcc} {m.lt} {format_bound(bound, m.style)} ({m.pct}), "
            f"stated as the largest {m.pct} bound {m.absval} + 1.96{m.sig} among the {len(ke)} "
            f"free {kappa} coefficients (" + _esc(", ".join(ke), m.style) + "), here "
            + _esc(name, m.style) + ".")
    return {"text": text, "quantity": name, "bound_95": bound,
            "statement": "largest |value| + 1.96 sigma among the free ke_* coefficients"}


def _rms_headline(fit: FitResult, m: _Marks) -> dict:
    coefs = fit.coefficients
    lead = RobertsonMansouriSexl.primary_names[0]          # rms_mm = delta - beta + 1/2
    if lead not in coefs:
        return _largest_bound_headline(fit, m)
    v, s = coefs[lead].value, coefs[lead].sigma
    q, qabs = ((r"$\delta-\beta+\frac{1}{2}$", r"$|\delta-\beta+\frac{1}{2}|$")
               if m.style == "latex" else ("δ − β + ½", "|δ − β + ½|"))
    exp = pdg_round(v, s)[2]
    iv = format_interval(v - Z95 * s, v + Z95 * s, pdg_place(s)[0], exp, m.style) \
        if s > 0 else "n/a"
    b = bound95(v, s)
    text = (_esc("Orientation dependence of the speed of light (Robertson–Mansouri–Sexl): ",
                 m.style) + f"{q} = {format_mantissas(*pdg_round(v, s), m.style)} (1{m.sig}), "
            f"{m.pct} interval {iv}, i.e. {qabs} {m.lt} {format_bound(b, m.style)} at {m.pct}.")
    return {"text": text, "quantity": lead, "bound_95": b,
            "statement": "|delta - beta + 1/2| + 1.96 sigma"}


def _medium_headline(fit: FitResult, m: _Marks) -> dict:
    if "speed_kms_95" not in fit.upper_limits:
        return _largest_bound_headline(fit, m)
    x = float(fit.upper_limits["speed_kms_95"])
    text = _esc(f"Speed of the laboratory through a stationary medium: < {x:.3g} km/s "
                "(95 % upper limit).", m.style)
    return {"text": text, "quantity": "speed_kms_95", "bound_95": x,
            "statement": "upper_limits.speed_kms_95 of the fit"}


def _clock_headline(fit: FitResult, m: _Marks) -> dict:
    return _largest_bound_headline(fit, m, "Orientation-dependent clock shift")


#: The headline of each theory class (a theory missing here gets the largest bound).
_HEADLINES: dict[type[Theory], Callable[[FitResult, _Marks], dict]] = {
    SmePhoton: _sme_headline, RobertsonMansouriSexl: _rms_headline,
    ClassicalMedium: _medium_headline, DirectionalClock: _clock_headline}


# ------------------------------------------------------------------------------ render

def _rms_lines(sol: RmsSolution, style: str) -> list[str]:
    names = {"unicode": ("α + ½", "β − ½", "δ"),
             "latex": (r"$\alpha+\frac{1}{2}$", r"$\beta-\frac{1}{2}$", r"$\delta$")}[style]
    return [f"{n} = {format_mantissas(*pdg_round(v, s), style)}"
            for n, v, s in zip(names, sol.deviations, sol.sigmas, strict=True)]


def _rms_text(c: ReportContent) -> list[str]:
    """Markdown paragraphs of the RMS section (theory rms only)."""
    out = ["Convention C13: Mansouri–Sexl α, β, δ (SR: α = −½, β = ½, δ = 0). Papers that quote "
           "β − δ − ½ quote −(δ − β + ½).", ""]
    sol = c.rms
    if sol is None:
        out += ["Give --kt VALUE,SIGMA and --is VALUE,SIGMA (Kennedy–Thorndike β − α − 1, "
                "Ives–Stilwell α + ½) to solve for α, β and δ individually.", ""]
        return out
    kt = format_mantissas(*pdg_round(sol.inputs[1], sol.input_sigmas[1]))
    is_ = format_mantissas(*pdg_round(sol.inputs[2], sol.input_sigmas[2]))
    rho = sol.correlation
    out += [f"From this fit's δ − β + ½ and the user's Kennedy–Thorndike β − α − 1 = {kt} and "
            f"Ives–Stilwell α + ½ = {is_} (independent inputs), deviations from SR:", ""]
    out += [f"- {line}" for line in _rms_lines(sol, "unicode")]
    out += ["", f"Correlations: ρ(α, β) = {rho[0, 1]:+.2f}, ρ(α, δ) = {rho[0, 2]:+.2f}, "
            f"ρ(β, δ) = {rho[1, 2]:+.2f} (covariance in summary.json). These deviations are the "
            "offsets α_M, β_M, δ_M of the other convention in use.", ""]
    return out


def _rms_html(c: ReportContent) -> str:
    """HTML body of the RMS section (theory rms only)."""
    import html as _html

    body = "".join(f"<p>{_html.escape(p)}</p>" for p in _rms_text(c)
                   if p and not p.startswith("- "))
    if c.rms is not None:
        body += "<ul>" + "".join(f"<li>{_html.escape(x)}</li>"
                                 for x in _rms_lines(c.rms, "unicode")) + "</ul>"
    return body


class _Section(NamedTuple):
    """A report section of one theory: heading, Markdown lines and HTML body."""

    title: str
    markdown: Callable[[ReportContent], list[str]]
    html: Callable[[ReportContent], str]


#: Sections of their own for some theory classes (after the comparison table).
_THEORY_SECTIONS: dict[type[Theory], _Section] = {
    RobertsonMansouriSexl: _Section("Robertson–Mansouri–Sexl parameters", _rms_text, _rms_html)}


def _theory_section(fit: FitResult) -> _Section | None:
    return _THEORY_SECTIONS.get(THEORIES.get(fit.theory))


def _fixed_text(fit: FitResult) -> str:
    return ", ".join(f"{k} = {v:g}" for k, v in fit.fixed.items())


def _site_name(fit: FitResult) -> str:
    return (fit.site or {}).get("name", "")


def markdown_report(c: ReportContent, figs: Sequence[tuple[str, str, bytes]]) -> str:
    """report.md: headline, warnings, tables, figures (linked), provenance."""
    fit, tables = c.fit, report_tables(c.fit, c.comparison, "unicode")
    site = _site_name(fit)
    out = [f"# fringe report: {fit.theory} fit" + (f" — {site}" if site else ""), "",
           f"**Result.** {c.headline['text']}", ""]
    if c.warnings:
        out += [f"> **⚠ Warnings raised by the fit ({len(c.warnings)})**", ">"]
        out += [f"> - {w}" for w in c.warnings] + [""]
    else:
        out += ["The fit raised no warnings.", ""]
    out += [f"*Note: {n}*\n" for n in c.notes]
    out += ["## Coefficients", "", to_markdown(tables["coefficients"])]
    if fit.fixed:
        out += [f"Fixed: {_fixed_text(fit)}.", ""]
    if "comparison" in tables:
        out += ["## Comparison with earlier results", "", to_markdown(tables["comparison"])]
    section = _theory_section(fit)
    if section is not None:
        out += [f"## {section.title}", ""] + section.markdown(c)
    for key, title in EXTRA_TABLES:
        if key in tables:
            out += [f"## {title}", "", to_markdown(tables[key])]
    if figs:
        out += ["## Figures", ""]
        for i, (name, caption, _) in enumerate(figs, start=1):
            out += [f"![Figure {i}: {name}]({FIGURE_DIR}/{name}.png)", "",
                    f"**Figure {i}.** {caption} (PDF: `{FIGURE_DIR}/{name}.pdf`)", ""]
    out += ["## Provenance", ""]
    out += [f"- **{k}**: `{json.dumps(v, ensure_ascii=False)}`" for k, v in c.provenance.items()]
    return "\n".join(out) + "\n"


def latex_report(c: ReportContent) -> str:
    """report.tex: a standalone article.

    The headline paragraph, the warnings and the coefficient table (plain tabular; compiles
    with pdflatex and no extra packages).
    """
    table = to_latex(report_tables(c.fit, c.comparison, "latex")["coefficients"])
    out = [r"\documentclass{article}", r"\begin{document}",
           r"\section*{" + latex_escape(f"Result of the {c.fit.theory} fit") + "}",
           headline(c.fit, "latex")["text"], ""]
    if c.warnings:
        out += [r"\paragraph{Warnings raised by the fit.}", r"\begin{itemize}"]
        out += [r"\item " + latex_escape(w) for w in c.warnings] + [r"\end{itemize}"]
    out.append(table)
    if c.fit.fixed:
        out.append(latex_escape(f"Fixed: {_fixed_text(c.fit)}.") + "\n")
    if c.rms is not None:
        out.append(r"\paragraph{RMS parameters.} Deviations from special relativity from this "
                   r"fit and the user's Kennedy--Thorndike and Ives--Stilwell inputs "
                   r"(independent): " + "; ".join(_rms_lines(c.rms, "latex")) + ".\n")
    out.append(r"\end{document}")
    return "\n".join(out) + "\n"


def html_report(c: ReportContent, figs: Sequence[tuple[str, str, bytes]]) -> str:
    """report.html: one self-contained page (:func:`fringe.report.page.html_page`)."""
    import html as _html

    from fringe.report.page import html_page

    tables = report_tables(c.fit, c.comparison, "unicode")
    sections = [("Coefficients", to_html(tables["coefficients"]))]
    if c.fit.fixed:
        sections.append(("Fixed coefficients", f"<p>{_html.escape(_fixed_text(c.fit))}</p>"))
    if "comparison" in tables:
        sections.append(("Comparison with earlier results", to_html(tables["comparison"])))
    section = _theory_section(c.fit)
    if section is not None:
        sections.append((section.title, section.html(c)))
    for key, title in EXTRA_TABLES:
        if key in tables:
            sections.append((title, to_html(tables[key])))
    site = _site_name(c.fit)
    return html_page(title=f"fringe report: {c.fit.theory} fit" + (f" — {site}" if site
                                                                     else ""),
                     headline=c.headline["text"], warnings=c.warnings, notes=c.notes,
                     sections=sections, figures=figs, provenance=c.provenance)


def summary(c: ReportContent, figure_names: Sequence[str], files: Sequence[str]) -> dict:
    """summary.json: the numbers and statements of the report in plain JSON types."""
    coefs = {}
    for n, e in c.fit.coefficients.items():
        v, s = e.value, e.sigma
        coefs[n] = {"value": v, "sigma": s,
                    "rounded": format_mantissas(*pdg_round(v, s), "plain"),
                    "interval_68": [v - s, v + s], "interval_95": [v - Z95 * s, v + Z95 * s],
                    "bound_95": bound95(v, s)}
    return {"fringe_format": "report", "fringe_format_version": 1,
            "headline": c.headline, "warnings": list(c.warnings), "notes": list(c.notes),
            "coefficients": coefs, "comparison": list(c.comparison),
            "rms": c.rms.to_dict() if c.rms is not None else None,
            "figures": list(figure_names), "files": list(files), "provenance": c.provenance}
