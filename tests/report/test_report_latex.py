r"""The LaTeX outputs: report.tex, a fragment a paper \inputs, and numbers.tex, its macros.

Structure, always: no preamble and no document environment; the packages it needs named in its
opening comment; every table (coefficients, sidereal harmonics, correlations, nuisance,
comparison) and every figure present, each figure's \includegraphics naming a PDF the report
wrote, in a figure environment with caption and label; braces and environments balanced in both
files; ASCII only; every macro of numbers.tex a well-formed \newcommand with a letters-only name,
given once, and the numbers the same as the report's own rounding. Compiled, when pdflatex or
lualatex is on PATH (skipped with that reason otherwise): the fragment and the macros in a
minimal article. The report is that of the stored fit example (tests/data/fit_example.json),
with an invented comparison table whose citation holds every character TeX needs escaped.
"""

from __future__ import annotations

import json
import re
import shutil
import subprocess

import pytest

from fringe.report.latex import macro_name
from fringe.report.rounding import format_bound
from fringe.report.tables import bound95
from tests.helpers.commands import run_command
from tests.helpers.latex import code as _code
from tests.helpers.latex import unbalanced as _unbalanced
from tests.helpers.latex import unknown_commands

TEX = next((t for t in map(shutil.which, ("pdflatex", "lualatex")) if t), None)
CITATION = r"Invented group A & B_1, 50% #3 {x} ~y ^z \w $5 (2020)"
TABLES = ("tab:coefficients", "tab:nuisance", "tab:harmonics", "tab:correlation",
          "tab:comparison")
FIGURES = ("amplitudes", "spectrum", "residual_adev", "limits", "correlation")


@pytest.fixture(scope="module")
def report(tmp_path_factory, data_dir):
    folder = tmp_path_factory.mktemp("latex-report")
    for name in ("fit_example.json", "fit_example.turns.h5"):
        shutil.copy(data_dir / name, folder / name)
    quoted = CITATION.replace('"', '""')
    (folder / "earlier.csv").write_text(
        "name,value,sigma,citation\n" f'ke_XY,-3.1e-17,2.5e-17,"{quoted}"\n', encoding="utf-8")
    run = run_command(folder, ["report", "fit_example.json", "--out", "out",
                               "--compare", "earlier.csv"])
    assert run.exit_code == 0, run.stdout + run.stderr
    out = folder / "out"
    return out, (out / "report.tex").read_text("utf-8"), (out / "numbers.tex").read_text("utf-8")


def test_fragment_has_no_preamble_and_names_its_packages(report):
    _, tex, _ = report
    code = _code(tex)
    for forbidden in (r"\documentclass", r"\begin{document}", r"\end{document}", r"\usepackage"):
        assert forbidden not in code
    header = tex.split("\n\n")[0]
    assert r"\usepackage{booktabs, graphicx}" in header and r"\input{numbers.tex}" in header
    assert r"\toprule" in code and r"\includegraphics" in code       # what the packages serve
    assert tex.isascii()


def test_every_table_is_there_once(report):
    _, tex, _ = report
    for label in TABLES:
        assert tex.count(rf"\label{{{label}}}") == 1, label
    # each table: caption, label, a booktabs tabular, placed by \fringetable (defined once)
    blocks = re.findall(r"^\\fringetable\{(.*?)\}\{%\n(\\begin\{tabular\}.*?\\end\{tabular\})\}$",
                        tex, re.S | re.M)
    assert len(blocks) == len(TABLES)
    for head, tabular in blocks:
        assert head.startswith(r"\caption{") and r"\label{tab:" in head
        rules = [tabular.index(rule) for rule in (r"\toprule", r"\midrule", r"\bottomrule")]
        assert rules == sorted(rules)
    assert tex.count(r"\providecommand{\fringetable}") == 1
    assert r"\begin{table}" not in tex.split(r"\providecommand{\fringetable}")[0]


def test_every_figure_names_a_pdf_the_report_wrote(report):
    out, tex, _ = report
    blocks = re.findall(r"\\begin\{(figure\*?)\}(.*?)\\end\{\1\}", tex, re.S)
    assert len(blocks) == len(FIGURES)
    names = []
    for _env, block in blocks:
        m = re.search(r"\\includegraphics\[width=\\(?:columnwidth|textwidth)\]"
                      r"\{\\fringefigurepath/([^}]+)\}", block)
        assert m, block
        names.append(m.group(1))
        assert (out / "figures" / m.group(1)).read_bytes()[:5] == b"%PDF-"
        assert r"\caption{" in block and rf"\label{{fig:{m.group(1)[:-4]}}}" in block
    assert names == [f"{n}.pdf" for n in FIGURES]
    assert r"\providecommand{\fringefigurepath}{figures}" in tex
    assert "figure*" in [env for env, _ in blocks]           # the two-panel figure spans


def test_braces_and_environments_balance(report):
    _, tex, numbers = report
    assert _unbalanced(tex) == []
    assert _unbalanced(numbers) == []
    assert _unbalanced(r"\begin{a}{\}") != []                  # the checker itself can fail


