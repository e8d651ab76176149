"""Stages 2 and 3: from per-turn 2 theta amplitudes to harmonics and coefficients.

* Stage 2 (harmonics, in :func:`fringe.fit.passes.run_passes`): weighted least squares of the
  per-turn (C_i, B_i) against the C10 model in the sidereal angle phi_i; gives C0 ... Bc2 with
  covariance, in the units of the apparatus's observable (its factor to the two-path
  harmonics of C9: :meth:`fringe.experiment.apparatus.Apparatus.two_path_factor`).
* Diagnostics (:func:`_offset_checks`): B0 and C0 compared with what the fitted coefficients
  predict for this apparatus (or the lab_B0 / lab_C0 nuisance when fitted, an offset along
  the two-path B0 / C0 beyond the coefficient model); beyond 3 sigma a warning names a
  lab-fixed 2 theta systematic. While a coefficient that only C0 carries is free (ke_ZZ,
  cq_ZZ), C0 is its measurement, and a caution (a note) says that it rests on C0 alone.
* Stage 3 (:func:`fit_coefficients`): weighted least squares of the same amplitudes against the
  per-turn 2 theta content of each free coefficient's basis signal, evaluated with the ephemeris
  velocity and modelled as stage 1 measures it over the turn (:func:`turn_model`: the model's
  change within the turn times the block fit's response to it), plus nuisances: a constant
  offset along the two-path B0 (lab-fixed 2 theta systematic, on by default), optionally one
  along the two-path C0 (only when ke_ZZ is not free: the two are degenerate) and
  regressions on the 2 theta amplitudes of auxiliary channels. The classical medium
  (nonlinear) is fitted with lmfit.

Uncertainties: per-turn weights from the stage-1 formal covariance; the coefficient covariance
is scaled by the reduced chi^2 (default, the observed scatter), or replaced by a block bootstrap
over days of turns (correlated noise), or left formal. Scaled by the scatter of fewer than
SMALL_SAMPLE_DOF residual degrees of freedom nu, the 1 sigma is widened by the Student-t
factor of nu (a 68.27 % interval; noted in the result, warning ``small-sample``).

Short records: there is no fixed least number of turns. When the accepted turns sit at fewer
than MIN_SIDEREAL_PHASES distinct sidereal phases (:mod:`fringe.demodulate.sessions`), stage 2
is skipped with the warning ``sidereal-phases-few`` and the per-session 2 theta amplitudes
(``sessions`` of the result) are the result; stage 3 still runs where its design is determined
(the medium fit, or a linear fit of few free coefficients) and stops with a one-line error
where it is not. ``efficiency`` = white-noise Cramer-Rao
sigma for this record (per-sample noise = median per-turn residual RMS) / reported sigma.

The linear fits visit the turn table a segment at a time (:mod:`fringe.fit.passes`), so a
table kept in scratch files (:mod:`fringe.demodulate.turn_store`) is never whole in memory; the
medium and rms_kt fits load it whole.
"""

from __future__ import annotations

import logging
import warnings
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from fringe.demodulate.sessions import (
    MIN_SIDEREAL_PHASES,
    SIDEREAL_BIN_DEG,
    SessionBuilder,
    sidereal_bins,
    student_factor,
)
from fringe.demodulate.turn_store import Scratch, TurnStore
from fringe.demodulate.turns import TurnTable
from fringe.errors import ConfigError, DegeneracyWarning, FitError, SystematicsWarning
from fringe.experiment.basis import Setup
from fringe.fit.coefficient_fit import CoefficientFit
from fringe.fit.medium import fit_medium
from fringe.fit.passes import (
    SMALL_SAMPLE_DOF,
    RowCache,
    design_labels,
    run_passes,
)
from fringe.fit.settings import FitSettings, default_free
from fringe.fit.solver import bootstrap_cov
from fringe.frames import sidereal_angle_rad
from fringe.io.fit_sections import FitWarning, Sessions
from fringe.linalg import correlation_from_covariance

logger = logging.getLogger(__name__)


