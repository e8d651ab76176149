"""On-demand benchmarks of fringe (never run in CI; no pass/fail).

Usage (from the repository root, in the project's environment)::

    python benchmarks/run_benchmarks.py --days 365 --workdir BENCH_DIR

Writes BENCH_DIR/results.json and prints a Markdown table for docs/performance.md. Every speed is a
ratio against a floor measured in the same run:

* floor: one h5py read of time, azimuth and signal plus one sin/cos pass over the azimuth;
* ``fringe fit`` end to end (stage 1 + stages 2-3 + result + the per-turn amplitudes file;
  scratch files of long records in the work directory), as a multiple of the floor (best
  of three interleaved runs of each; the first fit of a process, which loads the compiled
  stage-1 kernels from numba's cache, and the command in a fresh process are reported too);
* the baseline a user would otherwise write: one lmfit fit per turn, timed on a sample of turns
  and extrapolated to all turns; reported as the speed-up of ``fringe fit``;
* peak resident memory of ``fringe fit`` (fit and amplitudes file) at 1/8, 1/4, 1/2 and the
  whole record (each in a fresh subprocess, VmHWM);
* ``simulate`` and ``predict`` throughput (samples per second) and ``plan`` time;
* the share of the Earth orientation (precession-nutation matrix Q and the product R_z Q) in the
  noise-free signal of one chunk, as a ratio of the two timed in the same run (best of five).

``--orientation-only`` measures the last item alone (no record is written).

``--watch-only`` measures ``fringe watch``'s update: a ``--days``-day record of the benchmark
scenario (default 30 here) is split into one run file per day and fed to the incremental fit a
day at a time; it reports each update's time (stage 1 of the day, the re-weighting, the solve;
no report page), the ratio of the last update to the second, and the largest difference from one
fit of the whole record in units of sigma.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import resource
import subprocess
import sys
import time
from pathlib import Path

import numpy as np

SCENARIO = """
title = "benchmark: invented cavity pair"
[site]
latitude_deg = 47.62
longitude_deg = 11.38
[campaign]
start_utc = "2027-01-05T00:00:00Z"
duration_days = {days}
sample_interval_s = 1.0
[apparatus]
kind = "cavity-pair"
carrier_hz = 2.82e14
units = "Hz"
[turntable]
motion = "continuous"
period_s = 45.0
[theory]
name = "sme"
[coefficients]
ke_XY = 1e-17
[noise]
white_fm_adev_1s = 1e-15
[systematics]
drift_per_day = 1e-13
gaps_per_day = 0.5
gap_length_s = 600
glitches_per_day = 1
glitch_size = 1e-13
"""


def floor_seconds(path: str, chunk_cache: bool = True) -> float:
    """One read of time, signal and azimuth and one sin/cos pass (s); ``chunk_cache=False``
    reads without HDF5's chunk cache (``rdcc_nbytes=0``)."""
    import h5py

    t0 = time.perf_counter()
    with h5py.File(path, "r", **({} if chunk_cache else {"rdcc_nbytes": 0})) as f:
        g = f["samples"]
        n = g["time"].shape[0]
        buf = np.empty(min(n, 1 << 17))
        for start in range(0, n, buf.size):
            stop = min(start + buf.size, n)
            view = buf[: stop - start]
            for name in ("time", "signal", "azimuth"):
                g[name].read_direct(view, np.s_[start:stop], np.s_[0:stop - start])
            np.sin(view)
            np.cos(view)
    return time.perf_counter() - t0


def fit_and_write(path: str, work) -> None:
    """What ``fringe fit`` computes and writes, without the process start and the JSON: the fit
    (scratch files in ``work``) and the per-turn amplitudes file."""
    from fringe.fit.run import fit_run
    from fringe.fit.settings import FitSettings
    from fringe.io.turns_file import write_turns

    result, columns = fit_run(path, FitSettings(), scratch_dir=str(work))
    with columns:
        write_turns(Path(work) / "bench.turns.h5", units=result.units,
                    epoch_utc=result.epoch_utc, columns=columns, overwrite=True)


