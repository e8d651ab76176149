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
