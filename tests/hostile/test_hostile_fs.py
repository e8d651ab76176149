"""Hostile filesystems: full and read-only disks, odd output paths, output sets that do not
belong together, inputs that would hang (docs/hostile-input.md, "Filesystem and process").

Each command gives one ``error: ...`` line naming the path and the fix, exits non-zero, writes
no partial output, leaves no temporary file and never modifies its inputs. Faults are injected
at the write layer (tests/helpers/fs_faults.py), so these run on any machine; the tests marked
"real" use a small tmpfs and are skipped unless the tests run as root where mounts are allowed.
All files go under tmp_path.
"""

from __future__ import annotations

import errno
import json
import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

from tests.helpers.commands import run_command
from tests.helpers.fs_faults import (
    EXAMPLES,
    fail_writes,
    leftovers,
    one_error_line,
    read_only_everywhere,
    tmpfs,
    tree,
    unmount,
)
from tests.helpers.hostile import digest

CSV_META = """epoch_utc = "2027-02-03T00:00:00Z"

[site]
latitude_deg = 12.5
longitude_deg = -60.25

[apparatus]
kind = "cavity-vs-reference"
carrier_hz = 1.9e14
reference = "atomic"

[columns]
time = "t"
azimuth = "table_deg"
signal = "beat"

[units]
azimuth = "deg"
signal = "Hz"
"""


def scenario_copy(folder: Path, days: float = 0.1) -> Path:
    """The example cavity-pair scenario, shortened to ``days`` (0.1 d: 8640 samples)."""
    text = (EXAMPLES / "cavity_pair.toml").read_text(encoding="utf-8")
    assert "duration_days = 2.0" in text
    path = folder / "scenario.toml"
    path.write_text(text.replace("duration_days = 2.0", f"duration_days = {days}"),
                    encoding="utf-8")
    return path


def csv_copy(folder: Path, rows: int = 2000) -> tuple[Path, Path]:
    """A table of ``rows`` samples (1 s apart, 45 s turns) and its import metadata."""
    lines = ["t,table_deg,beat"] + [f"{i},{(8.0 * i) % 360:.1f},{1e-3 * (i % 7):.4f}"
                                    for i in range(rows)]
    csv = folder / "table.csv"
    csv.write_text("\n".join(lines) + "\n", encoding="utf-8")
    meta = folder / "meta.toml"
    meta.write_text(CSV_META, encoding="utf-8")
    return csv, meta


@pytest.fixture
def fitted(small_fit, tmp_path) -> Path:
    """A folder of its own with run.h5, fit.json and fit.turns.h5 (copies of the small fit)."""
    folder = tmp_path / "fitted"
    shutil.copytree(small_fit.folder, folder)
    return folder


# == full disk (injected) ======================================================================

def test_simulate_to_a_full_disk_is_one_line_and_leaves_nothing(tmp_path, monkeypatch):
    scenario = scenario_copy(tmp_path)
    before = digest(scenario)
    fail_writes(monkeypatch, ["run.h5"])
    run = run_command(tmp_path, ["simulate", "scenario.toml", "--out", "run.h5", "--seed", "1"])
    assert run.exit_code == 2
    line = one_error_line(run.stderr)
    assert line.startswith("error: run.h5: cannot be written (No space left on device); free "
                           "space"), line
    assert sorted(os.listdir(tmp_path)) == ["scenario.toml"]
    assert digest(scenario) == before


def test_import_to_a_full_disk_is_one_line_and_leaves_nothing(tmp_path, monkeypatch):
    csv_copy(tmp_path)
    fail_writes(monkeypatch, ["run.h5"])
    run = run_command(tmp_path, ["import", "table.csv", "--meta", "meta.toml", "--out",
                                 "run.h5"])
    assert run.exit_code == 2
    assert "No space left on device" in one_error_line(run.stderr)
    assert sorted(os.listdir(tmp_path)) == ["meta.toml", "table.csv"]


