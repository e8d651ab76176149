"""Tests of fringe.noise.allan.

Published test-suite values, allantools, the white-FM law, the NaN rule.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest

from fringe.errors import ConfigError
from fringe.noise.allan import AllanResult, adev, default_averaging_factors, overlapping_adev

# ---------------------------------------------------------------------------------------------
# (a) The 1000-point test data set of W. J. Riley, "Handbook of Frequency Stability Analysis",
# NIST SP 1065 (2008), section 12.4. Generator: n(i+1) = 16807 n(i) mod 2147483647,
# n(0) = 1234567890, y(i) = n(i) / 2147483647 (SP 1065, p. 107). Expected deviations: SP 1065
# Table 31 (p. 108). The SP 1065 document itself was not available to this project; generator
# and values are as transcribed, identically, in the published test suites of allantools
# (tests/nbs14, citing SP 1065 p. 108 and Riley's "The Calculation of Time Domain Frequency
# Stability", Table III) and of two other independent stability libraries.
# ---------------------------------------------------------------------------------------------

NIST_M = (1, 10, 100)
NIST_ADEV = (2.922319e-01, 9.965736e-02, 3.897804e-02)   # SP 1065 Table 31, ADEV (transcribed)
NIST_OADEV = (2.922319e-01, 9.159953e-02, 3.241343e-02)  # SP 1065 Table 31, OADEV (transcribed)


def nist_1000_point_data() -> np.ndarray:
    n = [1234567890]
    for _ in range(999):
        n.append((16807 * n[-1]) % 2147483647)
    return np.array(n, dtype=float) / 2147483647.0


def assert_printed_digits(value: float, printed: float, digits: int = 7) -> None:
    """|value - printed| <= half a unit in the last printed (7th significant) digit."""
    half_unit = 0.5 * 10.0 ** (math.floor(math.log10(abs(printed))) - (digits - 1))
    assert abs(value - printed) <= half_unit, (value, printed)


def test_nist_generator_first_values():
    n = [1234567890]
    for _ in range(3):
        n.append((16807 * n[-1]) % 2147483647)
    # n(1..3) as printed with the generator (SP 1065 p. 107, as transcribed in allantools'
    # tests/nbs14); exact integers.
    assert n[1:] == [395529916, 1209410747, 633705974]
    y = nist_1000_point_data()
    assert y.size == 1000
    assert y[0] == pytest.approx(0.5748904732, abs=5e-11)  # 1234567890 / 2147483647 (derived)


@pytest.mark.parametrize("m, printed", list(zip(NIST_M, NIST_ADEV, strict=True)))
def test_nist_1000_point_adev(m, printed):
    res = adev(nist_1000_point_data(), 1.0, [m])
    assert_printed_digits(res.adev[0], printed)  # SP 1065 Table 31; tol: half a printed digit
    # floor(N/m) - 1 non-overlapping terms (derived from the estimator definition)
    assert res.n_terms[0] == 1000 // m - 1


@pytest.mark.parametrize("m, printed", list(zip(NIST_M, NIST_OADEV, strict=True)))
def test_nist_1000_point_oadev(m, printed):
    res = overlapping_adev(nist_1000_point_data(), 1.0, [m])
    assert_printed_digits(res.adev[0], printed)  # SP 1065 Table 31; tol: half a printed digit
    assert res.n_terms[0] == 1001 - 2 * m  # N_x - 2m terms (derived from the definition)


# ---------------------------------------------------------------------------------------------
# (b) allantools 2024.06 as reference library (test-only). Its default data_type is 'phase',
# so data_type='freq' is passed explicitly.
# ---------------------------------------------------------------------------------------------

ALLAN_M = np.array([1, 2, 3, 5, 10, 31, 100, 316, 1000, 4000])


def _random_frequency(seed: int, n: int = 20_000) -> np.ndarray:
    rng = np.random.default_rng(seed)
    # white FM + random-walk FM + an offset, so several tau regimes are exercised
    return 3e-3 + rng.standard_normal(n) + 0.02 * np.cumsum(rng.standard_normal(n))


@pytest.mark.parametrize("ours, theirs", [(overlapping_adev, "oadev"), (adev, "adev")])
def test_matches_allantools(ours, theirs):
    allantools = pytest.importorskip("allantools")
    tau0 = 0.01
    y = _random_frequency(3)
    res = ours(y, tau0, ALLAN_M)
    taus, dev, _err, n = getattr(allantools, theirs)(y, rate=1.0 / tau0, data_type="freq",
                                                     taus=ALLAN_M * tau0)
    np.testing.assert_allclose(taus, res.tau_s, rtol=1e-12)
    # allantools 2024.06; tol 1e-12 relative: both sum the same squares in double precision
    np.testing.assert_allclose(res.adev, dev, rtol=1e-12, atol=0)
    np.testing.assert_array_equal(res.n_terms, n)


# ---------------------------------------------------------------------------------------------
# (c) White FM: sigma_y(tau) = sqrt(h0 / (2 tau)), h0 = 2 sigma^2 tau0 for white samples of
# standard deviation sigma (IEEE Std 1139-2008 Table B.2; docs/references.md [R-noise-powerlaw],
# [R-noise-sizing]).
# Band: the relative 1-sigma scatter of the Allan deviation estimate is at most 1/sqrt(N/m)
# (edf >= N/(2m) for white FM with either estimator; Howe, Allan & Barnes 1981 and Lesage &
# Audoin 1973 give about 0.58/sqrt(N/m) overlapping and 0.87/sqrt(M) non-overlapping, from
# memory); we allow 4 times that bound.
# ---------------------------------------------------------------------------------------------


@pytest.mark.parametrize("estimator", [overlapping_adev, adev])
def test_white_fm_law(estimator):
    rng = np.random.default_rng(20240601)
    tau0, sigma, n = 0.5, 2e-15, 2**17
    y = sigma * rng.standard_normal(n)
    h0 = 2.0 * sigma**2 * tau0
    res = estimator(y, tau0)
    ok = res.m <= n // 64
    expected = np.sqrt(h0 / (2.0 * res.tau_s[ok]))
    band = 4.0 / np.sqrt(n / res.m[ok])
    assert np.all(np.abs(res.adev[ok] / expected - 1.0) < band)
    # log-log slope -1/2 (weights N/m; 4-sigma band for independent octave points)
    x, w = np.log(res.tau_s[ok]), n / res.m[ok]
    slope = np.polyfit(x, np.log(res.adev[ok]), 1, w=np.sqrt(w))[0]
    sigma_slope = 1.0 / math.sqrt(np.sum(w * (x - np.average(x, weights=w)) ** 2))
    assert abs(slope + 0.5) < 4.0 * sigma_slope


# ---------------------------------------------------------------------------------------------
# Missing samples (NaN): brute-force reference from the documented rule, written on y.
# ---------------------------------------------------------------------------------------------


def _brute_force(y, m, overlapping):
    """sigma^2 = mean over valid windows of (mean(y[i+m:i+2m]) - mean(y[i:i+m]))^2 / 2."""
    step = 1 if overlapping else m
    terms = []
    for i in range(0, y.size - 2 * m + 1, step):
        w = y[i:i + 2 * m]
        if np.isnan(w).any():
            continue
        terms.append((w[m:].mean() - w[:m].mean()) ** 2)
    return (math.sqrt(0.5 * np.mean(terms)) if terms else math.nan), len(terms)


@pytest.mark.parametrize("overlapping", [True, False])
def test_nan_rule_against_brute_force(overlapping):
    rng = np.random.default_rng(5)
    y = rng.standard_normal(301) + np.linspace(0, 2, 301)
    y[[0, 17, 18, 150, 299]] = np.nan
    before = y.copy()
    func = overlapping_adev if overlapping else adev
    ms = [1, 2, 3, 7, 20, 40]
    res = func(y, 2.0, ms)
    np.testing.assert_array_equal(y, before)  # input not modified
    for k, m in enumerate(ms):
        dev, count = _brute_force(y, m, overlapping)
        assert res.n_terms[k] == count
        assert res.adev[k] == pytest.approx(dev, rel=1e-12, abs=0)  # same sums, other order
    assert res.n_missing == 5 and res.n_samples == 301
    assert np.all(np.isfinite(res.adev))


def test_single_nan_removes_2m_terms():
    y = np.random.default_rng(9).standard_normal(1000)
    y[500] = np.nan
    res = overlapping_adev(y, 1.0, [1, 4, 16])
    # windows of 2m samples containing index 500: exactly 2m of them (derived)
    np.testing.assert_array_equal(res.n_terms, 1001 - 2 * res.m - 2 * res.m)


def test_no_terms_left_gives_nan():
    y = np.ones(12)
    y[::3] = np.nan
    res = overlapping_adev(y, 1.0, [1, 2])
    assert res.n_terms[1] == 0 and math.isnan(res.adev[1]) and math.isnan(res.adev_err[1])


# ---------------------------------------------------------------------------------------------
# Structural properties (derived): invariance under a frequency offset, linear scaling.
# ---------------------------------------------------------------------------------------------


def test_offset_invariance_and_scaling():
    y = np.random.default_rng(1).standard_normal(5000) * 1e-15
    base = overlapping_adev(y, 1.0)
    shifted = overlapping_adev(y + 1e-7, 1.0)  # offset 10^8 times the noise
    np.testing.assert_allclose(shifted.adev, base.adev, rtol=1e-6)  # mean removed first
    scaled = overlapping_adev(3.0 * y, 1.0)
    np.testing.assert_allclose(scaled.adev, 3.0 * base.adev, rtol=1e-12)


def test_default_averaging_factors():
    np.testing.assert_array_equal(default_averaging_factors(1000), 2 ** np.arange(8))
    np.testing.assert_array_equal(default_averaging_factors(8), [1, 2])
    np.testing.assert_array_equal(default_averaging_factors(3), [1])


def test_error_bar_is_simple_estimate():
    y = np.random.default_rng(2).standard_normal(4096)
    res = overlapping_adev(y, 1.0)
    np.testing.assert_allclose(res.adev_err, res.adev / np.sqrt(res.n_terms / res.m))
    res = adev(y, 1.0)
    np.testing.assert_allclose(res.adev_err, res.adev / np.sqrt(res.n_terms))


# ---------------------------------------------------------------------------------------------
# Result object
# ---------------------------------------------------------------------------------------------


def test_result_views_round_trip():
    y = np.random.default_rng(4).standard_normal(1000)
    y[10] = np.nan
    res = overlapping_adev(y, 0.25, [1, 2, 400, 500])
    text = json.dumps(res.to_dict(), allow_nan=False)
    back = AllanResult.from_dict(json.loads(text))
    for name in ("tau_s", "m", "adev", "adev_err", "n_terms"):
        np.testing.assert_array_equal(getattr(back, name), getattr(res, name))
    assert (back.estimator, back.n_samples, back.n_missing, back.sample_interval_s) == (
        "overlapping", 1000, 1, 0.25)
    r = repr(res)
    assert "\n" not in r and len(r) < 120 and "overlapping" in r
    s = res.summary()
    assert "Overlapping Allan deviation" in s and len(s.splitlines()) == 2 + 4 + 1
    with pytest.raises(ValueError):
        res.adev[0] = 1.0  # arrays are read-only
    with pytest.raises(AttributeError):
        res.estimator = "other"  # frozen


def test_from_dict_missing_field():
    data = overlapping_adev(np.arange(10.0), 1.0).to_dict()
    del data["n_terms"]
    with pytest.raises(ConfigError, match="n_terms: missing field"):
        AllanResult.from_dict(data)


# ---------------------------------------------------------------------------------------------
# Bad input: one-line ConfigError naming the field.
# ---------------------------------------------------------------------------------------------


@pytest.mark.parametrize("y, tau0, m, field", [
    (np.zeros((4, 4)), 1.0, None, "y"),
    (np.zeros(1), 1.0, None, "y"),
    (np.array([1.0, np.inf, 2.0, 3.0]), 1.0, None, "y"),
    (np.full(8, np.nan), 1.0, None, "y"),
    (np.zeros(100), 0.0, None, "sample_interval_s"),
    (np.zeros(100), float("nan"), None, "sample_interval_s"),
    (np.zeros(100), 1.0, [0, 1], "m"),
    (np.zeros(100), 1.0, [51], "m"),
    (np.zeros(100), 1.0, [1.5], "m"),
    (np.zeros(100), 1.0, [True], "m"),
])
@pytest.mark.parametrize("func", [overlapping_adev, adev])
def test_bad_input(func, y, tau0, m, field):
    with pytest.raises(ConfigError, match=rf": {field}: ") as info:
        func(y, tau0, m)
    assert "\n" not in str(info.value)
