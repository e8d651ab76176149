"""``fringe fit RUN1 RUN2 ...`` (joint fit), ``fringe combine`` and the report of a joint result.

Two invented laboratories: a rotating cavity pair at 47.6 deg N (tests/helpers/runs.py) and a
rotating Michelson at 31.5 deg S, half a day each.
"""

from __future__ import annotations

import json

import pytest

from tests.helpers.commands import run_command
from tests.helpers.latex import unbalanced, unknown_commands
from tests.helpers.runs import KE_TRUTH, simulate_run

SHORT = {"days": 0.5, "interval_s": 2.0, "period_s": 60.0}
MICHELSON = {"site": {"name": "Sandveld hut (invented)", "latitude_deg": -31.5,
                      "longitude_deg": 19.2, "height_m": 300.0},
             "apparatus": {"kind": "michelson", "arm_length_m": 10.0,
                           "wavelength_m": 633e-9, "units": "fringe"},
             "noise": {"white_fm_adev_1s": 6e-8}}      # fringes; invented level


@pytest.fixture(scope="module")
def labs(tmp_path_factory):
    """A folder with cavity.h5, michelson.h5, their fits, the joint fit and the combination."""
    d = tmp_path_factory.mktemp("two_labs")
    simulate_run(d / "cavity.h5", seed=7301, coefficients=KE_TRUTH, **SHORT)
    simulate_run(d / "michelson.h5", seed=7302, coefficients=KE_TRUTH, **SHORT, **MICHELSON)
    runs = {}
    for args in (["fit", "cavity.h5", "--out", "cavity.json"],
                 ["fit", "michelson.h5", "--out", "michelson.json"],
                 ["fit", "cavity.h5", "michelson.h5", "--out", "joint.json"],
                 ["combine", "cavity.json", "michelson.json", "--out", "combined.json"]):
        runs[args[-1]] = run_command(d, args)
        assert runs[args[-1]].exit_code == 0, runs[args[-1]].stderr
    return d, runs


def _json(path):
    return json.loads(path.read_text(encoding="utf-8"))


def test_two_laboratories_fitted_jointly_and_combined_agree(labs):
    d, runs = labs
    joint, comb = _json(d / "joint.json"), _json(d / "combined.json")
    alone = [_json(d / "cavity.json"), _json(d / "michelson.json")]
    assert joint["fringe_format_version"] == 3 and "likelihood" in alone[0]
    assert not (d / "joint.turns.h5").exists()              # a joint fit writes the JSON only
    for n, e in joint["coefficients"].items():
        c = comb["coefficients"][n]
        assert abs(c["value"] - e["value"]) < 0.05 * e["sigma"]     # issue 16: 0.05 sigma
        assert e["sigma"] <= min(a["coefficients"][n]["sigma"] for a in alone)
    zz = joint["coefficients"]["ke_ZZ"]["sigma"]
    assert zz < 0.85 * min(a["coefficients"]["ke_ZZ"]["sigma"] for a in alone)
    kinds = [r["apparatus"]["kind"] for r in joint["runs"]["runs"]]
    assert kinds == ["cavity-pair", "michelson"]
    assert [r["sha256"] for r in joint["runs"]["runs"]] == [a["input"]["sha256"] for a in alone]
    out = runs["joint.json"].stdout
    assert "joint fit of 2 runs" in out and "cavity.h5" in out and "michelson.h5" in out
    assert "agreement of the runs: chi2" in out


def test_the_report_of_a_joint_fit_shows_the_runs(labs, tmp_path):
    d, _ = labs
    rep = run_command(d, ["report", "joint.json", "--out", str(tmp_path / "rep")])
    assert rep.exit_code == 0, rep.stderr
    md = (tmp_path / "rep" / "report.md").read_text("utf-8")
    section = md[md.index("## Runs"):]
    assert "| run 1 | cavity.h5 | Kestrel Fen" in section
    assert "| run 2 | michelson.h5 | Sandveld hut (invented), -31.50° | michelson |" in section
    assert "σ joint" in section
    html = (tmp_path / "rep" / "report.html").read_text("utf-8")
    assert "Runs of the joint fit" in html
    tex = (tmp_path / "rep" / "report.tex").read_text("utf-8")
    assert r"\label{tab:runs-sigma}" in tex and tex.isascii()
    assert unbalanced(tex) == [] and unknown_commands(tex) == set()
    summary = _json(tmp_path / "rep" / "summary.json")
    assert [r["path"] for r in summary["runs"]["runs"]] == ["cavity.h5", "michelson.h5"]


def test_a_folder_of_run_files_is_a_joint_fit(labs, tmp_path):
    d, _ = labs
    runs = tmp_path / "runs"
    runs.mkdir()
    for name in ("cavity.h5", "michelson.h5"):
        (runs / name).write_bytes((d / name).read_bytes())
    got = run_command(tmp_path, ["fit", "runs", "--out", "folder.json"])
    assert got.exit_code == 0, got.stderr
    a, b = _json(tmp_path / "folder.json"), _json(d / "joint.json")
    for n, e in b["coefficients"].items():
        assert a["coefficients"][n]["value"] == pytest.approx(e["value"], rel=1e-9)


