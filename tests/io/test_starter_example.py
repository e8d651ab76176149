"""The starter record of ``examples/starter/`` imports, fits and reports end to end.

The record is invented (``examples/starter/make_starter_record.py``): 3 h of 1 Hz samples, a
table turning every 45 s, white frequency noise of fractional Allan deviation 3e-15 at 1 s on a
1.94e14 Hz carrier, drift, a temperature term and a 1 theta term, no anisotropy. Every command
runs in a folder under tmp_path on the repository's files (read only).
"""

from __future__ import annotations

import importlib.util
import math
from pathlib import Path

import numpy as np

from fringe.io.fit_result import read_fit_result
from fringe.io.runreader import open_run
from tests.helpers.commands import run_command
from tests.helpers.hostile import digest

STARTER = Path(__file__).resolve().parents[2] / "examples" / "starter"
CSV, META = STARTER / "cavity_rotation.csv", STARTER / "cavity_rotation.toml"
BUDGET = STARTER / "budget.toml"


def _generator():
    spec = importlib.util.spec_from_file_location("starter", STARTER / "make_starter_record.py")
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod


def test_the_starter_record_is_reproducible_and_small(tmp_path):
    written = _generator().write(str(tmp_path))
    assert Path(written).read_bytes() == CSV.read_bytes()
    assert CSV.stat().st_size < 300_000                    # kept small enough to copy


def test_the_starter_record_imports_fits_and_reports(tmp_path):
    gen = _generator()
    before = (digest(CSV), digest(META))
    budget_before = digest(BUDGET)
    run = run_command(tmp_path, ["import", str(CSV), "--meta", str(META), "--out", "run.h5"])
    assert run.exit_code == 0, run.stderr
    with open_run(tmp_path / "run.h5") as rec:
        assert rec.n_samples == gen.DURATION_S                     # one row per second
        assert rec.aux_channels == {"vessel_temp": "mK"}
        got = rec.read_all()
    assert np.flatnonzero(np.isnan(got["signal"])).tolist() == list(gen.DROPPED)

    run = run_command(tmp_path, ["fit", "run.h5", "--out", "fit.json"])
    assert run.exit_code == 0, run.stderr
    fit = read_fit_result(tmp_path / "fit.json")
    stage1 = fit.to_dict()["stage1"]
    turns = gen.DURATION_S / gen.PERIOD_S                          # 240 turns (derived)
    assert stage1["n_accepted"] == turns and stage1["n_rejected_glitch"] == 0
    assert math.isclose(stage1["turn_period_s"], gen.PERIOD_S, rel_tol=1e-9)
    # per-sample white level = adev(1 s) x carrier for white FM sampled at 1 s (derived); the
    # band holds the scatter of a median of 240 per-turn RMS values (a few per cent)
    white_hz = gen.WHITE_FM_ADEV_1S * gen.CARRIER_HZ
    assert abs(stage1["white_noise_per_sample"] / white_hz - 1) < 0.05
    for name in ("ke_XY", "ke_XZ", "ke_YZ", "ke_XXmYY", "ke_ZZ"):   # a null record
        est = fit.coefficients[name]
        assert abs(est.value) < 4 * est.sigma, (name, est)

    run = run_command(tmp_path, ["report", "fit.json", "--out", "report"])
    assert run.exit_code == 0, run.stderr
    for name in ("report.html", "report.md", "report.tex", "summary.json"):
        assert (tmp_path / "report" / name).stat().st_size > 0

    # the example budget file: the fit reads it, and every declared term reaches the result
    # and the report's budget table
    run = run_command(tmp_path, ["fit", "run.h5", "--regress", "vessel_temp", "--budget",
                                 str(BUDGET), "--out", "budget.json"])
    assert run.exit_code == 0, run.stderr
    text = (tmp_path / "budget.json").read_text(encoding="utf-8")
    for name in ("cavity mount creep", "table tilt residual", "beat-frequency calibration",
                 "vessel_temp"):
        assert name in text, name
    run = run_command(tmp_path, ["report", "budget.json", "--out", "budget_report"])
    assert run.exit_code == 0, run.stderr
    page = (tmp_path / "budget_report" / "report.md").read_text(encoding="utf-8")
    assert "cavity mount creep" in page and "table tilt residual" in page
    assert (digest(CSV), digest(META)) == before                   # inputs untouched
    assert digest(BUDGET) == budget_before
