"""Tests of the one-stage global least-squares cross-check (fringe.fit.onestage).

1. Exactness: on a small record the Schur-complement accumulation equals the least-squares fit
   with explicit per-turn nuisance columns (solved turn by turn with ``np.linalg.lstsq``), for
   several stage-1 models, with NaN samples, gaps, glitch-rejected turns, fixed coefficients and
   lab offsets.
2. Equivalence: for white noise the per-turn (C, B) estimates are sufficient for the 2 theta
   part of the model, so the two-stage fit with a common per-turn noise level reproduces the
   one-stage estimate; what remains is the information in the signal's change *within* a turn
   (outside the span of the block model), ~P_turn / P_sidereal ~ 1e-3 of the signal, hence a
   difference of ~1e-3 sigma. Band 0.01 sigma.
3. Agreement with the production two-stage fit (each turn weighted by its own residual
   variance): see :func:`test_two_stage_and_one_stage_agree` for the band.
"""

from __future__ import annotations

import dataclasses
import json
import math
import warnings

import numpy as np
import pytest

from fringe.demodulate.engine import range_samples_and_blocks, run_stage1
from fringe.demodulate.settings import DRIFT_TERMS, DemodSettings
from fringe.errors import ConfigError, FitError, SystematicsWarning
from fringe.experiment.basis import basis, signal
from fringe.fit.onestage import one_stage_fit
from fringe.fit.run import fit_run, setup_from_run
from fringe.fit.settings import FitSettings
from fringe.fit.stages import fit_coefficients
from fringe.io.runwriter import RunWriter
from fringe.theories.sme import KE_NAMES
from tests.helpers.runs import BASE, CARRIER_HZ, KE_TRUTH, WHITE_FM, simulate_run  # noqa: F401


def make_run(path, *, seed, days, **kw):
    """The run's path only (see tests.helpers.runs.simulate_run)."""
    return simulate_run(path, seed=seed, days=days, **kw)[0]


# ---------------------------------------------------------------------------------------------
# 1. Exactness against a turn-by-turn least-squares fit
# ---------------------------------------------------------------------------------------------


def explicit_fit(path, demod, settings, names):
    """Reference: the least-squares fit with every per-turn nuisance as its own column.

    Solved by the Frisch-Waugh-Lovell theorem (Lovell, JASA 58, 993 (1963); from memory): one
    explicit lstsq per turn, then a global lstsq. Turns are those stage 1 accepted; the per-turn
    drift uses raw (t - t_first) powers, the same span as stage 1's normalised tau.
    """
    table, info = run_stage1(path, demod, range_samples=1 << 30)   # one range: rows = turns
    setup, _ = setup_from_run(path, settings.theory)
    data, starts = range_samples_and_blocks(info, 0, info.n_samples)
    assert starts.size == table.n_blocks
    t, az, y = data["time"], data["azimuth"], data["signal"]
    bid = np.repeat(np.arange(starts.size), np.diff(np.append(starts, t.size)))
    keep = np.isfinite(y) & table.accepted[bid]
    t, az, y, bid = t[keep], az[keep], y[keep], bid[keep]
    if settings.fixed:
        y = y - signal(setup, settings.fixed, t, az)
    theta = np.pi - az
    glob = [basis(setup, t, az, names)]
    if settings.lab_b0:
        glob.append(np.sin(2 * theta)[:, None])
    if settings.lab_c0:
        glob.append(np.cos(2 * theta)[:, None])
    g = np.concatenate(glob, axis=1)
    # Frisch-Waugh-Lovell: residualise y and the global columns on each turn's own nuisance
    # columns (a small lstsq per turn), then one global lstsq of the residualised arrays
    yr, gr, n_local = [], [], 0
    for b in np.unique(bid):
        i = bid == b
        tb, thb = t[i] - t[i][0], theta[i]
        cols = [tb ** j for j in range(DRIFT_TERMS[demod.drift])] + [np.cos(thb), np.sin(thb)]
        for h in range(3, demod.max_harmonic + 1):
            cols += [np.cos(h * thb), np.sin(h * thb)]
        loc = np.stack(cols, axis=1)
        rhs = np.concatenate([y[i, None], g[i]], axis=1)
        coef, *_ = np.linalg.lstsq(loc, rhs, rcond=None)
        res = rhs - loc @ coef
        yr.append(res[:, 0])
        gr.append(res[:, 1:])
        n_local += loc.shape[1]
    yr, gr = np.concatenate(yr), np.concatenate(gr)
    norm = np.linalg.norm(gr, axis=0)
    sol, rss, rank, _ = np.linalg.lstsq(gr / norm, yr, rcond=None)
    assert rank == gr.shape[1]
    x = sol / norm
    rss = float(rss[0])
    dof = t.size - n_local - gr.shape[1]
    cov = rss / dof * np.linalg.inv((gr / norm).T @ (gr / norm)) / np.outer(norm, norm)
    k = len(names)
    return x[:k], np.sqrt(np.diag(cov))[:k], table, info, setup, rss / dof


