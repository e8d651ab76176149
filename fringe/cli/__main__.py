"""``python -m fringe.cli``: the ``fringe`` command."""

from fringe.cli import main

main()
