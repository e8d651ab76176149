"""The likelihood-ratio limits of fringe.fit.medium_limits on chi^2 surfaces with closed forms.

For chi2(p) = chi2_min + (p - p0)^T C^-1 (p - p0), the region chi2 - chi2_min <= T is an
ellipsoid, and (derived, Cauchy-Schwarz) max n.p = n.p0 + sqrt(T n^T C n); for C = sigma^2 I,
max |P (p + a)| = |P (p0 + a)| + sigma sqrt(T) for P the identity or a pair of orthonormal rows.
The optimiser stops within ftol 1e-10 and the region's 1e-3 slack on T, i.e. at most
sqrt(1.001) - 1 = 5e-4 of the radius: tolerances 1e-3 x radius.
"""

import numpy as np
import pytest

from fringe.fit.medium_limits import DCHI2_95, Region, region_max, speed_limits


def quadratic_region(p0, cov, threshold=DCHI2_95, chi2_min=100.0, starts=()):
    inv = np.linalg.inv(cov)

    def chi2(p):
        d = np.asarray(p) - p0
        return chi2_min + d @ inv @ d

    return Region(chi2, np.asarray(p0, float), chi2_min, threshold, np.linalg.cholesky(cov),
                  tuple(starts))


def test_delta_chi2_is_z95_squared():
    # scipy.stats.norm.ppf(0.95) = 1.6448536269514722 -> 2.7055434540954146 (rtol 1e-12)
    assert DCHI2_95 == pytest.approx(2.7055434540954146, rel=1e-12)


def test_linear_objective_on_an_ellipsoid():
    rng = np.random.default_rng(3)
    a = rng.normal(size=(3, 3))
    cov = a @ a.T + 0.1 * np.eye(3)
    p0, n = np.array([1.0, -2.0, 0.5]), np.array([0.3, -0.8, 0.52])
    value, where = region_max(quadratic_region(p0, cov), lambda p: float(n @ p))
    radius = np.sqrt(DCHI2_95 * n @ cov @ n)
    assert value == pytest.approx(n @ p0 + radius, abs=1e-3 * radius)     # derived (above)


def test_full_and_horizontal_speed_over_times():
    sigma = 0.2
    p0 = np.array([10.0, -20.0, 5.0])
    region = quadratic_region(p0, sigma ** 2 * np.eye(3))
    a = np.array([[-3.0, 18.0, -6.0], [1.0, 1.0, 1.0], [-10.5, 19.0, -5.0]])
    best, upper = speed_limits(region, lambda p: p, a)
    speeds = np.linalg.norm(p0 + a, axis=1)
    radius = sigma * np.sqrt(DCHI2_95)
    assert best == pytest.approx(speeds.max(), rel=1e-12)
    assert upper == pytest.approx((speeds + radius).max(), abs=1e-3 * radius)   # derived
    # horizontal: two orthonormal rows per time (a rotation about z by a time-dependent angle)
    ang = np.array([0.3, 1.2, 2.5])
    rows = np.stack([np.stack([np.cos(ang), np.sin(ang), 0 * ang], -1),
                     np.stack([-np.sin(ang), np.cos(ang), 0 * ang], -1)], axis=1)
    h = np.linalg.norm(np.einsum("nij,nj->ni", rows, p0 + a), axis=1)
    hbest, hupper = speed_limits(region, lambda p: p, a, rows)
    assert hbest == pytest.approx(h.max(), rel=1e-12)
    assert hupper == pytest.approx((h + radius).max(), abs=1e-3 * radius)          # derived


def test_a_second_basin_is_searched():
    # two minima: chi2 = chi2_min + min(|p - p0|^2, |p - p1|^2)/sigma^2; the larger speed lies
    # around p1, reached only from the start p1 (derived: |p1| + sigma sqrt(T))
    sigma, p0, p1 = 0.1, np.array([1.0, 0.0, 0.0]), np.array([-3.0, 0.0, 0.0])

    def chi2(p):
        return 50.0 + min(np.sum((p - p0) ** 2), np.sum((p - p1) ** 2)) / sigma ** 2

    region = Region(chi2, p0, 50.0, DCHI2_95, sigma * np.eye(3), (p1,))
    value, _ = region_max(region, lambda p: float(np.linalg.norm(p)))
    radius = sigma * np.sqrt(DCHI2_95)
    assert value == pytest.approx(3.0 + radius, abs=1e-3 * radius)
    alone, _ = region_max(Region(chi2, p0, 50.0, DCHI2_95, sigma * np.eye(3)),
                          lambda p: float(np.linalg.norm(p)))
    assert alone == pytest.approx(1.0 + radius, abs=1e-3 * radius)
