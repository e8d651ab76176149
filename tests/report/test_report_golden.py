"""Golden file: the report's Markdown (report.md) of the stored fit example
(tests/data/fit_example.json and .turns.h5, made by tests/data/make_fit_example.py), so that a
change of the report's wording or layout shows as a diff of tests/data/golden/report.md.
FRINGE_UPDATE_GOLDEN=1 rewrites the file (tests/README.md).

``fringe report`` runs on copies of the two files in tmp_path with relative names, so no absolute
path enters the report. Masked, in the Provenance list only (see MASKS):

* the report's creation time: the clock of the run;
* the software of this report: the versions installed on the machine;
* the sha256 of the fit file and of the per-turn file: they are hashes of stored files that change
  whenever make_fit_example.py is run again (HDF5 files are not byte-reproducible across library
  versions) or the JSON is checked out with other line endings; tests/report/test_report.py
  checks the recorded hash against the file itself.

Everything else (the stored fit's own time stamp, versions and run-file hash included) is kept.
"""

from __future__ import annotations

import re
import shutil

from tests.helpers.commands import run_command

MASKS = [
    # (pattern, replacement); each must match exactly once
    (r"(\*\*report created \(UTC\)\*\*: )\S+", r"\1<clock time>"),
    (r"(\*\*software of this report\*\*:)\n(?:  - [^\n]*\n)+", "\\1 <versions installed>\n"),
    (r"(\*\*fit file\*\*: fit_example\.json \(sha256 )`[0-9a-f]{64}`", r"\1`<sha256>`"),
    (r"(\*\*per-turn amplitudes file\*\*: fit_example\.turns\.h5 \(sha256 )`[0-9a-f]{64}`",
     r"\1`<sha256>`"),
]


def _masked(text: str) -> str:
    for pattern, replacement in MASKS:
        text, n = re.subn(pattern, replacement, text)
        assert n == 1, f"mask {pattern!r} matched {n} times in report.md (expected once)"
    return text


def test_report_markdown_matches_golden(data_dir, tmp_path, golden):
    for name in ("fit_example.json", "fit_example.turns.h5"):
        shutil.copy(data_dir / name, tmp_path / name)
    run = run_command(tmp_path, ["report", "fit_example.json", "--out", "out"])
    assert run.exit_code == 0, run.stdout + run.stderr
    golden("report.md", _masked((tmp_path / "out" / "report.md").read_text(encoding="utf-8")))
