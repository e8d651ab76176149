"""Plain-text tables for the printed summaries: columns that align whatever the magnitudes.

:func:`text_table` sizes every column to its widest cell (header included) and keeps at least
two spaces between columns, so a sigma and the next column never run together however many
digits they take. :func:`number` formats one value and prints a numerical zero (a value that
is zero to rounding, or ``-0.0``) as ``0``.

Example
-------
>>> for line in text_table(["name", "value"], [["ke_XY", number(3e-18)]]):
...     print(line)
  name   value
  ke_XY  3e-18
"""

from __future__ import annotations

import math
from collections.abc import Sequence

#: Least number of spaces between two columns.
GAP = 2


def number(x, spec: str = ".4g", *, zero_below: float = 0.0) -> str:
    """Format ``x`` with ``spec``; zero (and anything with ``|x| <= zero_below``) prints "0".

    Parameters
    ----------
    x : float or None
        The value (None and NaN print as "-").
    spec : str
        A format specification, e.g. ``".4g"``.
    zero_below : float
        Magnitude at or below which ``x`` is a numerical zero (rounding), in the units of
        ``x``; 0 keeps every nonzero value.
    """
    if x is None:
        return "-"
    x = float(x)
    if math.isnan(x):
        return "-"
    if x == 0.0 or abs(x) <= zero_below:
        return "0"
    text = format(x, spec)
    stripped = text.lstrip("-+").replace("0", "").replace(".", "")
    return "0" if stripped in ("", "e", "e+", "e-") else text


def text_table(header: Sequence[str], rows: Sequence[Sequence[str]], *, indent: str = "  ",
               left: int = 1) -> list[str]:
    """Lines of an aligned table: the first ``left`` columns to the left, the others right.

    Parameters
    ----------
    header : sequence of str
        Column titles.
    rows : sequence of sequence of str
        Cells, already formatted (a row may be shorter than the header; the rest is blank).
        A row that is a single string is printed as it is (a note between rows).
    indent : str
        Put in front of every line.
    left : int
        How many leading columns are left-aligned (names); the rest are right-aligned.
    """
    table = [list(header)] + [list(r) for r in rows if not isinstance(r, str)]
    n = max(len(r) for r in table)
    widths = [max(len(r[i]) if i < len(r) else 0 for r in table) for i in range(n)]

    def line(cells):
        parts = []
        for i in range(n):
            cell = cells[i] if i < len(cells) else ""
            parts.append(cell.ljust(widths[i]) if i < left else cell.rjust(widths[i]))
        return (indent + (" " * GAP).join(parts)).rstrip()

    out = [line(header)]
    for r in rows:
        out.append(indent + r if isinstance(r, str) else line(r))
    return out
