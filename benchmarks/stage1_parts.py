"""Wall time of the parts of the fit's reading, stage 1 and amplitudes file, one at a time.

On demand (never run in CI; no pass/fail). From the repository root, in the project's
environment::

    python benchmarks/stage1_parts.py --workdir BENCH_DIR [--repeats 30]

The 2-day record of ``short_record.py`` (simulated once into BENCH_DIR). Each part is run
``--repeats`` times, the parts interleaved, and the best time of each is printed in ms, with
its ratio to the floor (``run_benchmarks.floor_seconds``) measured in the same loop: opening
and checking the layout (``open_run``), reading the three channels whole with their value
checks (``RunFile.load``), the survey (``engine.survey``) and its motion detection
(``detect_motion``), the whole of stage 1 (``stage1_store``) and the amplitudes file
(``write_turns``). To compare two versions, run it against each alternately (``PYTHONPATH``).
"""

from __future__ import annotations

import argparse
import json
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))

from run_benchmarks import floor_seconds  # noqa: E402  (the benchmark module beside this one)
from short_record import record  # noqa: E402


def _parts(path: str, work: Path) -> dict:
    """name -> a function of no arguments that runs that part once."""
    from fringe.demodulate.engine import stage1_store, survey
    from fringe.demodulate.motion import detect_motion, unwrapped_theta
    from fringe.demodulate.settings import DemodSettings
    from fringe.fit.run import fit_run
    from fringe.fit.settings import FitSettings
    from fringe.io.runreader import open_run
    from fringe.io.turns_file import write_turns

    demod = DemodSettings()
    with open_run(path, check_values=False) as run:
        loaded = run.load()
    result, columns = fit_run(path, FitSettings(), scratch_dir=str(work))   # kept open
    first = next(loaded.iter_chunks(1 << 16, ("time", "azimuth")))
    t, az = first["time"].copy(), first["azimuth"].copy()

    def opening():
        open_run(path, check_values=False).close()

    def loading():
        with open_run(path, check_values=False) as r:
            r.load()

    def surveying():
        survey(path, demod, run=loaded)

    def motion():
        detect_motion(t, az, demod, theta_rad=unwrapped_theta(az))

    def stage1():
        with open_run(path, check_values=False) as r:
            stage1_store(path, demod, run=r)

    parts = {"open_run": opening, "open_and_load": loading, "survey": surveying,
             "detect_motion": motion, "stage1_store (open included)": stage1}

    def turns_file():
        write_turns(work / "parts.turns.h5", units=result.units, epoch_utc=result.epoch_utc,
                    columns=columns, overwrite=True)

    parts["write_turns"] = turns_file
    return parts


def main(argv=None) -> int:
    """Time the parts; print the best of each (ms) and its ratio to the floor, as JSON."""
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--workdir", required=True, type=Path)
    ap.add_argument("--repeats", type=int, default=30)
    args = ap.parse_args(argv)
    args.workdir.mkdir(parents=True, exist_ok=True)
    path = record(args.workdir, 2.0)
    parts = _parts(path, args.workdir)
    best = {name: float("inf") for name in ("floor", *parts)}
    for _ in range(args.repeats):
        best["floor"] = min(best["floor"], floor_seconds(path))
        for name, fn in parts.items():
            t0 = time.perf_counter()
            fn()
            best[name] = min(best[name], time.perf_counter() - t0)
    out = {name: {"best_ms": round(1e3 * s, 3), "over_floor": round(s / best["floor"], 3)}
           for name, s in best.items()}
    print(json.dumps(out, indent=1))
    return 0


if __name__ == "__main__":
    sys.exit(main())
