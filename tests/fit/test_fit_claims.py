"""What a fit says about what its data can support: warnings kept as records in the result file.

* ``harmonics-chi2``: the stage-2 reduced chi^2 far from one;
* ``utc-before-1960`` (and the other time-span codes, tests/ground/test_time_span.py);
* ``simulated-noise-free``: a simulated record without noise;
* the command prints each warning once.
"""

from __future__ import annotations

import copy
import math
import shutil

import numpy as np
import pytest

from fringe.errors import SimulationWarning, SystematicsWarning, TimeScaleWarning
from fringe.experiment.scenario import scenario_from_dict
from fringe.fit.run import fit_run, record_cautions, setup_from_run
from fringe.fit.settings import FitSettings
from fringe.fit.stages import harmonics_chi2_warning
from fringe.io.fit_result import FitResult
from fringe.io.runwriter import RunWriter
from fringe.simulation.campaign import simulate
from tests.helpers.commands import run_command
from tests.helpers.runs import BASE

FREE = ("ke_XY", "ke_XXmYY")


def _write_record(path, *, epoch="2027-02-03T00:00:00Z", random_turns=0.0, seed=4):
    """12 h at 1 Hz, 45 s turns, white noise 0.5 Hz; ``random_turns``: a 2 theta term of
    random amplitude and phase per turn (Hz), which the C10 harmonics cannot describe.
    """
    rng = np.random.default_rng(seed)
    t = np.arange(43200.0)
    theta = 2 * np.pi * t / 45.0
    turn = (t // 45).astype(int)
    amp = rng.normal(0.0, 1.0, turn[-1] + 1)[turn]
    phase = rng.uniform(0.0, 2 * np.pi, turn[-1] + 1)[turn]
    y = random_turns * amp * np.cos(2 * theta + phase) + rng.normal(0.0, 0.5, t.size)
    apparatus = {k: v for k, v in BASE["apparatus"].items() if k != "units"}
    with RunWriter(path, site=BASE["site"], apparatus=apparatus, epoch_utc=epoch,
                   signal_units="Hz") as w:
        w.append(t, np.pi - theta, y)
    return str(path)


@pytest.mark.parametrize("red, n_turns, expected", [
    (435.0, 25808, True),       # the size of the case that passed silently before
    (0.3, 1000, True),
    (1.05, 25808, False),       # near one
    (2.5, 12, False),           # dof 14: sqrt(2/14) = 0.38, 1.5 < 5 x 0.38
    (2.5, 1000, True),
    (float("nan"), 100, False),
])
def test_harmonics_chi2_rule(red, n_turns, expected):
    # dof = 2 n - 10; white-noise spread of a reduced chi2 = sqrt(2 / dof) (derived)
    w = harmonics_chi2_warning(red, n_turns, "reduced-chi2")
    assert (w is not None) is expected
    if w is not None:
        assert w.code == "harmonics-chi2" and w.coefficients == ()
        assert w.values["dof"] == 2 * n_turns - 10


def test_fit_keeps_a_far_harmonics_chi2_in_the_result(tmp_path):
    path = _write_record(tmp_path / "r.h5", random_turns=1.0)
    with pytest.warns(SystematicsWarning, match="harmonic fit: reduced chi2"):
        res, cols = fit_run(path, FitSettings(free=FREE))
    cols.close()
    (w,) = [w for w in res.warnings if w.code == "harmonics-chi2"]
    assert w.values["chi2_reduced"] == pytest.approx(res.harmonics.chi2_reduced, rel=1e-12)
    assert w.values["chi2_reduced"] > 2.0
    back = FitResult.from_dict(res.to_dict())
    assert [x.code for x in back.warnings] == [x.code for x in res.warnings]


def test_plain_record_has_no_harmonics_chi2_warning(tmp_path):
    path = _write_record(tmp_path / "r.h5")
    res, cols = fit_run(path, FitSettings(free=FREE))
    cols.close()
    assert "harmonics-chi2" not in [w.code for w in res.warnings]
    assert math.isclose(res.harmonics.chi2_reduced, 1.0, abs_tol=0.2)   # white data


def test_a_1950_record_is_fitted_with_a_kept_time_warning(tmp_path):
    # before: ERFA's 'dubious year' went to stderr and the result said no warnings
    path = _write_record(tmp_path / "old.h5", epoch="1950-06-01T00:00:00Z")
    with pytest.warns(TimeScaleWarning, match="before 1960"):
        res, cols = fit_run(path, FitSettings(free=FREE))
    cols.close()
    codes = [w.code for w in FitResult.from_dict(res.to_dict()).warnings]
    assert "utc-before-1960" in codes


def test_simulated_record_without_noise_is_flagged(tmp_path):
    doc = copy.deepcopy(BASE)
    del doc["noise"]
    doc["campaign"]["duration_days"] = 0.05
    sc = scenario_from_dict(doc, "quiet.toml")
    with pytest.warns(SimulationWarning, match=r"quiet.toml: the scenario has no \[noise\]"):
        simulate(sc, tmp_path / "q.h5", seed=1)
    setup, meta = setup_from_run(str(tmp_path / "q.h5"), "sme")
    codes = [w.code for w in record_cautions(str(tmp_path / "q.h5"), setup, meta)]
    assert codes == ["simulated-noise-free"]


def test_simulated_record_with_noise_is_not_flagged(tmp_path):
    doc = copy.deepcopy(BASE)
    doc["campaign"]["duration_days"] = 0.05
    simulate(scenario_from_dict(doc, "lab.toml"), tmp_path / "n.h5", seed=1)
    setup, meta = setup_from_run(str(tmp_path / "n.h5"), "sme")
    assert record_cautions(str(tmp_path / "n.h5"), setup, meta) == []


def test_the_command_prints_each_warning_once(tmp_path):
    # before: stderr had "warning: ..." and the summary "WARNING: ..." for the same warning
    _write_record(tmp_path / "r.h5", random_turns=1.0)
    shutil.copy(tmp_path / "r.h5", tmp_path / "s.h5")
    run = run_command(tmp_path, ["fit", "s.h5", "--out", "fit.json", "--free",
                                 ",".join(FREE)])
    assert run.exit_code == 0, run.stderr
    text = run.stdout + run.stderr
    assert text.count("harmonic fit: reduced chi2") == 1
    assert "warning:" not in run.stderr
