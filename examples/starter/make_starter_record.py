"""Write the invented starter record of ``examples/starter/``: a CSV a new user can import.

Everything here is invented for demonstration: the "Ospreymere Institute isolation hall" does not
exist and no such record was taken. It imitates what a rotating cavity-pair experiment logs
once per second during a quiet evening: the table encoder's azimuth, the beat note between the
two cavity-stabilised lasers (as its deviation from a nominal offset frequency) and the
temperature of the vacuum vessel. There is no anisotropy in it (a null record); what is in it:

* white frequency noise of the beat, fractional Allan deviation 3e-15 at 1 s (0.58 Hz on the
  1.94e14 Hz carrier);
* a linear drift of the cavity pair's difference frequency, 0.02 Hz/s (aging and temperature);
* a slow temperature swing of the vessel (2 mK, period 2 h, plus a random walk) that moves the
  beat by -0.8 Hz per mK;
* a tilt of the turntable axis, seen as a once-per-turn (1 theta) beat term of 0.9 Hz;
* the encoder read to 0.01 deg, wrapped to [0, 360); the table turns every 45 s, clockwise seen
  from above (the azimuth, from north toward east, increases);
* four readings the counter dropped (empty cells).

Seeded, so running it again gives the same file.

Run::

    python examples/starter/make_starter_record.py [OUTDIR]      # default: beside this file
"""

from __future__ import annotations

import os
import sys

import numpy as np

SEED = 614
DURATION_S = 3 * 3600              # three hours at 1 Hz
PERIOD_S = 45.0                    # one table turn, s
START_AZIMUTH_DEG = 12.0
CARRIER_HZ = 1.94e14               # 1545 nm
WHITE_FM_ADEV_1S = 3e-15           # fractional, at 1 s
DRIFT_HZ_PER_S = 0.02
TEMP_SWING_MK, TEMP_PERIOD_S = 2.0, 7200.0
TEMP_WALK_MK_PER_SQRT_S = 0.002
TEMP_COEFF_HZ_PER_MK = -0.8
TILT_1THETA_HZ, TILT_AZIMUTH_DEG = 0.9, 40.0
DROPPED = (1234, 4321, 7777, 9876)  # rows whose beat the counter lost
HEADER = """\
# Invented starter record (examples/README.md): rotating cavity pair, 1 Hz samples.
# t_s: seconds after epoch_utc; encoder_deg: table azimuth, degrees from north toward east,
# wrapped to [0, 360); beat_dev_hz: beat frequency minus its nominal offset, Hz (empty: the
# counter dropped the reading); vessel_temp_mk: vacuum-vessel temperature minus its set
# point, mK.
t_s,encoder_deg,beat_dev_hz,vessel_temp_mk
"""


def record(seed: int = SEED) -> dict[str, np.ndarray]:
    """The columns of the record (time s, azimuth deg, beat Hz with NaN dropped, temperature mK)."""
    rng = np.random.default_rng(seed)
    t = np.arange(DURATION_S, dtype=float)
    azimuth = START_AZIMUTH_DEG + 360.0 * t / PERIOD_S
    temp = TEMP_SWING_MK * np.sin(2 * np.pi * t / TEMP_PERIOD_S + 0.4) \
        + np.cumsum(rng.normal(0.0, TEMP_WALK_MK_PER_SQRT_S, t.size))
    theta = np.pi - np.radians(azimuth)          # table angle from south toward east (C6/C7)
    beat = (WHITE_FM_ADEV_1S * CARRIER_HZ * rng.normal(size=t.size)
            + DRIFT_HZ_PER_S * t + TEMP_COEFF_HZ_PER_MK * temp
            + TILT_1THETA_HZ * np.cos(theta - (np.pi - np.radians(TILT_AZIMUTH_DEG))))
    beat[list(DROPPED)] = np.nan
    return {"t_s": t, "encoder_deg": np.round(azimuth % 360.0, 2), "beat_dev_hz": beat,
            "vessel_temp_mk": temp}


def write(outdir: str) -> str:
    """Write ``cavity_rotation.csv`` into ``outdir``; return its path."""
    cols = record()
    lines = [HEADER]
    for t, a, b, k in zip(cols["t_s"], cols["encoder_deg"], cols["beat_dev_hz"],
                          cols["vessel_temp_mk"], strict=True):
        beat = "" if np.isnan(b) else f"{b:.3f}"
        lines.append(f"{t:.0f},{a:.2f},{beat},{k:.3f}\n")
    path = os.path.join(outdir, "cavity_rotation.csv")
    with open(path, "w", encoding="utf-8", newline="\n") as fh:
        fh.write("".join(lines))
    return path


if __name__ == "__main__":
    print(write(sys.argv[1] if len(sys.argv) > 1 else os.path.dirname(os.path.abspath(__file__))))
