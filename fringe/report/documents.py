"""Render what a report states.

The documents are report.md, report.tex, report.html and summary.json. Use :func:`headline`
for the result in the trade's terms (from a checked fit result), and :func:`markdown_report`,
:func:`latex_report`, :func:`html_report` and :func:`summary` to render a
:class:`~fringe.report.build.ReportContent` as text (or, for summary.json, a dict of plain JSON
types). Nothing is written here: :func:`fringe.report.build.write_report` writes the files (and
:mod:`fringe.report.build` re-exports these functions).
"""

from __future__ import annotations

import re
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING, NamedTuple

from fringe.report import budget as _budget
from fringe.report import latex as _latex
from fringe.report import runs as _runs
from fringe.report.markup import html_text, latex_escape, latex_text, markdown_text
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
#: Heading of the harmonics table (docs/conventions.md, "Fourier model and harmonic names").
HARMONICS_HEADING = "Sidereal harmonics of the 2θ signal"
#: Tables after the main ones, in report order: (key of report_tables, heading).
EXTRA_TABLES = (("sessions", "Per-session 2θ amplitudes"),
                ("nuisance", "Nuisance parameters"), ("cross_check", "One-stage cross-check"),
                ("harmonics", HARMONICS_HEADING), ("correlation", "Correlations"))


# --------------------------------------------------------------------------- the headline

def _esc(text: str, style: str) -> str:
    return latex_escape(text) if style == "latex" else text


def headline(fit: FitResult, style: str = "unicode") -> dict:
    """The result in the trade's terms.

    * theory ``sme``: the orientation-dependent Delta c / c bound, stated as the largest 95 %
      bound |value| + 1.96 sigma among the free primary coefficients (ke_*,
      :attr:`~fringe.theories.base.Theory.primary_names`);
    * ``rms``: delta - beta + 1/2 with 1 sigma, its 95 % interval and bound;
    * ``medium``: ``derived.lab_speed_kms.upper_95``, the laboratory's speed through the
      medium (files without it: the Sun's speed, ``upper_limits.sun_speed_kms_95`` or the
      older ``speed_kms_95``);
    * otherwise (and ``clock``): the largest 95 % bound among the free coefficients.

    A bound is taken only from coefficients that no warning of the fit names
    (:attr:`~fringe.io.fit_sections.FitWarning.coefficients`); the text names what was left
    out and by which warning. When a coefficient of the bound's set lies more than
    :data:`NONZERO_SIGMA` sigma from zero, the headline states a nonzero result (value, sigma,
    significance) and no bound. Warnings that name no coefficient (the record as a whole) are
    listed by code at the end.

    The theory named by the fit is looked up in :data:`fringe.theories.THEORIES`; each theory
    class has its statement in ``_HEADLINES`` (a theory without one gets the largest bound).

    Returns ``{"text", "kind", "quantity", "bound_95", "statement", "left_out"}``: ``kind`` is
    ``"bound"``, ``"nonzero"``, ``"none"`` (every coefficient named by a warning) or
    ``"upper-limit"`` (medium); ``bound_95`` is None unless a bound is stated; ``left_out``
    maps each coefficient left out to the codes of its warnings. Text in ``style``
    (``"unicode"`` or ``"latex"``).
    """
    unc = (fit.statistics.uncertainty if fit.statistics is not None else None)
    tail = _esc(f" Uncertainties: {unc}.", style) if unc else ""
    render = _HEADLINES.get(THEORIES.get(fit.theory), _largest_bound_headline)
    out = {"left_out": {}, **render(fit, _Marks.of(style))}
    wide = sorted({w.code for w in fit.warnings if not w.coefficients} - {"unnamed"})
    if wide:
        tail += _esc(f" The fit also raised warnings on the record as a whole "
                     f"({', '.join(wide)}); see the warnings.", style)
    if any(w.code == "unnamed" for w in fit.warnings):
        tail += _esc(" The fit's warnings (a version-1 file) do not say which coefficients "
                     "they concern; see the warnings.", style)
    return {**out, "text": out["text"] + tail}


#: |value| / sigma above which a headline states a nonzero result instead of a bound
#: (a project choice, the same 3 sigma as the fit's B0 and C0 checks).
NONZERO_SIGMA = 3.0

