"""Rendering: the report of a fit (Markdown, LaTeX, HTML, figures) and its building blocks.

Layer 7 of the data path. :func:`build_report` reads a fit result and writes the report;
:func:`assemble_report` computes what the report states (a :class:`ReportContent`) without
writing, and :func:`write_report` renders it. Tables are in :mod:`fringe.report.tables`,
rounding in :mod:`fringe.report.rounding`, figures in :mod:`fringe.report.figures`.
"""

from fringe.report.build import assemble_report, build_report, write_report
from fringe.report.content import ReportContent

__all__ = ["ReportContent", "assemble_report", "build_report", "write_report"]
