"""The report's runs section for a joint fit or a combination (a result with ``runs``).

* :func:`runs_table`: one row per run: file, site (latitude), apparatus kind, accepted turns, its
  own reduced chi^2, delta chi^2 at the joint values, and its share of each coefficient's
  Fisher information;
* :func:`sigma_table`: each coefficient's sigma from each run alone and jointly;
* :func:`runs_markdown`, :func:`runs_html`, :func:`runs_latex`, :func:`runs_summary`: the
  section of report.md, report.html, report.tex and the field of summary.json.

A result without ``runs`` (a fit of one run file) gives no section.
"""

from __future__ import annotations

import html

from fringe.report.markup import latex_escape
from fringe.report.tables import (
    Table,
    coefficient_label,
    to_html,
    to_latex,
    to_markdown,
)

__all__ = ["runs_html", "runs_latex", "runs_markdown", "runs_summary", "runs_table",
           "sigma_table"]


def _site(site) -> str:
    name = site.get("name") or "?"
    lat = site.get("latitude_deg")
    return f"{name}, {lat:+.2f}°" if isinstance(lat, (int, float)) else str(name)


def runs_table(fit, style: str = "unicode") -> Table | None:
    """The runs of a joint result (None for a fit of one run file)."""
    if fit.runs is None:
        return None
    names = list(fit.coefficients)
    header = ("run", "file", "site", "apparatus", "turns", "χ²/dof", "Δχ²") + tuple(
        f"info {coefficient_label(n, style)}" for n in names)
    if style == "latex":
        header = tuple(h.replace("χ²", "$\\chi^2$").replace("Δ", "$\\Delta$")
                       .replace("$$", "") for h in header)
    text = latex_escape if style == "latex" else str       # file and site names as given
    rows = tuple((r.label, text(r.path), text(_site(r.site)),
                  text(str(r.apparatus.get("kind", "?"))), str(r.n_turns),
                  f"{r.chi2_reduced:.3f}", f"{r.delta_chi2:.3g}")
                 + tuple(f"{r.information_fraction.get(n, float('nan')):.3f}" for n in names)
                 for r in fit.runs.runs)
    a = fit.runs.agreement
    p = a.get("p_value")
    agree = (f"; agreement of the runs χ² = {a['chi2']:.3g} for {a['dof']} dof (p = {p:.3g})"
             if isinstance(p, float) and p == p else "")
    caption = (f"Runs of the {fit.runs.method}: each run's own reduced χ² (its scaling), Δχ² of "
               "the joint values in the run's own uncertainties, and its share of each "
               f"coefficient's Fisher information (the columns sum to 1){agree}.")
    return Table(header, rows, caption=caption, label="tab:runs", style=style)


def sigma_table(fit, style: str = "unicode") -> Table | None:
    """Each coefficient's 1 sigma from each run alone and from all jointly (None without runs)."""
    if fit.runs is None:
        return None
    runs = fit.runs.runs
    header = ("coefficient",) + tuple(f"σ {r.label}" for r in runs) + ("σ joint",)
    if style == "latex":
        header = tuple(h.replace("σ", "$\\sigma$") for h in header)
    rows = tuple((coefficient_label(n, style),) + tuple(
        f"{r.alone[n].sigma:.3g}" if n in r.alone else "-" for r in runs)
        + (f"{e.sigma:.3g}",) for n, e in fit.coefficients.items())
    return Table(header, rows, caption="1σ of each coefficient from each run alone and from "
                 "the runs jointly.", label="tab:runs-sigma", style=style)


def runs_markdown(fit) -> list[str]:
    """report.md lines of the runs section (none for a fit of one run file)."""
    table = runs_table(fit)
    if table is None:
        return []
    return ["## Runs", "", to_markdown(table), to_markdown(sigma_table(fit))]


def runs_html(fit) -> list[tuple[str, str]]:
    """report.html sections (title, HTML body) of the runs (none for one run file)."""
    table = runs_table(fit)
    if table is None:
        return []
    kinds = sorted({str(r.apparatus.get("kind", "?")) for r in fit.runs.runs})
    lead = (f"<p>{html.escape(fit.runs.method.capitalize())} of {len(fit.runs.runs)} runs "
            f"({html.escape(', '.join(kinds))}); the runs are taken as independent.</p>")
    return [("Runs", lead + to_html(table) + to_html(sigma_table(fit)))]


def runs_latex(fit) -> list[str]:
    """report.tex lines of the runs section (none for one run file)."""
    table = runs_table(fit, "latex")
    if table is None:
        return []
    return [to_latex(table), to_latex(sigma_table(fit, "latex"))]


def runs_summary(fit) -> dict:
    """summary.json field ``runs`` (the result's runs part without the likelihoods)."""
    if fit.runs is None:
        return {}
    out = fit.runs.to_dict()
    for r in out["runs"]:
        r.pop("likelihood", None)
    return {"runs": out}
