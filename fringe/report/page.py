"""One self-contained HTML page: inline CSS, figures as base64 PNG data URIs, no scripts.

:func:`html_page` assembles the page from already-rendered pieces (tables from
:func:`fringe.report.tables.to_html`, PNG bytes of the figures). The page references nothing
outside itself -- no external style sheet, script, font or image, no link -- so it opens from a
file in any browser, with no server and no network.
"""

from __future__ import annotations

import base64
import html
from collections.abc import Mapping, Sequence

__all__ = ["CSS", "html_page", "png_data_uri"]

CSS = """
body { font-family: Georgia, 'DejaVu Serif', serif; max-width: 62em; margin: 2em auto;
       padding: 0 1em; color: #222; line-height: 1.45; }
h1 { font-size: 1.5em; border-bottom: 2px solid #444; padding-bottom: .2em; }
h2 { font-size: 1.2em; margin-top: 1.8em; border-bottom: 1px solid #bbb; }
.headline { font-size: 1.1em; background: #eef4fb; border-left: 5px solid #2a6fb0;
            padding: .6em 1em; }
.warnings { background: #fff1e6; border: 2px solid #d9480f; padding: .5em 1em;
            margin: 1em 0; }
.warnings h2 { color: #b23c0b; border: none; margin-top: .2em; }
.notes { color: #555; font-size: .92em; }
table { border-collapse: collapse; margin: .8em 0; font-size: .92em; }
caption { caption-side: top; text-align: left; font-style: italic; padding-bottom: .3em; }
th, td { border: 1px solid #ccc; padding: .25em .6em; text-align: center; }
th { background: #f2f2f2; }
td:first-child, th:first-child { text-align: left; font-family: 'DejaVu Sans Mono', monospace; }
figure { margin: 1.2em 0; }
figure img { max-width: 100%; border: 1px solid #ddd; }
figcaption { font-size: .9em; color: #333; }
dl.prov dt { font-weight: bold; margin-top: .4em; }
dl.prov dd { margin-left: 1.5em; font-family: 'DejaVu Sans Mono', monospace;
             font-size: .85em; white-space: pre-wrap; word-break: break-all; }
"""


def png_data_uri(png: bytes) -> str:
    """``data:image/png;base64,...`` of PNG bytes."""
    if not png.startswith(b"\x89PNG\r\n\x1a\n"):
        raise ValueError("png_data_uri: expected PNG bytes")
    return "data:image/png;base64," + base64.b64encode(png).decode("ascii")


def _provenance(prov: Mapping) -> str:
    import json

    rows = []
    for key, value in prov.items():
        text = value if isinstance(value, str) else json.dumps(value, indent=1,
                                                               ensure_ascii=False)
        rows.append(f"<dt>{html.escape(str(key))}</dt><dd>{html.escape(text)}</dd>")
    return '<dl class="prov">' + "\n".join(rows) + "</dl>"


def html_page(*, title: str, headline: str, warnings: Sequence[str], notes: Sequence[str],
              sections: Sequence[tuple[str, str]], figures: Sequence[tuple[str, str, bytes]],
              provenance: Mapping) -> str:
    """The report as one HTML document.

    Parameters
    ----------
    title : str
        Page title and heading (plain text).
    headline : str
        The headline statement (plain text).
    warnings : sequence of str
        Every warning the fit raised (plain text), shown in a box right under the headline.
    notes : sequence of str
        Remarks of the report itself (plain text).
    sections : sequence of (heading, html)
        Headings (plain text) and already-rendered HTML bodies (trusted: built by fringe).
    figures : sequence of (name, caption, png_bytes)
        Embedded as data URIs, in order.
    provenance : mapping
        Shown as a definition list (values as text or JSON).
    """
    e = html.escape
    out = ["<!DOCTYPE html>", '<html lang="en">', "<head>", '<meta charset="utf-8">',
           f"<title>{e(title)}</title>", f"<style>{CSS}</style>", "</head>", "<body>",
           f"<h1>{e(title)}</h1>", f'<p class="headline">{e(headline)}</p>']
    if warnings:
        out.append('<div class="warnings">')
        out.append(f"<h2>&#9888; Warnings raised by the fit ({len(warnings)})</h2><ul>")
        out += [f"<li>{e(w)}</li>" for w in warnings]
        out.append("</ul></div>")
    else:
        out.append('<p class="notes">The fit raised no warnings.</p>')
    if notes:
        out.append('<ul class="notes">' + "".join(f"<li>{e(n)}</li>" for n in notes) + "</ul>")
    for heading, body in sections:
        out += [f"<h2>{e(heading)}</h2>", body]
    if figures:
        out.append("<h2>Figures</h2>")
        for i, (name, caption, png) in enumerate(figures, start=1):
            out.append(f'<figure id="fig-{e(name)}"><img alt="{e(name)}" '
                       f'src="{png_data_uri(png)}">'
                       f"<figcaption><b>Figure {i}.</b> {e(caption)}</figcaption></figure>")
    out += ["<h2>Provenance</h2>", _provenance(provenance), "</body>", "</html>"]
    return "\n".join(out) + "\n"
