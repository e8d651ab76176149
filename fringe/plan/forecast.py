"""Forecast bounds before taking data: the Fisher matrix of the per-turn 2 theta amplitudes.

Which function for which job:

* :func:`forecast` -- everything ``fringe plan`` reports for a scenario (with a ``[noise]``
  section): the 1-sigma forecast of each free coefficient for the scenario's campaign, sigma
  versus campaign length, the span from which ko_* decouple from ke_*, sigma versus rotation
  period and (optionally) site latitude, and the days needed to reach target sigmas. Returns a
  :class:`PlanResult`.
* :func:`noise_from_section` -- the ``[noise]`` section as a :class:`~fringe.noise.PowerLawNoise`.
* :func:`turn_amplitude_variance` -- variance of one turn's demodulated C (or B) amplitude.
* :func:`monte_carlo_check` -- per-turn amplitudes simulated with the forecast noise and fitted
  by least squares, many times; checks the Fisher algebra and the turn subsampling (not the
  sample-level noise model).

Where the parts live: the result classes :class:`PlanResult`, :class:`TargetAnswer` and
:class:`MonteCarloCheck` are in :mod:`fringe.plan.result`, :func:`monte_carlo_check` is in
:mod:`fringe.plan.montecarlo`; this module re-exports them, so import everything from here.

The model (docs/plan.md derives it). Turn i (duration T_R, mid-time t_i) gives amplitudes
(C_i, B_i) = J_i p + nuisances + noise, J_i from
:func:`fringe.experiment.basis.two_theta_amplitudes`.
The noise of C_i and B_i is taken as independent, equal, and white from turn to turn, with

    sigma_a^2 = k^2 S_y(f_0) / (d T_R),   f_0 = 2 / T_R,

(one-sided S_y; k converts fractional frequency to the observable's units; d = 1 for
continuous rotation, the dwell fraction for stepped rotation), so the Fisher matrix is
F = sum_i (J_C,iᵀ J_C,i + J_B,iᵀ J_B,i) / sigma_a^2 and the forecast covariance is F^-1. For
white FM this reproduces the sizing rule sigma_C = sqrt(h0 / T) (docs/references.md
[R-noise-sizing]).
"""

from __future__ import annotations

import logging
import math
import warnings
from collections.abc import Sequence
from dataclasses import dataclass, replace
from typing import TYPE_CHECKING

import numpy as np
from numpy.typing import NDArray

from fringe.constants import DAY_S, STELLAR_DAY_S
from fringe.errors import ConfigError, DegeneracyWarning, check_finite_number
from fringe.experiment.basis import two_theta_amplitudes
from fringe.experiment.turntable import SteppedRotation
from fringe.linalg import correlation_from_covariance, invert_normal
from fringe.noise.powerlaw import (
    PowerLawNoise,
    noise_from_section,
    noise_scale,
)
from fringe.plan.result import PlanResult, TargetAnswer
from fringe.plan.settings import (
    MAX_PERIOD_S,
    NUISANCES,
    PlanSettings,
    plan_settings,
)

if TYPE_CHECKING:
    from fringe.experiment.scenario import Scenario

__all__ = ["forecast", "turn_amplitude_variance"]

_log = logging.getLogger(__name__)


def turn_amplitude_variance(noise: PowerLawNoise, period_s: float, duty: float = 1.0) -> float:
    r"""Variance of one turn's least-squares 2 theta amplitude (C or B), fractional units.

    .. math:: \sigma_a^2 = S_y(f_0) / (d\,T_R), \qquad f_0 = 2 / T_R

    The whole-turn estimator C = (2/T_R) \int y cos 2 theta dt has the window W(f) with
    \int_0^\infty |W|^2 df = 1/T_R, so Var C = \int_0^\infty S_y |W|^2 df = S_y(f_0) / T_R
    when S_y is smooth near f_0 (exact for white FM: h0 / T_R). Offset, drift and 1 theta terms
    of the per-turn fit are orthogonal to cos 2 theta over a whole turn and do not change it.

    Parameters
    ----------
    noise : PowerLawNoise
    period_s : float
        Turn period T_R, s.
    duty : float
        Fraction of the turn whose samples are used (1 for continuous rotation; the dwell
        fraction for stepped rotation, whose marks each average S_y(f_0) / (2 dwell)).

    Returns
    -------
    float
        sigma_a^2, dimensionless (fractional frequency squared).
    """
    period = check_finite_number(period_s, "plan", "period_s", positive=True)
    d = check_finite_number(duty, "plan", "duty", positive=True, maximum=1.0)
    return float(noise.psd(2.0 / period)) / (d * period)


