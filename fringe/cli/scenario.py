"""``fringe scenario check``: validate a scenario or import-metadata file without running it."""

from __future__ import annotations

import click

from fringe.cli.common import run_guarded


@click.group("scenario")
def command():
    """Work with scenario and import-metadata files (TOML)."""


@command.command("check")
@click.argument("file")
@run_guarded
def check(file):
    """Validate FILE: a scenario, the metadata of ``fringe import``, or a systematic budget.

    The kinds are told apart by their sections. Prints one line, "FILE: valid scenario (...)",
    "FILE: valid import metadata (...)" or "FILE: valid systematic budget (...)", and
    exits 0; or prints the one-line error and exits 2. Nothing is simulated or written.
    """
    from fringe.plan.file_check import check_input_file

    click.echo(check_input_file(file).line())