def test_only_known_commands_are_used(report):
    """A misspelt or package-only command would stop pdflatex: every control word is known."""
    _, tex, numbers = report
    assert unknown_commands(tex + "\n" + numbers) == set()


def test_specials_of_a_citation_are_escaped(report):
    _, tex, _ = report
    assert (r"Invented group A \& B\_1, 50\% \#3 \{x\} \textasciitilde{}y "
            r"\textasciicircum{}z \textbackslash{}w \$5 (2020)") in tex


def _macros(numbers: str) -> dict[str, str]:
    out = {}
    for line in _code(numbers).splitlines():
        if not line.strip():
            continue
        m = re.fullmatch(r"\\newcommand\{(\\[A-Za-z]+)\}\{(.*)\} *", line)
        assert m, f"not a one-line \\newcommand: {line!r}"
        assert m.group(1) not in out, f"{m.group(1)} defined twice"
        assert _unbalanced(m.group(2)) == [], line
        out[m.group(1)] = m.group(2)
    return out


def test_numbers_are_well_formed_macros_with_the_reports_numbers(report, data_dir):
    out, _, numbers = report
    assert numbers.isascii()
    macros = _macros(numbers)
    assert all(re.fullmatch(r"\\fringe[A-Z][A-Za-z]*", m) for m in macros)
    fit = json.loads((data_dir / "fit_example.json").read_text("utf-8"))
    for name, e in fit["coefficients"].items():
        for what in ("Result", "Value", "Sigma", "IntervalNinetyFive", "Bound"):
            assert macro_name(name, what) in macros, (name, what)
        bound = format_bound(bound95(e["value"], e["sigma"]), "latex").strip("$")
        assert macros[macro_name(name, "Bound")] == rf"\ensuremath{{{bound}}}"
    summary = json.loads((out / "summary.json").read_text("utf-8"))
    hb = format_bound(summary["headline"]["bound_95"], "latex").strip("$")
    assert macros[r"\fringeHeadlineBound"] == rf"\ensuremath{{{hb}}}"
    assert macros[r"\fringeTurns"] == str(fit["stage1"]["n_accepted"])
    assert macros[r"\fringeSpanDays"] == f"{fit['span_s'] / 86400:.3g}"
    assert macros[r"\fringeEpoch"] == fit["epoch_utc"][:10]
    assert macros[r"\fringeKeXYResult"] == r"\ensuremath{(7 \pm 9)\times10^{-18}}"  # = the table


@pytest.mark.parametrize("parts, expected", [
    (("ke_XY", "Value"), r"\fringeKeXYValue"),
    (("ke_XXmYY", "Sigma"), r"\fringeKeXXmYYSigma"),
    (("rms_mm", "Bound"), r"\fringeRmsMmBound"),
    (("sun_vX_kms", "Value"), r"\fringeSunVXKmsValue"),
    (("C0",), r"\fringeCZero"),
    (("lab-2θ x", "Value"), r"\fringeLabTwoXValue"),      # digits spelled, θ dropped
])
def test_macro_names_are_letters_only(parts, expected):
    assert macro_name(*parts) == expected


def _compile(report_dir, tmp_path, options: str, body: list[str]) -> str:
    """Compile the report's fragment and macros in an article (``options``, ``body``): its log.

    Fails on a TeX error; checks that a PDF was written.
    """
    work = tmp_path / "paper"
    shutil.copytree(report_dir, work)
    (work / "paper.tex").write_text("\n".join([
        rf"\documentclass{options}{{article}}", r"\usepackage{booktabs}", r"\usepackage{graphicx}",
        r"\input{numbers.tex}", r"\begin{document}", *body, r"\input{report.tex}",
        r"\end{document}", ""]), encoding="ascii")
    done = subprocess.run([TEX, "-interaction=nonstopmode", "-halt-on-error", "paper.tex"],
                          cwd=work, capture_output=True, text=True, timeout=300, check=False)
    log = (work / "paper.log").read_text("latin-1") if (work / "paper.log").exists() else ""
    assert done.returncode == 0, done.stdout[-3000:]
    assert (work / "paper.pdf").read_bytes()[:5] == b"%PDF-"
    return log


@pytest.mark.tex
@pytest.mark.skipif(TEX is None, reason="no TeX system on PATH (looked for pdflatex, lualatex)")
def test_fragment_compiles_in_a_minimal_article(report, tmp_path):
    out, _, _ = report
    log = _compile(out, tmp_path, "", [
        r"Bound \fringeHeadlineBound{} set by \fringeHeadlineCoefficient; "
        r"$\kappa = \fringeKeXYResult$ over \fringeSpanDays{} days, \fringeTurns{} turns."])
    assert "Undefined control sequence" not in log and "Missing $" not in log
    assert "Overfull \\hbox" not in log             # every table fits the text width


@pytest.mark.tex
@pytest.mark.skipif(TEX is None, reason="no TeX system on PATH (looked for pdflatex, lualatex)")
def test_fragment_fits_a_two_column_paper(report, tmp_path):
    """In two columns a table wider than a column goes across the page (table*), none overflows."""
    out, _, _ = report
    log = _compile(out, tmp_path, "[twocolumn]", [])
    assert "Overfull \\hbox" not in log, log[-3000:]
