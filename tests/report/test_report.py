"""Tests of ``fringe report``: PDG rounding, tables, figures' numerics, RMS solution, the CLI.

The report is rendered once per module from the stored invented fit result
(tests/data/fit_example.json, made by tests/data/make_fit_example.py) and shared by the tests
that inspect its outputs.
"""

from __future__ import annotations

import importlib.util
import json
import math
import shutil
from fractions import Fraction
from pathlib import Path

import h5py
import numpy as np
import pytest
from click.testing import CliRunner
from hypothesis import given, settings
from hypothesis import strategies as st

from fringe.cli import main
from fringe.errors import ConfigError, InputFileError
from fringe.io.fit_result import FitResult
from fringe.report.documents import headline
from fringe.report.figures.fit import amplitude_spectrum, binned_by_phase, regular_grid
from fringe.report.inputs import load_comparison, load_fit
from fringe.report.rms_solve import FORWARD_MATRIX, combinations_from_deviations, solve_rms
from fringe.report.rounding import format_bound, format_interval, format_value, pdg_round
from fringe.report.tables import coefficient_table, to_markdown

DATA = Path(__file__).resolve().parents[1] / "data"
FIT = DATA / "fit_example.json"
TURNS = DATA / "fit_example.turns.h5"

# ------------------------------------------------------------------------------ PDG rounding
# The rule: Particle Data Group, Review of Particle Physics, Introduction, sec. 5.3 "Rounding"
# (e.g. Phys. Rev. D 98, 030001 (2018)); section number as quoted, with the rule's text, by the
# STAR collaboration's HepData significant-digits policy page and by the documentation of the
# "pdground" rounding gem; the PDG document itself was not in hand. Three highest-order digits of
# sigma: 100-354 -> two significant digits, 355-949 -> one, 950-999 -> up to 1000, two digits.

PDG_CASES = [
    # (value, sigma, exponent or None) -> (value_str, sigma_str, exponent)
    ((0.5, 0.0100, None), ("0.500", "0.010", 0)),      # digits 100: two digits (rule)
    ((0.5, 0.0354, None), ("0.500", "0.035", 0)),      # digits 354: last two-digit case (rule)
    ((0.5, 0.0355, None), ("0.50", "0.04", 0)),        # digits 355: first one-digit case (rule)
    ((0.5, 0.0949, None), ("0.50", "0.09", 0)),        # digits 949: last one-digit case (rule)
    ((0.5, 0.0950, None), ("0.50", "0.10", 0)),        # digits 950: up to 1000, two digits (rule)
    ((0.5, 0.0999, None), ("0.50", "0.10", 0)),        # digits 999: same (rule)
    ((12.2135, 0.03215, None), ("12.214", "0.032", 0)),  # worked example, pdground docs
    ((12.2135, 0.06515, None), ("12.21", "0.07", 0)),    # worked example, pdground docs
    ((0.279008, 0.0123261, None), ("0.279", "0.012", 0)),  # worked example, STAR policy page
    ((1.234e-17, 0.345e-17, None), ("1.23", "0.35", -17)),  # digits 345: two (rule)
    ((-1.9e-15, 5.2e-15, None), ("-2", "5", -15)),     # negative value; digits 520: one (rule)
    ((0.96e-17, 0.0996e-17, None), ("9.6", "1.0", -18)),  # 996 -> 1000 (rule)
    ((-1e-20, 5e-15, None), ("0", "5", -15)),          # value rounds to zero: no sign (rule)
    ((1299.845, 0.124, None), ("1299.85", "0.12", 0)),  # half-up on the decimal digits (rule)
    ((1e300, 3e299, None), ("1.00", "0.30", 300)),     # huge exponent (rule)
    ((-5e-320, 1e-320, None), ("-5.0", "1.0", -320)),  # subnormal float (rule)
    ((12345.0, 520.0, None), ("1.23", "0.05", 4)),     # digits 520: one (rule)
    ((1.234e-17, 0.345e-17, -18), ("12.3", "3.5", -18)),  # forced exponent (rule)
    ((1.23456e-17, 0.0, None), ("1.23", "0", -17)),    # sigma 0: 3 significant digits (ours)
    ((0.0, 0.0, None), ("0", "0", 0)),                 # all zero (ours)
]