@dataclass
class TurnModels:
    """The fitted model (C, B) of the accepted turns, per segment of the turn table.

    Segments as :meth:`fringe.demodulate.turn_store.TurnStore.bounds`; the model comes from a
    row cache (linear fits) or whole arrays (medium).
    """

    cache: RowCache | None = None
    model_c: NDArray | None = None
    model_b: NDArray | None = None

    def segment(self, i: int, first: int, n: int) -> tuple[NDArray, NDArray]:
        """Model C and B of the n accepted turns of segment i.

        ``first`` is the number of accepted turns before the segment.
        """
        if self.cache is not None:
            got = self.cache.get(i, ("model_c", "model_b"))
            if "model_c" not in got:
                return np.full(n, np.nan), np.full(n, np.nan)
            return got["model_c"], got["model_b"]
        return self.model_c[first:first + n], self.model_b[first:first + n]


def fit_coefficients(setup: Setup, table: TurnTable | TurnStore, settings: FitSettings,
                     free: tuple[str, ...], scratch: Scratch | None = None,
                     sidereal: bool = True) -> tuple[dict | None, CoefficientFit, RowCache]:
    """Stages 2 and 3 for a linear theory (see module docstring) over the turn table.

    The table is in memory, or a :class:`~fringe.demodulate.turn_store.TurnStore` read a segment
    at a time; returns the harmonics (None when ``sidereal`` is False), the coefficients and the
    row cache that holds each segment's fitted model (``model_c``, ``model_b``).
    """
    store = table if isinstance(table, TurnStore) else TurnStore.in_memory(table)
    p = run_passes(setup, store, settings, free, scratch, sidereal=sidereal)
    return p.harmonics, coefficients_from_passes(setup, p, settings, free), p.cache


def coefficients_from_passes(setup: Setup, p, settings: FitSettings,
                             free: tuple[str, ...]) -> CoefficientFit:
    """The stage-3 result from the sums of the passes (a :class:`~fringe.fit.passes.PassesResult`).

    Shared by :func:`fit_coefficients` and the incremental fit (:mod:`fringe.fit.incremental`),
    which forms the same sums from accumulated normal equations.
    """
    labels = design_labels(free, settings)
    n, kk, x, cov = p.n, len(labels), p.x, p.cov_formal
    dof = max(2 * n - kk, 1)
    red = p.chi2 / dof
    notes, warns = [], []
    if settings.uncertainty == "reduced-chi2":
        cov = cov * red
        if dof < SMALL_SAMPLE_DOF:
            warns.append(_small_sample(dof, setup.units))
            cov = cov * student_factor(dof) ** 2
    elif settings.uncertainty == "bootstrap":
        if len(p.group_parts) < 5:
            raise FitError(f"FitSettings.uncertainty bootstrap: only {len(p.group_parts)} "
                           f"blocks of {settings.bootstrap_days} d; need at least 5 (shorter "
                           "FitSettings.bootstrap_days)")
        cov = bootstrap_cov(p.group_parts, settings.n_bootstrap,
                            np.random.default_rng(settings.seed), np.sqrt(p.r_c),
                            np.sqrt(p.r_b))
    k = len(free)
    sig = np.sqrt(np.diag(cov))
    # Cramer-Rao with the white per-sample level the data show
    eff = {nm: float(np.sqrt(p.cov_cr[i, i]) / sig[i]) for i, nm in enumerate(free)}
    warns += _degeneracy(labels, cov, free)
    if abs(p.r_c / p.r_b - 1.0) > 0.2:
        notes.append(f"C and B rows scaled separately by their reduced chi2 "
                     f"({p.r_c:.3g}, {p.r_b:.3g}): coloured noise")
    nuis = {lab: {"value": float(x[i]), "sigma": float(sig[i])}
            for i, lab in enumerate(labels) if i >= k}
    return CoefficientFit(names=list(free), value=x[:k], cov=cov[:k, :k], nuisance=nuis,
                          chi2_reduced=red, dof=dof, efficiency=eff, model_c=None,
                          model_b=None, warnings=warns, notes=notes, cov_all=cov,
                          labels_all=list(labels), row_scales=(float(p.r_c), float(p.r_b)))


