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
import math
from dataclasses import dataclass, field

import numpy as np
from numpy.typing import NDArray

from .conventions import HARMONIC_NAMES
from .demodulate import TurnTable
from .errors import ConfigError, DegeneracyWarning, FitError, SystematicsWarning
from .frames import sidereal_angle_rad
from .signal import Setup, basis, signal
from .theories import KE_NAMES, KO_NAMES

logger = logging.getLogger(__name__)

UNCERTAINTY_MODES = ("reduced-chi2", "bootstrap", "formal")

#: Span from which ko_* join the default SME free set, days (half a sidereal year: the annual
#: modulation that separates ko_* from ke_* is then sampled over half a cycle). Common practice
#: reading of practice.md §6 (a year or more separates them fully).
KO_DEFAULT_SPAN_DAYS = 182.6

N_ANGLES = 8


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
        return ("rms_mm",)
    return setup.theory.parameter_names


#: Instants per batch in :func:`_frozen_model` (bounds memory on year-long records).
MODEL_BATCH = 4096


def _frozen_model(setup: Setup, t: NDArray, names, params) -> tuple[NDArray, NDArray, NDArray]:
    """A, C, B of the model with frames frozen at each instant (each (n, k)), in batches."""
    if t.size > MODEL_BATCH:
        parts = [_frozen_model_batch(setup, t[i:i + MODEL_BATCH], names, params)
                 for i in range(0, t.size, MODEL_BATCH)]
        return tuple(np.concatenate([p[j] for p in parts]) for j in range(3))
    return _frozen_model_batch(setup, t, names, params)


def _frozen_model_batch(setup, t, names, params):
    from .frames import FrameState

    theta = 2.0 * np.pi * np.arange(N_ANGLES) / N_ANGLES
    state = setup.frames(t)
    if params is None:
        return _projected_basis(setup, state, theta, names)
    rep = np.repeat(np.arange(t.size), N_ANGLES)
    st = FrameState(state.phi_rad[rep], state.colatitude_rad, state.beta[rep])
    az = np.tile(np.pi - theta, t.size)
    if params is None:
        g = basis(setup, t[rep], az, names, state=st).reshape(t.size, N_ANGLES, -1)
    else:
        g = signal(setup, params, t[rep], az, state=st).reshape(t.size, N_ANGLES, 1)
    c = (2.0 / N_ANGLES) * np.einsum("nak,a->nk", g, np.cos(2 * theta))
    b = (2.0 / N_ANGLES) * np.einsum("nak,a->nk", g, np.sin(2 * theta))
    return g.mean(axis=1), c, b


def _projected_basis(setup, state, theta, names):
    """A, C, B per unit coefficient by projecting the apparatus tensor, not the signals.

    The basis is linear in the apparatus's combined lab tensor W(theta) (fringe.signal), so the
    cos 2 theta / sin 2 theta projections of the basis are the basis of the projected tensors
    W_C = (2/N) sum_a cos 2 theta_a W(theta_a), W_B likewise, and A of the mean tensor: three
    contractions per instant instead of N_ANGLES, with the frames evaluated once per instant.
    """
    from .signal import _combined_tensor

    n = len(state)
    az = np.pi - theta
    w = np.stack([_combined_tensor(setup.apparatus, setup.units, np.full(n, a), setup.tilt)[0]
                  for a in az], axis=1)                                # (n, N, 3, 3)
    _, w_iso = _combined_tensor(setup.apparatus, setup.units, az[:1], setup.tilt)
    cos2, sin2 = np.cos(2 * theta), np.sin(2 * theta)
    w_a = w.mean(axis=1)
    w_c = (2.0 / theta.size) * np.einsum("nakl,a->nkl", w, cos2)
    w_b = (2.0 / theta.size) * np.einsum("nakl,a->nkl", w, sin2)
    project = setup.theory.project
    return (project(state, w_a, w_iso, names), project(state, w_c, 0.0, names),
            project(state, w_b, 0.0, names))


#: Step of the time grid on which turn_model interpolates the model's change within a turn, s.
WITHIN_TURN_GRID_S = 120.0


#: Turns per batch when evaluating the per-turn model (bounds the transient memory).
TURN_BATCH = 65536


