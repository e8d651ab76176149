"""Assemble a publishable report from a stored fit result (``FIT.json`` + its turns file).

Use :func:`build_report` to go from the file to the output directory in one call. It is
:func:`assemble_report` (read and validate the inputs, compute the headline, the comparison and
the RMS solution; nothing is written) followed by :func:`write_report` (render report.md,
report.tex (a LaTeX fragment), numbers.tex (its macros), report.html, figures/*.png and *.pdf,
summary.json). Every output file is written whole or not at all; nothing is written if any
target exists without ``overwrite``; inputs are never written over.

Where the parts live: the readers :func:`load_fit`, :func:`load_turns` and
:func:`load_comparison` are in :mod:`fringe.report.inputs` (they validate their file and raise
:class:`~fringe.errors.InputFileError` with one line "PATH: FIELD: EXPECTED"); :func:`headline`
and the renderers :func:`markdown_report`, :func:`latex_report`, :func:`html_report` and
:func:`summary` are in :mod:`fringe.report.documents`. This module re-exports them, so
``from fringe.report.build import load_fit`` keeps working.
"""

from __future__ import annotations

import dataclasses
import datetime
from pathlib import Path

import fringe.report.figures.fit as F
from fringe.errors import ConfigError, InputFileError
from fringe.io.atomic import write_json_atomic, write_text_atomic
from fringe.io.fit_files import check_companion
from fringe.io.fit_sections import Covariance
from fringe.io.outputset import OutputSet
from fringe.io.records import plain
from fringe.report.budget import total_headline
from fringe.report.content import ReportContent
from fringe.report.documents import (
    FIGURE_DIR,
    headline,
    html_report,
    latex_report,
    markdown_report,
    summary,
)
from fringe.report.figures.style import save_figure_file
from fringe.report.inputs import load_comparison, load_fit, load_turns
from fringe.report.latex import NUMBERS_FILE, numbers_tex
from fringe.report.rms_solve import solve_rms
from fringe.version import software_versions

__all__ = ["OUTPUT_FILES", "ReportContent", "assemble_report", "build_report", "write_report"]

OUTPUT_FILES = ("report.md", "report.tex", NUMBERS_FILE, "report.html", "summary.json")


# ------------------------------------------------------------------------------- assemble



def _file_entry(path) -> dict:
    from fringe.io.runreader import sha256

    return {"path": str(path), "sha256": sha256(path)}


