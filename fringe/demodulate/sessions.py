"""Per-session 2 theta amplitudes, the sidereal phases a record covers, small-sample factors.

A short record (a few hand-read turns, a night's session) cannot support the sidereal stage:
its turns sit at one or a few sidereal phases. What it does measure is the mean 2 theta pair of
each session. :class:`SessionBuilder` forms them from the accepted turns, streamed a segment of
the turn table at a time:

* **session** -- a run of accepted turns; a new one starts where the time from one accepted
  turn's last sample to the next one's first exceeds SESSION_GAP_S or three times the earlier
  turn's duration, whichever is longer;
* **mean** -- the weighted mean of the turns' (C_i, B_i) with weights S_i^-1, S_i the turn's
  formal covariance (residual variance x the (C, B) block of the inverse normal matrix);
* **uncertainty** -- for n >= 2 turns the covariance (sum S_i^-1)^-1 scaled by chi^2 / nu of the
  turns about the mean, nu = 2 (n - 1); for one turn its formal covariance, nu = the block's
  residual degrees of freedom (valid samples - block terms). Each standard error is multiplied
  by the Student-t factor of nu (:func:`student_factor`) so that value +- sigma is a 68.27 %
  interval for Gaussian white noise whatever nu;
* **agreement** -- chi^2 of the sessions' (C, B) about their weighted mean (weights: the
  inverse of the scaled covariances before the Student-t factor), nu = 2 (sessions - 1), and its
  p-value;
* **distinct sidereal phases** -- occupied sidereal hours (24 bins of 15 degrees of the
  sidereal angle phi, C5) among the accepted turns; fewer than MIN_SIDEREAL_PHASES cannot
  support the C10 harmonics (five terms per component), and the fit skips the sidereal stage
  (``docs/fit.md``).
"""

from __future__ import annotations

import math

import numpy as np
from numpy.typing import NDArray

from fringe.demodulate.turns import TurnTable
from fringe.io.fit_sections import Estimate, Session, Sessions

#: A pause between accepted turns longer than this (and than 3 turn durations) starts a new
#: session, s.
SESSION_GAP_S = 1800.0

#: Width of a sidereal-phase bin, degrees (one sidereal hour).
SIDEREAL_BIN_DEG = 15.0

#: Fewest distinct sidereal phases (occupied bins) from which the sidereal stage runs.
MIN_SIDEREAL_PHASES = 4

#: Probability content of +-1 sigma of a normal distribution, 2 Phi(1) - 1.
ONE_SIGMA = 0.682689492137086

SESSION_RULE = (f"sessions: runs of accepted turns split where the pause between turns exceeds "
                f"{SESSION_GAP_S:g} s and 3 turn durations; weighted mean of the turns' (C, B); "
                "covariance scaled by the turns' chi2/nu (nu = 2 (n - 1); one turn: its formal "
                "covariance, nu = its residual dof); 1 sigma = standard error x Student-t "
                "factor of nu (68.27 % interval); agreement: chi2 of the sessions about their "
                "weighted mean, nu = 2 (sessions - 1)")


def student_factor(dof: float) -> float:
    """Half-width of the central 68.27 % interval of Student's t with ``dof`` degrees of freedom.

    Multiplies a standard error estimated from ``dof`` degrees of freedom so that value +- the
    product covers the truth 68.27 % of the time (normal data); tends to 1 for many dof and is
    inf for dof <= 0.

    Examples
    --------
    >>> round(student_factor(10), 4)
    1.0526
    """
    from scipy.stats import t

    if not dof > 0:
        return math.inf
    return float(t.ppf(0.5 + ONE_SIGMA / 2, dof))


def sidereal_bins(phi_rad: NDArray) -> NDArray:
    """Sidereal-phase bin (0 ... 23) of each sidereal angle phi (rad)."""
    k = np.floor(np.degrees(np.mod(phi_rad, 2 * np.pi)) / SIDEREAL_BIN_DEG).astype(int)
    return np.clip(k, 0, int(360 / SIDEREAL_BIN_DEG) - 1)


class _Open:
    """Sums of the session being built."""

    def __init__(self):
        self.p = np.zeros((2, 2))
        self.py = np.zeros(2)
        self.ypy = 0.0
        self.n = 0
        self.t_lo = self.t_hi = math.nan
        self.t_sum = 0.0
        self.dof_turn = 0