#: Why a warning leaves a coefficient out of the headline, by warning code (default: the code).
_WHY = {"c0-lab-fixed": "C0, its only harmonic, is inconsistent with zero: a lab-fixed "
                        "systematic",
        "near-degenerate": "nearly degenerate with another fitted parameter"}


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


def _flagged(fit: FitResult, names) -> dict[str, list[str]]:
    """Each of ``names`` that a warning of the fit names, with the codes of those warnings."""
    out: dict[str, list[str]] = {}
    for w in fit.warnings:
        for n in w.coefficients:
            if n in names and w.code not in out.get(n, []):
                out.setdefault(n, []).append(w.code)
    return out


def _left_out_text(left: dict[str, list[str]], style: str) -> str:
    """`` Left out: ke_ZZ (c0-lab-fixed: why).`` or ``""``."""
    if not left:
        return ""
    parts = [f"{n} ({'; '.join(f'{c}: {_WHY[c]}' if c in _WHY else c for c in codes)})"
             for n, codes in left.items()]
    return _esc(" Left out, as the fit's warnings name them: " + ", ".join(parts) + ".",
                style)


def _nonzero_text(name: str, fit: FitResult, m: _Marks) -> str:
    e = fit.coefficients[name]
    z = abs(e.value) / e.sigma
    return (_esc(f"Nonzero result, not a bound: {name} = ", m.style)
            + f"{format_mantissas(*pdg_round(e.value, e.sigma), m.style)} (1{m.sig}), "
            + _esc(f"{z:.1f}", m.style) + f"{m.sig} from zero: a signal or an unmodelled "
            "systematic, to be understood before any bound is stated.")


def _most_significant(coefs, names) -> str | None:
    """The name with the largest |value| / sigma above NONZERO_SIGMA, or None."""
    z = {n: abs(coefs[n].value) / coefs[n].sigma for n in names if coefs[n].sigma > 0}
    top = max(z, key=z.get, default=None)
    return top if top is not None and z[top] > NONZERO_SIGMA else None


def _bound_or_claim(fit: FitResult, m: _Marks, names: list[str], phrase: Callable,
                    statement: str) -> dict:
    """The headline over ``names``: left-out coefficients, a nonzero result, or a bound.

    The largest bound (``phrase(name, bound, used)`` gives the bound's sentence).
    """
    coefs = fit.coefficients
    left = _flagged(fit, names)
    used = [n for n in names if n not in left]
    note = _left_out_text(left, m.style)
    if not used:
        name, bound = _largest_bound(coefs, names)
        text = (_esc("No headline bound: every candidate coefficient is named by a warning of "
                     f"the fit (the largest {m.pct} bound would be {name}, ", m.style)
                + f"{format_bound(bound, m.style)}).")
        return {"text": text + note, "kind": "none", "quantity": None, "bound_95": None,
                "statement": "no coefficient free of warnings", "left_out": left}
    top = _most_significant(coefs, used)
    if top is not None:
        return {"text": _nonzero_text(top, fit, m) + note, "kind": "nonzero", "quantity": top,
                "bound_95": None, "statement": f"|value| / sigma > {NONZERO_SIGMA:g}",
                "left_out": left}
    name, bound = _largest_bound(coefs, used)
    return {"text": phrase(name, bound, used) + note, "kind": "bound", "quantity": name,
            "bound_95": bound, "statement": statement, "left_out": left}


def _largest_bound_headline(fit: FitResult, m: _Marks, what: str = "Largest bound") -> dict:
    """The largest 95 % bound among all free coefficients, introduced by ``what``."""
    def phrase(name, bound, used):
        return (_esc(f"{what}: |{name}| < ", m.style) + f"{format_bound(bound, m.style)} "
                f"({m.pct}), the largest {m.pct} bound {m.absval} + 1.96{m.sig} among the free "
                "coefficients" + (" without a warning." if len(used) < len(fit.coefficients)
                                  else "."))
    return _bound_or_claim(fit, m, list(fit.coefficients), phrase,
                           "largest |value| + 1.96 sigma among the free coefficients")


