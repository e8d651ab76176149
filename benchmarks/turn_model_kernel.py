"""Wall time of the per-turn measured model (``_measured_model``) of two versions of the code.

On demand (never run in CI; no pass/fail). From the repository root, in the project's
environment::

    python benchmarks/turn_model_kernel.py --workdir BENCH_DIR --baseline REV [--rounds 7]

The 2-day record of ``short_record.py`` (simulated once into BENCH_DIR) is fitted once and
every call of ``fringe.fit.turn_model._measured_model`` in that fit is recorded (the grid, the
turns, their leak responses, the stage-1 settings; into BENCH_DIR). The calls are then
replayed by the working tree and by the tree of git revision REV (exported with
``git archive`` into BENCH_DIR), each in its own process, the two alternating ``--rounds``
times; each process prints the best, over ``--calls`` replays, of the time of all the calls of
one fit. Printed: each version's best over the rounds (ms) and the ratio of the working tree's
to the baseline's (and of the medians), measured in the same run.
"""

from __future__ import annotations

import argparse
import json
import os
import pickle
import statistics
import subprocess
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))

from short_record import record  # noqa: E402  (the benchmark module beside this one)

ROOT = Path(__file__).resolve().parent.parent


def capture(path: str, work: Path) -> Path:
    """Record the calls of ``_measured_model`` in one fit of ``path``; return the file."""
    from importlib import import_module

    from fringe.fit.run import fit_run
    from fringe.fit.settings import FitSettings

    tm = import_module("fringe.fit.turn_model")
    calls = []
    inner = tm._measured_model

    def recording(grid, t, half, leak, settings, with_a=True, out=None):
        calls.append({"start_s": grid.start_s, "step_s": grid.step_s,
                      "stacked": grid.stacked.copy(), "t": t.copy(), "half": half.copy(),
                      "leak": leak.copy(), "settings": settings, "with_a": with_a,
                      "out": out is not None})
        return inner(grid, t, half, leak, settings, with_a=with_a, out=out)

    tm._measured_model = recording
    try:
        result, columns = fit_run(path, FitSettings(), scratch_dir=str(work))
        columns.close()
    finally:
        tm._measured_model = inner
    target = work / "measured_model_calls.pkl"
    with open(target, "wb") as f:
        pickle.dump(calls, f)
    return target


def replay(calls_file: str, calls: int) -> float:
    """Best time (s) of all the recorded calls, over ``calls`` replays (after one warm-up)."""
    from importlib import import_module

    import numpy as np

    tm = import_module("fringe.fit.turn_model")   # the module (fringe.fit exports a function)
    with open(calls_file, "rb") as f:
        recorded = pickle.load(f)
    prepared = []
    for c in recorded:
        m = c["stacked"].shape[0] // 3
        s = c["stacked"]
        grid = tm._ModelGrid(c["start_s"], c["step_s"], (s[:m], s[m:2 * m], s[2 * m:]), s)
        n, k = c["t"].size, s.shape[1]
        out = (np.empty((n, k)), np.empty((n, k))) if c["out"] else None
        prepared.append((grid, c, out))

    def once():
        for grid, c, out in prepared:
            tm._measured_model(grid, c["t"], c["half"], c["leak"], c["settings"],
                               with_a=c["with_a"], out=out)

    once()
    best = float("inf")
    for _ in range(calls):
        t0 = time.perf_counter()
        once()
        best = min(best, time.perf_counter() - t0)
    return best


def baseline_tree(rev: str, work: Path) -> Path:
    """The tree of git revision ``rev``, exported into ``work`` (once per commit)."""
    commit = subprocess.run(["git", "rev-parse", rev], cwd=ROOT, check=True,
                            capture_output=True, text=True).stdout.strip()
    tree = work / f"tree-{commit[:12]}"
    if not tree.exists():
        tree.mkdir(parents=True)
        archive = subprocess.run(["git", "archive", commit], cwd=ROOT, check=True,
                                 capture_output=True).stdout
        subprocess.run(["tar", "-x", "-C", str(tree)], input=archive, check=True)
    return tree


def _run_replay(tree: Path, calls_file: Path, calls: int) -> float:
    env = {**os.environ, "PYTHONPATH": str(tree)}
    out = subprocess.run([sys.executable, str(Path(__file__).resolve()), "replay",
                          str(calls_file), "--calls", str(calls)],
                         env=env, check=True, capture_output=True, text=True).stdout
    return float(out.split()[-1])


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    sub = ap.add_subparsers(dest="mode")
    p = sub.add_parser("replay")                     # one process's timing (used by the run)
    p.add_argument("calls_file")
    p.add_argument("--calls", type=int, default=50)
    ap.add_argument("--workdir", default="bench-work")
    ap.add_argument("--baseline", default="main")
    ap.add_argument("--rounds", type=int, default=7)
    ap.add_argument("--calls", type=int, default=50)
    args = ap.parse_args()
    if args.mode == "replay":
        print(replay(args.calls_file, args.calls))
        return 0
    work = Path(args.workdir)
    work.mkdir(parents=True, exist_ok=True)
    calls_file = capture(record(work, 2.0), work)
    trees = {"baseline": baseline_tree(args.baseline, work), "this tree": ROOT}
    times = {name: [] for name in trees}
    for _ in range(args.rounds):
        for name, tree in trees.items():
            times[name].append(_run_replay(tree, calls_file, args.calls))
    with open(calls_file, "rb") as f:
        n_calls = len(pickle.load(f))
    best = {name: min(v) for name, v in times.items()}
    median = {name: statistics.median(v) for name, v in times.items()}
    print(json.dumps({
        "calls_per_fit": n_calls,
        "baseline": args.baseline,
        "best_ms": {name: round(1e3 * v, 3) for name, v in best.items()},
        "median_ms": {name: round(1e3 * v, 3) for name, v in median.items()},
        "ratio_best": round(best["this tree"] / best["baseline"], 3),
        "ratio_median": round(median["this tree"] / median["baseline"], 3),
    }, indent=2))
    return 0


if __name__ == "__main__":
    sys.exit(main())
