"""The invented hand-read 1893 session of examples/stepped_1893, from CSV to a medium fit.

Issue 13's done-when: a 6-turn session of 16 marks with times, azimuths in degrees and readings
in instrument units (epoch in the 19th century) imports, fits with the medium theory, and gives
per-turn 2 theta amplitudes equal to an independent least-squares fit of offset + linear drift +
1 theta + 2 theta on the same readings (weighted by the number of readings each mean holds).
"""

from __future__ import annotations

import warnings
from pathlib import Path

import numpy as np
import pytest

from fringe.demodulate.engine import reference_angle
from fringe.fit.run import fit_run
from fringe.fit.settings import FitSettings
from fringe.io.csvimport import import_csv

EXAMPLE = Path(__file__).resolve().parents[2] / "examples" / "stepped_1893"
SCALE = 0.02          # fringe per division, session.toml [calibration]


def independent_amplitudes(t, az_deg, y, n_readings):
    """(C, B) of cos 2 theta, sin 2 theta: weighted lstsq of offset, drift, 1 theta, 2 theta.

    theta = pi - azimuth (C7); weights = readings averaged (a mean of N has N times the weight).
    """
    theta = np.pi - np.radians(az_deg)
    x = np.stack([np.ones_like(t), t - t.mean(), np.cos(theta), np.sin(theta),
                  np.cos(2 * theta), np.sin(2 * theta)], axis=1)
    w = np.sqrt(n_readings)
    coef, *_ = np.linalg.lstsq(x * w[:, None], y * w, rcond=None)
    return coef[4], coef[5]


@pytest.fixture(scope="module")
def session_fit(tmp_path_factory):
    out = tmp_path_factory.mktemp("s1893") / "session.h5"
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        import_csv(EXAMPLE / "session.csv", out, metadata=EXAMPLE / "session.toml")
        result, columns = fit_run(str(out), FitSettings(theory="medium"))
        turns = columns.to_dict()
        columns.close()
    return result, turns, [str(w.message) for w in caught]


def test_each_turn_is_the_independent_least_squares_fit(session_fit):
    result, turns, _ = session_fit
    rows = np.loadtxt(EXAMPLE / "session.csv", delimiter=",", comments="#", skiprows=4)
    assert rows.shape == (96, 4)
    assert result.stage1.n_accepted == 6 and len(turns["C"]) == 6
    for k in range(6):                                  # the observer's turns: 16 marks each
        r = rows[16 * k:16 * (k + 1)]
        c, b = independent_amplitudes(r[:, 0], r[:, 1], SCALE * r[:, 2], r[:, 3])
        assert turns["C"][k] == pytest.approx(c, abs=1e-12)
        assert turns["B"][k] == pytest.approx(b, abs=1e-12)
    assert np.all(turns["n_valid"] == 16)


def test_the_medium_fit_states_what_the_session_supports(session_fit):
    result, _, said = session_fit
    assert result.theory == "medium" and result.motion.kind == "continuous"
    assert result.motion.sense == "cw"
    codes = {w.code for w in result.warnings}
    # a 19th-century epoch: UT, outside epv00's span; one night: too few sidereal phases
    assert {"utc-before-1960", "ephemeris-range", "sidereal-phases-few"} <= codes
    assert result.harmonics is None and len(result.sessions.sessions) == 1
    assert result.calibration.scale_rel_sigma == 0.04
    assert result.derived.lab_speed_kms["upper_95"] > result.derived.lab_speed_kms["best"]
    assert any("before 1960" in m for m in said)


@pytest.mark.parametrize("step_deg", [22.5, -22.5, 0.001, -0.001])
def test_the_first_block_starts_at_the_first_sample_in_either_sense(step_deg):
    """theta0 lies at or just behind the first sample against the motion, so no block of one
    sample is cut at the start (C6: a table turning clockwise has decreasing theta)."""
    theta = 1.0 + np.radians(step_deg) * np.arange(10)
    theta0 = reference_angle(theta)
    psi = (theta - theta0) % (2 * np.pi)
    assert np.all(np.abs(np.diff(psi)) < np.pi)          # no crossing among the first samples
    assert theta0 == pytest.approx(1.0 if step_deg > 0 else 1.0 - np.radians(step_deg) / 2)


def test_the_report_figure_says_the_sidereal_curve_is_absent(session_fit):
    """A fit without stage 2 draws no C10 curve, and the caption says why."""
    import matplotlib

    matplotlib.use("Agg")
    from fringe.report.figures.fit import report_figures

    result, turns, _ = session_fit
    keep = turns["accepted"].astype(bool)
    accepted = {k: np.asarray(v)[keep] for k, v in turns.items() if k != "accepted"}
    accepted["turn_period_s"] = result.stage1.turn_period_s
    figures = {name: (caption, fig) for name, caption, fig in report_figures(result, accepted)}
    caption = figures["amplitudes"][0]
    assert "no curve of the sidereal harmonics: the sidereal stage was skipped" in caption
    assert "dashed" not in caption
