"""rms_kt (Kennedy-Thorndike) from the per-turn offsets of a cavity-vs-atomic-reference record.

A cavity compared with an atomic reference shifts isotropically by rms_kt v^2/c^2 (plus the
isotropic part (2/3) rms_mm v^2/c^2 of the orientation term), where v is the lab velocity relative
to the preferred frame (docs/references.md [R-RMS-two-way]). That shift does not rotate with the
table: it lives in each turn's offset a0 (the block model's constant at the turn's middle), which
also carries the cavity's drift. The offsets are fitted by weighted least squares with

    a0_i = rms_kt A_kt(t_i) + [rms_mm A_mm(t_i), with rms_mm from the 2 theta fit] + P(t_i),

A_k the non-rotating mean of the measured per-turn model (:func:`fringe.fit.turn_model.turn_model`)
and P a polynomial drift of degree ``OFFSET_DRIFT_DEGREE`` in time over the record. What separates
rms_kt from the drift is the sidereal modulation of v^2 by the Earth's rotation velocity and the
annual one by the orbit. The uncertainty is scaled by this block's own reduced chi^2; drift that a
polynomial does not describe (flicker or random-walk frequency noise of the cavity) leaves
correlated residuals, for which ``FitSettings(uncertainty="bootstrap")`` is the honest choice.

References
----------
Kennedy-Thorndike-type analyses of a cavity against an atomic standard: Wolf et al. 2003, 2004
(docs/references.md [R-practice-stage3], [R-pub-Wolf2003-2004]).
"""

from __future__ import annotations

import numpy as np
from numpy.typing import NDArray

from fringe.demodulate.turns import TurnTable
from fringe.errors import ConfigError, FitError
from fringe.experiment.basis import Setup
from fringe.fit.turn_model import turn_model

#: Degree of the polynomial drift of the per-turn offsets over the record.
OFFSET_DRIFT_DEGREE = 3


def fit_rms_kt(setup: Setup, table: TurnTable, sel: NDArray, mm_value: float,
               uncertainty: str = "reduced-chi2", bootstrap_days: float = 1.0,
               n_bootstrap: int = 200, seed: int = 0) -> tuple[float, float, float, int]:
    """rms_kt from per-turn offsets; returns (value, sigma, reduced chi^2, dof)."""
    t = table.t_mid_s[sel]
    a0 = table.coef[sel, table.settings.index("a0")]
    a_model, _, _ = turn_model(setup, t, ("rms_kt", "rms_mm"), table=table, sel=sel)
    g_kt, g_mm = a_model[:, 0], a_model[:, 1]
    if not np.any(np.abs(g_kt) > 0):
        raise ConfigError("FitSettings.free rms_kt: this apparatus has no isotropic response "
                          "(a pair beat cancels it); rms_kt needs kind cavity-vs-reference with "
                          "an atomic reference")
    y = a0 - mm_value * g_mm
    # offset variance of each turn: its residual variance over its valid samples (the offset
    # of a centred drift model is the block mean to first order)
    w = 1.0 / np.maximum(table.residual_rms[sel] ** 2 / np.maximum(table.n_valid[sel], 1),
                         1e-300)
    u = (t - t.mean()) / max(np.ptp(t) / 2.0, 1.0)
    x = np.column_stack([g_kt] + [u ** d for d in range(OFFSET_DRIFT_DEGREE + 1)])

    def solve(idx):
        xs = x[idx] * np.sqrt(w[idx])[:, None]
        ys = y[idx] * np.sqrt(w[idx])
        scale = np.linalg.norm(xs, axis=0)
        scale[scale == 0] = 1.0
        coef, *_ = np.linalg.lstsq(xs / scale, ys, rcond=None)
        coef = coef / scale
        cov = np.linalg.pinv((xs / scale).T @ (xs / scale)) / np.outer(scale, scale)
        r = ys - xs @ coef
        return coef, cov, float(r @ r), max(idx.size - x.shape[1], 1)

    allrows = np.arange(t.size)
    coef, cov, chi2, dof = solve(allrows)
    red = chi2 / dof
    if uncertainty == "formal":
        sigma = float(np.sqrt(cov[0, 0]))
    elif uncertainty == "bootstrap":
        groups = np.floor((t - t[0]) / (86400.0 * bootstrap_days)).astype(int)
        uniq = np.unique(groups)
        if uniq.size < 5:
            raise FitError(f"FitSettings.uncertainty bootstrap: only {uniq.size} blocks of "
                           f"{bootstrap_days} d for rms_kt; need at least 5")
        members = [np.flatnonzero(groups == g) for g in uniq]
        rng = np.random.default_rng(seed)
        draws = [solve(np.concatenate([members[i] for i in rng.integers(0, uniq.size,
                                                                        uniq.size)]))[0][0]
                 for _ in range(n_bootstrap)]
        sigma = float(np.std(draws, ddof=1))
    else:
        sigma = float(np.sqrt(cov[0, 0] * red))
    return float(coef[0]), sigma, red, dof
