"""Stages 2 and 3: from per-turn 2 theta amplitudes to harmonics and coefficients.

* Stage 2 (:func:`fit_harmonics`): weighted least squares of the per-turn (C_i, B_i) against the
  C10 model in the sidereal angle phi_i; gives C0 ... Bc2 with covariance. B0 is zero for every
  photon-sector signal (up to the tiny Earth-rotation ko_XY term), so a B0 beyond 3 sigma raises a
  warning naming a lab-fixed 2 theta systematic.
* Stage 3 (:func:`fit_coefficients`): weighted least squares of the same amplitudes against the
  per-turn 2 theta content of each free coefficient's basis signal, evaluated with the ephemeris
  velocity and modelled as stage 1 measures it over the turn (:func:`turn_model`: the model's
  change within the turn times the block fit's response to it), plus nuisances: a constant
  B offset (lab-fixed 2 theta systematic, on by default), optionally a constant C offset (only
  when ke_ZZ is not free: the two are degenerate) and regressions on the 2 theta amplitudes of
  auxiliary channels. The classical medium (nonlinear) is fitted with lmfit.

Uncertainties: per-turn weights from the stage-1 formal covariance; the coefficient covariance
is scaled by the reduced chi^2 (default, the observed scatter), or replaced by a block bootstrap
over days of turns (correlated noise), or left formal. ``efficiency`` = white-noise Cramer-Rao
sigma for this record (per-sample noise = median per-turn residual RMS) / reported sigma.
"""

from __future__ import annotations

import logging
from dataclasses import dataclass, field

import numpy as np
from numpy.typing import NDArray

from .constants import C_M_S
from .conventions import HARMONIC_NAMES
from .demodulate import TurnTable
from .errors import ConfigError, DegeneracyWarning, FitError, SystematicsWarning
from .frames import sidereal_angle_rad
from .signal import Setup
from .theories import KE_NAMES, KO_NAMES
from .turn_model import turn_model  # noqa: F401  (turn_model re-exported)
from .turn_wls import (
    PairWeights,
    bootstrap_cov,
    fitted,
    normal_parts,
    residual_chi2,
    solve,
    whitening,
    wls,
)

logger = logging.getLogger(__name__)

UNCERTAINTY_MODES = ("reduced-chi2", "bootstrap", "formal")

#: Span from which ko_* join the default SME free set, days (half a sidereal year: the annual
#: modulation that separates ko_* from ke_* is then sampled over half a cycle). Common practice
#: reading of practice.md §6 (a year or more separates them fully).
KO_DEFAULT_SPAN_DAYS = 182.6



@dataclass(frozen=True)
class FitSettings:
    """Settings of stages 2-3 (see module docstring).

    Parameters
    ----------
    theory : str
    free : tuple of str or None
        Free coefficients (None: the theory's default set).
    fixed : dict
        Coefficients held at given values.
    uncertainty : {"reduced-chi2", "bootstrap", "formal"}
    lab_b0 : bool
        Fit a constant B offset (lab-fixed 2 theta systematic).
    lab_c0 : bool
        Fit a constant C offset (not allowed with ke_ZZ free).
    regress : tuple of str
        Auxiliary channels whose 2 theta amplitudes are regressed out.
    bootstrap_days : float
        Length of the resampled blocks of turns, days.
    n_bootstrap : int
    seed : int
    """

    theory: str = "sme"
    free: tuple | None = None
    fixed: dict = field(default_factory=dict)
    uncertainty: str = "reduced-chi2"
    lab_b0: bool = True
    lab_c0: bool = False
    regress: tuple = ()
    bootstrap_days: float = 1.0
    n_bootstrap: int = 200
    seed: int = 12345

    def __post_init__(self):
        if self.uncertainty not in UNCERTAINTY_MODES:
            raise ConfigError(f"--uncertainty: expected one of {', '.join(UNCERTAINTY_MODES)}, "
                              f"got {self.uncertainty!r}")

    def to_dict(self) -> dict:
        return {"theory": self.theory, "free": list(self.free) if self.free else None,
                "fixed": dict(self.fixed), "uncertainty": self.uncertainty,
                "lab_b0": self.lab_b0, "lab_c0": self.lab_c0, "regress": list(self.regress),
                "bootstrap_days": self.bootstrap_days, "n_bootstrap": self.n_bootstrap,
                "seed": self.seed}


