"""Rendering: tables, figures and text built from fringe's result objects."""
