"""Every figure fringe draws, rendered and inspected through its matplotlib objects.

For the report of each theory (SME, RMS, medium, clock), the inspection, the forecast and the
prediction: not blank (pixel variance), axis labels and legend present, no raw markup outside
mathtext, no offset factor on an axis, no legend over the data, no text off the canvas, no tick
labels running together (tests/helpers/figures.py). Nothing is written to disk: the figures are
drawn to memory. The fit results are the stored example (invented numbers) with the
coefficients of each theory put in; the numbers are invented, only the drawing is under test.
"""

from __future__ import annotations

import copy
import json
from pathlib import Path

import pytest

from fringe.io.fit_result import FitResult
from fringe.report.build import assemble_report
from fringe.report.figures import style as S
from fringe.report.figures.fit import report_figure_names, report_figures
from fringe.theories import CLOCK_NAMES, KE_NAMES, MEDIUM_NAMES
from tests.helpers.figures import check_figure, figure_texts, offset_texts

DATA = Path(__file__).resolve().parents[1] / "data"
FIT = DATA / "fit_example.json"
EXAMPLE = json.loads(FIT.read_text("utf-8"))
#: Invented derived speeds of a medium fit (the schema of fringe.io.fit_sections.Derived).
DERIVED = {"sun_speed_kms": {"best": 30.4, "upper_95": 31.0},
           "lab_speed_kms": {"best": 1.6, "upper_95": 2.16, "horizontal_best": 1.56,
                             "horizontal_upper_95": 2.08}}


@pytest.fixture(autouse=True)
def _agg():
    import matplotlib

    matplotlib.use("Agg")


@pytest.fixture(scope="module")
def turns():
    """Accepted per-turn arrays of the stored example."""
    return assemble_report(FIT).turns


def variant(theory: str, values: dict, sigma: float, *, rho: float = 0.0,
            derived: dict | None = None) -> FitResult:
    """The stored example turned into a fit of ``theory`` with these (invented) values."""
    d = copy.deepcopy(EXAMPLE)
    d.update(theory=theory, fringe_format_version=2, warnings=[], fixed={}, efficiency={})
    names = list(values)
    d["coefficients"] = {n: {"value": v, "sigma": sigma} for n, v in values.items()}
    d["covariance"] = {"names": names, "matrix": [
        [sigma ** 2 * (1.0 if i == j else rho) for j in range(len(names))]
        for i in range(len(names))]}
    if derived is not None:
        d["derived"] = copy.deepcopy(derived)
    return FitResult.from_dict(d, source=f"{theory}.json")


THEORY_FITS = {
    "sme": lambda: FitResult.from_dict(copy.deepcopy(EXAMPLE), source="fit_example.json"),
    "sme-detection": lambda: variant("sme", dict(zip(KE_NAMES, (3e-17, -2e-17, 1e-17, 4e-17,
                                                                 -2e-17))), 1e-18),
    "rms": lambda: variant("rms", {"rms_mm": 3.0e-10}, 1.0e-12),
    "medium": lambda: variant("medium", dict(zip(MEDIUM_NAMES, (21.1, 20.0, 8.9))), 0.4,
                              rho=-0.002, derived=DERIVED),
    "clock": lambda: variant("clock", dict(zip(CLOCK_NAMES, (1e-15, 2e-18, -3e-18, 1e-18,
                                                              0.0))), 4e-18, rho=-0.003),
}


@pytest.mark.parametrize("theory", list(THEORY_FITS))
def test_every_report_figure_passes_the_checks(theory, turns):
    fit = THEORY_FITS[theory]()
    comparison = [{"name": n, "value": 2e-17, "sigma": 1e-17, "citation": "Invented (2019)"}
                  for n in list(fit.coefficients)[:1]] if theory == "sme" else []
    figs = report_figures(fit, turns, comparison)
    assert [f[0] for f in figs] == report_figure_names(fit, turns)
    for name, caption, fig in figs:
        assert caption, name
        assert check_figure(fig, needs_legend=name != "correlation") == [], name


def test_figures_name_the_coefficients_in_mathtext(turns):
    fit = THEORY_FITS["sme"]()
    figs = {n: fig for n, _, fig in report_figures(fit, turns)}
    texts = figure_texts(figs["limits"]) + figure_texts(figs["correlation"])
    assert r"$\tilde{\kappa}_{e-}^{XY}$" in texts
    assert not any("ke_" in t for t in texts)


@pytest.mark.parametrize("theory", ["medium", "clock"])
def test_correlations_never_print_minus_zero(theory, turns):
    # the invented covariances have correlations of -0.002 and -0.003: printed as 0.00
    fig = dict((n, f) for n, _, f in report_figures(THEORY_FITS[theory](), turns))["correlation"]
    cells = [t.get_text() for t in fig.axes[0].texts]
    assert cells and not any(c in ("-0.00", "\u22120.00") for c in cells)
    assert "0.00" in cells