def _model_splines(setup: Setup, t: NDArray, half: NDArray, names, params) -> list:
    """Cubic splines of the frozen model's A, C, B on a regular grid around the turns.

    Grid step WITHIN_TURN_GRID_S with a margin of four steps: the model changes on sidereal
    time scales (>= 12 h), so the splines' derivatives err by ~(2 pi x 120 s / 12 h)^3 / 24 =
    2e-7 relative (the within-turn terms themselves are ~1e-3 of the signal) and their values by
    ~(2 pi x 120 s / 12 h)^4 / 384 = 2.4e-10 relative. The grid costs the same for any turn
    period (a year: 2.6e5 grid instants).
    """
    from scipy.interpolate import CubicSpline

    step = WITHIN_TURN_GRID_S
    lo, hi = float(np.min(t) - np.max(half)) - 4 * step, float(np.max(t) + np.max(half)) + 4 * step
    grid = np.linspace(lo, hi, max(int(np.ceil((hi - lo) / step)) + 1, 8))
    return [CubicSpline(grid, vals, axis=0) for vals in _frozen_model(setup, grid, names, params)]


def _measured_model(splines, t, half, leak, settings):
    """What stage 1 measures for turns (t, half span, leak responses): A, C, B (n, k)."""
    from .demodulate import LEAK_ORDER, leak_terms

    terms = [{j: sp(t, nu=j) * (half ** j / math.factorial(j))[:, None]
              for j in range(LEAK_ORDER + 1)} for sp in splines]
    a, c, b = terms[0][0], terms[1][0].copy(), terms[2][0].copy()
    src = {"A": 0, "C": 1, "B": 2}
    for q, (kind, j) in enumerate(leak_terms(settings)):
        term = terms[src[kind]][j]
        c += leak[:, 0, q, None] * term
        b += leak[:, 1, q, None] * term
    return a, c, b


def turn_model(setup: Setup, t_s: NDArray, names: tuple[str, ...] | None = None,
               params: dict | None = None, *, table: TurnTable | None = None,
               sel: NDArray | None = None) -> tuple[NDArray, NDArray, NDArray]:
    """Non-rotating mean A, and 2 theta amplitudes C, B of the model for turns at t_s.

    For linear theories (``params`` None) each is (n, k) per unit coefficient; with ``params``
    each is (n,) for the total signal (any theory). At an instant the model's 2 theta content
    comes from N_ANGLES table angles with the frames frozen at that instant.

    Without ``table`` this is that content at t_s itself. With the stage-1 ``table`` (and
    ``sel``, the boolean selection of its rows whose mean times t_s are), it is what stage 1
    measures for the turn: the change of A, C and B within the turn, expanded in the turn's
    normalised time tau to tau^LEAK_ORDER (t = t_mid + tau x half span; from splines of the
    model, :func:`_model_splines`), times the block fit's response to each tau^j term
    (``table.leak``), is added. Freezing the model at t_mid instead errs by about
    (P_turn / P_sidereal) x the signal (the within-turn change of C leaks into B and back).
    Turns are processed in batches of TURN_BATCH.
    """
    t = np.atleast_1d(np.asarray(t_s, float))
    if table is not None and table.leak is not None and t.size:
        rows = np.arange(table.n_blocks) if sel is None else np.flatnonzero(sel)
        half = np.maximum(0.5 * (table.t_stop_s[rows] - table.t_start_s[rows]), 1e-9)
        splines = _model_splines(setup, t, half, names, params)
        parts = [_measured_model(splines, t[i:i + TURN_BATCH], half[i:i + TURN_BATCH],
                                 table.leak[rows[i:i + TURN_BATCH]], table.settings)
                 for i in range(0, t.size, TURN_BATCH)]
        a, c, b = (np.concatenate([p[x] for p in parts]) for x in range(3))
    else:
        a, c, b = _frozen_model(setup, t, names, params)
    if params is not None:
        return a[:, 0], c[:, 0], b[:, 0]
    return a, c, b


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


def _whiten(cov: NDArray) -> NDArray:
    """Per-turn 2x2 whitening matrices W with W cov Wᵀ = 1 (inverse Cholesky)."""
    chol = np.linalg.cholesky(cov)
    return np.linalg.inv(chol)


def _whitened(rows):
    jc, jb, c, b, w = rows
    jw = np.einsum("nij,njk->nik", w, np.stack([jc, jb], axis=1))     # (m, 2, k)
    yw = np.einsum("nij,nj->ni", w, np.stack([c, b], axis=1))          # (m, 2)
    return jw.reshape(-1, jw.shape[2]), yw.reshape(-1)


def _batches(n: int) -> list[slice]:
    return [slice(i, i + TURN_BATCH) for i in range(0, n, TURN_BATCH)]