@pytest.mark.parametrize(("args", "expected"), PDG_CASES)
def test_pdg_round_table(args, expected):
    value, sigma, exponent = args
    assert pdg_round(value, sigma, exponent=exponent) == expected


def test_formatter_styles():
    v, s = 1.234e-17, 0.345e-17
    assert format_value(v, s) == "(1.23 ± 0.35)×10⁻¹⁷"
    assert format_value(v, s, "latex") == r"$(1.23 \pm 0.35)\times10^{-17}$"
    assert format_value(v, s, "plain") == "1.23e-17 ± 0.35e-17"
    assert format_value(-v, s) == "(−1.23 ± 0.35)×10⁻¹⁷"       # Unicode minus
    assert format_value(12.2135, 0.03215) == "12.214 ± 0.032"    # no power of ten near 1
    assert format_value(1e300, 3e299) == "(1.00 ± 0.30)×10³⁰⁰"
    assert format_interval(-2.2e-17, 4.6e-17, -18, -17) == "[−2.2, 4.6]×10⁻¹⁷"
    assert format_bound(3.01e-17) == "3.1×10⁻¹⁷"                # rounded up, never down
    assert format_bound(9.96e-18, "latex") == r"$1.0\times10^{-17}$"
    # a size that is not a bound (the budget table's sigmas) rounds to the nearest
    assert format_bound(3.01e-17, upward=False) == "3.0×10⁻¹⁷"
    assert format_bound(1.54e-17, upward=False) == "1.5×10⁻¹⁷"
    assert format_bound(9.96e-18, upward=False) == "1.0×10⁻¹⁷"


@pytest.mark.parametrize(("value", "sigma"), [(math.nan, 1.0), (1.0, math.nan),
                                              (math.inf, 1.0), (1.0, -0.1), ("1", 1.0)])
def test_pdg_round_rejects_bad_numbers(value, sigma):
    with pytest.raises(ConfigError, match="rounding: (value|sigma)"):
        pdg_round(value, sigma)


# ----------------------------------------------------------------------------------- tables

GOLDEN_MARKDOWN = """\
| coefficient | value ± 1σ | 68 % interval | 95 % interval |
|---|---|---|---|
| ke_XY | (1.23 ± 0.35)×10⁻¹⁷ | [0.89, 1.58]×10⁻¹⁷ | [0.56, 1.91]×10⁻¹⁷ |
| ke_ZZ | (−0.4 ± 1.0)×10⁻¹⁵ | [−1.4, 0.5]×10⁻¹⁵ | [−2.3, 1.5]×10⁻¹⁵ |
"""


def test_coefficient_table_markdown_golden():
    # ke_XY: sigma digits 345 -> 0.35e-17; 95 %: 1.234 -+ 1.96*0.345 = [0.5578, 1.9102].
    # ke_ZZ: sigma digits 960 -> 1.0e-15 (place 1e-16); 95 %: -4.3 -+ 18.816 (x 1e-16).
    table = coefficient_table({"ke_XY": {"value": 1.234e-17, "sigma": 0.345e-17},
                               "ke_ZZ": {"value": -4.3e-16, "sigma": 9.6e-16}})
    assert to_markdown(table) == GOLDEN_MARKDOWN


def test_headline_picks_largest_ke_bound():
    fit = FitResult.from_dict({"fringe_format": "fit", "fringe_format_version": 2,
                               "theory": "sme", "units": "Hz", "coefficients": {
        "ke_XY": {"value": 1e-17, "sigma": 1e-17},            # bound 2.96e-17
        "ke_ZZ": {"value": -2e-17, "sigma": 2e-17},           # bound 5.92e-17 (largest ke)
        "ko_XY": {"value": 0.0, "sigma": 1e-13}}})            # larger, but not a ke_*
    h = headline(fit)
    assert h["quantity"] == "ke_ZZ"
    assert h["bound_95"] == pytest.approx(2e-17 + 1.96 * 2e-17, rel=1e-15)
    assert "5.92×10⁻¹⁷" not in h["text"] and "6.0×10⁻¹⁷" in h["text"]   # 5.92 rounded up


