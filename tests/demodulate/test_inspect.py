"""fringe inspect: the quality summary measures what was simulated."""

from __future__ import annotations

import math

import numpy as np
import pytest

from fringe.demodulate.quality import inspect_run
from fringe.experiment.scenario import scenario_from_dict
from fringe.simulation.campaign import simulate


def _scenario(**systematics):
    doc = {"site": {"latitude_deg": 40.0, "longitude_deg": 0.0},
           "campaign": {"start_utc": "2027-02-03T00:00:00Z", "duration_days": 0.2},
           "apparatus": {"kind": "cavity-pair", "carrier_hz": 2.8e14, "units": "1"},
           "turntable": {"motion": "continuous", "period_s": 45.0},
           "theory": {"name": "sme"}, "noise": {"white_fm_adev_1s": 1e-15},
           "systematics": systematics}
    return scenario_from_dict(doc, "inspect-test")


def test_rate_jitter_and_white_noise_level(tmp_path):
    # Table angle as a random walk of sigma_w rad/sqrt(s): each turn's duration scatters by
    # sigma_w sqrt(T) / (2 pi / T), i.e. relative sigma_w sqrt(T) / (2 pi) (derived). 384 turns
    # give a relative standard error of ~1/sqrt(2 x 384) = 3.6 % on a standard deviation; band 15 %.
    sw = 0.002
    simulate(_scenario(rate_jitter_rad_per_sqrt_s=sw), tmp_path / "j.h5", seed=4)
    rep = inspect_run(str(tmp_path / "j.h5"))
    expected = sw * math.sqrt(45.0) / (2 * math.pi)
    assert rep.stats["turn_duration_rel_std"] == pytest.approx(expected, rel=0.15, abs=0)
    assert rep.stats["turn_period_s"] == pytest.approx(45.0, rel=1e-3, abs=0)
    # white FM at 1e-15 at 1 s: sigma_y(1 s) = 1e-15 (ADEV definition; 17 280 samples, ~1 %
    # standard error at tau = 1 s; band 5 %)
    i1 = int(np.flatnonzero(rep.allan.tau_s == 1.0)[0])
    assert rep.allan.adev[i1] == pytest.approx(1e-15, rel=0.05, abs=0)


def test_gaps_and_nans_are_counted(tmp_path):
    simulate(_scenario(gaps_per_day=20.0, gap_length_s=300.0, dropout_fraction=0.01),
             tmp_path / "g.h5", seed=5)
    rep = inspect_run(str(tmp_path / "g.h5"))
    assert rep.stats["n_gaps"] >= 1
    assert rep.stats["gap_longest_s"] >= 300.0
    n = rep.stats["n_samples"]
    assert 0.005 * n < rep.stats["n_nan"] < 0.02 * n     # 1 % dropouts, binomial scatter ~0.08 %
    assert rep.stats["turn_duration_rel_std"] < 1e-9      # no jitter: periods exact
