r"""Names of coefficients and harmonics as HTML: one function for every HTML text of a report.

:func:`coefficient_html` gives the symbol of one coefficient name (``ke_XY`` ->
κ̃<sub>e−</sub><sup>XY</sup>, with the name itself as the tooltip); :func:`html_text` escapes a
plain (Unicode) text and marks up, in one pass, every coefficient name, harmonic name (``C0``,
``Bs1``: C<sub>0</sub>, B<sub>s1</sub>), the theory symbols κ̃_e−, κ̃_o+, κ̃_tr and single-letter
subscripts such as ``h_S``, ``α_M``, ``v_sun`` in it. The page, its tables, captions, headline,
warnings and notes all go through :func:`html_text`, so no underscore of a subscript reaches
the reader.

:func:`markdown_text` does the same for report.md with forms that read well both as plain text
and rendered: κ̃_e− -> κ̃ₑ₋, and a subscript as Unicode subscript characters when each of its
characters has one (``v_sun`` -> vₛᵤₙ, ``A_1`` -> A₁), otherwise as ``<sub>`` (``ω_R`` ->
ω<sub>R</sub>, which GitHub-flavoured Markdown and pandoc render). Coefficient names
(``ke_XY``) are identifiers the user types and stay as they are. :func:`latex_text` makes a
plain text LaTeX: escaped (:func:`latex_escape` rules), with the theory
symbols and subscripts as math (``$\tilde{\kappa}_{e-}$``, ``$\omega_{\mathrm{R}}$``).
"""

from __future__ import annotations

import html
import re

__all__ = ["coefficient_html", "html_text", "join_math", "latex_escape", "latex_text",
           "markdown_text", "terminal_text"]

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
    r"|(?P<sub>(?<![A-Za-zα-ωΑ-Ω_.])[A-Za-zα-ωΑ-Ω]_(?:[A-Za-z0-9]{1,4}|⊕)(?![\w(]))")


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


def html_text(text: str, *, names_as_typed: bool = False) -> str:
    """Plain (Unicode) text as HTML: escaped, with names and subscripts marked up.

    Markup is added only around whole words (a name inside a longer identifier such as
    ``lab_C0`` or ``model_C`` is left as it is), and the escaping comes first, so the result is
    safe for any input text. ``names_as_typed``: coefficient names stay as one types them (a
    text that defines them, ``rms_mm = delta - beta + 1/2``); subscripts are still marked up.
    """
    def replace(m: re.Match) -> str:
        return m.group(0) if names_as_typed and m.group("coef") else _replace(m)

    return _PATTERN.sub(replace, html.escape(str(text), quote=False))


# ----------------------------------------------------------------------------- Markdown

#: Unicode subscript characters (those that exist: digits, signs and 17 small letters).
_UNICODE_SUB = dict(zip("0123456789+−-=()aehijklmnoprstuvx",
                        "₀₁₂₃₄₅₆₇₈₉₊₋₋₌₍₎ₐₑₕᵢⱼₖₗₘₙₒₚᵣₛₜᵤᵥₓ", strict=True))
_MD_PATTERN = re.compile(
    r"(?P<sym>" + "|".join(re.escape(s) for s in _SYMBOLS) + r")"
    r"|(?P<sub>(?<![A-Za-zα-ωΑ-Ω_.])[A-Za-zα-ωΑ-Ω]_(?:[A-Za-z0-9]{1,4}|⊕)(?![\w(]))")


def _unicode_sub(sub: str) -> str | None:
    """``sub`` in Unicode subscript characters, or None when one of them has none."""
    if all(ch in _UNICODE_SUB for ch in sub):
        return "".join(_UNICODE_SUB[ch] for ch in sub)
    return None


def _md_replace(m: re.Match) -> str:
    base, sub = (m.group("sym") or m.group("sub")).split("_", 1)
    uni = _unicode_sub(sub)
    return base + (uni if uni is not None else f"<sub>{sub}</sub>")


def markdown_text(text: str) -> str:
    """Plain (Unicode) text for report.md: theory symbols and subscripts without underscores.

    ``κ̃_e−`` -> ``κ̃ₑ₋``, ``κ̃_tr`` -> ``κ̃ₜᵣ``, ``v_sun`` -> ``vₛᵤₙ``, ``ω_R`` ->
    ``ω<sub>R</sub>`` (no Unicode subscript R). Whole words only, as :func:`html_text`:
    ``ke_XY``, ``lab_C0`` and ``C_model`` are names and stay as they are.
    """
    return _MD_PATTERN.sub(_md_replace, str(text))


def _terminal_replace(m: re.Match) -> str:
    base, sub = (m.group("sym") or m.group("sub")).split("_", 1)
    uni = _unicode_sub(sub)
    return m.group(0) if uni is None else base + uni


def terminal_text(text: str) -> str:
    """Plain text for a terminal: Unicode subscripts where they exist, else the underscore.

    As :func:`markdown_text`, but a subscript without Unicode subscript characters keeps its
    underscore (``κ̃_e−`` -> ``κ̃ₑ₋``, ``ω_R`` stays).
    """
    return _MD_PATTERN.sub(_terminal_replace, str(text))


# -------------------------------------------------------------------------------- LaTeX

_LATEX_SPECIAL = {"\\": r"\textbackslash{}", "&": r"\&", "%": r"\%", "$": r"\$", "#": r"\#",
                  "_": r"\_", "{": r"\{", "}": r"\}", "~": r"\textasciitilde{}",
                  "^": r"\textasciicircum{}", "<": r"$<$", ">": r"$>$", "|": r"$|$"}