def _one_line(run, *needles):
    lines = run.stderr.strip().splitlines()
    assert run.exit_code != 0 and len(lines) == 1, run.stderr
    for needle in needles:
        assert needle in lines[0], lines[0]


def test_combine_refuses_with_one_line(labs, tmp_path):
    d, _ = labs
    _one_line(run_command(d, ["combine", "cavity.json", "cavity.json", "--out",
                              str(tmp_path / "x.json")]),
              "cavity.json: input.sha256: the run file cavity.h5", "the same run cannot enter")
    _one_line(run_command(d, ["combine", "joint.json", "michelson.json", "--out",
                              str(tmp_path / "x.json")]), "already in joint.json")
    old = _json(d / "cavity.json")
    old["fringe_format_version"] = 2
    del old["likelihood"]
    (tmp_path / "old.json").write_text(json.dumps(old), "utf-8")
    _one_line(run_command(d, ["combine", str(tmp_path / "old.json"), "michelson.json", "--out",
                              str(tmp_path / "x.json")]), "old.json: likelihood: expected")
    _one_line(run_command(d, ["combine", "cavity.json", "--out", str(tmp_path / "x.json")]),
              "expected at least two fit results")
    _one_line(run_command(d, ["combine", "cavity.json", "michelson.json", "--out",
                              "joint.json"]), "joint.json")            # exists: not replaced
    assert not (tmp_path / "x.json").exists()


def test_combine_refuses_a_blinded_result_and_fit_refuses_blind_joint(labs, tmp_path):
    d, _ = labs
    blind = run_command(d, ["fit", "michelson.h5", "--out", str(tmp_path / "b.json"),
                            "--blind", str(tmp_path / "k.key")])
    assert blind.exit_code == 0, blind.stderr
    _one_line(run_command(d, ["combine", "cavity.json", str(tmp_path / "b.json"), "--out",
                              str(tmp_path / "x.json")]), "blinding: the result is blinded")
    _one_line(run_command(d, ["fit", "cavity.h5", "michelson.h5", "--out",
                              str(tmp_path / "y.json"), "--blind", str(tmp_path / "k2.key")]),
              "--blind: not available for a joint fit")
    assert not (tmp_path / "x.json").exists() and not (tmp_path / "y.json").exists()


def test_the_two_laboratories_budgets_reach_the_combined_report(labs, tmp_path):
    # issue 16's done-when: runs, budget and limits with statistical and systematic parts
    d, _ = labs
    budget = tmp_path / "cavity_budget.toml"
    budget.write_text('[[term]]\nname = "mount creep"\ncoefficient = "ke_ZZ"\nsize = 3e-17\n'
                      'units = "1"\n[[scale]]\nname = "beat calibration"\nrelative = 0.02\n',
                      encoding="utf-8")
    shared = tmp_path / "shared.toml"
    shared.write_text('[[term]]\nname = "reference drift"\ncoefficient = "ke_XY"\n'
                      'size = 1e-17\nunits = "1"\n', encoding="utf-8")
    for args in (["fit", "cavity.h5", "--out", str(tmp_path / "cav.json"), "--budget",
                  str(budget)],
                 ["combine", str(tmp_path / "cav.json"), "michelson.json", "--out",
                  str(tmp_path / "both.json"), "--budget", str(shared)],
                 ["fit", "cavity.h5", "michelson.h5", "--out", str(tmp_path / "jb.json"),
                  "--budget", str(shared)],
                 ["report", str(tmp_path / "both.json"), "--out", str(tmp_path / "rep")]):
        got = run_command(d, args)
        assert got.exit_code == 0, got.stderr
    both = _json(tmp_path / "both.json")["systematics"]
    assert [t["name"] for t in both["terms"]] == [
        "run 1: mount creep", "run 1: beat calibration", "reference drift"]
    zz = both["coefficients"]["ke_ZZ"]
    assert 0 < zz["terms"]["run 1: mount creep"] < 3e-17         # shared with the Michelson
    assert _json(tmp_path / "jb.json")["systematics"]["coefficients"]["ke_XY"]["terms"] == {
        "reference drift": 1e-17}
    md = (tmp_path / "rep" / "report.md").read_text("utf-8")
    assert "## Runs" in md and "run 1: mount creep" in md and "(stat)" in md and "(syst)" in md
    bad = tmp_path / "harmonic.toml"
    bad.write_text('[[term]]\nname = "t"\nharmonic = "Cs2"\nsize = 1e-3\nunits = "Hz"\n',
                   encoding="utf-8")
    _one_line(run_command(d, ["combine", "cavity.json", "michelson.json", "--out",
                              str(tmp_path / "z.json"), "--budget", str(bad)]),
              "term[0].harmonic: expected a coefficient term for a joint result")
    assert not (tmp_path / "z.json").exists()
