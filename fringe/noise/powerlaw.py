"""Power-law fractional-frequency noise: model, expected Allan deviation, streamed samples.

Which object for which job:

* :class:`PowerLawNoise` -- the noise model S_y(f) = h2 f^2 + h0 + hm1/f + hm2/f^2 (white PM,
  white FM, flicker FM, random-walk FM). Build it from PSD coefficients or, usually, from Allan
  deviation levels with :meth:`PowerLawNoise.from_allan_deviation`. :meth:`PowerLawNoise.adev`
  gives the expected sigma_y(tau) (forecasts, plots, test bands); :meth:`PowerLawNoise.psd`
  gives S_y(f).
* :class:`NoiseStream` -- draws fractional-frequency samples of that model chunk by chunk, with
  all state carried between chunks, so that a year at 1 Hz never has to sit in memory. The
  same seed gives the same samples however the run is cut into chunks.
  :meth:`NoiseStream.model_adev` is the exact Allan deviation of the generated discrete process.

Units: f in Hz, tau in s, y dimensionless; S_y in 1/Hz, so h2 in Hz^-3, h0 in Hz^-1, hm1
dimensionless, hm2 in Hz.

How the samples are drawn: :mod:`fringe.noise.stream`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from fringe.errors import ConfigError, check_finite_number, reject_unknown_fields

__all__ = ["PowerLawNoise"]

_FIELDS = ("h2", "h0", "hm1", "hm2", "f_h_hz")


@dataclass(frozen=True)
class PowerLawNoise:
    r"""Power-law model of fractional-frequency noise.

    .. math::

        S_y(f) = h_2 f^2 + h_0 + h_{-1} f^{-1} + h_{-2} f^{-2}, \qquad 0 < f \le f_h

    (one-sided PSD of y, 1/Hz).

    Parameters
    ----------
    h2 : float
        White phase modulation (white PM), Hz^-3; >= 0.
    h0 : float
        White frequency modulation (white FM), Hz^-1; >= 0.
    hm1 : float
        Flicker frequency modulation (flicker FM), dimensionless; >= 0.
    hm2 : float
        Random-walk frequency modulation (RW FM), Hz; >= 0.
    f_h_hz : float or None
        Measurement bandwidth f_h, Hz (> 0), needed only for white PM. None: use
        f_h = 1 / (2 tau0) of whatever sample interval tau0 the model is used with.

    References
    ----------
    IEEE Std 1139-2008, Annex B, Table B.2 (S_y coefficients to Allan variance). W. J. Riley,
    NIST Special Publication 1065 (2008), Table 3 (power-law noise and Allan variance).
    J. A. Barnes et al., IEEE Trans. Instrum. Meas. IM-20, 105 (1971), Table I. (Table
    numbers as cited in secondary sources -- verify before citing.)
    """

    h2: float = 0.0
    h0: float = 0.0
    hm1: float = 0.0
    hm2: float = 0.0
    f_h_hz: float | None = None

    def __post_init__(self):
        for name in ("h2", "h0", "hm1", "hm2"):
            value = check_finite_number(getattr(self, name), "noise", name, minimum=0.0)
            object.__setattr__(self, name, value)
        if self.f_h_hz is not None:
            object.__setattr__(self, "f_h_hz", check_finite_number(
                self.f_h_hz, "noise", "f_h_hz", positive=True))

    @classmethod
    def from_allan_deviation(cls, *, white_pm_at_1s: float = 0.0, white_fm_at_1s: float = 0.0,
                             flicker_fm_floor: float = 0.0, random_walk_fm_at_1s: float = 0.0,
                             f_h_hz: float | None = None,
                             sample_interval_s: float | None = None) -> PowerLawNoise:
        r"""Model from the Allan deviation contributed by each noise type.

        With tau in s and the levels a (dimensionless ADEV values):

        * white PM,  sigma_y = a_wpm (1 s / tau):     h2  = 4 pi^2 a_wpm^2 / (3 f_h)
        * white FM,  sigma_y = a_wfm (1 s / tau)^1/2: h0  = 2 a_wfm^2 (1 s)
        * flicker FM, sigma_y = a_ff (flat):          hm1 = a_ff^2 / (2 ln 2)
        * RW FM,     sigma_y = a_rw (tau / 1 s)^1/2:  hm2 = 3 a_rw^2 / (2 pi^2 (1 s))

        from sigma_y^2 = 3 f_h h2 / (4 pi^2 tau^2) + h0 / (2 tau) + 2 ln 2 hm1
        + (2 pi^2 / 3) hm2 tau.

        Parameters
        ----------
        white_pm_at_1s, white_fm_at_1s, random_walk_fm_at_1s : float
            Allan deviation of that component at tau = 1 s, dimensionless, >= 0.
        flicker_fm_floor : float
            Flicker-FM floor of the Allan deviation, dimensionless, >= 0.
        f_h_hz : float, optional
            Measurement bandwidth for white PM, Hz.
        sample_interval_s : float, optional
            If ``f_h_hz`` is not given, f_h = 1 / (2 sample_interval_s) (the Nyquist frequency
            of the samples; our default).

        Returns
        -------
        PowerLawNoise
            With ``f_h_hz`` set whenever it was given or derived.

        Raises
        ------
        ConfigError
            A negative or non-finite level; white PM without ``f_h_hz`` or
            ``sample_interval_s``.

        References
        ----------
        As :class:`PowerLawNoise`.

        Examples
        --------
        >>> PowerLawNoise.from_allan_deviation(white_fm_at_1s=1e-15).h0
        2e-30
        """
        levels = {name: check_finite_number(value, "noise", name, minimum=0.0)
                  for name, value in (("white_pm_at_1s", white_pm_at_1s),
                                      ("white_fm_at_1s", white_fm_at_1s),
                                      ("flicker_fm_floor", flicker_fm_floor),
                                      ("random_walk_fm_at_1s", random_walk_fm_at_1s))}
        f_h = _bandwidth(f_h_hz, sample_interval_s)
        h2 = 0.0
        if levels["white_pm_at_1s"] > 0:
            if f_h is None:
                raise ConfigError("noise: f_h_hz: white PM needs the measurement bandwidth; "
                                  "give f_h_hz or sample_interval_s (f_h = 1/(2 tau0))")
            h2 = 4.0 * math.pi**2 * levels["white_pm_at_1s"] ** 2 / (3.0 * f_h)
        return cls(h2=h2,
                   h0=2.0 * levels["white_fm_at_1s"] ** 2,
                   hm1=levels["flicker_fm_floor"] ** 2 / (2.0 * math.log(2.0)),
                   hm2=3.0 * levels["random_walk_fm_at_1s"] ** 2 / (2.0 * math.pi**2),
                   f_h_hz=f_h)

    def bandwidth_hz(self, sample_interval_s: float | None = None) -> float | None:
        """White-PM bandwidth f_h, Hz: ``f_h_hz`` if set, else 1/(2 sample_interval_s), or None."""
        return _bandwidth(self.f_h_hz, sample_interval_s)

    def psd(self, f_hz: ArrayLike) -> NDArray[np.float64]:
        """One-sided PSD S_y(f), 1/Hz, at Fourier frequencies ``f_hz`` (> 0, Hz).

        The power-law formula itself; the white-PM term is not cut off at f_h.
        """
        f = np.asarray(f_hz, dtype=float)
        if not np.all(np.isfinite(f)) or np.any(f <= 0):
            raise ConfigError("noise: f_hz: expected finite Fourier frequencies > 0 Hz")
        return self.h2 * f**2 + self.h0 + self.hm1 / f + self.hm2 / f**2

    def adev(self, tau_s: ArrayLike, sample_interval_s: float | None = None
             ) -> NDArray[np.float64]:
        r"""Expected Allan deviation of the model, dimensionless.

        .. math::

            \sigma_y^2(\tau) = \frac{3 f_h h_2}{4\pi^2\tau^2} + \frac{h_0}{2\tau}
                + 2\ln 2\, h_{-1} + \frac{2\pi^2}{3} h_{-2}\tau

        The white-PM term is the usual approximation for 2 pi f_h tau >> 1; the streamed
        white PM of :class:`NoiseStream` follows it exactly for every tau = m tau0.

        Parameters
        ----------
        tau_s : array_like
            Averaging times, s (> 0).
        sample_interval_s : float, optional
            Sets f_h = 1 / (2 tau0) when the model has no ``f_h_hz``; required then if h2 > 0.

        Returns
        -------
        ndarray
            sigma_y(tau), same shape as ``tau_s``.

        References
        ----------
        As :class:`PowerLawNoise`.
        """
        tau = np.asarray(tau_s, dtype=float)
        if not np.all(np.isfinite(tau)) or np.any(tau <= 0):
            raise ConfigError("noise: tau_s: expected finite averaging times > 0 s")
        avar = self.h0 / (2.0 * tau) + 2.0 * math.log(2.0) * self.hm1 \
            + (2.0 * math.pi**2 / 3.0) * self.hm2 * tau
        if self.h2 > 0:
            f_h = self.bandwidth_hz(sample_interval_s)
            if f_h is None:
                raise ConfigError("noise: f_h_hz: white PM (h2 > 0) needs the measurement "
                                  "bandwidth; set f_h_hz or pass sample_interval_s")
            avar = avar + 3.0 * f_h * self.h2 / (4.0 * math.pi**2 * tau**2)
        return np.sqrt(avar)

    def to_dict(self) -> dict:
        """Plain JSON types: the four coefficients and ``f_h_hz`` (None if unset)."""
        return {name: getattr(self, name) for name in _FIELDS}

    @classmethod
    def from_dict(cls, data: dict) -> PowerLawNoise:
        """Model from :meth:`to_dict` output; missing coefficients are 0, unknown keys an error."""
        if not isinstance(data, dict):
            raise ConfigError(f"noise: expected a mapping, got {type(data).__name__}")
        reject_unknown_fields(data, _FIELDS, "noise:")
        return cls(**data)


def _bandwidth(f_h_hz, sample_interval_s):
    if f_h_hz is not None:
        return check_finite_number(f_h_hz, "noise", "f_h_hz", positive=True)
    if sample_interval_s is not None:
        return 0.5 / check_finite_number(sample_interval_s, "noise", "sample_interval_s",
                                         positive=True)
    return None


ADEV_FIELDS = {"white_pm_adev_1s": "white_pm_at_1s", "white_fm_adev_1s": "white_fm_at_1s",
               "flicker_fm_adev": "flicker_fm_floor",
               "random_walk_fm_adev_1s": "random_walk_fm_at_1s"}
#: [noise] fields given as PSD coefficients of S_y (1/Hz convention, see fringe.noise).
PSD_FIELDS = ("h2", "h0", "hm1", "hm2")

def noise_from_section(section: dict | None, source: str = "scenario",
                       sample_interval_s: float | None = None) -> PowerLawNoise:
    """The ``[noise]`` section as a power-law model of fractional-frequency noise.

    Either Allan-deviation levels (``white_fm_adev_1s``, ``flicker_fm_adev``,
    ``random_walk_fm_adev_1s``, ``white_pm_adev_1s``; dimensionless) or the PSD coefficients
    ``h2`` (Hz^-3), ``h0`` (Hz^-1), ``hm1`` (1), ``hm2`` (Hz) of S_y(f), not both; optional
    ``f_h_hz`` (white-PM bandwidth, Hz; default 1 / (2 sample_interval_s)). The same fields as
    ``fringe simulate`` reads. Conversion: :meth:`PowerLawNoise.from_allan_deviation`.

    Raises
    ------
    ConfigError
        One line naming ``source``, ``[noise]``, the field and what was expected.
    """
    where = f"{source}: [noise]"
    if section is None:
        raise ConfigError(f"{where}: section missing (a noise model is needed, e.g. "
                          f"white_fm_adev_1s = 1e-15)")
    if not isinstance(section, dict):
        raise ConfigError(f"{where}: expected a table of noise levels")
    known = set(ADEV_FIELDS) | set(PSD_FIELDS) | {"f_h_hz"}
    reject_unknown_fields(section, known, where)
    vals = {k: check_finite_number(v, where, k, minimum=0.0) for k, v in section.items()
            if k != "f_h_hz"}
    f_h = None
    if "f_h_hz" in section:
        f_h = check_finite_number(section["f_h_hz"], where, "f_h_hz", positive=True)
    adev = {ADEV_FIELDS[k]: v for k, v in vals.items() if k in ADEV_FIELDS}
    psd = {k: v for k, v in vals.items() if k in PSD_FIELDS}
    if adev and psd:
        raise ConfigError(f"{where}: give Allan-deviation levels ({', '.join(ADEV_FIELDS)}) or "
                          f"PSD coefficients ({', '.join(PSD_FIELDS)}), not both")
    if psd:
        model = PowerLawNoise(f_h_hz=f_h, **psd)
    else:
        if adev.get("white_pm_at_1s", 0.0) > 0 and f_h is None and sample_interval_s is None:
            raise ConfigError(f"{where} f_h_hz: white PM needs the measurement bandwidth, Hz")
        model = PowerLawNoise.from_allan_deviation(f_h_hz=f_h,
                                                   sample_interval_s=sample_interval_s, **adev)
    if model.h2 == model.h0 == model.hm1 == model.hm2 == 0.0:
        raise ConfigError(f"{where}: every noise level is zero (expected at least one > 0)")
    return model


def noise_scale(apparatus, units: str) -> float:
    """Factor k from the ``[noise]`` levels to the observable's ``units`` (simulate and plan).

    Cavity apparatus: the levels are fractional frequency, k = 1 for units "1" and
    k = ``carrier_hz`` for Hz. Michelson ("fringe") and clock ("Hz") apparatus: k = 1, i.e. the
    levels are read in the observable's own units (they have no carrier to scale by).
    """
    if apparatus.kind in ("michelson", "clock") or units not in ("Hz", "1"):
        return 1.0
    return float(apparatus.scale(units))

