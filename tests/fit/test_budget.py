"""The systematic budget: an auxiliary channel's contribution, declared terms, the report table.

The record (tests/helpers/aux_runs.py, an invented laboratory) has a signal that couples with
5 Hz/K to a recorded temperature channel whose 2 theta part swings over the solar day: a
channel-driven systematic that mimics sidereal coefficient signals.
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pytest

from fringe.errors import ConfigError, FringeWarning, InputFileError
from fringe.fit.run import fit_run
from fringe.fit.settings import FitSettings
from fringe.io.budget_file import read_budget
from fringe.io.fit_result import FitResult
from tests.helpers.aux_runs import PSI_DEG, TEMP_MEAN_K, aux_coupled_run

FREE = ("ke_XY", "ke_XZ", "ke_YZ", "ke_XXmYY", "ke_ZZ")
COUPLING = 5.0          # Hz/K, invented

BUDGET = """
[[term]]
name = "mount creep"
coefficient = "ke_ZZ"
size = 3e-17
units = "1"

[[term]]
name = "tilt residual"
harmonic = "C0"
size = 0.004
units = "Hz"

[[scale]]
name = "frequency calibration"
relative = 0.02
"""


def _fit(path, **kw):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", FringeWarning)
        return fit_run(path, FitSettings(free=FREE, **kw.pop("settings", {})), **kw)[0]


@pytest.fixture(scope="module")
def fits(tmp_path_factory):
    """Fits of the coupled record with and without the regression, and of the same noise
    without the coupling (one seed: the noise is shared exactly)."""
    d = tmp_path_factory.mktemp("budget")
    coupled = aux_coupled_run(d / "coupled.h5", coupling=COUPLING, seed=3)
    clean = aux_coupled_run(d / "clean.h5", coupling=0.0, seed=3)
    (d / "budget.toml").write_text(BUDGET, encoding="utf-8")
    budget = read_budget(d / "budget.toml")
    return {"regressed": _fit(coupled, settings={"regress": ("temp",)}, budget=budget),
            "unregressed": _fit(coupled), "clean": _fit(clean), "dir": d}


def test_aux_contribution_matches_the_injected_systematic(fits):
    """The budget's shift for the channel equals what the coupled channel really puts into
    each coefficient (the unregressed fit minus the fit of the same noise without coupling)
    within the shift's own sigma (3 sigma band; coupling and channel-noise parts in
    quadrature). Derivation: the omitted-variable formula of least squares, shift = P a with
    P = -V_oJ V_JJ^-1 ([R-stat-omitted-variable], derived). The injected effect is
    significant (> 4 sigma of
    the fit for ke_XZ and ke_ZZ), so a wrong P would fail."""
    reg, unreg, clean = fits["regressed"], fits["unregressed"], fits["clean"]
    budget = reg.systematics.coefficients
    for n in FREE:
        injected = unreg.coefficients[n].value - clean.coefficients[n].value
        c = budget[n]
        sigma = math.hypot(c["terms"]["aux:temp"], c["terms"]["aux-noise:temp"])
        assert abs(c["shift"]["aux:temp"] - injected) < 3 * sigma, n
    for n in ("ke_XZ", "ke_ZZ"):
        injected = unreg.coefficients[n].value - clean.coefficients[n].value
        assert abs(injected) > 4 * reg.coefficients[n].sigma


def test_aux_shift_is_the_difference_of_the_two_fits(fits):
    """Omitted variables ([R-stat-omitted-variable], derived): the fit without the channel's
    column differs from the fit with it by exactly P a, and its covariance is the budget's
    statistical part.
    Exact for equal weights; the two fits rescale their C and B rows by their own reduced
    chi2, which moves the result by ~1 % here (tolerance 5 %)."""
    reg, unreg = fits["regressed"], fits["unregressed"]
    for n in FREE:
        c = reg.systematics.coefficients[n]
        fwl = unreg.coefficients[n].value - reg.coefficients[n].value
        assert c["shift"]["aux:temp"] == pytest.approx(fwl, rel=0.05, abs=0.05 * c["total"])
        assert c["statistical"] == pytest.approx(unreg.coefficients[n].sigma, rel=0.02)
        assert c["fit_sigma"] == pytest.approx(reg.coefficients[n].sigma, rel=1e-12)


def test_channel_harmonics_and_coupling(fits):
    """The channel's own C0 and B0 are its mean 2 theta amplitude along cos 2 psi and
    sin 2 psi (derived from the channel's definition in tests/helpers/aux_runs.py:
    cos 2(theta - psi) = cos 2theta cos 2psi + sin 2theta sin 2psi, C10); the solar-day
    swing leaks into the sidereal constant term by < 1e-3 of it over 1.5 d (measured margin
    1e-4). The coupling is recovered within 3 sigma."""
    ch = fits["regressed"].systematics.channels["temp"]
    h = dict(zip(ch["harmonics"]["names"], ch["harmonics"]["value"]))
    assert h["C0"] == pytest.approx(TEMP_MEAN_K * math.cos(math.radians(2 * PSI_DEG)), rel=1e-3)
    assert h["B0"] == pytest.approx(TEMP_MEAN_K * math.sin(math.radians(2 * PSI_DEG)), rel=1e-3)
    assert ch["units"] == "K"
    assert abs(ch["coupling"]["value"] - COUPLING) < 3 * ch["coupling"]["sigma"]


def test_declared_terms_add_in_quadrature(fits):
    """total^2 = statistical^2 + the channels' joint variance + the channel-noise term + every
    declared term^2 (derived: independent terms); a coefficient term enters its coefficient
    only; a scale term is relative x |value|."""
    s = fits["regressed"].systematics
    values = {n: e.value for n, e in fits["regressed"].coefficients.items()}
    for n, c in s.coefficients.items():
        t = c["terms"]
        expected = (c["statistical"] ** 2 + s.aux_joint_variance[n] + t["aux-noise:temp"] ** 2
                    + t["mount creep"] ** 2 + t["tilt residual"] ** 2
                    + t["frequency calibration"] ** 2)
        assert c["total"] == pytest.approx(math.sqrt(expected), rel=1e-12)
        assert t["frequency calibration"] == pytest.approx(0.02 * abs(values[n]), rel=1e-12)
        assert t["mount creep"] == (3e-17 if n == "ke_ZZ" else 0.0)
        # one channel: its joint variance is its coupling term squared
        assert s.aux_joint_variance[n] == pytest.approx(t["aux:temp"] ** 2, rel=1e-9)


def test_harmonic_term_maps_through_the_coefficient_map(fits):
    """A declared C0 size lands on ke_ZZ (C0 carries ke_ZZ alone) as size / (dC0/d ke_ZZ),
    with dC0/d ke_ZZ from the harmonic table of fringe.experiment.harmonics (another code
    path than the per-turn design; 5 % for the turn-averaging and precession terms)."""
    from fringe.experiment.harmonics import harmonics_at
    from fringe.fit.run import setup_from_run

    setup, _ = setup_from_run(str(fits["dir"] / "coupled.h5"), "sme")
    coef, _, labels = harmonics_at(setup, 0.0, names=FREE)
    dc0 = coef[0][list(labels).index("ke_ZZ")]
    got = fits["regressed"].systematics.coefficients["ke_ZZ"]["terms"]["tilt residual"]
    assert got == pytest.approx(0.004 / abs(dc0), rel=0.05)


def test_budget_round_trips_and_report_shows_the_table(fits, tmp_path):
    """The systematics part survives to_dict/from_dict; the report's Markdown has the budget
    table (one row per coefficient, a column per term) and the stat/syst limit lines; the
    headline uses the total sigma."""
    import json

    from fringe.io.atomic import write_json_atomic
    from fringe.report.build import assemble_report, write_report

    res = fits["regressed"]
    again = FitResult.from_dict(json.loads(json.dumps(res.to_dict())))
    assert again.systematics.coefficients == res.systematics.coefficients
    write_json_atomic(tmp_path / "fit.json", res.to_dict())
    content = assemble_report(tmp_path / "fit.json")
    assert content.headline["sigma"] == "total"
    write_report(content, tmp_path / "rep")
    md = (tmp_path / "rep" / "report.md").read_text(encoding="utf-8")
    assert "## Systematic budget" in md
    header = next(line for line in md.splitlines() if line.startswith("| coefficient | stat"))
    for term in ("aux:temp", "mount creep", "tilt residual", "frequency calibration", "total"):
        assert term in header
    assert sum(line.startswith(f"| {n} |") for n in FREE for line in md.splitlines()) >= 10
    assert md.count("(stat)") == len(FREE) and md.count("(syst)") == len(FREE)
    summary = json.loads((tmp_path / "rep" / "summary.json").read_text(encoding="utf-8"))
    assert summary["blinded"] is False and "systematics" in summary


def test_scale_terms_follow_the_values():
    """with_scales: scale sigma = relative x |value|, None (withheld) without values; the
    totals are redone (derived: quadrature)."""
    from fringe.io.fit_budget import Systematics

    s = Systematics({"a": {"statistical": 3.0, "fit_sigma": 3.0, "terms": {"d": 4.0},
                           "shift": {}, "total": 5.0}},
                    [{"name": "d", "kind": "declared-coefficient", "source": "", "note": ""},
                     {"name": "cal", "kind": "scale", "source": "", "relative": 0.1,
                      "note": ""}])
    withheld = s.with_scales(None)
    assert withheld.coefficients["a"]["terms"]["cal"] is None
    assert withheld.coefficients["a"]["total"] == pytest.approx(5.0)
    assert withheld.withheld == ("cal",)
    shown = s.with_scales({"a": -120.0})
    assert shown.coefficients["a"]["terms"]["cal"] == pytest.approx(12.0)
    assert shown.coefficients["a"]["total"] == pytest.approx(13.0)      # 3-4-12-13


@pytest.mark.parametrize("text, field, words", [
    ("[[term]]\nname='x'\ncoeficient='ke_XY'\nsize=1e-17\nunits='1'\n", "term[0].coeficient",
     "did you mean 'coefficient'"),
    ("[[terms]]\nname='x'\n", "terms", "did you mean 'term'"),
    ("[[term]]\nname='x'\ncoefficient='ke_XY'\nharmonic='C0'\nsize=1\nunits='1'\n", "term[0]",
     "exactly one of"),
    ("[[term]]\nname='x'\nharmonic='Cs3'\nsize=1\nunits='Hz'\n", "term[0].harmonic",
     "expected one of"),
    ("[[term]]\nname='x'\ncoefficient='ke_XY'\nsize=-1\nunits='1'\n", "term[0].size",
     "number > 0"),
    ("[[term]]\ncoefficient='ke_XY'\nsize=1\nunits='1'\n", "term[0].name", "missing"),
    ("[[scale]]\nname='c'\nrelative='2%'\n", "scale[0].relative", "number > 0"),
    ("[[scale]]\nname='c'\nrelative=0.1\n[[scale]]\nname='c'\nrelative=0.2\n", "name",
     "twice"),
    ("", "term", "at least one"),
    ("[[term]\n", "TOML", "valid TOML"),
])
def test_budget_file_errors_are_one_line(tmp_path, text, field, words):
    """Each bad budget file: one line naming the file, the field and what was expected."""
    p = tmp_path / "b.toml"
    p.write_text(text, encoding="utf-8")
    with pytest.raises(InputFileError) as err:
        read_budget(p)
    msg = str(err.value)
    assert "\n" not in msg and "b.toml" in msg and f": {field}:" in msg and words in msg


def test_budget_terms_checked_against_the_fit(fits, tmp_path):
    """A term on a name the theory lacks or in the wrong units is refused before any work; a
    term on a coefficient the fit holds fixed is refused with the free set named."""
    path = str(fits["dir"] / "coupled.h5")
    for body, words in (("coefficient='ke_QQ'\nsize=1e-17\nunits='1'", "ke_QQ"),
                        ("harmonic='C0'\nsize=1e-3\nunits='1'", "expected 'Hz'"),
                        ("coefficient='ke_XY'\nsize=1e-17\nunits='Hz'", "expected '1'")):
        p = tmp_path / "b.toml"
        p.write_text(f"[[term]]\nname='x'\n{body}\n", encoding="utf-8")
        with pytest.raises(ConfigError, match=words):
            fit_run(path, FitSettings(free=FREE), budget=read_budget(p))
    p.write_text("[[term]]\nname='x'\ncoefficient='ke_ZZ'\nsize=1e-17\nunits='1'\n",
                 encoding="utf-8")
    with pytest.raises(ConfigError, match="expected a free coefficient"), \
            warnings.catch_warnings():
        warnings.simplefilter("ignore", FringeWarning)
        fit_run(path, FitSettings(free=("ke_XY", "ke_XXmYY")), budget=read_budget(p))


def test_no_budget_no_section(fits):
    """A fit without --regress and --budget has no systematics part (files as before)."""
    assert fits["unregressed"].systematics is None
    assert "systematics" not in fits["unregressed"].to_dict()
    assert np.isfinite(fits["clean"].coefficients["ke_ZZ"].sigma)


def test_calibration_scale_is_one_budget_entry(fits, tmp_path):
    """A run file declaring a relative scale uncertainty (format version 2): the budget's
    term ``calibration scale`` is the calibration's own scale_sigma (relative x |value|), not
    a second copy of it."""
    import shutil

    import h5py

    path = tmp_path / "cal.h5"
    shutil.copy(fits["dir"] / "coupled.h5", path)
    with h5py.File(path, "r+") as f:
        f.attrs["fringe_format_version"] = 2
        attrs = f["samples/signal"].attrs
        attrs["scale_factor"], attrs["scale_rel_sigma"] = 1.0, 0.03
        attrs["instrument_units"] = "Hz"
    res = _fit(str(path), settings={"regress": ("temp",)})
    for n in FREE:
        terms = res.systematics.coefficients[n]["terms"]
        assert terms["calibration scale"] == res.calibration.scale_sigma[n]
        assert terms["calibration scale"] == pytest.approx(0.03 * abs(res.coefficients[n].value))
    assert [t["name"] for t in res.systematics.terms].count("calibration scale") == 1


def test_blinded_budget_withholds_the_scale_terms_until_unblinding(fits):
    """Blinded, the scale terms (relative x |value|) are withheld and the totals leave them out;
    unblinding restores them from the true values and redoes the totals; the other terms do not
    depend on the values and are the same blinded or not."""
    from fringe.fit.blinding import blind_fit, unblind

    budget = read_budget(fits["dir"] / "budget.toml")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", FringeWarning)
        res, columns = fit_run(str(fits["dir"] / "coupled.h5"),
                               FitSettings(free=FREE, regress=("temp",)), budget=budget)
    with columns:
        blinded, _, key = blind_fit(res, columns, entropy=b"budget".ljust(32, b"."))
    s = blinded.systematics
    assert s.withheld == ("frequency calibration",)
    for n, c in s.coefficients.items():
        assert c["terms"]["frequency calibration"] is None
        for term in ("aux:temp", "aux-noise:temp", "mount creep", "tilt residual"):
            assert c["terms"][term] == res.systematics.coefficients[n]["terms"][term]
    plain, _ = unblind(blinded, key.bound_to("0" * 64), "0" * 64)
    for n, c in plain.systematics.coefficients.items():
        ref = res.systematics.coefficients[n]
        assert c["terms"]["frequency calibration"] == pytest.approx(
            ref["terms"]["frequency calibration"], rel=1e-9)
        assert c["total"] == pytest.approx(ref["total"], rel=1e-12)
