"""Time spans the time scales and the ephemeris do not cover reliably (frames.time_span_cautions).

References: ERFA's ``dat`` flags a year before 1960 or more than five years after its table's
release as 'dubious' and returns TAI - UTC = 0 before 1960; ERFA's ``epv00`` flags dates outside
1900-2100 (docs/references.md [R-lib-erfa-leap], [R-lib-erfa-epv00]; measured, pyerfa 2.0.1.5).
"""

from __future__ import annotations

import warnings

import erfa
import numpy as np
import pytest

from fringe.errors import TimeScaleWarning
from fringe.frames import Epoch, era_rad, leap_table_last_year, time_span_cautions

YEAR_S = 365.25 * 86400.0


def _codes(utc: str, last_s: float) -> list[str]:
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", TimeScaleWarning)
        return [c.code for c in time_span_cautions(Epoch(utc), 0.0, last_s)]


@pytest.mark.parametrize("utc, last_s, codes", [
    ("2027-03-10T00:00:00Z", 12 * 86400.0, []),
    ("1950-06-01T00:00:00Z", 86400.0, ["utc-before-1960"]),
    ("1959-12-30T00:00:00Z", 5 * 86400.0, ["utc-before-1960"]),
    ("2031-05-01T00:00:00Z", 86400.0, ["leap-table-range"]),
    ("2027-06-01T00:00:00Z", 3 * YEAR_S, ["leap-table-range"]),     # reaches 2030
    ("1890-01-01T00:00:00Z", 86400.0, ["utc-before-1960", "ephemeris-range"]),
    ("2100-06-01T00:00:00Z", 86400.0, ["leap-table-range", "ephemeris-range"]),
], ids=["2027", "1950", "crosses-1960", "2031", "runs-into-2030", "1890", "2100"])
def test_time_span_cautions(utc, last_s, codes):
    assert _codes(utc, last_s) == codes


def test_leap_table_last_year_is_erfa_s_dubious_limit():
    # [R-lib-erfa-leap]: years up to 2028 convert silently, from 2029 on 'dubious year'
    last = leap_table_last_year()
    with warnings.catch_warnings():
        warnings.simplefilter("error", erfa.ErfaWarning)
        erfa.dat(last, 12, 31, 0.0)                       # silent
        with pytest.raises(erfa.ErfaWarning, match="dubious year"):
            erfa.dat(last + 1, 1, 1, 0.0)


def test_before_1960_utc_is_taken_as_ut():
    # ERFA's dat is 0 before 1960 ([R-lib-erfa-leap]): TAI = UTC, and UT1 = UTC + dUT1, so the
    # Earth rotation angle is ERFA's era00 of the calendar date as UT1 (pyerfa reference).
    ep = Epoch("1950-06-01T06:00:00Z", dut1_s=0.2)
    t = np.array([0.0, 3600.0])
    with pytest.warns(TimeScaleWarning, match="before 1960 UTC is taken as UT"):
        assert ep.tai_minus_utc_s == 0.0
        got = era_rad(ep, t)
    jd1, jd2 = erfa.cal2jd(1950, 6, 1)
    want = erfa.era00(jd1, jd2 + (6 * 3600.0 + 0.2 + t) / 86400.0)
    # float64 two-part JDs: ~1e-11 rad (eps x 2.4e6 d x 2 pi); tolerance 1e-9 rad
    assert np.max(np.abs(np.angle(np.exp(1j * (got - want))))) < 1e-9


@pytest.mark.parametrize("t_s,codes", [
    (1e14, {"leap-table-range", "ephemeris-range"}),         # about 3 million years on
    (-1e14, {"utc-before-1960", "ephemeris-range"}),         # as far back
])
def test_times_beyond_erfa_calendar_give_cautions_not_an_erfa_error(t_s, codes):
    # erfa.jd2cal refuses JD below -68569.5 or above 1e9 (ERFA's jd2cal, its Note 1); the
    # cautions need the year only, here far outside every range either way
    epoch = Epoch("2027-02-03T00:00:00Z")
    first, last = min(0.0, t_s), max(0.0, t_s)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", TimeScaleWarning)
        assert {c.code for c in time_span_cautions(epoch, first, last)} == codes


def test_erfa_status_is_read_without_the_warnings_state():
    """The ERFA statuses come from pyerfa's ufuncs, not from Python's warnings (one state per
    process): asking leaves nothing in a recorder, and the answer is the wrapper's."""
    from fringe.frames import _erfa_call, _flagged

    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        assert _flagged(erfa.epv00, 2378496.5, 0.0)           # 1800: outside 1900-2100
        assert not _flagged(erfa.epv00, 2461000.5, 0.0)       # 2025
        assert _flagged(erfa.dat, 1950, 1, 1, 0.0)           # before 1960: dubious year
    assert caught == []
    with pytest.warns(erfa.ErfaWarning):                        # the wrapper agrees
        erfa.epv00(2378496.5, 0.0)
    with pytest.raises(erfa.ErfaError, match="bad month"):      # an error status still raises
        _erfa_call(erfa.dtf2d, "UTC", 2027, 13, 1, 0, 0, 0.0)


def test_recorded_time_cautions_are_silenced_in_this_thread_only():
    """time_cautions_recorded() silences the time-scale warnings of its own thread: a fit in
    another thread still warns, and the main thread's warnings are left as they were."""
    import threading

    from fringe.frames import time_cautions_recorded

    inside, outside = threading.Event(), threading.Event()
    seen = {}

    def recording():
        with time_cautions_recorded():
            inside.set()
            outside.wait(10)
            seen["recording"] = Epoch("1955-02-03T00:00:00Z").tt_jd(np.array([0.0]))

    t = threading.Thread(target=recording)
    with warnings.catch_warnings():
        warnings.simplefilter("error", TimeScaleWarning)
        t.start()
        inside.wait(10)                     # the other thread is inside its context now
        with pytest.warns(TimeScaleWarning, match="leap-second table"):
            Epoch("1955-02-03T00:00:00Z").tt_jd(np.array([0.0]))
        outside.set()
        t.join()                            # its conversion raised no TimeScaleWarning error
    assert "recording" in seen
