"""Write the invented hand-read stepped session of ``examples/stepped_1893/``.

Everything here is invented for demonstration: the "Thornwick Hill cellar" does not exist and
no such session was ever observed. It imitates the shape of a nineteenth-century record: an
interferometer on a float is stepped by hand through 16 marks per turn, 6 turns in a session;
at each mark the observer reads the fringe position on a micrometer in divisions, several
times, and writes down the mean and how many readings it averages (3 or 4). The micrometer's
zero was re-set once, between turns 3 and 4 (an arbitrary zero that the per-turn offset of
stage 1 absorbs). One division is 0.02 fringe, known to 4 % (invented calibration).

The readings are: a slow drift of the zero (temperature), an invented 2 theta fringe shift of
0.015 fringe (0.75 division) and reading noise of 0.6 division per single reading (so the mean
of N readings scatters by 0.6 / sqrt(N) division). Seeded, so the files are reproducible.

Run::

    python examples/stepped_1893/make_stepped_session.py [OUTDIR]    # default: beside this file
"""

from __future__ import annotations

import os
import sys

import numpy as np

SEED = 1893
TURNS, MARKS = 6, 16
DIVISION_FRINGE = 0.02          # fringes per micrometer division (invented)
SHIFT_FRINGE = 0.015            # invented 2 theta amplitude, fringes
PHASE_DEG = 35.0                # invented phase of the 2 theta term
NOISE_DIV = 0.6                 # one reading's scatter, divisions (invented)
MARK_INTERVAL_S = 21.0          # about 21 s from one mark to the next (invented)
RESET_DIV = 12.5                # the zero jumps by this between turns 3 and 4 (invented)


def session(seed: int = SEED) -> list[tuple[float, float, float, int]]:
    """The rows (time s since the epoch, azimuth deg, mean reading div, readings averaged)."""
    rng = np.random.default_rng(seed)
    rows = []
    t = 0.0
    for turn in range(TURNS):
        for mark in range(MARKS):
            azimuth = 22.5 * mark                     # mark 0 = north, stepping toward east
            theta = np.radians(180.0 - azimuth)       # C7: theta = pi - A
            n = int(rng.choice([3, 4]))
            zero = 47.0 + 0.004 * t / 60.0 + (RESET_DIV if turn >= 3 else 0.0)
            signal = SHIFT_FRINGE / DIVISION_FRINGE * np.cos(2 * theta - np.radians(PHASE_DEG))
            reading = zero + signal + rng.normal(0.0, NOISE_DIV / np.sqrt(n))
            rows.append((round(t, 1), azimuth, round(float(reading), 2), n))
            t += MARK_INTERVAL_S + float(rng.uniform(-3.0, 3.0))
        t += 40.0                                     # the observer re-settles between turns
    return rows


def write(out_dir: str) -> str:
    """Write ``session.csv`` into ``out_dir``; returns its path."""
    path = os.path.join(out_dir, "session.csv")
    with open(path, "w", encoding="utf-8", newline="\n") as fh:
        fh.write("# Invented hand-read stepped session (examples/stepped_1893/README.md).\n"
                 "# seconds after the epoch, mark azimuth in degrees from north toward east,\n"
                 "# mean micrometer reading in divisions, number of readings averaged\n")
        fh.write("seconds,mark_deg,reading_div,n_readings\n")
        for t, az, r, n in session():
            fh.write(f"{t:.1f},{az:.1f},{r:.2f},{n}\n")
    return path


if __name__ == "__main__":
    print(write(sys.argv[1] if len(sys.argv) > 1 else os.path.dirname(os.path.abspath(__file__))))