# ------------------------------------------------------------------------ figure numerics

def test_amplitude_spectrum_recovers_a_line():
    # Noise-free line of 3 mHz at 2 cycles per sidereal day, sampled unevenly over 20 days.
    rng = np.random.default_rng(3)
    sd = 86_400.0 / 1.00273781191135448
    t = np.sort(rng.uniform(0, 20 * sd, 3000))
    y = 0.7 + 3e-3 * np.cos(2 * np.pi * 2.0 * t / sd + 0.4)
    f, amp, _ = amplitude_spectrum(t, y, np.full(t.size, 0.05), oversample=20)
    k = np.argmin(np.abs(f - 2.0))
    assert abs(f[k] - 2.0) < 1e-2
    assert amp[k] == pytest.approx(3e-3, rel=2e-3)       # grid point within 1e-2 of the line


def test_binned_by_phase_weighted_mean():
    phi = np.array([0.1, 0.2, 3.3, 3.4])
    y = np.array([1.0, 3.0, 5.0, 5.0])
    s = np.array([1.0, 1.0, 2.0, 2.0])
    _, mean, err, count = binned_by_phase(phi, y, s, n_bins=2)
    assert count.tolist() == [2, 2]
    assert mean[0] == pytest.approx(2.0) and mean[1] == pytest.approx(5.0)
    # bin 0: chi2 = 2 on 1 dof -> Birge ratio sqrt(2); 1/sqrt(sum w) = 1/sqrt(2)
    assert err[0] == pytest.approx(1.0) and err[1] == pytest.approx(math.sqrt(2.0))


def test_regular_grid_marks_missing_turns():
    grid, dropped = regular_grid([0.0, 10.0, 30.1, 40.0], [1.0, 2.0, 3.0, 4.0], 10.0)
    assert dropped == 0
    assert np.array_equal(np.isnan(grid), [False, False, True, False, False])


# ----------------------------------------------------------------------------- RMS solution

def test_rms_solution_reproduces_inputs_exactly():
    mm, kt, is_ = (2.1e-11, 3.4e-11), (-4.8e-8, 3.7e-8), (1.1e-8, 0.9e-8)
    sol = solve_rms(mm, kt, is_)
    back = combinations_from_deviations(sol.exact_deviations)
    assert back == (Fraction(mm[0]), Fraction(kt[0]), Fraction(is_[0]))      # exact
    f = np.array(FORWARD_MATRIX, float)
    np.testing.assert_allclose(f @ sol.covariance @ f.T,
                               np.diag([mm[1] ** 2, kt[1] ** 2, is_[1] ** 2]),
                               rtol=1e-12, atol=1e-30)
    # SR values (C13): alpha = -1/2, beta = 1/2, delta = 0 when every input is zero
    assert solve_rms((0, 1), (0, 1), (0, 1)).parameters == (-0.5, 0.5, 0.0)


@settings(max_examples=60, deadline=None)
@given(st.tuples(*[st.floats(-1e-3, 1e-3, allow_nan=False) for _ in range(3)]))
def test_rms_solution_round_trip_property(values):
    sol = solve_rms((values[0], 1e-9), (values[1], 1e-8), (values[2], 1e-8))
    assert combinations_from_deviations(sol.exact_deviations) == tuple(Fraction(v)
                                                                       for v in values)


# ------------------------------------------------------------------------ input readers

def test_load_comparison_csv_and_toml(tmp_path):
    csv_path = tmp_path / "earlier.csv"
    csv_path.write_text("# invented\nname,value,sigma,citation\n"
                        'ke_XY,-3.1e-17,2.5e-17,"Invented A, J. Inv. 1 (2020)"\n', "utf-8")
    toml_path = tmp_path / "earlier.toml"
    toml_path.write_text('[[limits]]\nname = "ke_XY"\nvalue = -3.1e-17\nsigma = 2.5e-17\n'
                         'citation = "Invented A, J. Inv. 1 (2020)"\n', "utf-8")
    expected = [{"name": "ke_XY", "value": -3.1e-17, "sigma": 2.5e-17,
                 "citation": "Invented A, J. Inv. 1 (2020)"}]
    assert load_comparison(csv_path) == expected
    assert load_comparison(toml_path) == expected
    bad = tmp_path / "bad.csv"
    bad.write_text("name,value,sigma,citation\nke_XY,1e-17,-2,src\n", "utf-8")
    with pytest.raises(InputFileError, match=r"bad\.csv: row 2: sigma: expected a finite "
                                             r"number >= 0"):
        load_comparison(bad)