def _small_sample(dof: int, units: str) -> FitWarning:
    """The ``small-sample`` warning: 1 sigma widened by the Student-t factor of ``dof``."""
    k = student_factor(dof)
    return FitWarning("small-sample", f"the 1 sigma uncertainties rest on the scatter of only "
                      f"{dof} degrees of freedom: widened by the Student-t factor {k:.4g} so "
                      "that value ± sigma is a 68.27 % interval", {"dof": float(dof),
                                                                   "t_factor": k})


def _widen(res: CoefficientFit, units: str) -> None:
    """Widen a nonlinear fit's 1 sigma by the Student-t factor of its dof (in place)."""
    k = student_factor(res.dof)
    res.cov = res.cov * k ** 2
    for e in res.nuisance.values():
        e["sigma"] *= k
    w = _small_sample(res.dof, units)
    if res.upper_limits:
        w = FitWarning(w.code, w.sentence + " (the upper limits sample the covariance before "
                       "this factor)", w.values)
    res.warnings.append(w)


def sessions_of(setup: Setup, store: TurnStore) -> Sessions:
    """The per-session 2 theta amplitudes of the accepted turns, a segment at a time.

    Built by :class:`fringe.demodulate.sessions.SessionBuilder`.
    """
    return session_builder(setup, store).finish()


def session_builder(setup: Setup, store: TurnStore) -> SessionBuilder:
    """The session builder fed every segment of ``store`` (sessions and sidereal phases).

    Its :meth:`~fringe.demodulate.sessions.SessionBuilder.finish` (the sessions' Student-t
    factors and agreement, which load scipy.stats) is called only when the sessions are
    reported: too few sidereal phases.
    """
    lon = setup.site.east_longitude_rad
    builder = SessionBuilder(lambda t: sidereal_angle_rad(setup.epoch, t, lon), setup.units)
    for _, seg in store.segments():
        builder.add(seg)
    return builder


def sidereal_phase_count(setup: Setup, store: TurnStore) -> int:
    """Occupied sidereal-phase bins of the accepted turns (what the session builder counts).

    Only the bins (:func:`fringe.demodulate.sessions.sidereal_bins` of each accepted turn's
    mean time): the sessions themselves are built only when they are reported (too few
    phases).
    """
    lon = setup.site.east_longitude_rad
    occupied = np.zeros(int(360 / SIDEREAL_BIN_DEG), bool)
    for _, seg in store.segments():
        t_mid = seg.t_mid_s[seg.accepted]
        if t_mid.size:
            occupied[sidereal_bins(sidereal_angle_rad(setup.epoch, t_mid, lon))] = True
    return int(np.sum(occupied))


def _few_phases(sessions: Sessions) -> FitWarning:
    n = sessions.n_sidereal_phases
    msg = (f"the accepted turns sit at {n} distinct sidereal phase(s) (occupied sidereal "
           f"hours; fewer than {MIN_SIDEREAL_PHASES}): the sidereal harmonics are not "
           f"supported, stage 2 is skipped, and the {len(sessions.sessions)} per-session 2 theta "
           "amplitudes are the result (sessions)")
    import warnings

    warnings.warn(msg, DegeneracyWarning, stacklevel=3)
    return FitWarning("sidereal-phases-few", msg, {"n_sidereal_phases": float(n),
                                                   "n_sessions": float(len(sessions.sessions))})


def _degeneracy(labels, cov, free=(), limit: float = 0.95) -> list[FitWarning]:
    corr = correlation_from_covariance(cov)
    out = []
    pairs = [(labels[i], labels[j], corr[i, j]) for i in range(len(labels))
             for j in range(i + 1, len(labels)) if abs(corr[i, j]) > limit]
    if pairs:
        text = ", ".join(f"{a}/{b} (r = {r:+.3f})" for a, b, r in pairs[:6])
        named = tuple(n for n in free if any(n in (a, b) for a, b, _ in pairs))
        out.append(FitWarning(
            "near-degenerate", f"near-degenerate coefficients: {text}; the record does not "
            "separate them (a longer span, or fix some of them)",
            {f"{a}/{b}": float(r) for a, b, r in pairs[:6]}, named))
        import warnings

        warnings.warn(out[-1].sentence, DegeneracyWarning, stacklevel=3)
    return out


