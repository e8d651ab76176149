"""Speeds derived from the medium fit, with likelihood-ratio upper limits.

The medium fit (:func:`fringe.fit.medium.fit_medium`) estimates the Sun's velocity through the
medium, v_sun (SCCEF, km/s). The laboratory's velocity through the medium at time t_i is

    u_i = v_sun + a_i,   a_i = c beta(t_i)   (heliocentric orbit plus Earth rotation, C12),

and its horizontal part h_i = H_i u_i, with H_i the first two rows of the SCCEF -> lab rotation
(lab x south, y east: the local horizontal). The quantities reported are

    S = max_i |u_i|   and   S_h = max_i |h_i|   over the accepted turns' mean times,

the largest speed the laboratory had during the record. Their one-sided 95 % upper limit is the
largest value the quantity takes on the likelihood-ratio region

    R = {p : chi2(p) - chi2_min <= 1.6449^2 x s},

p all free parameters (Sun-velocity components and nuisances), 1.6449 = z_0.95 of the normal
distribution (scipy.stats.norm.ppf(0.95)) and s the reduced chi^2 in the ``reduced-chi2`` mode
(1 in ``formal``). For a quantity whose profile Delta chi^2 rises monotonically on each side of
its best value this equals the point where the profile likelihood crosses 2.71 (Wilks' theorem;
the profile construction, docs/references.md [R-stat-profile]). Because the maximum over times
of a maximum over R is the maximum over R of the maximum over times, the limit of S is also the
largest of the per-time limits.

:func:`region_max` finds a maximum over R with scipy's SLSQP in coordinates whitened by the fit
covariance, from several starts; :func:`speed_limits` alternates it with the choice of the time
(coordinate ascent, each step not lowering the objective) until the time no longer changes.
It finds a local maximum: the starts are the fit and its mirror solution, which covers the two
basins the medium's quadratic signal has.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from fringe.errors import ConfigError

#: z_0.95 of the normal distribution (scipy.stats.norm.ppf(0.95)).
Z95_ONE_SIDED = 1.6448536269514722
#: Delta chi^2 of a one-sided 95 % limit of one quantity: z_0.95^2.
DCHI2_95 = Z95_ONE_SIDED ** 2

#: Relative slack on the region's boundary accepted from the optimiser.
_SLACK = 1e-3
#: Relative precision goal of the maximised value (SLSQP ftol over the value's size).
_FTOL = 1e-8
#: Coordinate-ascent rounds over the observation times at most.
_MAX_ROUNDS = 8


@dataclass(frozen=True)
class Region:
    """The likelihood-ratio region {p : chi2(p) <= chi2_min + threshold}.

    Parameters
    ----------
    chi2 : callable
        chi^2 of a parameter vector (the fit's free parameters, lmfit's order).
    best : ndarray, shape (k,)
        The parameters of chi2_min.
    chi2_min : float
    threshold : float
        Allowed rise of chi^2 (same units as ``chi2``).
    scale : ndarray, shape (k, k)
        A matrix L with L L^T ~ the covariance in ``chi2``'s units (chi2 ~ chi2_min + |z|^2 for
        p = best + L z); used only to whiten the search.
    starts : sequence of ndarray
        Further starting points inside the region (e.g. a mirror solution).
    """

    chi2: Callable[[NDArray], float]
    best: NDArray
    chi2_min: float
    threshold: float
    scale: NDArray
    starts: tuple = ()

    def inside(self, p: NDArray) -> bool:
        """True when ``p`` lies in the region (up to the optimiser's slack)."""
        return self.chi2(p) <= self.chi2_min + self.threshold * (1.0 + _SLACK)


def region_max(region: Region, objective: Callable[[NDArray], float],
               starts: Sequence[NDArray] | None = None) -> tuple[float, NDArray]:
    """Largest value of ``objective`` on the region, and where it is reached.

    SLSQP (scipy.optimize.minimize) in whitened coordinates z (p = best + L z, the region
    ~ the ball |z|^2 <= threshold) from each of ``starts``. By default the starts are the best
    fit pushed to the ball's edge along the objective's gradient and those of
    ``region.starts`` that lie in the region. A result is kept only if it lies in the region;
    the best fit always does, so the value is at least ``objective(best)``. A start from which
    the optimiser steps where the model is undefined (:class:`~fringe.errors.ConfigError`) is
    skipped.
    """
    from scipy.optimize import minimize

    lmat = region.scale
    lsolve = np.linalg.pinv(lmat)

    def p_of(z):
        return region.best + lmat @ z

    def neg(z):
        return -objective(p_of(z))

    def room(z):
        return (region.chi2_min + region.threshold - region.chi2(p_of(z))) / region.threshold

    if starts is None:
        # a further start outside the region is a basin whose minimum lies above the threshold
        edge = _edge(neg, np.zeros(region.best.size), np.sqrt(region.threshold))
        starts = (p_of(edge), *(p for p in region.starts if region.inside(p)))
    found, where = objective(region.best), region.best
    for p0 in starts:
        try:
            out = minimize(neg, lsolve @ (p0 - region.best), method="SLSQP",
                           options={"maxiter": 100, "ftol": _FTOL * max(abs(found), 1.0)},
                           constraints=[{"type": "ineq", "fun": room}])
        except ConfigError:                   # a trial step where the model has no meaning
            continue
        p = p_of(out.x)
        if region.inside(p) and objective(p) > found:
            found, where = objective(p), p
    return float(found), where


def _edge(neg, z0: NDArray, r: float) -> NDArray:
    """z0 moved by r along the objective's ascent direction (numerical gradient)."""
    h = 1e-6 * max(r, 1.0)
    g = np.array([(neg(z0 - h * e) - neg(z0 + h * e)) / (2 * h) for e in np.eye(z0.size)])
    norm = np.linalg.norm(g)
    return z0 if not np.isfinite(norm) or norm == 0.0 else z0 + r * g / norm


def speed_limits(region: Region, sun_of: Callable[[NDArray], NDArray], offsets_kms: NDArray,
                 projectors: NDArray | None = None) -> tuple[float, float]:
    """Best value and 95 % upper limit of max_i |P_i (v_sun(p) + a_i)|, km/s.

    Parameters
    ----------
    region : Region
        The fit's likelihood-ratio region (threshold for a one-sided 95 % limit).
    sun_of : callable
        The Sun's velocity through the medium (3,), km/s, SCCEF, of a parameter vector.
    offsets_kms : ndarray, shape (n, 3)
        a_i: the lab velocity relative to the Sun at the observation times, km/s, SCCEF.
    projectors : ndarray, shape (n, m, 3), optional
        P_i (e.g. the horizontal rows of the SCCEF -> lab rotation); default the identity.

    Returns
    -------
    best, upper_95 : float
        At the best fit, and the largest value on the region (coordinate ascent over the time
        index: the time of the current maximum, the region maximum for that time, and again,
        until the time repeats).
    """
    a = np.asarray(offsets_kms, float)
    proj = np.broadcast_to(np.eye(3), (a.shape[0], 3, 3)) if projectors is None else projectors

    def speeds(p):
        return np.linalg.norm(np.einsum("nij,nj->ni", proj, sun_of(p)[None, :] + a), axis=1)

    best = float(speeds(region.best).max())
    k = int(np.argmax(speeds(region.best)))
    where, seen = region.best, set()
    for _ in range(_MAX_ROUNDS):
        seen.add(k)

        def at_k(p, k=k):
            return float(np.linalg.norm(proj[k] @ (sun_of(p) + a[k])))

        # first round: the default starts; later ones: the last maximum (a nearby time)
        _, where = region_max(region, at_k, None if where is region.best else (where,))
        k = int(np.argmax(speeds(where)))
        if k in seen:
            break
    return best, float(speeds(where).max())