def _normal_sums(provider, n: int, k: int, groups: NDArray | None = None):
    """Whitened normal matrix and right-hand side, summed over batches (or per group)."""
    if groups is None:
        normal, rhs = np.zeros((k, k)), np.zeros(k)
    else:
        ng = int(groups.max()) + 1
        normal, rhs = np.zeros((ng, k, k)), np.zeros((ng, k))
    for sl in _batches(n):
        a, y = _whitened(provider(sl))
        if groups is None:
            normal += a.T @ a
            rhs += a.T @ y
        else:
            g = np.repeat(groups[sl], 2)
            np.add.at(normal, g, a[:, :, None] * a[:, None, :])
            np.add.at(rhs, g, a * y[:, None])
    return normal, rhs


def _solve(normal: NDArray, rhs: NDArray) -> tuple[NDArray, NDArray]:
    scale = np.sqrt(np.maximum(np.diag(normal), 1e-300))
    nn = normal / np.outer(scale, scale)
    try:
        inv = np.linalg.inv(nn) / np.outer(scale, scale)
    except np.linalg.LinAlgError:
        raise FitError("stage 3: singular normal matrix (a free coefficient has no signal in "
                       "this record); fix it or free fewer coefficients") from None
    return inv @ rhs, inv


def _wls_rows(provider, n: int, k: int) -> tuple[NDArray, NDArray, float, int]:
    """Weighted LS over a row provider; returns x, formal cov, chi2, dof.

    The normal equations are accumulated over batches of TURN_BATCH turns (bounded transient
    memory), and chi^2 is summed from the whitened residuals in a second pass.
    """
    x, inv = _solve(*_normal_sums(provider, n, k))
    chi2 = 0.0
    for sl in _batches(n):
        a, y = _whitened(provider(sl))
        r = y - a @ x
        chi2 += float(r @ r)
    return x, inv, chi2, max(2 * n - k, 1)


def fit_harmonics(phi_rad: NDArray, c: NDArray, b: NDArray, w: NDArray) -> dict:
    """Stage 2: C10 harmonics with covariance (scaled by the reduced chi^2)."""
    def rows(sl):
        p = phi_rad[sl]
        f = np.stack([np.ones_like(p), np.sin(p), np.cos(p), np.sin(2 * p), np.cos(2 * p)], 1)
        z = np.zeros_like(f)
        return (np.concatenate([f, z], axis=1), np.concatenate([z, f], axis=1), c[sl], b[sl],
                w[sl])

    x, cov, chi2, dof = _wls_rows(rows, phi_rad.size, 10)
    red = chi2 / dof
    cov = cov * max(red, 0.0)
    return {"names": list(HARMONIC_NAMES), "value": x.tolist(),
            "sigma": np.sqrt(np.diag(cov)).tolist(), "covariance": cov.tolist(),
            "chi2_reduced": red}


def _bootstrap(provider, n, k, t_s, days, n_boot, rng):
    """Block bootstrap over days of turns: resample whole groups' normal equations."""
    groups = np.floor((t_s - t_s[0]) / (86400.0 * days)).astype(int)
    uniq, inv = np.unique(groups, return_inverse=True)
    if uniq.size < 5:
        raise FitError(f"--uncertainty bootstrap: only {uniq.size} blocks of {days} d; "
                       "need at least 5 (shorter --bootstrap-days)")
    normal_g, rhs_g = _normal_sums(provider, n, k, groups=inv)
    draws = []
    for _ in range(n_boot):
        pick = rng.integers(0, uniq.size, uniq.size)
        x, _ = _solve(normal_g[pick].sum(axis=0), rhs_g[pick].sum(axis=0))
        draws.append(x)
    return np.cov(np.array(draws).T, ddof=1).reshape(k, k)


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
    """Per-turn model of the free coefficients and a row builder adding the nuisance columns.

    Returns (jc, jb) of the coefficients (n, k), the labels of all columns, and
    ``columns(sl, jc, jb)`` giving the full design rows of the turns ``sl``.
    """
    labels = design_labels(names, settings)
    _, jc, jb = turn_model(setup, t, names, table=table, sel=sel)
    ic, isn = table.settings.index("c2"), table.settings.index("s2")
    aux = [(table.aux[ch][sel, ic], table.aux[ch][sel, isn]) for ch in settings.regress]

    def columns(sl, jc_sl, jb_sl):
        m = jc_sl.shape[0]
        extra_c, extra_b = [], []
        if settings.lab_b0:
            extra_c.append(np.zeros(m))
            extra_b.append(np.ones(m))
        if settings.lab_c0:
            extra_c.append(np.ones(m))
            extra_b.append(np.zeros(m))
        for ac, ab in aux:
            extra_c.append(ac[sl])
            extra_b.append(ab[sl])
        if not extra_c:
            return jc_sl, jb_sl
        return (np.concatenate([jc_sl, np.stack(extra_c, 1)], axis=1),
                np.concatenate([jb_sl, np.stack(extra_b, 1)], axis=1))

    return jc, jb, labels, columns


