"""Golden file: ``FitResult.summary()`` of the stored fit example (tests/data/fit_example.json,
made by tests/data/make_fit_example.py), so that a change of the summary's wording or layout
shows as a diff of tests/data/golden/fit_example_summary.txt. FRINGE_UPDATE_GOLDEN=1 rewrites the
file (tests/README.md).

Nothing is masked: the summary is made from the stored file alone (its input path is the relative
name written in the file; no clock time, version or hash is printed).
"""

from __future__ import annotations

import json

from fringe.io.fit_result import FitResult


def test_fit_example_summary_matches_golden(data_dir, golden):
    d = json.loads((data_dir / "fit_example.json").read_text(encoding="utf-8"))
    golden("fit_example_summary.txt", FitResult.from_dict(d).summary() + "\n")