def default_free(setup: Setup, span_days: float) -> tuple[str, ...]:
    """The default free coefficients of a theory for a record of ``span_days``."""
    name = setup.theory.name
    if name == "sme":
        return KE_NAMES + (KO_NAMES if span_days >= KO_DEFAULT_SPAN_DAYS else ())
    if name == "rms":
        atomic = (setup.apparatus.kind == "cavity-vs-reference"
                  and getattr(setup.apparatus, "reference", None) == "atomic")
        return ("rms_mm", "rms_kt") if atomic else ("rms_mm",)
    return setup.theory.parameter_names


#: Turns in the running median that sets each turn's noise level (odd).
NOISE_WINDOW_TURNS = 101


def turn_covariance(table: TurnTable, sel: NDArray) -> NDArray:
    """Per-turn covariance of (C, B) used as weights, (n, 2, 2), for the rows ``sel``.

    s_i^2 x ninv_i, where s_i is the running median of the per-turn residual RMS over
    NOISE_WINDOW_TURNS accepted turns (a local per-sample noise level that follows slow changes
    of the noise but not each turn's own scatter: weighting by a turn's own residual variance,
    with nu ~ 40 degrees of freedom, would inflate the estimator's variance by
    (nu - 2)/(nu - 4) and correlate weights with the data). The overall level is then set by
    the reduced chi^2 (or the bootstrap).
    """
    from scipy.ndimage import median_filter

    rms = table.residual_rms[sel]
    size = min(NOISE_WINDOW_TURNS, rms.size if rms.size % 2 else max(rms.size - 1, 1))
    level = median_filter(rms, size=size, mode="nearest")
    return level[:, None, None] ** 2 * table.ninv_2[sel]


def fit_harmonics(phi_rad: NDArray, c: NDArray, b: NDArray, w: PairWeights) -> dict:
    """Stage 2: C10 harmonics with covariance (scaled by the reduced chi^2)."""
    sin1, cos1 = np.sin(phi_rad), np.cos(phi_rad)
    f_all = np.stack([np.ones_like(phi_rad), sin1, cos1, 2 * sin1 * cos1,
                      cos1 * cos1 - sin1 * sin1], axis=1)       # 1, sin, cos phi, 2 phi

    def rows(sl):
        f = f_all[sl]
        z = np.zeros_like(f)
        return np.concatenate([f, z], axis=1), np.concatenate([z, f], axis=1), c[sl], b[sl]

    x, cov, chi2, dof = wls(rows, w, 10)
    red = chi2 / dof
    cov = cov * max(red, 0.0)
    return {"names": list(HARMONIC_NAMES), "value": x.tolist(),
            "sigma": np.sqrt(np.diag(cov)).tolist(), "covariance": cov.tolist(),
            "chi2_reduced": red}


def _bootstrap(provider, w, k, t_s, days, n_boot, rng, d_c, d_b):
    """Block bootstrap over days of turns: resample whole groups' normal equations."""
    groups = np.floor((t_s - t_s[0]) / (86400.0 * days)).astype(int)
    edges = np.flatnonzero(np.diff(groups)) + 1             # turns are in time order
    bounds = np.concatenate([[0], edges, [t_s.size]])
    if bounds.size - 1 < 5:
        raise FitError(f"--uncertainty bootstrap: only {bounds.size - 1} blocks of {days} d; "
                       "need at least 5 (shorter --bootstrap-days)")
    parts = [normal_parts(provider, w, k, slice(int(lo), int(hi)))
             for lo, hi in zip(bounds[:-1], bounds[1:])]
    return bootstrap_cov(parts, n_boot, rng, d_c, d_b)


