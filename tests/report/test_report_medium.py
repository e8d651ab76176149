"""The medium fit's derived speeds in the result file and the report: the ``derived`` record
round-trips and is checked field by field, files without it still read (their limit stated as
the Sun's speed), and the report states the laboratory's speed. The numbers are invented."""

from __future__ import annotations

import copy
import json
from pathlib import Path

import pytest

from fringe.errors import InputFileError
from fringe.io.fit_result import FitResult
from fringe.report.content import ReportContent
from fringe.report.documents import headline, latex_report, markdown_report
from tests.helpers.latex import unbalanced, unknown_commands

EXAMPLE = json.loads((Path(__file__).resolve().parents[1] / "data" / "fit_example.json")
                     .read_text("utf-8"))
SUN = ("sun_vX_kms", "sun_vY_kms", "sun_vZ_kms")
DERIVED = {"sun_speed_kms": {"best": 30.4, "upper_95": 31.0},
           "lab_speed_kms": {"best": 1.6, "upper_95": 2.16, "horizontal_best": 1.56,
                             "horizontal_upper_95": 2.08},
           "two_theta_amplitude": {"units": "Hz", "fitted_rms": 1.9e3, "fitted_max": 3.8e3,
                                   "orbital_rms": 1.13e6, "orbital_max": 1.46e6,
                                   "orbital_fraction": -2e-4, "orbital_fraction_sigma": 3e-4}}


def medium_file(derived=DERIVED, upper_limits=None) -> dict:
    """The stored example turned into a version-2 medium result (invented numbers)."""
    d = copy.deepcopy(EXAMPLE)
    d.update(theory="medium", fringe_format_version=2, warnings=[], fixed={}, efficiency={})
    d["coefficients"] = {n: {"value": v, "sigma": 0.4} for n, v in zip(SUN, (21.1, 20.0, 8.9))}
    d["covariance"] = {"names": list(SUN),
                       "matrix": [[0.16 if i == j else 0.0 for j in range(3)] for i in range(3)]}
    if derived is not None:
        d["derived"] = copy.deepcopy(derived)
    if upper_limits is not None:
        d["upper_limits"] = upper_limits
    return d


def test_derived_round_trips():
    fit = FitResult.from_dict(medium_file(), source="m.json")
    assert fit.derived.lab_speed_kms["horizontal_upper_95"] == 2.08
    assert fit.derived.two_theta_amplitude["units"] == "Hz"
    again = FitResult.from_dict(json.loads(json.dumps(fit.to_dict())), source="again")
    assert again.derived == fit.derived
    assert again.to_dict()["derived"] == DERIVED


@pytest.mark.parametrize("dotted, value, message", [
    ("lab_speed_kms.upper_95", "fast", "m.json: derived.lab_speed_kms.upper_95: expected"),
    ("lab_speed_kms.horizontal_best", "-", "derived.lab_speed_kms.horizontal_best: missing"),
    ("lab_speed_kms.best", -1.0, "derived.lab_speed_kms.best: expected"),
    ("lab_speed_kms.typo", 1.0, "derived.lab_speed_kms.typo: unknown field"),
    ("speed_of_light", {}, "derived.speed_of_light: unknown field"),
    ("two_theta_amplitude.units", 3, "derived.two_theta_amplitude.units: expected"),
    ("two_theta_amplitude.orbital_fraction_sigma", -1.0,
     "derived.two_theta_amplitude.orbital_fraction_sigma: expected"),
])
def test_derived_fields_are_checked(dotted, value, message):
    d = medium_file()
    part, key = dotted.split(".") if "." in dotted else (dotted, None)
    if key is None:
        d["derived"][part] = value
    elif value == "-":
        del d["derived"][part][key]
    else:
        d["derived"][part][key] = value
    with pytest.raises(InputFileError) as err:
        FitResult.from_dict(d, source="m.json")
    assert message in str(err.value) and "\n" not in str(err.value)


def test_headline_states_the_laboratory_speed():
    fit = FitResult.from_dict(medium_file(), source="m.json")
    h = headline(fit)
    assert h["quantity"] == "lab_speed_kms" and h["bound_95"] == 2.16
    assert "laboratory" in h["text"] and "< 2.16 km/s" in h["text"] and "2.08" in h["text"]
    c = ReportContent(fit=fit, fit_path=Path("m.json"), headline=h)
    md = markdown_report(c, [])
    assert "## Speeds through the medium" in md
    assert "1.13e+06" in md and "< 31 km/s" in md      # orbital expectation; the Sun's speed
    assert "-0.0002 ± 0.0003 (1σ)" in md                # a negative fraction is accepted
    tex = latex_report(c)
    assert "Speeds through the medium" in tex and tex.isascii()
    assert unbalanced(tex) == [] and unknown_commands(tex) == set()


@pytest.mark.parametrize("key", ["speed_kms_95", "sun_speed_kms_95"])
def test_files_without_derived_state_the_sun_speed(key):
    fit = FitResult.from_dict(medium_file(derived=None, upper_limits={key: 31.0}), source="o")
    assert fit.derived is None
    h = headline(fit)
    assert h["quantity"] == key and "Sun" in h["text"] and "laboratory" in h["text"]
    md = markdown_report(ReportContent(fit=fit, fit_path=Path("o"), headline=h), [])
    assert "no derived speeds" in md
