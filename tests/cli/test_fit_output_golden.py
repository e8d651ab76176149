"""Golden file: what ``fringe fit`` prints for the small simulated run (``small_fit`` in
tests/conftest.py), so that a change of its wording or layout shows as a diff of
tests/data/golden/fit_output.txt. FRINGE_UPDATE_GOLDEN=1 rewrites the file (tests/README.md).

Nothing is masked. The command runs in the run's folder with relative file names, so it prints no
absolute path, and it prints no clock time, software version or file hash. The coefficients are
fitted numbers printed to 4 significant digits (σ to 3); the fit itself is meant to stay
bit-identical, so a changed digit here is a changed number, to be explained in review.
"""

from __future__ import annotations

STDERR_MARK = "--- stderr ---\n"


def test_fit_output_matches_golden(small_fit, golden):
    # stdout (the summary and the files written), then the fit's warnings as printed on stderr
    golden("fit_output.txt", small_fit.stdout + STDERR_MARK + small_fit.stderr)