@pytest.mark.parametrize("failing", ["fit.json", "fit.turns.h5"])
def test_fit_overwrite_on_a_full_disk_keeps_the_old_pair(fitted, monkeypatch, failing):
    # before: the new turns file replaced the old one and then the JSON failed, leaving the
    # old fit.json beside a new turns file (a mixed pair that looks valid)
    before = tree(fitted)
    fail_writes(monkeypatch, [failing])
    run = run_command(fitted, ["fit", "run.h5", "--out", "fit.json", "--overwrite",
                               "--drift", "quadratic"])
    assert run.exit_code == 2
    line = one_error_line(run.stderr)
    assert line.startswith(f"error: {failing}: cannot be written (No space left on device)") \
        or line.startswith(f"error: ./{failing}: cannot"), line
    assert tree(fitted) == before and leftovers(fitted) == []


def test_report_on_a_full_disk_leaves_no_half_filled_folder(fitted, monkeypatch):
    fail_writes(monkeypatch, ["report.html"])       # after every figure and report.md
    run = run_command(fitted, ["report", "fit.json", "--out", "rep"])
    assert run.exit_code == 2
    assert "No space left on device" in one_error_line(run.stderr)
    assert not (fitted / "rep").exists() and leftovers(fitted) == []


def test_report_overwrite_on_a_full_disk_keeps_the_old_report(fitted, monkeypatch):
    assert run_command(fitted, ["report", "fit.json", "--out", "rep"]).exit_code == 0
    before = tree(fitted / "rep")
    fail_writes(monkeypatch, ["summary.json"])      # the very last output
    run = run_command(fitted, ["report", "fit.json", "--out", "rep", "--overwrite"])
    assert run.exit_code == 2
    assert "summary.json: cannot be written" in one_error_line(run.stderr)
    assert tree(fitted / "rep") == before and leftovers(fitted) == []


# == read-only filesystem, unwritable and odd outputs ===========================================

READ_ONLY_COMMANDS = {
    "simulate": ["simulate", "scenario.toml", "--out", "out/run.h5", "--seed", "1"],
    "import": ["import", "table.csv", "--meta", "meta.toml", "--out", "out/run.h5"],
    "fit": ["fit", "run.h5", "--out", "out/fit.json"],
    "report": ["report", "fit.json", "--out", "out/rep"],
    "inspect": ["inspect", "run.h5", "--out", "out/insp"],
    "predict": ["predict", "scenario.toml", "--out", "out/pred", "--no-series"],
    "plan": ["plan", "plan.toml", "--out", "out/plan"],
}


def _inputs(folder: Path, fitted: Path) -> None:
    scenario_copy(folder)
    csv_copy(folder)
    shutil.copy(EXAMPLES / "plan_cavity_pair.toml", folder / "plan.toml")
    for name in ("run.h5", "fit.json", "fit.turns.h5"):
        shutil.copy(fitted / name, folder / name)
    (folder / "out").mkdir()


@pytest.mark.parametrize("command", sorted(READ_ONLY_COMMANDS))
def test_read_only_filesystem_is_one_line_before_any_work(tmp_path, fitted, monkeypatch,
                                                          command):
    folder = tmp_path / "ro"
    folder.mkdir()
    _inputs(folder, fitted)
    before = tree(folder)
    read_only_everywhere(monkeypatch)
    run = run_command(folder, READ_ONLY_COMMANDS[command])
    assert run.exit_code == 2
    line = one_error_line(run.stderr)
    assert "read-only filesystem" in line and "write somewhere else" in line, line
    assert line.startswith("error: out/"), line
    assert tree(folder) == before and leftovers(folder) == []


def test_fit_checks_its_outputs_before_computing(fitted, monkeypatch):
    import fringe.fit.run

    def no_fit(*a, **k):
        raise AssertionError("the fit was computed before its outputs were checked")

    monkeypatch.setattr(fringe.fit.run, "fit_run", no_fit)
    read_only_everywhere(monkeypatch)
    run = run_command(fitted, ["fit", "run.h5", "--out", "new.json"])
    assert run.exit_code == 2 and "read-only" in one_error_line(run.stderr)


@pytest.mark.parametrize("command", ["report", "inspect", "predict", "plan", "demo"])
def test_a_regular_file_where_a_folder_is_expected(tmp_path, fitted, command):
    folder = tmp_path / "odd"
    folder.mkdir()
    _inputs(folder, fitted)
    (folder / "taken").write_text("not a folder\n", encoding="utf-8")
    args = {"report": ["report", "fit.json"], "inspect": ["inspect", "run.h5"],
            "predict": ["predict", "scenario.toml", "--no-series"], "plan": ["plan", "plan.toml"],
            "demo": ["demo"]}[command]
    run = run_command(folder, args + ["--out", "taken"])
    assert run.exit_code == 2
    line = one_error_line(run.stderr)
    assert line.startswith("error: taken: exists and is not a directory;"), line
    assert (folder / "taken").read_text(encoding="utf-8") == "not a folder\n"


