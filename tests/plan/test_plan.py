"""Tests of fringe.plan: sizing rule, 1/sqrt(T) law and its failure for ke+ko, Monte Carlo
scatter of fitted per-turn amplitudes, sample-level per-turn noise, results, CLI and errors."""

from __future__ import annotations

import copy
import dataclasses
import json
import math
import re
from dataclasses import replace

import numpy as np
import pytest
from click.testing import CliRunner
from scipy.stats import chi2

from fringe.constants import STELLAR_DAY_S
from fringe.errors import ConfigError, InputFileError
from fringe.experiment.scenario import scenario_from_dict
from fringe.noise.powerlaw import PowerLawNoise, noise_from_section
from fringe.noise.stream import NoiseStream
from fringe.plan.forecast import forecast, turn_amplitude_variance
from fringe.plan.montecarlo import monte_carlo_check
from fringe.plan.result import MonteCarloCheck, PlanResult
from fringe.plan.settings import plan_settings
from fringe.theories.sme import KE_NAMES, KO_NAMES

BASE = {
    "title": "test lab (invented)",
    "site": {"latitude_deg": 47.62, "longitude_deg": 11.38, "height_m": 610.0},
    "campaign": {"start_utc": "2027-02-03T00:00:00Z", "duration_days": 20.0,
                 "sample_interval_s": 1.0},
    "apparatus": {"kind": "cavity-pair", "carrier_hz": 2.82e14, "units": "Hz"},
    "turntable": {"motion": "continuous", "period_s": 45.0},
    "theory": {"name": "sme"},
    "coefficients": {"ke_XY": 1e-17},
    "noise": {"white_fm_adev_1s": 1e-15, "flicker_fm_adev": 3e-16},
}


def make(**changes):
    """The base scenario with changes: ``noise`` replaces that section, other dicts update
    theirs (a None value removes a field), None removes a section."""
    doc = copy.deepcopy(BASE)
    for key, value in changes.items():
        if value is None:
            doc.pop(key, None)
        elif isinstance(value, dict) and isinstance(doc.get(key), dict) and key != "noise":
            doc[key].update(value)
            doc[key] = {k: v for k, v in doc[key].items() if v is not None}
        else:
            doc[key] = value
    return scenario_from_dict(doc, "test.toml")


@pytest.fixture(scope="module")
def long_plan():
    """ke-only forecast with the joint ke+ko comparison, curve from 1 to 730 days."""
    sc = make(plan={"max_days": 730.0, "n_days": 16, "targets": {"ke_XY": 1e-18,
                                                                  "ke_ZZ": 1e-22}})
    return forecast(sc)


# --------------------------------------------------------------------- sizing rule (white FM)

def _white_fm_scenario(days, drift="offset"):
    # drift "offset": the per-turn model of the sizing rule (a whole-turn sinusoid projection;
    # offset and 1 theta terms are orthogonal to 2 theta over a whole uniformly sampled turn)
    return make(apparatus={"units": "1"}, noise={"h0": 2e-30},
                campaign={"duration_days": days},
                plan={"max_days": max(days, 1.0), "n_days": 2, "drift": drift})


def test_turn_shape_matches_demodulated_white_noise():
    # The per-turn (C, B) covariance shape F of plan.turn_shape_matrix against the sample
    # covariance of stage-1 amplitudes of white noise (4000 simulated turns, linear drift):
    # the relative standard error of a variance from N = 4000 is sqrt(2/N) = 2.2 %; band 5x.
    from fringe.demodulate.blocks import demodulate_blocks
    from fringe.demodulate.settings import DemodSettings
    from fringe.plan.forecast import turn_shape_matrix

    sc = _white_fm_scenario(1.0, drift="linear")
    f = turn_shape_matrix(sc, "linear")
    n = 45
    turns = 4000
    t = np.arange(n * turns, dtype=float)
    az = sc.motion.azimuth_rad(t)
    rng = np.random.default_rng(5)
    y = rng.normal(0.0, 1.0, t.size)
    table = demodulate_blocks(t, az, y, np.arange(0, t.size, n), DemodSettings(drift="linear"))
    emp = np.cov(np.stack([table.C, table.B])) / (2.0 / n)   # ideal projection: 2 sigma^2 / n
    assert np.diag(emp) == pytest.approx(np.diag(f), rel=0.11, abs=0)
    assert max(f[0, 0], f[1, 1]) > 1.1      # the linear drift term does inflate one component