@dataclass
class CoefficientFit:
    """Stage-3 outcome before packaging (see :class:`fringe.result.FitResult`)."""

    names: list
    value: NDArray
    cov: NDArray
    nuisance: dict
    chi2_reduced: float
    dof: int
    efficiency: dict
    model_c: NDArray
    model_b: NDArray
    warnings: list
    notes: list
    upper_limits: dict = field(default_factory=dict)


def design_labels(names: tuple[str, ...], settings: FitSettings) -> list[str]:
    """Labels of the stage-3 columns: the free coefficients, then the nuisances
    (lab_B0, lab_C0, aux_CHANNEL) that ``settings`` asks for; shared with the one-stage fit."""
    labels = list(names)
    if settings.lab_b0:
        labels.append("lab_B0")
    if settings.lab_c0:
        if "ke_ZZ" in names:
            raise ConfigError("--lab-c0: a constant C offset is degenerate with ke_ZZ; fix "
                              "ke_ZZ or drop --lab-c0")
        labels.append("lab_C0")
    return labels + [f"aux_{ch}" for ch in settings.regress]


def _design(setup, t, names, table, sel, settings):
    """Per-turn design of the free coefficients and the nuisance columns.

    Returns (jc, jb), each (n, k + nuisances), and the labels of the columns.
    """
    labels = design_labels(names, settings)
    k, kk = len(names), len(labels)
    jc, jb = np.empty((t.size, kk)), np.empty((t.size, kk))
    turn_model(setup, t, names, table=table, sel=sel, mean=False, out=(jc, jb))
    ic, isn = table.settings.index("c2"), table.settings.index("s2")
    col = k
    if settings.lab_b0:
        jc[:, col], jb[:, col] = 0.0, 1.0
        col += 1
    if settings.lab_c0:
        jc[:, col], jb[:, col] = 1.0, 0.0
        col += 1
    for ch in settings.regress:
        jc[:, col], jb[:, col] = table.aux[ch][sel, ic], table.aux[ch][sel, isn]
        col += 1
    return jc, jb, labels


