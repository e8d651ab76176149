"""Streamed samples of a :class:`fringe.noise.PowerLawNoise` model (:class:`NoiseStream`).

How each component is generated (tau0 = sample interval; y_k is the average of y over sample k):

* white FM: independent normal y_k with variance h0 / (2 tau0) (the one-sided PSD of white
  samples of variance s^2 is 2 s^2 tau0).
* white PM: independent normal phase x_k with variance f_h h2 / (4 pi^2), y_k = (x_k -
  x_{k-1}) / tau0, the last phase sample carried. The Allan variance is then exactly
  3 f_h h2 / (4 pi^2 tau^2) for every m >= 1.
* random-walk FM: the exact tau0-averages of a Wiener process W with diffusion D = 2 pi^2 hm2
  (Var[W(t+T) - W(t)] = D T): per sample, the increment of W and its integral over the sample
  are drawn jointly (variances D tau0 and D tau0^3 / 3, covariance D tau0^2 / 2) and W is
  carried. The Allan variance is exactly D tau / 3 = (2 pi^2 / 3) hm2 tau.
* flicker FM: a sum of first-order autoregressive (discrete Ornstein-Uhlenbeck) processes
  whose corner frequencies are spaced two per decade (ratio r = sqrt(10)) downward from
  f_top = 0.15 / tau0 until one lies at or below f_lo = 1 / (16 span). A Lorentzian of corner
  f_c and variance v has the one-sided PSD (2 v / (pi f_c)) / (1 + (f / f_c)^2); giving every
  process the variance hm1 ln(r) makes the sum approximate hm1 / f between the corners. The
  top process gets 1.35 times that variance, which compensates the missing corners above
  f_top. Each process starts from its stationary distribution. f_top and the 1.35 were tuned
  numerically: the Allan deviation of the generated process (:meth:`NoiseStream.model_adev`,
  exact) stays within 1.5 % of the ideal sqrt(2 ln 2 hm1) for 1 <= m <= span / (4 tau0)
  (worst near m = 2, about 0.2 % in mid-band); beyond the span it falls off.
"""

from __future__ import annotations

import logging
import math
from collections.abc import Iterator

import numpy as np
from numpy.typing import ArrayLike, NDArray

from fringe.errors import ConfigError, check_finite_number
from fringe.noise.powerlaw import PowerLawNoise

__all__ = ["NoiseStream"]

_log = logging.getLogger(__name__)

#: Flicker-FM bank: corner frequencies per decade.
FLICKER_POLES_PER_DECADE = 2
#: Flicker-FM bank: top corner frequency times the sample interval.
FLICKER_TOP_CORNER = 0.15
#: Flicker-FM bank: variance of the top process relative to the others.
FLICKER_TOP_WEIGHT = 1.35
#: Flicker-FM bank: the lowest corner is 1 / (this factor * span).
FLICKER_LOW_EXTENSION = 16.0
#: Rows of normal deviates drawn at once inside :meth:`NoiseStream.next` (bounds memory).
_ROWS_PER_DRAW = 1 << 16