def _add_rms_kt(setup: Setup, table: TurnTable, settings: FitSettings,
                res: CoefficientFit) -> None:
    """Append rms_kt from the per-turn offsets (:mod:`fringe.fit.offsets`) to ``res``."""
    from fringe.fit.offsets import OFFSET_DRIFT_DEGREE, fit_rms_kt

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
                     "prefer bootstrap uncertainties")


def _stage3(setup, store, settings, rotating, scratch, sessions, sidereal):
    """Stage 2 (unless ``sidereal`` is False) and stage 3: (harmonics, coefficients, models).

    A singular stage 3 of a record with too few sidereal phases stops with a message naming
    the sessions.
    """
    try:
        if setup.theory.linear:
            harm, res, cache = fit_coefficients(setup, store, settings, rotating, scratch,
                                                sidereal=sidereal)
            return harm, res, TurnModels(cache=cache)
        harm = run_passes(setup, store, settings, None, sidereal=sidereal).harmonics
        res = fit_medium(setup, store.load(), settings)
        if settings.uncertainty == "reduced-chi2" and res.dof < SMALL_SAMPLE_DOF:
            _widen(res, setup.units)
        return harm, res, TurnModels(model_c=res.model_c, model_b=res.model_b)
    except FitError as exc:
        if sidereal:
            raise
        n_acc = sum(x.n_turns for x in sessions.sessions)
        raise FitError(f"{exc} -- the {n_acc} accepted turns sit at "
                       f"{sessions.n_sidereal_phases} sidereal phase(s) in "
                       f"{len(sessions.sessions)} session(s), too few for these coefficients; "
                       "fringe inspect lists the per-session 2 theta amplitudes "
                       "(free fewer coefficients, or add sessions at other sidereal times)"
                       ) from None


def stage2_and_3(setup: Setup, table: TurnTable | TurnStore, settings: FitSettings,
                 span_days: float, scratch: Scratch | None = None
                 ) -> tuple[dict | None, CoefficientFit, tuple, TurnModels]:
    """Run stage 2 (harmonics) and stage 3 (coefficients); also the systematics diagnostics.

    ``table``: the stage-1 table, or its :class:`~fringe.demodulate.turn_store.TurnStore` (the
    linear fits read it a segment at a time; the medium and rms_kt fits load it whole). Returns the
    harmonics (None when stage 2 is skipped: too few sidereal phases; the per-session
    amplitudes are then ``sessions`` of the coefficients), the coefficients, the free names and
    the fitted model per turn (:class:`TurnModels`).
    """
    store = table if isinstance(table, TurnStore) else TurnStore.in_memory(table)
    n_acc = int(np.sum(store.accepted))
    if n_acc == 0:
        raise FitError("fit: no accepted turn (see the rejection counts of fringe inspect)")
    sidereal = sidereal_phase_count(setup, store) >= MIN_SIDEREAL_PHASES
    sessions = None if sidereal else sessions_of(setup, store)
    few = [] if sidereal else [_few_phases(sessions)]
    theory = setup.theory
    if settings.free is not None:
        free = tuple(settings.free)
        theory.check_params({n: 0.0 for n in free}, source="FitSettings.free")
    else:
        free = tuple(n for n in default_free(setup, span_days) if n not in settings.fixed)
    theory.check_params(settings.fixed, source="FitSettings.fixed")
    if not free:
        raise ConfigError("FitSettings.free: no free coefficient left")
    rotating = tuple(n for n in free if n != "rms_kt")
    if "rms_kt" in free and not rotating:
        raise ConfigError("FitSettings.free rms_kt: free rms_mm as well (the offsets' model "
                          "uses the 2 theta estimate of rms_mm)")
    harm, res, models = _stage3(setup, store, settings, rotating, scratch, sessions, sidereal)
    res.warnings[:0] = few
    if "rms_kt" in free:
        _add_rms_kt(setup, store.load(), settings, res)
    systematics_checks(setup, harm, res, rotating, settings, n_acc)
    if not sidereal:
        res.sessions = sessions
    return harm, res, free, models


