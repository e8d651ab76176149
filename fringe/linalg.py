"""Linear algebra the fit, the plan and the report share: correlations and normal equations.

Ground floor of the package (no fringe imports): units-free array functions.

* :func:`correlation_from_covariance` -- rho_ij = C_ij / sqrt(C_ii C_jj) of a covariance matrix
  (the fit's degeneracy check, the plan's correlations, the report's table, figure and
  Robertson-Mansouri-Sexl section).
* :func:`invert_normal` -- the inverse of a normal (or Fisher) matrix N, equilibrated by its
  diagonal, with one rank criterion (:data:`RCOND`). ``null="raise"`` refuses a rank-deficient N
  (a fit must not report numbers for an undetermined parameter); ``null="drop"`` keeps the
  well-determined directions and marks the parameters that lean on a null direction as
  unconstrained (a forecast reports which ones the campaign cannot bound). A least-squares
  solution is then ``invert_normal(n) @ rhs``.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike, NDArray

__all__ = ["NULL_COMPONENT", "RCOND", "SingularMatrixError", "correlation_from_covariance",
           "invert_normal"]

#: Rank criterion: the equilibrated normal matrix is of full rank when its smallest eigenvalue
#: exceeds RCOND times its largest (a reciprocal condition number; 1e-12 leaves about four of
#: double precision's sixteen digits in the inverse -- common practice for such a cut-off).
RCOND = 1e-12

#: ``null="drop"``: a parameter whose component along a null direction (an eigenvector of the
#: equilibrated matrix below the rank criterion) exceeds this in absolute value is unconstrained.
NULL_COMPONENT = 1e-6


class SingularMatrixError(np.linalg.LinAlgError):
    """A normal matrix failed the rank criterion (callers raise their own one-line error)."""


def correlation_from_covariance(covariance: ArrayLike, *, unit_diagonal: bool = False
                                ) -> NDArray[np.float64]:
    """Correlation matrix rho_ij = C_ij / (s_i s_j), s_i = sqrt(C_ii).

    Parameters
    ----------
    covariance : array_like, shape (k, k)
        A covariance matrix (any units; the result is dimensionless). Infinite variances (an
        unconstrained parameter of a forecast) and NaN entries are allowed.
    unit_diagonal : bool
        Set rho_ii to exactly 1 where C_ii > 0 (else rho_ii = C_ii / s_i^2, which may differ from
        1 in the last bit). For display; the default keeps the plain quotient.

    Returns
    -------
    ndarray, shape (k, k)
        NaN in the rows and columns of variances that are zero, negative or NaN; for an infinite
        variance, NaN where the quotient is inf/inf or NaN/inf and 0 where it is finite/inf. No
        floating-point warning is raised.

    Examples
    --------
    >>> correlation_from_covariance([[4.0, 1.0], [1.0, 1.0]])[0, 1]
    0.5
    """
    c = np.asarray(covariance, dtype=float)
    d = np.diag(c)
    s = np.sqrt(np.where(d > 0, d, np.nan))
    with np.errstate(divide="ignore", invalid="ignore"):
        rho = c / np.outer(s, s)
    if unit_diagonal:
        np.fill_diagonal(rho, np.where(d > 0, 1.0, np.nan))
    return rho


def invert_normal(normal: ArrayLike, *, null: str = "raise", rcond: float = RCOND
                  ) -> NDArray[np.float64]:
    """Inverse of a symmetric normal (Fisher) matrix, equilibrated by its diagonal.

    With D = diag(d), d_i = sqrt(N_ii), the equilibrated matrix is E = D^-1 N D^-1 (unit
    diagonal) and N^-1 = D^-1 E^-1 D^-1. N passes the rank criterion when the smallest eigenvalue
    of E exceeds ``rcond`` times its largest; a parameter with N_ii <= 0 carries no information.

    Parameters
    ----------
    normal : array_like, shape (k, k)
        N = Jᵀ W J (units: 1 / parameter_i parameter_j).
    null : {"raise", "drop"}
        ``"raise"``: raise :class:`SingularMatrixError` when N fails the criterion or has a
        non-positive or non-finite diagonal entry; else return the inverse, computed as
        ``inv(E) / outer(d, d)`` (LU). ``"drop"``: never raise; invert E on the span of its
        eigenvectors above the criterion (a pseudo-inverse); a parameter with no information,
        or with a component above :data:`NULL_COMPONENT` along a dropped eigenvector, gets an
        infinite variance and NaN covariances.
    rcond : float
        The criterion's threshold (default :data:`RCOND`).

    Returns
    -------
    ndarray, shape (k, k)
        The inverse (the covariance of the least-squares estimate when N is the weighted normal
        matrix); the solution of N x = h is ``invert_normal(N) @ h``.

    Raises
    ------
    SingularMatrixError
        ``null="raise"`` and N fails the criterion.
    ValueError
        ``null`` is neither ``"raise"`` nor ``"drop"``.

    Examples
    --------
    >>> invert_normal([[4.0, 0.0], [0.0, 0.25]])
    array([[0.25, 0.  ],
           [0.  , 4.  ]])
    """
    if null not in ("raise", "drop"):
        raise ValueError(f"invert_normal: null: expected 'raise' or 'drop', got {null!r}")
    n = np.asarray(normal, dtype=float)
    d = np.sqrt(np.clip(np.diag(n), 0.0, None))
    ok = d > 0
    if null == "raise":
        return _invert_full_rank(n, d, ok, rcond)
    return _invert_dropping_nulls(n, d, ok, rcond)


def _invert_full_rank(n: NDArray, d: NDArray, ok: NDArray, rcond: float) -> NDArray:
    if n.shape[0] == 0:
        return np.zeros((0, 0))
    if not (ok.all() and np.all(np.isfinite(n))):
        raise SingularMatrixError("normal matrix: a diagonal entry is not positive, or an "
                                  "entry is not finite")
    e = n / np.outer(d, d)
    eig = np.linalg.eigvalsh(e)
    if not eig[0] > rcond * eig[-1]:
        raise SingularMatrixError(f"normal matrix: smallest/largest eigenvalue {eig[0]:.3g}/"
                                  f"{eig[-1]:.3g} of the equilibrated matrix is below {rcond:g}")
    try:
        return np.linalg.inv(e) / np.outer(d, d)
    except np.linalg.LinAlgError:                      # pragma: no cover - excluded above
        raise SingularMatrixError("normal matrix: singular") from None


def _invert_dropping_nulls(n: NDArray, d: NDArray, ok: NDArray, rcond: float) -> NDArray:
    k = n.shape[0]
    cov = np.full((k, k), np.nan)
    if not ok.any():
        np.fill_diagonal(cov, np.inf)
        return cov
    e = n[np.ix_(ok, ok)] / np.outer(d[ok], d[ok])
    w, v = np.linalg.eigh(e)
    good = w > rcond * w.max()
    sub = (v[:, good] / w[good]) @ v[:, good].T / np.outer(d[ok], d[ok])
    loose = np.any(np.abs(v[:, ~good]) > NULL_COMPONENT, axis=1)
    io = np.flatnonzero(ok)
    cov[np.ix_(io, io)] = sub
    for i in list(io[loose]) + list(np.flatnonzero(~ok)):
        cov[i, :] = cov[:, i] = np.nan
        cov[i, i] = np.inf
    return cov
