"""The classical-medium fit.

The one nonlinear theory, fitted with lmfit to the per-turn amplitudes.
"""

from __future__ import annotations

import numpy as np

from fringe.constants import C_M_S
from fringe.demodulate.turns import TurnTable
from fringe.errors import ConfigError, FitError
from fringe.experiment.basis import Setup
from fringe.fit.coefficient_fit import CoefficientFit, turn_covariance
from fringe.fit.settings import FitSettings
from fringe.fit.solver import whitening
from fringe.fit.turn_model import turn_model


def fit_medium(setup: Setup, table: TurnTable, settings: FitSettings) -> CoefficientFit:
    """Nonlinear fit of the Sun's velocity through a classical medium (lmfit), 95 % speed limit."""
    import lmfit

    from fringe.theories.medium import MEDIUM_NAMES

    sel = table.accepted
    t = table.t_mid_s[sel]
    c, b = table.C[sel], table.B[sel]
    w = whitening(turn_covariance(table, sel))
    off = settings.lab_b0

    def model(p):
        vals = {n: p[n].value for n in MEDIUM_NAMES}
        _, mc, mb = turn_model(setup, t, params=vals, table=table, sel=sel, mean=False)
        if off:
            mb = mb + p["lab_B0"].value
        return mc, mb

    def resid(p):
        mc, mb = model(p)
        r = np.stack([c - mc, b - mb], axis=1)
        return np.einsum("nij,nj->ni", w, r).ravel()

    if settings.uncertainty == "bootstrap":
        raise ConfigError("FitSettings.uncertainty bootstrap: not available for the nonlinear "
                          "medium fit (use reduced-chi2 or formal)")

    def start(v):
        params = lmfit.Parameters()
        for n, v0 in zip(MEDIUM_NAMES, v):
            params.add(n, value=settings.fixed.get(n, float(v0)), vary=n not in settings.fixed)
        if off:
            params.add("lab_B0", value=0.0)
        return lmfit.minimize(resid, params, method="leastsq")

    # The signal is quadratic in the lab velocity u = v_sun + v_earth, so it barely changes under
    # u -> -u, i.e. v_sun -> -v_sun - 2 v_earth: over spans short against a year this mirror is
    # a second minimum. Start from both and keep the lower chi^2.
    out = start(np.ones(3))
    v_earth = np.mean(setup.frames(t[:: max(t.size // 64, 1)]).beta, axis=0) \
        * C_M_S / 1e3                                                  # km/s, SCCEF
    found = np.array([out.params[n].value for n in MEDIUM_NAMES])
    mirror = start(-found - 2.0 * v_earth)
    if mirror.covar is not None and (out.covar is None or mirror.chisqr < out.chisqr):
        out = mirror
    names = [n for n in MEDIUM_NAMES if n not in settings.fixed]
    if out.covar is None:
        raise FitError("medium fit: no covariance (the fit did not converge or the data do "
                       "not constrain the velocity)")
    cov = np.array(out.covar)
    red = float(out.redchi)
    order = list(out.var_names)
    idx = [order.index(n) for n in names]
    cov_v = cov[np.ix_(idx, idx)]
    if settings.uncertainty == "formal":
        cov_v = cov_v / red
    x = np.array([out.params[n].value for n in names])
    rng = np.random.default_rng(settings.seed)
    full = np.array([out.params[n].value for n in MEDIUM_NAMES])
    draws = np.tile(full, (20000, 1))
    draws[:, [MEDIUM_NAMES.index(n) for n in names]] = rng.multivariate_normal(x, cov_v, 20000)
    speed95 = float(np.percentile(np.linalg.norm(draws, axis=1), 95))
    mc, mb = model(out.params)
    nuis = {}
    if off:
        i = order.index("lab_B0")
        scale = 1.0 / red if settings.uncertainty == "formal" else 1.0
        nuis["lab_B0"] = {"value": float(out.params["lab_B0"].value),
                          "sigma": float(np.sqrt(cov[i, i] * scale))}
    return CoefficientFit(names=names, value=x, cov=cov_v, nuisance=nuis, chi2_reduced=red,
                          dof=int(out.nfree), efficiency={}, model_c=mc, model_b=mb,
                          warnings=[], notes=["medium: nonlinear fit with lmfit (leastsq) from "
                                              "two starts (a solution and its mirror -v - 2 "
                                              "v_earth); the 95 % speed limit samples the fit "
                                              "covariance"],
                          upper_limits={"speed_kms_95": speed95})
