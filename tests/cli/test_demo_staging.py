"""``fringe demo`` writes its folder as one set: whole, or nothing at all.

The demo runs on a 6-hour version of its own invented scenario (``fringe/data/demo.toml`` with
``duration_days = 0.25``), in a folder under tmp_path, through click's test runner or (for
SIGINT) in a child process. Checked: a failure in the last step (the forecast, made to raise)
leaves no output folder and no hidden staging directory, and leaves an earlier demo's files
byte for byte; a finished demo's files name each other by relative names and record no
staging path; SIGINT during the fit leaves nothing.
"""

from __future__ import annotations

import importlib
import os
import signal
import subprocess
import sys
from pathlib import Path

import pytest

import fringe.cli.demo as demo
from fringe.errors import ConfigError
from fringe.io.fit_result import read_fit_result
from tests.helpers.commands import run_command
from tests.helpers.hostile import digest

#: The module (``fringe.plan`` re-exports its function under the same name).
FORECAST = importlib.import_module("fringe.plan.forecast")
DEMO = Path(__file__).resolve().parents[2] / "fringe" / "data" / "demo.toml"


def _short_scenario(folder: Path) -> Path:
    text = DEMO.read_text(encoding="utf-8")
    assert "duration_days = 12.0" in text
    path = folder / "short.toml"
    path.write_text(text.replace("duration_days = 12.0", "duration_days = 0.25"), "utf-8")
    return path


@pytest.fixture
def short_demo(tmp_path, monkeypatch):
    """The demo command on the 6-hour scenario; returns the folder it runs in."""
    work = tmp_path / "work"
    work.mkdir()
    scenario = _short_scenario(tmp_path)
    monkeypatch.setattr(demo, "demo_scenario_path", lambda: scenario)
    return work


def _fail(*args, **kwargs):
    raise ConfigError("plan: injected failure of the last step")


def test_a_failing_last_step_leaves_no_folder(short_demo, monkeypatch):
    monkeypatch.setattr(FORECAST, "forecast", _fail)
    run = run_command(short_demo, ["demo", "--out", "out", "--seed", "3"])
    assert run.exit_code == 2
    assert run.stderr.splitlines()[-1] == "error: plan: injected failure of the last step"
    assert "[5/5] plan" in run.stdout                  # the failure came in the last step
    assert os.listdir(short_demo) == []                # no folder, no staging directory


def test_a_failing_last_step_keeps_an_earlier_demo(short_demo, monkeypatch):
    """An earlier demo's files (here stand-ins) stay byte for byte, with --overwrite too."""
    old = short_demo / "out"
    for name in demo.DEMO_OUTPUTS:
        (old / name).parent.mkdir(parents=True, exist_ok=True)
        (old / name).write_text(f"earlier {name}\n", "utf-8")
    before = {p: digest(p) for p in old.rglob("*") if p.is_file()}
    monkeypatch.setattr(FORECAST, "forecast", _fail)
    run = run_command(short_demo, ["demo", "--out", "out", "--seed", "3", "--overwrite"])
    assert run.exit_code == 2
    assert {p: digest(p) for p in old.rglob("*") if p.is_file()} == before
    assert os.listdir(short_demo) == ["out"]


def test_a_bug_in_a_step_leaves_no_folder(short_demo, monkeypatch):
    """Not only user errors: any exception discards the staged folder and restores the cwd."""
    def broken(*args, **kwargs):
        raise RuntimeError("injected")

    monkeypatch.setattr(FORECAST, "forecast", broken)
    with pytest.raises(RuntimeError, match="injected"):
        run_command(short_demo, ["demo", "--out", "out"])
    assert os.listdir(short_demo) == []
    assert Path.cwd() != short_demo / "out"


def test_a_finished_demo_records_no_staging_path(short_demo, tmp_path):
    run = run_command(short_demo, ["demo", "--out", "out", "--seed", "3"])
    assert run.exit_code == 0, run.stderr
    out = short_demo / "out"
    assert os.listdir(short_demo) == ["out"]           # no staging directory left beside it
    files = [p for p in out.rglob("*") if p.is_file()]
    assert {p.relative_to(out).as_posix() for p in files} >= set(demo.DEMO_OUTPUTS)
    assert not [p for p in out.rglob(".*")]            # no hidden file or directory inside
    for p in files:
        data = p.read_bytes()
        assert b".staging" not in data and b"/out/" not in data, p
        assert str(tmp_path).encode() not in data, p    # no absolute path of this machine
    fit = read_fit_result(out / "fit.json")
    assert fit.input.path == "run.h5" and fit.amplitudes_file == "fit.turns.h5"
    assert f"  fit result                   {Path('out') / 'fit.json'}" in run.stdout


CHILD = r"""
import sys
from pathlib import Path
import fringe.cli.demo as demo
demo.demo_scenario_path = lambda: Path(sys.argv[1])
from fringe.cli import main
main(["demo", "--out", "out", "--seed", "3"])
"""


def test_sigint_during_the_demo_leaves_nothing(short_demo, tmp_path):
    """SIGINT once the fit has begun (the child says so on stdout): exit 130, nothing left."""
    env = {**os.environ, "PYTHONPATH": str(Path(__file__).resolve().parents[2])}
    proc = subprocess.Popen([sys.executable, "-u", "-c", CHILD, str(tmp_path / "short.toml")],
                            cwd=short_demo, stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                            text=True, env=env)
    try:
        for line in proc.stdout:
            if line.startswith("[3/5] fit"):
                break
        assert proc.poll() is None, proc.stderr.read()
        proc.send_signal(signal.SIGINT)
        _, err = proc.communicate(timeout=120)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()
    assert proc.returncode == 130, err
    assert err.splitlines()[-1] == "error: interrupted; no partial output was kept"
    assert os.listdir(short_demo) == []


def test_quiet_demo_prints_its_results_without_the_step_headings(short_demo):
    loud = run_command(short_demo, ["demo", "--out", "loud", "--seed", "3"])
    hushed = run_command(short_demo, ["demo", "--out", "hushed", "--seed", "3", "-q"])
    assert loud.exit_code == 0 and hushed.exit_code == 0, hushed.stderr
    assert "[1/5] simulate" in loud.stdout and "[5/5] plan" in loud.stdout
    assert "[1/5]" not in hushed.stdout and "[3/5]" not in hushed.stdout
    assert "ke_XY" in hushed.stdout                      # the fit's table is a result
