"""The fit of a short record against its floor, its profile, and before/after comparisons.

On demand (never run in CI; no pass/fail). From the repository root, in the project's
environment::

    python benchmarks/short_record.py ratio --workdir BENCH_DIR [--repeats 15] [--default-heap]
    python benchmarks/short_record.py profile --workdir BENCH_DIR [--fits 10]
    python benchmarks/short_record.py dump --workdir BENCH_DIR --out DUMP_DIR
    python benchmarks/short_record.py compare DUMP_A DUMP_B

``ratio``: the 2-day record of the benchmark scenario (``run_benchmarks.SCENARIO``, 1 Hz,
simulated once into BENCH_DIR); the floor (one read of time, azimuth and signal and one sin/cos
pass, ``run_benchmarks.floor_seconds``) and the fit (``fit_run`` and the per-turn amplitudes
file, ``run_benchmarks.fit_seconds``) twice: cold (the setup caches of
``fringe.experiment.memo`` cleared first, as a lone ``fringe fit``) and warm (after a fit of
the same setup, as a study's later campaigns), and a study's campaign fit (``fit_record``:
warm, no amplitudes file); interleaved, best of ``--repeats`` each; prints
the ratio of each fit's best to the floor's best and of the medians, and whether the warm
fit's result equals the cold one's bit for bit; also the floor read without HDF5's chunk
cache (as the fit reads), for comparison only. The process keeps freed memory mapped
(:func:`fringe.heap.keep_freed_memory`), as the ``fringe`` command and a study's workers do;
``--default-heap`` measures with glibc's default allocator settings instead.

``profile``: cProfile of ``--fits`` fits of that record (after one warm-up fit), the functions
with the largest cumulative time; ``--cold`` clears the setup caches before each fit.

``dump``: the fit result (JSON) and the per-turn columns (``.npz``) of the 2-, 6- and 30-day
records. ``compare``: two dumps field by field; prints the largest relative difference of each
part (coefficients, covariance, nuisances, harmonics, statistics, warnings, ...; a per-turn
column's largest difference relative to the column's largest value, its element-wise ratio
beside it) and exits 1 if any exceeds ``--rtol`` (default 1e-12).
"""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))

from run_benchmarks import (  # noqa: E402  (the benchmark module beside this one)
    fit_seconds,
    floor_seconds,
    simulate_in_subprocess,
)

#: Records of the comparison (days of the benchmark scenario).
DUMP_DAYS = (2.0, 6.0, 30.0)

#: Parts of the fit result that do not depend on the numbers (or change with every run).
NOT_COMPARED = ("created_utc", "software")


def record(work: Path, days: float) -> str:
    """The benchmark scenario's record of ``days`` days in ``work`` (simulated once, seed 1)."""
    path = work / f"short_{days:g}d.h5"
    if not path.exists():
        simulate_in_subprocess(days, path)
    return str(path)


def floor_uncached_seconds(path: str) -> float:
    """The floor read without HDF5's chunk cache, as the fit now reads.

    Reported beside the floor of ``run_benchmarks.floor_seconds`` (h5py's default cache, the
    floor of the issue), not in its place.
    """
    return floor_seconds(path, chunk_cache=False)


def cold_fit_seconds(path: str, work: Path) -> float:
    """A fit as the first of a process: the setup caches cleared before it (not timed)."""
    from fringe.experiment.memo import clear_setup_caches

    clear_setup_caches()
    return fit_seconds(path, work)


