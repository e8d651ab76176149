"""Plan a campaign: Fisher-matrix forecasts and their Monte Carlo check.

Layer 6 of the data path.

* :func:`forecast` gives the forecast σ of each free coefficient against campaign length,
  rotation period and latitude, and the days to reach a target, as a :class:`PlanResult`;
  :func:`plan_settings` reads the scenario's ``[plan]`` section into :class:`PlanSettings`.
* :func:`monte_carlo_check` fits simulated per-turn amplitudes many times and compares their
  scatter with the forecast (:class:`MonteCarloCheck`).
* :func:`turn_amplitude_variance` is the per-turn 2θ amplitude variance of a noise model.
"""

from fringe.plan.forecast import forecast, turn_amplitude_variance
from fringe.plan.montecarlo import monte_carlo_check
from fringe.plan.result import MonteCarloCheck, PlanResult, TargetAnswer
from fringe.plan.settings import NUISANCES, PlanSettings, plan_settings

__all__ = ["NUISANCES", "MonteCarloCheck", "PlanResult", "PlanSettings", "TargetAnswer",
           "forecast", "monte_carlo_check", "plan_settings", "turn_amplitude_variance"]
