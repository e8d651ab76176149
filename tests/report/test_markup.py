"""Names and subscripts in report.md and in the LaTeX outputs (fringe.report.markup).

No underscore of a subscript reaches a reader of report.md; LaTeX texts escape every special
character and write symbols and subscripts as mathematics. The expected strings are fringe's own
rendering rules (docs/report.md, "Names and subscripts"), not outside values.
"""

from __future__ import annotations

import re
import shutil

import pytest

from fringe.report.markup import join_math, latex_escape, latex_text, markdown_text
from tests.helpers.commands import run_command


@pytest.mark.parametrize("text, expected", [
    ("the free κ̃_e− coefficients", "the free κ̃ₑ₋ coefficients"),
    ("κ̃_o+ and κ̃_tr", "κ̃ₒ₊ and κ̃ₜᵣ"),
    ("v_sun, A_1 + 90 deg", "vₛᵤₙ, A₁ + 90 deg"),
    ("lines 2ω_R ± ω⊕", "lines 2ω<sub>R</sub> ± ω⊕"),          # no Unicode subscript R
    ("h_S = h / f", "h<sub>S</sub> = h / f"),
    ("ke_XY, lab_C0, model_C", "ke_XY, lab_C0, model_C"),      # names stay as typed
])
def test_markdown_text(text, expected):
    assert markdown_text(text) == expected


@pytest.mark.parametrize("text, expected", [
    ("κ̃_e− coefficients", r"$\tilde{\kappa}_{e-}$ coefficients"),
    ("2ω_R ± ω⊕", r"2$\omega_{\mathrm{R}}$ $\pm$ $\omega\oplus$"),
    ("A_1 ke_XY 5 % & #", r"$A_{1}$ ke\_XY 5 \% \& \#"),
    ("cost $3 {x} ~", r"cost \$3 \{x\} \textasciitilde{}"),
])
def test_latex_text(text, expected):
    assert latex_text(text) == expected


def test_join_math_keeps_an_escaped_dollar():
    assert join_math(r"$a$$b$") == "$ab$"
    assert join_math(r"\$$<$") == r"\$$<$"          # an escaped dollar, then maths


def test_latex_escape_turns_control_characters_into_spaces():
    # a line end inside a comment of report.tex would end the comment
    assert latex_escape("a\nb\rc\td\x0be\x7f") == "a b c d e "


def test_latex_escape_of_every_special():
    assert latex_escape("a_b & 50 % # ~ ^ { } \\") == (
        r"a\_b \& 50 \% \# \textasciitilde{} \textasciicircum{} \{ \} \textbackslash{}")


def test_report_markdown_has_no_subscript_underscores(data_dir, tmp_path):
    """Above the provenance (the raw record), report.md shows no symbol or subscript with `_`."""
    for name in ("fit_example.json", "fit_example.turns.h5"):
        shutil.copy(data_dir / name, tmp_path / name)
    run = run_command(tmp_path, ["report", "fit_example.json", "--out", "out"])
    assert run.exit_code == 0, run.stdout + run.stderr
    text = (tmp_path / "out" / "report.md").read_text(encoding="utf-8")
    body = text.split("## Provenance")[0]
    assert "κ̃ₑ₋" in body
    assert not re.search(r"κ̃_|(?<![A-Za-z_.])[A-Za-zα-ωΑ-Ω]_[A-Za-z0-9]{1,4}\b", body), \
        re.findall(r"\S*[^\W\d]_\S*", body)


def test_html_text_keeps_names_as_typed_where_they_are_defined():
    from fringe.report.markup import html_text

    text = "rms_mm = delta - beta + 1/2, P_MM"
    # before: the provenance's conventions row read "δ − β + ½ = delta - beta + 1/2"
    assert html_text(text, names_as_typed=True) == "rms_mm = delta - beta + 1/2, P<sub>MM</sub>"
    assert "δ − β + ½</span> = delta" in html_text(text)
