"""The run file's value checks: the one-pass common case refuses exactly what the full checks do.

Each check of :mod:`fringe.io.runformat` first tries a cheap test of the common case (one
comparison pass or two reductions) and otherwise runs its element-wise checks. These tests run
both on hostile arrays and require the same outcome: the same return value, or the same
refusal with the same message. The full checks are reached by calling the functions on arrays
that fail the cheap test, so here they are rebuilt from the element-wise rules (derived from
the functions' docstrings, [R-labels]) to compare with.
"""

from __future__ import annotations

import numpy as np
import pytest

from fringe.io.runformat import (
    AZIMUTH_MAX_RAD,
    Invalid,
    check_azimuth_values,
    check_signal_values,
    check_time_values,
    check_weight_values,
)

NAN, INF = float("nan"), float("inf")


def _outcome(fn, *args, **kw):
    try:
        return ("ok", fn(*args, **kw))
    except Invalid as exc:
        return ("refused", exc.obj, exc.expected)


def _first_bad_time(t, prev):
    """Index of the first value the element-wise rule refuses (None: all accepted)."""
    for i, v in enumerate(t):
        if not np.isfinite(v):
            return i
    for i, v in enumerate(t):
        before = prev if i == 0 else t[i - 1]
        if before is not None and not v > before:
            return i
    return None


TIMES = [
    np.arange(10.0),
    np.array([5.0]),
    np.array([]),
    np.array([0.0, 1.0, NAN, 3.0]),
    np.array([0.0, 1.0, 1.0, 3.0]),
    np.array([0.0, 2.0, 1.0, 3.0]),
    np.array([NAN, 1.0, 2.0]),
    np.array([0.0, 1.0, INF]),
    np.array([-INF, 0.0, 1.0]),
    np.array([0.0, 1.0, 2.0, NAN]),
    np.array([3.0, 2.0, 1.0]),
]


@pytest.mark.parametrize("t", TIMES, ids=range(len(TIMES)))
@pytest.mark.parametrize("prev", [None, -1.0, 0.0, 7.0])
def test_time_check_matches_the_element_wise_rule(t, prev):
    got = _outcome(check_time_values, t, 100, prev)
    bad = _first_bad_time(t, prev)
    if bad is None:
        assert got == ("ok", float(t[-1]) if t.size else prev)
    else:
        assert got[0] == "refused" and got[1] == "samples/time"
        assert got[2].endswith(f"at index {100 + bad}") or f"at index {100 + bad} " in got[2]


AZIMUTHS = [
    np.linspace(0, 6.2, 50),
    np.array([0.0, NAN, 1.0]),
    np.array([0.0, 1.0, INF]),
    np.array([-INF, 1.0]),
    np.array([AZIMUTH_MAX_RAD, -AZIMUTH_MAX_RAD]),
    np.array([0.0, np.nextafter(AZIMUTH_MAX_RAD, INF)]),
    np.array([-np.nextafter(AZIMUTH_MAX_RAD, INF), 0.0]),
    np.array([1e300, NAN]),
]


@pytest.mark.parametrize("az", AZIMUTHS, ids=range(len(AZIMUTHS)))
@pytest.mark.parametrize("per_unit", [1.0, np.pi / 180])
def test_azimuth_check_matches_the_element_wise_rule(az, per_unit):
    bad = [i for i, v in enumerate(az)
           if not np.isfinite(v) or abs(v) * per_unit > AZIMUTH_MAX_RAD]
    got = _outcome(check_azimuth_values, az, 3, rad_per_unit=per_unit)
    if not bad:
        assert got == ("ok", None)
    else:
        nonfinite = [i for i in bad if not np.isfinite(az[i])]
        first = nonfinite[0] if nonfinite else bad[0]
        assert got[0] == "refused" and got[2].endswith(f"at index {3 + first}")


@pytest.mark.parametrize("s", [np.ones(5), np.array([1.0, NAN]), np.array([NAN, INF]),
                               np.array([1.0, -INF, NAN]), np.array([NAN, NAN]),
                               np.array([1.0, 2.0, INF])], ids=range(6))
def test_signal_check_matches_the_element_wise_rule(s):
    bad = [i for i, v in enumerate(s) if np.isinf(v)]
    got = _outcome(check_signal_values, s, 0)
    assert got == ("ok", None) if not bad else got[2].endswith(f"at index {bad[0]}")


@pytest.mark.parametrize("w", [np.ones(5), np.array([1.0, NAN]), np.array([0.0, 1.0]),
                               np.array([1.0, -2.0]), np.array([1.0, INF]),
                               np.array([NAN, 0.0]), np.array([NAN])], ids=range(7))
def test_weight_check_matches_the_element_wise_rule(w):
    bad = [i for i, v in enumerate(w) if not np.isnan(v) and not (v > 0 and np.isfinite(v))]
    got = _outcome(check_weight_values, w, 0)
    assert got == ("ok", None) if not bad else got[2].endswith(f"at index {bad[0]}")


def test_float32_signal_and_integer_time_take_the_same_rules():
    assert check_time_values(np.arange(4), 0, None) == 3.0
    with pytest.raises(Invalid, match="repeated at index 2"):
        check_time_values(np.array([0, 1, 1]), 0, None)
    with pytest.raises(Invalid, match="at index 1"):
        check_signal_values(np.array([0.0, np.inf], np.float32), 0)
