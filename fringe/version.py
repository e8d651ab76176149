"""The version of fringe, in one place (read by the packaging metadata too)."""

__version__ = "0.1.0"