@pytest.mark.parametrize("command", ["simulate", "fit", "import"])
def test_a_folder_where_a_file_is_expected_with_overwrite(tmp_path, fitted, command):
    folder = tmp_path / "odd"
    folder.mkdir()
    _inputs(folder, fitted)
    target = {"simulate": "x.h5", "fit": "x.json", "import": "x.h5"}[command]
    (folder / target).mkdir()
    args = {"simulate": ["simulate", "scenario.toml", "--seed", "1"], "fit": ["fit", "run.h5"],
            "import": ["import", "table.csv", "--meta", "meta.toml"]}[command]
    run = run_command(folder, args + ["--out", target, "--overwrite"])
    assert run.exit_code == 2
    line = one_error_line(run.stderr)
    assert line.startswith(f"error: {target}: ") and "directory" in line, line
    assert (folder / target).is_dir() and leftovers(folder) == []


@pytest.mark.parametrize("command", ["simulate", "fit", "report"])
def test_a_name_too_long(tmp_path, fitted, command):
    folder = tmp_path / "long"
    folder.mkdir()
    _inputs(folder, fitted)
    long = "n" * 300
    args = {"simulate": ["simulate", "scenario.toml", "--seed", "1", "--out", long + ".h5"],
            "fit": ["fit", "run.h5", "--out", long + ".json"],
            "report": ["report", "fit.json", "--out", long]}[command]
    before = tree(folder)
    run = run_command(folder, args)
    assert run.exit_code == 2
    line = one_error_line(run.stderr)
    assert f"{long}" in line and ("too long" in line), line
    assert tree(folder) == before and leftovers(folder) == []


def test_a_path_too_long(tmp_path):
    scenario_copy(tmp_path)
    deep = "/".join(["d" * 200] * 25) + "/run.h5"           # 5000 bytes: above PATH_MAX
    run = run_command(tmp_path, ["simulate", "scenario.toml", "--seed", "1", "--out", deep])
    assert run.exit_code == 2
    assert "path too long" in one_error_line(run.stderr)
    assert sorted(os.listdir(tmp_path)) == ["scenario.toml"]


def test_an_unwritable_folder_without_root(tmp_path):
    if os.geteuid() == 0:
        pytest.skip("root writes into a mode 0o555 folder anyway")
    scenario_copy(tmp_path)
    locked = tmp_path / "locked"
    locked.mkdir(mode=0o555)
    try:
        run = run_command(tmp_path, ["simulate", "scenario.toml", "--seed", "1", "--out",
                                     "locked/run.h5"])
    finally:
        locked.chmod(0o755)
    assert run.exit_code == 2 and "no permission" in one_error_line(run.stderr)


@pytest.mark.parametrize("kind", ["missing", "file"])
def test_an_unusable_scratch_dir_is_one_line_before_the_fit(fitted, kind):
    if kind == "file":
        (fitted / "scratch").write_text("x", encoding="utf-8")
    run = run_command(fitted, ["fit", "run.h5", "--out", "new.json", "--scratch-dir",
                               "scratch"])
    assert run.exit_code == 2
    line = one_error_line(run.stderr)
    assert line.startswith("error: --scratch-dir scratch: "), line
    assert not (fitted / "new.json").exists() and leftovers(fitted) == []


# == output sets ================================================================================

def test_the_fit_records_its_turns_file_and_the_report_checks_it(fitted, tmp_path):
    result = json.loads((fitted / "fit.json").read_text(encoding="utf-8"))
    assert result["amplitudes_sha256"] == digest(fitted / "fit.turns.h5")
    other = tmp_path / "other"                     # a second fit of the same run
    other.mkdir()
    shutil.copy(fitted / "run.h5", other / "run.h5")
    assert run_command(other, ["fit", "run.h5", "--out", "fit.json", "--drift",
                               "quadratic"]).exit_code == 0
    shutil.copy(other / "fit.turns.h5", fitted / "fit.turns.h5")   # a mixed pair
    run = run_command(fitted, ["report", "fit.json", "--out", "rep"])
    assert run.exit_code == 2
    line = one_error_line(run.stderr)
    assert line.startswith("error: fit.turns.h5: sha256: expected the per-turn amplitudes "
                           "file written with the fit result"), line
    assert not (fitted / "rep").exists()