def fit_seconds(path: str, work: Path) -> float:
    import scipy.interpolate  # noqa: F401  (import cost is not part of the timing)

    t0 = time.perf_counter()
    fit_and_write(path, work)
    return time.perf_counter() - t0


def cli_fit_seconds(path: str, work: Path) -> float:
    """``fringe fit`` as a user runs it: a fresh process, imports and result files included."""
    out = work / "cli_fit.json"
    for stale in (out, work / "cli_fit.turns.h5"):
        stale.unlink(missing_ok=True)
    t0 = time.perf_counter()
    subprocess.run([sys.executable, "-m", "fringe.cli", "fit", path, "--out", str(out)],
                   check=True, capture_output=True)
    return time.perf_counter() - t0


def lmfit_loop_seconds_per_turn(path: str, n_turns: int = 200) -> float:
    """One lmfit Model.fit per turn (offset + slope + 1theta + 2theta), as a user might write."""
    import lmfit

    from fringe.io.runreader import open_run

    with open_run(path) as run:
        d = next(run.iter_chunks(n_turns * 45 + 100, copy=True))
    t, th, y = d["time"], np.pi - d["azimuth"], d["signal"]

    def model(x, a0, a1, c1, s1, c2, s2):
        tt, ang = x
        return (a0 + a1 * tt + c1 * np.cos(ang) + s1 * np.sin(ang) + c2 * np.cos(2 * ang)
                + s2 * np.sin(2 * ang))

    m = lmfit.Model(model)
    edges = np.arange(0, t.size, 45)
    t0 = time.perf_counter()
    done = 0
    for a, b in zip(edges[:-1], edges[1:]):
        ok = np.isfinite(y[a:b])
        tt = t[a:b][ok] - t[a:b][ok].mean()
        m.fit(y[a:b][ok], x=(tt, th[a:b][ok]), a0=0, a1=0, c1=0, s1=0, c2=0, s2=0)
        done += 1
    return (time.perf_counter() - t0) / max(done, 1)


def peak_rss_of_fit(path: str, work: Path) -> float:
    """Peak resident memory (MiB) of a fit and its amplitudes file in a fresh subprocess.

    The child keeps freed memory mapped (:func:`fringe.heap.keep_freed_memory`), as ``fringe
    fit`` does.

    Read from the child's own /proc/self/status VmHWM (ru_maxrss would include the parent's
    peak, which survives fork + exec on Linux).
    """
    code = ("import sys; sys.path.insert(0, sys.argv[3]); from run_benchmarks import "
            "fit_and_write; from fringe.heap import keep_freed_memory; keep_freed_memory(); "
            "fit_and_write(sys.argv[1], sys.argv[2]); "
            "print([l for l in open('/proc/self/status') if l.startswith('VmHWM')][0].split()[1])")
    out = subprocess.run([sys.executable, "-c", code, path, str(work),
                          str(Path(__file__).resolve().parent)], check=True,
                         capture_output=True, text=True)
    return int(out.stdout.strip().splitlines()[-1]) / 1024.0


def simulate_in_subprocess(days: float, path: Path) -> tuple[float, float]:
    """Simulate the benchmark scenario in a fresh process: (seconds, peak resident MiB)."""
    code = ("import sys, time, tomllib; sys.path.insert(0, sys.argv[3]);"
            "from run_benchmarks import SCENARIO;"
            "from fringe.experiment.scenario import scenario_from_dict;"
            " from fringe.simulation.campaign import simulate;"
            "sc = scenario_from_dict(tomllib.loads(SCENARIO.format(days=float(sys.argv[1]))),"
            " 'benchmark'); t0 = time.perf_counter(); simulate(sc, sys.argv[2], seed=1);"
            "print(time.perf_counter() - t0);"
            "print([l for l in open('/proc/self/status') if l.startswith('VmHWM')][0].split()[1])")
    out = subprocess.run([sys.executable, "-c", code, str(days), str(path),
                          str(Path(__file__).resolve().parent)], check=True,
                         capture_output=True, text=True).stdout.split()
    return float(out[-2]), int(out[-1]) / 1024.0