def test_medium_limits_show_components_and_speed_limits(turns):
    fig = dict((n, f) for n, _, f in report_figures(THEORY_FITS["medium"](), turns))["limits"]
    top, bottom = fig.axes[:2]
    assert top.get_xscale() == "linear" and "km/s" in top.get_xlabel()
    lo, hi = top.get_xlim()
    assert lo < 8.9 - 1.96 * 0.4 and hi > 21.1 + 1.96 * 0.4      # every 95 % interval inside
    assert "speed" in bottom.get_xlabel()
    assert bottom.get_xlim()[1] >= 2.16 and bottom.get_xlim()[1] >= 31.0 * 0.9999


def test_limits_of_a_detection_are_zoomed_not_lost(turns):
    # 3.00e-10 +- 1e-12: on an axis from zero the intervals would be 0.3 % wide
    fig = dict((n, f) for n, _, f in report_figures(THEORY_FITS["rms"](), turns))["limits"]
    ax = fig.axes[0]
    lo, hi = ax.get_xlim()
    assert ax.get_xscale() == "linear" and "10^{-10}" in ax.get_xlabel()
    assert lo < 3.0 - 1.96 * 0.01 and hi > 3.0 + 1.96 * 0.01 and hi - lo < 0.2


def test_symlog_limits_of_the_stored_example(turns):
    fig = dict((n, f) for n, _, f in report_figures(THEORY_FITS["sme"](), turns))["limits"]
    ax = fig.axes[0]
    assert ax.get_xscale() == "symlog"
    labels = [t.get_text() for t in ax.get_xticklabels()]
    assert "0" in labels and all(t == "0" or "10^{" in t for t in labels)
    assert not [t for t in ax.get_xticklabels(minor=True) if t.get_text()]   # minors unlabelled


def test_inspection_figures(small_run):
    from fringe.demodulate.quality import inspect_run
    from fringe.report.figures.quality import inspect_figures

    figs = dict(inspect_figures(inspect_run(str(small_run))))
    assert set(figs) == {"allan", "spectrum"}
    assert check_figure(figs["allan"], needs_legend=False) == []
    assert check_figure(figs["spectrum"]) == []
    assert r"overlapping Allan deviation $\sigma_y(\tau)$" == figs["allan"].axes[0].get_ylabel()


def _plan():
    from fringe.experiment.scenario import load_scenario
    from fringe.plan import PlanResult
    from fringe.plan.forecast import forecast

    sc = load_scenario(Path(__file__).resolve().parents[2] / "fringe" / "data" / "demo.toml")
    d = forecast(sc, targets={"ke_XY": 1e-18}).to_dict()
    lat = [0.0, 20.0, 40.0, 60.0]
    d["latitudes_deg"] = lat
    d["sigma_vs_latitude"] = {n: [1e-18 * (1 + 0.1 * i) * (1 + x / 90) for x in lat]
                              for i, n in enumerate(d["free"])}
    names = list(d["free"])
    d["sigma_vs_latitude"][names[2]] = list(d["sigma_vs_latitude"][names[1]])  # coincide
    return PlanResult.from_dict(d)


@pytest.fixture(scope="module")
def plan():
    return _plan()


def test_plan_figures(plan):
    from fringe.report.figures.plan import plan_figures

    figs = dict(plan_figures(plan))
    assert set(figs) == {"plan_sigma_vs_days", "plan_sigma_vs_period", "plan_sigma_vs_latitude"}
    for name, fig in figs.items():
        assert check_figure(fig) == [], name
        ax = fig.axes[0]
        labels = ax.get_legend().get_texts()
        named = [t.get_text() for t in labels]
        for n in plan.free:                         # every coefficient's line is named
            assert any(t.startswith(S.coefficient_label(n)) for t in named), (name, n)
    lat_labels = [t.get_text() for t in figs["plan_sigma_vs_latitude"].axes[0]
                  .get_legend().get_texts()]
    a, b = (S.coefficient_label(n) for n in plan.free[1:3])
    assert f"{b} (on {a})" in lat_labels


def test_prediction_figure():
    from fringe.experiment.prediction import predict
    from fringe.experiment.scenario import load_scenario
    from fringe.report.figures.prediction import prediction_figure

    sc = load_scenario(Path(__file__).resolve().parents[2] / "examples" / "cavity_pair.toml")
    sc = sc.with_coefficients({"ke_XY": 1e-17, "ko_XZ": 2e-14})
    fig = prediction_figure(predict(sc), coefficients=sc.coefficients,
                            title="an invented title costing $5")
    assert check_figure(fig) == []
    texts = figure_texts(fig)
    assert "$C_{s2}$" in texts and r"$\tilde{\kappa}_{o+}^{XZ}$" in texts


def test_offset_factor_would_be_caught():
    # the check itself: an unscaled axis of 1e-7-sized values shows an offset factor
    ax = S.new_figure("one")
    ax.plot([0, 1], [1e-7, 3e-7])
    assert offset_texts(ax.figure) != []
