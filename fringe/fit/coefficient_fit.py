"""A coefficient fit as stages 2-3 return it.

Also the per-turn covariance that both the linear and the medium fits weight with.
"""

from __future__ import annotations

from dataclasses import dataclass, field

from numpy.typing import NDArray

from fringe.demodulate.turns import TurnTable
from fringe.fit.passes import (
    noise_level,
)


def turn_covariance(table: TurnTable, sel: NDArray) -> NDArray:
    """Per-turn covariance of (C, B) used as weights, (n, 2, 2), for the rows ``sel``.

    s_i^2 x ninv_i with s_i from :func:`fringe.fit.passes.noise_level`. The overall level is
    then set by the reduced chi^2 (or the bootstrap).
    """
    level = noise_level(table.residual_rms[sel])
    return level[:, None, None] ** 2 * table.ninv_2[sel]


@dataclass
class CoefficientFit:
    """Stage-3 outcome before packaging (see :class:`fringe.io.fit_result.FitResult`)."""

    names: list
    value: NDArray
    cov: NDArray
    nuisance: dict
    chi2_reduced: float
    dof: int
    efficiency: dict
    model_c: NDArray
    model_b: NDArray
    warnings: list      # of fringe.io.fit_sections.FitWarning
    notes: list
    upper_limits: dict = field(default_factory=dict)
    derived: dict = field(default_factory=dict)     # plain JSON types (medium fit)
    #: the per-session 2 theta amplitudes (fringe.io.fit_sections.Sessions), when stage 2 was
    #: skipped for too few sidereal phases
    sessions: object = None
    #: the covariance of every stage-3 column (free coefficients, then the nuisances) and
    #: their labels (:func:`fringe.fit.passes.design_labels`), for the systematic budget
    cov_all: NDArray | None = None
    labels_all: list | None = None
    #: (r_c, r_b): the reduced chi^2 of the C and B rows that rescaled the weights (linear fits)
    row_scales: tuple | None = None
