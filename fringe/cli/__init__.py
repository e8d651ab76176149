"""The ``fringe`` command line: parse options, call the library, print, exit.

No physics lives here. A :class:`~fringe.errors.FringeError` becomes its one-line message on
stderr and a non-zero exit, with no traceback.
"""

from __future__ import annotations

import logging

import click

from fringe.version import __version__


@click.group(context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, prog_name="fringe")
@click.option("-v", "--verbose", count=True, help="More log output (repeat for debug).")
def main(verbose: int):
    """fringe: design, fit and publish rotating-apparatus tests of light-speed isotropy."""
    level = logging.WARNING - 10 * min(verbose, 2)
    logging.basicConfig(level=level, format="%(levelname)s %(name)s: %(message)s")


#: The modules of the commands, one each (``fringe/cli/<module>.py``, each defines ``command``).
COMMAND_MODULES = ("predict", "simulate", "inspection", "import_csv", "fit", "report", "plan",
                   "demo", "watch")


def _register_commands() -> None:
    """Add every command of :data:`COMMAND_MODULES` to :func:`main`."""
    import importlib

    for name in COMMAND_MODULES:
        main.add_command(importlib.import_module(f"{__name__}.{name}").command)


_register_commands()


if __name__ == "__main__":  # pragma: no cover
    main()