_LATEX_UNICODE = {"±": r"$\pm$", "−": "-", "×": r"$\times$", "σ": r"$\sigma$",
                  "χ": r"$\chi$", "²": r"$^2$", "θ": r"$\theta$", "φ": r"$\phi$",
                  "ω": r"$\omega$", "α": r"$\alpha$", "β": r"$\beta$", "δ": r"$\delta$",
                  "κ": r"$\kappa$", "ν": r"$\nu$", "λ": r"$\lambda$", "Δ": r"$\Delta$",
                  "≤": r"$\le$", "≥": r"$\ge$",
                  "≈": r"$\approx$", "½": r"$\frac{1}{2}$", "°": r"$^\circ$", "µ": r"$\mu$",
                  "–": "--", "—": "---", "’": "'", "“": "``", "”": "''", "…": r"\ldots{}",
                  "⊕": r"$\oplus$", "τ": r"$\tau$", "ρ": r"$\rho$", "π": r"$\pi$",
                  "μ": r"$\mu$", "γ": r"$\gamma$", "ε": r"$\epsilon$", "η": r"$\eta$",
                  "ψ": r"$\psi$", "Ω": r"$\Omega$", "√": r"$\surd$", "∝": r"$\propto$",
                  "→": r"$\to$", "∞": r"$\infty$", "≠": r"$\ne$", "·": r"$\cdot$",
                  "\u0303": ""}
_SUPERSCRIPTS = dict(zip("⁰¹²³⁴⁵⁶⁷⁸⁹⁻⁺", "0123456789-+", strict=True))
#: Runs LaTeX writes as one piece: κ with its tilde, superscript and subscript digits/letters.
_LATEX_RUNS = re.compile("(κ\u0303|[" + "".join(_SUPERSCRIPTS) + "]+|["
                         + "".join(dict.fromkeys(_UNICODE_SUB.values())) + "]+)")
_SUBSCRIPTS = {v: ("-" if k == "−" else k) for k, v in _UNICODE_SUB.items()}


def latex_escape(text: str) -> str:
    r"""Plain (Unicode) text as LaTeX that compiles with pdflatex and no extra packages.

    LaTeX specials are escaped, common physics symbols become math (κ̃ -> ``\tilde{\kappa}``,
    superscripts such as ⁻¹⁶ -> ``^{-16}``, Unicode subscripts -> ``_{\mathrm{...}}``), any
    other non-ASCII character becomes ``?`` and a control character (line ends included) a
    space; adjacent maths are joined into one.
    """
    out = []
    for i, piece in enumerate(_LATEX_RUNS.split(str(text))):
        if i % 2:
            out.append(_latex_run(piece))
        else:
            out.append(_latex_chars(piece))
    return join_math("".join(out))


def _latex_run(run: str) -> str:
    if run == "κ\u0303":
        return r"$\tilde{\kappa}$"
    if run[0] in _SUPERSCRIPTS:
        return "$^{" + "".join(_SUPERSCRIPTS[ch] for ch in run) + "}$"
    return r"$_{\mathrm{" + "".join(_SUBSCRIPTS[ch] for ch in run) + "}}$"


def _latex_chars(text: str) -> str:
    out = []
    for ch in text:
        if ch in _LATEX_SPECIAL:
            out.append(_LATEX_SPECIAL[ch])
        elif ch in _LATEX_UNICODE:
            out.append(_LATEX_UNICODE[ch])
        elif ord(ch) < 32 or ord(ch) == 127:
            out.append(" ")            # a control character (a line end would end a comment)
        elif ord(ch) < 128:
            out.append(ch)
        else:
            out.append("?")
    return "".join(out)


def join_math(text: str) -> str:
    r"""Adjacent inline maths joined: ``$\omega$$\oplus$`` -> ``$\omega\oplus$``."""
    return re.sub(r"(?<!\\)\$\$", "", text)


_LATEX_SYMBOLS = {f"{_KAPPA}_e−": r"$\tilde{\kappa}_{e-}$",
                  f"{_KAPPA}_o+": r"$\tilde{\kappa}_{o+}$",
                  f"{_KAPPA}_tr": r"$\tilde{\kappa}_{\mathrm{tr}}$"}


_LATEX_PATTERN = re.compile(_MD_PATTERN.pattern + r"|(?P<harm>\b[CB](?:0|[sc][12])\b)")


def _latex_replace(m: re.Match) -> str:
    if m.group("harm"):
        name = m.group("harm")
        return f"\x00${name[0]}_{{{name[1:]}}}$\x01"
    if m.group("sym"):
        return "\x00" + _LATEX_SYMBOLS[m.group("sym")] + "\x01"
    base, sub = m.group("sub").split("_", 1)
    base = latex_escape(base).strip("$")
    sub = r"\oplus" if sub == "⊕" else (sub if len(sub) == 1 and sub.isdigit()
                                          else rf"\mathrm{{{sub}}}")
    return f"\x00${base}_{{{sub}}}$\x01"


def latex_text(text: str) -> str:
    r"""Plain (Unicode) text as LaTeX: escaped, theory symbols and subscripts as math.

    ``κ̃_e−`` -> ``$\tilde{\kappa}_{e-}$``, ``ω_R`` -> ``$\omega_{\mathrm{R}}$``, ``A_1``
    -> ``$A_{1}$``; everything else as :func:`latex_escape` (names such
    as ``ke_XY`` become ``ke\_XY``). Compiles with pdflatex and no extra packages.
    """
    marked = _LATEX_PATTERN.sub(_latex_replace, str(text))
    out = []
    for i, piece in enumerate(re.split("\x00|\x01", marked)):
        out.append(piece if i % 2 else latex_escape(piece))
    return join_math("".join(out))
