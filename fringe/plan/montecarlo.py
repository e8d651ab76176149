"""Monte Carlo check of the forecast with simulated per-turn amplitudes.

Use :func:`monte_carlo_check` to simulate a campaign's per-turn 2 theta amplitudes with white
noise of the forecast per-turn variance, fit them by least squares many times, and compare the
scatter with the Fisher forecast of :func:`fringe.plan.forecast`; it returns a
:class:`~fringe.plan.result.MonteCarloCheck`. This checks the Fisher algebra and the turn
subsampling, not the sample-level noise model. :mod:`fringe.plan` re-exports the function, so
this module imports :mod:`fringe.plan` only when the check runs (no import cycle).
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import replace
from typing import TYPE_CHECKING

import numpy as np

from fringe.constants import DAY_S
from fringe.errors import ConfigError, check_finite_number
from fringe.experiment.basis import two_theta_amplitudes
from fringe.plan.result import MonteCarloCheck

if TYPE_CHECKING:
    from fringe.experiment.scenario import Scenario
    from fringe.plan.settings import PlanSettings

__all__ = ["monte_carlo_check"]


def monte_carlo_check(scenario: Scenario, n_campaigns: int, rng: np.random.Generator, *,
                      free: str | Sequence[str] | None = None,
                      settings: PlanSettings | None = None, duration_s: float | None = None,
                      max_turns: int = 200_000, batch: int = 16,
                      progress: Callable[[int], None] | None = None) -> MonteCarloCheck:
    """Fit simulated per-turn amplitudes ``n_campaigns`` times; compare scatter with forecast.

    Every turn of the campaign is evaluated (no subsampling); (C_i, B_i) = J_i p + white noise
    of the forecast per-turn variance, with p the scenario's values of the free coefficients
    and zero nuisances, fitted by least squares. This checks the Fisher algebra, the turn
    subsampling and the inversion; it does not test the per-turn noise model itself (that
    needs sample-level simulation and demodulation).

    Parameters
    ----------
    scenario : Scenario
    n_campaigns : int
        Number of simulated campaigns (>= 2).
    rng : numpy.random.Generator
    free : sequence of str, optional
    settings : PlanSettings, optional
    duration_s : float, optional
        Campaign length, s (default the scenario's).
    max_turns : int
        Refuse campaigns with more turns than this (memory ~ 2 turns x coefficients doubles).
    batch : int
        Campaigns simulated at once.
    progress : callable, optional
        Called with the number of campaigns done after each batch (a progress bar).
    """
    from fringe.plan.forecast import forecast
    from fringe.plan.settings import plan_settings

    if isinstance(n_campaigns, bool) or not isinstance(n_campaigns, int) or n_campaigns < 2:
        raise ConfigError(f"monte carlo: n_campaigns: expected an integer >= 2, "
                          f"got {n_campaigns!r}")
    if duration_s is not None:
        scenario = replace(scenario, duration_s=check_finite_number(
            duration_s, "monte carlo", "duration_s", positive=True))
    st = settings or plan_settings(scenario, free)
    st = replace(st, targets={}, latitudes_deg=(), n_days=2,
                 max_days=max(1.0, scenario.duration_s / DAY_S))
    fc = forecast(scenario, settings=st)
    n = fc.n_turns
    if n > max_turns:
        raise ConfigError(f"monte carlo: {n} turns exceed max_turns = {max_turns}")
    t = (np.arange(n) + 0.5) * fc.period_s
    setup = scenario.setup()
    c, b = two_theta_amplitudes(setup, t, st.free)
    offsets = setup.apparatus.offset_directions(setup.units)     # (C, B) of each nuisance
    extra_c = [np.full(n, offsets[k][0]) for k in st.nuisances]
    extra_b = [np.full(n, offsets[k][1]) for k in st.nuisances]
    a = np.concatenate([np.column_stack([c] + extra_c), np.column_stack([b] + extra_b)])
    truth = np.array([scenario.coefficients.get(k, 0.0) for k in st.free]
                     + [0.0] * len(st.nuisances))
    colscale = np.sqrt(np.sum(a * a, axis=0))
    q, r = np.linalg.qr(a / colscale)
    y0 = a @ truth
    est = []
    for start in range(0, n_campaigns, batch):
        m = min(batch, n_campaigns - start)
        y = y0 + fc.turn_sigma * rng.standard_normal((m, a.shape[0]))
        est.append(np.linalg.solve(r, (y @ q).T).T / colscale)
        if progress is not None:
            progress(m)
    est = np.concatenate(est)[:, : len(st.free)]
    k = len(st.free)
    return MonteCarloCheck(names=tuple(st.free), truth=tuple(truth[:k].tolist()),
                           sigma_forecast=tuple(fc.sigma[x] for x in st.free),
                           sigma_scatter=tuple(np.std(est, axis=0, ddof=1).tolist()),
                           mean_offset=tuple((est.mean(axis=0) - truth[:k]).tolist()),
                           n_campaigns=n_campaigns, n_turns=n)
