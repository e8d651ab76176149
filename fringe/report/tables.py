"""Tables of a fit result: coefficients, sidereal harmonics (C10), correlations, earlier limits.

Each ``*_table`` function turns plain numbers into a :class:`Table` (header and string cells,
rounded by the Particle Data Group rule of :mod:`fringe.report.rounding`) in one text style;
:func:`to_markdown`, :func:`to_latex` and :func:`to_html` render any table. Use
``style="unicode"`` for Markdown and HTML, ``style="latex"`` for LaTeX.

Intervals are Gaussian: 68 % = value +- 1 sigma, 95 % = value +- 1.96 sigma, both rounded to the
decimal place the PDG rule chose for sigma and written in the value's power of ten. The "95 %
bound" of a coefficient is max(|low|, |high|) of its 95 % interval = |value| + 1.96 sigma.
"""

from __future__ import annotations

import math
import re
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING

from fringe.errors import ConfigError
from fringe.linalg import correlation_from_covariance
from fringe.report.markup import html_text, latex_escape, latex_text
from fringe.report.rounding import (
    STYLES,
    format_bound,
    format_interval,
    format_mantissas,
    pdg_place,
    pdg_round,
)

if TYPE_CHECKING:
    from fringe.io.fit_result import FitResult

__all__ = ["Table", "Z68", "Z95", "bound95", "coefficient_label", "coefficient_table",
           "comparison_table", "correlation_table",
           "cross_check_table", "harmonics_table", "report_tables",
           "sessions_table", "to_html", "to_latex", "to_markdown", "value_table"]

#: Half-widths of the Gaussian 68 % and 95 % intervals, in sigma (two-sided; 1.96 is the
#: customary rounding of the 0.975 normal quantile 1.95996...).
Z68 = 1.0
Z95 = 1.96


@dataclass(frozen=True)
class Table:
    """A rendered-ready table: header and rows of strings in one style.

    Parameters
    ----------
    header : tuple of str
    rows : tuple of tuple of str
        Each row has ``len(header)`` cells.
    caption : str
        Caption (plain text, Unicode allowed; escaped by the LaTeX renderer).
    label : str
        LaTeX label (``tab:...``); empty for none.
    style : str
        The text style of the cells (``"unicode"`` or ``"latex"``).
    """

    header: tuple[str, ...]
    rows: tuple[tuple[str, ...], ...]
    caption: str = ""
    label: str = ""
    style: str = "unicode"

    def __post_init__(self):
        if self.style not in STYLES:
            raise ConfigError(f"table: style: expected one of {STYLES}, got {self.style!r}")
        for i, row in enumerate(self.rows):
            if len(row) != len(self.header):
                raise ConfigError(f"table: row {i}: expected {len(self.header)} cells, "
                                  f"got {len(row)}")


# ------------------------------------------------------------------------------ text helpers

def _sup_latex(component: str) -> str:
    return component.replace("XXmYY", "XX-YY")


def coefficient_label(name: str, style: str = "unicode") -> str:
    r"""Display label of a coefficient name: the name itself, or a LaTeX symbol.

    ``ke_XY`` -> ``$\tilde{\kappa}_{e-}^{XY}$``, ``ko_XY`` -> ``$\tilde{\kappa}_{o+}^{XY}$``,
    ``ktr`` -> ``$\tilde{\kappa}_{\mathrm{tr}}$``, ``rms_mm`` -> ``$\delta-\beta+1/2$``, ...
    (LaTeX style only; other styles return ``name``).
    """
    if style != "latex":
        return name
    m = re.fullmatch(r"(ke|ko|cq)_(XY|XZ|YZ|XXmYY|ZZ)", name)
    if m:
        base = {"ke": r"\tilde{\kappa}_{e-}", "ko": r"\tilde{\kappa}_{o+}",
                "cq": r"c"}[m.group(1)]
        return f"${base}^{{{_sup_latex(m.group(2))}}}$"
    fixed = {"ktr": r"$\tilde{\kappa}_{\mathrm{tr}}$", "rms_mm": r"$\delta-\beta+\frac{1}{2}$",
             "rms_kt": r"$\beta-\alpha-1$"}
    if name in fixed:
        return fixed[name]
    m = re.fullmatch(r"sun_v([XYZ])_kms", name)
    if m:
        return f"$v_{m.group(1)}$"
    return latex_escape(name)


