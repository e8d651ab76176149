"""rms_kt from the per-turn offsets of a cavity against an atomic reference."""

from __future__ import annotations

import pytest

from fringe.experiment.scenario import scenario_from_dict
from fringe.fit.run import fit_run
from fringe.fit.settings import FitSettings
from fringe.simulation.campaign import simulate


def _run(tmp_path, coefficients, systematics=None, days=3.0):
    doc = {"site": {"latitude_deg": 45.0, "longitude_deg": 10.0},
           "campaign": {"start_utc": "2027-04-01T00:00:00Z", "duration_days": days},
           "apparatus": {"kind": "cavity-vs-reference", "carrier_hz": 2.8e14, "units": "1"},
           "turntable": {"motion": "continuous", "period_s": 60.0},
           "theory": {"name": "rms"}, "coefficients": coefficients,
           "noise": {"white_fm_adev_1s": 1e-15}, "systematics": systematics or {}}
    sc = scenario_from_dict(doc, "kt-test")
    path = tmp_path / "kt.h5"
    simulate(sc, path, seed=11)
    return str(path)


def test_rms_kt_recovered_from_offsets(tmp_path):
    # v^2 is modulated daily by the Earth's rotation velocity (2 v_sun . v_rot ~ 4e-9 of c^2)
    # and slowly by the orbit: rms_kt = 5e-8 then gives a sidereal offset modulation ~2e-16,
    # far above the white-FM offset noise; a linear drift is absorbed by the polynomial.
    # Pull within 4 sigma (two-sided false-failure rate 6e-5).
    truth = {"rms_mm": 0.0, "rms_kt": 5e-8}
    path = _run(tmp_path, truth, {"drift_per_day": 1e-14})
    res, _ = fit_run(path, FitSettings(theory="rms"))
    assert set(res.coefficients) == {"rms_mm", "rms_kt"}          # default for an atomic ref.
    kt = res.coefficients["rms_kt"]
    assert kt.sigma > 0
    assert abs(kt.value - truth["rms_kt"]) < 4 * kt.sigma
    assert kt.sigma < 0.25 * truth["rms_kt"]                  # a real detection
    assert any("rms_kt from the per-turn offsets" in n for n in res.notes)


def test_rms_kt_null(tmp_path):
    path = _run(tmp_path, {"rms_mm": 0.0, "rms_kt": 0.0}, days=2.0)
    res, _ = fit_run(path, FitSettings(theory="rms"))
    kt = res.coefficients["rms_kt"]
    assert abs(kt.value) < 4 * kt.sigma


def test_rms_kt_needs_an_isotropic_response(tmp_path):
    from fringe.errors import ConfigError

    doc = {"site": {"latitude_deg": 45.0, "longitude_deg": 10.0},
           "campaign": {"start_utc": "2027-04-01T00:00:00Z", "duration_days": 0.5},
           "apparatus": {"kind": "cavity-pair", "carrier_hz": 2.8e14, "units": "1"},
           "turntable": {"motion": "continuous", "period_s": 60.0},
           "theory": {"name": "rms"}, "noise": {"white_fm_adev_1s": 1e-15}}
    simulate(scenario_from_dict(doc, "pair"), tmp_path / "p.h5", seed=1)
    with pytest.raises(ConfigError, match="isotropic"):
        fit_run(str(tmp_path / "p.h5"), FitSettings(theory="rms", free=("rms_mm", "rms_kt")))