def test_results_without_the_turns_hash_still_read(fitted):
    d = json.loads((fitted / "fit.json").read_text(encoding="utf-8"))
    del d["amplitudes_sha256"]                      # as written before the hash was recorded
    (fitted / "fit.json").write_text(json.dumps(d), encoding="utf-8")
    run = run_command(fitted, ["report", "fit.json", "--out", "rep"])
    assert run.exit_code == 0, run.stderr
    d["amplitudes_sha256"] = "not-a-hash"
    (fitted / "fit.json").write_text(json.dumps(d), encoding="utf-8")
    run = run_command(fitted, ["report", "fit.json", "--out", "rep2"])
    assert run.exit_code == 2
    assert "fit.json: amplitudes_sha256: expected 64 lowercase hexadecimal digits" in \
        one_error_line(run.stderr)


# == inputs that hang or are folders ============================================================

FIFO_CASES = {
    "simulate": ["simulate", "PIPE", "--out", "x.h5", "--seed", "1"],
    "predict": ["predict", "PIPE", "--out", "p"],
    "plan": ["plan", "PIPE", "--out", "p"],
    "fit": ["fit", "PIPE", "--out", "x.json"],
    "inspect": ["inspect", "PIPE"],
    "import-meta": ["import", "table.csv", "--meta", "PIPE", "--out", "x.h5"],
}


@pytest.mark.skipif(not hasattr(os, "mkfifo"), reason="needs named pipes")
@pytest.mark.parametrize("case", sorted(FIFO_CASES))
def test_a_fifo_as_input_is_refused_without_waiting(tmp_path, case):
    csv_copy(tmp_path)
    os.mkfifo(tmp_path / "PIPE")
    try:                                   # before: blocked forever opening the pipe
        res = subprocess.run([sys.executable, "-m", "fringe.cli", *FIFO_CASES[case]],
                             cwd=tmp_path, capture_output=True, text=True, timeout=120)
    except subprocess.TimeoutExpired:
        pytest.fail("the command waited on the FIFO")
    assert res.returncode == 2
    line = one_error_line(res.stderr)
    assert line.startswith("error: PIPE: file: expected a regular file") and "FIFO" in line, line


@pytest.mark.parametrize("args", [["simulate", "adir", "--out", "x.h5", "--seed", "1"],
                                  ["fit", "adir", "--out", "x.json"], ["inspect", "adir"],
                                  ["report", "adir"], ["plan", "adir"], ["predict", "adir"],
                                  ["import", "adir", "--meta", "adir", "--out", "x.h5"]],
                         ids=lambda a: a[0])
def test_a_folder_as_input_is_one_line_not_the_usage_text(tmp_path, args):
    (tmp_path / "adir").mkdir()
    run = run_command(tmp_path, args)
    assert run.exit_code == 2
    line = one_error_line(run.stderr)
    if args[0] == "fit":              # fit takes a folder of run files (a joint fit)
        assert line == "error: adir: folder: expected run files (*.h5) in it, found none", line
    else:
        assert line.startswith("error: adir: file: expected"), line
    assert sorted(os.listdir(tmp_path)) == ["adir"]


# == real small filesystems (root only) =========================================================

@pytest.fixture
def small_disk(tmp_path):
    disk = tmpfs(tmp_path / "disk", "1m")
    yield disk
    unmount(disk)


@pytest.fixture
def other_disk(tmp_path):
    disk = tmpfs(tmp_path / "other", "64m")
    yield disk
    unmount(disk)


@pytest.fixture
def read_only_disk(tmp_path):
    disk = tmpfs(tmp_path / "rodisk", "1m", read_only=True)
    yield disk
    unmount(disk)


def cli_process(folder: Path, *args: str) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "fringe.cli", *args], cwd=folder,
                          capture_output=True, text=True, timeout=300)


