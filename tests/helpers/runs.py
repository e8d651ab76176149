"""Simulated run files shared by the fit tests (an invented laboratory, no real site)."""

from __future__ import annotations

import copy
import warnings

from fringe.errors import SimulationWarning
from fringe.experiment.scenario import scenario_from_dict
from fringe.simulation.campaign import simulate

CARRIER_HZ = 2.82e14
WHITE_FM = 2e-15     # Allan deviation at 1 s (fractional); invented test level

# An invented laboratory (no real site), as in examples/cavity_pair.toml.
BASE = {
    "title": "test scenario (invented)",
    "site": {"name": "Kestrel Fen optics cellar (invented)", "latitude_deg": 47.62,
             "longitude_deg": 11.38, "height_m": 610.0},
    "campaign": {"start_utc": "2027-02-03T00:00:00Z", "duration_days": 2.0,
                 "sample_interval_s": 1.0},
    "apparatus": {"kind": "cavity-pair", "carrier_hz": CARRIER_HZ, "path_separation_deg": 90.0,
                  "units": "Hz"},
    "turntable": {"motion": "continuous", "period_s": 45.0, "sense": "ccw",
                  "start_azimuth_deg": 0.0},
    "theory": {"name": "sme"},
    "noise": {"white_fm_adev_1s": WHITE_FM},
}

#: Invented injected values of the five ke_* (a few sigma of a day-long test record).
KE_TRUTH = {"ke_XY": 2.0e-16, "ke_XZ": -1.5e-16, "ke_YZ": 1.0e-16, "ke_XXmYY": -3.0e-16,
            "ke_ZZ": 2.5e-16}


def simulate_run(path, *, seed, days=2.0, interval_s=1.0, period_s=45.0, coefficients=None,
                 **sections):
    """Simulate a run file from BASE with overrides; returns (path, scenario, summary)."""
    doc = copy.deepcopy(BASE)
    doc["campaign"].update(duration_days=days, sample_interval_s=interval_s)
    doc["turntable"]["period_s"] = period_s
    doc["coefficients"] = dict(coefficients or {})
    doc.update(sections)
    sc = scenario_from_dict(doc, "test scenario")
    with warnings.catch_warnings():
        if not any(doc.get("noise", {}).values()):     # a test asking for a record without noise
            warnings.simplefilter("ignore", SimulationWarning)
        summary = simulate(sc, path, seed=seed)
    return str(path), sc, summary
