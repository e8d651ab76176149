"""``fringe fit --blind``, ``fringe unblind`` and ``fringe fit --budget`` from the command line."""

from __future__ import annotations

import json
import shutil
import stat

import pytest

from tests.helpers.commands import run_command
from tests.helpers.latex import unbalanced, unknown_commands

FIT = ["fit", "run.h5", "--free", "ke_XY,ke_XXmYY"]


@pytest.fixture
def folder(small_run, tmp_path):
    shutil.copy(small_run, tmp_path / "run.h5")
    return tmp_path


def _json(path):
    return json.loads(path.read_text(encoding="utf-8"))


def test_blind_unblind_and_a_later_fit(folder):
    """The blind's life: a blinded fit writes a 0600 key and says BLINDED; an existing unused
    key is refused; unblind writes the values once and marks the key; a later fit with the used
    key records whether its settings changed since."""
    run = run_command(folder, FIT + ["--out", "b.json", "--blind", "k.key"])
    assert run.exit_code == 0, run.stderr
    assert run.stdout.splitlines()[1].startswith("*** BLINDED")  # after the theory line
    assert stat.S_IMODE((folder / "k.key").stat().st_mode) == 0o600
    blinded = _json(folder / "b.json")
    assert blinded["blinding"]["blinded"] is True
    key = _json(folder / "k.key")
    assert set(key["offsets"]) == {"ke_XY", "ke_XXmYY"}
    assert not any(str(v) in (folder / "b.json").read_text() for v in key["offsets"].values())

    again = run_command(folder, FIT + ["--out", "b2.json", "--blind", "k.key"])
    assert again.exit_code == 2 and "k.key: exists" in again.stderr
    assert len(again.stderr.strip().splitlines()) == 1 and not (folder / "b2.json").exists()

    un = run_command(folder, ["unblind", "b.json", "--key", "k.key", "--out", "u.json"])
    assert un.exit_code == 0, un.stderr
    u = _json(folder / "u.json")
    assert u["blinding"]["blinded"] is False and u["blinding"]["unblinded_utc"]
    for n, off in key["offsets"].items():
        got = u["coefficients"][n]["value"]
        assert got == pytest.approx(blinded["coefficients"][n]["value"] - off, rel=1e-12)
    assert _json(folder / "k.key")["unblinded"]["result_sha256"] == \
        u["blinding"]["blinded_result_sha256"]
    twice = run_command(folder, ["unblind", "b.json", "--key", "k.key", "--out", "u2.json"])
    assert twice.exit_code == 2 and "unused key" in twice.stderr

    same = run_command(folder, FIT + ["--out", "s.json", "--blind", "k.key"])
    assert same.exit_code == 0, same.stderr
    s = _json(folder / "s.json")["blinding"]
    assert s["settings_changed_after_unblinding"] is False
    assert _json(folder / "s.json")["coefficients"]["ke_XY"]["value"] == \
        pytest.approx(u["coefficients"]["ke_XY"]["value"], rel=1e-9)
    changed = run_command(folder, FIT + ["--out", "c.json", "--blind", "k.key", "--no-lab-b0"])
    assert changed.exit_code == 0, changed.stderr
    assert _json(folder / "c.json")["blinding"]["settings_changed_after_unblinding"] is True
    assert "settings changed after unblinding" in changed.stdout


def test_blinded_report_says_so(folder):
    """The report of a blinded result opens its headline with BLINDED and summary.json says
    blinded: true."""
    assert run_command(folder, FIT + ["--out", "b.json", "--blind", "k.key"]).exit_code == 0
    rep = run_command(folder, ["report", "b.json", "--out", "rep"])
    assert rep.exit_code == 0, rep.stderr
    md = (folder / "rep" / "report.md").read_text(encoding="utf-8")
    assert md.split("**Result.** ")[1].startswith("BLINDED")
    assert _json(folder / "rep" / "summary.json")["blinded"] is True
    assert "BLINDED" in (folder / "rep" / "report.html").read_text(encoding="utf-8")
    tex = (folder / "rep" / "report.tex").read_text(encoding="utf-8")
    assert "BLINDED" in tex and tex.isascii()
    assert unbalanced(tex) == [] and unknown_commands(tex) == set()


@pytest.mark.parametrize("text, words", [
    ("{", "k.key: JSON: expected valid JSON"),
    ('{"fringe_format": "fit"}', "k.key: fringe_format: expected 'blind-key'"),
    ('{"fringe_format": "blind-key", "fringe_format_version": 1, "key_id": "ab12ab12", '
     '"created_utc": "x", "spread_sigmas": 100, "offsets": {"ke_XY": "big"}, '
     '"harmonic_offsets": [0,0,0,0,0,0,0,0,0,0], "result_sha256": "", "settings_sha256": "'
     + "0" * 64 + '", "unblinded": null}', "k.key: offsets.ke_XY: expected a finite number"),
])
def test_bad_key_file_is_one_line(folder, text, words):
    """A broken key: one line naming the key file and the field, exit 2, nothing written."""
    (folder / "k.key").write_text(text, encoding="utf-8")
    run = run_command(folder, FIT + ["--out", "b.json", "--blind", "k.key"])
    assert run.exit_code == 2 and words in run.stderr
    assert len(run.stderr.strip().splitlines()) == 1 and not (folder / "b.json").exists()
    (folder / "f.json").write_text("{}", encoding="utf-8")
    un = run_command(folder, ["unblind", "f.json", "--key", "k.key", "--out", "u.json"])
    assert un.exit_code == 2 and len(un.stderr.strip().splitlines()) == 1


def test_budget_option(folder):
    """--budget adds the systematics part; a bad budget file is one line and no output."""
    (folder / "b.toml").write_text("[[scale]]\nname = 'cal'\nrelative = 0.05\n",
                                   encoding="utf-8")
    run = run_command(folder, FIT + ["--out", "f.json", "--budget", "b.toml"])
    assert run.exit_code == 0, run.stderr
    sys = _json(folder / "f.json")["systematics"]
    v = _json(folder / "f.json")["coefficients"]["ke_XY"]["value"]
    assert sys["coefficients"]["ke_XY"]["terms"]["cal"] == pytest.approx(0.05 * abs(v))
    (folder / "bad.toml").write_text("[[scale]]\nname = 'cal'\nrelativ = 0.05\n",
                                     encoding="utf-8")
    bad = run_command(folder, FIT + ["--out", "g.json", "--budget", "bad.toml"])
    assert bad.exit_code == 2 and "bad.toml: scale[0].relativ: unknown field" in bad.stderr
    assert "did you mean 'relative'" in bad.stderr and not (folder / "g.json").exists()


def test_a_key_that_cannot_be_written_keeps_no_blinded_result(folder, monkeypatch):
    """Whole or nothing: when the key cannot be written (a full disk), neither the key nor the
    blinded result nor its turns file is kept, and the error is one line."""
    from tests.helpers.fs_faults import fail_writes, leftovers

    fail_writes(monkeypatch, ["k.key"])
    run = run_command(folder, FIT + ["--out", "b.json", "--blind", "k.key"])
    assert run.exit_code != 0 and len(run.stderr.strip().splitlines()) == 1
    assert "k.key" in run.stderr
    for name in ("k.key", "b.json", "b.turns.h5"):
        assert not (folder / name).exists()
    assert not leftovers(folder)