class NoiseStream:
    """Fractional-frequency samples of a :class:`PowerLawNoise` model, drawn chunk by chunk.

    All state (last white-PM phase, random-walk level, flicker-bank states) is carried from one
    call of :meth:`next` to the next, and each sample consumes a fixed number of normal deviates
    from ``rng`` in order, so ``next(N)`` and any split ``next(n1), next(n2), ...`` with
    ``n1 + n2 + ... = N`` give identical samples. Constructing the stream draws the initial
    state (white-PM phase, stationary flicker states) from ``rng``.

    Parameters
    ----------
    noise : PowerLawNoise
        The model. Components with a zero coefficient cost nothing.
    sample_interval_s : float
        Sample interval tau0, s (> 0). White PM uses f_h = noise.f_h_hz, or 1 / (2 tau0).
    rng : numpy.random.Generator or int
        Source of randomness, or a seed for ``numpy.random.default_rng``.
    span_s : float, optional
        Total duration that will be drawn, s; required if ``noise.hm1 > 0`` (it sets the lowest
        flicker corner, about 1 / (16 span_s)). Must cover at least two samples.

    Notes
    -----
    Memory per call: the output plus at most 65 536 rows of (4 + number of flicker corners)
    normal deviates. Generating the component processes is described in the module docstring.
    The stream reproduces the model's Allan deviation; with ``f_h_hz`` != 1 / (2 tau0) the
    white-PM spectrum is that of a white phase sampled at tau0 (aliased), not cut off at f_h.

    Examples
    --------
    >>> import numpy as np
    >>> model = PowerLawNoise.from_allan_deviation(white_fm_at_1s=1e-15)
    >>> stream = NoiseStream(model, 1.0, np.random.default_rng(7))
    >>> stream.next(3).shape
    (3,)
    """

    def __init__(self, noise: PowerLawNoise, sample_interval_s: float,
                 rng: np.random.Generator | int, *, span_s: float | None = None):
        if not isinstance(noise, PowerLawNoise):
            raise ConfigError(f"noise stream: noise: expected a PowerLawNoise, got "
                              f"{type(noise).__name__}")
        tau0 = check_finite_number(sample_interval_s, "noise stream", "sample_interval_s",
                                   positive=True)
        if isinstance(rng, (int, np.integer)) and not isinstance(rng, bool):
            rng = np.random.default_rng(int(rng))
        if not isinstance(rng, np.random.Generator):
            raise ConfigError("noise stream: rng: expected a numpy.random.Generator or an "
                              f"integer seed, got {type(rng).__name__}")
        self.noise = noise
        self.sample_interval_s = tau0
        self.span_s = None if span_s is None else check_finite_number(
            span_s, "noise stream", "span_s", minimum=2.0 * tau0)
        self._rng = rng
        self._drawn = 0
        self._warned_span = False

        self._sx = 0.0                                    # white-PM phase deviation, s
        if noise.h2 > 0:
            f_h = noise.bandwidth_hz(tau0)
            self._sx = math.sqrt(f_h * noise.h2) / (2.0 * math.pi)
        self._swfm = math.sqrt(noise.h0 / (2.0 * tau0))   # white-FM sample deviation
        self._srw = math.sqrt(2.0 * math.pi**2 * noise.hm2 * tau0)  # sqrt(D tau0)

        self._a = np.empty(0)
        self._b = np.empty(0)
        self._var = np.empty(0)
        self._corners_hz = np.empty(0)
        if noise.hm1 > 0:
            if self.span_s is None:
                raise ConfigError("noise stream: span_s: required for flicker FM (hm1 > 0); "
                                  "give the total duration to be drawn, s")
            self._corners_hz, self._var = _flicker_bank(noise.hm1, tau0, self.span_s)
            eps = 2.0 * math.pi * self._corners_hz * tau0
            self._a = np.exp(-eps)
            self._b = np.sqrt(self._var * -np.expm1(-2.0 * eps))

        n_init = (self._sx > 0) + self._a.size
        init = rng.standard_normal(n_init) if n_init else np.empty(0)
        self._x_prev = self._sx * init[0] if self._sx > 0 else 0.0
        z_prev = np.sqrt(self._var) * init[int(self._sx > 0):]
        self._zi = self._a * z_prev                        # lfilter states a * z_{k-1}
        self._w = 0.0                                      # random-walk level W at the start
        self._n_cols = int(self._sx > 0) + int(self._swfm > 0) + 2 * int(self._srw > 0) \
            + self._a.size

    @property
    def samples_drawn(self) -> int:
        """Number of samples drawn so far."""
        return self._drawn

    @property
    def flicker_corner_frequencies_hz(self) -> NDArray[np.float64]:
        """Corner frequencies of the flicker-FM bank, Hz (empty without flicker FM)."""
        return self._corners_hz.copy()

    def next(self, n: int) -> NDArray[np.float64]:
        """The next ``n`` fractional-frequency samples (dimensionless), shape (n,)."""
        if isinstance(n, bool) or not isinstance(n, (int, np.integer)) or n < 0:
            raise ConfigError(f"noise stream: n: expected an integer >= 0, got {n!r}")
        n = int(n)
        out = np.zeros(n)
        for start in range(0, n, _ROWS_PER_DRAW):
            stop = min(n, start + _ROWS_PER_DRAW)
            self._fill(out[start:stop])
        self._drawn += n
        if (self.span_s is not None and not self._warned_span
                and self._drawn * self.sample_interval_s > self.span_s * (1 + 1e-9)):
            self._warned_span = True
            _log.warning("noise stream: %d samples drawn, beyond span_s = %g s; the flicker-FM "
                         "bank does not cover the longest times", self._drawn, self.span_s)
        return out

    def chunks(self, n_total: int, chunk_size: int = 1 << 16) -> Iterator[NDArray[np.float64]]:
        """Yield ``n_total`` samples in chunks of ``chunk_size`` (the last may be shorter)."""
        for name, value in (("n_total", n_total), ("chunk_size", chunk_size)):
            if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < 0:
                raise ConfigError(f"noise stream: {name}: expected an integer >= 0, "
                                  f"got {value!r}")
        if chunk_size == 0 and n_total > 0:
            raise ConfigError("noise stream: chunk_size: expected an integer >= 1, got 0")
        left = int(n_total)
        while left > 0:
            k = min(left, int(chunk_size))
            left -= k
            yield self.next(k)

    def model_adev(self, tau_s: ArrayLike) -> NDArray[np.float64]:
        """Exact Allan deviation of the generated discrete process, dimensionless.

        Equal to :meth:`PowerLawNoise.adev` for white PM, white FM and RW FM; for flicker FM
        it is the Allan deviation of the first-order autoregressive bank, computed in closed
        form from its autocovariance.

        Parameters
        ----------
        tau_s : array_like
            Averaging times, s; integer multiples m >= 1 of the sample interval.
        """
        tau = np.asarray(tau_s, dtype=float)
        tau0 = self.sample_interval_s
        m = np.round(tau / tau0) if np.all(np.isfinite(tau)) else tau
        if (not np.all(np.isfinite(tau)) or np.any(m < 1)
                or np.any(np.abs(tau / tau0 - m) > 1e-9 * np.maximum(m, 1))):
            raise ConfigError("noise stream: tau_s: expected integer multiples (>= 1) of the "
                              f"sample interval {tau0:g} s")
        tm = m * tau0
        avar = 3.0 * self._sx**2 / tm**2 + self._swfm**2 / m + self._srw**2 * m / 3.0
        if self._a.size:
            flat = m.reshape(-1)
            avar = avar + _ar1_bank_avar(flat, self._corners_hz * tau0, self._var
                                         ).reshape(m.shape)
        return np.sqrt(avar)

    # ------------------------------------------------------------------ internals

    def _fill(self, out):
        n = out.size
        u = self._rng.standard_normal((n, self._n_cols))
        col = 0
        if self._sx > 0:
            x = self._sx * u[:, col]
            prev = np.empty(n)
            prev[0] = self._x_prev
            prev[1:] = x[:-1]
            out += (x - prev) / self.sample_interval_s
            self._x_prev = float(x[-1])
            col += 1
        if self._swfm > 0:
            out += self._swfm * u[:, col]
            col += 1
        if self._srw > 0:
            u1, u2 = u[:, col], u[:, col + 1]
            w = np.empty(n + 1)
            w[0] = self._w
            w[1:] = self._srw * u1
            np.cumsum(w, out=w)
            out += w[:-1] + self._srw * (0.5 * u1 + u2 / (2.0 * math.sqrt(3.0)))
            self._w = float(w[-1])
            col += 2
        if self._a.size:
            from scipy.signal import lfilter  # lazy: scipy.signal costs ~70 MB to import
        for j in range(self._a.size):
            z, zf = lfilter([self._b[j]], [1.0, -self._a[j]], u[:, col + j],
                            zi=self._zi[j:j + 1])
            out += z
            self._zi[j] = zf[0]


