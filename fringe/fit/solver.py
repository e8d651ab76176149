"""Weighted least squares over per-turn (C, B) pairs (the solver of stages 2 and 3).

Each accepted turn i gives a pair y_i = (C_i, B_i) with a 2 x 2 covariance S_i and design rows
jc_i, jb_i (each of length k: how C_i and B_i depend on the k parameters). The normal equations

    N = sum_i J_iᵀ P_i J_i,   h = sum_i J_iᵀ P_i y_i,   J_i = [jc_i; jb_i],   P_i = S_i^-1,

are accumulated as three weighted Gram matrices (BLAS products over batches of TURN_BATCH
turns): G_cc = sum p00 jc jcᵀ, G_x = sum p01 (jc jbᵀ + jb jcᵀ), G_bb = sum p11 jb jbᵀ, and
likewise three right-hand sides. Kept apart, they give the normal equations of the rescaled
covariances D S_i D (D = diag(d_c, d_b): C and B rows scaled by their own reduced chi^2) without
another pass: N = G_cc / d_c^2 + G_x / (d_c d_b) + G_bb / d_b^2. chi^2 is summed from the
residuals, sum_i r_iᵀ P_i r_i, not from the normal equations (no cancellation when the model
explains nearly all of the data).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from fringe.errors import FitError
from fringe.fit.turn_model import TURN_BATCH
from fringe.linalg import SingularMatrixError, invert_normal

#: provider(slice) -> (jc (m, k), jb (m, k), C (m,), B (m,)) for the turns of the slice.
RowProvider = Callable[[slice], tuple]


@dataclass(frozen=True)
class PairWeights:
    """Per-turn inverse covariances P_i = [[p00, p01], [p01, p11]] (each (n,), 1/units^2)."""

    p00: NDArray
    p01: NDArray
    p11: NDArray

    @classmethod
    def from_cov(cls, cov: NDArray, scale: float = 1.0) -> PairWeights:
        """From per-turn covariances ``scale`` x cov (cov (n, 2, 2), units^2).

        Raises FitError if one is not positive definite.
        """
        c00, c01, c11 = cov[:, 0, 0], 0.5 * (cov[:, 0, 1] + cov[:, 1, 0]), cov[:, 1, 1]
        det = c00 * c11 - c01 * c01
        if np.any(~(c00 > 0)) or np.any(~(det > 0)) or not scale > 0:
            raise FitError("stage 3: a turn's (C, B) covariance is not positive definite")
        det *= scale
        return cls(c11 / det, -c01 / det, c00 / det)

    @property
    def size(self) -> int:
        """Number of turns n."""
        return int(self.p00.size)


@dataclass
class NormalParts:
    """The three weighted Gram matrices (k, k) and right-hand sides (k,) (module docstring)."""

    g_cc: NDArray
    g_x: NDArray
    g_bb: NDArray
    h_c: NDArray
    h_x: NDArray
    h_b: NDArray

    @classmethod
    def zeros(cls, k: int) -> NormalParts:
        """All-zero parts for ``k`` parameters (the start of an accumulation)."""
        return cls(*(np.zeros((k, k)) for _ in range(3)), *(np.zeros(k) for _ in range(3)))

    def add(self, other: NormalParts) -> None:
        """Add ``other``'s matrices and right-hand sides to these, in place."""
        for name in ("g_cc", "g_x", "g_bb", "h_c", "h_x", "h_b"):
            getattr(self, name).__iadd__(getattr(other, name))

    def combine(self, d_c: float = 1.0, d_b: float = 1.0) -> tuple[NDArray, NDArray]:
        """Normal matrix and right-hand side for covariances D S_i D, D = diag(d_c, d_b)."""
        return (self.g_cc / d_c ** 2 + self.g_x / (d_c * d_b) + self.g_bb / d_b ** 2,
                self.h_c / d_c ** 2 + self.h_x / (d_c * d_b) + self.h_b / d_b ** 2)


def batches(n: int, start: int = 0) -> list[slice]:
    """Slices of at most TURN_BATCH turns covering [start, start + n)."""
    return [slice(i, min(i + TURN_BATCH, start + n)) for i in range(start, start + n, TURN_BATCH)]


def normal_parts(provider: RowProvider, w: PairWeights, k: int,
                 span: slice | None = None) -> NormalParts:
    """Accumulate the normal-equation parts over the turns of ``span`` (default: all)."""
    span = span or slice(0, w.size)
    out = NormalParts.zeros(k)
    for sl in batches(span.stop - span.start, span.start):
        jc, jb, c, b = provider(sl)
        p00, p01, p11 = w.p00[sl], w.p01[sl], w.p11[sl]
        cross = (jc * p01[:, None]).T @ jb
        out.add(NormalParts(g_cc=(jc * p00[:, None]).T @ jc, g_x=cross + cross.T,
                            g_bb=(jb * p11[:, None]).T @ jb, h_c=jc.T @ (p00 * c),
                            h_x=jc.T @ (p01 * b) + jb.T @ (p01 * c), h_b=jb.T @ (p11 * b)))
    return out


