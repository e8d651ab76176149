"""Allan deviation of fractional-frequency data.

Which function for which data:

* :func:`overlapping_adev` -- the estimator to use for almost everything (inspection of a run,
  noise identification, checks of simulated noise). It uses every second difference of the
  phase and so has the smallest scatter.
* :func:`adev` -- the classic non-overlapping estimator, for comparison with tables or older
  results that quote it.
* :func:`default_averaging_factors` -- the octave-spaced averaging factors both use by default.

Both take fractional-frequency samples ``y`` (dimensionless, one per ``sample_interval_s``),
build the phase (time deviation, seconds) ``x = [0, cumsum(y) * tau0]`` and average squared
second differences of ``x``. Samples that were dropped are given as NaN: every second-difference
term whose window touches a NaN sample is left out (see :func:`overlapping_adev`), and the
result reports how many terms each tau used.

Both return an :class:`AllanResult`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from fringe.errors import ConfigError, check_finite_number

__all__ = ["AllanResult", "adev", "default_averaging_factors", "overlapping_adev"]

#: Second-difference terms summed per block (bounds the scratch memory to a few MB per block).
_BLOCK_TERMS = 1 << 20

_ESTIMATORS = ("overlapping", "non-overlapping")


@dataclass(frozen=True, eq=False)
class AllanResult:
    """Allan deviation of a fractional-frequency series at several averaging times.

    Parameters
    ----------
    tau_s : ndarray of float, shape (k,)
        Averaging times tau = m * tau0, s.
    m : ndarray of int, shape (k,)
        Averaging factors (tau / sample interval).
    adev : ndarray of float, shape (k,)
        Allan deviation sigma_y(tau), dimensionless (NaN where no term was usable).
    adev_err : ndarray of float, shape (k,)
        Simple 1-sigma error bar of ``adev``: adev / sqrt(N_ind), with N_ind the number of
        independent (non-overlapping) second differences: n_terms for the non-overlapping
        estimator, n_terms / m for the overlapping one. This ignores the noise type
        (common practice); for white FM the overlapping estimator scatters less than this, and
        for few terms the confidence interval is asymmetric and wider.
    n_terms : ndarray of int, shape (k,)
        Number of second-difference terms used at each tau.
    sample_interval_s : float
        Sample interval tau0, s.
    n_samples : int
        Number of frequency samples, including missing (NaN) ones.
    n_missing : int
        Number of missing (NaN) frequency samples.
    estimator : str
        ``"overlapping"`` or ``"non-overlapping"``.
    """

    tau_s: NDArray[np.float64]
    m: NDArray[np.int64]
    adev: NDArray[np.float64]
    adev_err: NDArray[np.float64]
    n_terms: NDArray[np.int64]
    sample_interval_s: float
    n_samples: int
    n_missing: int
    estimator: str

    def __post_init__(self):
        arrays = {}
        for name, dtype in (("tau_s", float), ("m", np.int64), ("adev", float),
                            ("adev_err", float), ("n_terms", np.int64)):
            try:
                arr = np.array(getattr(self, name), dtype=dtype)
            except (TypeError, ValueError):
                raise ConfigError(f"allan result: {name}: expected a 1-D numeric array") from None
            if arr.ndim != 1:
                raise ConfigError(f"allan result: {name}: expected a 1-D array, got shape "
                                  f"{arr.shape}")
            arr.setflags(write=False)
            arrays[name] = arr
        k = arrays["tau_s"].size
        for name, arr in arrays.items():
            if arr.size != k:
                raise ConfigError(f"allan result: {name}: expected {k} values (one per tau), "
                                  f"got {arr.size}")
            object.__setattr__(self, name, arr)
        tau0 = check_finite_number(self.sample_interval_s, "allan result", "sample_interval_s",
                                   positive=True)
        object.__setattr__(self, "sample_interval_s", tau0)
        for name in ("n_samples", "n_missing"):
            value = getattr(self, name)
            if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < 0:
                raise ConfigError(f"allan result: {name}: expected an integer >= 0, "
                                  f"got {value!r}")
            object.__setattr__(self, name, int(value))
        if self.estimator not in _ESTIMATORS:
            raise ConfigError(f"allan result: estimator: expected one of {_ESTIMATORS}, "
                              f"got {self.estimator!r}")

    def __repr__(self) -> str:
        if self.tau_s.size:
            span = f"tau {self.tau_s[0]:.4g}..{self.tau_s[-1]:.4g} s"
        else:
            span = "no tau"
        return (f"AllanResult({self.estimator}, {self.tau_s.size} taus, {span}, "
                f"N={self.n_samples}, missing={self.n_missing})")

    def summary(self) -> str:
        """Plain-text table of the result, for a person to read."""
        title = "Overlapping" if self.estimator == "overlapping" else "Non-overlapping"
        lines = [
            f"{title} Allan deviation of {self.n_samples} fractional-frequency samples "
            f"({self.n_missing} missing), tau0 = {self.sample_interval_s:.6g} s",
            f"{'tau_s':>12}  {'adev':>11}  {'1-sigma':>9}  {'n_terms':>9}",
        ]
        for tau, dev, err, n in zip(self.tau_s, self.adev, self.adev_err, self.n_terms,
                                    strict=True):
            lines.append(f"{tau:12.6g}  {dev:11.4e}  {err:9.2e}  {int(n):9d}")
        lines.append("1-sigma: adev/sqrt(independent terms), noise-type independent "
                     "(common practice).")
        return "\n".join(lines)

    def to_dict(self) -> dict:
        """Plain JSON types (lists, floats, ints, str); NaN becomes None."""

        def floats(a):
            return [None if not math.isfinite(v) else float(v) for v in a]

        return {
            "estimator": self.estimator,
            "sample_interval_s": self.sample_interval_s,
            "n_samples": self.n_samples,
            "n_missing": self.n_missing,
            "tau_s": floats(self.tau_s),
            "m": [int(v) for v in self.m],
            "adev": floats(self.adev),
            "adev_err": floats(self.adev_err),
            "n_terms": [int(v) for v in self.n_terms],
        }

    @classmethod
    def from_dict(cls, data: dict) -> AllanResult:
        """Rebuild a result from :meth:`to_dict` output; ConfigError on a missing field."""
        if not isinstance(data, dict):
            raise ConfigError(f"allan result: expected a mapping, got {type(data).__name__}")
        fields = ("estimator", "sample_interval_s", "n_samples", "n_missing", "tau_s", "m",
                  "adev", "adev_err", "n_terms")
        for name in fields:
            if name not in data:
                raise ConfigError(f"allan result: {name}: missing field")

        def floats(name):
            try:
                return np.array([np.nan if v is None else v for v in data[name]], dtype=float)
            except (TypeError, ValueError):
                raise ConfigError(f"allan result: {name}: expected a list of numbers") from None

        return cls(tau_s=floats("tau_s"), m=data["m"], adev=floats("adev"),
                   adev_err=floats("adev_err"), n_terms=data["n_terms"],
                   sample_interval_s=data["sample_interval_s"], n_samples=data["n_samples"],
                   n_missing=data["n_missing"], estimator=data["estimator"])


def default_averaging_factors(n_samples: int) -> NDArray[np.int64]:
    """Octave-spaced averaging factors 1, 2, 4, ... up to ``n_samples // 4``.

    Parameters
    ----------
    n_samples : int
        Number of frequency samples (>= 2). Below 8 samples only m = 1 is returned.

    Returns
    -------
    ndarray of int
        The averaging factors m, ascending.
    """
    if isinstance(n_samples, bool) or not isinstance(n_samples, (int, np.integer)):
        raise ConfigError(f"allan: n_samples: expected an integer, got {n_samples!r}")
    if n_samples < 2:
        raise ConfigError(f"allan: y: expected at least 2 samples, got {n_samples}")
    top = max(1, int(n_samples) // 4)
    return 2 ** np.arange(int(math.log2(top)) + 1, dtype=np.int64)


def overlapping_adev(y: ArrayLike, sample_interval_s: float,
                     m: ArrayLike | None = None) -> AllanResult:
    r"""Overlapping Allan deviation of fractional-frequency samples.

    With phase :math:`x_0 = 0`, :math:`x_{k+1} = x_k + y_k \tau_0` (:math:`N_x = N + 1` values)
    and :math:`\tau = m\tau_0`,

    .. math::

        \sigma_y^2(\tau) = \frac{1}{2\tau^2 (N_x - 2m)}
            \sum_{i=0}^{N_x - 2m - 1} \left(x_{i+2m} - 2x_{i+m} + x_i\right)^2 .

    The mean of ``y`` is removed before the phase is formed; this changes nothing in exact
    arithmetic and avoids cancellation when the offset is large compared with the noise.

    **Missing samples.** A NaN in ``y`` marks a dropped sample. Term *i* equals
    :math:`\tau_0` times the sum of :math:`y_{i+m} \ldots y_{i+2m-1}` minus the sum of
    :math:`y_i \ldots y_{i+m-1}`, so it depends on the frequency samples
    :math:`y_i \ldots y_{i+2m-1}`. Every term whose window contains a NaN sample is excluded;
    the sum is divided by the number of terms kept (reported as ``n_terms``) instead of
    :math:`N_x - 2m`. No gap is bridged or interpolated. A tau at which no term is left gets
    ``adev = NaN`` and ``n_terms = 0``.

    Parameters
    ----------
    y : array_like, shape (N,)
        Fractional-frequency samples, dimensionless, equally spaced; NaN = missing. Not
        modified.
    sample_interval_s : float
        Sample interval :math:`\tau_0`, s (> 0).
    m : array_like of int, optional
        Averaging factors (1 <= m <= N // 2); they are sorted and duplicates dropped. Default
        :func:`default_averaging_factors` (octaves up to N // 4).

    Returns
    -------
    AllanResult
        ``tau_s``, ``adev``, ``adev_err``, ``n_terms`` per averaging factor.

    Raises
    ------
    ConfigError
        ``y`` not 1-D, shorter than 2 samples, containing infinities or only NaN; a bad
        ``sample_interval_s`` or ``m``.

    References
    ----------
    W. J. Riley, *Handbook of Frequency Stability Analysis*, NIST Special Publication 1065
    (2008), section on the overlapping Allan variance, expression in phase data (section
    5.2.4; section number from memory -- verify before citing). IEEE Std 1139-2008,
    definition of the Allan variance.

    Examples
    --------
    >>> import numpy as np
    >>> rng = np.random.default_rng(1)
    >>> res = overlapping_adev(1e-15 * rng.standard_normal(4096), 1.0)
    >>> res.tau_s[:3]
    array([1., 2., 4.])
    """
    yc, bad_cum, tau0, ms, n_missing = _prepare(y, sample_interval_s, m, "overlapping_adev")
    x = _phase(yc, tau0)
    n_x = x.size
    n_terms = np.zeros(ms.size, dtype=np.int64)
    avar = np.full(ms.size, np.nan)
    for j, mm in enumerate(ms):
        total = n_x - 2 * mm
        ssq = 0.0
        used = 0
        for start in range(0, total, _BLOCK_TERMS):
            stop = min(total, start + _BLOCK_TERMS)
            d = x[start + 2 * mm:stop + 2 * mm] - 2.0 * x[start + mm:stop + mm] + x[start:stop]
            if bad_cum is not None:
                ok = bad_cum[start + 2 * mm:stop + 2 * mm] == bad_cum[start:stop]
                d = d[ok]
            ssq += float(np.dot(d, d))
            used += d.size
        n_terms[j] = used
        if used:
            avar[j] = ssq / (2.0 * (mm * tau0) ** 2 * used)
    return _result(ms, tau0, avar, n_terms, n_independent=n_terms / ms,
                   n_samples=yc.size, n_missing=n_missing, estimator="overlapping")


def adev(y: ArrayLike, sample_interval_s: float, m: ArrayLike | None = None) -> AllanResult:
    r"""Non-overlapping Allan deviation of fractional-frequency samples.

    Same phase construction and NaN rule as :func:`overlapping_adev`, but only the second
    differences starting at multiples of m are used:

    .. math::

        \sigma_y^2(\tau) = \frac{1}{2\tau^2 M} \sum_{j=0}^{M-1}
            \left(x_{(j+2)m} - 2x_{(j+1)m} + x_{jm}\right)^2,
        \qquad M = \lfloor N/m \rfloor - 1 ,

    i.e. half the mean squared difference of adjacent, non-overlapping tau-averages of y.
    Terms whose window touches a NaN sample are excluded and M counts only the terms kept.

    Parameters
    ----------
    y : array_like, shape (N,)
        Fractional-frequency samples, dimensionless; NaN = missing. Not modified.
    sample_interval_s : float
        Sample interval :math:`\tau_0`, s (> 0).
    m : array_like of int, optional
        Averaging factors (1 <= m <= N // 2), sorted and de-duplicated. Default
        :func:`default_averaging_factors`.

    Returns
    -------
    AllanResult

    Raises
    ------
    ConfigError
        As :func:`overlapping_adev`.

    References
    ----------
    W. J. Riley, NIST Special Publication 1065 (2008), section on the (non-overlapping) Allan
    variance (section 5.2.2; from memory -- verify before citing). D. W. Allan, Proc. IEEE 54,
    221 (1966).
    """
    yc, bad_cum, tau0, ms, n_missing = _prepare(y, sample_interval_s, m, "adev")
    x = _phase(yc, tau0)
    n_terms = np.zeros(ms.size, dtype=np.int64)
    avar = np.full(ms.size, np.nan)
    for j, mm in enumerate(ms):
        xs = x[::mm]
        d = xs[2:] - 2.0 * xs[1:-1] + xs[:-2]
        if bad_cum is not None:
            bs = bad_cum[::mm]
            d = d[bs[2:] == bs[:-2]]
        n_terms[j] = d.size
        if d.size:
            avar[j] = float(np.dot(d, d)) / (2.0 * (mm * tau0) ** 2 * d.size)
    return _result(ms, tau0, avar, n_terms, n_independent=n_terms.astype(float),
                   n_samples=yc.size, n_missing=n_missing, estimator="non-overlapping")


# --------------------------------------------------------------------------- helpers


def _prepare(y, sample_interval_s, m, name):
    """Validate the inputs of a deviation and prepare them.

    Returns (mean-removed y with NaN -> 0, NaN running count or None, tau0, averaging factors,
    number of NaN samples).
    """
    tau0 = check_finite_number(sample_interval_s, name, "sample_interval_s", positive=True)
    try:
        arr = np.asarray(y, dtype=float)
    except (TypeError, ValueError):
        raise ConfigError(f"{name}: y: expected a 1-D array of numbers") from None
    if arr.ndim != 1:
        raise ConfigError(f"{name}: y: expected a 1-D array, got shape {arr.shape}")
    if arr.size < 2:
        raise ConfigError(f"{name}: y: expected at least 2 samples, got {arr.size}")
    if np.isinf(arr).any():
        raise ConfigError(f"{name}: y: expected finite values or NaN (missing), "
                          f"found {int(np.isinf(arr).sum())} infinite value(s)")
    bad = np.isnan(arr)
    n_missing = int(bad.sum())
    if n_missing == arr.size:
        raise ConfigError(f"{name}: y: all {arr.size} samples are NaN (missing)")
    ms = _check_m(m, arr.size, name)
    if n_missing:
        mean = float(arr[~bad].mean())
        yc = np.where(bad, 0.0, arr - mean)
        bad_cum = np.concatenate(([0], np.cumsum(bad, dtype=np.int64)))
    else:
        yc = arr - float(arr.mean())
        bad_cum = None
    return yc, bad_cum, tau0, ms, n_missing


def _check_m(m, n_samples, name):
    if m is None:
        return default_averaging_factors(n_samples)
    raw = np.atleast_1d(np.asarray(m))
    if raw.ndim != 1 or raw.size == 0:
        raise ConfigError(f"{name}: m: expected a non-empty 1-D list of integers")
    if raw.dtype == bool or not (np.issubdtype(raw.dtype, np.integer)
                                 or np.issubdtype(raw.dtype, np.floating)):
        raise ConfigError(f"{name}: m: expected integers, got {m!r}")
    if np.issubdtype(raw.dtype, np.floating):
        if not np.all(np.isfinite(raw)) or np.any(raw != np.round(raw)):
            raise ConfigError(f"{name}: m: expected integers, got {m!r}")
    ms = np.unique(raw.astype(np.int64))
    if ms[0] < 1:
        raise ConfigError(f"{name}: m: expected averaging factors >= 1, got {int(ms[0])}")
    if ms[-1] > n_samples // 2:
        raise ConfigError(f"{name}: m: averaging factor {int(ms[-1])} too large for "
                          f"{n_samples} samples (expected m <= {n_samples // 2})")
    return ms


def _phase(yc, tau0):
    """Phase x = [0, cumsum(y)] * tau0, s."""
    x = np.empty(yc.size + 1)
    x[0] = 0.0
    np.cumsum(yc, out=x[1:])
    x *= tau0
    return x


def _result(ms, tau0, avar, n_terms, n_independent, n_samples, n_missing, estimator):
    dev = np.sqrt(avar)
    with np.errstate(divide="ignore", invalid="ignore"):
        err = np.where(n_independent > 0, dev / np.sqrt(np.maximum(n_independent, 1e-300)),
                       np.nan)
    return AllanResult(tau_s=ms * tau0, m=ms, adev=dev, adev_err=err, n_terms=n_terms,
                       sample_interval_s=tau0, n_samples=n_samples, n_missing=n_missing,
                       estimator=estimator)
