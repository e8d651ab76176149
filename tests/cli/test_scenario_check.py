"""``fringe scenario check``: every example passes; typos are refused naming the closest field.

The examples are read from the repository's ``examples/`` folder; edited copies are written under
tmp_path. Each refused file must give exit status 2, exactly one stderr line naming the file,
the misspelt name and the known name it is closest to, and nothing written.
"""

from __future__ import annotations

import os
from pathlib import Path

import pytest

from fringe.plan.file_check import check_input_file
from tests.helpers.commands import run_command
from tests.helpers.hostile import digest

ROOT = Path(__file__).resolve().parents[2]
EXAMPLES = sorted((ROOT / "examples").rglob("*.toml"))
DEMO = ROOT / "fringe" / "data" / "demo.toml"
EVERY = ROOT / "examples" / "every_section.toml"
STARTER = ROOT / "examples" / "starter" / "cavity_rotation.toml"
METADATA = {"session.toml", "cavity_rotation.toml"}        # the examples that are import metadata
BUDGETS = {"budget.toml"}                                  # ... and systematic budgets


def test_the_examples_folder_has_files_of_both_kinds():
    names = {p.name for p in EXAMPLES}
    assert {"every_section.toml", "cavity_pair.toml"} <= names and METADATA <= names


@pytest.mark.parametrize("path", EXAMPLES + [DEMO],
                         ids=[str(p.relative_to(ROOT)) for p in EXAMPLES + [DEMO]])
def test_every_example_passes(tmp_path, path):
    before = digest(path)
    run = run_command(tmp_path, ["scenario", "check", str(path)])
    kind = ("import metadata" if path.name in METADATA
            else "systematic budget" if path.name in BUDGETS else "scenario")
    assert run.exit_code == 0, run.stderr
    assert run.stdout.startswith(f"{path}: valid {kind} (") and run.stdout.endswith(")\n")
    assert run.stdout.count("\n") == 1
    assert digest(path) == before and os.listdir(tmp_path) == []      # nothing written


def test_every_section_example_sets_every_field():
    """examples/every_section.toml shows each field the stages read (active or commented)."""
    from fringe.experiment.apparatus import APPARATUS_KINDS, apparatus_fields
    from fringe.experiment.scenario import CAMPAIGN_FIELDS, SITE_FIELDS, THEORY_OPTIONS
    from fringe.experiment.turntable import MOTIONS
    from fringe.noise.powerlaw import ADEV_FIELDS, PSD_FIELDS
    from fringe.plan.settings import PLAN_FIELDS
    from fringe.simulation.campaign import Systematics
    from fringe.theories import THEORIES

    text = EVERY.read_text(encoding="utf-8")
    names = set(SITE_FIELDS) | set(CAMPAIGN_FIELDS) | set(THEORY_OPTIONS) | set(PLAN_FIELDS)
    names |= set(ADEV_FIELDS) | set(PSD_FIELDS) | {"f_h_hz", "tilt_south_urad", "tilt_east_urad"}
    names |= set(Systematics().to_dict()) | set(THEORIES["sme"].parameter_names)
    for cls in APPARATUS_KINDS.values():
        names |= apparatus_fields(cls)
    for cls in MOTIONS.values():
        names |= set(cls.__dataclass_fields__)
    missing = sorted(n for n in names - {"targets"} if f"{n} =" not in text)   # a table
    assert missing == []
    for section in ("site", "campaign", "apparatus", "turntable", "theory", "coefficients",
                    "noise", "systematics", "plan", "plan.targets"):
        assert f"\n[{section}]" in text, section


