"""A run file with a systematic driven by an auxiliary channel (an invented laboratory).

The channel ``temp`` (K) is a temperature difference across the table that follows the table
at 2 theta (azimuth ``PSI_DEG``) and swings over the solar day; the signal couples to it with
``coupling`` Hz/K, on top of white frequency noise. All numbers are invented for the tests.
"""

from __future__ import annotations

import numpy as np

from fringe.io.runwriter import RunWriter
from tests.helpers.runs import BASE, CARRIER_HZ, WHITE_FM

PSI_DEG = 25.0
#: Mean and diurnal swing of the channel's 2 theta amplitude, K (invented).
TEMP_MEAN_K, TEMP_SWING_K = 0.01, 0.008
#: White noise of the channel per sample, K (invented).
TEMP_NOISE_K = 2e-4


def aux_coupled_run(path, *, coupling: float, seed: int, days: float = 1.5,
                    period_s: float = 45.0, with_noise: bool = True) -> str:
    """Write the run file; returns its path (str).

    ``coupling`` (Hz/K) times the channel is added to the signal; the signal's own noise is
    white frequency noise of Allan deviation WHITE_FM at 1 s (fractional, times the carrier)
    drawn from ``seed``, so two calls with one seed share the noise exactly.
    """
    rng = np.random.default_rng(seed)
    t = np.arange(0.0, days * 86400.0)
    theta = 2.0 * np.pi * t / period_s
    swing = TEMP_MEAN_K + TEMP_SWING_K * np.cos(2.0 * np.pi * t / 86400.0 + 0.7)
    temp = swing * np.cos(2.0 * (theta - np.radians(PSI_DEG)))
    temp = temp + rng.normal(0.0, TEMP_NOISE_K, t.size)
    noise = rng.normal(0.0, WHITE_FM * CARRIER_HZ, t.size) if with_noise else 0.0
    y = coupling * temp + noise
    apparatus = {k: v for k, v in BASE["apparatus"].items() if k != "units"}
    with RunWriter(path, site=BASE["site"], apparatus=apparatus,
                   epoch_utc=BASE["campaign"]["start_utc"], signal_units="Hz",
                   aux_channels={"temp": "K"}) as w:
        w.append(t, np.pi - theta, y, temp=temp)
    return str(path)