EXPLICIT_CASES = [
    ("linear-2", DemodSettings(), FitSettings(free=("ke_XY", "ke_XXmYY"))),
    ("quadratic-4", DemodSettings(drift="quadratic", max_harmonic=4),
     FitSettings(free=("ke_XY", "ke_XXmYY", "ke_ZZ"), fixed={"ke_XZ": -1.5e-16})),
    ("offset-3", DemodSettings(drift="offset", max_harmonic=3),
     FitSettings(free=("ke_XY", "ke_XXmYY"), lab_c0=True)),
]


@pytest.fixture(scope="module")
def small_dirty_run(tmp_path_factory):
    # 100 turns of 60 s at 2 s sampling; NaN samples, gaps (partial turns) and glitches
    # (rejected turns)
    return make_run(tmp_path_factory.mktemp("dense") / "run.h5", seed=3, days=6000 / 86400,
                    period_s=60.0, interval_s=2.0, coefficients=KE_TRUTH,
                    systematics={"dropout_fraction": 0.03, "gaps_per_day": 60.0,
                                 "gap_length_s": 100.0, "glitches_per_day": 80.0,
                                 "glitch_size": 2e-13})


@pytest.mark.parametrize("label, demod, settings", EXPLICIT_CASES,
                         ids=[c[0] for c in EXPLICIT_CASES])
def test_one_stage_equals_explicit_least_squares(small_dirty_run, label, demod, settings):
    names = settings.free
    x_ref, s_ref, table, info, setup, var_ref = explicit_fit(small_dirty_run, demod, settings,
                                                             names)
    counts = table.counts()
    assert counts["n_rejected_glitch"] > 0 and counts["n_rejected_partial"] > 0
    out = one_stage_fit(info, demod, setup, table, names, settings)
    # the same least-squares problem solved two ways: they differ by rounding only (~1e-13 of
    # sigma seen); 1e-9 leaves room for the conditioning of the reduced system
    for i, n in enumerate(names):
        assert out["coefficients"][n]["value"] == pytest.approx(x_ref[i], rel=1e-9,
                                                                abs=1e-9 * s_ref[i])
        assert out["coefficients"][n]["sigma"] == pytest.approx(s_ref[i], rel=1e-9)
    assert out["noise_rms"] ** 2 == pytest.approx(var_ref, rel=1e-8)
    assert out["n_turns_used"] == counts["n_accepted"]
    assert out["n_samples"] == int(np.sum(table.n_valid[table.accepted]))


def test_result_does_not_depend_on_range_length(small_dirty_run):
    demod, settings = DemodSettings(), FitSettings(free=("ke_XY", "ke_XXmYY"))
    table, info = run_stage1(small_dirty_run, demod)
    setup, _ = setup_from_run(small_dirty_run, "sme")
    a = one_stage_fit(info, demod, setup, table, settings.free, settings)
    b = one_stage_fit(info, demod, setup, table, settings.free, settings, range_samples=997)
    for n in settings.free:
        assert b["coefficients"][n]["value"] == pytest.approx(
            a["coefficients"][n]["value"], rel=1e-9, abs=1e-9 * a["coefficients"][n]["sigma"])
        assert b["coefficients"][n]["sigma"] == pytest.approx(a["coefficients"][n]["sigma"],
                                                              rel=1e-9)
    assert (a["n_samples"], a["n_turns_used"]) == (b["n_samples"], b["n_turns_used"])


