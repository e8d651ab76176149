"""Stages 2-3: sidereal harmonics and coefficients from the per-turn amplitudes.

Layer 6 of the data path.

* :func:`fit_run` fits a run file end to end (stage 1, then stages 2-3) and returns a
  :class:`~fringe.io.fit_result.FitResult`; :class:`FitSettings` states what is free, fixed
  and how the uncertainties are formed.
* :func:`stage2_and_3` fits a turn table already demodulated; :func:`fit_medium` is the
  nonlinear classical-medium fit; :func:`one_stage_fit` the global cross-check.
* :func:`turn_model` gives the per-turn (C, B) that coefficients produce, as stage 1 measures
  them (used by the fit, the plan and the tests).
"""

from fringe.fit.coefficient_fit import CoefficientFit
from fringe.fit.medium import fit_medium
from fringe.fit.onestage import one_stage_fit
from fringe.fit.passes import design_columns, design_labels
from fringe.fit.run import fit_run, setup_from_run
from fringe.fit.settings import UNCERTAINTY_MODES, FitSettings, default_free
from fringe.fit.stages import fit_coefficients, stage2_and_3
from fringe.fit.turn_model import turn_model

__all__ = ["UNCERTAINTY_MODES", "CoefficientFit", "FitSettings", "default_free",
           "design_columns", "design_labels", "fit_coefficients", "fit_medium", "fit_run",
           "one_stage_fit", "setup_from_run", "stage2_and_3", "turn_model"]
