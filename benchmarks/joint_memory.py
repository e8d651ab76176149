"""On-demand benchmark: peak memory and time of a joint fit against the number of runs.

Usage (from the repository root, in the project's environment)::

    python benchmarks/joint_memory.py --workdir BENCH_DIR [--runs 1,2,4,8,16] [--days 0.5]

Simulates the largest number of runs of the invented cavity-pair scenario (the sites alternate
between two invented latitudes), then fits the first N jointly (:func:`fringe.fit.joint.fit_joint`)
in a fresh subprocess for each N and reads the child's own peak resident memory (VmHWM of
/proc/self/status). Reported as ratios against the joint fit of one run measured in the same
run (no pass/fail): peak memory should stay flat, time grow linearly.
"""

from __future__ import annotations

import argparse
import copy
import json
import subprocess
import sys
import time
from pathlib import Path

DOC = {
    "title": "joint memory benchmark (invented)",
    "site": {"name": "Kestrel Fen optics cellar (invented)", "latitude_deg": 47.62,
             "longitude_deg": 11.38, "height_m": 610.0},
    "campaign": {"start_utc": "2027-02-03T00:00:00Z", "duration_days": 0.5,
                 "sample_interval_s": 1.0},
    "apparatus": {"kind": "cavity-pair", "carrier_hz": 2.82e14, "path_separation_deg": 90.0,
                  "units": "Hz"},
    "turntable": {"motion": "continuous", "period_s": 45.0, "sense": "ccw",
                  "start_azimuth_deg": 0.0},
    "theory": {"name": "sme"},
    "noise": {"white_fm_adev_1s": 2e-15},
}
SOUTH = {"name": "Sandveld hut (invented)", "latitude_deg": -31.5, "longitude_deg": 19.2,
         "height_m": 300.0}

CHILD = ("import sys, time, warnings; warnings.simplefilter('ignore'); "
         "from fringe.fit.joint import fit_joint; from fringe.fit.settings import FitSettings; "
         "paths = sys.argv[1:]; t = time.perf_counter(); "
         "fit_joint(paths, FitSettings()); dt = time.perf_counter() - t; "
         "hwm = [l for l in open('/proc/self/status') if l.startswith('VmHWM')][0].split()[1]; "
         "print(dt, int(hwm) / 1024.0)")


def main() -> int:
    """Simulate, measure, print a Markdown table and write results.json."""
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--workdir", default="bench-joint")
    ap.add_argument("--runs", default="1,2,4,8,16")
    ap.add_argument("--days", type=float, default=0.5)
    args = ap.parse_args()
    from fringe.study.campaign import simulate_run

    counts = [int(x) for x in args.runs.split(",")]
    work = Path(args.workdir)
    work.mkdir(parents=True, exist_ok=True)
    paths = []
    for i in range(max(counts)):
        doc = copy.deepcopy(DOC)
        doc["campaign"]["duration_days"] = args.days
        doc["campaign"]["start_utc"] = f"2027-02-{3 + i:02d}T00:00:00Z"
        if i % 2:
            doc["site"] = dict(SOUTH)
        p = work / f"run{i:02d}.h5"
        if not p.exists():
            simulate_run(doc, "benchmark", str(p), 1000 + i)
        paths.append(str(p))
    rows = {}
    for n in counts:
        out = subprocess.run([sys.executable, "-c", CHILD, *paths[:n]], check=True,
                             capture_output=True, text=True)
        dt, peak = (float(x) for x in out.stdout.split()[-2:])
        rows[n] = {"fit_s": dt, "peak_rss_mib": peak}
    base = rows[counts[0]]
    print("| runs | joint fit (s) | time / time of 1 run | peak RSS (MiB) | peak / peak of 1 run |")
    print("|---|---|---|---|---|")
    for n, r in rows.items():
        print(f"| {n} | {r['fit_s']:.2f} | {r['fit_s'] / base['fit_s']:.2f} | "
              f"{r['peak_rss_mib']:.0f} | {r['peak_rss_mib'] / base['peak_rss_mib']:.3f} |")
    (work / "results.json").write_text(json.dumps({"days": args.days, "rows": rows,
                                                   "utc": time.strftime("%Y-%m-%dT%H:%M:%SZ",
                                                                        time.gmtime())},
                                                  indent=2), "utf-8")
    return 0


if __name__ == "__main__":
    sys.exit(main())