def _duty(motion, source: str) -> float:
    if not isinstance(motion, SteppedRotation):
        return 1.0
    marks = 360.0 / motion.step_deg
    k = round(marks)
    if abs(marks - k) > 1e-9 or k < 3 or k == 4:
        raise ConfigError(f"{source}: [turntable] step_deg: the plan needs marks that divide "
                          f"the turn and resolve cos 2 theta and sin 2 theta (360/step an "
                          f"integer >= 3, not 4), got {motion.step_deg!r}")
    return motion.dwell_s / (motion.dwell_s + motion.move_s)


# ----------------------------------------------------------------------------- Fisher sums

@dataclass(frozen=True)
class _TurnSums:
    """Cumulative unit-noise Fisher sums over turns, every ``stride``-th turn weighted stride.

    Point j stands for turns [j stride, (j+1) stride) and is evaluated at their middle.
    """

    stride: int
    outer: NDArray          # (M, k, k) per point, weight stride included
    cum: NDArray            # (M + 1, k, k)

    def fisher(self, n_turns: int) -> NDArray:
        j, rem = divmod(int(n_turns), self.stride)
        j = min(j, self.outer.shape[0])
        f = self.cum[j].copy()
        if rem and j < self.outer.shape[0]:
            f += (rem / self.stride) * self.outer[j]
        return f

    @property
    def n_turns(self) -> int:
        return self.outer.shape[0] * self.stride


def turn_shape_matrix(scenario, drift: str = "linear") -> NDArray:
    """Inflation F (2x2) of the per-turn (C, B) covariance by the stage-1 nuisance terms.

    The covariance of one turn's (C, B) is sigma_a^2 F, with F = (n/2) (Xᵀ X)^-1 restricted to
    (C, B), X the default stage-1 design (offset, linear drift, 1 theta, 2 theta; see
    :class:`fringe.demodulate.DemodSettings`) on the turn's n samples, starting at the scenario's
    start azimuth. F = 1 for an ideal whole-turn projection; the linear drift term correlates
    with whichever 2 theta component is odd about the turn's middle (up to ~1.6x in variance).
    Exact for white noise; used as the shape for coloured noise too (an approximation).
    Stepped rotation: the identity (the dwell-mark averages are handled by the duty factor).

    The 2 x 2 block is computed here with numpy from the design of
    :mod:`fringe.demodulate.blocks` (the same columns and time scaling as the compiled kernel;
    ``tests/plan/test_plan.py`` compares the two), so a forecast never compiles the kernel.
    """
    from fringe.demodulate.settings import DRIFT_TERMS, DemodSettings

    motion = scenario.motion
    if isinstance(motion, SteppedRotation):
        return np.eye(2)
    settings = DemodSettings(drift=drift)
    n = max(int(round(motion.period_s / scenario.sample_interval_s)), 8)
    t = np.arange(n) * scenario.sample_interval_s
    theta = np.pi - motion.azimuth_rad(t)                         # C7
    half = max(0.5 * (t[-1] - t[0]), 1e-9)
    tau = (t - t.mean()) / half
    nd = DRIFT_TERMS[settings.drift]
    cols = [tau ** j for j in range(nd)]
    for m in range(1, settings.max_harmonic + 1):
        cols += [np.cos(m * theta), np.sin(m * theta)]
    x = np.stack(cols, axis=1)
    inv = np.linalg.inv(x.T @ x)
    ic = nd + 2                                                   # cos 2 theta (C), then B
    return 0.5 * n * inv[ic:ic + 2, ic:ic + 2]