def orientation_share(sc, repeats: int = 5) -> dict:
    """Seconds per chunk of the noise-free signal and of the Earth orientation's part of it.

    The orientation's part is Q (``celestial_to_intermediate``) plus R_z Q minus R_z alone;
    both are the best of ``repeats`` runs on the same chunk of ``CHUNK_SAMPLES`` samples.
    """
    from fringe.experiment.basis import CHUNK_SAMPLES, signal
    from fringe.frames import celestial_to_intermediate, rotation_sccef_to_lab

    setup = sc.setup()
    t = sc.sample_times(0, CHUNK_SAMPLES)
    az = sc.motion.azimuth_rad(t)
    state = setup.frames(t)

    def best(func):
        out = []
        for _ in range(repeats):
            t0 = time.perf_counter()
            func()
            out.append(time.perf_counter() - t0)
        return min(out)

    chi, phi = state.colatitude_rad, state.phi_rad
    sig = best(lambda: signal(setup, sc.coefficients, t, az))
    q = best(lambda: celestial_to_intermediate(setup.epoch, t))
    with_q = best(lambda: rotation_sccef_to_lab(chi, phi, state.c2i))
    without = best(lambda: rotation_sccef_to_lab(chi, phi))
    part = q + max(with_q - without, 0.0)
    return {"chunk_samples": int(t.size), "signal_chunk_s": sig, "orientation_chunk_s": part,
            "orientation_over_signal": part / sig}


def split_by_day(src: Path, outdir: Path, day_s: float = 86400.0) -> list[Path]:
    """One run file per day of ``src`` (same epoch and metadata)."""
    from fringe.io.runreader import open_run
    from fringe.io.runwriter import RunWriter

    outdir.mkdir(parents=True, exist_ok=True)
    with open_run(src) as run:
        meta, data = run.to_dict(), run.read_all()
    t, out = data["time"], []
    for i, lo in enumerate(np.arange(0.0, t[-1] + 1.0, day_s)):
        m = (t >= lo) & (t < lo + day_s)
        path = outdir / f"day{i:03d}.h5"
        if not path.exists():
            with RunWriter(path, site=meta["site"], apparatus=meta["apparatus"],
                           epoch_utc=meta["epoch_utc"], signal_units=meta["signal_units"],
                           azimuth_units=meta["azimuth_units"]) as w:
                w.append(t[m], data["azimuth"][m], data["signal"][m])
        out.append(path)
    return out