def _minus(text: str, style: str) -> str:
    return text.replace("-", "−") if style == "unicode" else text


def _signed(x: float, decimals: int) -> str:
    """``x`` with its sign and ``decimals`` decimals; a value that rounds to zero has no sign."""
    text = f"{x:+.{decimals}f}"
    return text[1:] if float(text) == 0.0 else text


def _signed2(x: float, style: str) -> str:
    """Correlation coefficient with sign and two decimals (NaN -> 'n/a'; never -0.00)."""
    if not math.isfinite(x):
        return "n/a"
    text = _minus(_signed(x, 2), style)
    return f"${text}$" if style == "latex" else text


def bound95(value: float, sigma: float) -> float:
    """Absolute 95 % bound |value| + 1.96 sigma (the larger |end| of the 95 % interval)."""
    return abs(float(value)) + Z95 * float(sigma)


# --------------------------------------------------------------------------------- builders

def _value_cells(value: float, sigma: float, style: str) -> tuple[str, str, str]:
    """Value ± 1σ, 68 % and 95 % intervals, rounded consistently."""
    v_str, s_str, exp = pdg_round(value, sigma)
    cell = format_mantissas(v_str, s_str, exp, style)
    if sigma == 0:
        return cell, "—" if style == "unicode" else "--", "—" if style == "unicode" else "--"
    place, _ = pdg_place(sigma)
    i68 = format_interval(value - Z68 * sigma, value + Z68 * sigma, place, exp, style)
    i95 = format_interval(value - Z95 * sigma, value + Z95 * sigma, place, exp, style)
    return cell, i68, i95


def coefficient_table(coefficients: Mapping[str, Mapping[str, float]], *,
                      style: str = "unicode", units: Mapping[str, str] | None = None,
                      caption: str = "", label: str = "tab:coefficients") -> Table:
    """Table of the free coefficients: value ± 1σ, 68 % and 95 % intervals.

    Parameters
    ----------
    coefficients : mapping
        ``{name: {"value": v, "sigma": s}}`` (the fit result's ``coefficients``), in table
        order; units as given by ``units``.
    style : {"unicode", "latex"}
    units : mapping, optional
        ``{name: unit}``; a unit column is added when any unit is not ``"1"``.
    caption, label : str
    """
    units = dict(units or {})
    with_units = any(units.get(n, "1") not in ("1", "") for n in coefficients)
    if style == "latex":
        header = ["coefficient", r"value $\pm\,1\sigma$", r"68\,\% interval",
                  r"95\,\% interval"]
    else:
        header = ["coefficient", "value ± 1σ", "68 % interval", "95 % interval"]
    if with_units:
        header.append("unit")
    rows = []
    for name, entry in coefficients.items():
        row = [coefficient_label(name, style),
               *_value_cells(float(entry["value"]), float(entry["sigma"]), style)]
        if with_units:
            u = units.get(name, "1")
            row.append(latex_escape(u) if style == "latex" else u)
        rows.append(tuple(row))
    return Table(tuple(header), tuple(rows), caption=caption, label=label, style=style)