def test_stored_example_is_reproducible_and_small(tmp_path):
    spec = importlib.util.spec_from_file_location("make_fit_example",
                                                  DATA / "make_fit_example.py")
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    new_json, new_turns = mod.main(tmp_path)
    old, new = load_fit(FIT), load_fit(new_json)
    assert new.warnings == old.warnings
    for name, e in old.coefficients.items():
        assert new.coefficients[name].value == pytest.approx(e.value, rel=1e-12)
        assert new.coefficients[name].sigma == pytest.approx(e.sigma, rel=1e-12)
    np.testing.assert_allclose(new.covariance.matrix, old.covariance.matrix, rtol=1e-12)
    np.testing.assert_allclose(new.harmonics.value, old.harmonics.value, rtol=1e-12)
    with h5py.File(TURNS) as a, h5py.File(new_turns) as b:
        for name in a["turns"]:
            np.testing.assert_allclose(a["turns"][name][()], b["turns"][name][()], rtol=1e-12)
    assert TURNS.stat().st_size < 200_000


# ------------------------------------------------------------------------------- the CLI

def _invoke(args):
    return CliRunner().invoke(main, ["report", *args])


@pytest.fixture(scope="module")
def rendered(tmp_path_factory):
    """The example report, rendered once through the CLI, with an invented comparison."""
    base = tmp_path_factory.mktemp("report")
    compare = base / "earlier.csv"
    compare.write_text("name,value,sigma,citation\n"
                       "ke_XY,-3.1e-17,2.5e-17,Invented group A (2020)\n"
                       "ke_ZZ,1.2e-15,2.4e-15,Invented group B (2018)\n", "utf-8")
    out = base / "out"
    result = _invoke([str(FIT), "--out", str(out), "--compare", str(compare)])
    assert result.exit_code == 0, result.output + result.stderr
    return out, result