@pytest.mark.parametrize("command", ["simulate", "import"])
def test_real_full_disk_no_crash(tmp_path, small_disk, command):
    # before: "No space left on device" inside HDF5, tracebacks from every object's clean-up,
    # then a segmentation fault (exit -11) or a hang, and the temporary file left
    scenario_copy(tmp_path, days=0.5)              # 43 200 samples: 1 MB of data and more
    csv_copy(tmp_path, rows=60_000)
    args = {"simulate": ["simulate", "scenario.toml", "--seed", "1"],
            "import": ["import", "table.csv", "--meta", "meta.toml"]}[command]
    res = cli_process(tmp_path, *args, "--out", "disk/run.h5")
    assert res.returncode == 2, res.stderr[-3000:]
    line = one_error_line(res.stderr)
    assert line.startswith("error: disk/run.h5: cannot be written (No space left on device)")
    assert os.listdir(small_disk) == []


def test_real_nearly_full_disk_fit_overwrite_keeps_the_pair(fitted, small_disk):
    for name in ("fit.json", "fit.turns.h5"):
        shutil.copy(fitted / name, small_disk / name)
    free = shutil.disk_usage(small_disk).free
    (small_disk / "ballast").write_bytes(b"\0" * max(free - 8 * 1024, 0))   # 8 kB left
    before = tree(small_disk)
    res = cli_process(fitted, "fit", "run.h5", "--out", "../disk/fit.json", "--overwrite",
                      "--drift", "quadratic")
    assert res.returncode == 2
    assert "No space left on device" in one_error_line(res.stderr)
    assert tree(small_disk) == before and leftovers(small_disk) == []


@pytest.mark.parametrize("command", sorted(READ_ONLY_COMMANDS))
def test_real_read_only_filesystem(tmp_path, fitted, read_only_disk, command):
    folder = tmp_path / "work"
    folder.mkdir()
    _inputs(folder, fitted)
    (folder / "out").rmdir()
    (folder / "out").symlink_to(read_only_disk)
    res = cli_process(folder, *READ_ONLY_COMMANDS[command])
    assert res.returncode == 2
    assert "read-only filesystem" in one_error_line(res.stderr)


def test_real_overwrite_through_a_symlink_to_another_filesystem(tmp_path, fitted, other_disk):
    # before: the temporary file went beside the link's target and the rename back onto the
    # link crossed filesystems (OSError: Invalid cross-device link, a traceback)
    scenario_copy(tmp_path)
    (other_disk / "run.h5").write_bytes(b"old")
    (tmp_path / "link.h5").symlink_to(other_disk / "run.h5")
    res = cli_process(tmp_path, "simulate", "scenario.toml", "--seed", "1", "--out", "link.h5",
                      "--overwrite")
    assert res.returncode == 0, res.stderr
    assert (tmp_path / "link.h5").is_symlink()
    assert (other_disk / "run.h5").read_bytes()[:8] == b"\x89HDF\r\n\x1a\n"   # HDF5 signature
    (other_disk / "fit.json").write_text("{}", encoding="utf-8")
    (fitted / "link.json").symlink_to(other_disk / "fit.json")
    res = cli_process(fitted, "fit", "run.h5", "--out", "link.json", "--overwrite")
    assert res.returncode == 0, res.stderr
    assert (fitted / "link.json").is_symlink()
    assert json.loads((other_disk / "fit.json").read_text())["fringe_format"] == "fit"
    assert leftovers(tmp_path) == []


def test_a_cross_filesystem_rename_is_copied_beside_the_target(tmp_path, monkeypatch):
    # the same path without a second filesystem: the first rename fails with EXDEV
    import fringe.io.outputset as outputset

    real = os.replace
    calls = []

    def replace(src, dst):
        calls.append(dst)
        if len(calls) == 1:
            raise OSError(errno.EXDEV, os.strerror(errno.EXDEV))
        return real(src, dst)

    src, dst = tmp_path / "staged", tmp_path / "target"
    src.write_text("new", encoding="utf-8")
    dst.write_text("old", encoding="utf-8")
    monkeypatch.setattr(outputset.os, "replace", replace)
    outputset._place(src, dst)
    assert dst.read_text(encoding="utf-8") == "new" and leftovers(tmp_path) == []