def fit_coefficients(setup: Setup, table: TurnTable, settings: FitSettings,
                     free: tuple[str, ...], weights: PairWeights | None = None
                     ) -> CoefficientFit:
    """Stage 3 for a linear theory (see module docstring); ``weights`` = the per-turn weights
    from :func:`turn_covariance` if already computed."""
    sel = table.accepted
    t = table.t_mid_s[sel]
    c, b = table.C[sel].copy(), table.B[sel].copy()
    if settings.fixed:
        _, fc, fb = turn_model(setup, t, params=settings.fixed, table=table, sel=sel,
                               mean=False)
        c, b = c - fc, b - fb
    w = weights if weights is not None else PairWeights.from_cov(turn_covariance(table, sel))
    jc, jb, labels = _design(setup, t, free, table, sel, settings)
    n, kk = t.size, len(labels)

    def rows(sl):
        return jc[sl], jb[sl], c[sl], b[sl]

    parts = normal_parts(rows, w, kk)
    x, cov = solve(*parts.combine())
    r_c = r_b = 1.0                               # reduced chi^2 of the C and B rows
    if settings.uncertainty != "formal":
        # Coloured noise inflates the C and B scatter differently (a turn's curvature leaks
        # into the component even about its middle); one chi^2 factor for both would
        # understate sigma of C-only coefficients (ke_ZZ). Scale each row family by its own
        # reduced chi^2 and refit (same Gram matrices, rescaled).
        _, r_c, r_b = residual_chi2(rows, w, x)
        if not (r_c > 0 and r_b > 0):
            raise FitError("stage 3: the residuals of C or B vanish; cannot scale the weights "
                           "by the scatter (use --uncertainty formal for noise-free data)")
        x, cov = solve(*parts.combine(np.sqrt(r_c), np.sqrt(r_b)))
    d_c, d_b = np.sqrt(r_c), np.sqrt(r_b)          # row scales of the covariances
    chi2, _, _ = residual_chi2(rows, w, x, d_c, d_b)
    dof = max(2 * n - kk, 1)
    red = chi2 / dof
    notes, warns = [], []
    if settings.uncertainty == "reduced-chi2":
        cov = cov * red
    elif settings.uncertainty == "bootstrap":
        cov = _bootstrap(rows, w, kk, t, settings.bootstrap_days, settings.n_bootstrap,
                         np.random.default_rng(settings.seed), d_c, d_b)
    # Cramer-Rao with the white per-sample level the data show
    sigma_white = float(np.median(table.residual_rms[sel]))
    w_cr = PairWeights.from_cov(table.ninv_2[sel], scale=sigma_white ** 2)
    _, cov_cr = solve(*normal_parts(rows, w_cr, kk).combine())
    k = len(free)
    sig = np.sqrt(np.diag(cov))
    eff = {nm: float(np.sqrt(cov_cr[i, i]) / sig[i]) for i, nm in enumerate(free)}
    warns += _degeneracy(labels, cov)
    model_c, model_b = fitted(rows, n, x)          # the whole fitted model (with nuisances)
    if abs(r_c / r_b - 1.0) > 0.2:
        notes.append(f"C and B rows scaled separately by their reduced chi2 "
                     f"({r_c:.3g}, {r_b:.3g}): coloured noise")
    nuis = {lab: {"value": float(x[i]), "sigma": float(sig[i])}
            for i, lab in enumerate(labels) if i >= k}
    return CoefficientFit(names=list(free), value=x[:k], cov=cov[:k, :k], nuisance=nuis,
                          chi2_reduced=red, dof=dof, efficiency=eff, model_c=model_c,
                          model_b=model_b, warnings=warns, notes=notes)


def _degeneracy(labels, cov, limit: float = 0.95) -> list[str]:
    sig = np.sqrt(np.diag(cov))
    corr = cov / np.outer(sig, sig)
    out = []
    pairs = [(labels[i], labels[j], corr[i, j]) for i in range(len(labels))
             for j in range(i + 1, len(labels)) if abs(corr[i, j]) > limit]
    if pairs:
        text = ", ".join(f"{a}/{b} (r = {r:+.3f})" for a, b, r in pairs[:6])
        out.append(f"near-degenerate coefficients: {text}; the record does not separate them "
                   "(a longer span, or fix some of them)")
        import warnings

        warnings.warn(out[-1], DegeneracyWarning, stacklevel=3)
    return out


def fit_medium(setup: Setup, table: TurnTable, settings: FitSettings) -> CoefficientFit:
    """Nonlinear fit of the Sun's velocity through a classical medium (lmfit), 95 % speed limit."""
    import lmfit

    from .theories import MEDIUM_NAMES

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
        raise ConfigError("--uncertainty bootstrap: not available for the nonlinear medium fit "
                          "(use reduced-chi2 or formal)")

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


def _add_rms_kt(setup: Setup, table: TurnTable, settings: FitSettings,
                res: CoefficientFit) -> None:
    """Append rms_kt from the per-turn offsets (:mod:`fringe.fit_offsets`) to ``res``."""
    from .fit_offsets import OFFSET_DRIFT_DEGREE, fit_rms_kt

    mm = float(res.value[res.names.index("rms_mm")])
    kt, sig, red, _ = fit_rms_kt(setup, table, table.accepted, mm, settings.uncertainty,
                                 settings.bootstrap_days, settings.n_bootstrap, settings.seed)
    k = len(res.names)
    cov = np.zeros((k + 1, k + 1))
    cov[:k, :k] = res.cov
    cov[k, k] = sig ** 2
    res.names = res.names + ["rms_kt"]
    res.value = np.append(res.value, kt)
    res.cov = cov
    res.notes.append(f"rms_kt from the per-turn offsets with a degree-{OFFSET_DRIFT_DEGREE} "
                     f"polynomial drift (reduced chi2 {red:.3g}); its covariance with the "
                     "2 theta coefficients is neglected (set to 0); with coloured cavity drift "
                     "prefer --uncertainty bootstrap")


