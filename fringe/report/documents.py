"""Render what a report states: the headline and the documents report.md, report.tex, report.html
and summary.json.

Use :func:`headline` for the result in the trade's terms (from a checked fit result), and
:func:`markdown_report`, :func:`latex_report`, :func:`html_report` and :func:`summary` to render
a :class:`~fringe.report.build.ReportContent` as text (or, for summary.json, a dict of plain JSON
types). Nothing is written here: :func:`fringe.report.build.write_report` writes the files (and
:mod:`fringe.report.build` re-exports these functions).
"""

from __future__ import annotations

import json
from collections.abc import Sequence
from typing import TYPE_CHECKING

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

if TYPE_CHECKING:                      # annotations only: build imports this module
    from fringe.io.fit_result import FitResult
    from fringe.report.content import ReportContent

__all__ = ["EXTRA_TABLES", "FIGURE_DIR", "headline", "html_report", "latex_report",
           "markdown_report", "summary"]

FIGURE_DIR = "figures"
#: Tables after the main ones, in report order: (key of report_tables, heading).
EXTRA_TABLES = (("nuisance", "Nuisance parameters"), ("cross_check", "One-stage cross-check"),
                ("harmonics", "C10 harmonics"), ("correlation", "Correlations"))


# --------------------------------------------------------------------------- the headline

def _esc(text: str, style: str) -> str:
    return latex_escape(text) if style == "latex" else text


def headline(fit: FitResult, style: str = "unicode") -> dict:
    """The result in the trade's terms.

    * theory ``sme``: the orientation-dependent Delta c / c bound, stated as the largest 95 %
      bound |value| + 1.96 sigma among the free ke_* coefficients;
    * ``rms``: delta - beta + 1/2 with 1 sigma, its 95 % interval and bound;
    * ``medium``: ``upper_limits.speed_kms_95`` when present;
    * otherwise (and ``clock``): the largest 95 % bound among the free coefficients.

    Returns ``{"text", "quantity", "bound_95", "statement"}``, text in ``style``
    (``"unicode"`` or ``"latex"``).
    """
    coefs, theory = fit.coefficients, fit.theory
    unc = fit.statistics.uncertainty if fit.statistics is not None else None
    tail = _esc(f" Uncertainties: {unc}.", style) if unc else ""
    lat = style == "latex"
    pct, sig, lt = (r"95\,\%", r"$\sigma$", "$<$") if lat else ("95 %", "σ", "<")
    absval = r"$|$value$|$" if lat else "|value|"
    ke = [n for n in coefs if n.startswith("ke_")]
    if theory == "rms" and "rms_mm" in coefs:
        v, s = coefs["rms_mm"].value, coefs["rms_mm"].sigma
        q, qabs = ((r"$\delta-\beta+\frac{1}{2}$", r"$|\delta-\beta+\frac{1}{2}|$") if lat
                   else ("δ − β + ½", "|δ − β + ½|"))
        exp = pdg_round(v, s)[2]
        iv = format_interval(v - Z95 * s, v + Z95 * s, pdg_place(s)[0], exp, style) \
            if s > 0 else "n/a"
        b = bound95(v, s)
        text = (_esc("Orientation dependence of the speed of light (Robertson–Mansouri–Sexl): ",
                     style) + f"{q} = {format_mantissas(*pdg_round(v, s), style)} (1{sig}), "
                f"{pct} interval {iv}, i.e. {qabs} {lt} {format_bound(b, style)} at {pct}.")
        return {"text": text + tail, "quantity": "rms_mm", "bound_95": b,
                "statement": "|delta - beta + 1/2| + 1.96 sigma"}
    if theory == "medium" and "speed_kms_95" in fit.upper_limits:
        x = float(fit.upper_limits["speed_kms_95"])
        text = _esc(f"Speed of the laboratory through a stationary medium: < {x:.3g} km/s "
                    "(95 % upper limit).", style)
        return {"text": text + tail, "quantity": "speed_kms_95", "bound_95": x,
                "statement": "upper_limits.speed_kms_95 of the fit"}
    names = ke if theory == "sme" and ke else list(coefs)
    bounds = {n: bound95(coefs[n].value, coefs[n].sigma) for n in names}
    name = max(bounds, key=bounds.get)
    b = format_bound(bounds[name], style)
    if theory == "sme" and ke:
        dcc = r"$\Delta c/c$" if lat else "Δc/c"
        kappa = r"$\tilde{\kappa}_{e-}$" if lat else "κ̃_e−"
        text = (f"Orientation-dependent {dcc} {lt} {b} ({pct}), stated as the largest {pct} "
                f"bound {absval} + 1.96{sig} among the {len(ke)} free {kappa} coefficients ("
                + _esc(", ".join(ke), style) + "), here " + _esc(name, style) + ".")
        statement = "largest |value| + 1.96 sigma among the free ke_* coefficients"
    else:
        what = {"clock": "Orientation-dependent clock shift",
                "sme": "No ke_* coefficient was free; largest bound"}.get(theory,
                                                                          "Largest bound")
        text = (_esc(f"{what}: |{name}| < ", style) + f"{b} ({pct}), the largest {pct} bound "
                f"{absval} + 1.96{sig} among the free coefficients.")
        statement = "largest |value| + 1.96 sigma among the free coefficients"
    return {"text": text + tail, "quantity": name, "bound_95": bounds[name],
            "statement": statement}


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
    if fit.theory == "rms":
        out += ["## Robertson–Mansouri–Sexl parameters", ""] + _rms_text(c)
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
    """report.tex: a standalone article with the headline paragraph, the warnings and the
    coefficient table (plain tabular; compiles with pdflatex and no extra packages)."""
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
    if c.fit.theory == "rms":
        body = "".join(f"<p>{_html.escape(p)}</p>" for p in _rms_text(c)
                       if p and not p.startswith("- "))
        if c.rms is not None:
            body += "<ul>" + "".join(f"<li>{_html.escape(x)}</li>"
                                     for x in _rms_lines(c.rms, "unicode")) + "</ul>"
        sections.append(("Robertson–Mansouri–Sexl parameters", body))
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
