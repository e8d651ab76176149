"""Turntable motions: detection, blocks and the per-block fit of each motion.

The per-block amplitudes are checked against an independent least-squares fit of offset + linear
drift + 1 theta + 2 theta on the same readings (numpy.linalg.lstsq; the model of stage 1,
docs/references.md [R-practice-stage1], common practice), sharing no code with the kernel.
Records with one reading per mark follow the hand-read scheme of 16 azimuth marks per turn
(docs/references.md [R-practice-signal], source: Michelson & Morley 1887); the numbers are
invented.
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from fringe.demodulate.engine import run_stage1
from fringe.demodulate.motion import detect_motion, leg_starts, moving_mask
from fringe.demodulate.settings import DemodSettings
from fringe.errors import FitError
from fringe.experiment.turntable import (
    ContinuousRotation,
    ReversingRotation,
    SteppedRotation,
    SwingingRotation,
)
from fringe.io.runwriter import RunWriter

SITE = {"name": "Quarry Hill cellar (invented)", "latitude_deg": 41.5, "longitude_deg": -81.6,
        "height_m": 200.0}
MICHELSON = {"kind": "michelson", "arm_length_m": 11.0, "wavelength_m": 5.9e-7}


def lstsq_amplitudes(t, az, y):
    """C, B of offset + linear drift + 1 theta + 2 theta fitted to the readings (lstsq)."""
    theta = np.pi - az
    x = np.stack([np.ones_like(t), t - t.mean(), np.cos(theta), np.sin(theta),
                  np.cos(2 * theta), np.sin(2 * theta)], axis=1)
    coef, *_ = np.linalg.lstsq(x, y, rcond=None)
    return coef[4], coef[5]


def write_run(path, t, az, y, epoch="1887-07-08T12:00:00Z"):
    with RunWriter(path, site=SITE, apparatus=MICHELSON, epoch_utc=epoch,
                   signal_units="fringe") as w:
        w.append(np.asarray(t, float), np.asarray(az, float), np.asarray(y, float))
    return str(path)


def hand_read(rng, n_turns=6, marks=16, reverse=False):
    """One reading per mark, readings about 22 s apart with jitter (invented)."""
    step = 2 * np.pi / marks
    k = np.arange(n_turns * marks)
    turn, pos = np.divmod(k, marks)
    if reverse:                          # odd turns read back from the last mark
        pos = np.where(turn % 2 == 1, marks - pos, pos)
        pos = np.where((turn % 2 == 1) & (pos == marks), 0, pos)
        travel = np.where(turn % 2 == 0, pos, marks - pos) * step
        theta = np.where(turn % 2 == 0, pos * step, 2 * np.pi - travel)
        theta = np.where((turn % 2 == 1) & (np.arange(k.size) % marks == 0), 2 * np.pi, theta)
    else:
        theta = pos * step + turn * 2 * np.pi
    t = 22.5 * k + rng.uniform(-3, 3, k.size)
    y = (0.3 + 2e-4 * t + 0.05 * np.cos(theta - 0.4) + 0.02 * np.cos(2 * theta - 1.1)
         + rng.normal(0, 0.01, k.size))
    return t, np.mod(np.pi - theta, 2 * np.pi), y


@pytest.mark.parametrize("motion, kind, sense", [
    (ContinuousRotation(45.0), "continuous", "ccw"),
    (ContinuousRotation(45.0, sense="cw"), "continuous", "cw"),
    (ReversingRotation(60.0), "reversing", "alternating"),
    (ReversingRotation(60.0, turns_per_leg=2, sense="cw"), "reversing", "alternating"),
    (SwingingRotation(arc_deg=300.0, sweep_s=50.0), "swinging", "alternating"),
    (SteppedRotation(step_deg=22.5, dwell_s=8.0, move_s=2.0), "stepped", "ccw"),
])
def test_motion_is_detected_from_the_azimuth(motion, kind, sense):
    t = np.arange(4000.0)
    m = detect_motion(t, motion.azimuth_rad(t), DemodSettings())
    assert (m.kind, m.sense) == (kind, sense)
    # the mean rate over the first samples (a stepped table's last, partial turn biases it)
    assert m.turn_period_s == pytest.approx(motion.period_s, rel=2e-3)
    if kind == "stepped":
        assert m.step_deg == pytest.approx(22.5) and m.marks_per_turn == pytest.approx(16)
        assert 0.7 < m.dwell_fraction < 0.95          # 8 s of every 10 s, plus one sample
        assert "left out" in m.excluded_samples_rule
    if kind in ("reversing", "swinging"):
        assert "leg" in m.block_rule


def test_legs_are_cut_at_reversals_and_whole_turns():
    # two turns per leg: blocks are whole turns, each leg's second turn ends at the reversal
    mot = ReversingRotation(60.0, turns_per_leg=2)
    t = np.arange(0.0, 480.0, 1.0)
    starts = leg_starts(t, mot.azimuth_rad(t), 15.0)
    assert starts.tolist() == [0, 61, 121, 181, 241, 301, 361, 421]


def test_moving_mask_marks_samples_between_rests():
    az = np.array([0.0, 0.0, 0.1, 0.2, 0.3, 0.3, 0.3, 0.5])
    assert moving_mask(az, 1e-6).tolist() == [False, False, True, True, False, False, False,
                                              True]
    assert moving_mask(az, 1e-6, next_rad=0.5).tolist()[-1] is False


@pytest.mark.parametrize("reverse", [False, True], ids=["one-sense", "alternating"])
def test_hand_read_turns_equal_independent_least_squares(tmp_path, reverse):
    rng = np.random.default_rng(18870708)
    t, az, y = hand_read(rng, reverse=reverse)
    path = write_run(tmp_path / "hand.h5", t, az, y)
    table, info = run_stage1(path, DemodSettings())
    assert info.motion.kind == ("reversing" if reverse else "continuous")
    assert table.n_blocks == 6 and np.all(table.accepted)
    bounds = np.searchsorted(t, table.t_start_s), np.searchsorted(t, table.t_stop_s) + 1
    for b, (lo, hi) in enumerate(zip(*bounds)):
        c, bb = lstsq_amplitudes(t[lo:hi], az[lo:hi], y[lo:hi])
        # the same least-squares problem: equal to rounding
        assert table.C[b] == pytest.approx(c, abs=1e-12)
        assert table.B[b] == pytest.approx(bb, abs=1e-12)
    # one-sense: 16 readings per turn; alternating: each leg ends at its extreme reading
    assert table.n_valid.sum() == 96 and np.all(table.n_valid >= 15)


def test_stepped_blocks_leave_out_samples_while_moving(tmp_path):
    mot = SteppedRotation(step_deg=22.5, dwell_s=6.0, move_s=3.0)
    t = np.arange(0.0, 6 * mot.period_s)
    az = mot.azimuth_rad(t)
    rng = np.random.default_rng(5)
    theta = np.pi - az
    y = 0.3 + 1e-4 * t + 0.02 * np.cos(2 * theta - 1.1) + rng.normal(0, 0.01, t.size)
    moving = moving_mask(az, np.radians(1e-3))
    y_bad = np.where(moving, 50.0, y)          # samples while moving are garbage: left out
    path = write_run(tmp_path / "stepped.h5", t, az, y_bad)
    table, info = run_stage1(path, DemodSettings())
    assert info.motion.kind == "stepped" and info.motion.sense == "ccw"
    assert table.n_blocks == 6 and np.all(table.accepted)
    bounds = np.searchsorted(t, table.t_start_s), np.searchsorted(t, table.t_stop_s) + 1
    for b, (lo, hi) in enumerate(zip(*bounds)):
        keep = ~moving[lo:hi]
        assert table.n_valid[b] == np.sum(keep)
        c, bb = lstsq_amplitudes(t[lo:hi][keep], az[lo:hi][keep], y[lo:hi][keep])
        assert table.C[b] == pytest.approx(c, abs=1e-12)
        assert table.B[b] == pytest.approx(bb, abs=1e-12)


def test_steps_of_90_degrees_cannot_separate_c_from_b(tmp_path):
    mot = SteppedRotation(step_deg=90.0, dwell_s=20.0, move_s=5.0)
    t = np.arange(0.0, 2000.0)
    path = write_run(tmp_path / "quarter.h5", t, mot.azimuth_rad(t), np.zeros(t.size))
    with pytest.raises(FitError, match="cannot separate C from B"):
        run_stage1(path, DemodSettings())


def test_a_short_swing_cannot_separate_c_from_b(tmp_path):
    mot = SwingingRotation(arc_deg=90.0, sweep_s=30.0)
    t = np.arange(0.0, 2000.0)
    path = write_run(tmp_path / "swing.h5", t, mot.azimuth_rad(t), np.zeros(t.size))
    with pytest.raises(FitError, match="swings through 90 deg.*cannot separate C from B"):
        run_stage1(path, DemodSettings())


@pytest.mark.parametrize("motion", [
    ReversingRotation(60.0), SwingingRotation(arc_deg=300.0, sweep_s=50.0),
    SteppedRotation(step_deg=22.5, dwell_s=4.0, move_s=1.0)], ids=["reversing", "swinging",
                                                                   "stepped"])
def test_blocks_do_not_depend_on_the_split_into_ranges(tmp_path, motion):
    t = np.arange(0.0, 3000.0)
    az = motion.azimuth_rad(t)
    y = np.cos(2 * (np.pi - az)) + np.random.default_rng(1).normal(0, 0.1, t.size)
    path = write_run(tmp_path / "run.h5", t, az, y)
    whole, _ = run_stage1(path, DemodSettings())
    split, _ = run_stage1(path, DemodSettings(), range_samples=257)
    assert whole.n_blocks == split.n_blocks > 10
    assert np.array_equal(whole.coef, split.coef, equal_nan=True)
    assert np.array_equal(whole.n_valid, split.n_valid)


def test_inspect_states_the_motion_and_the_sessions(tmp_path):
    from fringe.demodulate.quality import inspect_run

    mot = SteppedRotation(step_deg=22.5, dwell_s=6.0, move_s=3.0)
    t = np.arange(0.0, 4 * mot.period_s)
    az = mot.azimuth_rad(t)
    y = np.cos(2 * (np.pi - az)) + np.random.default_rng(2).normal(0, 0.1, t.size)
    path = write_run(tmp_path / "stepped.h5", t, az, y, epoch="2027-02-03T22:00:00Z")
    rep = inspect_run(path)
    text = rep.summary()
    assert "motion: stepped (ccw)" in text and "16 marks per turn" in text
    assert rep.stats["n_moving_excluded"] == int(np.sum(moving_mask(az, np.radians(1e-3))))
    assert "per-session 2 theta amplitudes" in text and "skips the sidereal stage" in text
    (s,) = rep.sessions.sessions
    assert s.n_turns == 4 and s.C.value == pytest.approx(1.0, abs=5 * s.C.sigma)
    d = rep.to_dict()
    assert d["motion"]["kind"] == "stepped"
    assert d["sessions"]["chi2"] is None          # one session: no agreement chi2, JSON null
    json.dumps(d, allow_nan=False)


def test_stepped_table_that_reverses_is_cut_into_legs(tmp_path):
    # 16 marks out and back (a sweep of marks per leg), 5 samples at rest per mark and 2
    # moving samples between marks (invented)
    marks = np.concatenate([np.arange(0, 17), np.arange(15, -1, -1), np.arange(1, 17),
                            np.arange(15, -1, -1)])
    theta, moving = [], []
    for a, b in zip(marks[:-1], marks[1:]):
        theta += [a * 22.5] * 5 + [a * 22.5 + (b - a) * 22.5 * f for f in (1 / 3, 2 / 3)]
        moving += [False] * 5 + [True] * 2
    theta += [marks[-1] * 22.5] * 5
    moving += [False] * 5
    theta, moving = np.radians(np.array(theta)), np.array(moving)
    t = np.arange(theta.size, dtype=float)
    az = np.mod(np.pi - theta, 2 * np.pi)
    rng = np.random.default_rng(9)
    y = 0.02 * np.cos(2 * theta - 0.3) + 1e-4 * t + rng.normal(0, 0.005, t.size)
    y = np.where(moving, -7.0, y)
    path = write_run(tmp_path / "stepped_legs.h5", t, az, y)
    table, info = run_stage1(path, DemodSettings())
    assert (info.motion.kind, info.motion.sense) == ("stepped", "alternating")
    assert table.n_blocks == 4 and np.all(table.accepted)
    bounds = np.searchsorted(t, table.t_start_s), np.searchsorted(t, table.t_stop_s) + 1
    for b, (lo, hi) in enumerate(zip(*bounds)):
        keep = ~moving_mask(az, np.radians(1e-3))[lo:hi]
        c, bb = lstsq_amplitudes(t[lo:hi][keep], az[lo:hi][keep], y[lo:hi][keep])
        assert table.C[b] == pytest.approx(c, abs=1e-12)
        assert table.B[b] == pytest.approx(bb, abs=1e-12)


def test_a_table_idle_at_one_angle_is_not_stepped():
    # 1500 s at rest, then continuous turns: one rest position, so not a stepped table
    t = np.arange(4000.0)
    az = np.where(t < 1500, 0.0, ContinuousRotation(45.0).azimuth_rad(t - 1500))
    m = detect_motion(t, az, DemodSettings())
    assert m.kind == "continuous" and m.excluded_samples_rule == ""


@pytest.mark.parametrize("kind", ["uniform", "turning", "reversing", "boundaries", "steps"])
def test_unwrap_angles_is_numpy_unwrap_bit_for_bit(kind):
    # the reference is numpy.unwrap itself (docs/references.md [R-lib-numpy-unwrap], source);
    # the cases include steps of exactly +-pi and multiples of 2 pi, where the fold is ambiguous
    from fringe.demodulate.kernel import unwrap_angles

    rng = np.random.default_rng(11)
    for n in (0, 1, 2, 3, 257, 4096):
        if kind == "uniform":
            p = rng.uniform(-10.0, 10.0, n)
        elif kind == "turning":
            p = np.pi - np.mod(np.cumsum(rng.normal(-0.14, 0.01, n)), 2 * np.pi)
        elif kind == "reversing":
            p = np.mod(np.cumsum(rng.normal(0.0, 0.8, n)), 2 * np.pi) - np.pi
        elif kind == "boundaries":
            p = rng.choice([0.0, np.pi, -np.pi, 2 * np.pi, -2 * np.pi, 3 * np.pi, -0.0], n)
        else:
            p = np.cumsum(rng.choice([np.pi, -np.pi, 2 * np.pi, 0.5], n)) * 1.37
        assert unwrap_angles(p).tobytes() == np.unwrap(p).tobytes()
    p = np.linspace(0.0, 50.0, 300)
    p[7] = np.nan
    np.testing.assert_array_equal(unwrap_angles(p), np.unwrap(p))      # NaN propagates alike