def _flicker_bank(hm1, tau0, span_s):
    """Corner frequencies (Hz, descending) and variances of the AR(1) bank for hm1 / f."""
    f_lo = 1.0 / (FLICKER_LOW_EXTENSION * span_s)
    f_top = FLICKER_TOP_CORNER / tau0
    n_below = max(1, int(math.ceil(FLICKER_POLES_PER_DECADE * math.log10(f_top / f_lo))))
    ratio = 10.0 ** (1.0 / FLICKER_POLES_PER_DECADE)
    corners = f_top * ratio ** -np.arange(n_below + 1.0)
    var = np.full(corners.size, hm1 * math.log(ratio))
    var[0] *= FLICKER_TOP_WEIGHT
    return corners, var


def _phi(x):
    """(exp(-x) - 1 + x) / x^2, accurate for all x >= 0 (series below 0.1)."""
    x = np.asarray(x, dtype=float)
    out = np.empty_like(x)
    small = x < 0.1
    xs = x[small]
    series = np.zeros_like(xs)
    for k in range(11, -1, -1):
        series = series * (-xs) + 1.0 / math.factorial(k + 2)
    out[small] = series
    xl = x[~small]
    out[~small] = (np.expm1(-xl) + xl) / xl**2
    return out


def _ar1_bank_avar(m, corner_times_tau0, var):
    """Allan variance at averaging factors m of a sum of AR(1) processes.

    Process j: z_k = a_j z_{k-1} + noise, stationary variance var_j, a_j = exp(-eps_j),
    eps_j = 2 pi f_j tau0. With S_m the sum of m consecutive samples and S'_m the next m,
    sigma^2(m) = (Var S_m - Cov(S_m, S'_m)) / m^2, where for unit variance
    Var S_m = m + 2 sum_{k=1}^{m-1} (m - k) a^k and Cov = a ((1 - a^m) / (1 - a))^2; the first
    sum is written as a eps^2 (m^2 phi(m eps) - m phi(eps)) / (1 - a)^2 to avoid cancellation.
    """
    m = np.asarray(m, dtype=float)[:, None]
    eps = 2.0 * math.pi * np.asarray(corner_times_tau0, dtype=float)[None, :]
    a = np.exp(-eps)
    oma = -np.expm1(-eps)
    tri = a * eps**2 * (m**2 * _phi(m * eps) - m * _phi(eps)) / oma**2
    g = np.expm1(-m * eps) / np.expm1(-eps)
    per = (m + 2.0 * tri - a * g**2) / m**2
    return (per * np.asarray(var)[None, :]).sum(axis=1)


#: [noise] fields given as Allan-deviation levels -> PowerLawNoise.from_allan_deviation keyword.