def systematics_checks(setup: Setup, harm: dict | None, res: CoefficientFit,
                       rotating: tuple[str, ...], settings: FitSettings, n_acc: int) -> None:
    """The B0 / C0 diagnostics and the stage-2 chi^2 warning, added to ``res`` (in place).

    ``harm`` None (stage 2 skipped) adds the note that B0 and C0 were not tested.
    """
    if harm is not None:
        _offset_checks(setup, harm, res,
                       _c0_only(setup, rotating) if setup.theory.linear else [])
        chi2_warning = harmonics_chi2_warning(harm["chi2_reduced"], n_acc,
                                              settings.uncertainty)
        if chi2_warning is not None:
            res.warnings.append(chi2_warning)
            warnings.warn(chi2_warning.sentence, SystematicsWarning, stacklevel=3)
    else:
        res.notes.append("B0 and C0 not tested for a lab-fixed systematic: stage 2 was skipped "
                         "(too few sidereal phases), so the per-session amplitudes stand alone")


#: Reduced chi^2 of the harmonic fit outside [1/HARMONICS_CHI2_FACTOR, HARMONICS_CHI2_FACTOR]
#: (and beyond HARMONICS_CHI2_SIGMAS of its white-noise scatter sqrt(2/dof)) raises a warning.
HARMONICS_CHI2_FACTOR = 2.0
HARMONICS_CHI2_SIGMAS = 5.0


def harmonics_chi2_warning(chi2_reduced: float, n_turns: int,
                           uncertainty: str) -> FitWarning | None:
    """The ``harmonics-chi2`` warning when the stage-2 reduced chi^2 is far from one.

    Far: above ``HARMONICS_CHI2_FACTOR`` (2) or below its inverse, and more than
    ``HARMONICS_CHI2_SIGMAS`` (5) times sqrt(2 / dof) from 1, the scatter of a reduced chi^2
    of white Gaussian data with dof = 2 n_turns - 10 degrees of freedom (a project choice).
    """
    dof = max(2 * n_turns - 10, 1)
    red = float(chi2_reduced)
    if not np.isfinite(red):
        return None
    spread = float(np.sqrt(2.0 / dof))
    far = (red > HARMONICS_CHI2_FACTOR or red < 1.0 / HARMONICS_CHI2_FACTOR) and \
        abs(red - 1.0) > HARMONICS_CHI2_SIGMAS * spread
    if not far:
        return None
    if red > 1.0:
        why = ("the per-turn uncertainties understate the scatter of the 2 theta amplitudes "
               "(noise beyond the per-turn white model, an unmodelled signal or systematic, or "
               "bad turns)")
    else:
        why = "the per-turn uncertainties overstate the scatter of the 2 theta amplitudes"
    scaled = {"reduced-chi2": "; the uncertainties are scaled by sqrt(reduced chi2), which "
                              "assumes the excess is white",
              "formal": "; the formal uncertainties ignore it"}.get(uncertainty, "")
    msg = (f"harmonic fit: reduced chi2 = {red:.3g} with {dof} degrees of freedom is far from 1 "
           f"(white-noise scatter {spread:.2g}): {why}{scaled}")
    return FitWarning("harmonics-chi2", msg, {"chi2_reduced": red, "dof": float(dof)})


_SYSTEMATICS = ("a lab-fixed 2 theta systematic (tilt, gravity or centrifugal deformation, "
                "magnetics)")


def _offset_estimate(key: str, harm: dict, res: CoefficientFit):
    """(value, sigma, data, predicted, record key, what) of the B0 or C0 check, or None.

    The fitted nuisance lab_<key> when there is one (an offset along the two-path <key> beyond
    the coefficient model); else the stage-2 harmonic minus the one the fitted and fixed
    coefficients predict (``harm["predicted"]``), with the harmonic's sigma (conservative: the
    difference scatters less, because the coefficients come from the same turns).
    """
    nuisance = f"lab_{key}"
    if nuisance in res.nuisance:
        e = res.nuisance[nuisance]
        return (e["value"], e["sigma"], e["value"], None, nuisance,
                f"{key} beyond the coefficient model ({nuisance}, along the two-path {key})")
    predicted = harm.get("predicted")
    if predicted is None:
        return None
    i = harm["names"].index(key)
    data = harm["value"][i]
    return data - predicted[i], harm["sigma"][i], data, predicted[i], key, key


