"""The portable likelihood of a linear fit of one run file (the result's ``likelihood`` part).

:func:`likelihood_of` packs what a later joint fit or combination needs
(:mod:`fringe.fit.joint`): stage 3's solution and covariance over all its columns (free
coefficients, then nuisances), its chi^2, dof and row scales, and the map from unit
coefficients to the run's C10 harmonics at the middle of the record.
"""

from __future__ import annotations

import numpy as np

from fringe.errors import FitError
from fringe.io.fit_joint import Likelihood

__all__ = ["likelihood_of"]


def likelihood_of(setup, res, settings, span_s: float) -> Likelihood | None:
    """The portable likelihood of a linear stage-3 fit (a CoefficientFit), or None.

    None for a nonlinear theory, for a fit without the covariance of all its columns and for
    rms_kt (fitted apart from the 2 theta columns, its covariance with them neglected).
    """
    if not setup.theory.linear or res.cov_all is None or "rms_kt" in res.names:
        return None
    from fringe.experiment.harmonics import harmonics_at

    labels = list(res.labels_all)
    k = len(res.names)
    value = list(np.asarray(res.value, float)) + [res.nuisance[n]["value"] for n in labels[k:]]
    hmap = None
    try:
        coef, _, _ = harmonics_at(setup, 0.5 * span_s, names=tuple(res.names))
        from fringe.conventions import HARMONIC_NAMES

        hmap = {"names": list(HARMONIC_NAMES), "matrix": np.asarray(coef, float).tolist()}
    except (ValueError, FitError):       # a theory without a harmonic table: none recorded
        hmap = None
    chi2 = float(res.chi2_reduced) * res.dof
    return Likelihood(labels, k, value, np.asarray(res.cov_all, float), chi2, int(res.dof),
                      settings.uncertainty, res.row_scales or (1.0, 1.0), hmap)
