"""``fringe combine FIT1.json FIT2.json ... --out FIT.json``: one result from stored fits.

No physics here: read each result, call :func:`fringe.fit.joint.combine_results` (which refuses
what cannot be combined with one line), write the combined result whole or not at all and print
its summary.
"""

from __future__ import annotations

import click

from fringe.cli.common import run_guarded, verbosity_options


@click.command("combine")
@click.argument("fit_files", nargs=-1, required=True, metavar="FIT_FILE")
@click.option("--out", "out_path", required=True, metavar="FILE",
              help="Combined result file to write (one JSON file, e.g. joint.json; not a "
                   "directory).")
@click.option("--budget", "budget_path", default=None, metavar="FILE",
              help="Systematic budget file (TOML) of terms declared on the combined "
                   "coefficients: coefficient and scale terms (docs/fit.md); the results' own "
                   "budgets are carried in any case  [default: none]")
@click.option("--overwrite", is_flag=True, show_default=True,
              help="Replace an existing --out file.")
@verbosity_options
@run_guarded
def command(fit_files, out_path, budget_path, overwrite):
    """Combine fit results of different runs (sites, apparatus) into one set of coefficients.

    Each FIT_FILE is a result of fringe fit (format 3: it carries its run's likelihood) or of
    an earlier joint fit or combination. Refused: blinded results, results without a
    likelihood, other theories, conventions, free or fixed coefficients, the same run twice.
    """
    from fringe.errors import ConfigError
    from fringe.fit.joint import combine_results
    from fringe.io.atomic import check_output_path, write_json_atomic
    from fringe.io.fit_result import read_fit_result

    if len(fit_files) < 2:
        raise ConfigError(f"FIT_FILE: expected at least two fit results to combine, got "
                          f"{len(fit_files)}")
    check_output_path(out_path, overwrite=overwrite, protect=fit_files)
    budget = None
    if budget_path is not None:
        from fringe.io.budget_file import read_budget

        budget = read_budget(budget_path)
    results = [(path, read_fit_result(path)) for path in fit_files]
    combined = combine_results(results, budget=budget)
    write_json_atomic(out_path, combined.to_dict(), overwrite=overwrite, protect=fit_files)
    click.echo(combined.summary())
    click.echo(f"\nwrote {out_path}")