def stage2_and_3(setup: Setup, table: TurnTable, settings: FitSettings,
                 span_days: float) -> tuple[dict, CoefficientFit, tuple]:
    """Run stage 2 (harmonics) and stage 3 (coefficients); also the systematics diagnostics."""
    sel = table.accepted
    if np.sum(sel) < 12:
        raise FitError(f"fit: only {int(np.sum(sel))} accepted turns; need at least 12")
    t = table.t_mid_s[sel]
    phi = sidereal_angle_rad(setup.epoch, t, setup.site.east_longitude_rad)
    weights = PairWeights.from_cov(turn_covariance(table, sel))
    harm = fit_harmonics(phi, table.C[sel], table.B[sel], weights)
    theory = setup.theory
    if settings.free is not None:
        free = tuple(settings.free)
        theory.check_params({n: 0.0 for n in free}, source="--free")
    else:
        free = tuple(n for n in default_free(setup, span_days) if n not in settings.fixed)
    theory.check_params(settings.fixed, source="--fix")
    if not free:
        raise ConfigError("--free: no free coefficient left")
    rotating = tuple(n for n in free if n != "rms_kt")
    if "rms_kt" in free and not rotating:
        raise ConfigError("--free rms_kt: free rms_mm as well (the offsets' model uses the "
                          "2 theta estimate of rms_mm)")
    if theory.linear:
        res = fit_coefficients(setup, table, settings, rotating, weights)
    else:
        res = fit_medium(setup, table, settings)
    if "rms_kt" in free:
        _add_rms_kt(setup, table, settings, res)
    import warnings

    if "lab_B0" in res.nuisance:      # B offset beyond the fitted coefficient model (stage 3)
        b0, sb0 = res.nuisance["lab_B0"]["value"], res.nuisance["lab_B0"]["sigma"]
        what = "B0 beyond the coefficient model (lab_B0)"
    else:                             # stage-2 harmonic
        b0, sb0 = harm["value"][5], harm["sigma"][5]
        what = "B0"
    if theory.sector == "photon" and sb0 > 0 and abs(b0) > 3 * sb0:
        msg = (f"{what} = {b0:.3g} ± {sb0:.2g} {setup.units} is inconsistent with zero "
               f"({abs(b0) / sb0:.1f} sigma): photon-sector signals give B0 = 0, so this points "
               "to a lab-fixed 2 theta systematic (tilt, gravity or centrifugal deformation, "
               "magnetics)")
        res.warnings.append(msg)
        warnings.warn(msg, SystematicsWarning, stacklevel=2)
    c0, sc0 = harm["value"][0], harm["sigma"][0]
    if "ke_ZZ" in res.names:
        res.notes.append("ke_ZZ is determined by C0 alone, the unmodulated 2 theta term, which "
                         "is exposed to the same lab-fixed systematics as B0")
        if sc0 > 0 and abs(c0) > 3 * sc0:
            msg = (f"C0 = {c0:.3g} ± {sc0:.2g} {setup.units} is inconsistent with zero "
                   f"({abs(c0) / sc0:.1f} sigma); ke_ZZ (C0 only) may carry a lab-fixed "
                   "systematic")
            res.warnings.append(msg)
            warnings.warn(msg, SystematicsWarning, stacklevel=2)
    return harm, res, free
