"""CSV import of dates before 1960 (no UTC then: taken as UT) and of times in seconds far out.

References: ERFA's ``dat`` returns TAI - UTC = 0 before 1960 and its first table value at
1960-01-01 (docs/references.md [R-lib-erfa-leap]; the value itself is read from pyerfa below).
"""

from __future__ import annotations

import erfa
import numpy as np
import pytest

from fringe.errors import TimeScaleWarning
from fringe.io.csvimport import import_csv
from fringe.io.runreader import open_run
from tests.io.test_csvimport import HEADER, META, UNITS

ISO = {**META, "units": {**UNITS, "time": "iso8601"}, "epoch_utc": None}


def _times(path) -> np.ndarray:
    with open_run(path) as run:
        return run.read_all(["time"])["time"]


def test_iso_timestamps_before_1960_import_as_ut(tmp_path):
    # before: the default epoch (the first timestamp) failed with a message about an
    # epoch_utc key the metadata did not hold
    csv_path = tmp_path / "old.csv"
    csv_path.write_text(HEADER + "1950-06-01T00:00:00Z,0,0,0\n1950-06-02T00:00:01.5Z,0,0,0\n",
                        encoding="utf-8")
    with pytest.warns(TimeScaleWarning, match="before 1960 .* taken as UT"):
        summary = import_csv(csv_path, tmp_path / "run.h5", **ISO)
    assert summary.epoch_utc == "1950-06-01T00:00:00Z"
    # UT seconds between the stamps, no leap seconds: one day and 1.5 s (exact in float64)
    np.testing.assert_array_equal(_times(tmp_path / "run.h5"), [0.0, 86401.5])


def test_iso_timestamps_across_1960_meet_the_first_table_value(tmp_path):
    csv_path = tmp_path / "cross.csv"
    csv_path.write_text(HEADER + "1959-12-31T23:59:59Z,0,0,0\n1960-01-01T00:00:00Z,0,0,0\n",
                        encoding="utf-8")
    with pytest.warns(TimeScaleWarning, match="taken as UT"):
        import_csv(csv_path, tmp_path / "run.h5", **ISO)
    step = erfa.dat(1960, 1, 1, 0.0)              # pyerfa reference: TAI - UTC at 1960-01-01
    np.testing.assert_allclose(_times(tmp_path / "run.h5"), [0.0, 1.0 + step],
                               rtol=0, atol=1e-9)   # float64 rounding of the day sums


def test_seconds_from_a_1950_epoch_warn(tmp_path):
    # before: times in seconds from a 1950 epoch imported without a word
    csv_path = tmp_path / "sec.csv"
    csv_path.write_text(HEADER + "0,0,0,0\n1,0,0,0\n", encoding="utf-8")
    with pytest.warns(TimeScaleWarning, match="before 1960"):
        import_csv(csv_path, tmp_path / "run.h5", **{**META, "epoch_utc": "1950-06-01T00:00:00Z"})
    np.testing.assert_array_equal(_times(tmp_path / "run.h5"), [0.0, 1.0])


def test_seconds_far_after_the_table_warn(tmp_path):
    csv_path = tmp_path / "late.csv"
    csv_path.write_text(HEADER + "0,0,0,0\n1,0,0,0\n", encoding="utf-8")
    with pytest.warns(TimeScaleWarning, match="leap-second table is reliable"):
        import_csv(csv_path, tmp_path / "run.h5", **{**META, "epoch_utc": "2031-06-01T00:00:00Z"})