def harmonics_table(names: Sequence[str], values: Sequence[float], sigmas: Sequence[float], *,
                    units: str, style: str = "unicode", caption: str = "",
                    label: str = "tab:harmonics") -> Table:
    """Table of the C10 harmonics: value ± 1σ and the ratio value/σ.

    Parameters
    ----------
    names, values, sigmas : sequences of equal length
        Harmonic names (C0, Cs1, ...), values and 1-sigma uncertainties, in ``units``.
    units : str
        Unit of the observable (``"Hz"``, ``"1"``, ``"fringe"``).
    """
    if not len(names) == len(values) == len(sigmas):
        raise ConfigError("harmonics table: names, values, sigmas: expected equal lengths, got "
                          f"{len(names)}, {len(values)}, {len(sigmas)}")
    unit = latex_escape(units) if style == "latex" else units
    if style == "latex":
        header = ("harmonic", rf"value $\pm\,1\sigma$ [{unit}]", r"value/$\sigma$")
    else:
        header = ("harmonic", f"value ± 1σ [{unit}]", "value/σ")
    rows = []
    for n, v, s in zip(names, values, sigmas, strict=True):
        v, s = float(v), float(s)
        cell = format_mantissas(*pdg_round(v, s), style)
        ratio = _minus(_signed(v / s, 1), style) if s > 0 else "—"
        if style == "latex":
            ratio = f"${ratio}$" if s > 0 else "--"
        rows.append((_harmonic_latex(n) if style == "latex" else n, cell, ratio))
    return Table(header, tuple(rows), caption=caption, label=label, style=style)


def _harmonic_latex(name: str) -> str:
    """A harmonic name in LaTeX: ``Cs1`` -> ``$C_{s1}$``; any other name escaped."""
    if re.fullmatch(r"[CB](?:0|[sc][12])", name):
        return f"${name[0]}_{{{name[1:]}}}$"
    return latex_escape(name)


def correlation_table(names: Sequence[str], covariance, *, style: str = "unicode",
                      caption: str = "", label: str = "tab:correlation") -> Table:
    """Correlation matrix of the free coefficients (two decimals, diagonal 1)."""
    rho = correlation_from_covariance(covariance, unit_diagonal=True)
    if rho.shape != (len(names), len(names)):
        raise ConfigError(f"correlation table: covariance: expected shape "
                          f"({len(names)}, {len(names)}), got {rho.shape}")
    labels = [coefficient_label(n, style) for n in names]
    rows = []
    for i, n in enumerate(labels):
        cells = ["1" if i == j and math.isfinite(rho[i, j]) else _signed2(rho[i, j], style)
                 for j in range(len(names))]
        rows.append((n, *cells))
    return Table(("", *labels), tuple(rows), caption=caption, label=label, style=style)


def comparison_table(ours: Mapping[str, Mapping[str, float]], earlier: Sequence[Mapping], *,
                     style: str = "unicode", caption: str = "",
                     label: str = "tab:comparison") -> Table:
    """Coefficients of this work beside user-supplied earlier results, with 95 % bounds.

    Parameters
    ----------
    ours : mapping
        ``{name: {"value": v, "sigma": s}}`` of this fit.
    earlier : sequence of mapping
        Rows ``{"name", "value", "sigma", "citation"}`` (a quoted bound |c| < L is entered as
        value L, sigma 0).

    The last column is the ratio earlier 95 % bound / this work's 95 % bound (the usual
    "improvement factor"), for names this fit also determined.
    """
    dash = "—" if style == "unicode" else "--"
    if style == "latex":
        header = ("coefficient", r"value $\pm\,1\sigma$", r"95\,\% bound", "source",
                  "earlier/this")
    else:
        header = ("coefficient", "value ± 1σ", "95 % bound", "source", "earlier/this")
    names = list(ours) + [e["name"] for e in earlier if e["name"] not in ours]
    names = list(dict.fromkeys(names))
    rows = []
    for name in names:
        label_ = coefficient_label(name, style)
        mine = ours.get(name)
        if mine is not None:
            v, s = float(mine["value"]), float(mine["sigma"])
            rows.append((label_, format_mantissas(*pdg_round(v, s), style),
                         format_bound(bound95(v, s), style), "this work", dash))
        for e in earlier:
            if e["name"] != name:
                continue
            v, s = float(e["value"]), float(e["sigma"])
            b = bound95(v, s)
            ratio = dash
            if mine is not None and b > 0:
                ratio = f"{b / bound95(mine['value'], mine['sigma']):.2g}"
            cite = latex_escape(e["citation"]) if style == "latex" else e["citation"]
            rows.append((label_, format_mantissas(*pdg_round(v, s), style),
                         format_bound(b, style), cite, ratio))
    return Table(header, tuple(rows), caption=caption, label=label, style=style)