def assemble_report(fit_json_path, *, compare=None, kt: tuple[float, float] | None = None,
                    is_: tuple[float, float] | None = None) -> ReportContent:
    """Read and validate the inputs and compute what the report states (writes nothing).

    Parameters
    ----------
    fit_json_path : path
        The fit result (``fringe_format = "fit"``, version 1 or 2).
    compare : path, optional
        CSV or TOML table of earlier results (:func:`load_comparison`).
    kt, is_ : (value, sigma), optional
        Kennedy-Thorndike (beta - alpha - 1) and Ives-Stilwell (alpha + 1/2) results
        (dimensionless); both, with a fit of theory ``rms``, give alpha, beta, delta.
    """
    fit_path = Path(fit_json_path)
    fit = load_fit(fit_path)
    notes = [f"From the fit: {n}" for n in fit.notes]
    if fit.efficiency_caution():
        notes.append(fit.efficiency_caution()[0].upper() + fit.efficiency_caution()[1:] + ".")
    turns_path = turns = None
    if fit.amplitudes_file:
        turns_path = fit_path.parent / fit.amplitudes_file
        if not turns_path.is_file():
            raise InputFileError(fit_path, "amplitudes_file", "expected the per-turn amplitudes "
                                 "file written with this fit, beside it; got "
                                 f"{fit.amplitudes_file!r}, which is not a file there")
        check_companion(fit, turns_path)  # the turns file written with this fit, no other
        turns = load_turns(turns_path, fit)
    else:
        notes.append("The fit names no per-turn amplitudes file: the figures of the per-turn "
                     "amplitudes, their spectrum and the residual Allan deviation are omitted.")
    if fit.covariance is None:
        fit = dataclasses.replace(fit, covariance=Covariance.diagonal(fit.coefficients))
        notes.append("The fit gives no covariance matrix: correlations are shown as zero.")
    comparison = tuple(load_comparison(compare)) if compare is not None else ()
    rms = None
    if kt is not None or is_ is not None:
        if kt is None or is_ is None:
            raise ConfigError("kt/is_: both the Kennedy-Thorndike (beta - alpha - 1) and the "
                              "Ives-Stilwell (alpha + 1/2) results are needed to solve for "
                              "alpha, beta, delta")
        if fit.theory != "rms" or "rms_mm" not in fit.coefficients:
            raise ConfigError(f"kt/is_: need a fit of theory 'rms' with rms_mm free; "
                              f"{fit_path} has theory {fit.theory!r} with free "
                              f"{', '.join(fit.coefficients)}")
        mm = fit.coefficients["rms_mm"]
        rms = solve_rms((mm.value, mm.sigma), kt, is_,
                        sources=("this fit", "user input (--kt)", "user input (--is)"))
    now = datetime.datetime.now(datetime.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")
    prov = {
        "report created (UTC)": now,
        "fit file": _file_entry(fit_path),
        "per-turn amplitudes file": _file_entry(turns_path) if turns_path else None,
        "comparison file": _file_entry(compare) if compare is not None else None,
        "run file fitted": plain(fit.input),
        "fit created (UTC)": fit.created_utc,
        "theory": fit.theory,
        "fit settings": plain(fit.settings),
        "fit statistics": plain(fit.statistics),
        "efficiency (white-noise Cramér–Rao σ / reported σ)": plain(fit.efficiency),
        "stage 1": plain(fit.stage1),
        "turntable motion": plain(fit.motion),
        "site": plain(fit.site),
        "apparatus": plain(fit.apparatus),
        "epoch (UTC), span (s)": [fit.epoch_utc, plain(fit.span_s)],
        "conventions of the fit": plain(fit.conventions),
        "conventions of this report": {
            "rounding": "Particle Data Group rule (RPP Introduction, sec. 5.3 'Rounding')",
            "intervals": "Gaussian: 68 % = value ± 1σ, 95 % = value ± 1.96σ",
            "95 % bound": "|value| + 1.96σ, rounded up to two significant digits",
            "rms": "Mansouri–Sexl α, β, δ (special relativity: −½, ½, 0); "
                   "P_MM = δ − β + ½ (docs/conventions.md, RMS parameters)",
            "harmonics": "sidereal harmonics of the 2θ signal: y = B sin 2θ + C cos 2θ of the "
                         "apparatus's observable y, in its units (docs/conventions.md, Fourier "
                         "model); its factor f to the two-path signal in the harmonics caption"},
        "software of the fit": plain(fit.software),
        "software of this report": software_versions("matplotlib"),
    }
    return ReportContent(fit=fit, fit_path=fit_path, turns=turns, turns_path=turns_path,
                         comparison=comparison,
                         compare_path=Path(compare) if compare is not None else None,
                         rms=rms, headline=total_headline(fit, headline), notes=tuple(notes),
                         provenance={k: v for k, v in prov.items() if v is not None})


# ------------------------------------------------------------------------------- write

def write_report(content: ReportContent, out_dir, *, overwrite: bool = False) -> list[Path]:
    """Render ``content`` into ``out_dir`` (created if missing); return the paths written.

    Refuses with :class:`~fringe.errors.OutputError`, before writing anything, when a target
    exists and ``overwrite`` is false, when a target is one of the inputs, or when the
    directory cannot be written. Every file is rendered into a staging directory first and
    all are moved into place together (:class:`~fringe.io.outputset.OutputSet`): a failure
    (full disk) or an interrupt leaves the directory as it was.
    """
    out = Path(out_dir)
    names = F.report_figure_names(content.fit, content.turns)
    figure_files = [f"{FIGURE_DIR}/{n}.{ext}" for n in names for ext in ("png", "pdf")]
    # figures first, summary.json (which lists the rest) last
    outputs = OutputSet(out, figure_files + list(OUTPUT_FILES), overwrite=overwrite,
                        protect=content.inputs)
    figs, rendered = [], []
    with outputs:
        for name, caption, fig in F.report_figures(content.fit, content.turns,
                                                   content.comparison):
            for ext in ("png", "pdf"):
                rendered.append(f"{FIGURE_DIR}/{name}.{ext}")
                save_figure_file(fig, outputs.path(rendered[-1]))
            # embed the very PNG just written (read back: one rendering, identical bytes)
            figs.append((name, caption, outputs.path(rendered[-2]).read_bytes()))
        write_text_atomic(outputs.path("report.md"), markdown_report(content, figs))
        write_text_atomic(outputs.path("report.tex"), latex_report(content, figs))
        write_text_atomic(outputs.path(NUMBERS_FILE), numbers_tex(content))
        write_text_atomic(outputs.path("report.html"), html_report(content, figs))
        files = rendered + list(OUTPUT_FILES)
        write_json_atomic(outputs.path("summary.json"),
                          summary(content, [f[0] for f in figs], files))
    return [out / f for f in files]


def build_report(fit_json_path, out_dir, *, compare=None, kt=None, is_=None,
                 overwrite: bool = False) -> list[Path]:
    """Read ``fit_json_path`` and write the full report into ``out_dir``.

    Parameters
    ----------
    fit_json_path : path
        Fit result JSON (format "fit", version 1 or 2); its ``amplitudes_file`` is read too.
    out_dir : path
        Output directory (created if missing).
    compare : path, optional
        CSV/TOML table of earlier results (columns name, value, sigma, citation).
    kt, is_ : (float, float), optional
        Kennedy-Thorndike (beta - alpha - 1) and Ives-Stilwell (alpha + 1/2) as (value, sigma),
        for the alpha, beta, delta solution (needs a fit of theory ``rms``).
    overwrite : bool
        Replace existing outputs.

    Returns
    -------
    list of Path
        Every file written: figures/*.png and *.pdf, report.md, report.tex, numbers.tex,
        report.html, summary.json.

    Examples
    --------
    >>> build_report("fit.json", "report-out", compare="earlier.csv")  # doctest: +SKIP
    """
    content = assemble_report(fit_json_path, compare=compare, kt=kt, is_=is_)
    return write_report(content, out_dir, overwrite=overwrite)