def test_cli_writes_every_output(rendered):
    out, result = rendered
    for name in ("report.md", "report.tex", "report.html", "summary.json"):
        assert (out / name).stat().st_size > 0
    figs = ("amplitudes", "spectrum", "residual_adev", "limits", "correlation")
    for name in figs:
        assert (out / "figures" / f"{name}.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
        assert (out / "figures" / f"{name}.pdf").read_bytes()[:5] == b"%PDF-"
    summary = json.loads((out / "summary.json").read_text("utf-8"))
    assert summary["figures"] == list(figs)
    fit = json.loads(FIT.read_text("utf-8"))
    bounds = {n: abs(e["value"]) + 1.96 * e["sigma"] for n, e in fit["coefficients"].items()}
    top = max(bounds, key=bounds.get)
    assert summary["headline"]["quantity"] == top
    assert summary["headline"]["bound_95"] == pytest.approx(bounds[top], rel=1e-15)
    assert summary["warnings"] == fit["warnings"] and len(fit["warnings"]) == 3
    assert summary["provenance"]["fit file"]["sha256"] == __import__("hashlib").sha256(
        FIT.read_bytes()).hexdigest()
    assert top in result.output and "Δc/c" in result.output


def test_report_states_warnings_and_comparison(rendered):
    out, _ = rendered
    md = (out / "report.md").read_text("utf-8")
    fit = json.loads(FIT.read_text("utf-8"))
    assert "Warnings raised by the fit (3)" in md
    for w in fit["warnings"]:
        assert w in md
    assert "Invented group A (2020)" in md and "earlier/this" in md
    tex = (out / "report.tex").read_text("utf-8")
    assert tex.isascii() and r"\begin{tabular}" in tex and r"\label{tab:coefficients}" in tex
    assert r"\label{tab:comparison}" in tex and "Invented group A (2020)" in tex
    # a fragment for \input (tests/report/test_report_latex.py checks its structure)
    assert r"\documentclass" not in tex and r"\toprule" in tex


def test_html_is_self_contained(rendered):
    out, _ = rendered
    page = (out / "report.html").read_text("utf-8")
    assert "http://" not in page and "https://" not in page
    assert "<script" not in page and "<link" not in page and "href=" not in page
    srcs = page.split('src="')[1:]
    assert len(srcs) == 5 and all(s.startswith("data:image/png;base64,") for s in srcs)
    assert "Warnings raised by the fit (3)" in page


def test_cli_refuses_to_overwrite(rendered):
    out, _ = rendered
    before = (out / "report.md").read_bytes()
    result = _invoke([str(FIT), "--out", str(out)])
    assert result.exit_code == 2
    assert "exists (pass --overwrite" in result.stderr and "Traceback" not in result.stderr
    assert (out / "report.md").read_bytes() == before


def test_cli_never_writes_over_the_input(tmp_path):
    # The fit file itself sits in the output directory under an output's name.
    shutil.copy(TURNS, tmp_path / TURNS.name)
    fit = json.loads(FIT.read_text("utf-8"))
    (tmp_path / "summary.json").write_text(json.dumps(fit), "utf-8")
    before = (tmp_path / "summary.json").read_bytes()
    result = _invoke([str(tmp_path / "summary.json"), "--out", str(tmp_path), "--overwrite"])
    assert result.exit_code == 2 and "refusing to write over an input" in result.stderr
    assert (tmp_path / "summary.json").read_bytes() == before
    assert not (tmp_path / "report.md").exists()


def test_cli_rms_combination(tmp_path):
    fit = json.loads(FIT.read_text("utf-8"))
    fit.update(theory="rms", coefficients={"rms_mm": {"value": 2.1e-11, "sigma": 3.4e-11}},
               fixed={"rms_kt": 0.0}, covariance={"names": ["rms_mm"],
                                                  "matrix": [[3.4e-11 ** 2]]})
    del fit["amplitudes_file"]                        # no per-turn file: figures omitted
    path = tmp_path / "rms.json"
    path.write_text(json.dumps(fit), "utf-8")
    result = _invoke([str(path), "--out", str(tmp_path / "out"), "--kt=-4.8e-8,3.7e-8",
                      "--is", "1.1e-8,0.9e-8"])
    assert result.exit_code == 0, result.stderr
    s = json.loads((tmp_path / "out" / "summary.json").read_text("utf-8"))
    d = [s["rms"]["deviations"][k]["value"] for k in ("alpha + 1/2", "beta - 1/2", "delta")]
    assert d[0] == 1.1e-8                                   # alpha + 1/2 = P_IS
    assert d[1] - d[0] == pytest.approx(-4.8e-8, rel=1e-14)  # beta - alpha - 1 = P_KT
    assert d[2] - d[1] == pytest.approx(2.1e-11, rel=1e-6)   # delta - beta + 1/2 = P_MM
    assert s["figures"] == ["limits"] and s["headline"]["quantity"] == "rms_mm"
    assert any("omitted" in n for n in s["notes"])


@pytest.mark.parametrize(("args", "needle"), [
    (["missing.json"], "missing.json: file: not found; expected a fit result"),
    (["{run}"], "fringe_format: expected 'fit'"),
    (["{fit}", "--kt", "1e-8"], "--kt: expected VALUE,SIGMA"),
    (["{fit}", "--kt", "1e-8,1e-8"], "--kt/--is: both"),
    (["{fit}", "--kt", "1e-8,1e-8", "--is", "1e-8,1e-8"], "need a fit of theory 'rms'"),
    (["{fit}", "--compare", "nope.csv"], "nope.csv: file: expected an existing"),
])
def test_cli_bad_input_is_one_line(tmp_path, args, needle):
    run = tmp_path / "not_a_fit.json"
    run.write_text(json.dumps({"fringe_format": "run", "fringe_format_version": 1}), "utf-8")
    args = [a.format(run=run, fit=FIT) for a in args]
    result = _invoke([*args, "--out", str(tmp_path / "out")])
    assert result.exit_code == 2
    lines = result.stderr.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("error: ") and needle in lines[0]
    assert "Traceback" not in result.stderr
    assert not (tmp_path / "out" / "report.md").exists()
