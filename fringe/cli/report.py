"""``fringe report FIT.json --out DIR``: a publishable statement of limits from a fit result.

No physics here: parse the options, call :func:`fringe.report.build.assemble_report` and
:func:`~fringe.report.build.write_report`, print the headline, the fit's warnings and the files
written.
"""

from __future__ import annotations

import math

import click

from fringe.cli.common import run_guarded as _run_guarded
from fringe.cli.common import step, verbosity_options
from fringe.errors import ConfigError


def parse_value_sigma(text: str | None, option: str) -> tuple[float, float] | None:
    """``"VALUE,SIGMA"`` -> (value, sigma); None for None. ConfigError names the option."""
    if text is None:
        return None
    parts = [p.strip() for p in str(text).split(",")]
    try:
        if len(parts) != 2:
            raise ValueError
        value, sigma = float(parts[0]), float(parts[1])
    except ValueError:
        raise ConfigError(f"{option}: expected VALUE,SIGMA (two numbers, e.g. -4.8e-8,3.7e-8), "
                          f"got {text!r}") from None
    if not (math.isfinite(value) and math.isfinite(sigma)) or sigma < 0:
        raise ConfigError(f"{option}: expected a finite VALUE and a finite SIGMA >= 0, "
                          f"got {text!r}")
    return value, sigma


@click.command("report")
@click.argument("fit_json")
@click.option("--out", "out", default="fringe-report", show_default=True, metavar="DIR",
              help="Directory to write report.md, report.tex (a LaTeX fragment) with "
                   "numbers.tex (its macros), report.html, figures/ and summary.json into "
                   "(created if missing).")
@click.option("--compare", default=None, metavar="FILE",
              help="CSV or TOML table of earlier results (name, value, sigma, citation) to set "
                   "beside this one  [default: none]")
@click.option("--kt", default=None, metavar="VALUE,SIGMA",
              help="Kennedy-Thorndike result beta - alpha - 1, dimensionless (RMS fits: solve "
                   "alpha, beta, delta)  [default: none]")
@click.option("--is", "is_", default=None, metavar="VALUE,SIGMA",
              help="Ives-Stilwell result alpha + 1/2, dimensionless (with --kt)  [default: "
                   "none]")
@click.option("--overwrite", is_flag=True, show_default=True,
              help="Replace the files of an earlier report in --out.")
@verbosity_options
@_run_guarded
def command(fit_json, out, compare, kt, is_, overwrite):
    """Tables, figures and a self-contained HTML page stating the limits in FIT_JSON."""
    from fringe.report.build import assemble_report, write_report
    from fringe.report.markup import terminal_text

    kt_is = parse_value_sigma(kt, "--kt"), parse_value_sigma(is_, "--is")
    with step("report: tables"):
        content = assemble_report(fit_json, compare=compare, kt=kt_is[0], is_=kt_is[1])
    with step("report: figures and pages"):
        written = write_report(content, out, overwrite=overwrite)
    click.echo(terminal_text(content.headline["text"]))
    for w in content.warnings:
        click.echo(f"warning (from the fit): {terminal_text(w)}", err=True)
    if content.rms is not None:
        click.echo(content.rms.summary())
    click.echo("")
    for p in written:
        click.echo(f"wrote {p}")