# (id, file, text replaced, replacement, expected rest of the line after "FILE: ")
TYPOS = [
    ("section", EVERY, "[noise]", "[nosie]", "[nosie]: unknown section; known sections: "),
    ("site", EVERY, "latitude_deg = 46.21", "latitude_dg = 46.21",
     "[site] latitude_dg: unknown field (expected some of "),
    ("campaign", EVERY, "duration_days = 3.0", "duration_dys = 3.0",
     "[campaign] duration_dys: unknown field (expected some of "),
    ("apparatus", EVERY, "carrier_hz = 2.82e14", "carrier_hzz = 2.82e14",
     "[apparatus] carrier_hzz: not a field of kind 'cavity-pair' (expected some of "),
    ("turntable", EVERY, "period_s = 45.0", "perod_s = 45.0",
     "[turntable] perod_s: not a field of continuous motion (expected some of "),
    ("theory", EVERY, "rotation_velocity = true", "rotation_velocty = true",
     "[theory] rotation_velocty: unknown option for theory 'sme'"),
    ("coefficient", EVERY, "ke_XXmYY = -1.0e-17", "ke_XXmYYY = -1.0e-17",
     "[coefficients]: ke_XXmYYY: not a coefficient of theory 'sme' (expected one of "),
    ("noise", EVERY, "flicker_fm_adev =", "flicker_fm_adv =",
     "[noise] flicker_fm_adv: unknown field (expected some of "),
    ("systematics", EVERY, "drift_per_day =", "drift_perday =",
     "[systematics] drift_perday: unknown field (expected some of "),
    ("plan", EVERY, "max_days = 365.0", "max_day = 365.0",
     "[plan] max_day: unknown field (expected some of "),
    ("metadata-section", STARTER, "[columns]", "[colums]", "colums: expected only the keys "),
    ("metadata-site", STARTER, "latitude_deg = 54.38", "latitud_deg = 54.38",
     "site.latitud_deg: expected only the keys "),
    ("metadata-apparatus", STARTER, "path_separation_deg = 90.0", "path_separaton_deg = 90.0",
     "apparatus.path_separaton_deg: expected an attribute of kind 'cavity-pair' "),
    ("metadata-csv", STARTER, 'comment = "#"', 'coment = "#"',
     "csv.coment: expected only the keys delimiter and comment"),
]
#: The known name each typo is closest to (what the message must suggest).
CLOSEST = {"section": "[noise]", "site": "latitude_deg", "campaign": "duration_days",
           "apparatus": "carrier_hz", "turntable": "period_s", "theory": "rotation_velocity",
           "coefficient": "ke_XXmYY", "noise": "flicker_fm_adev", "systematics": "drift_per_day",
           "plan": "max_days", "metadata-section": "columns", "metadata-site": "latitude_deg",
           "metadata-apparatus": "path_separation_deg", "metadata-csv": "comment"}


@pytest.mark.parametrize("case", TYPOS, ids=[c[0] for c in TYPOS])
def test_a_typo_is_refused_with_the_closest_name(tmp_path, case):
    name, source, old, new, rest = case
    text = source.read_text(encoding="utf-8")
    assert text.count(old) >= 1, old
    path = tmp_path / "lab.toml"
    path.write_text(text.replace(old, new, 1), encoding="utf-8")
    before = digest(path)
    run = run_command(tmp_path, ["scenario", "check", "lab.toml"])
    assert run.exit_code == 2 and run.stdout == ""
    lines = run.stderr.splitlines()
    assert len(lines) == 1 and "Traceback" not in run.stderr
    # the one wording of an unknown name (fringe.errors.unknown_name): the name, the nearest
    # known one, then the known ones
    assert lines[0].startswith("error: lab.toml: "), lines[0]
    assert rest.split(": ")[0].split()[-1] in lines[0], lines[0]
    assert f"did you mean {CLOSEST[name]}?" in lines[0], lines[0]
    assert digest(path) == before and os.listdir(tmp_path) == ["lab.toml"]


@pytest.mark.parametrize("text, rest", [
    ('[site]\nlatitude_deg = 1.0\nlongitude_deg = 2.0\n',
     "file: expected a scenario (sections [campaign], [turntable], [theory], ...), import "
     "metadata (epoch_utc, [columns], [units], ...) or a systematic budget ([[term]], "
     "[[scale]]), found site"),
    ('[[term]]\nname = "x"\ncoefficent = "ke_XY"\nsize = 1e-18\nunits = "1"\n',
     "term[0].coefficent: unknown field (expected some of name, coefficient, harmonic, size, "
     "units, note); did you mean 'coefficient'?"),
    ("title = 'x'\n[campaign\n", "TOML: not valid TOML ("),
])
def test_a_file_of_neither_kind_or_broken_is_one_line(tmp_path, text, rest):
    (tmp_path / "odd.toml").write_text(text, encoding="utf-8")
    run = run_command(tmp_path, ["scenario", "check", "odd.toml"])
    assert run.exit_code == 2
    assert run.stderr.startswith(f"error: odd.toml: {rest}") and run.stderr.count("\n") == 1


def test_a_missing_file_and_a_folder_are_one_line(tmp_path):
    (tmp_path / "folder").mkdir()
    for name in ("absent.toml", "folder"):
        run = run_command(tmp_path, ["scenario", "check", name])
        assert run.exit_code == 2 and run.stderr.startswith(f"error: {name}: file: expected ")
        assert run.stderr.count("\n") == 1


def test_the_check_sees_what_only_a_later_stage_reads(tmp_path):
    """[systematics] and [plan] are checked too (load_scenario alone keeps them verbatim)."""
    text = EVERY.read_text(encoding="utf-8")
    for old, new, rest in [("dropout_fraction = 0.002", "dropout_fraction = 1.5",
                            "[systematics] dropout_fraction: expected a value < 1"),
                           ('drift = "linear"', 'drift = "cubic"',
                            "[plan] drift: expected one of ")]:
        path = tmp_path / "lab.toml"
        path.write_text(text.replace(old, new, 1), encoding="utf-8")
        with pytest.raises(Exception) as caught:
            check_input_file(path)
        assert str(caught.value).startswith(f"{path}: {rest}"), str(caught.value)