@pytest.mark.parametrize("drift", ["offset", "linear", "quadratic"])
def test_turn_shape_equals_the_kernel_inverse(drift):
    # turn_shape_matrix computes (n/2) (X^T X)^-1 of the stage-1 design with numpy, so a
    # forecast never compiles the kernel; the compiled kernel's ninv_2 on the same turn is the
    # reference (same design, same scaling; agreement to rounding, 1e-9 relative)
    from fringe.demodulate.blocks import demodulate_blocks
    from fringe.demodulate.settings import DemodSettings
    from fringe.plan.forecast import turn_shape_matrix

    sc = _white_fm_scenario(1.0, drift=drift)
    n = max(int(round(sc.motion.period_s / sc.sample_interval_s)), 8)
    t = np.arange(n) * sc.sample_interval_s
    table = demodulate_blocks(t, sc.motion.azimuth_rad(t), np.zeros(n), np.array([0]),
                              DemodSettings(drift=drift))
    assert turn_shape_matrix(sc, drift) == pytest.approx(0.5 * n * table.ninv_2[0], rel=1e-9)


def test_sizing_rule_c0_line():
    # docs/references.md [R-noise-sizing]: sigma_C = sqrt(h0 / T) for white FM;
    # [R-lab-fourier]: C0 = 3/4 sin^2 chi K^ZZ (ke_ZZ enters C0 only). With ke_ZZ alone
    # (and the B offset, which is orthogonal) sigma(ke_ZZ) = sqrt(h0 / T) / (3/4 sin^2 chi),
    # T = whole turns x T_R. Tolerance 1e-6: the exact boost adds O(beta^2) ~ 1e-8 terms
    # (measured residual 2e-9).
    sc = _white_fm_scenario(3.0)
    res = forecast(sc, free=["ke_ZZ"])
    t_span = res.n_turns * 45.0
    s2 = math.sin(sc.site.colatitude_rad) ** 2
    expected = math.sqrt(2e-30 / t_span) / (0.75 * s2)  # [R-noise-sizing]; [R-lab-fourier] C0
    assert res.sigma["ke_ZZ"] == pytest.approx(expected, rel=1e-6, abs=0.0)  # abs=0: tiny values


def test_sizing_rule_sidereal_line():
    # docs/references.md [R-noise-sizing] + [R-lab-fourier]: ke_XY gives
    # Cs2 = 1/2 (1 + c^2) K^XY and Bc2 = c K^XY; over whole sidereal days
    # <sin^2 2phi> = <cos^2 2phi> = 1/2, so
    # sigma(ke_XY) = sqrt(h0 / T) sqrt(2 / (Cs2^2 + Bc2^2)). Ten stellar days: the partial turn
    # at the end and the turn discretisation leave 5e-7 (measured); tolerance 1e-5.
    sc = _white_fm_scenario(10.0 * STELLAR_DAY_S / 86400.0)
    res = forecast(sc, free=["ke_XY"])
    c = math.cos(sc.site.colatitude_rad)
    a, b = 0.5 * (1 + c * c), c
    # sizing rule, docs/references.md [R-noise-sizing]:
    expected = math.sqrt(2e-30 / (res.n_turns * 45.0)) * math.sqrt(2.0 / (a * a + b * b))
    assert res.sigma["ke_XY"] == pytest.approx(expected, rel=1e-5, abs=0.0)


def test_white_fm_sigma_independent_of_period():
    # docs/references.md [R-noise-sizing]: sigma_C = sqrt(h0 / T) does not involve the
    # rotation period.
    # Residual: whole-turn rounding of T / T_R, < 1e-4 for 20 days; tolerance 1e-3.
    res = forecast(_white_fm_scenario(20.0), free=["ke_XY", "ke_ZZ"])
    for name in res.free:
        assert np.allclose(res.sigma_vs_period[name], res.sigma[name], rtol=1e-3,
                           atol=0.0)  # [R-noise-sizing]: sqrt(h0 / T) has no T_R in it