def value_table(entries: Mapping[str, Mapping[str, float]], *, first: str = "parameter",
                style: str = "unicode", caption: str = "", label: str = "") -> Table:
    """Two columns: name and value ± 1σ (PDG rounding), e.g. the fit's nuisance parameters."""
    pm = r"value $\pm\,1\sigma$" if style == "latex" else "value ± 1σ"
    rows = tuple((_esc_name(n, style), format_mantissas(*pdg_round(e["value"], e["sigma"]),
                                                        style))
                 for n, e in entries.items())
    return Table((first, pm), rows, caption=caption, label=label, style=style)


def cross_check_table(two_stage: Mapping[str, Mapping[str, float]],
                      one_stage: Mapping[str, Mapping[str, float]], *, style: str = "unicode",
                      caption: str = "", label: str = "tab:cross-check") -> Table:
    """The fit's coefficients beside its one-stage cross-check (names present in both).

    The difference is given in units of the larger of the two sigmas.
    """
    if style == "latex":
        header = ("coefficient", "two-stage", "one-stage", r"difference/$\sigma$")
    else:
        header = ("coefficient", "two-stage", "one-stage", "difference/σ")
    rows = []
    for n, a in two_stage.items():
        b = one_stage.get(n)
        if b is None:
            continue
        s = max(a["sigma"], b["sigma"])
        diff = _minus(_signed((b["value"] - a["value"]) / s, 2), style) if s > 0 else "n/a"
        if style == "latex" and s > 0:
            diff = f"${diff}$"
        rows.append((coefficient_label(n, style),
                     format_mantissas(*pdg_round(a["value"], a["sigma"]), style),
                     format_mantissas(*pdg_round(b["value"], b["sigma"]), style), diff))
    return Table(header, tuple(rows), caption=caption, label=label, style=style)


def _esc_name(name: str, style: str) -> str:
    return latex_escape(name) if style == "latex" else name


# -------------------------------------------------------------------------------- renderers

def to_markdown(table: Table) -> str:
    """GitHub-flavoured Markdown (caption, if any, as an italic line above)."""
    def cell(text: str) -> str:
        return text.replace("|", "\\|")

    lines = []
    if table.caption:
        lines += [f"*{table.caption}*", ""]
    lines.append("| " + " | ".join(cell(h) for h in table.header) + " |")
    lines.append("|" + "|".join("---" for _ in table.header) + "|")
    for row in table.rows:
        lines.append("| " + " | ".join(cell(c) for c in row) + " |")
    return "\n".join(lines) + "\n"


#: The LaTeX macro that places a table (defined by the fragment's opening,
#: :func:`fringe.report.latex.fragment_header`): ``\fringetable{CAPTION AND LABEL}{TABULAR}``.
TABLE_MACRO = r"\fringetable"


def to_latex(table: Table) -> str:
    r"""A ``tabular`` with booktabs rules, its caption and label, placed by ``\fringetable``.

    ``\fringetable`` (defined in the fragment's opening) puts it in a ``table`` float, or in
    ``table*`` (across both columns of a two-column paper) when the tabular is wider than a
    column. The cells must already be LaTeX (build the table with ``style="latex"``); the
    caption is turned into LaTeX here (:func:`fringe.report.markup.latex_text`). Needs
    ``\usepackage{booktabs}``.
    """
    if table.style != "latex":
        raise ConfigError("table: style: expected 'latex' cells for the LaTeX renderer, got "
                          f"{table.style!r}")
    cols = "l" + "c" * (len(table.header) - 1)
    head = ""
    if table.caption:
        head += rf"\caption{{{latex_text(table.caption)}}}"
    if table.label:
        head += rf"\label{{{table.label}}}"
    lines = [rf"{TABLE_MACRO}{{{head}}}{{%", rf"\begin{{tabular}}{{{cols}}}", r"\toprule",
             " & ".join(table.header) + r" \\", r"\midrule"]
    lines += [" & ".join(row) + r" \\" for row in table.rows]
    lines += [r"\bottomrule", r"\end{tabular}}"]
    return "\n".join(lines) + "\n"


