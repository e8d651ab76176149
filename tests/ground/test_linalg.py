"""fringe.linalg: correlations and the equilibrated normal-matrix inverse.

Each former copy of these operations is kept below, as it read before it moved into
fringe.linalg, and the helper must reproduce its numbers bit for bit on random matrices (the
restructuring changes no number); the math itself is checked against numpy's inverse.
"""

from __future__ import annotations

import numpy as np
import pytest

from fringe.errors import FitError
from fringe.linalg import (
    RCOND,
    SingularMatrixError,
    correlation_from_covariance,
    invert_normal,
)

# ------------------------------------------------------- the former copies (reference only)


def old_report_correlation(covariance):            # fringe/report/tables.py, before
    c = np.asarray(covariance, dtype=float)
    d = np.diag(c)
    s = np.sqrt(np.where(d > 0, d, np.nan))
    rho = c / np.outer(s, s)
    np.fill_diagonal(rho, np.where(d > 0, 1.0, np.nan))
    return rho


def old_plain_correlation(cov):   # rms_solve.RmsSolution.correlation, forecast, stages, before
    s = np.sqrt(np.diag(cov))
    with np.errstate(divide="ignore", invalid="ignore"):
        return cov / np.outer(s, s)


def old_solver_inverse(normal):                     # fringe/fit/solver.py solve, before
    scale = np.sqrt(np.maximum(np.diag(normal), 1e-300))
    nn = normal / np.outer(scale, scale)
    return np.linalg.inv(nn) / np.outer(scale, scale)


def old_onestage_inverse(normal):                   # fringe/fit/onestage.py, before
    scale = np.sqrt(np.maximum(np.diag(normal), 1e-300))
    nn = normal / np.outer(scale, scale)
    eig = np.linalg.eigvalsh(nn)
    if not eig[0] > 1e-12 * eig[-1]:
        raise np.linalg.LinAlgError("singular")
    return np.linalg.inv(nn) / np.outer(scale, scale)


def old_forecast_covariance(f):                     # fringe/plan/forecast.py _covariance
    d = np.sqrt(np.clip(np.diag(f), 0.0, None))
    k = f.shape[0]
    cov = np.full((k, k), np.nan)
    ok = d > 0
    if not ok.any():
        np.fill_diagonal(cov, np.inf)
        return cov
    fn = f[np.ix_(ok, ok)] / np.outer(d[ok], d[ok])
    w, v = np.linalg.eigh(fn)
    good = w > 1e-12 * w.max()
    sub = (v[:, good] / w[good]) @ v[:, good].T / np.outer(d[ok], d[ok])
    loose = np.any(np.abs(v[:, ~good]) > 1e-6, axis=1)
    io = np.flatnonzero(ok)
    cov[np.ix_(io, io)] = sub
    for i in list(io[loose]) + list(np.flatnonzero(~ok)):
        cov[i, :] = cov[:, i] = np.nan
        cov[i, i] = np.inf
    return cov


def random_normal(rng, k, rank=None, spread=8.0):
    """A Gram matrix J^T J with columns of very different scale (10^-spread .. 10^spread)."""
    j = rng.standard_normal((3 * k + 5, rank or k))
    if rank is not None:
        j = j @ rng.standard_normal((rank, k))
    j *= 10.0 ** rng.uniform(-spread, spread, k)
    return j.T @ j


def bitwise_equal(a, b):
    a, b = np.asarray(a), np.asarray(b)
    return a.shape == b.shape and np.array_equal(a.view(np.uint64), b.view(np.uint64))


SEEDS = range(12)


# --------------------------------------------------------------------------- correlations

@pytest.mark.parametrize("seed", SEEDS)
def test_correlation_equals_the_former_copies_bitwise(seed):
    rng = np.random.default_rng(seed)
    cov = np.linalg.inv(random_normal(rng, int(rng.integers(2, 9))))
    assert bitwise_equal(correlation_from_covariance(cov, unit_diagonal=True),
                         old_report_correlation(cov))
    assert bitwise_equal(correlation_from_covariance(cov), old_plain_correlation(cov))


def test_correlation_of_a_forecast_with_unconstrained_parameters():
    # the forecast's covariance: inf variance and NaN covariances where a parameter is loose
    rng = np.random.default_rng(40)
    f = random_normal(rng, 6, rank=4)
    f[:, 5] = f[5, :] = 0.0
    cov = old_forecast_covariance(f)
    assert np.isinf(np.diag(cov)).sum() >= 2
    with np.errstate(invalid="ignore"):
        assert bitwise_equal(correlation_from_covariance(cov), old_plain_correlation(cov))


