"""fringe: rotating-apparatus tests of light-speed and clock isotropy.

The data path (see DEVELOPERS.md): scenario or run file -> schedule -> frames -> theories ->
apparatus -> signal basis -> predict / simulate / fit / plan -> report.
"""

from fringe.version import __version__  # noqa: F401
