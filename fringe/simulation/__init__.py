"""Simulate a campaign: signal + power-law noise + drift + systematics, written as a run file.

Layer 5 of the data path. :func:`simulate` writes the run file of a scenario;
:class:`Systematics` reads the scenario's ``[systematics]`` section.
"""

from fringe.simulation.campaign import Systematics, simulate

__all__ = ["Systematics", "simulate"]