def fit_coefficients(setup: Setup, table: TurnTable, settings: FitSettings,
                     free: tuple[str, ...]) -> CoefficientFit:
    """Stage 3 for a linear theory (see module docstring)."""
    sel = table.accepted
    t = table.t_mid_s[sel]
    c, b = table.C[sel].copy(), table.B[sel].copy()
    if settings.fixed:
        _, fc, fb = turn_model(setup, t, params=settings.fixed, table=table, sel=sel)
        c, b = c - fc, b - fb
    w = _whiten(turn_covariance(table, sel))
    jc0, jb0, labels, columns = _design(setup, t, free, table, sel, settings)
    n, kk = t.size, len(labels)

    def provider(weights):
        def rows(sl):
            jc_sl, jb_sl = columns(sl, jc0[sl], jb0[sl])
            return jc_sl, jb_sl, c[sl], b[sl], weights[sl]
        return rows

    x, cov, chi2, dof = _wls_rows(provider(w), n, kk)
    red = chi2 / dof
    notes, warns = [], []
    if settings.uncertainty == "reduced-chi2":
        cov = cov * red
    elif settings.uncertainty == "bootstrap":
        cov = _bootstrap(provider(w), n, kk, t, settings.bootstrap_days, settings.n_bootstrap,
                         np.random.default_rng(settings.seed))
    # Cramer-Rao with the white per-sample level the data show
    sigma_white = float(np.median(table.residual_rms[sel]))
    w_cr = _whiten(sigma_white ** 2 * table.ninv_2[sel])
    _, cov_cr = _solve(*_normal_sums(provider(w_cr), n, kk))
    k = len(free)
    sig = np.sqrt(np.diag(cov))
    eff = {nm: float(np.sqrt(cov_cr[i, i]) / sig[i]) for i, nm in enumerate(free)}
    warns += _degeneracy(labels, cov)
    model_c, model_b = np.empty(n), np.empty(n)   # the whole fitted model (with nuisances)
    for sl in _batches(n):
        jc_sl, jb_sl = columns(sl, jc0[sl], jb0[sl])
        model_c[sl], model_b[sl] = jc_sl @ x, jb_sl @ x
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
    w = _whiten(turn_covariance(table, sel))
    off = settings.lab_b0

    def model(p):
        vals = {n: p[n].value for n in MEDIUM_NAMES}
        _, mc, mb = turn_model(setup, t, params=vals, table=table, sel=sel)
        if off:
            mb = mb + p["lab_B0"].value
        return mc, mb

    def resid(p):
        mc, mb = model(p)
        r = np.stack([c - mc, b - mb], axis=1)
        return np.einsum("nij,nj->ni", w, r).ravel()

    params = lmfit.Parameters()
    for n in MEDIUM_NAMES:
        params.add(n, value=settings.fixed.get(n, 1.0), vary=n not in settings.fixed)
    if off:
        params.add("lab_B0", value=0.0)
    out = lmfit.minimize(resid, params, method="leastsq")
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
                          warnings=[], notes=["medium: nonlinear fit with lmfit (leastsq); the "
                                              "95 % speed limit samples the fit covariance"],
                          upper_limits={"speed_kms_95": speed95})


def stage2_and_3(setup: Setup, table: TurnTable, settings: FitSettings,
                 span_days: float) -> tuple[dict, CoefficientFit, tuple]:
    """Run stage 2 (harmonics) and stage 3 (coefficients); also the systematics diagnostics."""
    sel = table.accepted
    if np.sum(sel) < 12:
        raise FitError(f"fit: only {int(np.sum(sel))} accepted turns; need at least 12")
    t = table.t_mid_s[sel]
    phi = sidereal_angle_rad(setup.epoch, t, setup.site.east_longitude_rad)
    w = _whiten(turn_covariance(table, sel))
    harm = fit_harmonics(phi, table.C[sel], table.B[sel], w)
    theory = setup.theory
    if settings.free is not None:
        free = tuple(settings.free)
        theory.check_params({n: 0.0 for n in free}, source="--free")
    else:
        free = tuple(n for n in default_free(setup, span_days) if n not in settings.fixed)
    theory.check_params(settings.fixed, source="--fix")
    if not free:
        raise ConfigError("--free: no free coefficient left")
    if "rms_kt" in free:
        raise ConfigError("--free rms_kt: the Kennedy-Thorndike combination lives in the "
                          "non-rotating absolute frequency, which the 2 theta fit does not use; "
                          "fix rms_kt (or leave it out)")
    if theory.linear:
        res = fit_coefficients(setup, table, settings, free)
    else:
        res = fit_medium(setup, table, settings)
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
