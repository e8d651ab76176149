"""One self-contained HTML page: inline CSS, figures as base64 PNG data URIs, no scripts.

:func:`html_page` assembles the page from already-rendered pieces (tables from
:func:`fringe.report.tables.to_html`, PNG bytes of the figures). The page references nothing
outside itself -- no external style sheet, script, font or image, no link -- so it opens from a
file in any browser, with no server and no network. Every text goes through
:func:`fringe.report.markup.html_text` (coefficient names as symbols, subscripts as
``<sub>``); each figure is as wide as its image at 96 px per inch, but at least 36 em (a
column-width figure is scaled up so that its labels read on a screen and its caption is not a
narrow column) and never wider than the page, and its caption is as wide as the figure; a
table's caption is a paragraph above it, as wide as the text, and its cells do not wrap (a
table wider than a narrow window scrolls in its own box); the provenance is a table of
key/value rows with the raw record (JSON) in a ``<details>`` block under it; a print style
sheet lays the page out for paper (no overflow, images to the page width, figures and tables
not split across pages).
"""

from __future__ import annotations

import base64
import html
import json
import struct
from collections.abc import Mapping, Sequence

from fringe.report.markup import html_text

__all__ = ["CSS", "html_page", "png_css_width", "png_data_uri", "provenance_entries",
           "provenance_rows"]

CSS = """
body { font-family: Georgia, 'DejaVu Serif', serif; max-width: 62em; margin: 2em auto;
       padding: 0 1em; color: #222; line-height: 1.45; overflow-wrap: break-word; }
h1 { font-size: 1.5em; border-bottom: 2px solid #444; padding-bottom: .2em; }
h2 { font-size: 1.2em; margin-top: 1.8em; border-bottom: 1px solid #bbb; }
.headline { font-size: 1.1em; background: #eef4fb; border-left: 5px solid #2a6fb0;
            padding: .6em 1em; }
.warnings { background: #fff1e6; border: 2px solid #d9480f; padding: .5em 1em;
            margin: 1em 0; }
.warnings h2 { color: #b23c0b; border: none; margin-top: .2em; }
.notes { color: #555; font-size: .92em; }
.wide { max-width: 100%; overflow-x: auto; }
table { border-collapse: collapse; margin: .8em 0; font-size: .92em; }
p.caption { font-style: italic; max-width: 48em; margin: .8em 0 .3em; }
p.caption + table { margin-top: 0; }
th, td { border: 1px solid #ccc; padding: .25em .6em; text-align: center;
         white-space: nowrap; }
th { background: #f2f2f2; }
td:first-child, th:first-child { text-align: left; }
.coef { white-space: nowrap; }
sub, sup { line-height: 0; }
figure { margin: 1.4em 0; max-width: 100%; min-width: min(100%, 36em); }
figure img { display: block; width: 100%; height: auto; border: 1px solid #ddd; }
figcaption { font-size: .9em; color: #333; margin-top: .4em; }
table.prov { width: 100%; table-layout: fixed; }
table.prov th { width: 14em; text-align: left; vertical-align: top; background: #f7f7f7;
                font-weight: bold; }
table.prov th, table.prov td { white-space: normal; }
table.prov td { text-align: left; vertical-align: top; font-size: .9em; }
table.prov code { font-family: 'DejaVu Sans Mono', monospace; font-size: .92em;
                  word-break: break-all; }
details { margin: .8em 0; }
details summary { cursor: pointer; color: #2a6fb0; }
details pre { font-size: .8em; background: #f7f7f7; padding: .6em; white-space: pre-wrap;
              word-break: break-all; }
@media print {
  @page { margin: 15mm; }
  body { max-width: none; margin: 0; padding: 0; font-size: 10pt; color: #000; }
  .wide { overflow: visible; }
  table { font-size: 8.5pt; }
  figure { max-width: 100% !important; }
  figure img { max-width: 100%; }
  figure, table, .headline, .warnings, tr { break-inside: avoid; page-break-inside: avoid; }
  p.caption { break-after: avoid; page-break-after: avoid; }
  h1, h2 { break-after: avoid; page-break-after: avoid; }
  .headline, .warnings, th { -webkit-print-color-adjust: exact; print-color-adjust: exact; }
  details summary { color: #000; }
  details:not([open]) { display: none; }
}
"""


def png_data_uri(png: bytes) -> str:
    """``data:image/png;base64,...`` of PNG bytes."""
    if not png.startswith(b"\x89PNG\r\n\x1a\n"):
        raise ValueError("png_data_uri: expected PNG bytes")
    return "data:image/png;base64," + base64.b64encode(png).decode("ascii")


def png_css_width(png: bytes) -> int:
    """Width of a PNG on the page, CSS px: pixel width at 96 px per inch of its pHYs density.

    A PNG without a density chunk (or with one not in pixels per metre) counts as 96 dpi.
    """
    if not png.startswith(b"\x89PNG\r\n\x1a\n") or png[12:16] != b"IHDR":
        raise ValueError("png_css_width: expected PNG bytes")
    width = struct.unpack(">I", png[16:20])[0]
    pos = 8
    while pos + 8 <= len(png):
        length, kind = struct.unpack(">I4s", png[pos:pos + 8])
        if kind == b"pHYs" and length == 9:
            ppm_x, _, unit = struct.unpack(">IIB", png[pos + 8:pos + 17])
            if unit == 1 and ppm_x > 0:
                return max(1, round(width * 96 / (ppm_x * 0.0254)))
            break
        if kind in (b"IDAT", b"IEND"):
            break
        pos += 12 + length
    return width