def to_html(table: Table) -> str:
    """An HTML ``<table>`` of a Unicode-style table, its caption a paragraph above it.

    Every text goes through :func:`fringe.report.markup.html_text` (escaped; names and
    subscripts marked up).
    """
    e = html_text
    out = []
    if table.caption:          # above the table, not in it: as wide as the text, not the table
        out.append(f'<p class="caption">{e(table.caption)}</p>')
    out.append("<table>")
    out.append("<thead><tr>" + "".join(f"<th>{e(h)}</th>" for h in table.header)
               + "</tr></thead>")
    out.append("<tbody>")
    for row in table.rows:
        out.append("<tr>" + "".join(f"<td>{e(c)}</td>" for c in row) + "</tr>")
    out.append("</tbody></table>")
    return "\n".join(out) + "\n"


def sessions_table(sessions, *, style: str = "unicode", label: str = "tab:sessions") -> Table:
    """Table of the per-session 2θ amplitudes: start, turns, sidereal phase, C ± σ, B ± σ, dof.

    ``sessions`` is a :class:`~fringe.io.fit_sections.Sessions`; values are rounded by the PDG
    rule of their σ (1σ Student-t widened, see the sessions' ``rule``). The caption states the
    χ² of the sessions' agreement when there are two or more.
    """
    rows = []
    for x in sessions.sessions:
        c = format_mantissas(*pdg_round(x.C.value, x.C.sigma), style)
        b = format_mantissas(*pdg_round(x.B.value, x.B.sigma), style)
        rows.append((f"{x.t_start_s:.0f}", str(x.n_turns), f"{x.sidereal_phase_deg:.1f}", c, b,
                     str(x.dof)))
    agree = (f" Agreement of the sessions: χ² = {sessions.chi2:.3g} for {sessions.dof} dof "
             f"(p = {sessions.p_value:.3g})." if sessions.dof > 0 else "")
    caption = (f"Per-session 2θ amplitudes ({sessions.units}): weighted mean of each session's "
               "turns, 1σ from their scatter widened by the Student-t factor of the dof; "
               f"{sessions.n_sidereal_phases} distinct sidereal phase(s)." + agree)
    return Table(("start (s)", "turns", "φ (deg)", "C", "B", "dof"), tuple(rows),
                 caption=caption, label=label, style=style)


# ------------------------------------------------------------------------ a report's tables

def _coefficient_units(theory: str) -> dict:
    from fringe.theories import THEORIES

    cls = THEORIES.get(theory)
    return dict(cls.parameter_units) if cls is not None else {}


def _entries(estimates: Mapping) -> dict:
    """{name: {"value", "sigma"}} of the finite estimates (a nuisance may be null in a file)."""
    return {n: {"value": e.value, "sigma": e.sigma} for n, e in estimates.items() if e.finite}


def _format_factor(f: complex) -> str:
    """A two-path factor as text: a real number, or its real and imaginary parts."""
    if f.imag == 0.0:
        return f"{f.real:.6g}"
    return f"{f.real:.6g} {'+' if f.imag > 0 else '−'} {abs(f.imag):.6g} i"


def two_path_factor_of(fit: FitResult) -> tuple[str | None, complex | None, bool]:
    """The observable and its factor to the two-path harmonics (C9) of a fit result.

    From the harmonics record; for a file that does not state them (format version 1), derived
    from the fit's apparatus record (third item True), or (None, None, False) when that fails.
    """
    h = fit.harmonics
    if h is not None and h.two_path_factor is not None:
        return h.observable, complex(*h.two_path_factor), False
    from fringe.experiment.apparatus import make_apparatus

    try:
        app = make_apparatus(dict(fit.apparatus or {}), source="fit apparatus")
        units = h.units if h is not None and h.units else fit.units
        return app.observable(units), app.two_path_factor(units), True
    except (ConfigError, TypeError, ValueError):
        return None, None, False


