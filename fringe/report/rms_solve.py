"""Solve the three RMS combinations for the Mansouri-Sexl alpha, beta, delta individually.

A rotation experiment measures P_MM = delta - beta + 1/2 (Michelson-Morley type); a
Kennedy-Thorndike experiment measures P_KT = beta - alpha - 1 and an Ives-Stilwell experiment
P_IS = alpha + 1/2 (docs/references.md [R-RMS-tests], convention C13). With the deviations from
special relativity (SR: alpha = -1/2, beta = 1/2, delta = 0)

    d_alpha = alpha + 1/2,  d_beta = beta - 1/2,  d_delta = delta,

the combinations are P_IS = d_alpha, P_KT = d_beta - d_alpha, P_MM = d_delta - d_beta, so

    d_alpha = P_IS,  d_beta = P_KT + P_IS,  d_delta = P_MM + P_KT + P_IS.

The deviations are the offsets alpha_M, beta_M, delta_M of the other convention in use
(Mattingly 2005, sec. "Robertson-Mansouri-Sexl framework": alpha_M = alpha + 1/2,
beta_M = beta - 1/2, delta_M = delta); its combinations delta_M - beta_M, beta_M - alpha_M and
alpha_M are the same numbers, so inputs quoted in either convention need no conversion. Papers
that quote beta - delta - 1/2 quote -P_MM: change the sign before passing it here.

The inputs are taken as independent, so the covariance is A diag(sigma^2) A^T with the matrix A
of the map above. Use :func:`solve_rms`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from fractions import Fraction

import numpy as np
from numpy.typing import NDArray

from fringe.errors import ConfigError
from fringe.linalg import correlation_from_covariance

__all__ = ["COMBINATION_NAMES", "DEVIATION_NAMES", "FORWARD_MATRIX", "INVERSE_MATRIX",
           "RmsSolution", "SR_VALUES", "combinations_from_deviations", "solve_rms"]

#: Order of the inputs: P_MM, P_KT, P_IS.
COMBINATION_NAMES = ("delta - beta + 1/2", "beta - alpha - 1", "alpha + 1/2")
#: Order of the outputs: deviations of alpha, beta, delta from their SR values.
DEVIATION_NAMES = ("alpha + 1/2", "beta - 1/2", "delta")
#: Special-relativity values of (alpha, beta, delta) (C13).
SR_VALUES = (Fraction(-1, 2), Fraction(1, 2), Fraction(0))

#: P = FORWARD_MATRIX @ d, rows (MM, KT, IS), columns (d_alpha, d_beta, d_delta).
FORWARD_MATRIX = ((0, -1, 1), (-1, 1, 0), (1, 0, 0))
#: d = INVERSE_MATRIX @ P, the exact inverse of FORWARD_MATRIX.
INVERSE_MATRIX = ((0, 0, 1), (0, 1, 1), (1, 1, 1))


@dataclass(frozen=True, eq=False)
class RmsSolution:
    """alpha, beta, delta from the three RMS combinations (dimensionless).

    Parameters
    ----------
    inputs : tuple of float, (3,)
        P_MM, P_KT, P_IS as given.
    input_sigmas : tuple of float, (3,)
        Their 1-sigma uncertainties.
    deviations : tuple of float, (3,)
        alpha + 1/2, beta - 1/2, delta (zero in SR), rounded once from the exact result.
    exact_deviations : tuple of Fraction, (3,)
        The same, exact rationals computed from the binary values of the inputs.
    covariance : ndarray, (3, 3)
        Covariance of the deviations (independent inputs).
    sources : tuple of str, (3,)
        Where each input came from (e.g. "this fit", "--kt").
    """

    inputs: tuple[float, float, float]
    input_sigmas: tuple[float, float, float]
    deviations: tuple[float, float, float]
    exact_deviations: tuple[Fraction, Fraction, Fraction]
    covariance: NDArray[np.float64]
    sources: tuple[str, str, str] = ("this fit", "Kennedy-Thorndike input",
                                     "Ives-Stilwell input")

    @property
    def sigmas(self) -> tuple[float, float, float]:
        """1-sigma uncertainties of the deviations (sqrt of the covariance diagonal)."""
        return tuple(float(math.sqrt(v)) for v in np.diag(self.covariance))

    @property
    def parameters(self) -> tuple[float, float, float]:
        """alpha, beta, delta themselves (SR value + deviation)."""
        return tuple(float(sr + d) for sr, d in zip(SR_VALUES, self.exact_deviations, strict=True))

    @property
    def correlation(self) -> NDArray[np.float64]:
        """Correlation matrix of the deviations (NaN where a variance is zero).

        See :func:`fringe.linalg.correlation_from_covariance`.
        """
        return correlation_from_covariance(self.covariance)

    def to_dict(self) -> dict:
        """Plain JSON types."""
        return {
            "inputs": {n: {"value": v, "sigma": s, "source": src} for n, v, s, src in
                       zip(COMBINATION_NAMES, self.inputs, self.input_sigmas, self.sources,
                           strict=True)},
            "deviations": {n: {"value": v, "sigma": s} for n, v, s in
                           zip(DEVIATION_NAMES, self.deviations, self.sigmas, strict=True)},
            "parameters": dict(zip(("alpha", "beta", "delta"), self.parameters, strict=True)),
            "covariance": {"names": list(DEVIATION_NAMES),
                           "matrix": [[float(x) for x in row] for row in self.covariance]},
            "convention": "Mansouri-Sexl alpha, beta, delta (SR: -1/2, 1/2, 0); deviations "
                          "equal the offsets alpha_M, beta_M, delta_M of the other convention",
        }

    def summary(self) -> str:
        """Plain text for a person."""
        lines = ["RMS parameters from three independent combinations (deviations from SR):"]
        for n, v, s in zip(DEVIATION_NAMES, self.deviations, self.sigmas, strict=True):
            lines.append(f"  {n:>12} = {v: .4e} +- {s:.2e}")
        return "\n".join(lines)


def _pair(x, name: str) -> tuple[float, float]:
    try:
        value, sigma = x
    except (TypeError, ValueError):
        raise ConfigError(f"rms combination {name}: expected (value, sigma), got {x!r}") from None
    out = []
    for field, v in (("value", value), ("sigma", sigma)):
        if isinstance(v, bool) or not isinstance(v, (int, float, np.floating, np.integer)):
            raise ConfigError(f"rms combination {name}: {field}: expected a number, got {v!r}")
        f = float(v)
        if not math.isfinite(f):
            raise ConfigError(f"rms combination {name}: {field}: expected a finite number, "
                              f"got {f!r}")
        out.append(f)
    if out[1] < 0:
        raise ConfigError(f"rms combination {name}: sigma: expected a number >= 0, "
                          f"got {out[1]!r}")
    return out[0], out[1]


def combinations_from_deviations(deviations) -> tuple:
    """P_MM, P_KT, P_IS from the deviations (alpha + 1/2, beta - 1/2, delta).

    Works on floats or on exact :class:`~fractions.Fraction` values (then exactly).
    """
    return tuple(sum(c * d for c, d in zip(row, deviations, strict=True)) for row in FORWARD_MATRIX)


def solve_rms(mm: tuple[float, float], kt: tuple[float, float], is_: tuple[float, float], *,
              sources: tuple[str, str, str] | None = None) -> RmsSolution:
    r"""alpha, beta, delta (as deviations from SR) from P_MM, P_KT and P_IS.

    .. math::

        \Delta\alpha = P_{IS},\quad \Delta\beta = P_{KT} + P_{IS},\quad
        \Delta\delta = P_{MM} + P_{KT} + P_{IS},\qquad
        \mathrm{Cov} = A\,\mathrm{diag}(\sigma_{MM}^2, \sigma_{KT}^2, \sigma_{IS}^2)\,A^T

    Parameters
    ----------
    mm : (float, float)
        delta - beta + 1/2 and its 1-sigma uncertainty (dimensionless).
    kt : (float, float)
        beta - alpha - 1 and its 1-sigma uncertainty.
    is_ : (float, float)
        alpha + 1/2 and its 1-sigma uncertainty.
    sources : tuple of str, optional
        Labels of the three inputs for the report.

    Returns
    -------
    RmsSolution

    References
    ----------
    docs/references.md [R-RMS-tests] (the combinations) and [R-RMS-transformation] (the other
    convention; Mattingly, Living Rev. Relativity 8, 5 (2005), sec. "Robertson-Mansouri-Sexl
    framework").

    Examples
    --------
    >>> sol = solve_rms((1e-10, 2e-10), (3e-8, 4e-8), (5e-8, 1e-8))
    >>> [f"{d:.3g}" for d in sol.deviations]
    ['5e-08', '8e-08', '8.01e-08']
    """
    inputs = (_pair(mm, "delta - beta + 1/2"), _pair(kt, "beta - alpha - 1"),
              _pair(is_, "alpha + 1/2"))
    values = tuple(v for v, _ in inputs)
    sigmas = tuple(s for _, s in inputs)
    exact_in = [Fraction(v) for v in values]
    exact = tuple(sum(c * p for c, p in zip(row, exact_in, strict=True)) for row in INVERSE_MATRIX)
    a = np.array(INVERSE_MATRIX, dtype=float)
    cov = a @ np.diag(np.square(sigmas)) @ a.T
    cov.setflags(write=False)
    kw = {} if sources is None else {"sources": tuple(str(s) for s in sources)}
    return RmsSolution(inputs=values, input_sigmas=sigmas,
                       deviations=tuple(float(d) for d in exact), exact_deviations=exact,
                       covariance=cov, **kw)