# ---------------------------------------------------------------------------------------------
# 2. Equivalence with the two-stage fit at a common per-turn noise level
# ---------------------------------------------------------------------------------------------


@pytest.fixture(scope="module")
def white_day(tmp_path_factory):
    path = make_run(tmp_path_factory.mktemp("white") / "run.h5", seed=17, days=1.0,
                    coefficients=KE_TRUTH)
    demod = DemodSettings()
    table, info = run_stage1(path, demod)
    setup, _ = setup_from_run(path, "sme")
    return path, demod, table, info, setup


def test_pooled_two_stage_equals_one_stage(white_day):
    """At one per-turn noise level the two-stage estimate is the one-stage estimate (the per-turn
    (C, B) carry all the 2 theta information of a turn): equal to 0.01 sigma with equal row
    weights (formal). The default refits with the C and B rows scaled by their own reduced
    chi^2 (each uncertain by 1/sqrt(1920) = 2.3 % here), which moves the estimate by a few
    hundredths of sigma; its sigmas are compared."""
    path, demod, table, info, setup = white_day
    settings = FitSettings()
    one = one_stage_fit(info, demod, setup, table, KE_NAMES, settings)
    level = float(np.median(table.residual_rms[table.accepted]))
    pooled = dataclasses.replace(table, residual_rms=np.full(table.n_blocks, level))
    _, two, _ = fit_coefficients(setup, pooled, settings, KE_NAMES)
    _, equal_rows, _ = fit_coefficients(setup, pooled, FitSettings(uncertainty="formal"),
                                        KE_NAMES)
    sig = np.sqrt(np.diag(two.cov))
    for i, n in enumerate(KE_NAMES):
        assert abs(equal_rows.value[i] - one["coefficients"][n]["value"]) < 0.01 * sig[i], n
        assert abs(two.value[i] - one["coefficients"][n]["value"]) < 0.1 * sig[i], n
        # noise level from 2 (C, B) residuals per turn vs from all samples: the ratio of the two
        # sigma estimates scatters by 1/sqrt(2 x 2 x 1920) = 1.1 %; band 5 %
        assert one["coefficients"][n]["sigma"] == pytest.approx(sig[i], rel=0.05), n
    assert one["chi2_reduced"] == pytest.approx(1.0, abs=0.05)


# ---------------------------------------------------------------------------------------------
# 3. Agreement with the production two-stage fit
# ---------------------------------------------------------------------------------------------


def test_two_stage_and_one_stage_agree(tmp_path):
    """fit_run(one_stage=True) on white noise: |two-stage - one-stage| < 4 sigma_D.

    The one-stage fit is the minimum-variance linear estimate for white noise, so the difference
    D to any other unbiased estimate has var(D) = var(two) - var(one) (Hausman). The two-stage
    fit differs only by weighting each turn with its own residual variance (nu = n - p dof),
    which inflates its variance by (nu - 2)/(nu - 4) (inverse chi-square moments; derived), so
    sigma_D = sigma sqrt(2 / (nu - 4)). Turns of 360 samples (nu = 354) give sigma_D = 0.076
    sigma and a band of 0.30 sigma: both estimators are near-efficient on the same data.
    """
    path = make_run(tmp_path / "long_turns.h5", seed=23, days=2.0, period_s=360.0,
                    coefficients=KE_TRUTH)
    with warnings.catch_warnings():
        # a C0 warning is expected: ke_ZZ = 2.5e-16 is injected and lives in C0 alone
        warnings.simplefilter("ignore", SystematicsWarning)
        res, _ = fit_run(path, FitSettings(), one_stage=True)
    one = res.one_stage
    nu = 360 - DemodSettings().n_terms
    band = 4.0 * math.sqrt(2.0 / (nu - 4))
    # both sigmas estimate the same white-noise bound; the two-stage one takes the noise level
    # from the scatter of the (C, B) residuals (dof = 2 x 480 - 6), which scatters by
    # 1/sqrt(2 dof) = 2.3 %: band 4 x that
    sigma_band = 4.0 / math.sqrt(2.0 * res.statistics.dof)
    for n in KE_NAMES:
        two_v, two_s = res.coefficients[n].value, res.coefficients[n].sigma
        d = (two_v - one.coefficients[n].value) / two_s
        assert abs(d) < band, (n, d, band)
        assert one.coefficients[n].sigma == pytest.approx(two_s, rel=sigma_band), n
    assert one.covariance.names == tuple(KE_NAMES) and one.n_samples > 0
    assert "one-stage cross-check" in res.summary()
    d = json.loads(json.dumps(res.to_dict()))
    assert d["one_stage"]["n_samples"] == one.n_samples
    assert set(d["one_stage"]) == {"coefficients", "nuisance", "covariance", "chi2_reduced",
                                   "noise_rms", "dof", "n_samples", "n_turns_used"}


