"""The ``fringe`` command line: parse options, call the library, print, exit.

No physics lives here. A :class:`~fringe.errors.FringeError` becomes its one-line message on
stderr and a non-zero exit, with no traceback.
"""

from __future__ import annotations

import click

from fringe.cli.common import QUIET_HELP, VERBOSE_HELP, reset_verbosity
from fringe.cli.usage import FringeGroup
from fringe.version import __version__


@click.group(cls=FringeGroup, context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, prog_name="fringe", help="Show the version and exit.")
@click.option("-v", "--verbose", count=True, help=VERBOSE_HELP)
@click.option("-q", "--quiet", is_flag=True, help=QUIET_HELP)
def main(verbose: int, quiet: bool):
    """fringe: design, fit and publish rotating-apparatus tests of light-speed isotropy."""
    from fringe.heap import keep_freed_memory

    reset_verbosity(verbose, quiet)
    keep_freed_memory()          # freed arrays stay mapped for the next (fringe.heap)


#: The modules of the commands, one each (``fringe/cli/<module>.py``, each defines ``command``).
COMMAND_MODULES = ("predict", "simulate", "inspection", "import_csv", "fit", "report", "plan",
                   "demo", "unblind", "combine", "scenario", "study", "watch")


def _register_commands() -> None:
    """Add every command of :data:`COMMAND_MODULES` to :func:`main`."""
    import importlib

    for name in COMMAND_MODULES:
        main.add_command(importlib.import_module(f"{__name__}.{name}").command)


_register_commands()


if __name__ == "__main__":  # pragma: no cover
    main()
