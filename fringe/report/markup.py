"""Names of coefficients and harmonics as HTML: one function for every HTML text of a report.

:func:`coefficient_html` gives the symbol of one coefficient name (``ke_XY`` ->
κ̃<sub>e−</sub><sup>XY</sup>, with the name itself as the tooltip); :func:`html_text` escapes a
plain (Unicode) text and marks up, in one pass, every coefficient name, harmonic name (``C0``,
``Bs1``: C<sub>0</sub>, B<sub>s1</sub>), the theory symbols κ̃_e−, κ̃_o+, κ̃_tr and single-letter
subscripts such as ``h_S``, ``α_M``, ``v_sun`` in it. The page, its tables, captions, headline,
warnings and notes all go through :func:`html_text`, so no underscore of a subscript reaches
the reader.
"""

from __future__ import annotations

import html
import re

__all__ = ["coefficient_html", "html_text"]

_KAPPA = "κ\u0303"
_BASES = {"ke": f"{_KAPPA}<sub>e−</sub>", "ko": f"{_KAPPA}<sub>o+</sub>", "cq": "c"}
_FIXED = {"ktr": f"{_KAPPA}<sub>tr</sub>", "rms_mm": "δ − β + ½", "rms_kt": "β − α − 1"}
_SYMBOLS = {f"{_KAPPA}_e−": f"{_KAPPA}<sub>e−</sub>", f"{_KAPPA}_o+": f"{_KAPPA}<sub>o+</sub>",
            f"{_KAPPA}_tr": f"{_KAPPA}<sub>tr</sub>"}

_PATTERN = re.compile(
    r"(?P<coef>\b(?:ke|ko|cq)_(?:XY|XZ|YZ|XXmYY|ZZ)\b|\bktr\b|\brms_(?:mm|kt)\b"
    r"|\bsun_v[XYZ]_kms\b)"
    r"|(?P<harm>\b[CB](?:0|[sc][12])\b)"
    r"|(?P<sym>" + "|".join(re.escape(s) for s in _SYMBOLS) + r")"
    r"|(?P<sub>(?<![\w.])[A-Za-zα-ωΑ-Ω]_(?:[A-Za-z0-9]{1,4}|⊕)(?![\w(]))")


def coefficient_html(name: str) -> str:
    """HTML symbol of a coefficient name (the name itself, escaped, when it has no symbol).

    ``ke_XY`` -> ``κ̃<sub>e−</sub><sup>XY</sup>``, ``ke_XXmYY`` -> ``...<sup>XX−YY</sup>``,
    ``ko_XZ`` -> ``κ̃<sub>o+</sub><sup>XZ</sup>``, ``ktr`` -> ``κ̃<sub>tr</sub>``,
    ``cq_ZZ`` -> ``c<sup>ZZ</sup>``, ``rms_mm`` -> ``δ − β + ½``, ``sun_vX_kms`` ->
    ``v<sub>X</sub>`` (km/s); wrapped in ``<span class="coef" title="NAME">`` so the name one
    types stays visible as a tooltip.
    """
    m = re.fullmatch(r"(ke|ko|cq)_(XY|XZ|YZ|XXmYY|ZZ)", name)
    if m:
        symbol = f"{_BASES[m.group(1)]}<sup>{m.group(2).replace('XXmYY', 'XX−YY')}</sup>"
    elif name in _FIXED:
        symbol = _FIXED[name]
    elif re.fullmatch(r"sun_v[XYZ]_kms", name):
        symbol = f"v<sub>{name[5]}</sub>"
    else:
        return html.escape(name)
    return f'<span class="coef" title="{html.escape(name)}">{symbol}</span>'


def _harmonic_html(name: str) -> str:
    return f"{name[0]}<sub>{name[1:]}</sub>"


def _replace(m: re.Match) -> str:
    if m.group("coef"):
        return coefficient_html(m.group("coef"))
    if m.group("harm"):
        return _harmonic_html(m.group("harm"))
    if m.group("sym"):
        return _SYMBOLS[m.group("sym")]
    base, sub = m.group("sub").split("_", 1)
    return f"{base}<sub>{sub}</sub>"


def html_text(text: str) -> str:
    """Plain (Unicode) text as HTML: escaped, with names and subscripts marked up.

    Markup is added only around whole words (a name inside a longer identifier such as
    ``lab_C0`` or ``model_C`` is left as it is), and the escaping comes first, so the result is
    safe for any input text.
    """
    return _PATTERN.sub(_replace, html.escape(str(text), quote=False))