def test_regressed_aux_channel(tmp_path):
    """A signal coupled (0.3) to an auxiliary channel's 2 theta part: both fits recover the
    coupling (pull < 4) and agree to 4 sigma_D, sigma_D = sigma sqrt(2/(nu - 4)) with nu = 39
    (see test_two_stage_and_one_stage_agree)."""
    rng = np.random.default_rng(2)
    t = np.arange(43200.0)
    theta = 2 * np.pi * t / 45.0
    turn = (t // 45).astype(int)
    amp = rng.normal(0.0, 1.0, turn[-1] + 1)[turn]
    phase = rng.uniform(0.0, 2 * np.pi, turn[-1] + 1)[turn]
    probe = amp * np.cos(2 * theta + phase) + rng.normal(0.0, 0.1, t.size)
    y = 0.3 * probe + rng.normal(0.0, 0.5, t.size)
    path = tmp_path / "probe.h5"
    apparatus = {k: v for k, v in BASE["apparatus"].items() if k != "units"}
    with RunWriter(path, site=BASE["site"], apparatus=apparatus,
                   epoch_utc="2027-02-03T00:00:00Z", signal_units="Hz",
                   aux_channels={"probe": "1"}) as w:
        w.append(t, np.pi - theta, y, probe=probe)
    # the harmonics (stage 2) do not regress the channel: their reduced chi2 is far from 1
    with pytest.warns(SystematicsWarning, match="harmonic fit: reduced chi2"):
        res, _ = fit_run(str(path), FitSettings(free=("ke_XY", "ke_XXmYY"),
                                                regress=("probe",)), one_stage=True)
    two, one = res.nuisance["aux_probe"], res.one_stage.nuisance["aux_probe"]
    assert abs(two.value - 0.3) < 4 * two.sigma
    assert abs(one.value - 0.3) < 4 * one.sigma
    nu = 45 - DemodSettings().n_terms
    assert abs(two.value - one.value) < 4 * math.sqrt(2.0 / (nu - 4)) * two.sigma


# ---------------------------------------------------------------------------------------------
# Bad input
# ---------------------------------------------------------------------------------------------


def test_nonlinear_theory_is_refused(white_day):
    path, demod, table, info, _ = white_day
    setup, _ = setup_from_run(path, "medium")
    with pytest.raises(ConfigError, match="nonlinear"):
        one_stage_fit(info, demod, setup, table, ("sun_vX_kms",), FitSettings(theory="medium"))


def test_lab_c0_with_ke_zz_is_refused(white_day):
    path, demod, table, info, setup = white_day
    with pytest.raises(ConfigError, match="ke_ZZ"):
        one_stage_fit(info, demod, setup, table, KE_NAMES, FitSettings(lab_c0=True))


def test_table_of_another_record_is_refused(white_day, tmp_path):
    path, demod, table, info, setup = white_day
    other = make_run(tmp_path / "other.h5", seed=5, days=0.1, period_s=50.0)
    other_table, _ = run_stage1(other, demod)
    with pytest.raises(FitError, match="turn table"):
        one_stage_fit(info, demod, setup, other_table, KE_NAMES, FitSettings())
