"""Running a ``fringe`` command in a folder of its own, as a user would (click's test runner)."""

from __future__ import annotations

import warnings
from dataclasses import dataclass
from pathlib import Path

import pytest
from click.testing import CliRunner

from fringe.cli import main
from fringe.errors import FringeWarning


@dataclass(frozen=True)
class CommandRun:
    """One ``fringe`` command run through click's test runner."""

    folder: Path        #: the folder it ran in (inputs copied in, outputs written there)
    exit_code: int
    stdout: str
    stderr: str


def run_command(folder: Path, args: list[str]) -> CommandRun:
    """Run ``fringe ARGS`` with ``folder`` as the working directory.

    Relative file names keep absolute paths out of what the command prints and records. The
    fit's warnings (FringeWarning) are let through to the command's own handler, which prints
    them on stderr as a user sees them; any other warning stays an error (pyproject's
    filterwarnings).
    """
    with pytest.MonkeyPatch.context() as mp, warnings.catch_warnings():
        warnings.filterwarnings("always", category=FringeWarning)
        mp.chdir(folder)
        result = CliRunner().invoke(main, args)
    if result.exception is not None and not isinstance(result.exception, SystemExit):
        raise result.exception
    return CommandRun(folder, result.exit_code, result.stdout, result.stderr)