def test_correlation_values_and_undefined_entries():
    cov = np.array([[4.0, 1.0, 0.0], [1.0, 1.0, 0.0], [0.0, 0.0, 0.0]])
    rho = correlation_from_covariance(cov, unit_diagonal=True)
    assert rho[0, 1] == rho[1, 0] == 0.5          # 1 / (2 x 1), derived
    assert rho[0, 0] == rho[1, 1] == 1.0
    assert np.all(np.isnan(rho[2])) and np.all(np.isnan(rho[:, 2]))   # zero variance
    # a negative variance: NaN, and no RuntimeWarning (pytest turns warnings into errors)
    rho = correlation_from_covariance([[-1.0, 0.0], [0.0, 1.0]])
    assert np.isnan(rho[0, 0]) and np.isnan(rho[0, 1]) and rho[1, 1] == 1.0


def test_correlation_diagonal_is_the_plain_quotient_by_default():
    # c / sqrt(c)^2 is not always exactly 1 in binary: e.g. c = 3 (derived: sqrt(3)^2 rounds
    # to 2.9999999999999996)
    rho = correlation_from_covariance([[3.0]])
    assert rho[0, 0] == 3.0 / np.sqrt(3.0) ** 2 and rho[0, 0] != 1.0
    assert correlation_from_covariance([[3.0]], unit_diagonal=True)[0, 0] == 1.0


# ------------------------------------------------------------------ normal-matrix inverse

@pytest.mark.parametrize("seed", SEEDS)
def test_full_rank_inverse_equals_the_former_copies_bitwise(seed):
    rng = np.random.default_rng(100 + seed)
    n = random_normal(rng, int(rng.integers(1, 12)))
    inv = invert_normal(n)
    assert bitwise_equal(inv, old_solver_inverse(n))
    assert bitwise_equal(inv, old_onestage_inverse(n))
    h = rng.standard_normal(n.shape[0])
    assert bitwise_equal(inv @ h, old_solver_inverse(n) @ h)


@pytest.mark.parametrize("seed", SEEDS)
def test_drop_mode_equals_the_former_forecast_bitwise(seed):
    rng = np.random.default_rng(200 + seed)
    k = int(rng.integers(2, 10))
    n = random_normal(rng, k, rank=int(rng.integers(1, k + 1)))
    if seed % 3 == 0:
        n[:, 0] = n[0, :] = 0.0                   # a parameter with no information at all
    assert bitwise_equal(invert_normal(n, null="drop"), old_forecast_covariance(n))


def test_drop_mode_without_any_information():
    cov = invert_normal(np.zeros((3, 3)), null="drop")
    assert np.all(np.isinf(np.diag(cov))) and np.isnan(cov[0, 1])


def test_full_rank_inverse_is_the_inverse():
    rng = np.random.default_rng(7)
    n = random_normal(rng, 6, spread=3.0)
    # equilibration does not change the inverse beyond rounding: rtol set by cond(E) ~ 1e3 x eps
    np.testing.assert_allclose(invert_normal(n), np.linalg.inv(n), rtol=1e-9, atol=0)


@pytest.mark.parametrize("spoil", ["rank", "zero column", "nan"])
def test_raise_mode_refuses_a_rank_deficient_matrix(spoil):
    rng = np.random.default_rng(3)
    n = random_normal(rng, 5, rank=4 if spoil == "rank" else None)
    if spoil == "zero column":
        n[:, 2] = n[2, :] = 0.0
    elif spoil == "nan":
        n[1, 1] = np.nan
    with pytest.raises(SingularMatrixError):
        invert_normal(n)
    with pytest.raises(np.linalg.LinAlgError):        # the error is a numpy LinAlgError too
        invert_normal(n)


def test_the_rank_criterion_sits_at_rcond():
    # equilibrated E = [[1, 1 - e], [1 - e, 1]] has eigenvalues e and 2 - e (derived): full rank
    # for e / (2 - e) > RCOND, i.e. e = 4 RCOND passes and e = RCOND / 4 does not
    def pair(e, scale=1.0):
        return np.array([[1.0, 1.0 - e], [1.0 - e, 1.0]]) * np.outer([1.0, scale], [1.0, scale])

    assert np.isfinite(invert_normal(pair(4 * RCOND))).all()
    with pytest.raises(SingularMatrixError):
        invert_normal(pair(RCOND / 4))
    # the scale of a parameter does not matter (the criterion is on the equilibrated matrix)
    assert np.isfinite(invert_normal(pair(0.5, scale=1e-20))).all()
    assert np.isfinite(invert_normal(np.diag([1.0, 1e-30]))).all()


def test_empty_matrix_and_bad_mode():
    assert invert_normal(np.zeros((0, 0))).shape == (0, 0)
    with pytest.raises(ValueError, match="null"):
        invert_normal(np.eye(2), null="ignore")


def test_stage3_solver_turns_a_singular_matrix_into_a_fit_error():
    from fringe.fit.solver import solve

    n = np.ones((3, 3))
    with pytest.raises(FitError, match="singular normal matrix"):
        solve(n, np.ones(3))