def ratio(work: Path, repeats: int) -> dict:
    """Floor, cold fit and warm fit of the 2-day record, interleaved; best and median of each.

    The cold fit starts with the setup caches (:mod:`fringe.experiment.memo`) cleared, as a
    single ``fringe fit`` in a fresh process (the compiled kernels stay loaded); the warm fit
    follows a fit of the same record, as a study's campaigns after its first. The campaign
    fit is what ``fringe study`` does with each simulated campaign
    (:func:`fringe.study.campaign.fit_record`: the fit, warm, without the per-turn amplitudes
    file, which a study does not write).
    """
    path = record(work, 2.0)
    fit_seconds(path, work)                       # loads the compiled kernels
    floors, colds, warms, campaigns, uncached = [], [], [], [], []
    for _ in range(repeats):
        floors.append(floor_seconds(path))
        colds.append(cold_fit_seconds(path, work))
        warms.append(fit_seconds(path, work))
        campaigns.append(campaign_fit_seconds(path))
        uncached.append(floor_uncached_seconds(path))
    floor, cold, warm = min(floors), min(colds), min(warms)
    same = warm_equals_cold(path, work)
    med = float(np.median(floors))
    return {"floor_best_ms": 1e3 * floor,
            "cold_fit_best_ms": 1e3 * cold, "cold_fit_over_floor_best": cold / floor,
            "warm_fit_best_ms": 1e3 * warm, "warm_fit_over_floor_best": warm / floor,
            "floor_without_chunk_cache_best_ms": 1e3 * min(uncached),
            "floor_median_ms": 1e3 * med,
            "cold_fit_median_ms": 1e3 * float(np.median(colds)),
            "cold_fit_over_floor_median": float(np.median(colds)) / med,
            "warm_fit_median_ms": 1e3 * float(np.median(warms)),
            "warm_fit_over_floor_median": float(np.median(warms)) / med,
            "campaign_fit_best_ms": 1e3 * min(campaigns),
            "campaign_fit_over_floor_best": min(campaigns) / floor,
            "campaign_fit_over_floor_median": float(np.median(campaigns)) / med,
            "warm_result_equals_cold": same, "repeats": repeats}


def campaign_fit_seconds(path: str) -> float:
    """One campaign's fit as ``fringe study`` does it (``fit_record``), s."""
    import time

    from fringe.fit.settings import FitSettings
    from fringe.study.campaign import fit_record

    t0 = time.perf_counter()
    fit_record(path, FitSettings())
    return time.perf_counter() - t0


def warm_equals_cold(path: str, work: Path) -> bool:
    """True when a warm fit's result and per-turn columns equal a cold fit's, bit for bit."""
    from fringe.experiment.memo import clear_setup_caches
    from fringe.fit.run import fit_run
    from fringe.fit.settings import FitSettings

    out = []
    for cold in (True, False):
        if cold:
            clear_setup_caches()
        result, columns = fit_run(path, FitSettings(), scratch_dir=str(work))
        with columns:
            cols = {k: np.asarray(v).copy() for k, v in columns.to_dict().items()}
        d = {k: v for k, v in result.to_dict().items() if k not in NOT_COMPARED}
        out.append((json.dumps(d, sort_keys=True), cols))
    (a, ca), (b, cb) = out
    return a == b and ca.keys() == cb.keys() and all(
        np.array_equal(ca[k], cb[k], equal_nan=ca[k].dtype.kind == "f") for k in ca)


def profile(work: Path, fits: int, top: int, sort: str, cold: bool = False) -> None:
    """cProfile of ``fits`` fits of the 2-day record (one warm-up fit first).

    ``cold``: the setup caches are cleared before each fit (inside the profile: clearing is
    cheap).
    """
    import cProfile
    import pstats

    from run_benchmarks import fit_and_write

    from fringe.experiment.memo import clear_setup_caches

    path = record(work, 2.0)
    fit_and_write(path, work)
    prof = cProfile.Profile()
    prof.enable()
    for _ in range(fits):
        if cold:
            clear_setup_caches()
        fit_and_write(path, work)
    prof.disable()
    pstats.Stats(prof).sort_stats(sort).print_stats(top)


def dump(work: Path, out: Path) -> None:
    """Fit result and per-turn columns of each record of DUMP_DAYS into ``out``."""
    from fringe.fit.run import fit_run
    from fringe.fit.settings import FitSettings

    out.mkdir(parents=True, exist_ok=True)
    for days in DUMP_DAYS:
        path = record(work, days)
        result, columns = fit_run(path, FitSettings(), scratch_dir=str(work))
        with columns:
            d = result.to_dict()
            cols = {k: np.asarray(v) for k, v in columns.to_dict().items()}
        (out / f"{days:g}d.json").write_text(json.dumps(d, indent=1, sort_keys=True))
        np.savez(out / f"{days:g}d_turns.npz", **cols)
        print(f"{days:g} d: {out / f'{days:g}d.json'}")