def _c0_only(setup: Setup, names: tuple[str, ...], rtol: float = 0.05) -> list[str]:
    """The free coefficients whose two-path harmonics are C0 alone (SME ke_ZZ, clock cq_ZZ).

    From the harmonic table at the epoch (:func:`fringe.experiment.harmonics.harmonics_at`),
    turned into the two-path normalisation by the apparatus's factor (so ke_ZZ counts at any
    path separation): every other harmonic below ``rtol`` of C0. The tolerance admits the
    precession-nutation pole offset p (a few mrad, C5), which moves about 2 p cot(chi) of
    ke_ZZ's C0 into C_s1, C_c1 (below 0.04 of C0 for colatitudes chi above 10 deg).
    """
    from fringe.experiment.harmonics import harmonics_at

    f = setup.apparatus.two_path_factor(setup.units)
    if not names or f == 0:
        return []
    coef, _, labels = harmonics_at(setup, 0.0, names=names)
    h = (coef[:5] - 1j * coef[5:]) / f
    c0 = np.abs(h[0].real)
    rest = np.sqrt(np.maximum(np.sum(np.abs(h) ** 2, axis=0) - c0 ** 2, 0.0))
    return [n for j, n in enumerate(labels) if c0[j] > 0 and rest[j] < rtol * c0[j]]


def _offset_checks(setup: Setup, harm: dict, res: CoefficientFit, c0_only: list[str]) -> None:
    """The B0 and C0 diagnostics, added to ``res.warnings`` and ``res.notes``.

    Each compares what the data show with what the fitted coefficients themselves predict for
    this apparatus (never with zero: at a path separation other than 90 deg ke_ZZ also makes
    a B0, kappa_tr and ko_XY make a small B0 through the Earth-rotation velocity, and every
    kappa_e- coefficient a small C0 through the boost). While a coefficient that only C0
    carries (``c0_only``: ke_ZZ, cq_ZZ) is free, C0 is its measurement and is not tested; a
    caution says so.
    """
    for key, code in (("B0", "b0-lab-fixed"), ("C0", "c0-lab-fixed")):
        if key == "C0" and c0_only and "lab_C0" not in res.nuisance:
            what = " and ".join(c0_only)
            res.notes.append(f"caution: {what} {'is' if len(c0_only) == 1 else 'are'} "
                             "determined by C0 alone (the unmodulated 2 theta term of the "
                             "two-path signal), where lab-fixed systematics also land; C0 is "
                             f"therefore not tested for them, and a bound on {what} needs the "
                             "systematics budget of the apparatus")
            continue
        got = _offset_estimate(key, harm, res)
        if got is None:
            res.notes.append(f"{key} not tested for a lab-fixed systematic (no prediction of "
                             f"the fitted model and no lab_{key} nuisance)")
            continue
        value, sigma, data, predicted, record_key, what = got
        if not (sigma > 0 and abs(value) > 3 * sigma):
            continue
        n_sigma = abs(value) / sigma
        if predicted is None:
            msg = (f"{what} = {value:.3g} ± {sigma:.2g} {setup.units} is inconsistent with zero "
                   f"({n_sigma:.1f} sigma); the fitted coefficients carry their own {key}, so "
                   f"this points to {_SYSTEMATICS}")
            values = {record_key: float(value)}
        else:
            msg = (f"{key} = {data:.3g} ± {sigma:.2g} {setup.units} differs from "
                   f"the {predicted:.3g} the fitted coefficients predict ({n_sigma:.1f} sigma): "
                   f"this points to {_SYSTEMATICS}")
            values = {key: float(data), f"{key}_predicted": float(predicted)}
        values.update(sigma=float(sigma), n_sigma=float(n_sigma))
        # a lab-fixed systematic in B0 or C0 puts the coefficients C0 alone carries in doubt
        res.warnings.append(FitWarning(code, msg, values, tuple(c0_only)))
        warnings.warn(msg, SystematicsWarning, stacklevel=3)