def _largest_bound(coefs: dict, names: list[str]) -> tuple[str, float]:
    bounds = {n: bound95(coefs[n].value, coefs[n].sigma) for n in names}
    name = max(bounds, key=bounds.get)
    return name, bounds[name]


def _sme_headline(fit: FitResult, m: _Marks) -> dict:
    coefs = fit.coefficients
    ke = [n for n in coefs if n in SmePhoton.primary_names]
    if not ke:
        return _largest_bound_headline(fit, m, "No ke_* coefficient was free; largest bound")
    lat = m.style == "latex"
    dcc = r"$\Delta c/c$" if lat else "Δc/c"
    kappa = r"$\tilde{\kappa}_{e-}$" if lat else "κ̃_e−"

    def phrase(name, bound, used):
        return (f"Orientation-dependent {dcc} {m.lt} {format_bound(bound, m.style)} ({m.pct}), "
                f"stated as the largest {m.pct} bound {m.absval} + 1.96{m.sig} among the "
                f"{len(used)} free {kappa} coefficients"
                + (" without a warning" if len(used) < len(ke) else "")
                + " (" + _esc(", ".join(used), m.style) + "), here " + _esc(name, m.style) + ".")
    return _bound_or_claim(fit, m, ke, phrase,
                           "largest |value| + 1.96 sigma among the free ke_* coefficients "
                           "without a warning")


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
    lead_text = (_esc("Orientation dependence of the speed of light (Robertson–Mansouri–Sexl): ",
                      m.style) + f"{q} = {format_mantissas(*pdg_round(v, s), m.style)} "
                 f"(1{m.sig}), {m.pct} interval {iv}")
    left = _flagged(fit, [lead])
    note = _left_out_text(left, m.style).replace("Left out, as", "Not a clean result, as")
    if s > 0 and abs(v) / s > NONZERO_SIGMA:
        text = (lead_text + _esc(f", {abs(v) / s:.1f}", m.style) + f"{m.sig} from zero: a "
                "nonzero result, not a bound; a signal or an unmodelled systematic.")
        return {"text": text + note, "kind": "nonzero", "quantity": lead, "bound_95": None,
                "statement": f"|value| / sigma > {NONZERO_SIGMA:g}", "left_out": left}
    text = lead_text + f", i.e. {qabs} {m.lt} {format_bound(b, m.style)} at {m.pct}."
    return {"text": text + note, "kind": "bound", "quantity": lead, "bound_95": b,
            "statement": "|delta - beta + 1/2| + 1.96 sigma", "left_out": left}