def test_flicker_sigma_grows_as_sqrt_period():
    # S_y(f0) = hm1 / f0 = hm1 T_R / 2, so sigma_a^2 T_R-scaling gives sigma ∝ sqrt(T_R)
    # (derived from the per-turn formula); tolerance 1e-3 from whole-turn rounding.
    res = forecast(make(noise={"flicker_fm_adev": 3e-16},
                        plan={"periods_s": [10.0, 40.0], "max_days": 20.0, "n_days": 2}))
    for name in res.free:
        s10, s40 = res.sigma_vs_period[name]
        assert s40 / s10 == pytest.approx(2.0, rel=1e-3)


# --------------------------------------------------------------------- 1/sqrt(T) and ke/ko

def test_ke_only_scales_as_inverse_sqrt_span(long_plan):
    # ke_* alone: every turn adds the same information on average (no annual factor at first
    # order), so sigma sqrt(T) is constant from a few days to months; the partial sidereal day
    # at the end moves it by up to 1.05 % (ke_XZ, measured); tolerance 2 %.
    days = np.array(long_plan.days)
    sel = (days >= 3.0) & (days <= 150.0)
    for name in KE_NAMES:
        prod = np.array(long_plan.sigma_vs_days[name])[sel] * np.sqrt(days[sel])
        assert np.ptp(prod) / prod.mean() < 0.02, name


def test_joint_ke_ko_departs_from_inverse_sqrt_span(long_plan):
    # Fitted together with ko_*, ke_* are nearly degenerate until the annual modulation is
    # sampled (docs/references.md [R-lab-orbital]; a year separates them, [R-pub-Stanwix2006]):
    # sigma sqrt(T) of the joint fit falls by far more than the 2 % of the ke-only curve between 3
    # days and 150 days, and the joint/ke-only ratio reaches ~1 by two years.
    days = np.array(long_plan.days)
    i3, i150 = np.argmin(abs(days - 3)), np.argmin(abs(days - 150))
    for name in KE_NAMES:
        joint = np.array(long_plan.comparison["ke_ko"][name])
        assert joint[i3] * math.sqrt(days[i3]) > 5 * joint[i150] * math.sqrt(days[i150])
    assert long_plan.decoupling_ratio[i3] > 10
    assert long_plan.decoupling_ratio[-1] < long_plan.decoupling_threshold
    assert 30.0 < long_plan.decoupling_days < 730.0


def test_target_days_follow_the_curve(long_plan):
    # ke_* alone scale as 1/sqrt(T): days for the target = campaign (sigma / target)^2 (2 %).
    sig20 = long_plan.sigma["ke_XY"]
    ans = {a.name: a for a in long_plan.targets}
    assert ans["ke_XY"].days == pytest.approx(20.0 * (sig20 / 1e-18) ** 2, rel=0.02)
    assert ans["ke_ZZ"].days is None and "not reachable" in ans["ke_ZZ"].text()


# --------------------------------------------------------------------- Monte Carlo

def _chi2_band(n, p=1e-4):
    """Two-sided band of s / sigma for n draws: (n-1) s^2 / sigma^2 ~ chi^2(n-1)."""
    return (math.sqrt(chi2.ppf(p, n - 1) / (n - 1)), math.sqrt(chi2.ppf(1 - p, n - 1) / (n - 1)))


