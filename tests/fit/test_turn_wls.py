"""The per-turn (C, B) weighted least squares of stages 2-3 against a direct dense solution."""

from __future__ import annotations

import numpy as np
import pytest

from fringe.errors import FitError
from fringe.fit.solver import (
    PairWeights,
    bootstrap_cov,
    fitted,
    normal_parts,
    residual_chi2,
    solve,
    whitening,
    wls,
)


def _problem(n=5000, k=4, seed=1):
    rng = np.random.default_rng(seed)
    jc, jb = rng.normal(size=(n, k)), rng.normal(size=(n, k))
    a = rng.uniform(0.5, 2.0, n)
    d = rng.uniform(0.5, 2.0, n)
    rho = rng.uniform(-0.6, 0.6, n)
    cov = np.empty((n, 2, 2))
    cov[:, 0, 0], cov[:, 1, 1] = a * a, d * d
    cov[:, 0, 1] = cov[:, 1, 0] = rho * a * d
    x_true = rng.normal(size=k)
    noise = np.einsum("nij,nj->ni", np.linalg.cholesky(cov), rng.normal(size=(n, 2)))
    c, b = jc @ x_true + noise[:, 0], jb @ x_true + noise[:, 1]
    return jc, jb, c, b, cov


def _dense(jc, jb, c, b, cov):
    """Stacked 2n x k generalised least squares with the block-diagonal inverse covariance."""
    w = whitening(cov)
    a = np.einsum("nij,njk->nik", w, np.stack([jc, jb], axis=1)).reshape(-1, jc.shape[1])
    y = np.einsum("nij,nj->ni", w, np.stack([c, b], axis=1)).ravel()
    x, *_ = np.linalg.lstsq(a, y, rcond=None)
    r = y - a @ x
    return x, np.linalg.inv(a.T @ a), float(r @ r)


def test_gram_solution_equals_dense_generalised_least_squares():
    jc, jb, c, b, cov = _problem()

    def rows(sl):
        return jc[sl], jb[sl], c[sl], b[sl]

    x, inv, chi2, dof = wls(rows, PairWeights.from_cov(cov), jc.shape[1])
    x_ref, inv_ref, chi2_ref = _dense(jc, jb, c, b, cov)
    np.testing.assert_allclose(x, x_ref, rtol=1e-10, atol=1e-12)
    np.testing.assert_allclose(inv, inv_ref, rtol=1e-10, atol=1e-15)
    assert chi2 == pytest.approx(chi2_ref, rel=1e-10) and dof == 2 * c.size - jc.shape[1]
    mc, mb = fitted(rows, c.size, x)
    np.testing.assert_allclose(mc, jc @ x, rtol=1e-12)
    np.testing.assert_allclose(mb, jb @ x, rtol=1e-12)


def test_rescaled_rows_equal_a_fit_with_rescaled_covariances():
    """combine(d_c, d_b) = the normal equations of the covariances D S D, D = diag(d_c, d_b)."""
    jc, jb, c, b, cov = _problem(seed=2)

    def rows(sl):
        return jc[sl], jb[sl], c[sl], b[sl]

    d = np.array([1.3, 0.8])
    parts = normal_parts(rows, PairWeights.from_cov(cov), jc.shape[1])
    x, inv = solve(*parts.combine(*d))
    scaled = cov * np.outer(d, d)
    x_ref, inv_ref, chi2_ref = _dense(jc, jb, c, b, scaled)
    np.testing.assert_allclose(x, x_ref, rtol=1e-10, atol=1e-12)
    np.testing.assert_allclose(inv, inv_ref, rtol=1e-10, atol=1e-15)
    chi2, r_c, r_b = residual_chi2(rows, PairWeights.from_cov(cov), x, *d)
    assert chi2 == pytest.approx(chi2_ref, rel=1e-10)
    assert r_c == pytest.approx(np.mean((c - jc @ x) ** 2 / cov[:, 0, 0]), rel=1e-12)
    assert r_b == pytest.approx(np.mean((b - jb @ x) ** 2 / cov[:, 1, 1]), rel=1e-12)


def test_groups_sum_to_the_whole_and_bootstrap_scatters():
    jc, jb, c, b, cov = _problem(n=5000, seed=3)
    w = PairWeights.from_cov(cov)

    def rows(sl):
        return jc[sl], jb[sl], c[sl], b[sl]

    whole = normal_parts(rows, w, jc.shape[1]).combine()
    groups = [normal_parts(rows, w, jc.shape[1], slice(lo, lo + 50)) for lo in range(0, 5000, 50)]
    np.testing.assert_allclose(sum(g.combine()[0] for g in groups), whole[0], rtol=1e-12)
    np.testing.assert_allclose(sum(g.combine()[1] for g in groups), whole[1], rtol=1e-12)
    boot = bootstrap_cov(groups, 400, np.random.default_rng(4))
    _, inv = solve(*whole)
    # independent rows, 100 groups: the bootstrap variance estimates the formal one with a
    # relative scatter of about sqrt(2/99) = 14 % (groups) and sqrt(2/400) = 7 % (draws), 16 %
    # together (derived, chi-square scatter of a variance estimate); band 50 % ~ 3 sigma
    np.testing.assert_allclose(np.diag(boot), np.diag(inv), rtol=0.5)


def test_covariance_not_positive_definite_is_a_fit_error():
    cov = np.array([[[1.0, 2.0], [2.0, 1.0]]])
    with pytest.raises(FitError, match="not positive definite"):
        PairWeights.from_cov(cov)
    with pytest.raises(FitError, match="not positive definite"):
        whitening(cov)