def _medium_headline(fit: FitResult, m: _Marks) -> dict:
    lab = fit.derived.lab_speed_kms if fit.derived is not None else None
    if lab is not None:
        x = float(lab["upper_95"])
        text = _esc(f"Speed of the laboratory through a stationary medium: < {x:.3g} km/s "
                    "(95 % upper limit, the largest over "
                    f"the observation times; horizontal part < "
                    f"{float(lab['horizontal_upper_95']):.3g} km/s).", m.style)
        return {"text": text, "kind": "upper-limit", "quantity": "lab_speed_kms", "bound_95": x,
                "statement": "derived.lab_speed_kms.upper_95 of the fit: one-sided 95 % "
                             "likelihood-ratio limit of the largest speed over the turns"}
    key = next((k for k in ("sun_speed_kms_95", "speed_kms_95") if k in fit.upper_limits), None)
    if key is None:
        return _largest_bound_headline(fit, m)
    x = float(fit.upper_limits[key])
    text = _esc(f"Speed of the Sun through a stationary medium: < {x:.3g} km/s (95 % upper "
                "limit; the laboratory's own speed is not in this fit result).", m.style)
    return {"text": text, "kind": "upper-limit", "quantity": key, "bound_95": x,
            "statement": f"upper_limits.{key} of the fit (the Sun's speed)"}


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
    out = ["Parameters: the Mansouri–Sexl α, β, δ (special relativity: α = −½, β = ½, δ = 0; "
           "docs/conventions.md, \"RMS parameters and their combinations\"). Papers that quote "
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
    body = "".join(f"<p>{html_text(p)}</p>" for p in _rms_text(c)
                   if p and not p.startswith("- "))
    if c.rms is not None:
        body += "<ul>" + "".join(f"<li>{html_text(x)}</li>"
                                 for x in _rms_lines(c.rms, "unicode")) + "</ul>"
    return body


def _medium_text(c: ReportContent) -> list[str]:
    """Markdown paragraphs of the medium section (theory medium only)."""
    d = c.fit.derived
    if d is None:
        return ["This fit result has no derived speeds (written before they were computed); "
                "its speed limit, if any, is the Sun's speed through the medium.", ""]
    out = []
    if d.sun_speed_kms is not None:
        s = d.sun_speed_kms
        out += [f"Sun's velocity through the medium: the coefficients sun_v*_kms above (SCCEF); "
                f"its speed |v_sun| = {s['best']:.4g} km/s, < {s['upper_95']:.4g} km/s (95 %).",
                ""]
    if d.lab_speed_kms is not None:
        s = d.lab_speed_kms
        out += ["Laboratory's speed through the medium, |v_sun + v_orbit + v_rotation|, the "
                "largest over the accepted turns' mean times: "
                f"{s['best']:.4g} km/s, < {s['upper_95']:.4g} km/s (95 %); its horizontal "
                f"part {s['horizontal_best']:.4g} km/s, < {s['horizontal_upper_95']:.4g} km/s "
                "(95 %). Limits: one-sided, largest value on the likelihood-ratio region "
                "Δχ² ≤ 1.645² (scaled by the reduced χ² in that mode).", ""]
    if d.two_theta_amplitude is not None:
        a, u = d.two_theta_amplitude, d.two_theta_amplitude["units"]
        ratio = a["fitted_rms"] / a["orbital_rms"] if a["orbital_rms"] > 0 else float("nan")
        out += [f"2θ amplitude |(C, B)|, RMS (largest) over the turns: fitted "
                f"{a['fitted_rms']:.3g} ({a['fitted_max']:.3g}) {u}; expected for a medium at "
                f"rest with the Sun, i.e. the orbital and rotation velocity alone, "
                f"{a['orbital_rms']:.3g} ({a['orbital_max']:.3g}) {u}; ratio of the RMS "
                f"{ratio:.3g}. The per-turn data contain {a['orbital_fraction']:.3g} ± "
                f"{a['orbital_fraction_sigma']:.2g} (1σ) times that expected signal "
                "(least-squares factor; 1 for a medium at rest with the Sun).", ""]
    return out


def _medium_html(c: ReportContent) -> str:
    """HTML body of the medium section (theory medium only)."""
    return "".join(f"<p>{html_text(p)}</p>" for p in _medium_text(c) if p)


class _Section(NamedTuple):
    """A report section of one theory: heading, Markdown lines and HTML body."""

    title: str
    markdown: Callable[[ReportContent], list[str]]
    html: Callable[[ReportContent], str]


#: Sections of their own for some theory classes (after the comparison table).
_THEORY_SECTIONS: dict[type[Theory], _Section] = {
    RobertsonMansouriSexl: _Section("Robertson–Mansouri–Sexl parameters", _rms_text, _rms_html),
    ClassicalMedium: _Section("Speeds through the medium", _medium_text, _medium_html)}


def _theory_section(fit: FitResult) -> _Section | None:
    return _THEORY_SECTIONS.get(THEORIES.get(fit.theory))


def _fixed_text(fit: FitResult) -> str:
    return ", ".join(f"{k} = {v:g}" for k, v in fit.fixed.items())


def _site_name(fit: FitResult) -> str:
    return (fit.site or {}).get("name", "")


def markdown_report(c: ReportContent, figs: Sequence[tuple[str, str, bytes]]) -> str:
    """report.md: headline, warnings, tables, figures (linked), provenance.

    Every text above the provenance goes through :func:`fringe.report.markup.markdown_text`
    (κ̃ₑ₋, ω<sub>R</sub>: no underscore of a subscript reaches the reader); the provenance
    lists the record entry by entry, as typed (:func:`provenance_markdown`).
    """
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
    out += _budget.budget_markdown(fit)
    out += _runs.runs_markdown(fit)
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
    out = [markdown_text(line) for line in out]      # subscripts without underscores
    out += ["## Provenance", "", "The record of summary.json (which keeps every digit; here "
            "floats to 6 significant digits).", ""]
    out += provenance_markdown(c.provenance)
    return "\n".join(out) + "\n"


def _md_literal(text: str) -> str:
    """``text`` shown as typed in Markdown (the characters that would mark it up escaped)."""
    return re.sub(r"([\\`*<>\[\]|])", r"\\\1", text)


def provenance_markdown(prov) -> list[str]:
    """The provenance as a Markdown list: a file as its path and hash, a mapping as sub-items.

    Names and values as typed (``rms_mm = delta - beta + 1/2``), as the HTML page shows them
    (:func:`fringe.report.page.provenance_entries`).
    """
    from fringe.report.page import provenance_entries

    out = []
    for key, kind, content in provenance_entries(prov):
        if kind == "file":
            path, digest = content
            shown = f"`{digest}`" if re.fullmatch(r"[0-9a-f]+", digest) else _md_literal(digest)
            out.append(f"- **{_md_literal(key)}**: {_md_literal(path)} (sha256 {shown})")
        elif kind == "lines":
            out.append(f"- **{_md_literal(key)}**:" + ("" if content else " —"))
            out += [f"  - {_md_literal(k)}: {_md_literal(text)}" for k, text in content]
        else:
            out.append(f"- **{_md_literal(key)}**: {_md_literal(content)}")
    return out


def latex_report(c: ReportContent, figs: Sequence[tuple[str, str, bytes]] = ()) -> str:
    r"""Build report.tex: a fragment a paper ``\input``\ s (no preamble, no document).

    Its opening comment names the packages it needs (:data:`fringe.report.latex.PACKAGES`),
    the headline and every warning of the fit; then the coefficient table (booktabs), the
    fixed coefficients, the blinding and systematic budget, the runs of a joint result, the
    comparison with earlier results, the theory's own paragraphs (medium speeds, RMS
    parameters), the per-session, nuisance, cross-check, sidereal-harmonics and correlation
    tables, and one figure environment per figure (``figures/NAME.pdf``,
    :func:`fringe.report.latex.figure_environment`). The numbers as macros are in
    numbers.tex (:func:`fringe.report.latex.numbers_tex`).
    """
    tables = report_tables(c.fit, c.comparison, "latex")
    lead = _budget.total_headline(c.fit, headline, "latex")["text"]
    out = _latex.fragment_header(c, lead, c.warnings) + ["", to_latex(tables["coefficients"])]
    if c.fit.fixed:
        out.append(_latex.fixed_text(c.fit.fixed) + "\n")
    out += _budget.budget_latex(c.fit)
    out += _runs.runs_latex(c.fit)
    if "comparison" in tables:
        out.append(to_latex(tables["comparison"]))
    if c.fit.derived is not None and c.fit.theory == ClassicalMedium.name:
        out.append(r"\paragraph{Speeds through the medium.} "
                   + " ".join(latex_text(p) for p in _medium_text(c) if p) + "\n")
    if c.rms is not None:
        out.append(r"\paragraph{RMS parameters.} Deviations from special relativity from this "
                   r"fit and the user's Kennedy--Thorndike and Ives--Stilwell inputs "
                   r"(independent): " + "; ".join(_rms_lines(c.rms, "latex")) + ".\n")
    for key, _title in EXTRA_TABLES:
        if key in tables:
            out.append(to_latex(tables[key]))
    out += _latex.figure_environments(figs)
    return "\n".join(out) + "\n"


def html_report(c: ReportContent, figs: Sequence[tuple[str, str, bytes]]) -> str:
    """report.html: one self-contained page (:func:`fringe.report.page.html_page`)."""
    from fringe.report.page import html_page

    tables = report_tables(c.fit, c.comparison, "unicode")
    sections = [("Coefficients", to_html(tables["coefficients"]))]
    if c.fit.fixed:
        sections.append(("Fixed coefficients", f"<p>{html_text(_fixed_text(c.fit))}</p>"))
    sections += _budget.budget_html(c.fit)
    sections += _runs.runs_html(c.fit)
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
            "figures": list(figure_names), "files": list(files), "provenance": c.provenance,
            **_budget.budget_summary(c.fit), **_runs.runs_summary(c.fit)}
