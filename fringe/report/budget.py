"""The report's systematic budget and blinding statements.

* :func:`budget_table`: per free coefficient the statistical sigma, each systematic term's
  sigma and the total in quadrature (the result's ``systematics`` part,
  :mod:`fringe.fit.budget`);
* :func:`limit_lines`: each coefficient's value with its statistical and systematic
  uncertainties apart and combined, and its 95 % bound from the total;
* :func:`total_headline`: the headline computed with the total sigma, and marked BLINDED when
  the values are;
* :func:`budget_markdown`, :func:`budget_html`, :func:`budget_latex`,
  :func:`budget_summary`: the sections of report.md, report.html, report.tex and the fields
  of summary.json.

A result without ``systematics`` and ``blinding`` gives no section and the headline unchanged.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Callable

from fringe.io.fit_sections import Estimate
from fringe.report.markup import html_text, latex_escape
from fringe.report.rounding import (
    format_bound,
    mantissa_str,
    pdg_place,
    pdg_round,
    round_to_place,
    superscript,
)
from fringe.report.tables import (
    Table,
    bound95,
    coefficient_label,
    to_html,
    to_latex,
    to_markdown,
)

__all__ = ["BLINDED_BANNER", "budget_html", "budget_latex", "budget_markdown",
           "budget_summary", "budget_table", "limit_lines", "total_headline"]

#: The words that open every statement of a blinded result.
BLINDED_BANNER = ("BLINDED: the coefficient values carry secret offsets (fringe unblind removes "
                  "them); the numbers below are not results.")


def _syst(c) -> float:
    return math.sqrt(max(c["total"] ** 2 - c["statistical"] ** 2, 0.0))


def budget_table(fit, style: str = "unicode") -> Table | None:
    """The budget table (None without a ``systematics`` part).

    Rows: the free coefficients; columns: statistical, each term, total (1 sigma, coefficient
    units, each rounded to the nearest two significant digits, so that they agree with the
    limit lines that print the same sigmas). A withheld term reads "withheld".
    """
    s = fit.systematics
    if s is None:
        return None
    names = [t["name"] for t in s.terms]
    esc = latex_escape if style == "latex" else (lambda x: x)
    header = ("coefficient", "statistical", *(esc(n) for n in names), "total")
    rows = []
    for name, c in s.coefficients.items():
        cells = [format_bound(c["statistical"], style, upward=False)]
        for n in names:
            v = c["terms"].get(n)
            cells.append("withheld" if v is None else format_bound(v, style, upward=False))
        rows.append((coefficient_label(name, style), *cells,
                     format_bound(c["total"], style, upward=False)))
    stat = ("the joint σ, the runs' auxiliary couplings inside it" if fit.runs is not None
            else "the fit's σ without the auxiliary couplings' part")
    caption = (f"Systematic budget, 1σ in coefficient units: statistical ({stat}), each term, "
               "and the total in quadrature. " + s.correlations[:1].upper()
               + s.correlations[1:] + ".")
    return Table(header, tuple(rows), caption=caption, label="tab:budget", style=style)


def _times(e: int, style: str) -> str:
    if e == 0:
        return ""
    return rf" $\times 10^{{{e}}}$" if style == "latex" else f" × 10{superscript(e)}"


def _mantissas(v: float, sigmas: list[float]) -> tuple[str, list[str], int]:
    """``v`` and ``sigmas`` at the decimal place the PDG rule gives the smallest positive one."""
    positive = [x for x in sigmas if x > 0]
    place, _ = pdg_place(min(positive))
    e = pdg_round(v, max(positive))[2]
    return (mantissa_str(round_to_place(v, place), place, e),
            [mantissa_str(round_to_place(x, place), place, e) if x > 0 else "0"
             for x in sigmas], e)


def limit_lines(fit, style: str = "unicode") -> list[str]:
    """Per coefficient: value ± stat ± syst, the total, and the 95 % bound from the total.

    All four numbers are written to the decimal place the Particle Data Group rule gives the
    smallest of the three uncertainties, in one power of ten.
    """
    s = fit.systematics
    if s is None:
        return []
    lat = style == "latex"
    pm, sig, pct = (r"$\pm$", r"$\sigma$", r"95\,\%") if lat else ("±", "σ", "95 %")
    minus = (lambda x: x) if lat else (lambda x: x.replace("-", "−"))
    out = []
    for name, c in s.coefficients.items():
        v = fit.coefficients[name].value
        tot, stat, syst = c["total"], c["statistical"], _syst(c)
        if not tot > 0:
            continue
        v_str, (st, sy, t_str), e = _mantissas(v, [stat, syst, tot])
        label = coefficient_label(name, style)
        out.append(f"{label} = ({minus(v_str)} {pm} {st} (stat) {pm} {sy} (syst))"
                   f"{_times(e, style)}, total {pm}{t_str}{_times(e, style)}; |{label}| "
                   f"{'$<$' if lat else '<'} {format_bound(bound95(v, tot), style)} ({pct}, "
                   f"total {sig})")
    return out


def total_headline(fit, render: Callable, style: str = "unicode") -> dict:
    """``render(fit, style)`` (the report's headline) with the total sigma, marked if blinded.

    With a budget each coefficient's sigma is replaced by the budget's total before the
    headline is computed; ``sigma`` in the returned dict says which was used, ``blinded``
    whether the values are.
    """
    s = fit.systematics
    used = fit
    if s is not None:
        used = dataclasses.replace(fit, coefficients={
            n: Estimate(e.value, s.coefficients[n]["total"]) if n in s.coefficients else e
            for n, e in fit.coefficients.items()})
    out = dict(render(used, style))
    if s is not None:
        out["text"] += (" σ is the total: statistical and systematic in quadrature (see the "
                        "systematic budget)." if style != "latex" else
                        r" $\sigma$ is the total: statistical and systematic in quadrature "
                        "(see the systematic budget).")
    blinded = fit.blinding is not None and fit.blinding.blinded
    if blinded:
        out["text"] = (latex_escape(BLINDED_BANNER) if style == "latex" else BLINDED_BANNER) \
            + " " + out["text"]
    return {**out, "sigma": "total" if s is not None else "statistical", "blinded": blinded}


def _channel_lines(fit) -> list[str]:
    out = []
    for ch, d in fit.systematics.channels.items():
        a = d["coupling"]
        harm = ", ".join(f"{n} {v:.3g}" for n, v in zip(d["harmonics"]["names"],
                                                        d["harmonics"]["value"]))
        out.append(f"Channel {ch}: coupling {a['value']:.4g} ± {a['sigma']:.2g} "
                   f"{fit.units}/{d['units']}; its own 2θ harmonics ({d['units']}): {harm}.")
    return out


def _blinding_text(fit) -> list[str]:
    b = fit.blinding
    if b is None:
        return []
    if b.blinded:
        return [b.sentence() + "; fringe unblind with the key removes the offsets once."]
    return [b.sentence() + "."]


def budget_markdown(fit) -> list[str]:
    """report.md lines: the blinding statement, the budget table, the limits, the channels."""
    out = [f"> **{t}**\n" for t in _blinding_text(fit)]
    table = budget_table(fit)
    if table is None:
        return out
    out += ["## Systematic budget", "", to_markdown(table), "Limits with statistical and "
            "systematic uncertainties:", ""]
    out += [f"- {line}" for line in limit_lines(fit)] + [""]
    out += [f"{line}\n" for line in _channel_lines(fit)]
    return out


def budget_html(fit) -> list[tuple[str, str]]:
    """report.html sections (title, HTML body)."""
    out = [("Blinding", "".join(f"<p><strong>{html_text(t)}</strong></p>"
                                for t in _blinding_text(fit)))] if fit.blinding else []
    table = budget_table(fit)
    if table is not None:
        body = to_html(table) + "<ul>" + "".join(
            f"<li>{html_text(x)}</li>" for x in limit_lines(fit)) + "</ul>" + "".join(
            f"<p>{html_text(x)}</p>" for x in _channel_lines(fit))
        out.append(("Systematic budget", body))
    return out


def budget_latex(fit) -> list[str]:
    """report.tex lines: the blinding statement, the budget table and the limits."""
    out = [r"\paragraph{" + latex_escape(t) + "}" for t in _blinding_text(fit)]
    table = budget_table(fit, "latex")
    if table is None:
        return out
    return out + [to_latex(table), r"\begin{itemize}"] + [
        r"\item " + x for x in limit_lines(fit, "latex")] + [r"\end{itemize}"]


def budget_summary(fit) -> dict:
    """summary.json fields: ``blinded`` and ``systematics`` (the budget), when present."""
    out = {"blinded": bool(fit.blinding is not None and fit.blinding.blinded)}
    if fit.systematics is not None:
        out["systematics"] = fit.systematics.to_dict()
    return out