@pytest.mark.parametrize("free, days", [(KE_NAMES, 20.0), (KE_NAMES + KO_NAMES, 30.0)])
def test_forecast_matches_monte_carlo_scatter(free, days):
    # Forecast from every 20th turn (max_turn_points=2000) against least-squares fits of all
    # turns simulated with white per-turn noise. Band: the sampling distribution of the
    # standard deviation of n campaigns, chi^2(n-1), two-sided 1e-4 per coefficient; the mean
    # of the fits within 4.5 sigma / sqrt(n) of the injected values.
    sc = make(campaign={"duration_days": days}, plan={"max_turn_points": 2000})
    n = 240
    mc = monte_carlo_check(sc, n, np.random.default_rng(20270203), free=list(free))
    lo, hi = _chi2_band(n)
    for name, f, s, off in zip(mc.names, mc.sigma_forecast, mc.sigma_scatter,
                                   mc.mean_offset, strict=True):
        assert lo < s / f < hi, (name, s / f)
        assert abs(off) < 4.5 * f / math.sqrt(n), name
    assert mc.n_turns == int(days * 86400 // 45)
    back = MonteCarloCheck.from_dict(json.loads(json.dumps(mc.to_dict())))
    assert back == mc


# --------------------------------------------------------------------- per-turn noise model

def _per_turn_c(y, period):
    """Least-squares C of each whole turn of 1-s samples (offset, drift, 1 theta, 2 theta)."""
    t = np.arange(period) + 0.5
    th = 2 * np.pi * t / period
    x = np.stack([np.ones(period), t - period / 2, np.cos(th), np.sin(th), np.cos(2 * th),
                  np.sin(2 * th)], 1)
    return y.reshape(-1, period) @ np.linalg.pinv(x)[4]


@pytest.mark.parametrize("levels, allowance", [
    ({"white_fm_at_1s": 1e-15}, 0.0),          # exact for white FM (derivation in the docstring)
    ({"flicker_fm_floor": 1e-15}, 0.08),       # single-turn leakage: 0.942 by integrating
                                               # S_y |W|^2 (docs/plan.md); allowance 8 %
    ({"random_walk_fm_at_1s": 1e-16}, 0.03),   # same integral: 0.992; allowance 3 %
])
def test_turn_amplitude_variance_against_samples(levels, allowance):
    # Var of per-turn least-squares C from NoiseStream samples against S_y(2/T_R)/T_R. Band:
    # 5 x sqrt(2/n) for the variance of n turns (nearly independent: lag-1 autocorrelation
    # < 0.03 measured), plus the stated allowance for coloured noise.
    period, n = 40, 4000
    model = PowerLawNoise.from_allan_deviation(**levels)
    y = NoiseStream(model, 1.0, np.random.default_rng(7), span_s=period * n).next(period * n)
    ratio = _per_turn_c(y, period).var() / turn_amplitude_variance(model, period)
    assert abs(ratio - 1) < 5 * math.sqrt(2 / n) + allowance, ratio


def test_flicker_turn_amplitudes_white_across_turns():
    # Means of 16 consecutive turns have variance sigma_a^2 / 16 if the per-turn amplitudes
    # are white from turn to turn (the plan's approximation). 2000 blocks: 5 sqrt(2/2000) =
    # 16 % band, plus the 8 % single-turn allowance of flicker FM.
    period, n, m = 40, 32000, 16
    model = PowerLawNoise.from_allan_deviation(flicker_fm_floor=1e-15)
    y = NoiseStream(model, 1.0, np.random.default_rng(11), span_s=period * n).next(period * n)
    blocks = _per_turn_c(y, period).reshape(-1, m).mean(axis=1)
    ratio = blocks.var() / (turn_amplitude_variance(model, period) / m)
    assert abs(ratio - 1) < 5 * math.sqrt(2 / blocks.size) + 0.08, ratio


def test_stepped_duty_matches_mark_averages():
    # Stepped table, 8 marks of 4 s dwell + 1 s move (T_R = 40 s, duty 0.8): least-squares C
    # from the dwell samples only has variance h0 / (duty T_R) for white FM (docs/plan.md).
    sc = make(turntable={"motion": "stepped", "step_deg": 45.0, "dwell_s": 4.0,
                         "move_s": 1.0, "period_s": None},
              apparatus={"units": "1"}, noise={"h0": 2e-30})
    res = forecast(sc, settings=replace(plan_settings(sc), n_days=2, max_days=1.0))
    n = 4000
    y = np.random.default_rng(3).normal(0, math.sqrt(2e-30 / 2), (n, 8, 5))[:, :, :4]
    th = 2 * np.pi * np.arange(8) / 8
    x = np.stack([np.ones(8), np.cos(2 * th), np.sin(2 * th)], 1)
    c = y.mean(axis=2) @ np.linalg.pinv(x)[1]
    assert res.duty == pytest.approx(0.8)
    assert c.var() / res.turn_sigma**2 == pytest.approx(1.0, abs=5 * math.sqrt(2 / n))


# --------------------------------------------------------------------- results

def test_result_round_trip_and_views(long_plan):
    text = json.dumps(long_plan.to_dict(), allow_nan=False)
    back = PlanResult.from_dict(json.loads(text))
    assert back == long_plan
    assert "ke_XY" in long_plan.summary() and "reached after" in long_plan.summary()
    assert repr(long_plan).startswith("PlanResult(theory='sme'")


def test_result_is_frozen(long_plan):
    with pytest.raises(dataclasses.FrozenInstanceError):
        long_plan.campaign_days = 1.0
    with pytest.raises(TypeError):
        long_plan.sigma["ke_XY"] = 0.0
    with pytest.raises(TypeError):
        long_plan.sigma_vs_days["ke_XY"][0] = 0.0
    with pytest.raises(dataclasses.FrozenInstanceError):
        long_plan.targets[0].days = 1.0


@pytest.mark.parametrize(("field", "value", "expected"), [
    ("fringe_format", "fit", "fringe_format: expected 'plan', got 'fit'"),
    ("fringe_format_version", 2, "fringe_format_version: expected 1, got 2"),
    ("extra", 1, "extra: unknown field"),
    ("title", None, "title: expected a string"),
    ("free", "ke_XY", "free: expected a list of strings"),
    ("n_turns", 3.5, "n_turns: expected an integer >= 0"),
    ("period_s", -45.0, "period_s: expected a positive number"),
    ("sigma", {"ke_QQ": 1e-17}, "sigma.ke_QQ: unknown field"),
    ("correlation", [[1.0]], "correlation: expected a 5x5 matrix"),
    ("days", [1.0, "2"], "days[1]: expected a finite number"),
    ("sigma_vs_days", {"ke_XY": [1.0]}, "sigma_vs_days.ke_XY: expected a list of numbers or "
                                        "nulls of length 16"),
    ("decoupling_days", "soon", "decoupling_days: expected a finite number"),
    ("targets", [{"name": "ke_XY", "sigma_target": 0.0, "days": None,
                  "horizon_days": 730.0}], "targets[0].sigma_target: expected a positive"),
])
def test_result_from_dict_names_the_bad_field(long_plan, field, value, expected):
    d = json.loads(json.dumps(long_plan.to_dict()))
    d[field] = value
    with pytest.raises(InputFileError, match=re.escape(f"plan.json: {expected}")):
        PlanResult.from_dict(d, source="plan.json")
    del d[field]
    if field not in ("extra", "decoupling_days", "fringe_format", "fringe_format_version"):
        with pytest.raises(InputFileError, match=re.escape(f"plan.json: {field}: missing")):
            PlanResult.from_dict(d, source="plan.json")


def test_lab_c0_with_ke_zz_is_refused():
    # ke_ZZ enters C0 only (docs/references.md [R-lab-fourier]), so a constant C offset makes
    # it degenerate.
    with pytest.raises(ConfigError, match="lab_C0.*degenerate with ke_ZZ"):
        plan_settings(make(plan={"nuisances": ["lab_C0"]}))


# --------------------------------------------------------------------- errors

@pytest.mark.parametrize("noise, field", [
    (None, "section missing"),
    ({"white_fm_adev_1s": -1e-15}, "white_fm_adev_1s"),
    ({"white_fm_adev_1s": "1e-15"}, "white_fm_adev_1s"),
    ({"white_fm": 1e-15}, "white_fm: unknown field"),
    ({"white_fm_adev_1s": 1e-15, "h0": 2e-30}, "not both"),
    ({"h0": 0.0}, "every noise level is zero"),
    ({"white_fm_adev_1s": 1e-15, "f_h_hz": -3.0}, "f_h_hz"),
])
def test_bad_noise_section_is_one_line_config_error(tmp_path, noise, field):
    doc = copy.deepcopy(BASE)
    if noise is None:
        doc.pop("noise")
    else:
        doc["noise"] = noise
    path = tmp_path / "bad.toml"
    path.write_text(_to_toml(doc))
    runner = CliRunner()
    from fringe.cli import main

    result = runner.invoke(main, ["plan", str(path), "--out", str(tmp_path / "out")])
    assert result.exit_code == 2
    line = result.output.strip()
    assert "\n" not in line and str(path) in line and "[noise]" in line and field in line
    with pytest.raises(ConfigError):
        noise_from_section(doc.get("noise"), str(path), 1.0)


@pytest.mark.parametrize("plan, text", [
    ({"free": ["ke_XY", "k_bogus"]}, "k_bogus"),
    ({"targets": {"ko_XY": 1e-15}}, "unknown free coefficient"),
    ({"max_days": 0.5}, "max_days"),
    ({"speed": 3}, "speed: unknown field"),
])
def test_bad_plan_section(plan, text):
    with pytest.raises(ConfigError, match=text) as info:
        forecast(make(plan=plan))
    assert str(info.value).startswith("test.toml: [plan]")


# --------------------------------------------------------------------- command line

def _to_toml(doc: dict) -> str:
    out = []
    for key, value in doc.items():
        if not isinstance(value, dict):
            out.append(f"{key} = {json.dumps(value)}")
    for key, value in doc.items():
        if isinstance(value, dict):
            out.append(f"[{key}]")
            out += [f"{k} = {json.dumps(v)}" for k, v in value.items()
                    if not isinstance(v, dict)]
            for k, v in value.items():
                if isinstance(v, dict):
                    out.append(f"[{key}.{k}]")
                    out += [f"{kk} = {json.dumps(vv)}" for kk, vv in v.items()]
    return "\n".join(out) + "\n"


def test_cli_writes_outputs_and_refuses_to_overwrite(tmp_path):
    from fringe.cli import main

    doc = copy.deepcopy(BASE)
    doc["campaign"]["duration_days"] = 5.0
    doc["plan"] = {"max_days": 20.0, "n_days": 5}
    path = tmp_path / "s.toml"
    path.write_text(_to_toml(doc))
    out = tmp_path / "out"
    args = ["plan", str(path), "--out", str(out), "--free", "ke_XY,ke_ZZ",
            "--target", "ke_XY=1e-17"]
    runner = CliRunner()
    first = runner.invoke(main, args)
    assert first.exit_code == 0, first.output
    for name in ("plan.json", "plan.txt", "plan_sigma_vs_days.png", "plan_sigma_vs_days.pdf",
                 "plan_sigma_vs_period.png", "plan_sigma_vs_period.pdf"):
        assert (out / name).stat().st_size > 0
    saved = PlanResult.from_dict(json.loads((out / "plan.json").read_text()))
    assert saved.free == ("ke_XY", "ke_ZZ") and saved.targets[0].name == "ke_XY"
    assert "1-sigma forecast" in first.output
    again = runner.invoke(main, args)
    assert again.exit_code == 2 and "exists" in again.output and "\n" not in again.output.strip()


def test_lab_b0_stays_orthogonal_to_ke_zz_at_sixty_degrees():
    """The plan's lab_B0 lies along the apparatus's two-path B0 (as in the fit), which ke_ZZ
    does not produce: with paths 60 deg apart sigma(ke_ZZ) is the same with and without it
    (a constant B column would correlate with ke_ZZ at r = cos 60 deg and raise sigma(ke_ZZ)
    by 1/sqrt(1 - r^2) = 1.155; derived). The white-FM sizing rule with the two-path factor
    |f| = sin 60 deg (docs/conventions.md, C9) fixes the value."""
    sc = make(apparatus={"units": "1", "path_separation_deg": 60.0}, noise={"h0": 2e-30},
              campaign={"duration_days": 1.0},
              plan={"max_days": 1.0, "n_days": 2, "drift": "offset"})
    with_b0 = forecast(sc, free=["ke_ZZ"])
    st = dataclasses.replace(plan_settings(sc, ["ke_ZZ"]), nuisances=())
    without = forecast(sc, settings=st)
    assert with_b0.sigma["ke_ZZ"] == pytest.approx(without.sigma["ke_ZZ"], rel=1e-9)
    t_span = with_b0.n_turns * 45.0
    s2 = math.sin(sc.site.colatitude_rad) ** 2
    # [R-noise-sizing]; [R-lab-fourier] C0; the 60 deg pair carries |f| = sin 60 deg of it
    expected = math.sqrt(2e-30 / t_span) / (0.75 * s2 * math.sin(math.radians(60.0)))
    assert with_b0.sigma["ke_ZZ"] == pytest.approx(expected, rel=1e-6, abs=0.0)
