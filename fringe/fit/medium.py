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
from fringe.fit.medium_limits import DCHI2_95, Region, speed_limits
from fringe.fit.settings import FitSettings
from fringe.fit.solver import whitening
from fringe.fit.turn_model import turn_model


def fit_medium(setup: Setup, table: TurnTable, settings: FitSettings) -> CoefficientFit:
    """Nonlinear fit of the Sun's velocity through a classical medium (lmfit), derived speeds.

    Returns the Sun-velocity components with their covariance and, in ``derived``
    (:func:`medium_derived`), the Sun's and the laboratory's speed through the medium with
    likelihood-ratio 95 % upper limits and the 2 theta amplitude expected from the orbital
    velocity alone.
    """
    import lmfit

    from fringe.theories.medium import MEDIUM_NAMES

    sel = table.accepted
    t = table.t_mid_s[sel]
    c, b = table.C[sel], table.B[sel]
    w = whitening(turn_covariance(table, sel))
    off = settings.lab_b0

    def model_values(vals):
        """Model (C, B) for a dict of the Sun-velocity components and, if fitted, lab_B0."""
        sun = {n: vals[n] for n in MEDIUM_NAMES}
        _, mc, mb = turn_model(setup, t, params=sun, table=table, sel=sel, mean=False)
        return mc, mb + vals.get("lab_B0", 0.0)

    def resid_values(vals):
        mc, mb = model_values(vals)
        r = np.stack([c - mc, b - mb], axis=1)
        return np.einsum("nij,nj->ni", w, r).ravel()

    def model(p):
        return model_values({n: p[n].value for n in p})

    def resid(p):
        return resid_values({n: p[n].value for n in p})

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
    other = start(-found - 2.0 * v_earth)
    if other.covar is not None and (out.covar is None or other.chisqr < out.chisqr):
        out, other = other, out
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
    threshold = DCHI2_95 * (red if settings.uncertainty == "reduced-chi2" else 1.0)
    derived = medium_derived(setup, t, resid_values, model_values, out, other, threshold)
    derived["two_theta_amplitude"].update(_orbital_fraction(
        c, b, w, model_values(dict.fromkeys(MEDIUM_NAMES, 0.0)), off,
        settings.uncertainty == "reduced-chi2"))
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
                                              "v_earth); the 95 % speed limits are maxima "
                                              "over the likelihood-ratio region Delta chi2 <= "
                                              f"{threshold:.4g} (one-sided, z_0.95^2 x scale)"],
                          upper_limits={"sun_speed_kms_95":
                                        derived["sun_speed_kms"]["upper_95"]},
                          derived=derived)


def _orbital_fraction(c, b, w, template, offset: bool, reduced: bool) -> dict:
    """Least-squares factor k of the orbital expectation in the per-turn data, with 1 sigma.

    (C_i, B_i) = k (C0_i, B0_i) + lab_B0 (0, 1) [if ``offset``] + noise, weighted with the
    fit's whitening ``w``; (C0, B0) = ``template``, the model with v_sun = 0. The 1-sigma is
    scaled by this fit's own reduced chi^2 when ``reduced`` (a signal of another shape inflates
    it). Returns ``{"orbital_fraction", "orbital_fraction_sigma"}``.
    """
    cols = [np.stack(template, axis=1)]
    if offset:
        cols.append(np.stack([np.zeros_like(c), np.ones_like(c)], axis=1))
    x = np.stack([np.einsum("nij,nj->ni", w, col).ravel() for col in cols], axis=1)
    y = np.einsum("nij,nj->ni", w, np.stack([c, b], axis=1)).ravel()
    coef, *_ = np.linalg.lstsq(x, y, rcond=None)
    cov = np.linalg.inv(x.T @ x)
    if reduced:
        r = y - x @ coef
        cov = cov * float(r @ r) / (y.size - x.shape[1])
    return {"orbital_fraction": float(coef[0]),
            "orbital_fraction_sigma": float(np.sqrt(cov[0, 0]))}


def _region(resid_values, out, other, threshold) -> tuple[Region, list]:
    """The fit's likelihood-ratio region over lmfit's free parameters (``out.var_names``).

    ``other``, the fit from the other start (the mirror solution or the first one), is a
    further start of the search.
    """
    order = list(out.var_names)
    fixed = {n: out.params[n].value for n in out.params if n not in order}

    def chi2(x):
        r = resid_values({**fixed, **dict(zip(order, x))})
        return float(r @ r)

    best = np.array([out.params[n].value for n in order])
    # lmfit scales its covariance by the reduced chi^2; the raw one matches chi2's units
    lam, vec = np.linalg.eigh(np.array(out.covar) / float(out.redchi))
    scale = vec * np.sqrt(np.clip(lam, 1e-30 * max(lam.max(), 1e-300), None))
    starts = (np.array([other.params[n].value for n in order]),)
    return Region(chi2, best, chi2(best), threshold, scale, starts), order


def medium_derived(setup: Setup, t: np.ndarray, resid_values, model_values, out, other,
                   threshold: float) -> dict:
    """Speeds through the medium and the orbital expectation, plain JSON types.

    ``sun_speed_kms`` {best, upper_95}: |v_sun|; ``lab_speed_kms`` {best, upper_95,
    horizontal_best, horizontal_upper_95}: the largest speed of the laboratory through the
    medium (and of its horizontal part) over the accepted turns' mean times ``t``
    (:mod:`fringe.fit.medium_limits`); ``two_theta_amplitude``: RMS and largest 2 theta
    amplitude sqrt(C^2 + B^2) over the turns of the fitted medium signal and of the signal a
    medium at rest with the Sun would give (v_sun = 0, orbital and rotation velocity only),
    in the unit of the observable (:func:`fit_medium` adds the fraction of that expectation
    found in the data). Upper limits are one-sided 95 % (Delta chi^2 ``threshold``).
    """
    from fringe.theories.medium import MEDIUM_NAMES

    region, order = _region(resid_values, out, other, threshold)
    base = {n: out.params[n].value for n in MEDIUM_NAMES}
    idx = [(MEDIUM_NAMES.index(n), i) for i, n in enumerate(order) if n in MEDIUM_NAMES]

    def sun_of(x):
        v = np.array([base[n] for n in MEDIUM_NAMES])
        for j, i in idx:
            v[j] = x[i]
        return v

    state = setup.frames(t)
    a = state.beta * C_M_S / 1e3                                      # km/s, SCCEF
    sun_best, sun_up = speed_limits(region, sun_of, np.zeros((1, 3)))
    lab_best, lab_up = speed_limits(region, sun_of, a)
    h_best, h_up = speed_limits(region, sun_of, a, state.rotation[:, :2, :])
    amp = {}
    for key, vals in (("fitted", base), ("orbital", dict.fromkeys(MEDIUM_NAMES, 0.0))):
        mc, mb = model_values(vals)
        s = np.hypot(mc, mb)
        amp[f"{key}_rms"], amp[f"{key}_max"] = float(np.sqrt(np.mean(s * s))), float(s.max())
    return {"sun_speed_kms": {"best": sun_best, "upper_95": sun_up},
            "lab_speed_kms": {"best": lab_best, "upper_95": lab_up, "horizontal_best": h_best,
                              "horizontal_upper_95": h_up},
            "two_theta_amplitude": {"units": setup.units, **amp}}
