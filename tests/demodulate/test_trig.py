"""fringe.demodulate.trig: the vectorised cosine and sine against the C library and mpmath."""

from __future__ import annotations

import mpmath
import numpy as np
import pytest

from fringe.demodulate.trig import REDUCTION_LIMIT_RAD, cos_sin_into

#: One unit in the last place at 1 (2^-52), the agreement asked of every value.
ULP_AT_ONE = 2.0 ** -52


def _ours(x):
    c, s = np.empty_like(x), np.empty_like(x)
    cos_sin_into(x, x.size, c, s)
    return c, s


@pytest.mark.parametrize("span", [np.pi / 4, 4.0, 100.0, 1e4, REDUCTION_LIMIT_RAD, 1e8])
def test_agrees_with_the_c_library(span):
    # the C library's cos and sin (numpy's) are the reference of the kernel before this module
    x = np.random.default_rng(11).uniform(-span, span, 400_000)
    c, s = _ours(x)
    assert np.max(np.abs(c - np.cos(x))) <= ULP_AT_ONE
    assert np.max(np.abs(s - np.sin(x))) <= ULP_AT_ONE


def test_at_the_quadrant_boundaries_and_special_values():
    k = np.arange(-2000, 2001)
    near = np.concatenate([k * (np.pi / 4), np.nextafter(k * (np.pi / 2), np.inf),
                           np.nextafter(k * (np.pi / 2), -np.inf), [0.0, -0.0, 1e-300]])
    c, s = _ours(near)
    assert np.max(np.abs(c - np.cos(near))) <= ULP_AT_ONE
    assert np.max(np.abs(s - np.sin(near))) <= ULP_AT_ONE
    c, s = _ours(np.array([np.nan, np.inf, -np.inf]))
    assert np.isnan(c).all() and np.isnan(s).all()


def test_against_mpmath_at_50_digits():
    # mpmath evaluates the exact cos and sin of each double to 50 digits (the independent
    # reference); both ours and the C library's are within one unit at 1 of it
    mpmath.mp.dps = 50
    x = np.random.default_rng(5).uniform(-1e5, 1e5, 3000)
    c, s = _ours(x)
    exact_c = np.array([float(mpmath.cos(mpmath.mpf(float(v)))) for v in x])
    exact_s = np.array([float(mpmath.sin(mpmath.mpf(float(v)))) for v in x])
    assert np.max(np.abs(c - exact_c)) <= ULP_AT_ONE
    assert np.max(np.abs(s - exact_s)) <= ULP_AT_ONE


def test_only_the_first_m_values_are_written():
    x = np.linspace(0.0, 3.0, 10)
    c, s = np.full(10, 7.0), np.full(10, 7.0)
    cos_sin_into(x, 4, c, s)
    assert np.all(c[4:] == 7.0) and np.all(s[4:] == 7.0)
    np.testing.assert_allclose(c[:4], np.cos(x[:4]), rtol=0, atol=ULP_AT_ONE)