def _turn_sums(setup, names, period_s, n_turns, max_points, stride=None,
               shape_inv=None) -> _TurnSums:
    """Sums for turns 0 .. n_turns-1: every turn (stride 1) or every m-th.

    m is set by ``max_points`` but is at most STELLAR_DAY_S / (32 T_R) (>= 32 points per
    sidereal day, so the products of the up-to-2 phi harmonics are sampled well above their
    Nyquist rate).
    """
    if stride is None:
        stride = max(1, min(math.ceil(n_turns / max_points),
                            int(STELLAR_DAY_S // (32.0 * period_s))))
    m = math.ceil(n_turns / stride)
    t = (np.arange(m) * stride + 0.5 * stride) * period_s
    c, b = two_theta_amplitudes(setup, t, [n for n in names if n not in NUISANCES])
    cols_c, cols_b, j = [], [], 0
    offsets = setup.apparatus.offset_directions(setup.units)     # (C, B) of each NUISANCES key
    for n in names:
        if n in NUISANCES:
            cols_c.append(np.full(m, offsets[n][0]))
            cols_b.append(np.full(m, offsets[n][1]))
        else:
            cols_c.append(c[:, j])
            cols_b.append(b[:, j])
            j += 1
    jc, jb = np.stack(cols_c, 1), np.stack(cols_b, 1)
    g = np.eye(2) if shape_inv is None else shape_inv
    cc, cb = np.einsum("ni,nj->nij", jc, jc), np.einsum("ni,nj->nij", jc, jb)
    outer = stride * (g[0, 0] * cc + g[1, 1] * np.einsum("ni,nj->nij", jb, jb)
                      + g[0, 1] * (cb + np.swapaxes(cb, 1, 2)))
    cum = np.concatenate([np.zeros((1,) + outer.shape[1:]), np.cumsum(outer, axis=0)])
    return _TurnSums(stride=stride, outer=outer, cum=cum)


def _covariance(fisher: NDArray, idx: list[int]) -> NDArray:
    """Covariance of the parameters ``idx`` (all fitted together); inf where unconstrained.

    A forecast keeps going where the campaign leaves a direction undetermined and says which
    parameters it cannot bound: :func:`fringe.linalg.invert_normal` with ``null="drop"`` (null
    directions: eigenvalues of the equilibrated Fisher matrix below :data:`fringe.linalg.RCOND`
    times the largest).
    """
    return invert_normal(fisher[np.ix_(idx, idx)], null="drop")


def _sigmas(fisher, idx):
    return np.sqrt(np.diag(_covariance(fisher, idx)))


# ----------------------------------------------------------------------------- forecast

#: Mantissas of the round rotation periods of the period grid (1, 1.5, 2, 3, 5, 7 x 10^k).
ROUND_MANTISSAS = (1.0, 1.5, 2.0, 3.0, 5.0, 7.0)


def _period_grid(period, tau0):
    """Round periods (:data:`ROUND_MANTISSAS` x 10^k) from max(T/10, 8 tau0) to 10 T, and T."""
    lo, hi = max(period / 10.0, 8.0 * tau0), min(10.0 * period, MAX_PERIOD_S)
    if lo >= hi:
        return (period,)
    grid = {float(f"{m * 10.0 ** k:.6g}") for k in range(math.floor(math.log10(lo)),
                                                          math.ceil(math.log10(hi)) + 1)
            for m in ROUND_MANTISSAS}
    grid = {p for p in grid if lo <= p <= hi}
    if len(grid) < 3:                  # a narrow range: its ends too
        grid |= {float(f"{lo:.4g}"), float(f"{hi:.4g}")}
    return tuple(sorted(grid | {period}))


def _days_grid(first, last, n):
    """``n`` days from ``first`` to ``last``, evenly in log, inner ones rounded to 2 digits."""
    days = np.geomspace(first, last, n)
    days[1:-1] = [float(f"{d:.2g}") for d in days[1:-1]]
    return days


def forecast(scenario: Scenario, free: str | Sequence[str] | None = None,
             targets: dict[str, float] | None = None,
             settings: PlanSettings | None = None) -> PlanResult:
    """Forecast 1-sigma bounds for a scenario with a ``[noise]`` section (module docstring).

    Parameters
    ----------
    scenario : Scenario
    free : sequence of str or str, optional
        Free coefficients (overrides ``[plan] free``; default the five ke_* for the SME).
    targets : dict, optional
        Coefficient -> target sigma (added to ``[plan.targets]``).
    settings : PlanSettings, optional
        Use these instead of reading ``[plan]``.

    Returns
    -------
    PlanResult

    Notes
    -----
    Cost: two evaluations of the per-turn amplitudes on at most ~``max_turn_points`` (or 32 per
    sidereal day) instants each, plus one per requested latitude; a few seconds for two years.

    References
    ----------
    Sizing rule sigma_C = sqrt(h0 / T): docs/references.md [R-noise-sizing] (derived, white FM).
    Fourier model and which coefficients enter which amplitude: docs/references.md
    [R-lab-fourier], [R-lab-orbital].

    Examples
    --------
    >>> res = forecast(load_scenario("examples/plan_cavity_pair.toml"))   # doctest: +SKIP
    >>> res.sigma["ke_XY"], res.decoupling_days                             # doctest: +SKIP
    """
    st = settings or plan_settings(scenario, free, targets)
    src = scenario.source
    noise = noise_from_section(scenario.sections.get("noise"), src, scenario.sample_interval_s)
    scale = noise_scale(scenario.apparatus, scenario.units)
    period = float(scenario.motion.period_s)
    if period > MAX_PERIOD_S or period < 8 * scenario.sample_interval_s:
        raise ConfigError(f"{src}: [turntable] period: the plan's per-turn model needs "
                          f"8 samples <= T_R <= {MAX_PERIOD_S:g} s, got {period:g} s")
    duty = _duty(scenario.motion, src)
    var_a = scale**2 * turn_amplitude_variance(noise, period, duty)
    setup = scenario.setup()
    # the decoupling forecast: the primary coefficients (SME: ke_*) alone and together with
    # those that separate from them only through the annual modulation (SME: ko_*)
    annual = scenario.theory.annual_names
    lead = tuple(n for n in scenario.theory.primary_names
                 if not (n == "ke_ZZ" and "lab_C0" in st.nuisances)) if annual else ()
    names = list(st.free) + [n for n in lead + annual if n not in st.free]
    names += list(st.nuisances)
    ix = {n: i for i, n in enumerate(names)}
    camp_days = scenario.duration_s / DAY_S
    top_days = max(st.max_days, camp_days)
    n_top = int(top_days * DAY_S // period)
    n_camp = int(scenario.duration_s // period)
    if n_camp < 1:
        raise ConfigError(f"{src}: [campaign] duration: shorter than one turn ({period:g} s)")
    g = np.linalg.inv(turn_shape_matrix(scenario, st.drift))
    fine = _turn_sums(setup, names, period, min(n_top, st.max_turn_points), st.max_turn_points,
                      stride=1, shape_inv=g)
    coarse = fine if n_top <= fine.n_turns else _turn_sums(setup, names, period, n_top,
                                                          st.max_turn_points, shape_inv=g)

    def fisher(n):
        return (fine if n <= fine.n_turns else coarse).fisher(n) / var_a

    nuis = [ix[n] for n in st.nuisances]
    free_idx = [ix[n] for n in st.free] + nuis
    f_camp = fisher(n_camp)
    cov = _covariance(f_camp, free_idx)[: len(st.free), : len(st.free)]
    sig = np.sqrt(np.diag(cov))
    if not np.all(np.isfinite(sig)):
        warnings.warn(f"plan: no information on {', '.join(np.array(st.free)[~np.isfinite(sig)])}"
                      f" in this campaign (sigma infinite)", DegeneracyWarning, stacklevel=2)
    corr = correlation_from_covariance(cov)

    days = _days_grid(min(1.0, camp_days), top_days, st.n_days)
    turns = np.maximum((days * DAY_S // period).astype(int), 1)
    curve = np.array([_sigmas(fisher(n), free_idx)[: len(st.free)] for n in turns])
    comp = {}
    ratio = ()
    dec_days = None
    if annual:
        lead_idx = [ix[n] for n in lead] + nuis
        both_idx = [ix[n] for n in lead + annual] + nuis
        a = np.array([_sigmas(fisher(n), lead_idx)[: len(lead)] for n in turns])
        b = np.array([_sigmas(fisher(n), both_idx)[: len(lead)] for n in turns])
        comp = {"ke_only": {n: tuple(a[:, i]) for i, n in enumerate(lead)},
                "ke_ko": {n: tuple(b[:, i]) for i, n in enumerate(lead)}}
        r = np.max(b / a, axis=1)
        ratio = tuple(r)
        dec_days = _first_stay_below(days, r, st.decoupling_threshold)

    periods = st.periods_s or _period_grid(period, scenario.sample_interval_s)
    per = {}
    for p in periods:
        vp = scale**2 * turn_amplitude_variance(noise, p, duty)
        factor = math.sqrt(vp / var_a * n_camp / max(int(scenario.duration_s // p), 1))
        per[p] = factor
    sig_per = {n: tuple(sig[i] * per[p] for p in periods) for i, n in enumerate(st.free)}

    lat_sig = {}
    if st.latitudes_deg:
        rows = []
        for lat in st.latitudes_deg:
            s2 = replace(setup, site=replace(scenario.site, latitude_deg=float(lat)))
            ts = _turn_sums(s2, names, period, n_camp, min(st.max_turn_points, 4000),
                            shape_inv=g)
            rows.append(_sigmas(ts.fisher(n_camp) / var_a, free_idx)[: len(st.free)])
        lat_sig = {n: tuple(np.array(rows)[:, i]) for i, n in enumerate(st.free)}

    answers = []
    for name, value in st.targets.items():
        i = st.free.index(name)
        answers.append(TargetAnswer(name, float(value),
                                    _days_to_reach(fisher, free_idx, i, value, n_top, period),
                                    top_days))
    _log.info("plan: %d turns, per-turn sigma %.3g %s", n_camp, math.sqrt(var_a), scenario.units)
    return PlanResult(
        title=scenario.title, source=src, theory=scenario.theory.name, units=scenario.units,
        free=tuple(st.free), nuisances=tuple(st.nuisances), noise=noise.to_dict(),
        noise_scale=scale, period_s=period, duty=duty, signal_frequency_hz=2.0 / period,
        psd_at_signal=float(noise.psd(2.0 / period)), turn_sigma=math.sqrt(var_a),
        start_utc=scenario.epoch.utc, campaign_days=camp_days, n_turns=n_camp,
        sigma=dict(zip(st.free, sig.tolist(), strict=True)),
        correlation=tuple(tuple(row) for row in corr.tolist()),
        days=tuple(days.tolist()), sigma_vs_days={n: tuple(curve[:, i].tolist())
                                                  for i, n in enumerate(st.free)},
        comparison=comp, decoupling_ratio=tuple(float(x) for x in ratio),
        decoupling_threshold=st.decoupling_threshold, decoupling_days=dec_days,
        periods_s=tuple(float(p) for p in periods), sigma_vs_period=sig_per,
        latitudes_deg=tuple(float(x) for x in st.latitudes_deg), sigma_vs_latitude=lat_sig,
        targets=tuple(answers))


#: The name ``fringe demo`` calls.


def _first_stay_below(days, r, threshold):
    """Smallest span (log-interpolated) from which r stays <= threshold on the grid."""
    above = np.flatnonzero(~(r <= threshold))
    if above.size == 0:
        return float(days[0])
    last = above[-1]
    if last == days.size - 1:
        return None
    x0, x1 = math.log(days[last]), math.log(days[last + 1])
    y0, y1 = math.log(r[last]) if np.isfinite(r[last]) else 50.0, math.log(r[last + 1])
    frac = (y0 - math.log(threshold)) / (y0 - y1) if y0 != y1 else 1.0
    return float(math.exp(x0 + min(max(frac, 0.0), 1.0) * (x1 - x0)))


def _days_to_reach(fisher, idx, i, target, n_max, period):
    """Days of turns after which sigma_i <= target (bisection on the turn count), or None."""
    def sigma(n):
        return _sigmas(fisher(n), idx)[i]

    if not sigma(n_max) <= target:
        return None
    lo, hi = 0, n_max
    while hi - lo > 1:
        mid = (lo + hi) // 2
        if sigma(max(mid, 1)) <= target:
            hi = mid
        else:
            lo = mid
    return hi * period / DAY_S
