"""The headline states a bound only from coefficients no warning names, says what was left out
and why, states a far-from-zero value as a nonzero result, and the efficiency is explained.

The bounds are recomputed here as |value| + 1.96 sigma (the report's stated rule; 1.96 is the
two-sided 95 % Gaussian quantile, from memory) and compared after the report's rounding.
"""

from __future__ import annotations

import dataclasses
import json
from pathlib import Path

import pytest

from fringe.io.fit_result import EFFICIENCY_DEFINITION, read_fit_result
from fringe.io.fit_sections import Estimate, FitWarning, Statistics
from fringe.report.build import assemble_report, markdown_report
from fringe.report.documents import NONZERO_SIGMA, headline

DATA = Path(__file__).resolve().parents[1] / "data"
FIT = read_fit_result(DATA / "fit_example.json")
C0 = FitWarning("c0-lab-fixed", "C0 = 2.5e-07 ± 5.2e-08 Hz is inconsistent with zero",
                {"C0": 2.5e-7, "sigma": 5.2e-8, "n_sigma": 4.8}, ("ke_ZZ",))
CHI2 = FitWarning("harmonics-chi2", "harmonic fit: reduced chi2 = 435 is far from 1",
                  {"chi2_reduced": 435.0, "dof": 51606.0})


def _bound(e: Estimate) -> float:
    return abs(e.value) + 1.96 * e.sigma


def test_a_flagged_coefficient_is_left_out_and_named():
    # before: the headline was ke_ZZ, the coefficient the C0 warning flags
    fit = dataclasses.replace(FIT, warnings=(C0,))
    h = headline(fit)
    others = {n: _bound(e) for n, e in fit.coefficients.items() if n != "ke_ZZ"}
    top = max(others, key=others.get)
    assert h["kind"] == "bound" and h["quantity"] == top
    assert h["bound_95"] == pytest.approx(others[top], rel=1e-15)
    assert h["left_out"] == {"ke_ZZ": ["c0-lab-fixed"]}
    assert "4 free κ̃_e− coefficients without a warning (ke_XY, ke_XZ, ke_YZ, ke_XXmYY)" \
        in h["text"]
    assert "Left out, as the fit's warnings name them: ke_ZZ (c0-lab-fixed: C0" in h["text"]


def test_without_warnings_the_largest_bound_stands():
    fit = dataclasses.replace(FIT, warnings=())
    h = headline(fit)
    bounds = {n: _bound(e) for n, e in fit.coefficients.items()}
    assert h["quantity"] == max(bounds, key=bounds.get) == "ke_ZZ"
    assert h["left_out"] == {} and "Left out" not in h["text"]


def test_a_value_far_from_zero_is_a_nonzero_result_not_a_bound():
    coefs = dict(FIT.coefficients)
    coefs["ke_XY"] = Estimate(5.0e-17, 1.0e-17)            # 5 sigma, invented
    h = headline(dataclasses.replace(FIT, coefficients=coefs, warnings=()))
    assert 5.0 > NONZERO_SIGMA
    assert h["kind"] == "nonzero" and h["bound_95"] is None and h["quantity"] == "ke_XY"
    assert h["text"].startswith("Nonzero result, not a bound: ke_XY = (5.0 ± 1.0)×10⁻¹⁷ (1σ), "
                                "5.0σ from zero")
    assert "<" not in h["text"].split("Uncertainties")[0]


def test_every_candidate_flagged_gives_no_bound():
    names = tuple(FIT.coefficients)
    w = FitWarning("near-degenerate", "near-degenerate coefficients", {}, names)
    h = headline(dataclasses.replace(FIT, warnings=(w,)))
    assert h["kind"] == "none" and h["bound_95"] is None
    assert h["text"].startswith("No headline bound: every candidate coefficient is named by a "
                                "warning")


def test_record_wide_warnings_are_named_by_code():
    h = headline(dataclasses.replace(FIT, warnings=(CHI2,)))
    assert h["kind"] == "bound" and h["left_out"] == {}
    assert "warnings on the record as a whole (harmonics-chi2)" in h["text"]


def test_rms_far_from_zero_is_nonzero():
    fit = dataclasses.replace(FIT, theory="rms", coefficients={"rms_mm": Estimate(4e-9, 1e-9)},
                              warnings=())
    h = headline(fit)
    assert h["kind"] == "nonzero" and h["bound_95"] is None
    assert "4.0σ from zero: a nonzero result, not a bound" in h["text"]


def test_report_prints_each_warning_once(tmp_path):
    fit = dataclasses.replace(FIT, warnings=(C0, CHI2), amplitudes_file=None)
    path = tmp_path / "fit.json"
    path.write_text(json.dumps(fit.to_dict()), encoding="utf-8")
    content = assemble_report(path)
    md = markdown_report(content, [])
    for w in (C0, CHI2):
        assert md.count(w.sentence) == 1


def test_efficiency_is_defined_and_a_value_above_one_is_noted():
    assert EFFICIENCY_DEFINITION in FIT.summary()
    assert "efficiency above 1" not in FIT.summary()
    eff = dict(FIT.efficiency)
    eff["ke_XY"] = 1.25                                       # invented
    fit = dataclasses.replace(FIT, efficiency=eff, span_s=10 * 86400.0,
                              statistics=Statistics(1.0, 100, "bootstrap"),
                              settings={"fit": {"bootstrap_days": 2.0}})
    text = fit.summary()
    assert "1.250*" in text
    assert ("note: efficiency above 1 (ke_XY 1.250): the reported sigma is below the "
            "white-noise limit of this record") in text
    assert "bootstrap sigma from about 5 blocks" in text


def test_report_notes_an_efficiency_above_one(tmp_path):
    eff = dict(FIT.efficiency)
    eff["ke_ZZ"] = 1.1
    path = tmp_path / "fit.json"
    fit = dataclasses.replace(FIT, efficiency=eff, amplitudes_file=None)
    path.write_text(json.dumps(fit.to_dict()), encoding="utf-8")
    notes = assemble_report(path).notes
    assert any(n.startswith("Efficiency above 1 (ke_ZZ 1.100)") for n in notes)
