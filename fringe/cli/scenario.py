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
    """Validate FILE, a scenario or the metadata of ``fringe import`` (told apart by sections).

    Prints one line, "FILE: valid scenario (...)" or "FILE: valid import metadata (...)", and
    exits 0; or prints the one-line error and exits 2. Nothing is simulated or written.
    """
    from fringe.plan.file_check import check_input_file

    click.echo(check_input_file(file).line())