def watch_updates(days: float, work: Path) -> dict:
    """Update times of the incremental fit, a day at a time, and its agreement with one fit."""
    import shutil

    from fringe.fit.growing import IncrementalFit
    from fringe.fit.run import fit_run
    from fringe.fit.settings import FitSettings

    whole = work / f"watch_{days:g}d.h5"
    if not whole.exists():
        simulate_in_subprocess(days, whole)
    files = split_by_day(whole, work / f"watch_{days:g}d_days")
    state = work / "watch_state"
    shutil.rmtree(state, ignore_errors=True)
    state.mkdir()
    fit = IncrementalFit(state, FitSettings())
    times = []
    for path in files:
        t0 = time.perf_counter()
        fit.add_piece(str(path))
        got = fit.result("days")
        times.append(time.perf_counter() - t0)
    t0 = time.perf_counter()
    ref, cols = fit_run(str(whole), FitSettings())
    whole_s = time.perf_counter() - t0
    cols.close()
    dev = max(abs(got.coefficients[n].value - e.value) / e.sigma
              for n, e in ref.coefficients.items())
    dsig = max(abs(got.coefficients[n].sigma / e.sigma - 1) for n, e in ref.coefficients.items())
    return {"update_s": times, "update_last_over_second": times[-1] / times[1],
            "update_median_s": float(np.median(times[1:])), "whole_fit_s": whole_s,
            "max_value_difference_sigma": dev, "max_sigma_relative_difference": dsig}


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--days", type=float, default=365.0)
    ap.add_argument("--workdir", default="bench-work")
    ap.add_argument("--skip-memory", action="store_true")
    ap.add_argument("--orientation-only", action="store_true")
    ap.add_argument("--watch-only", action="store_true")
    args = ap.parse_args()
    work = Path(args.workdir)
    work.mkdir(parents=True, exist_ok=True)
    from fringe.heap import keep_freed_memory

    keep_freed_memory()                  # as the fringe command does
    if args.watch_only:
        got = watch_updates(args.days if args.days != 365.0 else 30.0, work)
        (work / "watch_results.json").write_text(json.dumps(got, indent=2))
        print(json.dumps(got, indent=2))
        return
    import tomllib

    from fringe.experiment.scenario import scenario_from_dict

    if args.orientation_only:
        sc = scenario_from_dict(tomllib.loads(SCENARIO.format(days=1.0)), "benchmark")
        print(json.dumps(orientation_share(sc), indent=2))
        return

    results = {"machine": {"python": platform.python_version(), "cpus": os.cpu_count(),
                           "platform": platform.platform()}, "days": args.days}
    fractions = (1.0,) if args.skip_memory else (0.125, 0.25, 0.5, 1.0)
    paths = {}
    for frac in fractions:
        sc = scenario_from_dict(tomllib.loads(SCENARIO.format(days=args.days * frac)),
                                "benchmark")
        path = work / f"run_{frac:g}.h5"
        if not path.exists():
            dt, peak = simulate_in_subprocess(args.days * frac, path)
            results.setdefault("simulate_peak_rss_mib", {})[str(frac)] = peak
            if frac == 1.0:
                results["simulate_samples_per_s"] = sc.n_samples / dt
        paths[frac] = str(path)
        if frac == 1.0:
            from fringe.experiment.prediction import iter_prediction_chunks

            t0 = time.perf_counter()
            n = 0
            for t, _, _ in iter_prediction_chunks(sc):
                n += t.size
                if n >= 2_000_000:
                    break
            results["predict_samples_per_s"] = n / (time.perf_counter() - t0)
            try:
                from fringe.plan.forecast import forecast

                t0 = time.perf_counter()
                forecast(sc)
                results["plan_s"] = time.perf_counter() - t0
            except ImportError:
                pass
    full = paths[1.0]
    cold = fit_seconds(full, work)          # first fit in this process: loads the compiled kernels
    floors, fits = [], []
    for _ in range(3):                # interleaved, best of three (the machine's noise)
        floors.append(floor_seconds(full))
        fits.append(fit_seconds(full, work))
    floor, fit = min(floors), min(fits)
    per_turn = lmfit_loop_seconds_per_turn(full)
    n_turns = args.days * 86400 / 45.0
    results.update({"floor_s": floor, "floor_runs_s": floors, "fit_s": fit, "fit_runs_s": fits,
                    "fit_first_in_process_s": cold, "fit_over_floor": fit / floor,
                    "lmfit_loop_s_extrapolated": per_turn * n_turns,
                    "speedup_vs_lmfit_loop": per_turn * n_turns / fit,
                    "cli_fit_wall_s": cli_fit_seconds(full, work)})
    if not args.skip_memory:
        results["peak_rss_mib"] = {str(f): peak_rss_of_fit(p, work) for f, p in paths.items()}
    results["earth_orientation"] = orientation_share(
        scenario_from_dict(tomllib.loads(SCENARIO.format(days=1.0)), "benchmark"))
    results["benchmark_process_peak_rss_mib"] = (
        resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024)
    (work / "results.json").write_text(json.dumps(results, indent=2))
    print(json.dumps(results, indent=2))


if __name__ == "__main__":
    main()