def solve(normal: NDArray, rhs: NDArray) -> tuple[NDArray, NDArray]:
    """Solution and inverse of the normal equations, by :func:`fringe.linalg.invert_normal`.

    The inversion is equilibrated; FitError if N fails the rank criterion (a fit reports no
    number for an undetermined parameter).
    """
    try:
        inv = invert_normal(normal, null="raise")
    except SingularMatrixError:
        raise FitError("stage 3: singular normal matrix (a free coefficient has no signal in "
                       "this record); fix it or free fewer coefficients") from None
    return inv @ rhs, inv


def fitted(provider: RowProvider, n: int, x: NDArray) -> tuple[NDArray, NDArray]:
    """Model C and B of every turn for parameters x, each (n,)."""
    out_c, out_b = np.empty(n), np.empty(n)
    for sl in batches(n):
        jc, jb, _, _ = provider(sl)
        out_c[sl], out_b[sl] = jc @ x, jb @ x
    return out_c, out_b


def residual_chi2(provider: RowProvider, w: PairWeights, x: NDArray, d_c: float = 1.0,
                  d_b: float = 1.0) -> tuple[float, float, float]:
    """(chi^2, mean r_c^2 / S_cc, mean r_b^2 / S_bb) of the residuals for parameters x.

    chi^2 is for the rescaled covariances D S_i D; S_cc = p11 / det P and S_bb = p00 / det P
    are of the unscaled S.
    """
    chi2 = rc2 = rb2 = 0.0
    for sl in batches(w.size):
        jc, jb, c, b = provider(sl)
        rc, rb = c - jc @ x, b - jb @ x
        p00, p01, p11 = w.p00[sl], w.p01[sl], w.p11[sl]
        chi2 += float(np.sum(p00 * rc * rc / d_c ** 2 + 2 * p01 * rc * rb / (d_c * d_b)
                             + p11 * rb * rb / d_b ** 2))
        det = p00 * p11 - p01 * p01
        rc2 += float(np.sum(rc * rc * det / p11))
        rb2 += float(np.sum(rb * rb * det / p00))
    return chi2, rc2 / w.size, rb2 / w.size


def wls(provider: RowProvider, w: PairWeights, k: int) -> tuple[NDArray, NDArray, float, int]:
    """Weighted least squares: x, formal covariance, chi^2, degrees of freedom (2 n - k)."""
    x, inv = solve(*normal_parts(provider, w, k).combine())
    chi2, _, _ = residual_chi2(provider, w, x)
    return x, inv, chi2, max(2 * w.size - k, 1)


def whitening(cov: NDArray) -> NDArray:
    """Per-turn 2x2 whitening matrices W with W cov Wᵀ = 1 (inverse Cholesky, closed form).

    cov = L Lᵀ with L = [[a, 0], [b, d]], a = sqrt(c00), b = c10/a, d = sqrt(c11 - b^2);
    W = L^-1 = [[1/a, 0], [-b/(a d), 1/d]]. Used where residual vectors are needed (lmfit).
    """
    a = np.sqrt(cov[:, 0, 0])
    b = cov[:, 1, 0] / a
    d2 = cov[:, 1, 1] - b * b
    if np.any(~(a > 0)) or np.any(~(d2 > 0)):
        raise FitError("stage 3: a turn's (C, B) covariance is not positive definite")
    d = np.sqrt(d2)
    w = np.zeros_like(cov)
    w[:, 0, 0] = 1.0 / a
    w[:, 1, 0] = -b / (a * d)
    w[:, 1, 1] = 1.0 / d
    return w


def bootstrap_cov(parts: list[NormalParts], n_boot: int, rng: np.random.Generator,
                  d_c: float = 1.0, d_b: float = 1.0) -> NDArray:
    """Covariance of the solution over resamplings (with replacement) of groups of turns.

    Each group is given by its normal-equation parts.
    """
    normal = np.stack([p.combine(d_c, d_b)[0] for p in parts])
    rhs = np.stack([p.combine(d_c, d_b)[1] for p in parts])
    draws = []
    for _ in range(n_boot):
        pick = rng.integers(0, len(parts), len(parts))
        x, _ = solve(normal[pick].sum(axis=0), rhs[pick].sum(axis=0))
        draws.append(x)
    k = normal.shape[1]
    return np.cov(np.array(draws).T, ddof=1).reshape(k, k)