def harmonics_caption(fit: FitResult) -> str:
    """Caption of the harmonics table: the observable and its factor to the two-path signal."""
    observable, f, derived = two_path_factor_of(fit)
    head = ("Sidereal harmonics of the 2θ signal of the observable fitted: per turn "
            "y = B sin 2θ + C cos 2θ with C = C0 + Cs1 sin φ + Cc1 cos φ + Cs2 sin 2φ + "
            "Cc2 cos 2φ and B alike, in the observable's units (sine and cosine amplitudes as "
            "defined in docs/conventions.md, \"Fourier model and harmonic names\")")
    if f is None:
        return head + "; the fit file does not state the observable's factor to the two-path " \
                      "signal (docs/conventions.md, \"Normalisation: two paths\")."
    source = " (derived by the report from the fit's apparatus record)" if derived else ""
    if f == 0:
        return f"{head}. Observable: {observable}{source}; it has no 2θ response."
    return (f"{head}. Observable: {observable}{source}. Two-path signal S (docs/conventions.md, "
            f"\"Normalisation: two paths\"): for each pair h = C − iB, h_S = h / f with "
            f"f = {_format_factor(f)} (for a real f: C_S = C/f, B_S = B/f).")


def report_tables(fit: FitResult, comparison: Sequence[Mapping] = (), style: str = "unicode"
                  ) -> dict[str, Table]:
    """The tables of a report, keyed by name.

    ``coefficients`` always; ``sessions``, ``harmonics``, ``correlation``, ``nuisance``,
    ``cross_check`` and ``comparison`` when the fit (or the user's table) provides them.

    Parameters
    ----------
    fit : FitResult
        The checked fit result (with a covariance).
    comparison : sequence of mapping
        Earlier results ``{"name", "value", "sigma", "citation"}``.
    style : {"unicode", "latex"}
    """
    coefficients = _entries(fit.coefficients)
    out = {"coefficients": coefficient_table(
        coefficients, style=style, units=_coefficient_units(fit.theory),
        caption=f"Free coefficients of the {fit.theory} fit: value ± 1σ (Particle Data Group "
                "rounding) and Gaussian 68 % and 95 % intervals.")}
    if fit.sessions is not None:
        out["sessions"] = sessions_table(fit.sessions, style=style)
    h = fit.harmonics
    if h is not None:
        chi = h.chi2_reduced
        out["harmonics"] = harmonics_table(
            h.names, h.value, h.sigma, units=h.units if h.units is not None else fit.units,
            style=style, caption=harmonics_caption(fit) + (
                f" Reduced χ² = {chi:.3g}." if chi is not None and math.isfinite(chi) else ""))
    cov = fit.covariance
    if len(cov.names) >= 2:
        out["correlation"] = correlation_table(cov.names, cov.matrix, style=style,
                                               caption="Correlation matrix of the free "
                                                       "coefficients.")
    nuisance = _entries(fit.nuisance)
    if nuisance:
        out["nuisance"] = value_table(nuisance, style=style, label="tab:nuisance",
                                      caption="Nuisance parameters fitted with the "
                                              "coefficients (unit of the observable).")
    one = _entries(fit.one_stage.coefficients) if fit.one_stage is not None else {}
    if any(n in one for n in coefficients):
        out["cross_check"] = cross_check_table(
            coefficients, one, style=style,
            caption="Two-stage result beside the fit's one-stage cross-check (all samples "
                    "fitted at once); difference in units of the larger σ.")
    if comparison:
        out["comparison"] = comparison_table(
            coefficients, comparison, style=style,
            caption="This work beside earlier results supplied by the user (citations as "
                    "given, not checked; fringe bundles no reference values). earlier/this: "
                    "ratio of the 95 % bounds.")
    return out