class SessionBuilder:
    """Sessions and sidereal phases of the accepted turns, fed a segment at a time.

    Parameters
    ----------
    phi_of : callable
        Sidereal angle phi (rad, C5) of times t (s after the epoch).
    units : str
        Unit of the amplitudes.
    """

    def __init__(self, phi_of, units: str):
        self._phi_of = phi_of
        self.units = units
        self._done: list[tuple] = []
        self._open: _Open | None = None
        self._last_stop = self._last_dur = math.nan
        self._bins = np.zeros(int(360 / SIDEREAL_BIN_DEG), bool)

    def add(self, table: TurnTable) -> None:
        """Add the accepted turns of a segment of the turn table (in time order).

        One vectorised pass: the weights, weighted amplitudes and chi^2 terms of every turn at
        once, then a sum per session (a year of 45 s turns is 700 000 of them).
        """
        sel = table.accepted
        if not np.any(sel):
            return
        t_lo, t_hi, t_mid = table.t_start_s[sel], table.t_stop_s[sel], table.t_mid_s[sel]
        self._bins[sidereal_bins(self._phi_of(t_mid))] = True
        p = np.linalg.inv(table.formal_cov()[sel])                      # (n, 2, 2)
        y = np.stack([table.C[sel], table.B[sel]], axis=1)
        py = np.einsum("nij,nj->ni", p, y)
        ypy = np.einsum("ni,ni->n", y, py)
        dof = table.n_valid[sel] - table.settings.n_terms
        prev_stop = np.concatenate([[self._last_stop], t_hi[:-1]])
        prev_dur = np.concatenate([[self._last_dur], (t_hi - t_lo)[:-1]])
        new = t_lo - prev_stop > np.maximum(SESSION_GAP_S, 3.0 * prev_dur)   # NaN: False
        new[0] |= self._open is None
        edges = np.unique(np.concatenate([[0], np.flatnonzero(new)]))
        sums = (np.add.reduceat(p, edges, axis=0), np.add.reduceat(py, edges, axis=0),
                np.add.reduceat(ypy, edges), np.add.reduceat(t_mid, edges))
        for j, (lo, hi) in enumerate(zip(edges, np.append(edges[1:], t_lo.size))):
            if new[lo]:
                self._close()
                self._open = _Open()
                self._open.t_lo = float(t_lo[lo])
            o = self._open
            o.p += sums[0][j]
            o.py += sums[1][j]
            o.ypy += float(sums[2][j])
            o.t_sum += float(sums[3][j])
            o.n += int(hi - lo)
            o.t_hi = float(t_hi[hi - 1])
            o.dof_turn = int(dof[hi - 1])
        self._last_stop, self._last_dur = float(t_hi[-1]), float(t_hi[-1] - t_lo[-1])

    def _close(self) -> None:
        s = self._open
        if s is None:
            return
        v = np.linalg.inv(s.p)
        mean = v @ s.py
        if s.n >= 2:
            nu = 2 * (s.n - 1)
            chi2 = max(s.ypy - float(mean @ s.p @ mean), 0.0)
            v = v * (chi2 / nu)
        else:
            nu = s.dof_turn
        self._done.append((s, mean, v, nu))
        self._open = None

    @property
    def n_sidereal_phases(self) -> int:
        """Occupied sidereal-phase bins so far."""
        return int(np.sum(self._bins))

    def finish(self) -> Sessions:
        """The :class:`~fringe.io.fit_sections.Sessions` of the turns added."""
        self._close()
        rows, means, covs = [], [], []
        for s, mean, v, nu in self._done:
            k = student_factor(nu)
            sc, sb = math.sqrt(v[0, 0]), math.sqrt(v[1, 1])
            corr = float(v[0, 1] / (sc * sb)) if sc > 0 and sb > 0 else 0.0
            t_mean = s.t_sum / s.n
            rows.append(Session(s.t_lo, s.t_hi, s.n,
                                float(np.degrees(np.mod(self._phi_of(np.array([t_mean]))[0],
                                                        2 * np.pi))),
                                Estimate(float(mean[0]), k * sc), Estimate(float(mean[1]), k * sb),
                                corr, int(nu), k))
            means.append(mean)
            covs.append(v)
        chi2, dof, p_value = _agreement(means, covs)
        return Sessions(tuple(rows), chi2, dof, p_value, self.n_sidereal_phases, SESSION_RULE,
                        self.units)


def _agreement(means, covs) -> tuple[float, int, float]:
    """chi^2 of the sessions about their weighted mean, its dof and p-value."""
    from scipy.stats import chi2 as chi2_dist

    if len(means) < 2:
        return math.nan, 0, math.nan
    try:
        w = [np.linalg.inv(v) for v in covs]
    except np.linalg.LinAlgError:
        return math.nan, 0, math.nan
    wsum = sum(w)
    mean = np.linalg.solve(wsum, sum(wi @ m for wi, m in zip(w, means)))
    chi2 = float(sum((m - mean) @ wi @ (m - mean) for wi, m in zip(w, means)))
    dof = 2 * (len(means) - 1)
    return chi2, dof, float(chi2_dist.sf(chi2, dof))


def session_summary(table_segments, phi_of, units: str) -> Sessions:
    """Sessions of the accepted turns of the segments (an iterable of :class:`TurnTable`)."""
    builder = SessionBuilder(phi_of, units)
    for seg in table_segments:
        builder.add(seg)
    return builder.finish()