def _short(x) -> str:
    """A provenance value as readable text: floats to 6 significant digits."""
    if isinstance(x, float):
        return f"{x:.6g}"
    if isinstance(x, (list, tuple)):
        return ", ".join(_short(v) for v in x) if x else "none"
    if x is None or (isinstance(x, (str, Mapping)) and not x):
        return "—"
    return str(x)


def provenance_entries(prov: Mapping) -> list[tuple[str, str, object]]:
    """The provenance record as readable entries ``(key, kind, content)``, for any document.

    ``kind`` "file": a file record ``{"path", "sha256"}``, content ``(path, sha256)``;
    "lines": any other mapping, content one ``(key, text)`` per entry (a nested mapping inline
    as ``k = v; ...``); "text": anything else as text (a list's items joined by commas).
    Floats show 6 significant digits (the raw record, summary.json, keeps every digit).
    """
    out = []
    for key, value in prov.items():
        if isinstance(value, Mapping) and set(value) == {"path", "sha256"}:
            out.append((str(key), "file", (str(value["path"]), str(value["sha256"]))))
        elif isinstance(value, Mapping):
            out.append((str(key), "lines", [
                (str(k), "; ".join(f"{kk} = {_short(vv)}" for kk, vv in v.items())
                 if isinstance(v, Mapping) else _short(v)) for k, v in value.items()]))
        else:
            out.append((str(key), "text", _short(value)))
    return out


def provenance_rows(prov: Mapping) -> list[tuple[str, str]]:
    """(key, HTML) rows of the provenance table (:func:`provenance_entries`).

    A file record shows as the path and its hash; a mapping as one ``key: value`` line per
    entry; anything else as text.
    """
    rows = []
    for key, kind, content in provenance_entries(prov):
        # the conventions define the names one types (rms_mm = delta - beta + 1/2): shown as
        # typed, not turned into their symbols
        conventions = key.startswith("conventions")
        if kind == "file":
            path, digest = content
            cell = f"{html_text(path)}<br>sha256 <code>{html.escape(digest)}</code>"
        elif kind == "lines":
            cell = "<br>".join(f"<b>{html_text(k)}</b>: "
                               f"{html_text(text, names_as_typed=conventions)}"
                               for k, text in content) or "—"
        else:
            cell = html_text(content)
        rows.append((key, cell))
    return rows


def _provenance(prov: Mapping) -> str:
    body = "".join(f"<tr><th>{html_text(k)}</th><td>{cell}</td></tr>"
                   for k, cell in provenance_rows(prov))
    raw = html.escape(json.dumps(plain_json(prov), indent=1, ensure_ascii=False), quote=False)
    return (f'<table class="prov"><tbody>{body}</tbody></table>'
            '<details id="provenance-raw"><summary>The raw provenance record (JSON, as in '
            f"summary.json)</summary><pre>{raw}</pre></details>")


def plain_json(value):
    """``value`` with tuples as lists (what json.dumps writes anyway), for the raw record."""
    if isinstance(value, Mapping):
        return {str(k): plain_json(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [plain_json(v) for v in value]
    return value


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
        Embedded as data URIs, in order; captions are plain text.
    provenance : mapping
        Shown as a key/value table, with the raw record (JSON) in a ``<details>`` block.
    """
    e, t = html.escape, html_text
    out = ["<!DOCTYPE html>", '<html lang="en">', "<head>", '<meta charset="utf-8">',
           '<meta name="viewport" content="width=device-width, initial-scale=1">',
           f"<title>{e(title)}</title>", f"<style>{CSS}</style>", "</head>", "<body>",
           f"<h1>{t(title)}</h1>", f'<p class="headline">{t(headline)}</p>']
    if warnings:
        out.append('<div class="warnings">')
        out.append(f"<h2>&#9888; Warnings raised by the fit ({len(warnings)})</h2><ul>")
        out += [f"<li>{t(w)}</li>" for w in warnings]
        out.append("</ul></div>")
    else:
        out.append('<p class="notes">The fit raised no warnings.</p>')
    if notes:
        out.append('<ul class="notes">' + "".join(f"<li>{t(n)}</li>" for n in notes) + "</ul>")
    for heading, body in sections:
        out += [f"<h2>{t(heading)}</h2>", f'<div class="wide">{body}</div>']
    if figures:
        out.append("<h2>Figures</h2>")
        for i, (name, caption, png) in enumerate(figures, start=1):
            out.append(f'<figure id="fig-{e(name)}" style="width: {png_css_width(png)}px">'
                       f'<img alt="Figure {i}: {e(name)}" src="{png_data_uri(png)}">'
                       f"<figcaption><b>Figure {i}.</b> {t(caption)}</figcaption></figure>")
    out += ["<h2>Provenance</h2>", _provenance(provenance), "</body>", "</html>"]
    return "\n".join(out) + "\n"