def _walk(a, b, where: str, worst: dict, part: str) -> None:
    """Largest relative difference of two JSON trees into ``worst[part]`` (inf if unlike)."""
    if isinstance(a, dict) and isinstance(b, dict):
        if set(a) != set(b):
            worst[part] = (np.inf, f"{where}: keys {sorted(set(a) ^ set(b))}")
            return
        for k in a:
            _walk(a[k], b[k], f"{where}.{k}", worst, part)
        return
    if isinstance(a, list) and isinstance(b, list):
        if len(a) != len(b):
            worst[part] = (np.inf, f"{where}: lengths {len(a)} vs {len(b)}")
            return
        for i, (x, y) in enumerate(zip(a, b)):
            _walk(x, y, f"{where}[{i}]", worst, part)
        return
    if isinstance(a, bool) or isinstance(b, bool) or not (
            isinstance(a, (int, float)) and isinstance(b, (int, float))):
        diff = 0.0 if a == b else np.inf
    elif a == b:
        diff = 0.0
    else:
        diff = abs(a - b) / max(abs(a), abs(b))
    if diff > worst.get(part, (-1.0, ""))[0]:
        worst[part] = (diff, where)


def compare(a: Path, b: Path, rtol: float) -> int:
    """Field-by-field comparison of two dumps; 0 if every part agrees within ``rtol``."""
    bad = 0
    for days in DUMP_DAYS:
        da = json.loads((a / f"{days:g}d.json").read_text())
        db = json.loads((b / f"{days:g}d.json").read_text())
        worst: dict = {}
        for part in sorted(set(da) | set(db)):
            if part in NOT_COMPARED:
                continue
            _walk(da.get(part), db.get(part), part, worst, part)
        ta, tb = np.load(a / f"{days:g}d_turns.npz"), np.load(b / f"{days:g}d_turns.npz")
        for name in sorted(set(ta.files) | set(tb.files)):
            if name not in ta.files or name not in tb.files or ta[name].shape != tb[name].shape:
                worst[f"turns.{name}"] = (np.inf, "missing or shape")
                continue
            x, y = ta[name].astype(float), tb[name].astype(float)
            same = (x == y) | (np.isnan(x) & np.isnan(y))
            if np.array_equal(np.isnan(x), np.isnan(y)):
                # against the column's scale (an element near zero, such as a residual, would
                # make an element-wise ratio large for a difference of the last bits); the
                # element-wise ratio is printed beside it
                finite = np.isfinite(x) & np.isfinite(y)
                column = float(np.max(np.abs(x[finite]), initial=0.0))
                diff = np.where(same, 0.0, np.abs(x - y))
                scale = np.maximum(np.abs(x), np.abs(y))
                element = float(np.max(np.where(same, 0.0, diff / np.where(scale > 0, scale, 1.0)),
                                       initial=0.0))
                of_column = float(np.max(diff, initial=0.0)) / column if column > 0 else (
                    0.0 if np.all(same) else np.inf)
                worst[f"turns.{name}"] = (of_column, f"{name}; element-wise {element:.3g}")
            else:
                worst[f"turns.{name}"] = (np.inf, f"{name}: missing values differ")
        print(f"{days:g} d:")
        for part, (diff, where) in sorted(worst.items()):
            flag = "" if diff <= rtol else "   <-- exceeds"
            print(f"  {part:28s} {diff:.3g}  ({where}){flag}")
            bad += diff > rtol
    return 1 if bad else 0


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    sub = ap.add_subparsers(dest="mode", required=True)
    p = sub.add_parser("ratio")
    p.add_argument("--workdir", default="bench-work")
    p.add_argument("--repeats", type=int, default=15)
    p.add_argument("--default-heap", action="store_true")
    p = sub.add_parser("profile")
    p.add_argument("--workdir", default="bench-work")
    p.add_argument("--fits", type=int, default=10)
    p.add_argument("--top", type=int, default=60)
    p.add_argument("--sort", default="cumulative")
    p.add_argument("--cold", action="store_true")
    p = sub.add_parser("dump")
    p.add_argument("--workdir", default="bench-work")
    p.add_argument("--out", required=True)
    p = sub.add_parser("compare")
    p.add_argument("a")
    p.add_argument("b")
    p.add_argument("--rtol", type=float, default=1e-12)
    args = ap.parse_args()
    if args.mode == "compare":
        return compare(Path(args.a), Path(args.b), args.rtol)
    work = Path(args.workdir)
    work.mkdir(parents=True, exist_ok=True)
    if args.mode == "ratio":
        from fringe.heap import keep_freed_memory

        kept = False if args.default_heap else keep_freed_memory()
        print(json.dumps({**ratio(work, args.repeats), "freed_memory_kept": kept}, indent=2))
    elif args.mode == "profile":
        profile(work, args.fits, args.top, args.sort, args.cold)
    else:
        dump(work, Path(args.out))
    return 0


if __name__ == "__main__":
    sys.exit(main())
