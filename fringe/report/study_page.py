"""The short report of a study: a Markdown page and an HTML page with its figures.

:func:`study_markdown` and :func:`study_html` turn study.json's content (a dict) into text; the
figures (:mod:`fringe.report.figures.study`) are named by the caller, which writes them.
"""

from __future__ import annotations

import html

from fringe.report.markup import html_text

__all__ = ["study_html", "study_markdown", "study_tables"]


def _pct(d: dict) -> str:
    flag = " ⚠" if abs(d["z"]) > 3 else ""
    return f"{100 * d['value']:.1f} ± {100 * d['binomial_sigma']:.1f}{flag}"


def _g(x) -> str:
    """A sigma with three significant digits, trailing zeros kept (9.60e-18)."""
    return "—" if x is None else f"{x:.2e}"


def _ratio(x) -> str:
    return "—" if x is None else f"{x:.3f}"


def _row_title(row: dict) -> str:
    v = row["vary"]
    head = "" if v is None else f"{v['field']} = {v['value']:g} {v['unit']}: "
    return (f"{head}{row['n_campaigns'] - row['n_failed']} of {row['n_campaigns']} campaigns "
            f"fitted; pulls against the {row['pulls_against']}")


def study_tables(study: dict) -> list[tuple[str, list[str], list[list[str]]]]:
    """(title, header, rows of cells) of each grid row's table."""
    header = ["coefficient", "N", "pull mean", "pull std", "≤ 1σ (%)", "≤ 1.96σ (%)",
              "median σ", "forecast σ", "efficiency (coloured)", "efficiency (white)"]
    out = []
    for row in study["rows"]:
        cells = []
        for name, c in row["coefficients"].items():
            cells.append([name, str(c["n"]),
                          f"{c['pull_mean']['value']:+.3f} ± {c['pull_mean']['uncertainty']:.3f}",
                          f"{c['pull_std']['value']:.3f} ± {c['pull_std']['uncertainty']:.3f}",
                          _pct(c["coverage_68"]), _pct(c["coverage_95"]),
                          _g(c["sigma_median"]), _g(c["sigma_forecast"]),
                          _ratio(c["efficiency_coloured"]), _ratio(c["efficiency_white"])])
        out.append((_row_title(row), header, cells))
    return out


def _intro(study: dict) -> list[str]:
    fit = study["fit"]
    return [f"Scenario {study['scenario']} ({study['title']}); mode {study['mode']}; "
            f"{study['campaigns_per_row']} campaigns per row; master seed "
            f"{study['master_seed']}; theory {fit['theory']}, uncertainty "
            f"{fit['uncertainty']}" + (f"; truth drawn from N(0, ({study['inject_sigma']:g} "
                                       "σ_forecast)²)" if study["inject_sigma"] else "") + ".",
            "Coverage: fraction of campaigns whose interval holds the reference (expected "
            "68.27 % and 95.00 %); ± is the binomial standard deviation for that N, ⚠ marks "
            "more than 3 of them away. Efficiency (coloured) = forecast σ / median σ, the "
            "forecast being the Fisher bound of the scenario's noise model; efficiency (white) "
            "= median of each fit's white-noise Cramér–Rao ratio."]


def _failures(study: dict) -> list[str]:
    out = []
    for row in study["rows"]:
        for f in row["failures"]:
            out.append(f"campaign {f['index']} (simulation seed {f['seeds']['simulation']}): "
                       f"{f['error']}")
    return out


def study_markdown(study: dict, figures: list[str]) -> str:
    """The Markdown page: the settings, one table per grid row, failures, the figures."""
    lines = [f"# Study: {study['title'] or study['scenario']}", ""] + \
        [p + "\n" for p in _intro(study)]
    for title, header, cells in study_tables(study):
        lines += [f"## {title}", "", "| " + " | ".join(header) + " |",
                  "|" + "---|" * len(header)]
        lines += ["| " + " | ".join(c) + " |" for c in cells] + [""]
    fails = _failures(study)
    if fails:
        lines += ["## Failed campaigns", ""] + [f"- {f}" for f in fails] + [""]
    lines += [f"![{f}]({f})" for f in figures]
    return "\n".join(lines) + "\n"


_STYLE = ("body{font-family:sans-serif;max-width:72em;margin:1em auto;padding:0 1em}"
          "table{border-collapse:collapse}td,th{border:1px solid #bbb;padding:2px 6px;"
          "text-align:right}td:first-child{text-align:left}img{max-width:100%}")


def study_html(study: dict, figures: list[str]) -> str:
    """The HTML page (one file; the figures beside it)."""
    e = html.escape
    parts = [f"<!DOCTYPE html><html><head><meta charset='utf-8'><title>{e(study['scenario'])}"
             f"</title><style>{_STYLE}</style></head><body>",
             f"<h1>Study: {e(study['title'] or study['scenario'])}</h1>"]
    parts += [f"<p>{e(p)}</p>" for p in _intro(study)]
    for title, header, cells in study_tables(study):
        parts.append(f"<h2>{e(title)}</h2><table><tr>"
                     + "".join(f"<th>{e(h)}</th>" for h in header) + "</tr>")
        # the coefficient as its symbol (the name in its tooltip), as the fit's report shows it
        parts += ["<tr>" + f"<td>{html_text(row[0])}</td>"
                  + "".join(f"<td>{e(c)}</td>" for c in row[1:]) + "</tr>" for row in cells]
        parts.append("</table>")
    fails = _failures(study)
    if fails:
        parts.append("<h2>Failed campaigns</h2><ul>"
                     + "".join(f"<li>{e(f)}</li>" for f in fails) + "</ul>")
    parts += [f"<p><img src='{e(f)}' alt='{e(f)}'></p>" for f in figures]
    return "\n".join(parts + ["</body></html>"]) + "\n"
